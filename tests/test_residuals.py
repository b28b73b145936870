"""Residual summaries (mixsolve.solve.residuals) and the trust figures made from them.

Reference: the per-spectrum definitions of mixsolve.solve.sample_checks (the
Wald–Wolfowitz runs test on residual signs, lag-1 autocorrelation, extremes of the
reading), evaluated here spectrum by spectrum on explicit arrays; numbers invented and
seeded.
"""

from __future__ import annotations

import numpy as np
import pytest

from mixsolve.solve import residuals
from mixsolve.solve.residuals import summarise, summarise_model
from mixsolve.solve.sample_checks import absorbance_extent, runs_test
from mixsolve.solve.trust import runs_from_summary


def awkward(rng: np.random.Generator, n: int = 60, m: int = 40) -> np.ndarray:
    """Residual-like rows: noise, random walks (structured), NaN readings, exact zeros,
    one sign only, all zero, and a row with a single reading."""
    r = rng.standard_normal((n, m))
    r[:10] = np.cumsum(r[:10], axis=1)
    r[11, [4, 20]] = np.nan
    r[12, :7] = 0.0
    r[13] = 0.0
    r[14] = np.abs(r[14])
    r[15, 1:] = np.nan
    return r


def test_summary_gives_the_runs_test_of_sample_checks(rng: np.random.Generator) -> None:
    """runs z, p and lag-1 from the summary = sample_checks.runs_test row by row."""
    r = awkward(rng)
    got = runs_from_summary(summarise(r, r))
    for g, w in zip(got, runs_test(r), strict=True):
        np.testing.assert_allclose(g, w, rtol=1e-12, atol=1e-15, equal_nan=True)
    short = rng.standard_normal((3, 6))  # fewer points than the runs test needs
    for g, w in zip(runs_from_summary(summarise(short, short)), runs_test(short),
                    strict=True):
        np.testing.assert_allclose(g, w, equal_nan=True)


def test_summary_extremes_and_counts(rng: np.random.Generator) -> None:
    """Extremes of the readings present (absorbance_extent), readings present, Σr²."""
    values = rng.uniform(0, 2, (60, 40))
    r = awkward(rng)
    values[np.isnan(r)] = np.nan
    s = summarise(values, r)
    a_max, a_min = absorbance_extent(values)
    np.testing.assert_array_equal(s.absorbance_max, a_max)
    np.testing.assert_array_equal(s.absorbance_min, a_min)
    np.testing.assert_array_equal(s.n_points, np.sum(np.isfinite(r), axis=1))
    np.testing.assert_allclose(s.sum_squares, np.nansum(r**2, axis=1), rtol=1e-12)


def test_model_summary_equals_the_explicit_residual(rng: np.random.Generator,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    """Block by block (blocks smaller than the batch) = summarise of values − coef·Dᵀ."""
    monkeypatch.setattr(residuals, "BLOCK_SPECTRA", 16)
    monkeypatch.setattr(residuals, "GEMM_ROWS", 5)
    design = rng.uniform(0, 1, (40, 3))
    coef = rng.uniform(0, 1, (70, 3))
    values = coef @ design.T + 0.01 * rng.standard_normal((70, 40))
    values[3, 9] = np.nan
    coef[5] = np.nan  # a spectrum that could not be fitted
    got = summarise_model(values, coef, design)
    want = summarise(values, values - coef @ design.T, design.shape[1])
    for g, w, name in zip(got, want, residuals.ResidualSummary._fields, strict=True):
        np.testing.assert_allclose(g, w, rtol=1e-12, equal_nan=True, err_msg=name)
    assert np.isnan(got.sum_squares[5]) and got.n_points[3] == 39
