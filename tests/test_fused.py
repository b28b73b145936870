"""The compiled one-pass fit (mixsolve.solve.fused) against reference solvers and numpy.

References (CHECKS.md, "Non-negative least squares"): ``scipy.optimize.nnls`` (Lawson &
Hanson 1974, ch. 23) and ``scipy.optimize.lsq_linear`` (bounded least squares, for free
baseline terms) per spectrum, ``numpy.linalg.lstsq`` for OLS; the KKT conditions with the
tolerance mixsolve.solve.engine states (tests/helpers_nnls.py). The residual summaries are
checked against their definitions evaluated here on explicit residuals, and the compiled
engine against the numpy engine (both must give the same minimiser). Problems are
invented and seeded. Skipped where numba is not installed.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from helpers_nnls import PROBLEM_SHAPES, bands, kkt_ratio, problem, scipy_loop
from scipy.optimize import lsq_linear

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.solve import cls, engine
from mixsolve.solve.batch import nnls_batch
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.engine import ENGINE_VARIABLE, choose_engine

pytest.importorskip("numba")

from mixsolve.solve import fused  # after the skip above: needs numba


def both(spectra: np.ndarray, design: np.ndarray, n_con: int, method: str = "nnls"
         ) -> tuple[cls.Fit, cls.Fit]:
    """The same fit by the compiled and the numpy engine."""
    return (fit_spectra(spectra, design, n_con, method, engine="compiled"),
            fit_spectra(spectra, design, n_con, method, engine="numpy"))


def summary_by_definition(values: np.ndarray, residual: np.ndarray) -> dict[str, np.ndarray]:
    """Σr², Σrᵢrᵢ₊₁, counts of r > 0 and r ≠ 0, sign changes between non-zero residuals,
    extremes of the reading: evaluated spectrum by spectrum, as the runs test defines them."""
    out: dict[str, list[float]] = {k: [] for k in ("sum_squares", "lag_sum", "n_positive",
                                                    "n_nonzero", "sign_changes",
                                                    "absorbance_max", "absorbance_min")}
    for a, r in zip(values, residual, strict=True):
        signs = np.sign(r[r != 0])
        out["sum_squares"].append(float(np.sum(r**2)))
        out["lag_sum"].append(float(np.sum(r[:-1] * r[1:])))
        out["n_positive"].append(float(np.sum(signs > 0)))
        out["n_nonzero"].append(float(signs.size))
        out["sign_changes"].append(float(np.sum(signs[1:] != signs[:-1])))
        out["absorbance_max"].append(float(a.max()))
        out["absorbance_min"].append(float(a.min()))
    return {k: np.array(v) for k, v in out.items()}


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize(("m", "p", "n"), PROBLEM_SHAPES)
def test_compiled_nnls_matches_scipy_and_kkt_holds(seed: int, m: int, p: int, n: int) -> None:
    """Random problems: the minimiser of scipy.optimize.nnls, KKT within τ, = numpy engine."""
    rng = np.random.default_rng(2000 + seed)
    design, spectra = problem(rng, m, p, n)
    compiled, numpy_fit = both(spectra, design, p)
    want = scipy_loop(design, spectra)
    scale = np.abs(want).max()
    np.testing.assert_allclose(compiled.coef, want, rtol=1e-8, atol=1e-10 * scale)
    np.testing.assert_array_equal(compiled.coef == 0, want == 0)
    assert kkt_ratio(design, spectra, compiled.coef, p) <= 1.0
    np.testing.assert_allclose(compiled.coef, numpy_fit.coef, rtol=1e-9, atol=1e-12 * scale)
    np.testing.assert_allclose(compiled.std_error, numpy_fit.std_error, rtol=1e-8)


@pytest.mark.parametrize("n_free", [1, 2])
def test_free_baseline_columns_match_bounded_least_squares(rng: np.random.Generator,
                                                           n_free: int) -> None:
    """Free trailing columns (offset, slope): scipy.optimize.lsq_linear with those unbounded."""
    design, spectra = problem(rng, 120, 4, 80)
    t = np.linspace(-1.0, 1.0, 120)
    extra = np.stack([np.ones(120), t][:n_free], axis=1)
    full = np.hstack([design, extra])
    spectra = spectra + 0.05 - 0.1 * rng.random((80, 1))
    fit = fit_spectra(spectra, full, 4, "nnls", engine="compiled")
    lower = np.r_[np.zeros(4), np.full(n_free, -np.inf)]
    for a, got in zip(spectra, fit.coef, strict=True):
        want = lsq_linear(full, a, bounds=(lower, np.inf), tol=1e-14, method="bvls").x
        np.testing.assert_allclose(got, want, rtol=1e-7, atol=1e-9)
    assert kkt_ratio(full, spectra, fit.coef, 4) <= 1.0


def test_compiled_ols_matches_lstsq(rng: np.random.Generator) -> None:
    """OLS: numpy.linalg.lstsq per spectrum (negative coefficients allowed)."""
    design, spectra = problem(rng, 60, 4, 100, noise=0.2)
    fit = fit_spectra(spectra, design, 4, "ols", engine="compiled")
    want = np.linalg.lstsq(design, spectra.T, rcond=None)[0].T
    assert (want < 0).any()
    np.testing.assert_allclose(fit.coef, want, rtol=1e-9, atol=1e-12)


def test_degenerate_problems(rng: np.random.Generator) -> None:
    """Zero spectra give zero; spectra below every band drive all components to zero; one
    component only; nearly collinear columns: all as scipy.optimize.nnls."""
    design, spectra = problem(rng, 80, 3, 30)
    spectra[:5] = 0.0
    spectra[5:10] = -np.abs(spectra[5:10])
    fit = fit_spectra(spectra, design, 3, "nnls", engine="compiled")
    assert np.all(fit.coef[:10] == 0)
    np.testing.assert_allclose(fit.coef, scipy_loop(design, spectra), atol=1e-10)
    one = design[:, :1]
    got = fit_spectra(spectra, one, 1, "nnls", engine="compiled").coef
    np.testing.assert_allclose(got, scipy_loop(one, spectra), atol=1e-10)
    close = np.hstack([design[:, :1], design[:, :1] * 1.001 + 1e-3 * design[:, 1:2]])
    got = fit_spectra(spectra, close, 2, "nnls", engine="compiled").coef
    assert kkt_ratio(close, spectra, got, 2) <= 1.0


def test_residual_summary_equals_its_definition(rng: np.random.Generator) -> None:
    """Every field of the summary equals its definition on the explicit residual, exact
    zeros included (all-zero and partly-zero residuals of spectra fitted by zero)."""
    design, spectra = problem(rng, 90, 4, 300, noise=0.02)
    spectra[:3] = 0.0  # residual all zero: no signs at all
    spectra[3:6] = -np.abs(spectra[3:6])  # fitted by zero: residual = the spectrum ...
    spectra[3:6, ::7] = 0.0  # ... with exact zeros among its signs
    fit = fit_spectra(spectra, design, 4, "nnls", engine="compiled")
    residual = spectra - fit.coef @ design.T
    want = summary_by_definition(spectra, residual)
    for name, value in want.items():
        got = getattr(fit.summary, name)
        if name in ("sum_squares", "lag_sum"):
            np.testing.assert_allclose(got, value, rtol=1e-10, atol=1e-14, err_msg=name)
        else:
            np.testing.assert_array_equal(got, value, err_msg=name)
    np.testing.assert_array_equal(fit.summary.n_points, 90.0)


def test_rows_with_missing_or_infinite_readings(rng: np.random.Generator) -> None:
    """A NaN row is fitted on its readings (as the numpy engine does); infinity is refused
    with check_spectra's message."""
    design, spectra = problem(rng, 50, 3, 40)
    spectra[4, 7] = np.nan
    compiled, numpy_fit = both(spectra, design, 3)
    np.testing.assert_allclose(compiled.coef, numpy_fit.coef, rtol=1e-9, atol=1e-13)
    np.testing.assert_array_equal(compiled.status, numpy_fit.status)
    assert compiled.summary.n_points[4] == 49
    spectra[9, 3] = np.inf
    with pytest.raises(InputError, match=r"spectra: absorbance values include infinity; use "
                                         r"NaN for a missing reading"):
        fit_spectra(spectra, design, 3, "nnls", engine="compiled")


def test_rows_at_the_iteration_limit_are_finished_by_numpy(
        rng: np.random.Generator, monkeypatch: pytest.MonkeyPatch) -> None:
    """With no outer iterations allowed, rows needing them come back marked and the numpy
    solver (with its scipy fallback) finishes them: still scipy's minimiser."""
    design, spectra = problem(rng, 60, 5, 200)
    original = fused.fit_rows
    limited = []

    def no_iterations(*args: object, **options: object) -> None:
        args = list(args)
        args[11] = 0  # max_iter
        original(*args, **options)
        state = args[14 + len(fused.SUMMARY_FIELDS)]  # after coef and the summary fields
        limited.append(int(np.sum(state == engine.ROW_ITERATION_LIMIT)))

    monkeypatch.setattr(fused, "fit_rows", no_iterations)
    got = fit_spectra(spectra, design, 5, "nnls", engine="compiled").coef
    assert limited and limited[0] > 0
    np.testing.assert_allclose(got, scipy_loop(design, spectra), rtol=1e-8, atol=1e-11)


def test_non_contiguous_spectra(rng: np.random.Generator) -> None:
    """Strided rows (a window of wider spectra) give the result of a contiguous copy."""
    design, spectra = problem(rng, 40, 3, 60)
    wide = np.zeros((60, 100))
    wide[:, 30:70] = spectra
    view = wide[:, 30:70]
    assert not view.flags.c_contiguous
    a = fit_spectra(view, design, 3, "nnls", engine="compiled")
    b = fit_spectra(np.ascontiguousarray(view), design, 3, "nnls", engine="compiled")
    np.testing.assert_array_equal(a.coef, b.coef)


def test_subset_factors_limit() -> None:
    """More than MAX_CONSTRAINED constrained columns is refused (numpy fits those)."""
    k = fused.MAX_CONSTRAINED + 1
    r = np.triu(np.ones((k, k))) + np.eye(k)
    with pytest.raises(ValueError, match="constrained columns"):
        fused.subset_factors(r, np.ones(k, dtype=bool))


def test_many_components_fall_back_to_numpy(rng: np.random.Generator) -> None:
    """A design beyond the compiled limits is still solved (by numpy): scipy's minimiser
    for NNLS, numpy.linalg.lstsq for OLS with many more terms (whose passive-set tables,
    2^p entries, would not fit in memory)."""
    p = fused.MAX_CONSTRAINED + 2
    design, spectra = problem(rng, 80, p, 40)
    got = fit_spectra(spectra, design, p, "nnls", engine="compiled").coef
    np.testing.assert_allclose(got, scipy_loop(design, spectra), rtol=1e-8, atol=1e-10)
    design = bands(200, list(np.linspace(0.05, 0.95, 30)), width=0.02)  # well separated
    spectra = rng.normal(0.0, 1.0, (40, 30)) @ design.T + 0.01 * rng.standard_normal((40, 200))
    got = fit_spectra(spectra, design, 30, "ols", engine="compiled").coef
    want = np.linalg.lstsq(design, spectra.T, rcond=None)[0].T
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-9 * np.abs(want).max())
    with pytest.raises(ValueError, match="constrained columns"):
        fused.subset_factors(np.eye(fused.MAX_TERMS + 1), np.zeros(fused.MAX_TERMS + 1, bool))


# --- engine choice -------------------------------------------------------------------------

def test_engine_choice(monkeypatch: pytest.MonkeyPatch) -> None:
    """auto: compiled from COMPILED_MIN_SPECTRA spectra; MIXSOLVE_ENGINE forces either;
    anything else there is refused in one line."""
    monkeypatch.delenv(ENGINE_VARIABLE, raising=False)
    assert choose_engine("auto", engine.COMPILED_MIN_SPECTRA) == "compiled"
    assert choose_engine("auto", engine.COMPILED_MIN_SPECTRA - 1) == "numpy"
    assert choose_engine("numpy", 10**6) == "numpy"
    monkeypatch.setenv(ENGINE_VARIABLE, "numpy")
    assert choose_engine("auto", 10**6) == "numpy"
    monkeypatch.setenv(ENGINE_VARIABLE, "compiled")
    assert choose_engine("auto", 3) == "compiled"
    monkeypatch.setenv(ENGINE_VARIABLE, "gpu")
    with pytest.raises(InputError, match=r"MIXSOLVE_ENGINE: 'gpu' is not 'numpy' or "
                                         r"'compiled'"):
        choose_engine("auto", 3)


def test_compiled_engine_without_numba(monkeypatch: pytest.MonkeyPatch) -> None:
    """Without numba, auto falls back to numpy and an explicit request says what to install."""
    monkeypatch.setitem(__import__("sys").modules, "numba", None)
    monkeypatch.delenv(ENGINE_VARIABLE, raising=False)
    assert choose_engine("auto", 10**6) == "numpy"
    with pytest.raises(InputError, match=r"the compiled engine needs numba, which is not "
                                         r"installed: pip install 'mixsolve\[fast\]'"):
        choose_engine("compiled", 10)


def test_unmix_gives_the_same_result_with_either_engine(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """A whole unmix (baseline, noise model, NaN readings) by either engine: the same
    concentrations, uncertainties, trust figures and flags."""
    rng = np.random.default_rng(5)
    wl = np.linspace(400.0, 700.0, 151)
    eps = np.stack([1e4 * np.exp(-0.5 * ((wl - c) / 30.0) ** 2) for c in (450, 540, 620)])
    lib = ms.import_absorptivities(
        xr.DataArray(eps, dims=("component", "wavelength"),
                     coords={"component": ["ochre", "plum", "jade"], "wavelength": wl}),
        "L/(mol*cm)")
    conc = rng.uniform(0, 8e-5, (3000, 3))
    conc[rng.random(conc.shape) < 0.3] = 0
    values = conc @ eps + 0.003 * rng.standard_normal((3000, wl.size)) + 0.01
    values[7, 11] = np.nan
    spectra = ms.make_spectra(values, wl)
    results = {}
    for which in ("numpy", "compiled"):
        monkeypatch.setenv(ENGINE_VARIABLE, which)
        results[which] = ms.unmix(spectra, lib, baseline="offset", noise=0.003)
    a, b = results["numpy"], results["compiled"]
    for name in ("concentration", "std_uncertainty", "rms_residual", "runs_z",
                 "lack_of_fit_ratio", "shift_bias_per_nm"):
        np.testing.assert_allclose(a[name].values, b[name].values, rtol=1e-8, atol=1e-15,
                                   err_msg=name)
    np.testing.assert_allclose(a["residual_lag1"].values, b["residual_lag1"].values,
                               atol=1e-10)
    np.testing.assert_array_equal(a["flags"].values, b["flags"].values)
    np.testing.assert_array_equal(a["status"].values, b["status"].values)


def test_nnls_batch_compiled_matches_scipy(rng: np.random.Generator) -> None:
    """nnls_batch with the compiled engine, split among threads: scipy's minimiser, KKT
    within τ; rows at the iteration limit are finished by the numpy steps."""
    design, spectra = problem(rng, 70, 5, 600)
    sol = nnls_batch(design, spectra, 5, engine="compiled", threads=3)
    want = scipy_loop(design, spectra)
    np.testing.assert_allclose(sol.x, want, rtol=1e-8, atol=1e-11)
    assert kkt_ratio(design, spectra, sol.x, 5) <= 1.0
    limited = nnls_batch(design, spectra, 5, engine="compiled", max_iter=0)
    np.testing.assert_allclose(limited.x, want, rtol=1e-8, atol=1e-11)
    assert limited.n_fallback > 0
