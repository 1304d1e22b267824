"""The trace's bottom row at any width: the time labels stay, the legend is one of its
whole forms or absent, and no word is ever cut ("filtere").

Pilot tests on a harness app composing only a TraceView, at 80x24 and 160x48 and at the
narrow width the live view gives the trace beside the chain panel.
"""

from __future__ import annotations

import asyncio

import numpy as np
from textual.app import App, ComposeResult
from tui_helpers import until

from monitor.tui.trace import FILTERED_STYLE, GLYPH, RAW_STYLE, TraceView, legend_row, trace_rows

# every whole word of every legend form, and of the time labels (spans of this test)
LEGEND_WORDS = {"raw", "filtered", "filt", GLYPH, "raw" + GLYPH, "filt" + GLYPH}
TIME_WORDS = {"s", "now", "-0.5", "-5", "-120"}
FULL = f"raw {GLYPH}  filtered {GLYPH}"


def weigh_signal(n: int = 2500, seed: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """A load cell stepping from 0 to 12 kg with noise, and its 20-sample moving average."""
    rng = np.random.default_rng(seed)
    raw = np.where(np.arange(n) < n // 2, 0.0, 12.0) + rng.normal(0, 0.4, n)
    filtered = np.convolve(raw, np.ones(20) / 20, mode="full")[:n]
    return raw, filtered


def check_legend(text: str, width: int, span_label: str) -> None:
    assert len(text) == width, (width, text)
    words = text.split()
    assert set(words) <= LEGEND_WORDS | TIME_WORDS, (width, text)          # nothing cut
    assert span_label in text and words[-1] == "now", (width, text)       # time labels stay
    assert text.endswith("now")


def test_the_legend_row_fits_every_width_without_a_cut_word():
    for span_s, span_label in ((0.5, "-0.5 s"), (5.0, "-5 s"), (120.0, "-120 s")):
        forms_seen = set()
        for width in range(20, 201):
            segments = legend_row(span_s, width)
            text = "".join(s.text for s in segments)
            check_legend(text, width, span_label)
            words = text.split()
            if any(w.startswith(("filt", "raw")) for w in words):
                forms_seen.add(" ".join(w for w in words if w not in TIME_WORDS))
            for s in segments:                       # each swatch has its series' colour
                if s.text == GLYPH:
                    assert s.style in (RAW_STYLE, FILTERED_STYLE)
            if width >= 60:
                assert FULL in text, width
        # three whole forms as the width grows (the widest from some width on)
        assert forms_seen == {f"raw {GLYPH} filtered {GLYPH}", f"raw {GLYPH} filt {GLYPH}",
                              f"raw{GLYPH} filt{GLYPH}"}, forms_seen


def test_swatch_colours_follow_their_words():
    for width in (20, 34, 80):
        segments = legend_row(5.0, width)
        before = ""
        for s in segments:
            if s.text == GLYPH:
                word = before.split()[-1]
                expected = RAW_STYLE if word.startswith("raw") else FILTERED_STYLE
                assert s.style == expected, (width, word)
            before += s.text


def test_every_trace_row_is_the_width_even_narrow():
    raw, filtered = weigh_signal()
    for width in (20, 24, 40, 80, 200):
        rows = trace_rows(raw, filtered, 5.0, width, 10)
        assert [sum(len(s.text) for s in row) for row in rows] == [width] * 10


class TraceApp(App):
    """Only the trace, optionally as narrow as the live view's middle column gets."""

    def __init__(self, css_width: str | None = None) -> None:
        super().__init__()
        self.css_width = css_width

    def compose(self) -> ComposeResult:
        view = TraceView(id="trace")
        if self.css_width:
            view.styles.width = self.css_width
        yield view


def drawn_legend(view: TraceView) -> str:
    return view.render_line(view.content_size.height - 1).text


def test_the_drawn_legend_at_80_160_and_beside_the_chain_panel():
    raw, filtered = weigh_signal()

    async def run(css_width: str | None, sizes: list[tuple[int, int]], want: str) -> None:
        app = TraceApp(css_width)
        async with app.run_test(size=sizes[0]) as pilot:
            view = app.query_one(TraceView)
            view.show(raw, filtered, 5.0, "load [kg]")
            for size in sizes:
                await pilot.resize_terminal(*size)
                width = (int(css_width) - 2) if css_width else size[0] - 2     # the border
                assert await until(pilot, lambda w=width: view.content_size.width == w
                                   and len(drawn_legend(view)) == w)
                text = drawn_legend(view)
                check_legend(text, width, "-5 s")
                assert want in text, text

    asyncio.run(run(None, [(80, 24), (160, 48), (80, 24)], FULL))
    asyncio.run(run("26", [(80, 24), (160, 48)], f"raw{GLYPH} filt{GLYPH}"))
