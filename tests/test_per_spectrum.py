"""Least squares and NNLS with one design per spectrum (mixsolve.solve.per_spectrum), and
the weighted fit built on it (``fit_spectra(weights=...)``, ``unmix(weights="noise")``).

References (CHECKS.md, "Non-negative least squares"): ``scipy.optimize.nnls`` (Lawson &
Hanson 1974, ch. 23) and ``numpy.linalg.lstsq`` (LAPACK gelsd) are run spectrum by
spectrum as reference implementations; free (baseline) terms are checked against
``scipy.optimize.nnls`` on the problem with the free columns projected out (the free
coefficients then follow by ``numpy.linalg.lstsq``: an exact reformulation, from memory).
The KKT conditions are tested with the tolerance :mod:`mixsolve.solve.nnls` states,
τ = 10·max(m, p)·ε·max(‖a‖, ‖x̂‖) on unit-norm columns (``helpers_nnls.kkt_ratio``). All
problems are invented (Gaussian bands) and seeded.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import xarray as xr
from helpers_nnls import kkt_ratio, nnls_free_reference
from scipy.optimize import nnls

import mixsolve as ms
from mixsolve.flags import DEPENDENT, MISSING, NO_DOF, TOO_FEW
from mixsolve.noise import PRESETS
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.design import design_matrix
from mixsolve.solve.per_spectrum import block_spectra, fit_each, inverse_diagonal

SEED = 4242
CENTRES = (0.2, 0.35, 0.5, 0.65, 0.8)


def designs(rng: np.random.Generator, n: int, m: int, p: int, *, width: float = 0.12,
            centres: tuple[float, ...] = CENTRES) -> np.ndarray:
    """n designs (n, m, p) of Gaussian bands, each spectrum's bands moved and scaled a
    little (as a wavelength shift or row weights would)."""
    t = np.linspace(0.0, 1.0, m)
    move = rng.uniform(-0.02, 0.02, (n, 1, 1))
    centre = np.asarray(centres[:p])
    out = np.exp(-0.5 * ((t[None, :, None] - centre - move) / width) ** 2)
    return out * rng.uniform(0.5, 3.0, (n, 1, p)) * rng.uniform(0.5, 2.0, (n, m, 1))


def spectra_for(rng: np.random.Generator, d: np.ndarray, zero_fraction: float = 0.3,
                noise: float = 0.01) -> np.ndarray:
    """Mixtures of each design's columns (some components absent) plus noise."""
    n, m, p = d.shape
    conc = rng.uniform(0.0, 1.0, (n, p))
    conc[rng.random(conc.shape) < zero_fraction] = 0.0
    return np.einsum("nmp,np->nm", d, conc) + noise * rng.standard_normal((n, m))


def assert_kkt(d: np.ndarray, a: np.ndarray, coef: np.ndarray, n_con: int) -> None:
    """KKT within the stated τ for every spectrum (its own design)."""
    for i in range(d.shape[0]):
        assert kkt_ratio(d[i], a[i][None], coef[i][None], n_con) <= 1.0, i


# --- against the reference libraries -------------------------------------------------------

@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize(("m", "p", "n"), [(300, 5, 300), (40, 3, 200), (12, 5, 150),
                                           (60, 1, 50)])
def test_nnls_matches_scipy_per_spectrum_and_kkt_holds(seed: int, m: int, p: int,
                                                       n: int) -> None:
    """Random problems, one design each: scipy.optimize.nnls's minimiser and the same zero
    pattern (reference: scipy.optimize.nnls spectrum by spectrum); KKT within τ."""
    rng = np.random.default_rng(SEED + seed)
    d = designs(rng, n, m, p)
    a = spectra_for(rng, d)
    fit = fit_each(d, a, p, "nnls")
    want = np.vstack([nnls(d[i], a[i], maxiter=50 * p)[0] for i in range(n)])
    scale = np.abs(want).max()
    np.testing.assert_allclose(fit.coef, want, rtol=1e-8, atol=1e-10 * scale)
    np.testing.assert_array_equal(fit.coef == 0, want == 0)
    rss = np.array([np.sum((a[i] - d[i] @ want[i]) ** 2) for i in range(n)])
    np.testing.assert_allclose(fit.rss, rss, rtol=1e-9, atol=1e-14 * np.max(a**2) * m)
    assert fit.full_rank.all()
    assert_kkt(d, a, fit.coef, p)


@pytest.mark.parametrize("seed", range(3))
def test_ols_matches_lstsq_per_spectrum(seed: int) -> None:
    """OLS: coefficients and residual sum of squares of numpy.linalg.lstsq per spectrum;
    diag((DᵀD)⁻¹) of numpy.linalg.inv per spectrum."""
    rng = np.random.default_rng(SEED + 10 + seed)
    d = designs(rng, 120, 80, 4)
    a = spectra_for(rng, d, zero_fraction=0.0)
    fit = fit_each(d, a, 4, "ols")
    for i in range(d.shape[0]):
        x, res, *_ = np.linalg.lstsq(d[i], a[i], rcond=None)
        np.testing.assert_allclose(fit.coef[i], x, rtol=1e-10, atol=1e-13)
        np.testing.assert_allclose(fit.rss[i], res[0], rtol=1e-9)
        inv = np.diag(np.linalg.inv(d[i].T @ d[i]))
        np.testing.assert_allclose(fit.inverse_diag[i], inv, rtol=1e-9)
    diag, ok = inverse_diagonal(d)
    np.testing.assert_allclose(diag, fit.inverse_diag, rtol=1e-12)
    assert ok.all()


@pytest.mark.parametrize("n_free", [1, 2])
def test_free_baseline_columns(n_free: int) -> None:
    """Free offset (and slope) columns: the minimiser of scipy.optimize.nnls with the free
    columns projected out, then lstsq for them (reference); KKT within τ."""
    rng = np.random.default_rng(SEED + 20)
    n, m, p = 150, 100, 3
    k = designs(rng, n, m, p)
    t = np.linspace(-1.0, 1.0, m)
    base = np.stack([np.ones(m), t][:n_free], axis=1)
    d = np.concatenate([k, np.broadcast_to(base, (n, m, n_free))], axis=2)
    a = spectra_for(rng, k) - 0.05 + 0.02 * t
    fit = fit_each(d, a, p, "nnls")
    want = np.vstack([nnls_free_reference(d[i], a[i], p) for i in range(n)])
    np.testing.assert_allclose(fit.coef, want, rtol=1e-7, atol=1e-9)
    assert_kkt(d, a, fit.coef, p)


def test_absent_readings_are_zero_rows() -> None:
    """Readings absent (zero rows of D and zero values): the same answer as the
    reference solvers on the readings present only."""
    rng = np.random.default_rng(SEED + 30)
    n, m, p = 80, 60, 4
    d = designs(rng, n, m, p)
    a = spectra_for(rng, d)
    present = rng.random((n, m)) > 0.3
    fit = fit_each(d * present[:, :, None], np.where(present, a, 0.0), p, "nnls")
    ols = fit_each(d * present[:, :, None], np.where(present, a, 0.0), p, "ols")
    for i in range(n):
        di, ai = d[i][present[i]], a[i][present[i]]
        np.testing.assert_allclose(fit.coef[i], nnls(di, ai)[0], rtol=1e-8, atol=1e-11)
        x, res, *_ = np.linalg.lstsq(di, ai, rcond=None)
        np.testing.assert_allclose(ols.coef[i], x, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(ols.rss[i], res[0], rtol=1e-9)


# --- degenerate problems ---------------------------------------------------------------------

def test_zero_spectra() -> None:
    """An empty batch gives empty arrays of the right shapes."""
    for method in ("nnls", "ols"):
        fit = fit_each(np.zeros((0, 30, 3)), np.zeros((0, 30)), 3, method)
        assert fit.coef.shape == (0, 3) and fit.rss.shape == (0,)
        assert fit.inverse_diag.shape == (0, 3) and fit.full_rank.shape == (0,)


def test_all_components_driven_to_zero() -> None:
    """Negative mixtures: every component held at exactly zero (as scipy.optimize.nnls);
    with a free offset, the offset alone fits a flat negative spectrum (its mean)."""
    rng = np.random.default_rng(SEED + 40)
    n, m, p = 25, 70, 3
    d = designs(rng, n, m, p)
    a = -np.einsum("nmp,np->nm", d, rng.uniform(0.1, 1.0, (n, p)))
    fit = fit_each(d, a, p, "nnls")
    np.testing.assert_array_equal(fit.coef, 0.0)
    np.testing.assert_allclose(fit.rss, np.sum(a**2, axis=1), rtol=1e-12)
    assert_kkt(d, a, fit.coef, p)
    with_offset = np.concatenate([d, np.ones((n, m, 1))], axis=2)
    flat = -np.abs(rng.normal(size=(n, 1))) * np.ones((1, m))
    fit = fit_each(with_offset, flat, p, "nnls")
    # the offset fits exactly, so the components' gradient is rounding: zero to 1e-12
    np.testing.assert_allclose(fit.coef[:, :p], 0.0, atol=1e-12)
    assert_kkt(with_offset, flat, fit.coef, p)
    np.testing.assert_allclose(fit.coef[:, p], flat[:, 0], rtol=1e-12)


def test_one_component_only() -> None:
    """p = 1: c = max(0, dᵀa/dᵀd) per spectrum (the closed form), 0 for negative ones."""
    rng = np.random.default_rng(SEED + 50)
    d = designs(rng, 40, 50, 1)
    a = spectra_for(rng, d, zero_fraction=0.0, noise=0.05)
    a[:10] *= -1
    fit = fit_each(d, a, 1, "nnls")
    closed = np.einsum("nm,nm->n", d[:, :, 0], a) / np.einsum("nm,nm->n", d[:, :, 0],
                                                                d[:, :, 0])
    np.testing.assert_allclose(fit.coef[:, 0], np.maximum(closed, 0.0), rtol=1e-12)
    np.testing.assert_array_equal(fit.coef[:10, 0], 0.0)


@pytest.mark.parametrize("gap", [1e-2, 1e-3, 1e-4])
def test_nearly_collinear_columns(gap: float) -> None:
    """Two bands ``gap`` apart (condition number up to ~1e5): the objective equals
    scipy.optimize.nnls's to 1e-9 relative and KKT holds within τ."""
    rng = np.random.default_rng(SEED + 60)
    n, m = 60, 200
    d = designs(rng, n, m, 3, centres=(0.4, 0.4 + gap, 0.7))
    a = spectra_for(rng, d, zero_fraction=0.2, noise=1e-3)
    fit = fit_each(d, a, 3, "nnls")
    assert fit.full_rank.all()
    for i in range(n):
        want = nnls(d[i], a[i], maxiter=150)[1] ** 2
        assert fit.rss[i] <= want * (1 + 1e-9) + 1e-24, i
        np.testing.assert_allclose(fit.rss[i], np.sum((a[i] - d[i] @ fit.coef[i]) ** 2),
                                   rtol=1e-9)
    assert_kkt(d, a, fit.coef, 3)


def test_rank_deficient_spectra_are_reported() -> None:
    """Fewer readings present than terms, a duplicated column, or a column that is zero
    on the readings present: ``full_rank`` False and NaN results (the caller flags them);
    the other spectra of the batch are solved as usual (reference: numpy.linalg.lstsq)."""
    rng = np.random.default_rng(SEED + 70)
    n, m, p = 6, 40, 3
    d = designs(rng, n, m, p)
    a = spectra_for(rng, d)
    d[0, 2:] = 0.0  # two readings present, three terms
    a[0, 2:] = 0.0
    d[1, :, 2] = d[1, :, 0]  # duplicated column
    d[2, :, 1] = 0.0  # zero column
    d[3, 20:] = 0.0  # three readings present: square, solvable
    d[3, 3:20] = 0.0
    a[3, 3:] = 0.0
    for method in ("nnls", "ols"):
        fit = fit_each(d, a, p, method)
        np.testing.assert_array_equal(fit.full_rank, [False, False, False, True, True, True])
        assert np.isnan(fit.coef[:3]).all() and np.isnan(fit.rss[:3]).all()
        assert np.isnan(fit.inverse_diag[:3]).all()
        x = np.linalg.lstsq(d[4], a[4], rcond=None)[0]
        if method == "ols":
            np.testing.assert_allclose(fit.coef[4], x, rtol=1e-10)
    diag, ok = inverse_diagonal(d)
    assert not ok[:3].any() and ok[3:].all() and np.isnan(diag[:3]).all()


def test_scipy_fallback_after_max_iter() -> None:
    """``max_iter=0``: every spectrum still needing Lawson–Hanson steps is finished by
    scipy.optimize.nnls on its reduced problem, with the same minimiser (reference)."""
    rng = np.random.default_rng(SEED + 80)
    d = designs(rng, 100, 80, 5)
    a = spectra_for(rng, d, zero_fraction=0.5)
    fit = fit_each(d, a, 5, "nnls", max_iter=0)
    want = np.vstack([nnls(d[i], a[i], maxiter=250)[0] for i in range(100)])
    np.testing.assert_allclose(fit.coef, want, rtol=1e-7, atol=1e-9 * np.abs(want).max())


def test_blocks_bound_the_designs_memory() -> None:
    """One block of designs stays within BLOCK_BYTES, and holds at least one spectrum."""
    from mixsolve.solve.per_spectrum import BLOCK_BYTES

    for m, p in [(300, 5), (3000, 12), (10**7, 10)]:
        size = block_spectra(m, p)
        assert size == 1 or 8 * m * p * size <= BLOCK_BYTES
        assert size >= 1


# --- weighted fits -----------------------------------------------------------------------------

def weighted_reference(design: np.ndarray, a: np.ndarray, w: np.ndarray, n_con: int,
                       method: str) -> tuple[np.ndarray, np.ndarray, int]:
    """One spectrum: rows scaled by √w (absent readings left out), scipy.optimize.nnls or
    numpy.linalg.lstsq; s² = Σ w r²/(n − p); u = √(s² diag((DᵀWD)⁻¹))."""
    keep = np.isfinite(a) & np.isfinite(w) & (w > 0)
    root = np.sqrt(w[keep])
    dw, aw = design[keep] * root[:, None], a[keep] * root
    x = nnls_free_reference(dw, aw, n_con) if method == "nnls" else \
        np.linalg.lstsq(dw, aw, rcond=None)[0]
    dof = int(keep.sum()) - design.shape[1]
    s2 = np.sum((aw - dw @ x) ** 2) / dof if dof > 0 else np.nan
    return x, np.sqrt(s2 * np.diag(np.linalg.inv(dw.T @ dw))), dof


@pytest.mark.parametrize("method", ["nnls", "ols"])
def test_weighted_fit_spectra_equals_the_per_spectrum_reference(method: str) -> None:
    """``fit_spectra(weights=w)``: coefficients, standard errors, dof and status bits of
    the weighted reference, spectrum by spectrum (scipy.optimize.nnls / numpy.linalg.lstsq
    on rows scaled by √w); weight 0 or NaN and NaN readings leave a reading out; too few
    readings, a rank-deficient pattern and a square system are flagged."""
    rng = np.random.default_rng(SEED + 90)
    n, m = 40, 50
    t = np.linspace(0.0, 1.0, m)
    design = np.hstack([np.exp(-0.5 * ((t[:, None] - np.array([0.3, 0.5, 0.7])) / 0.1) ** 2),
                        np.ones((m, 1))])
    a = rng.uniform(0, 1, (n, 3)) @ design[:, :3].T + 0.02 + 0.01 * rng.standard_normal((n, m))
    a[rng.random(a.shape) < 0.05] = np.nan
    w = rng.uniform(0.5, 2.0, (n, m)) * 1e4
    w[rng.random(w.shape) < 0.05] = 0.0
    w[3, :10] = np.nan
    a[0, 3:] = np.nan  # three readings: too few for four terms
    w[1, :] = 0.0
    w[1, [0, 1, 2, 3, 49]] = 1.0  # five readings, four terms
    a[1, [0, 1, 2, 3, 49]] = [0.1, 0.12, 0.15, 0.2, 0.05]
    a[2, :] = np.nan
    a[2, [0, 10, 24, 40]] = [0.1, 0.2, 0.3, 0.3]  # four readings, four terms: no dof
    w[2, [0, 10, 24, 40]] = 1.0
    w[4, 15:] = 0.0  # the 0.7 band is (almost) absent on 0-14: still full rank
    a[5, 30:] = np.nan
    design_dep = design.copy()
    fit = fit_spectra(a, design, 3, method, weights=w)
    assert fit.status[0] & TOO_FEW and fit.status[0] & MISSING
    assert np.isnan(fit.coef[0]).all() and fit.dof[0] == 0
    assert fit.status[2] & NO_DOF and fit.dof[2] == 0 and np.isnan(fit.std_error[2]).all()
    for i in range(1, n):
        x, se, dof = weighted_reference(design, a[i], w[i], 3, method)
        np.testing.assert_allclose(fit.coef[i], x, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(fit.std_error[i], se, rtol=1e-6)
        assert fit.dof[i] == dof
        keep = np.isfinite(a[i]) & np.isfinite(w[i]) & (w[i] > 0)
        assert bool(fit.status[i] & MISSING) == (not keep.all())
        r = np.where(keep, a[i] - design @ x, np.nan)
        np.testing.assert_allclose(fit.summary.sum_squares[i], np.nansum(r**2), rtol=1e-6,
                                   atol=1e-20)
        assert fit.summary.n_points[i] == keep.sum()
    # a column that is zero on the readings left: rank deficient
    design_dep[:, 2] = np.where(t > 0.5, design_dep[:, 2], 0.0)
    w_dep = np.where(t > 0.5, 0.0, 1.0)[None, :].repeat(2, axis=0)
    fit = fit_spectra(np.nan_to_num(a[10:12]), design_dep, 3, method, weights=w_dep)
    assert (fit.status & DEPENDENT).all() and np.isnan(fit.coef).all()


def test_weighted_fit_of_many_spectra_spans_blocks(monkeypatch) -> None:
    """Blocks of the weighted fit: a batch cut into blocks of 7 gives what one block does."""
    import mixsolve.solve.cls as cls

    rng = np.random.default_rng(SEED + 95)
    n, m = 50, 40
    t = np.linspace(0.0, 1.0, m)
    design = np.exp(-0.5 * ((t[:, None] - np.array([0.3, 0.6])) / 0.15) ** 2)
    a = rng.uniform(0, 1, (n, 2)) @ design.T + 0.01 * rng.standard_normal((n, m))
    w = rng.uniform(1.0, 3.0, (n, m))
    whole = fit_spectra(a, design, 2, "nnls", weights=w)
    monkeypatch.setattr(cls, "block_spectra", lambda m, p: 7)
    cut = fit_spectra(a, design, 2, "nnls", weights=w)
    np.testing.assert_array_equal(cut.coef, whole.coef)
    np.testing.assert_array_equal(cut.std_error, whole.std_error)


def library_of_bands() -> xr.Dataset:
    """Invented three-band library (L/(mol*cm)) on 400-700 nm, every 2 nm."""
    wl = np.arange(400.0, 700.1, 2.0)
    eps = np.vstack([h * np.exp(-0.5 * ((wl - c) / s) ** 2)
                     for h, c, s in [(1.2e4, 450, 28), (0.9e4, 530, 24), (1.5e4, 610, 30)]])
    da = xr.DataArray(eps, dims=("component", "wavelength"),
                      coords={"component": ["a", "b", "c"], "wavelength": wl})
    return ms.import_absorptivities(da, "L/(mol*cm)")


@pytest.mark.parametrize(("method", "baseline"), [("nnls", "none"), ("nnls", "offset"),
                                                  ("ols", "linear")])
def test_unmix_weights_noise_equals_the_weighted_reference(method: str, baseline: str) -> None:
    """``unmix(weights="noise", noise=...)``: the two-pass weighted fit, redone here by
    hand: an unweighted first pass (scipy.optimize.nnls / numpy.linalg.lstsq), weights
    1/σ_A² of the noise preset at its fitted absorbance, then the weighted reference per
    spectrum, rows scaled by √w. Concentrations, uncertainties (u_noise before its
    inflation f) and dof agree; a spectrum with missing readings is fitted on the rest."""
    rng = np.random.default_rng(SEED + 100)
    lib = library_of_bands()
    wl = lib["wavelength"].values
    k = lib["absorptivity"].values.T
    conc = rng.uniform(0.0, 6e-5, (12, 3))
    conc[rng.random(conc.shape) < 0.3] = 0.0
    a = conc @ k.T + 0.004 + 2e-3 * rng.standard_normal((12, wl.size))
    a[3, 40:60] = np.nan
    spectra = ms.make_spectra(a, wl)
    # the preset's noise without its stray light, which unmix would correct the readings
    # for (tests/test_stray_correction.py checks the weights of corrected readings)
    noise = dataclasses.replace(PRESETS["diode_array"], stray=0.0)
    result = ms.unmix(spectra, lib, method=method, baseline=baseline, weights="noise",
                      noise=noise)
    design = design_matrix(k, wl, baseline)
    for i in range(a.shape[0]):
        keep = np.isfinite(a[i])
        first = nnls_free_reference(design[keep], a[i][keep], 3) if method == "nnls" else \
            np.linalg.lstsq(design[keep], a[i][keep], rcond=None)[0]
        w = 1.0 / noise.sigma_absorbance(np.clip(design @ first, 0.0, None)) ** 2
        x, se, dof = weighted_reference(design, a[i], w, 3, method)
        np.testing.assert_allclose(result["concentration"].values[i], x[:3], rtol=1e-6,
                                   atol=1e-12)
        # the standard errors of independent readings, before the correlated-noise
        # inflation f (tests/external/test_newey_west.py checks f)
        f = float(result["noise_inflation"].values[i])
        np.testing.assert_allclose(result["u_noise"].values[i] / f, se[:3], rtol=1e-6)
        assert int(result["dof"].values[i]) == dof
