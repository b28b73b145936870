"""Trust checks: ``check_wavelengths``, ``choose_wavelengths``, the per-sample checks of
``unmix`` (range, lack of fit, residual structure) and their text reports.

Outside-source checks of the figures of merit live in
``tests/external/test_figures_of_merit.py``. All spectra are invented Gaussian bands with
seeded noise.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from scipy import stats

import mixsolve as ms
from mixsolve.errors import InputError, RenamedWarning
from mixsolve.flags import ABOVE_RANGE, BELOW_RANGE, LACK_OF_FIT, STATUS_CODES, STRUCTURED
from mixsolve.noise import PRESETS, NoiseModel
from mixsolve.report.merit_text import format_check, format_choice
from mixsolve.solve.sample_checks import (
    MIN_POINTS_RUNS,
    absorbance_extent,
    lack_of_fit,
    runs_test,
    target_absorbance,
)
from mixsolve.solve.trust import FLAG_P_VALUE
from mixsolve.wavelengths.check import (
    DEFAULT_SIGMA_A,
    LOW_SELECTIVITY,
    check_wavelengths,
    merit_to_dict,
)
from mixsolve.wavelengths.choose import EQUAL_TIME_MARGIN, choose_wavelengths
from mixsolve.wavelengths.merit import verdict

SEED = 4242
WL = np.arange(400.0, 701.0, 5.0)
BANDS = {"amber": (1.0e4, 460.0, 25.0), "rose": (1.0e4, 530.0, 22.0),
         "teal": (1.4e4, 610.0, 30.0)}
CONC = np.array([4e-5, 3e-5, 3e-5])  # mol/L: peaks ≈ 0.4-0.5 AU at 1 cm


def band(wl: np.ndarray, height: float, centre: float, width: float) -> np.ndarray:
    """One invented Gaussian band (height L/(mol*cm), centre and width nm)."""
    return height * np.exp(-0.5 * ((wl - centre) / width) ** 2)


def make_library(eps: np.ndarray, names: list[str], wl: np.ndarray = WL) -> xr.Dataset:
    """Library (L/(mol*cm)) from a (component, wavelength) array."""
    da = xr.DataArray(eps, dims=("component", "wavelength"),
                      coords={"component": names, "wavelength": wl})
    return ms.import_absorptivities(da, "L/(mol*cm)")


@pytest.fixture(scope="module")
def eps() -> np.ndarray:
    """Absorptivities (component, wavelength) of the three invented bands on WL."""
    return np.vstack([band(WL, *b) for b in BANDS.values()])


@pytest.fixture(scope="module")
def library(eps) -> xr.Dataset:
    """Three-component invented library, 400-700 nm every 5 nm."""
    return make_library(eps, list(BANDS))


def noisy(eps: np.ndarray, conc: np.ndarray, sigma: np.ndarray | float,
          seed: int = SEED) -> xr.DataArray:
    """Spectra conc @ eps plus seeded Gaussian noise of SD ``sigma`` (AU, may vary)."""
    conc = np.atleast_2d(conc)
    clean = conc @ eps
    rng = np.random.default_rng(seed)
    return ms.make_spectra(clean + sigma * rng.standard_normal(clean.shape), WL)


# --- check_wavelengths ---------------------------------------------------------------------

def test_check_records_its_settings_and_units(library):
    """Attributes say which wavelengths, noise and baseline the figures hold for."""
    check = check_wavelengths(library, window=(450, 620), noise=0.002)
    assert check.attrs["wavelengths_nm"] == [float(w) for w in WL[(WL >= 450) & (WL <= 620)]]
    assert check.attrs["noise_au"] == 0.002
    assert check.attrs["baseline"] == "none"
    assert check.attrs["concentration_unit"] == "mol/L"
    assert check["shift_sensitivity"].attrs["units"] == "1/nm"
    assert check["overlap"].attrs["units"] == "1"
    assert check_wavelengths(library).attrs["noise_au"] == DEFAULT_SIGMA_A


@pytest.mark.parametrize("name", sorted(PRESETS))
def test_check_and_choose_take_noise_as_unmix_does(library, name):
    """noise may be a preset name or a NoiseModel, as in unmix: the figures are those of its
    σ_A at A = 0 (a blank reading), i.e. of k0, k1, k2 through σ_T(1)/ln 10."""
    model = PRESETS[name]
    sigma = np.sqrt(model.k0**2 + model.k1**2 + model.k2**2) / np.log(10)
    plain = check_wavelengths(library, noise=float(sigma))
    for spec in (name, model):
        check = check_wavelengths(library, noise=spec)
        assert check.attrs["noise_au"] == pytest.approx(sigma, rel=1e-12)
        np.testing.assert_allclose(check["lod"], plain["lod"], rtol=1e-12)
        full = choose_wavelengths(library, 4, noise=spec).full
        np.testing.assert_allclose(full["loq"], plain["loq"], rtol=1e-12)


def test_check_interpolates_wavelengths_between_library_points(library, eps):
    """A wavelength between grid points uses the linearly interpolated library."""
    check = check_wavelengths(library, wavelengths=[462.5, 530.0, 612.5])
    k = np.column_stack([np.interp([462.5, 530.0, 612.5], WL, row) for row in eps])
    expected = np.linalg.cond(k / np.linalg.norm(k, axis=0))
    assert check.attrs["condition_number"] == pytest.approx(expected, rel=1e-10)


def test_check_does_not_depend_on_the_order_of_the_library_dims(library):
    """A library stored as (wavelength, component) gives the same figures."""
    wl = [440.0, 470.0, 530.0, 600.0]
    expect = check_wavelengths(library, wavelengths=wl)
    got = check_wavelengths(library.transpose("wavelength", "component"), wavelengths=wl)
    for name in ("sensitivity", "shift_sensitivity", "shift_matrix", "overlap"):
        np.testing.assert_allclose(got[name].values, expect[name].values, rtol=1e-12)


def test_check_of_a_component_subset(library, eps):
    """``components`` keeps only those; the figures are those of the smaller system."""
    check = check_wavelengths(library, components=["teal", "amber"])
    assert list(check["component"].values) == ["teal", "amber"]
    k = eps[[2, 0]].T
    assert check.attrs["condition_number"] == pytest.approx(
        np.linalg.cond(k / np.linalg.norm(k, axis=0)), rel=1e-10)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"window": (400, 500), "wavelengths": [450.0]}, r"either a window or a list"),
    ({"window": (401, 404)}, r"window 401-404 nm holds no library wavelength "
                             r"\(library 400-700 nm\)"),
    ({"window": (500, 450)}, r"window: 500-450 nm is not an increasing pair"),
    ({"wavelengths": [450.0, 720.0]}, r"wavelengths: 720 nm is outside the library "
                                      r"\(400-700 nm\), which is never extrapolated"),
    ({"wavelengths": [450.0, 450.0]}, r"wavelengths: a wavelength is listed twice"),
    ({"wavelengths": []}, r"wavelengths: the list is empty"),
    ({"components": ["amber", "navy"]}, r"components: 'navy' is not in the library "
                                        r"\(amber, rose, teal\)"),
    ({"noise": 0.0}, r"^noise: 0 AU is not a positive number$"),
    ({"noise": float("nan")}, r"^noise: nan AU is not a finite number$"),
    ({"noise": "diode"}, r"^noise: unknown preset 'diode'; presets are benchtop_double_beam, "
                         r"diode_array, microplate, field_photometer$"),
    ({"baseline": "quadratic"}, r"baseline: 'quadratic' is not one of"),
])
def test_check_rejects_bad_selections(library, kwargs, message):
    """Every bad argument is an InputError naming the argument and the allowed values."""
    with pytest.raises(InputError, match=message):
        check_wavelengths(library, **kwargs)


def test_check_of_an_underdetermined_set_is_singular_and_says_so(library):
    """Two wavelengths for three components: SEN 0, κ inf, LOD inf and a note."""
    check = check_wavelengths(library, wavelengths=[460, 610])
    assert check.attrs["condition_number"] == float("inf")
    assert check.attrs["verdict"].startswith("singular")
    np.testing.assert_array_equal(check["sensitivity"].values, 0.0)
    assert np.isinf(check["lod"].values).all()
    assert "2 wavelength(s) for 3 unknowns: underdetermined" in check.attrs["notes"]


def test_check_of_proportional_components_is_singular(eps):
    """Two components with the same spectrum shape: κ = inf (not a huge finite number),
    no net signal for either, while the independent third keeps its sensitivity.
    """
    lib = make_library(np.vstack([eps[0], 2 * eps[0], eps[2]]), ["a", "a2", "c"])
    check = check_wavelengths(lib)
    assert check.attrs["condition_number"] == float("inf")
    assert check.attrs["verdict"].startswith("singular")
    np.testing.assert_array_equal(check["sensitivity"].values[:2], 0.0)
    k = np.vstack([eps[0], eps[2]]).T
    q, _ = np.linalg.qr(k[:, :1])
    nas_c = k[:, 1] - q @ (q.T @ k[:, 1])
    assert float(check["sensitivity"].values[2]) == pytest.approx(np.linalg.norm(nas_c),
                                                                  rel=1e-8)
    out = merit_to_dict(check)
    assert out["condition_number"] is None
    assert out["components"]["a"]["lod"] is None
    json.dumps(out, allow_nan=False)


def test_check_notes_low_selectivity(eps):
    """A component nearly the same shape as another is called out in the notes."""
    shifted = band(WL, 1.0e4, 462.0, 25.0)  # 2 nm apart: selectivity ≈ 0.06
    lib = make_library(np.vstack([eps[0], shifted]), ["a", "a_prime"])
    check = check_wavelengths(lib)
    assert np.all(check["selectivity"].values < LOW_SELECTIVITY)
    assert any(n.startswith("a_prime: selectivity") for n in check.attrs["notes"])


def test_check_with_a_linear_baseline_counts_its_columns(library, eps):
    """A linear baseline adds offset and slope columns to the conditioning."""
    check = check_wavelengths(library, baseline="linear")
    design = np.column_stack([eps.T, np.ones(WL.size), WL - WL.mean()])
    assert check.attrs["condition_number"] == pytest.approx(
        np.linalg.cond(design / np.linalg.norm(design, axis=0)), rel=1e-10)
    assert check.attrs["baseline_terms"] == ["offset", "slope"]


@pytest.mark.parametrize(("kappa", "start"), [
    (1.0, "well conditioned"), (9.99, "well conditioned"), (10.0, "usable"),
    (99.0, "usable"), (100.0, "poor"), (999.0, "poor"), (1000.0, "ill conditioned"),
    (float("inf"), "singular"),
])
def test_verdict_thresholds(kappa, start):
    """Stated thresholds: below 10, 10-100, 100-1000, above 1000, infinite."""
    assert verdict(kappa).startswith(start)


def test_merit_to_dict_is_plain_json(library):
    """The --json form: finite floats, the documented keys, one entry per component."""
    out = merit_to_dict(check_wavelengths(library, window=(420, 680)))
    text = json.dumps(out, allow_nan=False)
    back = json.loads(text)
    assert set(back["components"]) == set(BANDS)
    for figures in back["components"].values():
        assert {"sensitivity", "selectivity", "lod", "loq", "shift_sensitivity"} <= set(figures)
        assert all(isinstance(v, float) for v in figures.values())
    assert isinstance(back["condition_number"], float)


def test_format_check_is_a_table_with_units_and_notes(library):
    """The text report names every component, the condition number and its notes."""
    check = check_wavelengths(library, wavelengths=[460, 530, 610], noise=0.002)
    text = format_check(check)
    assert text.endswith("\n")
    assert f"condition number  {check.attrs['condition_number']:.4g}" in text
    assert "σ_A = 0.002 AU" in text
    assert "AU per mol/L at 1 cm" in text
    for name in BANDS:
        assert any(line.startswith(name) for line in text.splitlines())
    assert "Notes: none." in text
    bad = format_check(check_wavelengths(library, wavelengths=[460, 610]))
    assert " 1. 2 wavelength(s) for 3 unknowns" in bad
    assert "n/a" in bad


# --- choose_wavelengths --------------------------------------------------------------------

def criterion(eps: np.ndarray, rows: np.ndarray, full: np.ndarray) -> float:
    """A-optimal criterion J(S) computed here independently of mixsolve."""
    def var(idx: np.ndarray) -> np.ndarray:
        d = eps[:, idx].T
        return np.diag(np.linalg.inv(d.T @ d))

    return float(np.mean(var(rows) / var(full)))


def test_choose_is_reproducible(library):
    """Same library, same count: the same wavelengths and criterion."""
    first = choose_wavelengths(library, 5)
    second = choose_wavelengths(library, 5)
    assert first.wavelengths_nm == second.wavelengths_nm
    assert first.criterion == second.criterion


def test_choose_beats_random_subsets_and_is_a_local_optimum(library, eps):
    """The exchange result is at least as good as 200 seeded random 4-subsets, its
    reported criterion is the independent J of its set, and no single swap improves it.
    """
    choice = choose_wavelengths(library, 4)
    full = np.arange(WL.size)
    chosen = np.searchsorted(WL, choice.wavelengths_nm)
    assert np.allclose(WL[chosen], choice.wavelengths_nm)
    j = criterion(eps, chosen, full)
    assert choice.criterion == pytest.approx(j, rel=1e-9)
    rng = np.random.default_rng(SEED)
    randoms = [criterion(eps, np.sort(rng.choice(WL.size, 4, replace=False)), full)
               for _ in range(200)]
    assert j <= min(randoms) * (1 + 1e-12)
    for pos in range(4):
        for cand in set(full) - set(chosen):
            trial = chosen.copy()
            trial[pos] = cand
            assert criterion(eps, np.sort(trial), full) >= j * (1 - 1e-9)
    assert choice.criterion_equal_time == pytest.approx(j * 4 / WL.size, rel=1e-12)


def test_choose_stays_in_the_window(library, eps):
    """Candidates come from the window only; J is relative to that window."""
    choice = choose_wavelengths(library, 4, window=(450, 650))
    inside = np.flatnonzero((WL >= 450) & (WL <= 650))
    assert all(450 <= w <= 650 for w in choice.wavelengths_nm)
    chosen = np.searchsorted(WL, choice.wavelengths_nm)
    assert choice.criterion == pytest.approx(criterion(eps, chosen, inside), rel=1e-9)
    assert choice.full.attrs["wavelengths_nm"] == [float(w) for w in WL[inside]]


def test_choose_contiguous_returns_the_best_run_of_neighbours(library, eps):
    """``contiguous``: consecutive grid points, and the best such run by an exhaustive scan."""
    choice = choose_wavelengths(library, 12, contiguous=True)
    assert choice.contiguous
    idx = np.searchsorted(WL, choice.wavelengths_nm)
    np.testing.assert_array_equal(np.diff(idx), 1)
    full = np.arange(WL.size)
    runs = [criterion(eps, np.arange(i, i + 12), full) for i in range(WL.size - 11)]
    assert choice.criterion == pytest.approx(min(runs), rel=1e-9)
    assert choice.criterion >= choose_wavelengths(library, 12).criterion * (1 - 1e-9)


def test_choose_reports_a_users_set_beside_the_choice(library, eps):
    """``against`` gives the user's J and figures; a set too short to solve gets J = inf
    (None in JSON), not a meaningless huge number.
    """
    choice = choose_wavelengths(library, 4, against=[440.0, 520.0, 600.0, 650.0])
    user = np.searchsorted(WL, [440.0, 520.0, 600.0, 650.0])
    assert choice.user_criterion == pytest.approx(
        criterion(eps, user, np.arange(WL.size)), rel=1e-9)
    assert choice.user is not None
    assert choice.user.attrs["wavelengths_nm"] == [440.0, 520.0, 600.0, 650.0]
    assert choice.user_criterion >= choice.criterion
    short = choose_wavelengths(library, 4, against=[460.0, 470.0])
    assert short.user_criterion == float("inf")
    out = json.loads(json.dumps(short.to_dict(), allow_nan=False))
    assert out["user_criterion"] is None
    assert "your set: J = inf" in format_choice(short)


def test_choose_old_keyword_compare_still_works_with_a_warning(library):
    """``compare`` is the old name of ``against``: same result for one release, and a
    RenamedWarning naming the new spelling that points at the caller's line."""
    users = [440.0, 520.0, 600.0, 650.0]
    with pytest.warns(RenamedWarning, match="^compare is now called against; ") as caught:
        old = choose_wavelengths(library, 4, compare=users)
    assert caught[0].filename == __file__
    assert old.user_criterion == choose_wavelengths(library, 4, against=users).user_criterion
    with pytest.raises(InputError, match=r"^compare is the old name of against; give against "
                                         r"only$"):
        choose_wavelengths(library, 4, against=users, compare=users)


def test_choose_to_dict_and_text(library):
    """JSON-safe summary with the chosen and full-window figures; readable text."""
    choice = choose_wavelengths(library, 4)
    out = json.loads(json.dumps(choice.to_dict(), allow_nan=False))
    assert out["wavelengths_nm"] == choice.wavelengths_nm
    assert out["criterion_equal_time"] == pytest.approx(choice.criterion_equal_time)
    assert set(out["chosen"]["components"]) == set(BANDS)
    assert out["full_window"]["wavelengths_nm"] == [float(w) for w in WL]
    assert out["user_set"] is None
    text = format_choice(choice)
    assert text.startswith("Chosen wavelength set: " + ", ".join(
        f"{w:g}" for w in choice.wavelengths_nm) + " nm")
    assert f"documented margin {EQUAL_TIME_MARGIN:g}" in text


def test_format_choice_warns_when_the_set_is_worse_than_the_full_window(library):
    """A contiguous run far from the bands is worse even at equal time: a note says so."""
    choice = choose_wavelengths(library, 3, window=(680, 700), contiguous=True)
    assert choice.criterion_equal_time > EQUAL_TIME_MARGIN
    assert "clearly worse than the full window" in format_choice(choice)


@pytest.mark.parametrize(("count", "baseline", "message"), [
    (2, "none", r"^count: 2 is not a whole number ≥ 3; one wavelength per unknown \(3: "
                r"components and baseline terms\) at least$"),
    (3, "offset", r"^count: 3 is not a whole number ≥ 4; one wavelength per unknown \(4"),
    (62, "none", r"^count: 62 is not a number ≤ 61; the window holds 61 candidate "
                 r"wavelengths$"),
])
def test_choose_rejects_impossible_counts(library, count, baseline, message):
    """Fewer wavelengths than unknowns, or more than the candidates, are refused."""
    with pytest.raises(InputError, match=message):
        choose_wavelengths(library, count, baseline=baseline)


def test_choose_refuses_a_library_that_cannot_be_separated(eps):
    """Proportional components: no subset can separate them."""
    lib = make_library(np.vstack([eps[0], 3 * eps[0]]), ["a", "b"])
    with pytest.raises(InputError, match=r"cannot separate the components \(singular\)"):
        choose_wavelengths(lib, 4)


# --- sample checks: runs test, lack of fit, range --------------------------------------------

def test_runs_test_against_a_hand_computation():
    """Wald–Wolfowitz on a known sign sequence (zeros and NaN dropped).

    Signs + + + − + + − − − − + − − + + : R = 7 runs, n₊ = 8, n₋ = 7, n = 15.
    μ = 2n₊n₋/n + 1 = 8.4667; Var = 2n₊n₋(2n₊n₋ − n)/(n²(n − 1)) = 10864/3150 = 3.4489;
    z = (7 − 8.4667)/1.8571 = −0.7898; one-sided p = Φ(z) = 0.2148.
    """
    r = np.array([0.5, 1.2, 0.3, -0.4, 0.8, 0.9, -0.2, -1.1, -0.7, -0.3, 0.6, -0.5, -0.9,
                  0.0, 0.4, np.nan, 0.2])
    z, p, _ = runs_test(r[None, :])
    n1, n2, runs = 8, 7, 7
    n = n1 + n2
    mu = 2 * n1 * n2 / n + 1
    var = 2 * n1 * n2 * (2 * n1 * n2 - n) / (n**2 * (n - 1))
    assert z[0] == pytest.approx((runs - mu) / np.sqrt(var), rel=1e-12)
    assert z[0] == pytest.approx(-0.7898, abs=1e-4)
    assert p[0] == pytest.approx(stats.norm.cdf(z[0]), rel=1e-12)
    assert p[0] == pytest.approx(0.2148, abs=1e-4)


def test_runs_test_lag1_and_undefined_cases():
    """Lag-1 autocorrelation Σrᵢrᵢ₊₁/Σrᵢ²; NaN for short or one-signed residuals."""
    alt = np.tile([1.0, -1.0], 10)
    smooth = np.sin(np.linspace(0.1, 2 * np.pi - 0.1, 20))  # one run up, one run down
    short = np.tile([1.0, -1.0], MIN_POINTS_RUNS)[:MIN_POINTS_RUNS - 1]
    z, p, lag1 = runs_test(np.vstack([alt, smooth, np.abs(smooth) + 0.1]))
    assert lag1[0] == pytest.approx(np.sum(alt[:-1] * alt[1:]) / np.sum(alt**2))
    assert z[0] > 3  # alternating: too many runs, so p is near 1
    assert p[1] < 0.01  # two long runs of one sign each
    assert np.isnan(z[2]) and np.isnan(p[2])  # all positive
    assert np.isnan(runs_test(short[None, :])[0][0])
    z3, _, _ = runs_test(np.zeros((2, 3, 20)))
    assert z3.shape == (2, 3)


def test_lack_of_fit_against_direct_chi_square():
    """√(χ²/dof) with σᵢ = σ_A(fitted Aᵢ), and p = P(χ²_dof ≥ χ²)."""
    model = NoiseModel(k0=1e-3, k1=2e-3)
    fitted = np.linspace(0.1, 1.5, 30)
    resid = 1.3 * model.sigma_absorbance(fitted) * np.where(np.arange(30) % 2, 1.0, -1.0)
    ratio, p = lack_of_fit(resid[None], fitted[None], np.array([27]), model)
    chi2 = np.sum((resid / model.sigma_absorbance(fitted)) ** 2)
    assert ratio[0] == pytest.approx(np.sqrt(chi2 / 27), rel=1e-12)
    assert p[0] == pytest.approx(stats.chi2.sf(chi2, 27), rel=1e-10)
    nan_ratio, nan_p = lack_of_fit(resid[None], fitted[None], np.array([0]), model)
    assert np.isnan(nan_ratio[0]) and np.isnan(nan_p[0])


def test_absorbance_extent_and_target():
    """Largest and smallest over the readings present; NaN when none; √(low·high)."""
    used = np.array([[0.2, np.nan, 1.4, 0.7], [np.nan] * 4])
    a_max, a_min = absorbance_extent(used)
    assert a_max[0] == 1.4 and a_min[0] == 0.2
    assert np.isnan(a_max[1]) and np.isnan(a_min[1])
    assert target_absorbance(0.3, 2.0) == pytest.approx(np.sqrt(0.6))


def test_unmodelled_absorber_is_flagged_as_structured_residual(library, eps):
    """A broad absorber missing from the library (0.05 AU at 500 nm, width 60 nm) leaves
    a smooth residual across the window: runs test p < 1e-3, ``structured_residual`` in
    the flags of all 10 spectra, high lag-1 autocorrelation.
    """
    extra = 0.05 * np.exp(-0.5 * ((WL - 500.0) / 60.0) ** 2)
    spectra = noisy(eps, np.tile(CONC, (10, 1)), 0.002)
    spectra = spectra + extra
    result = ms.unmix(spectra, library, method="ols")
    assert np.all(result["runs_p"].values < FLAG_P_VALUE)
    assert np.all(result["status"].values & STRUCTURED)
    assert all("structured_residual" in f for f in result["flags"].values)
    assert np.all(result["residual_lag1"].values > 0.5)
    assert STATUS_CODES[STRUCTURED] == "structured_residual"


def test_narrow_unmodelled_band_shows_in_the_lag1_autocorrelation(library, eps):
    """A narrow missing band (0.05 AU at 570 nm, width 15 nm) leaves a residual of ~20σ
    that covers only part of the window; the reported lag-1 autocorrelation is high for
    every spectrum and the runs z is negative on average (the runs test alone, being
    blind to magnitude, does not reach p < 1e-3 for every such spectrum), so the lag-1
    criterion (r₁√n > 3.09) flags every one ``structured_residual``.
    """
    extra = 0.05 * np.exp(-0.5 * ((WL - 570.0) / 15.0) ** 2)
    spectra = noisy(eps, np.tile(CONC, (10, 1)), 0.002, seed=SEED + 4) + extra
    result = ms.unmix(spectra, library, method="ols")
    assert np.all(result["residual_lag1"].values > 0.7)
    assert float(np.median(result["runs_z"].values)) < -2.5
    assert all("structured_residual" in f for f in result["flags"].values)


def test_pure_noise_is_rarely_flagged_as_structured(library, eps):
    """White noise only: at p < 1e-3 about 0.2 of 200 spectra are flagged by chance; at
    most 3 may be (P ≈ 0.001 under a binomial with p = 0.001).
    """
    spectra = noisy(eps, np.tile(CONC, (200, 1)), 0.002, seed=SEED + 1)
    result = ms.unmix(spectra, library, method="ols")
    flagged = int(np.sum((result["status"].values & STRUCTURED) > 0))
    assert flagged <= 3
    assert abs(float(np.median(result["runs_z"].values))) < 0.5


def test_lack_of_fit_ratio_is_one_for_noise_matching_the_model(library, eps):
    """Noise drawn from the noise model itself (σ_A(A) per reading, heteroscedastic):
    the median ratio is within 5 % of 1 and almost no spectrum is flagged.
    """
    model = NoiseModel(k0=1e-3, k1=2e-3)
    conc = np.tile(CONC, (200, 1))
    sigma = model.sigma_absorbance(conc @ eps)
    result = ms.unmix(noisy(eps, conc, sigma, seed=SEED + 2), library, method="ols",
                      noise=model)
    ratio = result["lack_of_fit_ratio"].values
    assert np.median(ratio) == pytest.approx(1.0, abs=0.05)
    assert int(np.sum((result["status"].values & LACK_OF_FIT) > 0)) <= 3


def test_noise_five_times_the_model_is_flagged_lack_of_fit(library, eps):
    """Real noise 5× what the model claims: ratio ≈ 5 and every spectrum flagged."""
    model = NoiseModel(k0=1e-3, k1=2e-3)
    conc = np.tile(CONC, (20, 1))
    sigma = 5 * model.sigma_absorbance(conc @ eps)
    result = ms.unmix(noisy(eps, conc, sigma, seed=SEED + 3), library, method="ols",
                      noise=model)
    ratio = result["lack_of_fit_ratio"].values
    assert np.median(ratio) == pytest.approx(5.0, rel=0.1)
    assert np.all(result["lack_of_fit_p"].values < FLAG_P_VALUE)
    assert all("lack_of_fit" in f for f in result["flags"].values)


def test_without_a_noise_model_there_is_no_lack_of_fit_test(library, eps):
    """No noise model: the ratio and p are NaN and the flag never set."""
    result = ms.unmix(noisy(eps, CONC, 0.05), library, method="ols")
    assert np.isnan(result["lack_of_fit_ratio"].values).all()
    assert not np.any(result["status"].values & LACK_OF_FIT)


def test_range_flags_and_suggested_dilution(library, eps):
    """Peaks above/below the stated range are flagged; d = A_max/√(low·high)."""
    conc = np.vstack([CONC * 6, CONC, CONC / 10])  # peaks ≈ 2.9, 0.5, 0.05 AU
    spectra = noisy(eps, conc, 1e-4)
    low, high = 0.2, 1.5
    result = ms.unmix(spectra, library, method="ols", absorbance_range=(low, high))
    a_max = spectra.max("wavelength").values
    a_min = spectra.min("wavelength").values
    np.testing.assert_allclose(result["absorbance_max"].values, a_max)
    np.testing.assert_allclose(result["absorbance_min"].values, a_min)
    np.testing.assert_allclose(result["suggested_dilution"].values, a_max / np.sqrt(low * high),
                               rtol=1e-12)
    status = result["status"].values
    assert status[0] & ABOVE_RANGE and not status[0] & BELOW_RANGE
    assert not status[1] & (ABOVE_RANGE | BELOW_RANGE)
    assert status[2] & BELOW_RANGE and not status[2] & ABOVE_RANGE
    flags = result["flags"].values
    assert "above_range" in flags[0] and "below_range" in flags[2]
    assert "range" not in flags[1]
    assert result.attrs["absorbance_range"] == "0.2-1.5"


def test_range_uses_only_the_used_wavelengths(library, eps):
    """A strong peak outside the window does not count for the range."""
    spectra = noisy(eps, np.array([CONC[0] * 6, CONC[1], CONC[2]]), 1e-4)
    inside = ms.unmix(spectra, library, method="ols", window=(560, 700))
    assert float(inside["absorbance_max"].values[0]) < 1.0
    assert not inside["status"].values[0] & ABOVE_RANGE


@pytest.mark.parametrize(("bad", "message"), [
    ((0.0, 2.0), r"^absorbance_range: 0 AU is not a positive number; give two increasing "
                 r"absorbances above 0, e\.g\. 0\.3-2$"),
    ((-0.1, 2.0), r"^absorbance_range: -0\.1 AU is not a positive number; give two "),
    ((2.0, 0.3), r"^absorbance_range: 0\.3 AU is not a number > 2 AU; give two increasing "),
    ((0.3, float("nan")), r"^absorbance_range: nan AU is not a finite number$"),
    (("low", 2.0), r"^absorbance_range: expected \(low, high\) in AU"),
])
def test_bad_absorbance_ranges_are_refused(library, eps, bad, message):
    """The range must be an increasing pair of positive absorbances."""
    with pytest.raises(InputError, match=message):
        ms.unmix(noisy(eps, CONC, 1e-3), library, absorbance_range=bad)


def test_trust_checks_are_the_same_lazily_with_dask(library, eps):
    """Dask-backed spectra give the same checks as numpy (flags only for numpy)."""
    pytest.importorskip("dask")
    model = NoiseModel(k0=1e-3)
    spectra = noisy(eps, np.tile(CONC, (6, 1)), 0.002)
    eager = ms.unmix(spectra, library, method="ols", noise=model)
    lazy = ms.unmix(spectra.chunk({"sample": 2}), library, method="ols", noise=model)
    assert lazy["runs_z"].chunks is not None
    for name in ("absorbance_max", "suggested_dilution", "runs_z", "lack_of_fit_ratio",
                 "shift_bias_per_nm", "status"):
        np.testing.assert_allclose(lazy[name].values, eager[name].values, rtol=1e-10)
