"""Headless renders read back as pixels: traces, spectrum peak, response -3 dB point.

Drawn through Mesa's software OpenGL (EGL, no display); the expected pixel
positions come from the documented axis mapping (frequency_span, layout).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from canvas_pixels import colour_mask, crop
from scipy import signal

from monitor.canvas import palette
from monitor.canvas.layout import compute_layout
from monitor.canvas.spectrum_panel import frequency_span

SIZE = (1280, 800)
RATE = 250.0


def weigh_station(n: int, seed: int = 2) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Load cell (kg), motor current (A), frame vibration (g) at 250 Hz: noisy raw and a
    second-order Butterworth low-pass at 8 Hz (scipy.signal.butter, steady start)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / RATE
    load = 12.0 + 0.3 * np.sin(2 * np.pi * 50 * t) + 0.2 * rng.standard_normal(n)
    current = 0.4 + 0.05 * rng.standard_normal(n)
    vib = 0.2 * np.sin(2 * np.pi * 18 * t) + 0.05 * rng.standard_normal(n)
    raw = np.column_stack([load, current, vib])
    sos = signal.butter(2, 8.0, fs=RATE, output="sos")
    zi = signal.sosfilt_zi(sos)[:, :, None] * raw[0][None, None, :]
    filtered, _ = signal.sosfilt(sos, raw, axis=0, zi=zi)
    return t, raw, filtered


def butterworth_design(cutoff_hz: float, order: int = 2):
    from filters.design import design_stage
    from filters.spec import StageSpec

    return design_stage(StageSpec("butterworth", {"order": order, "cutoff_hz": cutoff_hz}), RATE)


def render(t, raw, filtered, designs=None, selected=0, **kw):
    from monitor.canvas.snapshot import render_snapshot

    k = raw.shape[1]
    names = ["load", "current", "vib"][:k] + [f"ch{i}" for i in range(3, k)]
    units = ["kg", "A", "g"][:k] + [""] * max(0, k - 3)
    return render_snapshot(t, raw, filtered, names, units, RATE,
                           designs if designs is not None else [[] for _ in range(k)],
                           size=SIZE, selected=selected, **kw)


def row_extent(mask: np.ndarray) -> int:
    rows = np.nonzero(mask.any(axis=1))[0]
    return int(rows.max() - rows.min()) if len(rows) else 0


def test_each_lane_shows_raw_and_filtered_and_the_filtered_trace_is_narrower(headless):
    t, raw, filtered = weigh_station(2500)
    image = render(t, raw, filtered)
    assert image.shape == (SIZE[1], SIZE[0], 4) and image.dtype == np.uint8
    layout = compute_layout(SIZE, 3)
    for k, lane in enumerate(layout.lanes):
        raw_px = crop(colour_mask(image, palette.raw_colour(k)), lane)
        filtered_px = crop(colour_mask(image, palette.filtered_colour(k)), lane)
        assert raw_px.sum() > 500, f"lane {k}: raw colour missing"
        assert filtered_px.sum() > 500, f"lane {k}: filtered colour missing"
        # the low-pass removes most of the noise, so its colour covers fewer rows
        assert row_extent(filtered_px) < 0.7 * row_extent(raw_px), f"lane {k}"
        # and nothing of another channel's colour strays into this lane
        other = crop(colour_mask(image, palette.filtered_colour((k + 1) % 3)), lane)
        assert other.sum() < 20


@pytest.mark.parametrize("tone_hz", [7.0, 37.0, 61.0])
def test_a_sine_puts_the_spectrum_peak_at_its_frequency(headless, tone_hz):
    n = 8192
    t = np.arange(n) / RATE
    rng = np.random.default_rng(4)
    raw = (np.sin(2 * np.pi * tone_hz * t) + 0.01 * rng.standard_normal(n))[:, None]
    image = render(t, raw, raw.copy())
    rect = compute_layout(SIZE, 1).spectrum
    trace = crop(colour_mask(image, palette.filtered_colour(0)), rect)
    columns = np.nonzero(trace.any(axis=0))[0]
    top_row = np.array([np.nonzero(trace[:, c])[0].min() for c in columns])
    peak_x = rect.x + columns[np.argmin(top_row)]
    lo, hi = frequency_span(RATE)
    want_x = rect.x + (math.log10(tone_hz) - math.log10(lo)) / math.log10(hi / lo) * rect.w
    assert abs(peak_x - want_x) <= 3, (peak_x, want_x)


def test_the_response_crosses_minus_3_db_at_the_cutoff(headless):
    cutoff = 20.0
    design = butterworth_design(cutoff)
    # scipy.signal.butter's documentation: Wn is where the gain drops to 1/sqrt(2) (-3 dB);
    # the stage should match scipy's digital Butterworth at this rate.
    reference = signal.butter(2, cutoff, fs=RATE, output="sos")
    _, h = signal.sosfreqz(reference, worN=[cutoff], fs=RATE)
    assert abs(20 * np.log10(abs(h[0])) + 3.01) < 0.05
    t, raw, filtered = weigh_station(2000)
    image = render(t, raw[:, :1], filtered[:, :1], designs=[[design]])
    rect = compute_layout(SIZE, 1).magnitude
    lo, hi = frequency_span(RATE)
    want_x = rect.x + (math.log10(cutoff) - math.log10(lo)) / math.log10(hi / lo) * rect.w
    # the -3 dB guide line: its row in the magnitude area
    guide = crop(colour_mask(image, palette.GUIDE), rect)
    guide_row = int(np.argmax(guide.sum(axis=1)))
    assert guide.sum(axis=1)[guide_row] > 0.5 * rect.w
    curve = crop(colour_mask(image, palette.filtered_colour(0)), rect)
    columns = np.nonzero(curve.any(axis=0))[0]
    rows = np.array([np.nonzero(curve[:, c])[0].mean() for c in columns])
    below = columns[rows > guide_row]
    crossing_x = rect.x + below.min()
    assert abs(crossing_x - want_x) <= 3, (crossing_x, want_x)
    # the cutoff marker is drawn there too
    marker = crop(colour_mask(image, palette.CUTOFF), rect)
    marker_x = rect.x + int(np.argmax(marker.sum(axis=0)))
    assert abs(marker_x - want_x) <= 1.5


def test_min_max_decimation_draws_the_same_envelope_as_every_sample(headless):
    """200 000 samples into ~1200 columns: per column, the decimated filtered trace covers
    the rows the every-sample drawing covers, within a pixel or two."""
    n = 200_000
    t = np.arange(n) / RATE
    rng = np.random.default_rng(9)
    raw = np.cumsum(rng.standard_normal((n, 2)), axis=0)
    raw[rng.integers(0, n, 30), 0] += 80.0   # single-sample spikes must survive
    decimated = render(t, raw, raw.copy())
    every = render(t, raw, raw.copy(), decimate=False)
    layout = compute_layout(SIZE, 2)
    for k, lane in enumerate(layout.lanes):
        a = crop(colour_mask(decimated, palette.filtered_colour(k)), lane)
        b = crop(colour_mask(every, palette.filtered_colour(k)), lane)
        cols = np.nonzero(a.any(axis=0) & b.any(axis=0))[0]
        assert len(cols) > 0.95 * lane.w
        top_a = np.array([np.nonzero(a[:, c])[0].min() for c in cols])
        top_b = np.array([np.nonzero(b[:, c])[0].min() for c in cols])
        bottom_a = np.array([np.nonzero(a[:, c])[0].max() for c in cols])
        bottom_b = np.array([np.nonzero(b[:, c])[0].max() for c in cols])
        for a_edge, b_edge in ((top_a, top_b), (bottom_a, bottom_b)):
            # bucket edges drift against pixel columns by under a pixel per bucket
            assert np.mean(np.abs(a_edge - b_edge) <= 2) > 0.94
            assert np.mean(np.abs(a_edge - b_edge)) < 1.0
            assert abs(np.mean(a_edge - b_edge)) < 0.5     # no bias up or down
        assert abs(int(top_a.min()) - int(top_b.min())) <= 2   # the highest spike is kept


def test_bad_snapshot_arguments_name_the_problem(headless):
    t, raw, filtered = weigh_station(100)
    from monitor.canvas.snapshot import render_snapshot

    with pytest.raises(ValueError, match="columns"):
        render_snapshot(t, raw, filtered, ["load"], ["kg"], RATE, [[]])
    with pytest.raises(ValueError, match="selected"):
        render(t, raw, filtered, selected=5)
    with pytest.raises(ValueError, match="at least 2"):
        render(t[:1], raw[:1], filtered[:1])


def test_the_other_backend_is_refused_with_a_sentence(headless):
    from monitor.canvas import backend

    assert backend.chosen() == backend.HEADLESS
    assert backend.use(backend.HEADLESS) is headless          # asking again is fine
    with pytest.raises(backend.BackendUnavailable, match="already draws through egl"):
        backend.use(backend.WINDOW)
