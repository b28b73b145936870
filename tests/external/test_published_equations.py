"""Published simultaneous equations for chlorophylls reproduced by a library (CHECKS.md).

A set of simultaneous equations C = M·A (µg/mL from absorbances at 1 cm) implies the
absorptivities E = M⁻¹ in mL/(µg·cm) = L/(mg·cm); ×1000 gives L/(g·cm). A library built from
E and unmixed by OLS at exactly the equations' wavelengths must give back C = M·A for any
absorbances. The check holds by construction (internal consistency): a wrongly recalled digit
in a coefficient changes M and E alike and cannot make a correct tool fail, while an error in
mixsolve's import, unit conversion, wavelength selection or solver does.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import mixsolve as ms

# Porra, Thompson & Kriedemann 1989, buffered 80 % acetone; rows Chl a, Chl b; columns
# A663.6, A646.6. From memory (citation seen).
PORRA_WL = [663.6, 646.6]
PORRA_M = np.array([[12.25, -2.55],
                    [-4.91, 20.31]])

# Lichtenthaler 1987, 80 % acetone: Ca, Cb and carotenoids Cx+c from A663.2, A646.8, A470.
# From memory (citation seen).
LICHT_WL = [663.2, 646.8, 470.0]
_CA = np.array([12.25, -2.79, 0.0])
_CB = np.array([-5.10, 21.50, 0.0])
_CXC = (np.array([0.0, 0.0, 1000.0]) - 1.82 * _CA - 85.02 * _CB) / 198.0
LICHT_M = np.vstack([_CA, _CB, _CXC])


def _library_from_equations(matrix: np.ndarray, wavelengths: list[float],
                            names: list[str]) -> tuple[np.ndarray, pd.DataFrame]:
    """Absorptivities (L/(g*cm)) implied by C = M·A, as the array and as an import table."""
    eps = np.linalg.inv(matrix) * 1000.0  # rows: wavelengths, columns: components
    table = pd.DataFrame(eps, index=wavelengths, columns=names)
    return eps, table


def _absorbance_sets(rng: np.random.Generator, n_wl: int) -> np.ndarray:
    """Random absorbances (0-1.5 AU) plus a few hand-picked rows, one row per sample."""
    picked = np.zeros((4, n_wl))
    picked[0] = 0.5
    picked[1, 0] = 1.0  # only the first wavelength absorbs
    picked[2, -1] = 0.25  # only the last wavelength absorbs
    picked[3] = np.linspace(0.1, 0.9, n_wl)
    return np.vstack([picked, rng.uniform(0.0, 1.5, size=(40, n_wl))])


def _unmix_equations(table: pd.DataFrame, absorbance: np.ndarray,
                     wavelengths: list[float]) -> np.ndarray:
    lib = ms.import_absorptivities(table, "L/(g*cm)", solvent="80 % acetone")
    spectra = ms.make_spectra(absorbance, wavelengths)
    result = ms.unmix(spectra, lib, method="ols", wavelengths=wavelengths, unit="ug/mL")
    assert result.attrs["unit"] == "ug/mL"
    # As many wavelengths as components: exact solution, no residual degrees of freedom.
    assert all("no_dof" in f.split(";") for f in result["flags"].values)
    return result["concentration"].transpose("sample", "component").values


def test_porra_1989_equations_reproduced(rng: np.random.Generator) -> None:
    """Porra, Thompson & Kriedemann 1989 (BBA 975:384), buffered 80 % acetone, µg/mL, 1 cm.

    Coefficients from memory (citation seen); holds by construction (internal consistency):
    the library of the implied absorptivities must return Chl a = 12.25 A663.6 − 2.55 A646.6
    and Chl b = 20.31 A646.6 − 4.91 A663.6 for random and hand-picked absorbances.
    """
    _, table = _library_from_equations(PORRA_M, PORRA_WL, ["chl_a", "chl_b"])
    absorbance = _absorbance_sets(rng, 2)
    got = _unmix_equations(table, absorbance, PORRA_WL)
    a663, a646 = absorbance[:, 0], absorbance[:, 1]
    expected = np.column_stack([12.25 * a663 - 2.55 * a646, 20.31 * a646 - 4.91 * a663])
    np.testing.assert_allclose(got, expected, rtol=1e-9, atol=1e-12)


def test_porra_1989_implied_absorptivities() -> None:
    """Porra et al. 1989: implied absorptivities as listed in CHECKS.md (from memory).

    Chl a 85.96 @663.6, 20.78 @646.6; Chl b 10.79 @663.6, 51.85 @646.6 L g⁻¹ cm⁻¹, to 4
    significant figures, and the library keeps them in L/(g*cm).
    """
    _, table = _library_from_equations(PORRA_M, PORRA_WL, ["chl_a", "chl_b"])
    lib = ms.import_absorptivities(table, "L/(g*cm)")
    assert lib.attrs["unit"] == "L/(g*cm)"
    eps = lib["absorptivity"]
    listed = {("chl_a", 663.6): 85.96, ("chl_a", 646.6): 20.78,
              ("chl_b", 663.6): 10.79, ("chl_b", 646.6): 51.85}
    for (comp, wl), value in listed.items():
        got = float(eps.sel(component=comp, wavelength=wl))
        assert float(f"{got:.4g}") == value, (comp, wl, got)


def test_porra_1989_total_is_sum(rng: np.random.Generator) -> None:
    """Porra et al. 1989: total Chl a+b = 17.76 A646.6 + 7.34 A663.6 (from memory).

    The unmixed Chl a + Chl b must match the published total to the equations' rounding
    (half a unit in the last printed digit of each coefficient).
    """
    _, table = _library_from_equations(PORRA_M, PORRA_WL, ["chl_a", "chl_b"])
    absorbance = _absorbance_sets(rng, 2)
    got = _unmix_equations(table, absorbance, PORRA_WL).sum(axis=1)
    a663, a646 = absorbance[:, 0], absorbance[:, 1]
    total = 17.76 * a646 + 7.34 * a663
    rounding = 0.005 * (np.abs(a646) + np.abs(a663)) + 1e-12
    assert np.all(np.abs(got - total) <= rounding)


def test_lichtenthaler_1987_three_component(rng: np.random.Generator) -> None:
    """Lichtenthaler 1987 (Methods Enzymol. 148:350), 80 % acetone, µg/mL, 1 cm.

    Coefficients from memory (citation seen); holds by construction (internal consistency).
    Ca = 12.25 A663.2 − 2.79 A646.8; Cb = 21.50 A646.8 − 5.10 A663.2;
    Cx+c = (1000 A470 − 1.82 Ca − 85.02 Cb)/198: a three-component, three-wavelength system.
    """
    names = ["chl_a", "chl_b", "carotenoids"]
    eps, table = _library_from_equations(LICHT_M, LICHT_WL, names)
    # The carotenoid line means carotenoids absorb only at 470 nm, 198 L/(g*cm).
    np.testing.assert_allclose(eps[:, 2], [0.0, 0.0, 198.0], atol=1e-9)
    absorbance = _absorbance_sets(rng, 3)
    got = _unmix_equations(table, absorbance, LICHT_WL)
    a663, a646, a470 = absorbance.T
    ca = 12.25 * a663 - 2.79 * a646
    cb = 21.50 * a646 - 5.10 * a663
    cxc = (1000 * a470 - 1.82 * ca - 85.02 * cb) / 198
    np.testing.assert_allclose(got, np.column_stack([ca, cb, cxc]), rtol=1e-9, atol=1e-9)


@pytest.mark.parametrize("order", [[0, 1, 2], [2, 0, 1], [1, 2, 0]])
def test_lichtenthaler_1987_wavelength_order(order: list[int]) -> None:
    """Lichtenthaler 1987 (from memory): the order the wavelengths are listed in is irrelevant.

    A hand-picked extract, A663.2 = 0.62, A646.8 = 0.28, A470 = 0.71, by construction.
    """
    names = ["chl_a", "chl_b", "carotenoids"]
    _, table = _library_from_equations(LICHT_M, LICHT_WL, names)
    absorbance = np.array([0.62, 0.28, 0.71])
    lib = ms.import_absorptivities(table, "L/(g*cm)")
    spectra = ms.make_spectra(absorbance[None, order], np.asarray(LICHT_WL)[order])
    listed = [LICHT_WL[i] for i in order]
    result = ms.unmix(spectra, lib, method="ols", wavelengths=listed, unit="ug/mL")
    got = result["concentration"].sel(component=names).values[0]
    ca = 12.25 * 0.62 - 2.79 * 0.28
    cb = 21.50 * 0.28 - 5.10 * 0.62
    cxc = (1000 * 0.71 - 1.82 * ca - 85.02 * cb) / 198
    np.testing.assert_allclose(got, [ca, cb, cxc], rtol=1e-9)
