"""The parameter form of the highlighted stage, built from the kind table.

Fields come from `filters.kinds.KINDS[kind].keys`: numbers and integers are
Inputs with textual validators, choice keys (method, band, norm, start) are
Selects. While typing, the form designs the candidate stage and shows its
derived values (RC time constant or cutoff, -3 dB point, lag) and design
warnings; a refusal is shown beside the field it names. Enter (or a new
choice in a Select) posts `ParamForm.Apply`; the app decides whether the
whole chain accepts it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.message import Message
from textual.validation import Integer, Number
from textual.widgets import Input, Label, Select, Static

from filters.kinds import BANDS, BESSEL_NORMS, KINDS
from filters.spec import METHODS, START_POLICIES, StageSpec

CHOICES: dict[str, tuple[str, ...]] = {
    "method": METHODS, "band": BANDS, "norm": BESSEL_NORMS, "start": START_POLICIES,
}


def field_keys(kind: str) -> list[str]:
    """Keys the form shows for `kind`, in table order, `start` last."""
    return [*KINDS[kind].keys, "start"]


def parse_field(key: str, text: str) -> Any:
    """Field text -> parameter value (None for empty). ValueError naming the key if garbage."""
    text = text.strip()
    if not text:
        return None
    accepted = KINDS_TYPES.get(key)
    if accepted is int:
        try:
            return int(text)
        except ValueError:
            raise ValueError(f"{key} must be a whole number, not {text!r}") from None
    try:
        value = float(text)
    except ValueError:
        raise ValueError(f"{key} must be a number, not {text!r}") from None
    if not math.isfinite(value):
        raise ValueError(f"{key} must be a finite number, not {text!r}")
    return value


KINDS_TYPES: dict[str, Any] = {
    key: (int if accepted is int else float)
    for info in KINDS.values() for key, accepted in info.keys.items() if key not in CHOICES
}


def format_value(value: Any) -> str:
    """A parameter as the field shows it (repr-exact for floats so nothing is rounded away)."""
    if value is None:
        return ""
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value)) if abs(value) >= 1 else repr(value)
    return repr(value) if isinstance(value, float) else str(value)


def field_for_message(kind: str, message: str) -> str | None:
    """The form key a refusal names (longest match first, so `low_hz` beats `hz`)."""
    for key in sorted(field_keys(kind), key=len, reverse=True):
        if key in message:
            return key
    return None


@dataclass(frozen=True)
class FormTarget:
    """What the form edits: file `index` of `stage`, designed at `rate_hz`.

    position: the stage's place on `channel` (1 = runs first), the number the user sees.
    """

    index: int
    stage: StageSpec
    rate_hz: float
    sharers: tuple[str, ...]
    analysis_hz: float
    channel: str = ""
    position: int = 0

    @property
    def title(self) -> str:
        where = f" of {self.channel}" if self.channel else ""
        return f"stage {self.position or self.index + 1}{where}: {self.stage.kind}"


FOCUS_MARK = "\u25b6 "          # in front of the focused field's name (and panel titles)


class FieldRow(Horizontal):
    """Label, input (or select) and the message area of one key."""

    DEFAULT_CSS = """
    FieldRow { height: auto; }
    FieldRow > Label { width: 16; padding: 0 1 0 0; }
    FieldRow > Input, FieldRow > Select { width: 20; }
    FieldRow > .field-error { width: 1fr; color: #ff8080; padding: 0 0 0 1; }
    FieldRow:focus-within > Label { color: #ffb347; text-style: bold; }
    FieldRow:focus-within > Input { background: #2e3d52; }
    """

    def __init__(self, key: str, *children: Any) -> None:
        super().__init__(Label(f"  {key}"), *children)
        self.key = key

    def on_descendant_focus(self) -> None:
        self.children[0].update(f"{FOCUS_MARK}{self.key}")

    def on_descendant_blur(self) -> None:
        self.children[0].update(f"  {self.key}")


class ParamForm(VerticalScroll, can_focus=False):
    """Fields of one stage; `show(target)` rebuilds them, `Apply` carries accepted edits.

    Not a Tab stop itself: Tab goes from the stage list straight to the fields.
    """

    DEFAULT_CSS = """
    ParamForm { height: 1fr; border: round #3a4a5c; }
    ParamForm.has-focus { border: heavy #ffb347; }
    ParamForm #form-head { color: #8a96a3; }
    ParamForm #form-fields { height: auto; }
    ParamForm #form-derived { color: #a8d8a8; margin-top: 1; }
    ParamForm #form-warnings { color: #e0c060; }
    ParamForm #form-error { color: #ff8080; }
    """

    class Apply(Message):
        """The user asked to apply `stage` (new params/start) at file `index`."""

        def __init__(self, index: int, stage: StageSpec) -> None:
            super().__init__()
            self.index = index
            self.stage = stage

    class Notice(Message):
        """A sentence for the status line: why Enter applied nothing."""

        def __init__(self, text: str) -> None:
            super().__init__()
            self.text = text

    def __init__(self, *, id: str | None = None) -> None:
        super().__init__(id=id)
        self.target: FormTarget | None = None
        self._fields: dict[str, Input | Select] = {}
        self.border_title = "stage"

    def compose(self) -> ComposeResult:
        yield Static("no stage", id="form-head")
        yield Vertical(id="form-fields")
        yield Static("", id="form-error")
        yield Static("", id="form-derived")
        yield Static("", id="form-warnings")

    async def show(self, target: FormTarget | None) -> None:
        """Rebuild the fields for `target` (None: no stage highlighted)."""
        if (target is not None and self.target is not None and self._fields
                and target.index == self.target.index and target.stage == self.target.stage):
            self.accepted(target)       # same stage (rate or lag frequency moved): keep the text
            self.preview()
            return
        self.target = None              # no previews while the fields are rebuilt
        self._fields = {}
        fields = self.query_one("#form-fields", Vertical)
        await fields.remove_children()
        self._message("")
        if target is None:
            self.query_one("#form-head", Static).update(
                "no stage on this channel: press a to add one")
            self.query_one("#form-derived", Static).update("")
            self.query_one("#form-warnings", Static).update("")
            return
        stage = target.stage
        self.border_title = target.title
        self.query_one("#form-head", Static).update(self._head(target))
        rows = [self._row(stage, key) for key in field_keys(stage.kind)]
        await fields.mount_all(rows)
        self._fields = {key: row.children[1] for key, row in zip(field_keys(stage.kind), rows,
                                                                  strict=True)}
        self.target = target
        self.preview()

    def _head(self, target: FormTarget) -> str:
        info = KINDS[target.stage.kind]
        alternatives = " | ".join(" + ".join(group) for group in info.alternatives)
        shared = (f"\nshared with {', '.join(target.sharers)}" if target.sharers else "")
        bypass = "  (bypassed)" if target.stage.bypass else ""
        need = f"\ngive: {alternatives}" if alternatives else ""
        return f"{info.summary}{bypass}{need}{shared}\nenter applies"

    def _row(self, stage: StageSpec, key: str) -> FieldRow:
        if key == "start":
            current = stage.start
        else:
            current = stage.params.get(key, KINDS[stage.kind].defaults.get(key))
        if key in CHOICES:
            widget = Select([(c, c) for c in CHOICES[key]], value=current or CHOICES[key][0],
                            allow_blank=False, id=f"field-{key}", compact=True)
        else:
            kind = KINDS_TYPES[key]
            validator = (Integer(failure_description=f"{key} must be a whole number")
                         if kind is int else
                         Number(failure_description=f"{key} must be a number"))
            widget = Input(value=format_value(current), validators=[validator], valid_empty=True,
                           id=f"field-{key}", compact=True, placeholder="-",
                           validate_on=["changed", "submitted"])
        return FieldRow(key, widget, Static("", classes="field-error", id=f"error-{key}"))

    def _message(self, text: str, key: str | None = None) -> None:
        for error in self.query(".field-error"):
            error.update("")
        general = self.query_one("#form-error", Static)
        general.update("")
        if key is not None and self.query(f"#error-{key}"):
            self.query_one(f"#error-{key}", Static).update(text)
        else:
            general.update(text)

    def candidate(self) -> StageSpec:
        """The stage as the fields say now. ValueError names the key of a bad field."""
        target = self.target
        assert target is not None
        stage = target.stage
        defaults = KINDS[stage.kind].defaults
        params: dict[str, Any] = {}
        start = stage.start
        for key, widget in self._fields.items():
            if isinstance(widget, Select):
                value = widget.value
                if value is Select.NULL:
                    continue
                if key == "start":
                    start = str(value)
                elif key in stage.params or value != defaults.get(key):
                    params[key] = value
            else:
                value = parse_field(key, widget.value)
                if value is not None:
                    params[key] = value
        return replace(stage, params=params, start=start)

    def preview(self) -> StageSpec | None:
        """Design the candidate and show derived values or the refusal; the stage if it designs."""
        if self.target is None:
            return None
        from filters.design import design_stage

        try:
            stage = self.candidate()
            design = design_stage(stage, self.target.rate_hz)
        except ValueError as exc:
            self._message(str(exc), field_for_message(self.target.stage.kind, str(exc)))
            self.query_one("#form-derived", Static).update("")
            return None
        self._message("")
        self.query_one("#form-derived", Static).update(
            derived_text(design, self.target.analysis_hz))
        warnings = "\n".join(f"! {w}" for w in design.warnings)
        self.query_one("#form-warnings", Static).update(warnings)
        return stage

    def refuse(self, message: str) -> None:
        """Show a refusal from the whole chain beside its field (or under the fields)."""
        if self.target is not None:
            self._message(message, field_for_message(self.target.stage.kind, message))

    def on_input_changed(self, event: Input.Changed) -> None:
        event.stop()
        result = event.validation_result
        if result is not None and not result.is_valid:
            key = (event.input.id or "").removeprefix("field-")
            self._message(" ".join(result.failure_descriptions), key)
            return
        self.preview()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.submit()

    # -- what the key path asks of the form ---------------------------------------------------

    def first_field(self) -> Input | Select | None:
        """The first parameter field, or None while no stage is shown."""
        return next(iter(self._fields.values()), None)

    def is_text_field(self, widget: Any) -> bool:
        return isinstance(widget, Input) and widget in self._fields.values()

    def is_choice(self, widget: Any) -> bool:
        return isinstance(widget, Select) and widget in self._fields.values()

    def field_name(self, widget: Any) -> str:
        """The key of the field `widget` is (or is inside), '' if none."""
        for key, field in self._fields.items():
            if widget is field or field in getattr(widget, "ancestors", ()):
                return key
        return ""

    def on_select_changed(self, event: Select.Changed) -> None:
        event.stop()
        if self.target is None:
            return
        key = (event.select.id or "").removeprefix("field-")
        stage = self.target.stage
        shown = (stage.start if key == "start"
                 else stage.params.get(key, KINDS[stage.kind].defaults.get(key)))
        if event.value == shown:
            return      # a field announcing the value it was built with, not a user's choice
        self.submit()

    def submit(self) -> None:
        """Take the fields as they are now, check the stage designs and post Apply.

        Called by Enter in typing order, so keys typed after the Enter (into the
        next field) are not part of this apply. The derived values follow afterwards.
        """
        if self.target is None:
            return
        from filters.design import design_stage

        try:
            stage = self.candidate()
            design_stage(stage, self.target.rate_hz)
        except ValueError as exc:
            self.preview()              # shows the refusal beside its field
            self.app.post_message(self.Notice(f"refused: {exc}; the running chain goes on"))
            return
        if stage != self.target.stage:   # straight to the app: no hop per container
            self.app.post_message(self.Apply(self.target.index, stage))
        else:
            self.app.post_message(self.Notice(
                f"nothing to apply: the fields hold what {self.target.title} runs"))
        self.call_after_refresh(self.preview)

    def accepted(self, target: FormTarget | None) -> None:
        """The app applied the form's stage: `target` is the new reference, fields stay."""
        if target is None or self.target is None or target.stage.kind != self.target.stage.kind \
                or target.index != self.target.index:
            return
        self.target = target
        self.border_title = target.title
        self.query_one("#form-head", Static).update(self._head(target))


def derived_text(design: Any, analysis_hz: float) -> str:
    """Derived values, -3 dB point and lag of one stage design, one per line."""
    from filters import analysis

    lines = [f"{key} = {value:.5g}" for key, value in design.derived.items()
             if isinstance(value, int | float)]
    try:
        corner = analysis.minus3db_hz(design)
    except ValueError:
        corner = None
    if corner is not None:
        lines.append(f"-3 dB at {corner:.4g} Hz")
    try:
        lag = 1000.0 * float(analysis.group_delay_s(design, analysis_hz))
        lines.append(f"lag at {analysis_hz:.4g} Hz = {lag:.3g} ms")
    except ValueError:
        pass
    return "\n".join(lines)
