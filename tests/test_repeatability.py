"""Repeatability of repeated scans (mixsolve.instrument.repeatability). Invented, seeded data."""

from __future__ import annotations

import numpy as np
import pytest

import mixsolve as ms


def test_sd_and_drift(rng) -> None:
    """SD per wavelength with the m − 1 divisor; a drift of 0.001 AU per scan is found and
    flagged; the drift over the run is d·(m − 1)."""
    wl = np.arange(400.0, 501.0, 5.0)
    m = 12
    scans = 0.3 + 0.001 * np.arange(m)[:, None] + rng.normal(0, 0.0005, (m, wl.size))
    stats = ms.repeatability(ms.make_spectra(scans, wl))
    assert np.allclose(stats["sd"], scans.std(axis=0, ddof=1))
    assert np.allclose(stats["drift_per_scan"], 0.001, atol=5 * stats["u_drift_per_scan"])
    assert float(stats["mean_drift_over_run"]) == pytest.approx(0.011, abs=0.001)
    assert stats["drift_significant"].all()
    assert int(stats["n_scans"]) == m


def test_no_drift_is_rarely_flagged(rng) -> None:
    """Pure noise: few wavelengths (p = 0.01 each) are flagged."""
    wl = np.arange(400.0, 601.0, 2.0)
    stats = ms.repeatability(ms.make_spectra(rng.normal(0.5, 0.001, (8, wl.size)), wl))
    assert stats["drift_significant"].sum() <= 4
    assert float(stats["pooled_sd"]) == pytest.approx(0.001, rel=0.1)


def test_two_scans_give_sd_but_no_drift(rng) -> None:
    """Two scans: SD defined, drift NaN."""
    wl = np.arange(400.0, 421.0, 5.0)
    stats = ms.repeatability(ms.make_spectra(rng.normal(0.5, 0.001, (2, wl.size)), wl))
    assert np.all(np.isfinite(stats["sd"])) and np.all(np.isnan(stats["drift_per_scan"]))


def test_bad_scans() -> None:
    """One scan, or a missing reading, is refused with where it is."""
    wl = np.arange(400.0, 421.0, 5.0)
    with pytest.raises(ms.InputError, match=r"repeat scans: 1 scan; at least 2"):
        ms.repeatability(ms.make_spectra(np.ones((1, wl.size)), wl))
    values = np.ones((3, wl.size))
    values[2, 1] = np.nan
    with pytest.raises(ms.InputError, match=r"scan 3 has no reading at 405 nm"):
        ms.repeatability(ms.make_spectra(values, wl))
