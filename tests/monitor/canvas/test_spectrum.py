"""The Welch spectrum against scipy.signal.welch."""

from __future__ import annotations

import numpy as np


def test_welch_spectrum_matches_scipy_and_survives_gaps():
    from scipy.signal import welch

    from monitor.canvas.spectrum_panel import welch_db

    rng = np.random.default_rng(2)
    values = rng.standard_normal((5000, 2))
    freqs, db = welch_db(values, 250.0)
    want_f, want_psd = welch(values, fs=250.0, nperseg=1024, axis=0)   # scipy.signal.welch
    np.testing.assert_allclose(freqs, want_f[1:])
    np.testing.assert_allclose(db, 10 * np.log10(want_psd[1:]))
    values[100:120, 0] = np.nan
    values[:, 1] = np.nan
    freqs, db = welch_db(values, 250.0)
    assert np.isfinite(db[:, 0]).all() and len(freqs) == 512
