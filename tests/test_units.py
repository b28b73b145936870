"""Tests for mixsolve.units: absorptivity and concentration units with pint."""

from __future__ import annotations

import numpy as np
import pytest

from mixsolve.errors import InputError, UnitError
from mixsolve.units import (
    ABSORPTIVITY_UNITS,
    CONCENTRATION_UNITS,
    absorptivity_basis,
    concentration_basis,
    conversion_factor,
    reference_unit,
    registry,
)


def test_registry_is_shared_and_knows_molar() -> None:
    """One registry; M (molar) is mol/L."""
    assert registry() is registry()
    ureg = registry()
    assert (1 * ureg.parse_expression("M")).to("mol/L").magnitude == pytest.approx(1.0)
    assert (1 * ureg.parse_expression("mM")).to("mol/L").magnitude == pytest.approx(1e-3)


def test_canonical_units() -> None:
    """Canonical units per basis and the concentrations they yield at 1 cm."""
    assert ABSORPTIVITY_UNITS == {"molar": "L/(mol*cm)", "mass": "L/(g*cm)"}
    assert CONCENTRATION_UNITS == {"molar": "mol/L", "mass": "g/L"}


@pytest.mark.parametrize(("unit", "basis", "factor"), [
    ("L/(mol*cm)", "molar", 1.0),
    ("L mol^-1 cm^-1", "molar", 1.0),
    ("L/mol/cm", "molar", 1.0),
    ("M^-1 cm^-1", "molar", 1.0),
    ("1/(M*cm)", "molar", 1.0),
    ("L/(mmol*cm)", "molar", 1e3),
    ("mL/(mmol*cm)", "molar", 1.0),
    ("L/(mol*mm)", "molar", 10.0),
    ("cm^2/mol", "molar", 1e-3),
    ("m^2/mol", "molar", 10.0),
    ("L/(g*cm)", "mass", 1.0),
    ("mL/(mg*cm)", "mass", 1.0),
    ("L/(mg*cm)", "mass", 1e3),
    ("mL/(ug*cm)", "mass", 1e3),
    ("mL/(µg*cm)", "mass", 1e3),
    ("mL/(μg*cm)", "mass", 1e3),  # Greek small mu, not the micro sign
    ("  L/(g*cm) ", "mass", 1.0),
])
def test_absorptivity_basis(unit: str, basis: str, factor: float) -> None:
    """Absorptivity units are classified and scaled to L/(mol*cm) or L/(g*cm)."""
    got_basis, got_factor = absorptivity_basis(unit)
    assert got_basis == basis
    assert got_factor == pytest.approx(factor, rel=1e-12)


@pytest.mark.parametrize(("unit", "match"), [
    ("furlong", r"'furlong' has dimensions \[length\]"),
    ("blorp", r"unknown unit 'blorp'"),
    ("mol/L", r"'mol/L' has dimensions"),
    ("L/cm", r"'L/cm' has dimensions"),
    ("L/(mol*s)", r"'L/\(mol\*s\)' has dimensions"),
    ("", "empty unit"),
    ("   ", "empty unit"),
    ("2 L/(mol*cm)", "carries a factor"),
])
def test_absorptivity_basis_refusals(unit: str, match: str) -> None:
    """Unknown units, wrong dimensions, empty text and factors are UnitErrors."""
    with pytest.raises(UnitError, match=match):
        absorptivity_basis(unit)


@pytest.mark.parametrize(("unit", "basis", "factor"), [
    ("mol/L", "molar", 1.0),
    ("M", "molar", 1.0),
    ("mM", "molar", 1e-3),
    ("uM", "molar", 1e-6),
    ("µM", "molar", 1e-6),
    ("mmol/L", "molar", 1e-3),
    ("umol/L", "molar", 1e-6),
    ("µmol/L", "molar", 1e-6),
    ("nmol/mL", "molar", 1e-6),
    ("mol/m^3", "molar", 1e-3),
    ("g/L", "mass", 1.0),
    ("mg/L", "mass", 1e-3),
    ("mg/mL", "mass", 1.0),
    ("ug/mL", "mass", 1e-3),
    ("µg/mL", "mass", 1e-3),
    ("ng/uL", "mass", 1e-3),
    ("kg/m^3", "mass", 1.0),
])
def test_concentration_basis(unit: str, basis: str, factor: float) -> None:
    """Concentration units are classified and scaled to mol/L or g/L."""
    got_basis, got_factor = concentration_basis(unit)
    assert got_basis == basis
    assert got_factor == pytest.approx(factor, rel=1e-12)


@pytest.mark.parametrize(("unit", "match"), [
    ("mol", "is not a concentration"),
    ("L/(mol*cm)", "is not a concentration"),
    ("furlong", "is not a concentration"),
    ("blorp/L", "unknown unit 'blorp/L'"),
    ("5 mg/L", "carries a factor"),
    ("", "empty unit"),
])
def test_concentration_basis_refusals(unit: str, match: str) -> None:
    """Units that are not concentrations are UnitErrors, named with where they came from."""
    with pytest.raises(UnitError, match=match) as info:
        concentration_basis(unit, where="sheet line 4: unit")
    assert str(info.value).startswith("sheet line 4: unit")


def test_unit_error_is_input_error() -> None:
    """UnitError is an InputError (and a ValueError)."""
    with pytest.raises(InputError):
        absorptivity_basis("blorp")
    with pytest.raises(ValueError):
        concentration_basis("blorp")


@pytest.mark.parametrize(("src", "dst", "factor"), [
    ("mol/L", "mmol/L", 1e3),
    ("mol/L", "µmol/L", 1e6),
    ("mmol/L", "M", 1e-3),
    ("g/L", "mg/L", 1e3),
    ("g/L", "ug/mL", 1e3),
    ("mg/L", "g/L", 1e-3),
    ("mol/L", "mol/L", 1.0),
])
def test_conversion_factor_same_basis(src: str, dst: str, factor: float) -> None:
    """Same basis needs no molar mass, and a given one is ignored."""
    assert conversion_factor(src, dst) == pytest.approx(factor, rel=1e-12)
    assert conversion_factor(src, dst, np.array([np.nan])) == pytest.approx(factor, rel=1e-12)


def test_conversion_factor_amount_mass() -> None:
    """mol/L → g/L multiplies by M; g/L → mol/L divides; prefixes compose."""
    assert conversion_factor("mol/L", "g/L", 250.0) == pytest.approx(250.0)
    assert conversion_factor("mol/L", "mg/L", 250.0) == pytest.approx(250e3)
    assert conversion_factor("g/L", "mol/L", 250.0) == pytest.approx(1 / 250.0)
    assert conversion_factor("mg/L", "umol/L", 250.0) == pytest.approx(1e3 / 250.0)
    mm = np.array([100.0, 893.5])
    np.testing.assert_allclose(conversion_factor("mol/L", "ug/mL", mm), mm * 1e3)
    np.testing.assert_allclose(conversion_factor("g/L", "mmol/L", mm), 1e3 / mm)


def test_conversion_round_trip(rng: np.random.Generator) -> None:
    """Converting there and back is the identity for random molar masses."""
    mm = rng.uniform(50.0, 2000.0, 8)
    there = np.asarray(conversion_factor("umol/L", "mg/L", mm))
    back = np.asarray(conversion_factor("mg/L", "umol/L", mm))
    np.testing.assert_allclose(there * back, 1.0, rtol=1e-12)


@pytest.mark.parametrize("mm", [None, np.nan, np.array([100.0, np.nan]), np.inf])
def test_conversion_needs_every_molar_mass(mm: object) -> None:
    """Amount ↔ mass without a finite molar mass for every component is refused."""
    with pytest.raises(UnitError, match="needs the molar mass of every component"):
        conversion_factor("mol/L", "mg/L", mm)  # type: ignore[arg-type]


def test_conversion_refuses_non_concentrations() -> None:
    """Both ends must be concentrations."""
    with pytest.raises(UnitError, match=r"^unit: 'L/\(g\*cm\)' is not a concentration"):
        conversion_factor("g/L", "L/(g*cm)")
    with pytest.raises(UnitError, match="unit of the results"):
        conversion_factor("furlong", "g/L")


@pytest.mark.parametrize(("unit", "kind", "factor"), [
    ("1", "fraction", 1.0), ("%", "fraction", 0.01), ("percent", "fraction", 0.01),
    ("mol/mol", "mole fraction", 1.0), ("mmol/mol", "mole fraction", 1e-3),
    ("mol %", "mole fraction", 0.01), ("% mol/mol", "mole fraction", 0.01),
    ("g/g", "mass fraction", 1.0), ("mg/kg", "mass fraction", 1e-6),
    ("% w/w", "mass fraction", 0.01), ("%m/m", "mass fraction", 0.01),
    ("mL/mL", "volume fraction", 1.0), ("mL/L", "volume fraction", 1e-3),
    ("% v/v", "volume fraction", 0.01), ("% (v/v)", "volume fraction", 0.01),
    ("% w/v", "mass", 10.0), ("mg/L", "mass", 1e-3), ("mmol/L", "molar", 1e-3),
])
def test_reference_units_fractions_and_percentages(unit: str, kind: str, factor: float) -> None:
    """SI prefixes (BIPM SI Brochure, seen); 1 % w/v = 1 g per 100 mL = 10 g/L (the
    pharmacopoeias' convention, common practice); a fraction is like over like."""
    found, f = reference_unit(unit)
    assert found == kind
    assert f == pytest.approx(factor, rel=1e-12)


@pytest.mark.parametrize("unit", ["ppm", "ppb", "PPM"])
def test_parts_per_refused_with_the_fix(unit: str) -> None:
    with pytest.raises(UnitError, match=rf"unit: '{unit}' does not say per what \(mass or "
                       r"volume\); say mg/L or mg/kg"):
        reference_unit(unit)
    with pytest.raises(UnitError, match=r"say mg/L or mg/kg"):
        concentration_basis(unit)


@pytest.mark.parametrize(("unit", "message"), [
    ("% x/y", r"unknown percentage '% x/y'; use % w/w"),
    ("cm", r"'cm' is neither a concentration nor a fraction"),
    ("mL/g", r"'mL/g' is neither a concentration nor a fraction"),
])
def test_reference_unit_refusals(unit: str, message: str) -> None:
    with pytest.raises(UnitError, match=message):
        reference_unit(unit)


def test_fractions_are_not_concentrations_for_absorptivities() -> None:
    """Beer's law needs amount or mass per volume: a fraction stays refused there."""
    with pytest.raises(UnitError, match=r"'mol/mol' is not a concentration"):
        concentration_basis("mol/mol")
