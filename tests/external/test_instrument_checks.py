"""Instrument checks against the reference values of ../shared/CHECKS.md.

The published values are typed in this file (``DICHROMATE_TABLE``, ``HOLMIUM_NM``,
``KCL_*``), never imported from mixsolve: a test whose expected value came from the code's
own constants would pass with a wrong constant. Spectra are synthetic, built from these
published values, so a correct implementation passes whatever the exact recalled digits,
and a wrong constant, rule, range or sign in mixsolve fails.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

import mixsolve as ms
from mixsolve.instrument.absorbance_scale import DICHROMATE_SPECIFIC_ABSORBANCE
from mixsolve.instrument.stray_light import stray_fraction_bound
from mixsolve.instrument.wavelength_scale import HOLMIUM_BANDS_NM, band_position

#: Potassium dichromate, 57-63 mg/L in 0.005 M H2SO4: wavelength (nm) -> A(1 %, 1 cm)
#: (nominal, low, high). Older pharmacopoeia table quoted in a calibration procedure
#: (CHECKS.md, **seen**).
DICHROMATE_TABLE: dict[float, tuple[float, float, float]] = {
    235.0: (124.5, 122.9, 126.2), 257.0: (144.5, 142.8, 146.2),
    313.0: (48.6, 47.0, 50.3), 350.0: (107.3, 105.6, 109.0)}
#: Holmium oxide in perchloric acid, band positions (nm); tolerance ±1 nm in the UV, ±3 nm
#: in the visible. European Pharmacopoeia 2.2.25 (CHECKS.md, **seen**).
HOLMIUM_NM = (241.15, 287.15, 361.5, 536.3)
#: Stray light: 12 g/L KCl in 1 cm, A at 200 nm above 2.0 (same table, CHECKS.md, **seen**).
KCL_NM, KCL_LIMIT_AU = 200.0, 2.0

UV_NM = np.arange(220.0, 400.1, 1.0)


def dichromate_spectrum(conc_mg_l: float, scale: float = 1.0) -> np.ndarray:
    """Absorbance (1 cm) of a synthetic dichromate solution whose A(1 %, 1 cm) equals the
    published nominal values at 235, 257, 313 and 350 nm (a spline through them between)."""
    lam = np.array(list(DICHROMATE_TABLE))
    nominal = np.array([v[0] for v in DICHROMATE_TABLE.values()])
    return scale * CubicSpline(lam, nominal)(UV_NM) * conc_mg_l / 1.0e4


def test_reference_values_are_those_of_checks_md() -> None:
    """Potassium dichromate A(1 %, 1 cm) table and holmium positions, as in CHECKS.md.

    Source: an older pharmacopoeia table quoted in a calibration procedure (**seen**);
    holmium oxide positions from European Pharmacopoeia 2.2.25 (**seen**)."""
    assert DICHROMATE_SPECIFIC_ABSORBANCE == DICHROMATE_TABLE
    assert HOLMIUM_BANDS_NM == HOLMIUM_NM


def test_dichromate_at_the_table_values_passes() -> None:
    """Dichromate 60 mg/L with the tabulated specific absorbances passes at all four
    wavelengths. Source: CHECKS.md dichromate table (**seen**; 0.005 M H2SO4)."""
    spectra = ms.make_spectra(dichromate_spectrum(60.0), UV_NM, ["k2cr2o7"])
    check = ms.check_absorbance_scale(spectra, 60.0, bandwidth_nm=1.0)
    assert check.passed
    assert np.allclose(check.items["measured"], [124.5, 144.5, 48.6, 107.3])


def test_dichromate_three_percent_low_fails() -> None:
    """A reading 3 % low falls below the ranges at 235, 257 and 350 nm (the 313 nm range,
    ±3.4 %, is wider). Source: CHECKS.md dichromate ranges (**seen**)."""
    spectra = ms.make_spectra(dichromate_spectrum(60.0, scale=0.97), UV_NM, ["low"])
    check = ms.check_absorbance_scale(spectra, 60.0)
    assert not check.passed
    assert check.items["passed"].tolist() == [False, False, True, False]


def edge_spectrum(edge: int, step: float) -> np.ndarray:
    """60 mg/L dichromate whose A(1 %, 1 cm) is the published range edge (1 low, 2 high)
    + ``step`` at each of the four wavelengths (a spline through those values)."""
    lam = np.array(list(DICHROMATE_TABLE))
    values = np.array([v[edge] for v in DICHROMATE_TABLE.values()]) + step
    return CubicSpline(lam, values)(UV_NM) * 60.0 / 1.0e4


@pytest.mark.parametrize(("edge", "step", "passed"), [
    (1, +0.05, True), (1, -0.05, False), (2, -0.05, True), (2, +0.05, False)])
def test_dichromate_range_edges(edge, step, passed) -> None:
    """Readings 0.05 inside each published range edge pass at all four wavelengths, 0.05
    outside fail at all four. Source: CHECKS.md dichromate ranges (**seen**)."""
    spectra = ms.make_spectra(edge_spectrum(edge, step), UV_NM, ["edge"])
    check = ms.check_absorbance_scale(spectra, 60.0)
    assert check.items["passed"].tolist() == [passed] * 4
    np.testing.assert_allclose(check.items["measured"],
                               [v[edge] + step for v in DICHROMATE_TABLE.values()])


def test_dichromate_user_tolerance_replaces_the_ranges() -> None:
    """With --tolerance 5 % the 3 % low solution passes; with 1 % the exact one still
    passes. Common practice: a laboratory may set its own acceptance limits."""
    low = ms.make_spectra(dichromate_spectrum(60.0, scale=0.97), UV_NM, ["low"])
    assert ms.check_absorbance_scale(low, 60.0, tolerance_pct=5.0).passed
    exact = ms.make_spectra(dichromate_spectrum(60.0), UV_NM, ["ok"])
    assert ms.check_absorbance_scale(exact, 60.0, tolerance_pct=1.0).passed


def test_dichromate_linearity_over_levels() -> None:
    """Five levels of a linear solution pass the linearity check; a top level reading 2 %
    low (as stray light would make it) fails it at every wavelength. The 1 % limit is
    **common practice** (judgement), the specific absorbances from CHECKS.md (**seen**)."""
    levels = [20.0, 40.0, 60.0, 80.0, 100.0]
    linear = ms.make_spectra(np.vstack([dichromate_spectrum(c) for c in levels]), UV_NM)
    check = ms.check_absorbance_scale(linear, levels)
    lin = check.items[check.items["item"].str.startswith("linearity")]
    assert len(lin) == 4 and lin["passed"].all()
    bent = np.vstack([dichromate_spectrum(c, 0.98 if c == 100.0 else 1.0) for c in levels])
    check = ms.check_absorbance_scale(ms.make_spectra(bent, UV_NM), levels)
    lin = check.items[check.items["item"].str.startswith("linearity")]
    assert not lin["passed"].any()
    assert any("table holds for 57-63 mg/L" in n for n in check.notes)


def holmium_spectrum(wl: np.ndarray, shift_nm: float, rng: np.random.Generator,
                     noise_au: float = 0.0005,
                     band_nm: tuple[float, ...] = HOLMIUM_NM) -> np.ndarray:
    """Synthetic holmium-like spectrum: Gaussian bands (σ = 1.5 nm) at the published
    positions ``bands`` (default Ph. Eur. 2.2.25, seen) + ``shift_nm``, on a sloping
    background, with seeded noise."""
    bands = sum(0.6 * np.exp(-0.5 * ((wl - (b + shift_nm)) / 1.5) ** 2) for b in band_nm)
    return 0.05 + 1e-4 * (wl - 240.0) + bands + rng.normal(0, noise_au, wl.size)


def test_holmium_shifted_by_a_known_offset_returns_it(rng) -> None:
    """Bands shifted by +0.4 nm give an offset of 0.4 nm within its (small) uncertainty,
    every band passes ±1 nm (UV) / ±3 nm (visible). Source: European Pharmacopoeia 2.2.25
    positions and tolerances (**seen**), 0.5 nm grid, bandwidth 1 nm (synthetic)."""
    wl = np.arange(230.0, 560.01, 0.5)
    spectra = ms.make_spectra(holmium_spectrum(wl, 0.4, rng), wl, ["holmium"])
    check = ms.check_wavelength_scale(spectra, bandwidth_nm=1.0)
    offset, u = check.summary["offset_nm"], check.summary["u_offset_nm"]
    assert offset == pytest.approx(0.4, abs=0.02)
    assert 0 < u < 0.02
    assert abs(offset - 0.4) < 4 * u + 0.005
    assert check.passed and check.summary["bands_found"] == 4


def test_holmium_quadratic_fit_and_coarse_grid(rng) -> None:
    """The quadratic vertex also recovers the offset to better than 0.1 nm on a 1 nm grid
    (common practice for a quick check)."""
    wl = np.arange(230.0, 560.01, 1.0)
    spectra = ms.make_spectra(holmium_spectrum(wl, -0.3, rng), wl)
    check = ms.check_wavelength_scale(spectra, method="quadratic", fit_half_width_nm=1.5)
    assert check.summary["offset_nm"] == pytest.approx(-0.3, abs=0.1)


@pytest.mark.parametrize(("shift_nm", "passed"), [
    (0.8, [True, True, True, True]),
    (-0.8, [True, True, True, True]),
    (1.5, [False, False, False, True]),
    (-2.5, [False, False, False, True]),
    (3.5, [False, False, False, False]),
])
def test_holmium_tolerances_uv_and_visible(rng, shift_nm, passed) -> None:
    """Ph. Eur. 2.2.25 tolerances (**seen**): ±1 nm at the three UV bands, ±3 nm at
    536.3 nm. Shifts of ±0.8 nm pass everywhere; 1.5 and 2.5 nm fail the UV bands only;
    3.5 nm fails all four. Each shift also comes back as the offset where all bands are
    found (bands at the published positions, typed in this file)."""
    wl = np.arange(230.0, 560.01, 0.5)
    check = ms.check_wavelength_scale(ms.make_spectra(holmium_spectrum(wl, shift_nm, rng), wl))
    assert check.items["passed"].tolist() == passed
    np.testing.assert_allclose(check.items["expected"], HOLMIUM_NM)
    if check.summary["bands_found"] == 4:
        assert check.summary["offset_nm"] == pytest.approx(shift_nm, abs=0.03)


def test_holmium_uv_visible_boundary_is_400_nm(rng) -> None:
    """The ±1 nm (UV) / ±3 nm (visible) split of Ph. Eur. 2.2.25 (**seen**) at 400 nm, the
    usual edge of the ultraviolet (**common practice**): two synthetic bands at 395 and
    405 nm read 2 nm high; the first fails, the second passes."""
    wl = np.arange(380.0, 420.01, 0.5)
    bands = (395.0, 405.0)
    spectra = ms.make_spectra(holmium_spectrum(wl, 2.0, rng, band_nm=bands), wl)
    check = ms.check_wavelength_scale(spectra, bands_nm=bands)
    assert check.items["passed"].tolist() == [False, True]
    np.testing.assert_allclose(check.items["high"] - check.items["expected"], [1.0, 3.0])


def test_band_position_without_a_band() -> None:
    """A flat stretch has no maximum inside the window: NaN and a note, no guess."""
    wl = np.arange(230.0, 260.0, 0.5)
    pos, u, note = band_position(wl, 0.1 + 0.001 * wl, 241.15, search_nm=3.0)
    assert np.isnan(pos) and np.isnan(u) and "no band maximum" in note


def kcl_spectrum(a_at_200: float) -> tuple[np.ndarray, np.ndarray]:
    """Synthetic KCl cut-off: absorbance falling steeply with wavelength, 0.2 AU per nm,
    equal to ``a_at_200`` at 200 nm (1 nm grid, 190-230 nm). The slope makes the reading
    depend on where it is taken: 198 nm reads 0.4 AU more than 200 nm."""
    wl = np.arange(190.0, 231.0, 1.0)
    return wl, np.clip(a_at_200 - 0.2 * (wl - 200.0), 0.05, None)


def test_kcl_stray_light_rule() -> None:
    """12 g/L KCl, 1 cm: A at 200 nm must exceed 2.0 (Ph. Eur. table in CHECKS.md,
    **seen**). On a steep cut-off, 2.3 at 200 nm passes and 1.8 fails, and the reading
    reported is the one at 200 nm; the limit sits between 1.98 (fails) and 2.02 (passes).
    The bound s ≤ 10^−A/(1 − 10^−A) follows the noise model's stray-light convention
    (CHECKS.md, A = −log10((T + s)/(1 + s))), written out here."""
    readings = {}
    for a200, passed in ((2.3, True), (1.8, False), (2.02, True), (1.98, False)):
        wl, a = kcl_spectrum(a200)
        check = ms.check_stray_light(ms.make_spectra(a, wl, ["kcl"]))
        assert check.passed is passed, a200
        assert float(check.items["measured"].iloc[0]) == pytest.approx(a200, abs=1e-12)
        assert check.settings["wavelength_nm"] == KCL_NM
        assert check.settings["limit_au"] == KCL_LIMIT_AU
        readings[a200] = check
    s = readings[2.3].summary["stray_fraction_bound"]
    assert s == pytest.approx(10**-2.3 / (1 - 10**-2.3))
    model = ms.NoiseModel(k0=1e-5, stray=s)
    assert float(model.apparent_absorbance(50.0)) == pytest.approx(2.3, abs=1e-9)
    assert stray_fraction_bound(0.0) == float("inf")


def test_kcl_check_wavelength_is_a_parameter() -> None:
    """Newer pharmacopoeia editions are recalled as reading KCl at 198 nm (CHECKS.md,
    **from memory**, unverified): the check wavelength is a parameter, and the same
    spectrum read there gives the reading 0.4 AU higher (synthetic slope 0.2 AU/nm)."""
    wl, a = kcl_spectrum(1.8)
    check = ms.check_stray_light(ms.make_spectra(a, wl, ["kcl"]), wavelength_nm=198.0)
    assert check.passed
    assert float(check.items["measured"].iloc[0]) == pytest.approx(2.2, abs=1e-12)
