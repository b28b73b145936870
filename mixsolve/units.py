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
    if str(unit).strip().lower() in _PARTS_PER:
        raise UnitError(f"{where}: {unit!r} does not say per what (mass or volume); say mg/L "
                        "or mg/kg (ug/L or ug/kg for ppb)")
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


#: Kinds of reference value a PLS calibration accepts, and the unit each is converted to.
#: "fraction" is a fraction of unstated kind (a bare ``1`` or ``%``).
REFERENCE_KINDS: dict[str, str] = {
    "molar": "mol/L", "mass": "g/L", "mole fraction": "mol/mol", "mass fraction": "g/g",
    "volume fraction": "L/L", "fraction": "1",
}
#: Parts-per notations: refused, their kind (mass or volume basis) is not stated.
_PARTS_PER = ("ppm", "ppb", "ppt", "ppmv", "ppmw", "ppbv", "ppbw", "ppq")
#: "% w/v" (g per 100 mL) is a mass concentration; the other qualifiers name a fraction.
_PERCENT_QUALIFIERS: dict[str, tuple[str, float]] = {
    "w/w": ("mass fraction", 0.01), "m/m": ("mass fraction", 0.01),
    "v/v": ("volume fraction", 0.01),
    "mol/mol": ("mole fraction", 0.01), "n/n": ("mole fraction", 0.01),
    "mol": ("mole fraction", 0.01),
    "w/v": ("mass", 10.0), "m/v": ("mass", 10.0),
}
_FRACTION_OF = {"[mass]": "mass fraction", "[substance]": "mole fraction",
                "[length]": "volume fraction"}


def _fraction_kind(text: str, where: str) -> tuple[str, float] | None:
    """Kind and factor of a fraction or percentage unit; None when ``text`` is not one."""
    import re

    cleaned = " ".join(str(text).strip().replace("µ", "u").replace("μ", "u").split())
    low = cleaned.lower()
    if low in _PARTS_PER:
        raise UnitError(f"{where}: {text!r} does not say per what (mass or volume); say mg/L "
                        "or mg/kg (ug/L or ug/kg for ppb)")
    percent = re.fullmatch(r"(?:%|percent)\s*(?:\(?\s*([a-z/]+)\s*\)?)?", low) or \
        re.fullmatch(r"(mol)\s*%", low)
    if percent:
        qualifier = percent.group(1)
        if qualifier is None:
            return "fraction", 0.01
        if qualifier in _PERCENT_QUALIFIERS:
            return _PERCENT_QUALIFIERS[qualifier]
        raise UnitError(f"{where}: unknown percentage {text!r}; use % w/w (mass fraction), "
                        "% v/v (volume fraction), % mol/mol (mole fraction) or % w/v "
                        "(g per 100 mL)")
    if low in ("1", "dimensionless", "fraction"):
        return "fraction", 1.0
    if low.count("/") != 1 or "(" in low or "*" in low:
        return None
    top, bottom = (_parse(part, where) for part in low.split("/"))
    dims_top, dims_bottom = top.dimensionality, bottom.dimensionality
    if dims_top != dims_bottom or len(dims_top) != 1:
        return None
    (dim, power), = dims_top.items()
    kind = _FRACTION_OF.get(dim) if dim != "[length]" or power == 3 else None
    if kind is None:
        return None
    return kind, float((1 * top / bottom).to("dimensionless").magnitude)


def reference_unit(unit: str, where: str = "unit") -> tuple[str, float]:
    """Classify a unit of known concentrations (PLS references and predictions).

    Parameters
    ----------
    unit : str
        A concentration (``mg/L``, ``mmol/L``, ``% w/v``), a fraction (``1``, ``mol/mol``,
        ``g/g``, ``mg/kg``, ``mL/mL``) or a percentage (``%``, ``% w/w``, ``% v/v``,
        ``% mol/mol``, ``mol %``).
    where : str
        Used in the error message to say where the unit came from.

    Returns
    -------
    kind : str
        A key of :data:`REFERENCE_KINDS`.
    factor : float
        Multiply values in ``unit`` by this to get the kind's unit of
        :data:`REFERENCE_KINDS` (mol/L, g/L or a plain fraction).

    Raises
    ------
    UnitError
        Unknown units, units of no such kind, and parts-per notations (``ppm``, ``ppb``:
        mass or volume basis unstated; the message says mg/L or mg/kg).

    Notes
    -----
    A fraction is a ratio of like quantities: amount/amount (mole fraction), mass/mass
    (mass fraction), volume/volume (volume fraction); ``1`` and ``%`` alone are fractions
    of unstated kind. ``% w/v`` is not a fraction: 1 % w/v = 1 g/100 mL = 10 g/L, a mass
    concentration (the pharmacopoeias' usage, common practice). Kinds are never converted
    into one another: that needs molar masses or densities a PLS model does not hold.
    """
    found = _fraction_kind(unit, where)
    if found is not None:
        return found
    try:
        return concentration_basis(unit, where)
    except UnitError as exc:
        if "is not a concentration" not in str(exc):
            raise
    raise UnitError(f"{where}: {unit!r} is neither a concentration nor a fraction; expected "
                    "e.g. mg/L, mmol/L, g/g, mol/mol, mL/mL, %, % w/w or % v/v") from None


def kind_words(kind: str) -> str:
    """A kind of :data:`REFERENCE_KINDS` in words for messages (``molar-based``, ``a mass
    fraction``, ...)."""
    if kind in ("molar", "mass"):
        return f"{kind}-based"
    return "a fraction of unstated kind" if kind == "fraction" else f"a {kind}"
