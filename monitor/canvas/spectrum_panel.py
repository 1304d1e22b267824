"""The spectrum panel: Welch power spectral density of the selected channel, raw and filtered.

x is log10(frequency in Hz) from rate/NPERSEG (the first non-zero bin) to a
little past Nyquist so the Nyquist marker shows; y is 10*log10(PSD) in dB
re 1 unit^2/Hz. The stage cutoffs of the selected channel are marked.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from monitor.canvas import palette
from monitor.canvas.area import PlotArea
from monitor.canvas.layout import Rect
from monitor.canvas.marks import Marks

NPERSEG = 1024            # Welch segment length (samples) when the window holds enough
MAX_SEGMENTS = 256        # at most this many half-overlapping segments (the newest) per update
PAST_NYQUIST = 1.15       # the frequency axis ends this factor above Nyquist


def frequency_span(rate_hz: float) -> tuple[float, float]:
    """(lowest, highest) frequency in Hz the spectrum and response axes show."""
    return rate_hz / NPERSEG, rate_hz / 2 * PAST_NYQUIST


def welch_db(values: np.ndarray, rate_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """Welch PSD in dB. values: (n, c) -> freqs (m,) Hz without DC, db (m, c).

    Hann window, half overlap, mean removed (scipy.signal.welch defaults but
    for the segment length); uses at most the newest MAX_SEGMENTS segments.
    """
    from scipy.signal import welch

    n = len(values)
    nperseg = NPERSEG if n >= NPERSEG else 1 << max(3, int(math.log2(max(n, 8))))
    nperseg = min(nperseg, n)
    if nperseg < 8:
        return np.empty(0), np.empty((0, values.shape[1]))
    values = np.array(values[-(MAX_SEGMENTS + 1) * nperseg // 2:], np.float64)
    missing = ~np.isfinite(values)
    if missing.any():   # gaps (NaN) would spoil every segment: hold each column's mean
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)   # an all-NaN column: mean 0
            means = np.nanmean(values, axis=0)
        values[missing] = np.broadcast_to(np.nan_to_num(means), values.shape)[missing]
    freqs, psd = welch(values, fs=rate_hz, nperseg=nperseg, axis=0)
    with np.errstate(divide="ignore"):
        db = 10.0 * np.log10(np.maximum(psd[1:], 1e-30))
    return freqs[1:], db


def db_range(db: np.ndarray, floor_span: float = 100.0) -> tuple[float, float]:
    """A y range in 10 dB steps: top above the highest value, at most `floor_span` below it."""
    finite = db[np.isfinite(db)]
    if not finite.size:
        return -100.0, 0.0
    top = math.ceil((finite.max() + 3) / 10) * 10
    bottom = max(math.floor((finite.min() - 3) / 10) * 10, top - floor_span)
    return bottom, max(top, bottom + 20)


class SpectrumPanel:
    """Raw and filtered PSD of one channel with cutoff and Nyquist markers."""

    def __init__(self, scene, rect: Rect, rate_hz: float) -> None:
        self.area = PlotArea(scene, rect)
        self.raw_line = self.area.line(palette.raw_colour(0), palette.RAW_WIDTH)
        self.filtered_line = self.area.line(palette.filtered_colour(0), palette.FILTERED_WIDTH)
        self.title = "spectrum"
        self.markers: list[tuple[float, str]] = []
        self.set_rate(rate_hz)

    def set_rate(self, rate_hz: float) -> None:
        """Frequency axis for sample rate `rate_hz` (Hz)."""
        self.rate_hz = rate_hz
        lo, hi = frequency_span(rate_hz)
        self.area.set_range(math.log10(lo), math.log10(hi), -100.0, 0.0)

    def set_data(self, freqs: np.ndarray, raw_db: np.ndarray, filtered_db: np.ndarray,
                 channel: int, title: str, markers: list[tuple[float, str]]) -> None:
        """freqs: (m,) Hz; raw_db, filtered_db: (m,) dB; markers: (Hz, label) pairs."""
        self.title, self.markers = title, markers
        self.raw_line.set_data(color=palette.raw_colour(channel))
        self.filtered_line.set_data(color=palette.filtered_colour(channel))
        if len(freqs) < 2:
            return
        x = np.log10(freqs)
        for line, db in ((self.raw_line, raw_db), (self.filtered_line, filtered_db)):
            line.set_data(pos=np.column_stack([x, db]).astype(np.float32))
        x0, x1, _, _ = self.area.range
        self.area.set_range(x0, x1, *db_range(np.concatenate([raw_db, filtered_db])))

    def decorate(self, marks: Marks) -> None:
        r = self.area.rect
        marks.label(self.title, r.x, r.y - 8, anchor="left")
        self.area.y_axis(marks, max_ticks=5, unit="dB")
        self.area.x_axis_log_hz(marks)
        for row, (hz, text) in enumerate(self.markers):
            self.area.vertical_marker(marks, math.log10(hz), palette.CUTOFF, text, row)
        self.area.vertical_marker(marks, math.log10(self.rate_hz / 2), palette.NYQUIST,
                                  "Nyquist", len(self.markers), side="left")
