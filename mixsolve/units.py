"""Units of absorptivity and concentration, handled with pint.

A library stores absorptivity in one of two canonical units: molar absorptivity
``L/(mol*cm)`` (concentrations come out in mol/L) or specific absorptivity
``L/(g*cm)`` (concentrations in g/L). Any other unit a user gives is parsed
with pint and converted to the canonical one of the same kind.
"""

from __future__ import annotations

from functools import lru_cache
from typing import TYPE_CHECKING, Literal

import numpy as np

from mixsolve.errors import UnitError

if TYPE_CHECKING:  # pint is imported when a unit is first parsed: a run in the library's
    import pint  # own units never needs it (issue 19: pay only for what a command uses)

Basis = Literal["molar", "mass"]

#: Canonical absorptivity unit per basis.
ABSORPTIVITY_UNITS: dict[str, str] = {"molar": "L/(mol*cm)", "mass": "L/(g*cm)"}
#: Concentration unit that a canonical library yields at 1 cm.
CONCENTRATION_UNITS: dict[str, str] = {"molar": "mol/L", "mass": "g/L"}


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """Return the shared pint registry (created once, with pint imported, on first use)."""
    import pint

    ureg = pint.UnitRegistry()
    # Common lab spellings pint does not know by default.
    ureg.define("molar = mol / L = M")
    return ureg


def _parse(text: str, what: str) -> pint.Unit:
    import pint

    ureg = registry()
    cleaned = str(text).strip().replace("µ", "u").replace("μ", "u")
    if not cleaned:
        raise UnitError(f"{what}: empty unit")
    try:
        quantity = ureg.parse_expression(cleaned)
    except Exception as exc:  # pint raises several unrelated types
        raise UnitError(f"{what}: unknown unit {text!r} ({exc.__class__.__name__})") from None
    if not isinstance(quantity, pint.Quantity):
        raise UnitError(f"{what}: {text!r} is a number, not a unit")
    if quantity.magnitude != 1:
        raise UnitError(f"{what}: {text!r} carries a factor; give a plain unit such as mg/L")
    return quantity.units


def _classify(parsed: pint.Unit, canonical: dict[str, str]) -> tuple[Basis, float] | None:
    """The basis whose canonical unit shares ``parsed``'s dimensions, and the factor to it."""
    ureg = registry()
    for basis, name in canonical.items():
        target = ureg.parse_expression(name).units
        if parsed.dimensionality == target.dimensionality:
            return basis, float((1 * parsed).to(target).magnitude)  # type: ignore[return-value]
    return None


def absorptivity_basis(unit: str) -> tuple[Basis, float]:
    """Classify an absorptivity unit and give its factor to the canonical unit.

    Parameters
    ----------
    unit : str
        For example ``"L/(mol*cm)"``, ``"L mol^-1 cm^-1"``, ``"mL/(mg*cm)"``.

    Returns
    -------
    basis : {"molar", "mass"}
    factor : float
        Multiply values in ``unit`` by this to get the canonical unit of ``basis``.

    Raises
    ------
    UnitError
        If the unit is unknown or is not volume / (amount or mass · length).
    """
    found = _classify(_parse(unit, "absorptivity unit"), ABSORPTIVITY_UNITS)
    if found is not None:
        return found
    raise UnitError(
        f"absorptivity unit {unit!r} has dimensions "
        f"{_parse(unit, 'absorptivity unit').dimensionality}; expected "
        "volume/(amount*length) such as L/(mol*cm) or volume/(mass*length) such as L/(g*cm)"
    )


def concentration_basis(unit: str, where: str = "concentration unit") -> tuple[Basis, float]:
    """Classify a concentration unit and give its factor to mol/L or g/L.

    Parameters
    ----------
    unit : str
        For example ``"mmol/L"``, ``"µg/mL"``, ``"mg/L"``, ``"M"``.
    where : str
        Used in the error message to say where the unit came from.

    Returns
    -------
    basis : {"molar", "mass"}
    factor : float
        Multiply values in ``unit`` by this to get mol/L (molar) or g/L (mass).
    """
    found = _classify(_parse(unit, where), CONCENTRATION_UNITS)
    if found is not None:
        return found
    raise UnitError(
        f"{where}: {unit!r} is not a concentration; expected amount/volume such as mmol/L "
        "or mass/volume such as mg/L"
    )


def conversion_factor(
    from_unit: str, to_unit: str, molar_mass_g_per_mol: float | np.ndarray | None = None
) -> float | np.ndarray:
    """Factor that turns a concentration in ``from_unit`` into ``to_unit``.

    Parameters
    ----------
    from_unit, to_unit : str
        Concentration units (amount or mass per volume).
    molar_mass_g_per_mol : float or array, optional
        Needed, in g/mol, only when converting between amount and mass concentrations;
        an array gives one factor per component. NaN entries mean "unknown".

    Raises
    ------
    UnitError
        If either unit is not a concentration, or a molar mass is needed but missing.
    """
    basis_from, f_from = concentration_basis(from_unit, "unit of the results")
    basis_to, f_to = concentration_basis(to_unit, "unit")
    factor = f_from / f_to
    if basis_from == basis_to:
        return factor
    if molar_mass_g_per_mol is None or np.any(~np.isfinite(np.asarray(molar_mass_g_per_mol))):
        raise UnitError(
            f"unit: converting {from_unit} to {to_unit} needs the molar mass of every "
            "component; add molar masses to the library (molar_mass_g_per_mol)"
        )
    mm = np.asarray(molar_mass_g_per_mol, dtype=float)
    # mol/L -> g/L multiplies by M; g/L -> mol/L divides by M.
    return factor * mm if basis_from == "molar" else factor / mm
