"""Property tests (hypothesis) of the least-squares solvers on random well-posed problems.

The properties are mathematical facts of least squares, so they hold whatever the data:
NNLS meets the Karush–Kuhn–Tucker conditions (Lawson & Hanson 1974, ch. 23); OLS residuals
are orthogonal to the design; results do not depend on wavelength order or the chosen unit;
c scales as 1/b with pathlength (Beer–Lambert, ASTM E169); a component with zero
absorptivity everywhere changes nothing else.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import mixsolve as ms
from mixsolve.solve.cls import fit_spectra

SETTINGS = settings(max_examples=25, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])


@st.composite
def problems(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A random non-negative library (well conditioned) and spectra with noise."""
    seed = draw(st.integers(0, 2**32 - 1))
    n_comp = draw(st.integers(1, 4))
    n_wl = draw(st.integers(n_comp + 2, 30))
    n_spec = draw(st.integers(1, 6))
    rng = np.random.default_rng(seed)
    eps = rng.uniform(0.0, 1.0, (n_wl, n_comp)) + np.eye(n_wl, n_comp) * 2.0
    conc = rng.uniform(-0.2, 1.0, (n_spec, n_comp))
    spectra = conc @ eps.T + rng.normal(0, 0.05, (n_spec, n_wl))
    return eps, spectra, np.arange(400.0, 400.0 + n_wl)


def _library(eps: np.ndarray, wl: np.ndarray, unit: str = "L/(mol*cm)") -> xr.Dataset:
    comps = [f"c{k}" for k in range(eps.shape[1])]
    table = xr.DataArray(eps.T, dims=("component", "wavelength"),
                         coords={"component": comps, "wavelength": wl})
    return ms.import_absorptivities(table, unit, molar_mass_g_per_mol={c: 100.0 for c in comps})


@SETTINGS
@given(problems())
def test_nnls_meets_kkt(problem):
    """KKT: c ≥ 0; gradient g = Dᵀ(Dc − a) is ≥ 0 where c = 0 and ≈ 0 where c > 0."""
    eps, spectra, _ = problem
    coef = fit_spectra(spectra, eps, eps.shape[1], "nnls").coef
    scale = np.abs(eps.T @ spectra.T).max() + 1.0
    for c, a in zip(coef, spectra, strict=True):
        grad = eps.T @ (eps @ c - a)
        assert np.all(c >= 0)
        assert np.all(grad[c == 0] >= -1e-8 * scale)
        assert np.allclose(grad[c > 0], 0.0, atol=1e-8 * scale)


@SETTINGS
@given(problems(), st.sampled_from(["none", "offset", "linear"]))
def test_ols_residual_orthogonal_to_design(problem, baseline):
    """Normal equations: Dᵀr = 0 for the OLS residual, baseline columns included."""
    eps, spectra, wl = problem
    lib = _library(eps, wl)
    if eps.shape[0] < eps.shape[1] + 3:
        return
    result = ms.unmix(ms.make_spectra(spectra, wl), lib, method="ols", baseline=baseline)
    design = np.hstack([eps] + ([np.ones((wl.size, 1))] if baseline != "none" else [])
                       + ([(wl - wl.mean())[:, None]] if baseline == "linear" else []))
    resid = result["residual"].values
    assert np.allclose(resid @ design, 0.0, atol=1e-9 * (np.abs(spectra).max() + 1) * wl.size)


@SETTINGS
@given(problems(), st.sampled_from(["ols", "nnls"]), st.integers(0, 2**32 - 1))
def test_wavelength_order_does_not_matter(problem, method, seed):
    """Shuffling the wavelength order of the input gives the same concentrations."""
    eps, spectra, wl = problem
    lib = _library(eps, wl)
    perm = np.random.default_rng(seed).permutation(wl.size)
    a = ms.unmix(ms.make_spectra(spectra, wl), lib, method=method)
    b = ms.unmix(ms.make_spectra(spectra[:, perm], wl[perm]), lib, method=method)
    np.testing.assert_allclose(a["concentration"].values, b["concentration"].values,
                               rtol=1e-9, atol=1e-12)


@SETTINGS
@given(problems(), st.sampled_from(["ols", "nnls"]))
def test_unit_choice_does_not_change_the_result(problem, method):
    """mmol/L results are 1000 × mol/L; µg/mL via molar mass 100 g/mol is 10⁵ × mol/L."""
    eps, spectra, wl = problem
    lib = _library(eps, wl)
    sp = ms.make_spectra(spectra, wl)
    base = ms.unmix(sp, lib, method=method)["concentration"].values
    milli = ms.unmix(sp, lib, method=method, unit="mmol/L")["concentration"].values
    mass = ms.unmix(sp, lib, method=method, unit="ug/mL")["concentration"].values
    np.testing.assert_allclose(milli, 1000 * base, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(mass, 100 * 1000 * base, rtol=1e-12, atol=1e-12)


@SETTINGS
@given(problems(), st.floats(0.05, 20.0), st.sampled_from(["ols", "nnls"]))
def test_pathlength_scales_concentrations_inversely(problem, factor, method):
    """Beer–Lambert: the same absorbance in an f-times longer cell means c/f."""
    eps, spectra, wl = problem
    lib = _library(eps, wl)
    sp = ms.make_spectra(spectra, wl)
    one = ms.unmix(sp, lib, method=method, pathlength_cm=1.0)
    scaled = ms.unmix(sp, lib, method=method, pathlength_cm=factor)
    np.testing.assert_allclose(scaled["concentration"].values,
                               one["concentration"].values / factor, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(scaled["std_uncertainty"].values,
                               one["std_uncertainty"].values / factor, rtol=1e-9)


@SETTINGS
@given(problems(), st.sampled_from(["ols", "nnls"]), st.integers(0, 2**32 - 1))
def test_absent_component_changes_nothing(problem, method, seed):
    """Adding to the library a component that contributes zero absorbance to the sample.

    For noise-free spectra the other concentrations are unchanged and the added one comes
    out 0. (A component with ε = 0 at every used wavelength is refused as unidentifiable:
    see test_solve.)
    """
    eps, spectra, wl = problem
    rng = np.random.default_rng(seed)
    conc = rng.uniform(0.1, 1.0, (spectra.shape[0], eps.shape[1]))
    clean = conc @ eps.T
    extra = rng.uniform(0.0, 1.0, (wl.size, 1)) + np.eye(wl.size, 1, k=-eps.shape[1]) * 2.0
    sp = ms.make_spectra(clean, wl)
    a = ms.unmix(sp, _library(eps, wl), method=method)["concentration"].values
    b = ms.unmix(sp, _library(np.hstack([eps, extra]), wl), method=method)
    np.testing.assert_allclose(b["concentration"].values[:, :-1], a, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(b["concentration"].values[:, -1], 0.0, atol=1e-9)
