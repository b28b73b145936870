"""Dilutions and volumetric tolerances (mixsolve.uncertainty.volumetric).

The class tolerances are from memory of ISO 648/1042/8655 (see the module); these tests
check the arithmetic and the parsing, not those values.
"""

from __future__ import annotations

import math

import pytest

import mixsolve as ms
from mixsolve.uncertainty.volumetric import VolumeStep, parse_dilution, volume_step


def test_factor_and_relative_uncertainty_by_hand() -> None:
    """1 → 10 mL then 2 → 25 mL, explicit tolerances, rectangular:
    F = (10/1)(25/2) = 125; u_rel = √Σ (a/√3/V)²."""
    dil = parse_dilution("1±0.01/10±0.02,2±0.01/25±0.03")
    assert dil.factor == pytest.approx(125.0)
    parts = [0.01 / 1, 0.02 / 10, 0.01 / 2, 0.03 / 25]
    expected = math.sqrt(sum((p / math.sqrt(3)) ** 2 for p in parts))
    assert dil.relative_uncertainty == pytest.approx(expected)


def test_devices_from_the_table() -> None:
    """Defaults: class A pipette for the aliquot, class A flask for the final volume; a
    piston pipette uses the smallest nominal size holding the volume."""
    dil = parse_dilution("1/10")
    assert [s.device for s in dil.steps] == ["pipette-A", "flask-A"]
    assert dil.steps[0].tolerance_ml == 0.008
    piston = volume_step(0.15, "aliquot", device="piston")
    assert piston.tolerance_ml == pytest.approx(0.008 * 0.2)
    assert piston.random_sd_ml == pytest.approx(0.003 * 0.2)
    assert piston.standard_uncertainty_ml == pytest.approx(
        math.hypot(0.0016 / math.sqrt(3), 0.0006))
    b = parse_dilution("1:pipette-B/10:flask-B")
    assert b.steps[1].tolerance_ml == pytest.approx(0.05)


def test_triangular_divides_by_root_six() -> None:
    """GUM 4.3.9: a triangular distribution of half-width a has u = a/√6."""
    step = VolumeStep(10.0, "final", 0.06, distribution="triangular")
    assert step.standard_uncertainty_ml == pytest.approx(0.06 / math.sqrt(6))


@pytest.mark.parametrize(("text", "message"), [
    ("10", r"step '10' is not ALIQUOT/FINAL"),
    ("1/x", r"'x' in step '1/x' is not a volume in mL"),
    ("1/7", r"no 7 mL flask-A in the table \(sizes 5, 10"),
    ("1:burette/10", r"unknown device 'burette'"),
    ("0/10", r"^dilution, volume: 0 mL is not a positive number$"),
    ("20:piston/100", r"above the largest piston pipette"),
])
def test_bad_dilutions(text, message) -> None:
    """Each malformed dilution names the part at fault."""
    with pytest.raises(ms.InputError, match=message):
        parse_dilution(text)
