"""Chain actions of the app: add, remove, move, bypass, method, scope, copy, reset.

A mixin for TunetraceApp so app.py stays about layout and refresh. Every
action computes a new ChainSpec with monitor.tui.chain_edit and hands it to
`apply_spec`, which builds the ChainSet (refusal -> a message, nothing
changes) and submits it.
"""

from __future__ import annotations

from typing import Any

from filters.kinds import KINDS
from filters.spec import METHODS
from monitor.tui import chain_edit
from monitor.tui.chain_editor import StageList
from monitor.tui.dialogs import PickChannels, PickKind
from monitor.tui.param_form import ParamForm


def _changes(old: Any, new: Any) -> str:
    """'cutoff_hz=4.5, start=zero': the parameters `new` sets differently from `old`."""
    keys = sorted(set(old.params) | set(new.params))
    changed = [f"{k}={new.params.get(k, 'default')}" for k in keys
               if old.params.get(k) != new.params.get(k)]
    if old.start != new.start:
        changed.append(f"start={new.start}")
    return ", ".join(changed) or "the same values"


class ChainActions:
    """Mixed into TunetraceApp; uses its `session`, `ui`, `channel`, `say` and `apply_spec`."""

    session: Any
    ui: Any

    def _stage_index(self) -> int | None:
        index = self.query_one("#stages", StageList).selected_index
        if index is None:
            self.say(f"channel {self.channel} has no stage; press a to add one")
        return index

    def _edit_ready(self) -> bool:
        if not self.session.ready:
            self.say("the chain is not running yet; wait for the first frames")
            return False
        return True

    def _place(self, spec: Any, index: int) -> int:
        """Place (1 = first) of file stage `index` on this channel in `spec`."""
        return next((n for n, (i, _) in enumerate(spec.stages_for(self.channel), start=1)
                     if i == index), 0)

    def _named(self, index: int) -> str:
        """'stage 2 (notch) of load': the numbers the stage list shows."""
        kind = self.session.spec.stages[index].kind
        return f"stage {self._place(self.session.spec, index)} ({kind}) of {self.channel}"

    # -- actions ------------------------------------------------------------------------------

    def action_undo_edit(self) -> None:
        self._history_step("undo")

    def action_redo_edit(self) -> None:
        self._history_step("redo")

    def _history_step(self, word: str) -> None:
        try:
            what = self.session.undo() if word == "undo" else self.session.redo()
        except LookupError as exc:
            self.say(str(exc) + ("" if word == "undo" else "; u takes an edit back first"))
            return
        except ValueError as exc:
            self.say(f"cannot {word}: {exc}")
            return
        self.show_chain()
        self.say(f"undone: {what} (U redoes)" if word == "undo" else f"redone: {what}")

    def action_add_stage(self) -> None:
        if self._edit_ready():
            self.push_screen(PickKind(), self._add_kind)

    def _add_kind(self, kind: str | None) -> None:
        if kind is None:
            return
        after = self.query_one("#stages", StageList).selected_index
        try:
            params = chain_edit.starting_params(kind, self.session.rate_hz())
        except ValueError as exc:
            self.say(str(exc))
            return
        spec, at = chain_edit.add_stage(self.session.spec, self.channel, kind, params, after)
        where = self._place(spec, at)
        if self.apply_spec(spec, highlight=at,
                           what=f"added {kind} as stage {where} of {self.channel}"):
            self.enter_stage(at)        # its first field: type the value, enter applies

    def action_remove_stage(self) -> None:
        index = self._stage_index() if self._edit_ready() else None
        if index is None:
            return
        name = self._named(index)
        spec = chain_edit.remove_stage(self.session.spec, index, self.channel,
                                       self.session.channels, self.ui.scope)
        following = [i for i, _ in spec.stages_for(self.channel) if i >= index]
        self.apply_spec(spec, highlight=following[0] if following else None,
                        what=f"removed {name}")

    def action_move_stage(self, step: int) -> None:
        index = self._stage_index() if self._edit_ready() else None
        if index is None:
            return
        spec, at = chain_edit.move_stage(self.session.spec, index, self.channel,
                                         self.session.channels, step, self.ui.scope)
        if spec is self.session.spec:
            self.say(f"{self._named(index)} is already " + ("first" if step < 0 else "last"))
            return
        self.apply_spec(spec, highlight=at, what=f"moved {spec.stages[at].kind} to place "
                                                 f"{self._place(spec, at)} of {self.channel}")

    def action_toggle_bypass(self) -> None:
        index = self._stage_index() if self._edit_ready() else None
        if index is None:
            return
        name = self._named(index)
        spec, at = chain_edit.toggle_bypass(self.session.spec, index, self.channel,
                                            self.session.channels, self.ui.scope)
        self.apply_spec(spec, highlight=at, what=(f"bypassed {name}" if spec.stages[at].bypass
                                                  else f"{name} runs again"))

    def action_next_method(self) -> None:
        index = self._stage_index() if self._edit_ready() else None
        if index is None:
            return
        stage = self.session.spec.stages[index]
        if not KINDS[stage.kind].analog:
            self.say(f"{stage.kind} is a digital stage; only analog prototypes have a method")
            return
        method = chain_edit.next_method(stage, METHODS)
        spec, at = chain_edit.set_params(self.session.spec, index, self.channel,
                                         self.session.channels, {**stage.params, "method": method},
                                         self.ui.scope)
        self.apply_spec(spec, highlight=at,
                        what=f"{self._named(index)} now discretized by {method}")

    def action_toggle_scope(self) -> None:
        self.ui.scope = (chain_edit.SHARED if self.ui.scope == chain_edit.CHANNEL
                         else chain_edit.CHANNEL)
        self.say("edits now go to every channel a shared stage runs on"
                 if self.ui.scope == chain_edit.SHARED else
                 "edits now go to this channel only; shared stages are split off")

    def action_reset_filters(self) -> None:
        from monitor.pipeline import ResetChain

        self.session.pipeline.submit(ResetChain())
        self.say("filter state reset on every channel; stages restart by their start policy")

    def action_copy_chain(self) -> None:
        if not self._edit_ready():
            return
        others = [c for c in self.session.channels if c != self.channel]
        if not others:
            self.say("there is no other channel to copy to")
            return
        self.push_screen(
            PickChannels(f"Copy the chain of {self.channel} to:", others), self._copy_to)

    def _copy_to(self, targets: list[str] | None) -> None:
        if not targets:
            return
        spec = chain_edit.copy_chain(self.session.spec, self.channel, targets,
                                     self.session.channels)
        self.apply_spec(spec, what=f"chain of {self.channel} copied to {', '.join(targets)}")

    def on_param_form_notice(self, message: ParamForm.Notice) -> None:
        self.say(message.text)

    def on_param_form_apply(self, message: ParamForm.Apply) -> None:
        """Enter in a field: the new stage replaces the highlighted one (scope rule applies)."""
        form = self.query_one("#form", ParamForm)
        if not self._edit_ready():
            return
        try:
            spec, at = chain_edit.replace_stage(self.session.spec, message.index, self.channel,
                                                self.session.channels, message.stage,
                                                self.ui.scope)
        except (IndexError, ValueError) as exc:
            form.refuse(str(exc))
            return
        changes = _changes(self.session.spec.stages[message.index], message.stage)
        if self.apply_spec(spec, highlight=at, form=form,
                           what=f"applied {changes} to {self._named(message.index)}"):
            form.accepted(self.form_target())    # the fields stay as typed, focus stays
