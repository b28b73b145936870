"""Inputs of ``prepared_standard`` (mixsolve.uncertainty.preparation) refused in one line.

The worked example it reproduces is in tests/external/test_eurachem_standard.py; here only
the boundary checks, each message pinned.
"""

from __future__ import annotations

import pytest

import mixsolve as ms

GOOD = {"mass_mg": 100.28, "volume_ml": 100.0, "u_mass_mg": 0.05}


@pytest.mark.parametrize(("change", "message"), [
    ({"u_mass_mg": None}, r"^mass_mg: no uncertainty given; give u_mass_mg .* or "
                          r"balance_linearity_mg"),
    ({"balance_linearity_mg": 0.1}, r"^u_mass_mg: given with balance_linearity_mg; give one"),
    ({"u_volume_ml": 0.07, "fill_sd_ml": 0.02}, r"^u_volume_ml: given with fill_sd_ml; give "
                                                r"u\(V\) whole or its parts"),
    ({"flask": "flask-A", "volume_tolerance_ml": 0.1}, r"^flask: given with "
                                                       r"volume_tolerance_ml"),
    ({"volume_ml": 150.0}, r"^flask: no 150 mL flask-A in the table \(sizes 5, 10, .*\); give "
                           r"volume_tolerance_ml or u_volume_ml$"),
    ({"flask": "pipette-A"}, r"^flask: 'pipette-A' is not one of 'flask-A', 'flask-B'$"),
    ({"purity": 1.2}, r"^purity: 1.2 is not a number > 0 and ≤ 1; a mass fraction"),
    ({"purity": 0}, r"^purity: 0 is not a number > 0"),
    ({"u_mass_mg": -1}, r"^u_mass_mg: -1 mg is not a number ≥ 0$"),
    ({"mass_mg": 0}, r"^mass_mg: 0 mg is not a positive number$"),
    ({"temperature_range_c": float("nan")}, r"^temperature_range_c: nan °C is not a finite"),
    ({"distribution": "normal"}, r"^distribution: 'normal' is not one of 'rectangular', "
                                 r"'triangular'$"),
    ({"dilution": "10"}, r"^dilution: step '10' is not ALIQUOT/FINAL"),
    ({"dilution": 3}, r"^dilution: 3 is not ALIQUOT/FINAL text or a Dilution$"),
    ({"unit": "nm"}, r"^unit: 'nm' is not a concentration"),
])
def test_bad_inputs_are_refused_in_one_line(change, message) -> None:
    kwargs = {**GOOD, **change}
    with pytest.raises(ms.InputError, match=message):
        ms.prepared_standard(**{k: v for k, v in kwargs.items() if v is not None})


def test_amount_unit_needs_the_molar_mass() -> None:
    with pytest.raises(ms.InputError, match=r"^unit: mmol/L is an amount concentration; give "
                                            r"molar_mass_g_per_mol"):
        ms.prepared_standard(**GOOD, unit="mmol/L")


def test_a_parsed_dilution_is_taken_as_is() -> None:
    """A ``Dilution`` object and its text give the same result (the parser's own rules)."""
    text = ms.prepared_standard(**GOOD, dilution="1:pipette-A/50:flask-A")
    parsed = ms.prepared_standard(**GOOD, dilution=ms.parse_dilution("1:pipette-A/50:flask-A"))
    assert text == parsed
    assert text.table()["part"].tolist() == ["stock", "stock", "stock", "dilution", "dilution"]
