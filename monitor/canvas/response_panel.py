"""The response panel: the selected channel's chain, magnitude (dB) over phase (degrees).

The digital chain (filters.analysis.chain_response, up to Nyquist) is drawn
strong; where stages come from analog prototypes, the ideal continuous chain
(each analog stage's prototype, the other stages as designed) is overlaid
thin, past Nyquist too, so the discretization's warping shows.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from monitor.canvas import palette
from monitor.canvas.area import PlotArea
from monitor.canvas.layout import Rect
from monitor.canvas.marks import Marks
from monitor.canvas.spectrum_panel import frequency_span

POINTS = 400
MARKED_KEYS = ("cutoff_hz", "centre_hz", "freq_hz", "low_hz", "high_hz")


@dataclass(frozen=True)
class ResponseCurves:
    """Digital response h (m,) complex at freqs (m,) Hz; the analog overlay likewise, or None."""

    freqs: np.ndarray
    h: np.ndarray
    analog_freqs: np.ndarray | None
    analog: np.ndarray | None


def chain_curves(designs: Sequence, rate_hz: float) -> ResponseCurves:
    """Responses of the active stage designs (filters.design.StageDesign) of one channel."""
    from filters.analysis import analog_response, chain_response, frequency_response

    lo, hi = frequency_span(rate_hz)
    nyquist = rate_hz / 2
    # The stages' own frequencies join the grid, so a narrow notch shows its full depth.
    named = np.array([hz for hz, _ in stage_markers(designs)])
    freqs = np.union1d(np.logspace(math.log10(lo), math.log10(nyquist * 0.999), POINTS),
                       named[(named > lo) & (named < nyquist * 0.999)])
    h = np.asarray(chain_response(list(designs), freqs, rate_hz), complex)
    if not any(getattr(d, "analog", None) is not None for d in designs):
        return ResponseCurves(freqs, h, None, None)
    analog_freqs = np.union1d(np.logspace(math.log10(lo), math.log10(hi), POINTS),
                              named[(named > lo) & (named < hi)])
    ideal = np.ones(len(analog_freqs), complex)
    for d in designs:
        a = analog_response(d, analog_freqs)
        if a is None:   # a digital-only stage: its own response, held flat past Nyquist
            a = frequency_response(d, np.minimum(analog_freqs, nyquist * 0.999))
        ideal *= np.asarray(a, complex)
    return ResponseCurves(freqs, h, analog_freqs, ideal)


def stage_markers(designs: Sequence) -> list[tuple[float, str]]:
    """(Hz, label) of every cutoff, centre or band edge the stages name, without repeats."""
    out: list[tuple[float, str]] = []
    for d in designs:
        for key in MARKED_KEYS:
            hz = (getattr(d, "derived", None) or {}).get(key)
            if hz and math.isfinite(hz) and all(abs(hz - h) > 1e-9 for h, _ in out):
                out.append((float(hz), f"{'fc' if key == 'cutoff_hz' else 'f0'} {hz:.3g} Hz"))
    return out


def magnitude_db(h: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.maximum(np.abs(h), 1e-12))


def phase_deg(h: np.ndarray) -> np.ndarray:
    return np.degrees(np.unwrap(np.angle(h)))


class ResponsePanel:
    """Magnitude and phase areas sharing the spectrum's frequency axis."""

    def __init__(self, scene, magnitude_rect: Rect, phase_rect: Rect, rate_hz: float) -> None:
        self.magnitude = PlotArea(scene, magnitude_rect)
        self.phase = PlotArea(scene, phase_rect)
        self.lines = {}
        for name, area in (("magnitude", self.magnitude), ("phase", self.phase)):
            self.lines[name, "analog"] = area.line(palette.PROTOTYPE, 1.0)
            self.lines[name, "digital"] = area.line(palette.filtered_colour(0),
                                                    palette.FILTERED_WIDTH)
        self.title = "response"
        self.markers: list[tuple[float, str]] = []
        self.has_analog = False
        self.set_rate(rate_hz)

    def set_rate(self, rate_hz: float) -> None:
        """Frequency axis for sample rate `rate_hz` (Hz)."""
        self.rate_hz = rate_hz
        lo, hi = frequency_span(rate_hz)
        self.x_range = (math.log10(lo), math.log10(hi))
        for area in (self.magnitude, self.phase):
            area.set_range(*self.x_range, -1.0, 1.0)

    def set_curves(self, curves: ResponseCurves, channel: int, title: str,
                   markers: list[tuple[float, str]]) -> None:
        """Draw `curves` in channel `channel`'s colour."""
        self.title, self.markers = title, markers
        self.has_analog = curves.analog is not None
        mag = magnitude_db(curves.h)
        phase = phase_deg(curves.h)
        x = np.log10(curves.freqs)
        every_mag, every_phase = [mag], [phase]
        self._draw("digital", x, mag, phase, palette.filtered_colour(channel))
        if curves.analog is not None:
            ax = np.log10(curves.analog_freqs)
            amag, aphase = magnitude_db(curves.analog), phase_deg(curves.analog)
            self._draw("analog", ax, amag, aphase, palette.PROTOTYPE)
            every_mag.append(amag)
            every_phase.append(aphase)
        for key in (("magnitude", "analog"), ("phase", "analog")):
            self.lines[key].visible = self.has_analog
        top = max(6.0, math.ceil((np.max(mag) + 3) / 6) * 6)
        bottom = max(min(math.floor((np.min(mag) - 3) / 10) * 10, top - 24), top - 80)
        self.magnitude.set_range(*self.x_range, bottom, top)
        p = np.concatenate(every_phase)
        lo, hi = float(np.min(p)), float(np.max(p))
        step = 45.0 if hi - lo <= 360 else 90.0
        self.phase.set_range(*self.x_range, math.floor(lo / step) * step - step / 2,
                             math.ceil(hi / step) * step + step / 2)

    def _draw(self, which: str, x, mag, phase, colour) -> None:
        for name, y in (("magnitude", mag), ("phase", phase)):
            self.lines[name, which].set_data(pos=np.column_stack([x, y]).astype(np.float32),
                                             color=colour)

    def decorate(self, marks: Marks) -> None:
        r = self.magnitude.rect
        marks.label(self.title, r.x, r.y - 8, anchor="left")
        if self.has_analog:
            marks.label("analog prototype", r.x + r.w, r.y - 8, anchor="right",
                        colour=palette.PROTOTYPE)
        self.magnitude.y_axis(marks, max_ticks=4, unit="dB")
        self.magnitude.x_axis_log_hz(marks, labels=False)
        self.phase.y_axis(marks, max_ticks=3, unit="°")
        self.phase.x_axis_log_hz(marks)
        _, py = self.magnitude.to_px([0.0], [-3.0])
        if r.y <= py[0] <= r.y + r.h:
            marks.mark(r.x, py[0], r.x + r.w, py[0], palette.GUIDE)
            marks.label("-3 dB", r.x + 4, py[0] + 7, anchor="left", colour=palette.GUIDE)
        nyquist = math.log10(self.rate_hz / 2)
        for area in (self.magnitude, self.phase):
            for row, (hz, text) in enumerate(self.markers):
                area.vertical_marker(marks, math.log10(hz), palette.CUTOFF,
                                     text if area is self.magnitude else None, row)
            area.vertical_marker(marks, nyquist, palette.NYQUIST,
                                 "Nyquist" if area is self.magnitude else None, len(self.markers),
                                 side="left")


def active_designs(chain, channel: str) -> list:
    """The not-bypassed stage designs a ChainSet runs on `channel`, in file order."""
    if chain is None or not hasattr(chain, "designs_for"):
        return []
    stages = chain.spec.stages
    return [design for index, design in chain.designs_for(channel) if not stages[index].bypass]
