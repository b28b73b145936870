"""Wavelength-shift sensitivity (mixsolve.solve.shift_sensitivity) and the shift fit
(mixsolve.solve.shift_fit, ``unmix(fit_shift=True)``).

The library is made of invented Gaussian bands on a fine 0.5 nm grid so that the "truth"
can be evaluated analytically at any shifted wavelength; noise is seeded.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from helpers_nnls import nnls_free_reference

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.solve.shift_sensitivity import library_derivative, shift_matrix
from mixsolve.wavelengths.check import check_wavelengths

SEED = 808
#: Invented bands: (height L/(mol*cm), centre nm, width nm) per component.
BANDS = {"amber": (1.2e4, 460.0, 25.0), "rose": (1.0e4, 530.0, 22.0),
         "teal": (1.4e4, 610.0, 30.0)}
LIB_WL = np.arange(380.0, 720.01, 0.5)
MEAS_WL = np.arange(400.0, 700.01, 1.0)
CONC = np.array([4e-5, 3e-5, 5e-5])  # mol/L; peaks ≈ 0.5-0.8 AU at 1 cm


def eps_at(wl: np.ndarray, names: list[str] | None = None) -> np.ndarray:
    """Analytic absorptivities (component, wavelength) of the invented bands at ``wl``."""
    names = list(BANDS) if names is None else names
    return np.vstack([h * np.exp(-0.5 * ((wl - c) / w) ** 2)
                      for h, c, w in (BANDS[n] for n in names)])


def make_library(names: list[str] | None = None, wl: np.ndarray = LIB_WL) -> xr.Dataset:
    """Library of the invented bands on ``wl`` (default 380-720 nm every 0.5 nm)."""
    names = list(BANDS) if names is None else names
    da = xr.DataArray(eps_at(wl, names), dims=("component", "wavelength"),
                      coords={"component": names, "wavelength": wl})
    return ms.import_absorptivities(da, "L/(mol*cm)")


def shifted_spectra(conc: np.ndarray, shifts: list[float], noise: float = 0.0,
                    seed: int = SEED, wl: np.ndarray = MEAS_WL) -> xr.DataArray:
    """Spectra whose true wavelength is λ + δ: A(λ) = Σ cₖ εₖ(λ + δ), one row per δ."""
    rng = np.random.default_rng(seed)
    rows = np.vstack([np.atleast_2d(conc)[i % len(np.atleast_2d(conc))] @ eps_at(wl + d)
                      for i, d in enumerate(shifts)])
    return ms.make_spectra(rows + noise * rng.standard_normal(rows.shape), wl)


@pytest.fixture(scope="module")
def library() -> xr.Dataset:
    """Three-component Gaussian library on a 0.5 nm grid."""
    return make_library()


# --- shift sensitivity ---------------------------------------------------------------------

def test_band_maxima_are_insensitive_and_shoulders_are_sensitive(library):
    """At the band maxima ε′ ≈ 0, so a shift costs nothing to first order; one band width
    off the centre |ε′/ε| = 1/w, so the self-sensitivity is near ±1/w per nm.
    """
    maxima = check_wavelengths(library, wavelengths=[460, 530, 610])
    low_side = check_wavelengths(library, wavelengths=[435, 508, 580])
    at_max = np.abs(maxima["shift_sensitivity"].values)
    at_shoulder = np.abs(low_side["shift_sensitivity"].values)
    assert np.all(at_max < 0.005), at_max
    assert np.all(at_shoulder > 10 * at_max.max())
    widths = np.array([b[2] for b in BANDS.values()])
    np.testing.assert_allclose(at_shoulder, 1 / widths, rtol=0.05)
    # a wavelength on the short side of a band reads high for a +1 nm error (ε rising)
    assert np.all(low_side["shift_sensitivity"].values > 0)


def test_shoulders_of_a_pair_are_riskier_than_their_maxima():
    """Two well-separated components checked alone at two wavelengths."""
    lib = make_library(["amber", "teal"])
    peaks = check_wavelengths(lib, wavelengths=[460, 610])
    shoulders = check_wavelengths(lib, wavelengths=[430, 650])
    assert np.all(np.abs(shoulders["shift_sensitivity"].values)
                  > 5 * np.abs(peaks["shift_sensitivity"].values))


def _finite_difference_shift(lib: xr.Dataset, wavelengths: list[float] | None,
                             window: tuple[float, float] | None, h: float = 0.01
                             ) -> np.ndarray:
    """∂c/∂δ per unit of each source component by re-solving shifted spectra (±h nm)."""
    names = [str(c) for c in lib["component"].values]
    n = len(names)
    scale = 1e-4  # mol/L of the source component
    out = np.empty((n, n))
    for j in range(n):
        conc = np.zeros(n)
        conc[j] = scale
        fits = []
        for d in (h, -h):
            spectra = ms.make_spectra(conc @ eps_at(MEAS_WL + d, names), MEAS_WL)
            res = ms.unmix(spectra, lib, method="ols", wavelengths=wavelengths, window=window)
            fits.append(res["concentration"].values[0])
        out[:, j] = (fits[0] - fits[1]) / (2 * h) / scale
    return out


@pytest.mark.parametrize(("wavelengths", "window"), [
    ([435.0, 470.0, 508.0, 560.0, 640.0], None),
    (None, (420.0, 680.0)),
])
def test_shift_matrix_equals_a_finite_difference_estimate(library, wavelengths, window):
    """S = D⁺K′ against re-solving spectra shifted by ±0.01 nm, to a few per cent of the
    largest entry (the analytic bands vs the library's gradient on its 0.5 nm grid).
    """
    check = check_wavelengths(library, wavelengths=wavelengths, window=window)
    fd = _finite_difference_shift(library, wavelengths, window)
    s = check["shift_matrix"].transpose("component", "source").values
    np.testing.assert_allclose(s, fd, rtol=0.03, atol=0.03 * np.abs(fd).max())
    np.testing.assert_allclose(check["shift_sensitivity"].values, np.diag(fd), rtol=0.03,
                               atol=0.03 * np.abs(fd).max())


def test_library_derivative_is_the_slope_of_the_library():
    """dε/dλ on the grid (interpolated to the wavelengths asked for) against the analytic
    derivative of a Gaussian; NaN for a library with fewer than 3 wavelengths.
    """
    h, c, w = BANDS["rose"]
    at = np.array([500.0, 512.25, 530.0, 551.0])
    slope = library_derivative(eps_at(LIB_WL, ["rose"]), LIB_WL, at)
    exact = -h * (at - c) / w**2 * np.exp(-0.5 * ((at - c) / w) ** 2)
    np.testing.assert_allclose(slope[:, 0], exact, rtol=0.01, atol=1e-3 * h / w)
    short = library_derivative(np.ones((2, 2)), np.array([500.0, 510.0]), at)
    assert short.shape == (4, 2) and np.isnan(short).all()


def test_shift_matrix_is_pinv_times_derivative():
    """shift_matrix(D, K′) = D⁺K′ for a small hand-built system."""
    d = np.array([[1.0, 0.2], [0.4, 1.0], [0.3, 0.3]])
    kp = np.array([[0.01, -0.02], [0.0, 0.03], [-0.01, 0.0]])
    np.testing.assert_allclose(shift_matrix(d, kp), np.linalg.lstsq(d, kp, rcond=None)[0],
                               rtol=1e-12)


def test_discrete_library_has_no_shift_sensitivity():
    """A two-wavelength library carries no slope: NaN and a note saying so."""
    lib = make_library(["amber", "teal"], wl=np.array([460.0, 610.0]))
    check = check_wavelengths(lib)
    assert np.isnan(check["shift_sensitivity"].values).all()
    assert any("shift sensitivity not available" in n for n in check.attrs["notes"])


def test_unmix_shift_bias_is_the_shift_matrix_times_the_concentrations(library):
    """``shift_bias_per_nm`` = S·c at the fitted composition, in the result unit."""
    wl = [435.0, 470.0, 508.0, 560.0, 640.0]
    spectra = shifted_spectra(CONC, [0.0])
    res = ms.unmix(spectra, library, method="ols", wavelengths=wl)
    s = check_wavelengths(library, wavelengths=wl)["shift_matrix"].values
    expected = s @ res["concentration"].values[0]
    np.testing.assert_allclose(res["shift_bias_per_nm"].values[0], expected, rtol=1e-9)
    assert res["shift_bias_per_nm"].attrs["units"] == "mol/L per nm"


def test_shift_risk_run_note_follows_the_wavelength_tolerance(library):
    """Shoulder wavelengths give the run note ``shift_risk`` once when a large wavelength
    error is assumed (2 nm), not when the instrument is perfect (0 nm); maxima never do.
    No row carries ``shift_sensitive`` any more (issue 15: a design-wide risk).
    """
    from mixsolve.flags import run_notes_of

    spectra = shifted_spectra(CONC, [0.0, 0.0, 0.0], noise=1e-4)
    shoulders = [430.0, 435.0, 500.0, 505.0, 640.0, 645.0]
    maxima = [459.0, 460.0, 461.0, 529.0, 530.0, 531.0, 609.0, 610.0, 611.0]
    loose = ms.unmix(spectra, library, method="ols", wavelengths=shoulders,
                     wavelength_tolerance_nm=2.0)
    strict = ms.unmix(spectra, library, method="ols", wavelengths=shoulders,
                      wavelength_tolerance_nm=0.0)
    peaks = ms.unmix(spectra, library, method="ols", wavelengths=maxima,
                     wavelength_tolerance_nm=2.0)
    notes = run_notes_of(loose.attrs)
    assert [n.code for n in notes] == ["shift_risk"]  # once for the run, not per row
    assert notes[0].text.startswith("a wavelength error of 2 nm would move ")
    assert "--fit-shift" in notes[0].fix
    assert not any("shift_sensitive" in str(f) for f in loose["flags"].values)
    assert run_notes_of(strict.attrs) == []
    assert run_notes_of(peaks.attrs) == []
    # the size said is the largest |S c|·tol/c over the quantified results
    conc, bias = loose["concentration"].values, loose["shift_bias_per_nm"].values
    worst = np.max(np.abs(bias) * 2.0 / conc, axis=0)
    k = int(np.argmax(worst))
    assert f"{loose.component.values[k]} by up to {100 * worst[k]:.2g} %" in notes[0].text
    assert loose.attrs["wavelength_tolerance_nm"] == 2.0
    with pytest.raises(InputError, match=r"wavelength_tolerance_nm: -1 nm is not a number ≥ 0"):
        ms.unmix(spectra, library, wavelength_tolerance_nm=-1.0)


# --- fit_shift -----------------------------------------------------------------------------

def test_fit_shift_recovers_known_offsets_and_improves_concentrations(library):
    """Spectra at λ + δ (δ = +0.8, −1.5, 0 nm, noise 0.001 AU): the fitted δ lies within
    3 u(δ) of the truth, and the concentrations of the shifted samples are at least 3×
    closer to the truth than without the shift term (about 13-80× for these seeds).
    """
    shifts = [0.8, -1.5, 0.0]
    spectra = shifted_spectra(CONC, shifts, noise=1e-3)
    # 420-600 nm sees teal only on its rising side, where a shift matters most
    fitted = ms.unmix(spectra, library, window=(420, 600), fit_shift=True)
    plain = ms.unmix(spectra, library, window=(420, 600))
    delta = fitted["wavelength_shift_nm"].values
    u = fitted["u_wavelength_shift_nm"].values
    assert np.all(np.isfinite(u)) and np.all(u > 0) and np.all(u < 0.1)
    assert np.all(np.abs(delta - shifts) < 3 * u), (delta, u)
    err_fit = np.abs(fitted["concentration"].values - CONC) / CONC
    err_plain = np.abs(plain["concentration"].values - CONC) / CONC
    for i in (0, 1):  # the shifted samples
        assert err_fit[i].max() < err_plain[i].max() / 3, (err_fit[i], err_plain[i])
    assert err_fit.max() < 0.01
    assert fitted["wavelength_shift_nm"].attrs["units"] == "nm"
    assert fitted.attrs["fit_shift"] == 1 and plain.attrs["fit_shift"] == 0
    assert "wavelength_shift_nm" not in plain
    # the shift costs one degree of freedom
    np.testing.assert_array_equal(fitted["dof"].values, plain["dof"].values - 1)


def test_fit_shift_is_exact_on_noiseless_spectra(library):
    """Without noise the offset is found to 0.01 nm (library interpolation limits it)."""
    spectra = shifted_spectra(CONC, [1.2, -0.4])
    fitted = ms.unmix(spectra, library, method="ols", window=(420, 680), fit_shift=True)
    np.testing.assert_allclose(fitted["wavelength_shift_nm"].values, [1.2, -0.4], atol=0.01)
    np.testing.assert_allclose(fitted["concentration"].values, np.vstack([CONC, CONC]),
                               rtol=2e-3)


def test_shift_uncertainty_matches_the_spread_of_replicates(library):
    """u(δ) is the linearised standard uncertainty: across 40 seeded replicates the SD of
    the fitted δ agrees with the mean reported u(δ) within 35 %, and the mean δ with the
    truth within 4 standard errors.
    """
    spectra = shifted_spectra(np.tile(CONC, (40, 1)), [-0.7] * 40, noise=2e-3, seed=SEED + 5)
    fitted = ms.unmix(spectra, library, method="ols", window=(420, 680), fit_shift=True)
    delta = fitted["wavelength_shift_nm"].values
    u = fitted["u_wavelength_shift_nm"].values
    assert np.std(delta, ddof=1) == pytest.approx(u.mean(), rel=0.35)
    assert abs(delta.mean() + 0.7) < 4 * u.mean() / np.sqrt(40)


def test_fit_shift_with_an_offset_baseline(library):
    """The shift fit works with baseline terms: offset and δ recovered together."""
    spectra = shifted_spectra(CONC, [0.6])
    spectra = spectra + 0.02
    fitted = ms.unmix(spectra, library, window=(420, 680), fit_shift=True, baseline="offset",
                      method="ols")
    assert float(fitted["wavelength_shift_nm"].values[0]) == pytest.approx(0.6, abs=0.02)
    assert float(fitted["baseline"].values[0, 0]) == pytest.approx(0.02, abs=1e-3)


def test_fit_shift_refuses_a_window_that_leaves_the_library(library):
    """λ ± max_shift must stay inside the library; the message gives the window to use."""
    spectra = shifted_spectra(CONC, [0.0], wl=np.arange(380.0, 720.01, 1.0))
    with pytest.raises(InputError, match=r"fit_shift: the used wavelengths 380-700 nm ± 3 nm "
                                         r"reach outside the library \(380-720 nm\); narrow "
                                         r"the window to 383-717 nm"):
        ms.unmix(spectra, library, window=(380, 700), fit_shift=True)
    with pytest.raises(InputError, match=r"reach outside the library"):
        ms.unmix(spectra, library, window=(400, 716), fit_shift=True, max_shift_nm=5.0)
    ms.unmix(spectra, library, window=(400, 715), fit_shift=True, max_shift_nm=5.0)


@pytest.mark.parametrize(("bad", "message"), [
    (0.0, "0 nm is not a positive number"), (-1.0, "-1 nm is not a positive number"),
    (float("nan"), "nan nm is not a finite number")])
def test_fit_shift_refuses_a_non_positive_search_bound(library, bad, message):
    """max_shift_nm must be a positive number."""
    spectra = shifted_spectra(CONC, [0.0])
    with pytest.raises(InputError, match=rf"max_shift_nm: {message}"):
        ms.unmix(spectra, library, window=(420, 680), fit_shift=True, max_shift_nm=bad)


def test_fit_shift_needs_a_library_with_slopes():
    """A library given at two discrete wavelengths carries no slope: refused clearly."""
    lib = make_library(["amber", "teal"], wl=np.array([460.0, 610.0]))
    spectra = ms.make_spectra(np.array([[0.5, 0.6]]), [460.0, 610.0])
    with pytest.raises(InputError, match=r"fit_shift: the library has fewer than 3 "
                                         r"wavelengths"):
        ms.unmix(spectra, lib, fit_shift=True)


def test_fit_shift_with_noise_weights_is_refused(library):
    """The shift search is unweighted, so asking for both is an error, not a silent drop."""
    from mixsolve.errors import InputError

    spectra = shifted_spectra(np.full((1, len(BANDS)), 1e-5), [0.5])
    with pytest.raises(InputError, match=r"fit_shift: .* cannot be combined with "
                                         r"weights='noise'"):
        ms.unmix(spectra, library, fit_shift=True, weights="noise",
                 noise="benchtop_double_beam")


# --- the batched shift fit against a per-spectrum reference ----------------------------------

#: Known shifts (nm), kept ≥ 0.1 nm away from multiples of 0.5 nm: there the 1 nm readings
#: and the 0.5 nm library grid put a kink of the linear interpolation in every row at once,
#: which can split a minimum into two within 1e-3 nm (both searches then stop in either).
KNOWN_SHIFTS = [0.83, -1.37, 2.21, -2.62, 0.23, 1.66]
FIT_WL = np.arange(420.0, 680.01, 1.0)


def reference_shift_fit(a: np.ndarray, method: str, baseline: str, max_shift: float = 3.0
                        ) -> tuple[np.ndarray, ...]:
    """One spectrum, from the model definition (module docstring of shift_fit): RSS(δ)
    over the readings present, library interpolated by ``numpy.interp`` at λ + δ, the
    linear part by ``scipy.optimize.nnls`` (free baseline projected out) or
    ``numpy.linalg.lstsq``; δ by ``scipy.optimize.minimize_scalar`` (bounded, xatol 1e-4,
    as the per-spectrum implementation did); u from s²([D | J]ᵀ[D | J])⁻¹,
    s² = RSS/(n − p − 1), J = Σₖ xₖ εₖ′(λ + δ).
    Returns δ, coefficients, their standard errors and u(δ)."""
    from scipy.optimize import minimize_scalar

    from mixsolve.solve.design import design_matrix

    eps = eps_at(LIB_WL)
    keep = np.isfinite(a)
    n = eps.shape[0]

    def design(delta: float) -> np.ndarray:
        k = np.stack([np.interp(FIT_WL + delta, LIB_WL, row) for row in eps], axis=1)
        return design_matrix(k, FIT_WL, baseline)

    def solve(d: np.ndarray) -> np.ndarray:
        if method == "nnls":
            return nnls_free_reference(d[keep], a[keep], n)
        return np.linalg.lstsq(d[keep], a[keep], rcond=None)[0]

    def rss(delta: float) -> float:
        d = design(delta)
        return float(np.sum((a[keep] - d[keep] @ solve(d)) ** 2))

    delta = float(minimize_scalar(rss, bounds=(-max_shift, max_shift), method="bounded",
                                  options={"xatol": 1e-4}).x)
    d = design(delta)
    x = solve(d)
    slope = np.gradient(eps, LIB_WL, axis=1)
    jac = np.stack([np.interp(FIT_WL + delta, LIB_WL, s) for s in slope], axis=1) @ x[:n]
    full = np.hstack([d, jac[:, None]])[keep]
    s2 = rss(delta) / (keep.sum() - d.shape[1] - 1)
    sd = np.sqrt(s2 * np.diag(np.linalg.inv(full.T @ full)))
    return delta, x, sd[:-1], sd[-1]


def known_spectra(noise: float, seed: int = SEED + 11, offset: float = 0.01) -> np.ndarray:
    """One spectrum per known shift, compositions varied (one component absent in two),
    plus a constant ``offset`` (AU)."""
    rng = np.random.default_rng(seed)
    conc = CONC * rng.uniform(0.5, 1.5, (len(KNOWN_SHIFTS), 3))
    conc[1, 0] = conc[4, 2] = 0.0
    rows = np.vstack([c @ eps_at(FIT_WL + d) for c, d in zip(conc, KNOWN_SHIFTS, strict=True)])
    return rows + offset + noise * rng.standard_normal(rows.shape)


def batched(a: np.ndarray, method: str, baseline: str, max_shift: float = 3.0
            ) -> tuple[np.ndarray, ...]:
    from mixsolve.solve.shift_fit import fit_with_shift

    return fit_with_shift(a, eps_at(LIB_WL), LIB_WL, FIT_WL, baseline, method, max_shift)


@pytest.mark.parametrize("noise", [0.0, 1e-3])
@pytest.mark.parametrize(("method", "baseline"), [("nnls", "none"), ("nnls", "offset"),
                                                  ("ols", "offset"), ("ols", "linear")])
def test_batched_shift_fit_equals_minimize_scalar_per_spectrum(noise, method, baseline):
    """Several spectra with different known shifts (plus a 0.01 AU offset where the fit
    has baseline columns to absorb it), noiseless and with noise: the batched search finds each
    spectrum's δ within 2·xatol = 2e-4 nm of the per-spectrum minimize_scalar reference
    (both stop within about xatol of the minimiser), its RSS is no larger than the
    reference's beyond that tolerance, and the coefficients, standard errors and u(δ)
    agree (to 1e-3 relative with noise; noiseless the uncertainties measure only the
    interpolation misfit and are not compared)."""
    a = known_spectra(noise, offset=0.0 if baseline == "none" else 0.01)
    coef, se, fitted, dof, status, shift, u_shift = batched(a, method, baseline)
    p = coef.shape[1]
    for i in range(a.shape[0]):
        delta, x, sd, u = reference_shift_fit(a[i], method, baseline)
        assert abs(shift[i] - delta) <= 2e-4, (i, shift[i], delta)
        scale = np.abs(x).max()
        np.testing.assert_allclose(coef[i], x, rtol=1e-3, atol=1e-3 * scale)
        np.testing.assert_allclose(fitted[i], coef[i] @ batched_design(shift[i], baseline).T,
                                   rtol=1e-12, atol=1e-15)
        assert dof[i] == FIT_WL.size - p - 1 and status[i] == 0
        if noise:
            np.testing.assert_allclose(se[i], sd, rtol=1e-3)
            assert u_shift[i] == pytest.approx(u, rel=1e-3)
            assert abs(shift[i] - KNOWN_SHIFTS[i]) < 4 * u_shift[i]
        else:
            assert abs(shift[i] - KNOWN_SHIFTS[i]) < 0.01


def batched_design(delta: float, baseline: str) -> np.ndarray:
    """The design at one shift, as the model defines it (numpy.interp of the library)."""
    from mixsolve.solve.design import design_matrix

    k = np.stack([np.interp(FIT_WL + delta, LIB_WL, row) for row in eps_at(LIB_WL)], axis=1)
    return design_matrix(k, FIT_WL, baseline)


def test_shift_fit_with_missing_readings_uses_the_readings_present():
    """NaN readings are left out of the search and the fit (reference: the per-spectrum
    minimize_scalar fit on the readings present); the fitted spectrum is given at every
    wavelength and the status says ``missing``."""
    from mixsolve.flags import MISSING

    a = known_spectra(1e-3, seed=SEED + 12)
    a[0, 30:90] = np.nan
    a[3, ::3] = np.nan
    coef, se, fitted, dof, status, shift, u_shift = batched(a, "nnls", "offset")
    for i in (0, 3):
        delta, x, sd, u = reference_shift_fit(a[i], "nnls", "offset")
        assert abs(shift[i] - delta) <= 2e-4
        np.testing.assert_allclose(coef[i], x, rtol=1e-3, atol=1e-3 * np.abs(x).max())
        np.testing.assert_allclose(se[i], sd, rtol=1e-3)
        assert u_shift[i] == pytest.approx(u, rel=1e-3)
        assert status[i] & MISSING and np.isfinite(fitted[i]).all()
        assert dof[i] == np.isfinite(a[i]).sum() - coef.shape[1] - 1
    assert not status[1] & MISSING


def test_shift_fit_degenerate_spectra():
    """Zero spectra: empty outputs. Too few readings: NaN results and shift, status
    too_few + missing (as a plain fit: no no_dof, since no fit was made). Every component
    driven to zero (a negative spectrum, nnls): coefficients 0, J = 0 so the joint
    covariance is singular: u(δ) and the standard errors NaN. One component only: fitted
    as the others."""
    from mixsolve.flags import MISSING, TOO_FEW
    from mixsolve.solve.shift_fit import fit_with_shift

    out = batched(np.zeros((0, FIT_WL.size)), "nnls", "none")
    assert [o.shape for o in out] == [(0, 3), (0, 3), (0, FIT_WL.size), (0,), (0,), (0,), (0,)]
    a = known_spectra(1e-3)[:3]
    a[0, 2:] = np.nan
    a[1] = -a[1]
    coef, se, _, dof, status, shift, u_shift = batched(a, "nnls", "none")
    assert np.isnan(coef[0]).all() and np.isnan(shift[0]) and np.isnan(u_shift[0])
    assert status[0] == TOO_FEW | MISSING and dof[0] == 0
    np.testing.assert_array_equal(coef[1], 0.0)
    assert np.isnan(u_shift[1]) and np.isnan(se[1]).all() and abs(shift[1]) <= 3.0
    assert np.isfinite(u_shift[2])
    one = eps_at(LIB_WL, ["rose"])
    spectrum = 4e-5 * eps_at(FIT_WL + 0.7, ["rose"])
    coef, se, _, dof, status, shift, u_shift = fit_with_shift(
        spectrum, one, LIB_WL, FIT_WL, "none", "nnls", 3.0)
    assert shift[0] == pytest.approx(0.7, abs=0.01)
    assert coef[0, 0] == pytest.approx(4e-5, rel=1e-3)
    assert dof[0] == FIT_WL.size - 2 and status[0] == 0 and np.isfinite(se[0, 0])
    assert 0 < u_shift[0] < 0.01


@pytest.mark.parametrize("true_shift", [2.93, 3.6])
def test_shift_fit_at_the_search_bound(true_shift):
    """A shift near or beyond the bound (3 nm): the search ends within 2e-4 nm of the
    per-spectrum reference, which stops at the bound when the minimum lies beyond it."""
    a = (CONC @ eps_at(FIT_WL + true_shift))[None, :]
    shift = batched(a, "ols", "none")[5]
    delta = reference_shift_fit(a[0], "ols", "none")[0]
    assert abs(shift[0] - delta) <= 2e-4
    assert shift[0] <= 3.0


def test_shift_fit_in_blocks_equals_one_block(monkeypatch):
    """The refinement cuts the batch into blocks; blocks of 2 spectra give what one block
    gives (the searches of different spectra are independent)."""
    import mixsolve.solve.shift_fit as shift_fit

    a = known_spectra(1e-3, seed=SEED + 13)
    whole = batched(a, "nnls", "offset")
    monkeypatch.setattr(shift_fit, "block_spectra", lambda m, p: 2)
    cut = batched(a, "nnls", "offset")
    for w, c in zip(whole, cut, strict=True):
        np.testing.assert_array_equal(w, c)


@pytest.mark.parametrize("even", [True, False])
def test_per_spectrum_interpolation_equals_numpy_interp(even):
    """The library at λ + δ, one δ per spectrum, on an even grid (arithmetic) and an uneven
    one (search): ``numpy.interp`` of each component and of its slope (reference), also
    clamped beyond the grid ends."""
    from mixsolve.solve.shift_fit import _ShiftedLibrary

    rng = np.random.default_rng(SEED + 14)
    grid = LIB_WL if even else np.sort(LIB_WL + rng.uniform(-0.2, 0.2, LIB_WL.size))
    eps = eps_at(grid)
    wl = np.r_[378.0, FIT_WL, 725.0]  # two wavelengths outside the grid: clamped
    lib = _ShiftedLibrary(eps, grid, wl, "offset")
    deltas = np.r_[rng.uniform(-3.0, 3.0, 7), 0.0, -0.5]
    designs, slopes = lib.designs(deltas), lib.slopes(deltas)
    slope = np.gradient(eps, grid, axis=1)
    for i, d in enumerate(deltas):
        want = np.stack([np.interp(wl + d, grid, row) for row in eps], axis=1)
        np.testing.assert_allclose(designs[i, :, :3], want, rtol=1e-12, atol=1e-9)
        np.testing.assert_array_equal(designs[i, :, 3], 1.0)
        want = np.stack([np.interp(wl + d, grid, row) for row in slope], axis=1)
        np.testing.assert_allclose(slopes[i], want, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(lib.design(0.3), lib.designs(np.array([0.3]))[0], rtol=1e-12,
                               atol=1e-9)


def test_unfittable_spectrum_gets_the_flags_of_a_plain_fit(library):
    """A spectrum with no readings: the same flags with and without the shift fit (no
    `no_dof`, which would say a fit was made), and NaN results."""
    spectra = shifted_spectra(CONC, [0.0, 0.5], noise=0.001)
    spectra.values[1] = np.nan
    plain = ms.unmix(spectra, library, window=(420, 680))
    shifted = ms.unmix(spectra, library, window=(420, 680), fit_shift=True)
    assert shifted["flags"].values[1] == plain["flags"].values[1] == \
        "missing_readings;too_few_readings"
    assert np.isnan(shifted["concentration"].values[1]).all()
    assert np.isnan(shifted["wavelength_shift_nm"].values[1])
