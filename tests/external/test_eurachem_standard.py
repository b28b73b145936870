"""A published worked example of a combined standard uncertainty: preparing a standard.

Source: Eurachem/CITAC Guide CG 4, "Quantifying Uncertainty in Analytical Measurement",
3rd ed. (2012), example A1, preparation of a cadmium calibration standard of about
1000 mg/L: c = 1000·m·P/V with P = 0.9999 (± 0.0001, rectangular: u = 0.000058),
m = 100.28 mg (u = 0.05 mg), V = 100.0 mL (u = 0.07 mL) → c = 1002.7 mg/L, u_c = 0.9 mg/L,
U = 1.8 mg/L (k = 2); relative uncertainties P 0.000058, m 0.0005, V 0.0007, c 0.0009.
The 3rd edition itself was not at hand: these numbers are **from memory** (CHECKS.md), and
**seen** in two secondary sources: the Eurachem web version of the guide's appendix A1
(2nd edition, Table A1.1, same numbers) and the documentation of GTC (the uncertainty
library of the Measurement Standards Laboratory of New Zealand), page "Preparation of a
Calibration Standard (A1)", which reproduces the 3rd edition's A1 with the volume composed
of a flask tolerance ± 0.1 mL (triangular), a fill repeatability of 0.02 mL and a
temperature term ± 0.084 mL (rectangular), and prints u_c = 0.835199 mg/L from unrounded
intermediates with the budget m 0.49995, V_T 0.486284, V_flask 0.40935, V_rep 0.20054,
P 0.0578967 mg/L. The ± 0.084 mL is 100 mL × ± 4 °C × 2.1·10⁻⁴ /°C (the guide's
temperature range and water's expansion coefficient, **from memory**).

Independent checks computed here: the law of propagation (JCGM 100:2008, eq. 10) with
sensitivities by numpy finite differences, and a seeded Monte Carlo (JCGM 101:2008) drawn
with numpy from the stated distributions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import mixsolve as ms

U_P = 0.0001 / math.sqrt(3)  # purity ± 0.0001, rectangular (the guide: 0.000058)
A1 = {"mass_mg": 100.28, "volume_ml": 100.0, "purity": 0.9999, "u_purity": U_P,
      "u_mass_mg": 0.05}
#: The volume's parts in A1: flask ± 0.1 mL triangular (the class A 100 mL flask of the
#: volumetric table, ± 0.10 mL, from memory of ISO 1042), fill SD 0.02 mL, ± 4 °C.
A1_VOLUME_PARTS = {"flask": "flask-A", "distribution": "triangular", "fill_sd_ml": 0.02,
                   "temperature_range_c": 4.0}


def _sig(value: float, digits: int) -> float:
    return float(f"{value:.{digits - 1}e}")


def _gum_eq10(f, x: np.ndarray, u: np.ndarray) -> float:
    """u_c = √Σ (∂f/∂xᵢ · u(xᵢ))², sensitivities by central differences (numpy)."""
    grads = []
    for i in range(x.size):
        h = np.zeros_like(x)
        h[i] = 1e-6 * max(abs(x[i]), 1.0)
        grads.append((f(x + h) - f(x - h)) / (2 * h[i]))
    return float(np.sqrt(np.sum((np.array(grads) * u) ** 2)))


def test_eurachem_a1_with_the_guides_stated_uncertainties() -> None:
    """Eurachem/CITAC A1 (from memory; seen in the guide's web appendix, Table A1.1):
    with u(V) = 0.07 mL as stated, c = 1002.7 mg/L, u_c = 0.9 mg/L, U = 1.8 mg/L (k = 2,
    from the rounded u_c as the guide does), the relative parts 0.000058, 0.0005, 0.0007
    and 0.0009; u_stock_rel 8.6·10⁻⁴ (CHECKS.md)."""
    std = ms.prepared_standard(**A1, u_volume_ml=0.07)
    assert std.unit == "mg/L"
    assert round(std.concentration, 1) == 1002.7
    assert round(std.std_uncertainty, 1) == 0.9
    assert 2 * round(std.std_uncertainty, 1) == pytest.approx(1.8)
    assert std.expanded_uncertainty() == pytest.approx(2 * std.std_uncertainty)
    rel = {s.source: s.relative_uncertainty for s in std.sources}
    assert _sig(rel["purity"], 2) == 0.000058
    assert _sig(rel["mass"], 1) == 0.0005
    assert _sig(rel["volume"], 1) == 0.0007
    assert _sig(std.relative_uncertainty, 1) == 0.0009
    assert _sig(std.u_stock_rel, 2) == 0.00086
    # No dilution: the stock is the standard, all of it shared.
    assert std.u_dilution_rel == 0.0 and std.u_concentration == 0.0
    assert std.concentration == std.stock_concentration


def test_eurachem_a1_volume_composition_and_gtc_budget() -> None:
    """Eurachem/CITAC A1, the volume's parts (from memory; seen in GTC's A1 page): flask
    ± 0.1 mL triangular → 0.04 mL, fill 0.02 mL, temperature 0.084/√3 → 0.05 mL, together
    0.07 mL; from the unrounded parts u_c = 0.835199 mg/L and the budget of GTC's page."""
    std = ms.prepared_standard(**A1, **A1_VOLUME_PARTS)
    parts = [s for s in std.sources if s.source.startswith("volume")]
    assert [round(s.std_uncertainty, 2) for s in parts] == [0.04, 0.02, 0.05]
    assert parts[2].std_uncertainty == pytest.approx(0.084 / math.sqrt(3), rel=1e-12)
    assert round(std.u_volume_ml, 2) == 0.07
    assert round(std.concentration, 1) == 1002.7
    assert std.std_uncertainty == pytest.approx(0.835199, rel=1e-5)
    gtc = {"purity": 0.0578967, "mass": 0.49995, "volume, calibration": 0.40935,
           "volume, fill": 0.20054, "volume, temperature": 0.486284}
    for source, want in gtc.items():
        (row,) = [s for s in std.sources if s.source.startswith(source)]
        assert std.concentration * row.relative_uncertainty == pytest.approx(want, rel=2e-5)


def test_eurachem_a1_against_gum_eq10_and_monte_carlo() -> None:
    """JCGM 100:2008 eq. 10 with numpy finite differences, and a seeded JCGM 101 Monte
    Carlo of c = 1000·(m + δm)·P/(V + δV_cal + δV_fill + δV_T) with the A1 distributions
    (rectangular P, normal m, triangular flask, normal fill, rectangular temperature):
    both agree with the relative-form result (Monte Carlo within 1.5 %, its SD from
    2·10⁵ draws has a sampling error of about 0.2 %)."""
    std = ms.prepared_standard(**A1, **A1_VOLUME_PARTS)

    def model(x: np.ndarray) -> float:
        m, p, v, d_fill, d_temp = x
        return 1000.0 * m * p / (v + d_fill + d_temp)

    x = np.array([100.28, 0.9999, 100.0, 0.0, 0.0])
    u = np.array([0.05, U_P, 0.1 / math.sqrt(6), 0.02, 0.084 / math.sqrt(3)])
    assert _gum_eq10(model, x, u) == pytest.approx(std.std_uncertainty, rel=1e-6)

    rng = np.random.default_rng(2012)
    n = 200_000
    m = rng.normal(100.28, 0.05, n)
    p = rng.uniform(0.9998, 1.0, n)
    v = (100.0 + rng.triangular(-0.1, 0.0, 0.1, n) + rng.normal(0.0, 0.02, n)
         + rng.uniform(-0.084, 0.084, n))
    c = 1000.0 * m * p / v
    assert float(np.mean(c)) == pytest.approx(std.concentration, abs=0.01)
    assert float(np.std(c, ddof=1)) == pytest.approx(std.std_uncertainty, rel=0.015)


def test_dilution_of_the_stock_splits_shared_and_own_parts() -> None:
    """A 10 mL class A pipette into a 100 mL class A flask (± 0.020 and ± 0.10 mL,
    rectangular; from memory of ISO 648/1042, the volumetric table): the dilution's
    relative u and the whole u_c agree with JCGM 100:2008 eq. 10 by numpy finite
    differences on c = 1000·m·P/V·V_a/V_f; the stock's part is unchanged by the dilution."""
    stock = ms.prepared_standard(**A1, u_volume_ml=0.07)
    std = ms.prepared_standard(**A1, u_volume_ml=0.07, dilution="10/100")
    assert std.concentration == pytest.approx(stock.concentration / 10, rel=1e-12)
    assert std.u_stock_rel == pytest.approx(stock.u_stock_rel, rel=1e-12)
    u_a, u_f = 0.02 / math.sqrt(3), 0.10 / math.sqrt(3)
    assert std.u_dilution_rel == pytest.approx(math.hypot(u_a / 10, u_f / 100), rel=1e-12)
    assert std.u_concentration == pytest.approx(std.concentration * std.u_dilution_rel)

    def model(x: np.ndarray) -> float:
        m, p, v, v_a, v_f = x
        return 1000.0 * m * p / v * v_a / v_f

    x = np.array([100.28, 0.9999, 100.0, 10.0, 100.0])
    u = np.array([0.05, U_P, 0.07, u_a, u_f])
    assert _gum_eq10(model, x, u) == pytest.approx(std.std_uncertainty, rel=1e-6)


def test_units_through_pint() -> None:
    """The A1 standard in g/L and in mmol/L: 1.0027 g/L; with M(Cd) = 112.41 g/mol
    (IUPAC standard atomic weight, from memory) 1002.7/112.41 = 8.920 mmol/L; the relative
    uncertainty does not depend on the unit."""
    mg = ms.prepared_standard(**A1, u_volume_ml=0.07)
    g = ms.prepared_standard(**A1, u_volume_ml=0.07, unit="g/L")
    mmol = ms.prepared_standard(**A1, u_volume_ml=0.07, unit="mmol/L",
                                molar_mass_g_per_mol=112.41)
    assert round(g.concentration, 4) == 1.0027
    assert round(mmol.concentration, 3) == 8.920
    assert mmol.concentration == pytest.approx(mg.concentration / 112.41, rel=1e-12)
    for other in (g, mmol):
        assert other.relative_uncertainty == pytest.approx(mg.relative_uncertainty, rel=1e-12)


def test_balance_linearity_counted_for_tare_and_gross() -> None:
    """Eurachem/CITAC example A2 (weighing KHP by difference; from memory): a balance
    linearity of ± 0.15 mg is rectangular, 0.15/√3 ≈ 0.09 mg, and counts twice (tare and
    gross), u(m) = √2·0.087 ≈ 0.12-0.13 mg (the guide rounds 0.087 to 0.09 first: 0.13)."""
    std = ms.prepared_standard(388.2, 100.0, balance_linearity_mg=0.15, u_volume_ml=0.07)
    (mass,) = [s for s in std.sources if s.source == "mass"]
    assert mass.std_uncertainty == pytest.approx(math.sqrt(2) * 0.15 / math.sqrt(3), rel=1e-12)
    assert mass.std_uncertainty == pytest.approx(0.13, abs=0.01)
