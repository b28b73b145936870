"""The shipped equation sets against what ../shared/CHECKS.md records of their papers.

Every coefficient here is **from memory** (CHECKS.md; the citations are seen): these checks
are internal consistency of recalled values (the shipped files say what CHECKS.md says,
and the identities the papers state hold among them), not a check of mixsolve's code
against the papers. The code itself is checked by the seeded simulations of
tests/test_equations.py.
"""

from __future__ import annotations

import numpy as np

import mixsolve as ms
from mixsolve.equations.model import absorptivity_unit, implied_absorptivity, linear_map


def _coefficients(name: str) -> dict[tuple[str, str], float]:
    """{(component, "663.6 nm" or "uses chl_a"): coefficient} of a shipped set."""
    eq = ms.read_equations(name)
    return {(t.component, f"{t.wavelength_nm:g} nm" + (f" {t.read}" if t.read else "")
             if t.wavelength_nm is not None else f"uses {t.uses}"): t.coefficient
            for t in eq.terms}


def test_porra_1989_file_and_implied_absorptivities() -> None:
    """Porra, Thompson & Kriedemann 1989 (BBA 975:384), buffered 80 % acetone; from memory.

    Chl a = 12.25 A663.6 − 2.55 A646.6, Chl b = 20.31 A646.6 − 4.91 A663.6; implied
    absorptivities Chl a 85.96 @663.6, 20.78 @646.6, Chl b 10.79 @663.6, 51.85 @646.6
    L g⁻¹ cm⁻¹ (CHECKS.md); the paper's total 17.76 A646.6 + 7.34 A663.6 equals the sum.
    """
    got = _coefficients("porra1989")
    assert got[("chl_a", "663.6 nm")] == 12.25 and got[("chl_a", "646.6 nm")] == -2.55
    assert got[("chl_b", "646.6 nm")] == 20.31 and got[("chl_b", "663.6 nm")] == -4.91
    eq = ms.read_equations("porra1989")
    k = implied_absorptivity(eq) * absorptivity_unit(eq)[1]
    assert absorptivity_unit(eq)[0] == "L/(g*cm)"
    np.testing.assert_allclose(k, [[85.96, 10.79], [20.78, 51.85]], atol=0.005)
    g = linear_map(eq).g
    total = g[eq.components.index("chl_a_plus_b")]
    np.testing.assert_allclose(total, [7.34, 17.76], atol=0.005)  # A663.6, A646.6


def test_lichtenthaler_1987_carotenoid_line() -> None:
    """Lichtenthaler 1987 (Methods Enzymol. 148:350), 80 % acetone; from memory.

    Cx+c = (1000 A470 − 1.82 Ca − 85.02 Cb)/198: the implied absorptivity of carotenoids is
    198 L g⁻¹ cm⁻¹ at 470 nm and 0 at the chlorophyll wavelengths, and chlorophylls a and b
    absorb 1.82 and 85.02 L g⁻¹ cm⁻¹ at 470 nm (the equation's own statement).
    """
    eq = ms.read_equations("lichtenthaler1987")
    k = implied_absorptivity(eq) * absorptivity_unit(eq)[1]
    row470 = [nm for _, nm in eq.readings].index(470.0)
    np.testing.assert_allclose(k[:, eq.primary.index("carotenoids")][row470], 198.0)
    np.testing.assert_allclose(np.delete(k[:, 2], row470), 0.0, atol=1e-9)
    np.testing.assert_allclose(k[row470, :2], [1.82, 85.02], rtol=1e-9)


def test_jeffrey_humphrey_1975_trichromatic() -> None:
    """Jeffrey & Humphrey 1975 (Biochem. Physiol. Pflanzen 167:191), 90 % acetone, E = A −
    A750; from memory (chl a line corroborated by one secondary source, CHECKS.md)."""
    got = _coefficients("jeffrey_humphrey1975")
    expected = {"chl_a": (11.85, -1.54, -0.08), "chl_b": (-5.43, 21.03, -2.66),
                "chl_c1_c2": (-1.67, -7.60, 24.52)}
    for comp, (m664, m647, m630) in expected.items():
        assert (got[(comp, "664 nm")], got[(comp, "647 nm")], got[(comp, "630 nm")]) == \
            (m664, m647, m630)
    assert ms.read_equations("jeffrey_humphrey1975").reference_nm == 750.0


def test_lorenzen_1967_acid_ratio() -> None:
    """Lorenzen 1967 (Limnol. Oceanogr. 12:343), from memory: Chl a = 26.7 (E664b − E665a),
    Phaeo a = 26.7 (1.7 E665a − E664b). The implied absorptivities must give pure chl a
    the acid ratio 1.7 (before/after) and phaeophytin a the ratio 1 (acid changes nothing)."""
    eq = ms.read_equations("lorenzen1967")
    k = implied_absorptivity(eq)
    before = eq.readings.index(("before", 664.0))
    after = eq.readings.index(("after", 665.0))
    chl, phaeo = eq.primary.index("chl_a"), eq.primary.index("phaeo_a")
    np.testing.assert_allclose(k[before, chl] / k[after, chl], 1.7, rtol=1e-12)
    np.testing.assert_allclose(k[before, phaeo] / k[after, phaeo], 1.0, rtol=1e-12)
