"""Concentration of a standard made up from a weighed substance, and its standard uncertainty.

A stock is made by weighing a mass m (mg) of a substance of purity P (mass fraction) and
making it up to a volume V (mL) in a flask:

    c_stock = 1000 · m · P / V   (mg/L),

optionally diluted by a chain of aliquots and flasks with factor F (see
:mod:`mixsolve.uncertainty.volumetric`): c = c_stock / F. Every input enters as a power ±1
and the inputs are independent, so the law of propagation of uncertainty (JCGM 100:2008,
eq. 10, uncorrelated inputs) takes its relative form (JCGM 100:2008, 5.1.6, eq. 12):

    (u_c(c)/c)² = (u(P)/P)² + (u(m)/m)² + (u(V)/V)² + Σᵢ (u(Vᵢ)/Vᵢ)²,

the last sum over the volumes of the dilution. This is the calculation of the
Eurachem/CITAC guide "Quantifying Uncertainty in Analytical Measurement" (3rd ed., 2012),
example A1, the preparation of a calibration standard (tests/external/
test_eurachem_standard.py reproduces its numbers).

The split matters to a library built from standards (the standards sheet of
``build_library``): the part shared by every standard made from one stock (purity, mass,
stock flask) is ``u_stock_rel``; the part of each standard's own dilution is independent
between standards and is ``u_concentration``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import pandas as pd

from mixsolve.errors import InputError, UnitError
from mixsolve.spectra import check_number, check_option
from mixsolve.uncertainty.volumetric import (
    DIVISORS,
    VOLUMETRIC_CLASSES,
    Dilution,
    Distribution,
    parse_dilution,
    volume_step,
)
from mixsolve.units import concentration_basis, conversion_factor

#: Volume expansion coefficient of water near 20 °C (1/°C), the value used for a flask's
#: temperature term in the Eurachem/CITAC guide, example A1 (**from memory**). The glass
#: expands far less and is neglected there.
WATER_EXPANSION_PER_C = 2.1e-4
#: Flask classes of the volumetric table a stock volume may be looked up in.
FLASK_CLASSES: tuple[str, ...] = tuple(k for k in VOLUMETRIC_CLASSES if k.startswith("flask"))
#: The stock flask when neither a class nor a tolerance nor u(V) is given.
DEFAULT_FLASK = "flask-A"


@dataclass(frozen=True)
class PreparationSource:
    """One independent input of a prepared standard.

    Attributes
    ----------
    source : str
        What it is (``"purity"``, ``"mass"``, ``"volume, calibration"``, ...).
    value : float
        Its value in ``unit`` (0 for a correction term with zero expectation).
    unit : str
    std_uncertainty : float
        Its standard uncertainty, in ``unit``.
    relative_uncertainty : float
        Its contribution to u_c(c)/c (dimensionless).
    part : {"stock", "dilution"}
        Shared by all standards of the stock, or the standard's own.
    """

    source: str
    value: float
    unit: str
    std_uncertainty: float
    relative_uncertainty: float
    part: str


@dataclass(frozen=True)
class PreparedStandard:
    """A standard's concentration with its relative standard uncertainty, split into the
    stock's part and the dilution's part.

    Attributes
    ----------
    concentration : float
        Concentration of the standard (after any dilution), in ``unit``.
    stock_concentration : float
        Concentration of the stock before dilution, in ``unit``.
    unit : str
    u_stock_rel : float
        Relative standard uncertainty of the stock: purity, mass and stock volume
        (the standards sheet's ``u_stock_rel``).
    u_dilution_rel : float
        Relative standard uncertainty of the dilution (0 without one).
    sources : tuple of PreparationSource
        Every independent input and its contribution (the budget).
    """

    concentration: float
    stock_concentration: float
    unit: str
    u_stock_rel: float
    u_dilution_rel: float
    sources: tuple[PreparationSource, ...]

    @property
    def relative_uncertainty(self) -> float:
        """u_c(c)/c = √(u_stock_rel² + u_dilution_rel²)."""
        return math.hypot(self.u_stock_rel, self.u_dilution_rel)

    @property
    def std_uncertainty(self) -> float:
        """Combined standard uncertainty u_c(c), in ``unit``."""
        return self.concentration * self.relative_uncertainty

    @property
    def u_volume_ml(self) -> float:
        """Standard uncertainty of the stock volume (mL), its parts combined."""
        return math.sqrt(sum(s.std_uncertainty**2 for s in self.sources
                             if s.part == "stock" and s.unit == "mL"))

    @property
    def u_concentration(self) -> float:
        """The standard's own part, c · u_dilution_rel, in ``unit``: the standards sheet's
        ``u_concentration`` when the stock's part is given as ``u_stock_rel``."""
        return self.concentration * self.u_dilution_rel

    def expanded_uncertainty(self, k: float = 2.0) -> float:
        """U = k · u_c(c), in ``unit`` (k = 2 for about 95 % with many effective degrees
        of freedom, JCGM 100:2008, 6.3)."""
        return check_number(k, "k", positive=True) * self.std_uncertainty

    def table(self) -> pd.DataFrame:
        """The budget: one row per source (columns as :class:`PreparationSource`)."""
        return pd.DataFrame([vars(s) for s in self.sources])


def _mass_uncertainty(u_mass_mg: float | None, balance_linearity_mg: float | None) -> float:
    if u_mass_mg is None and balance_linearity_mg is None:
        raise InputError("mass_mg: no uncertainty given; give u_mass_mg (its standard "
                         "uncertainty) or balance_linearity_mg (the balance's ± linearity)")
    if u_mass_mg is not None and balance_linearity_mg is not None:
        raise InputError("u_mass_mg: given with balance_linearity_mg; give one of them, "
                         "not both")
    if u_mass_mg is not None:
        return check_number(u_mass_mg, "u_mass_mg", "mg", low=0)
    a = check_number(balance_linearity_mg, "balance_linearity_mg", "mg", low=0)
    return math.sqrt(2.0) * a / DIVISORS["rectangular"]


def _volume_sources(volume: float, *, u_volume_ml: float | None, flask: str | None,
                    volume_tolerance_ml: float | None, fill_sd_ml: float | None,
                    temperature_range_c: float | None, expansion_per_c: float,
                    distribution: Distribution) -> list[tuple[str, float]]:
    """(source, standard uncertainty in mL) of the stock volume."""
    parts = {"flask": flask, "volume_tolerance_ml": volume_tolerance_ml,
             "fill_sd_ml": fill_sd_ml, "temperature_range_c": temperature_range_c}
    if u_volume_ml is not None:
        given = [name for name, value in parts.items() if value is not None]
        if given:
            raise InputError(f"u_volume_ml: given with {', '.join(given)}; give u(V) whole or "
                             "its parts (flask or volume_tolerance_ml, fill_sd_ml, "
                             "temperature_range_c), not both")
        return [("volume", check_number(u_volume_ml, "u_volume_ml", "mL", low=0))]
    if flask is not None and volume_tolerance_ml is not None:
        raise InputError("flask: given with volume_tolerance_ml; give the flask class or its "
                         "tolerance, not both")
    if volume_tolerance_ml is not None:
        tolerance = check_number(volume_tolerance_ml, "volume_tolerance_ml", "mL", low=0)
        label = f"± {tolerance:g} mL"
    else:
        name = DEFAULT_FLASK if flask is None else flask
        check_option(name, FLASK_CLASSES, "flask")
        sizes = VOLUMETRIC_CLASSES[name][1]
        if not any(abs(v - volume) <= 1e-9 * max(1.0, v) for v in sizes):
            raise InputError(f"flask: no {volume:g} mL {name} in the table (sizes "
                             f"{', '.join(f'{v:g}' for v in sorted(sizes))} mL); give "
                             "volume_tolerance_ml or u_volume_ml")
        tolerance = volume_step(volume, "final", device=name).tolerance_ml
        label = f"{name}, ± {tolerance:g} mL"
    sources = [(f"volume, calibration ({label}, {distribution})",
                tolerance / DIVISORS[distribution])]
    if fill_sd_ml is not None:
        sources.append(("volume, fill repeatability",
                        check_number(fill_sd_ml, "fill_sd_ml", "mL", low=0)))
    if temperature_range_c is not None:
        dt = check_number(temperature_range_c, "temperature_range_c", "°C", low=0)
        gamma = check_number(expansion_per_c, "expansion_per_c", "1/°C", low=0)
        sources.append((f"volume, temperature (± {dt:g} °C)",
                        volume * gamma * dt / DIVISORS["rectangular"]))
    return sources


def prepared_standard(
    mass_mg: float,
    volume_ml: float,
    *,
    purity: float = 1.0,
    u_purity: float = 0.0,
    u_mass_mg: float | None = None,
    balance_linearity_mg: float | None = None,
    u_volume_ml: float | None = None,
    flask: str | None = None,
    volume_tolerance_ml: float | None = None,
    fill_sd_ml: float | None = None,
    temperature_range_c: float | None = None,
    expansion_per_c: float = WATER_EXPANSION_PER_C,
    distribution: Distribution = "rectangular",
    dilution: str | Dilution | None = None,
    unit: str = "mg/L",
    molar_mass_g_per_mol: float | None = None,
) -> PreparedStandard:
    """Concentration of a standard weighed, made up in a flask and optionally diluted, with
    its relative standard uncertainty split into the stock's part and the dilution's.

    Parameters
    ----------
    mass_mg : float
        Mass weighed (mg).
    volume_ml : float
        Volume the stock is made up to (mL).
    purity : float
        Purity as a mass fraction, in (0, 1].
    u_purity : float
        Standard uncertainty of the purity (mass fraction). A certificate's ± a with no
        stated distribution is usually read as rectangular: u = a/√3.
    u_mass_mg : float, optional
        Standard uncertainty of the mass (mg), e.g. from the balance's certificate.
    balance_linearity_mg : float, optional
        Instead of ``u_mass_mg``: the balance's linearity ± a (mg), counted once for the
        tare and once for the gross weighing, rectangular: u(m) = √2 · a/√3.
    u_volume_ml : float, optional
        Standard uncertainty of the stock volume (mL), whole. Otherwise u(V) is composed
        from the parts below.
    flask : str, optional
        Class of the stock flask, a glass class of the volumetric table (``flask-A``,
        ``flask-B``, ...; from memory of ISO 1042); default ``flask-A``.
    volume_tolerance_ml : float, optional
        Instead of ``flask``: the flask's ± tolerance (mL).
    fill_sd_ml : float, optional
        Standard deviation of filling the flask to the mark (mL).
    temperature_range_c : float, optional
        ± difference (°C) between the laboratory and the flask's calibration temperature.
    expansion_per_c : float
        Volume expansion coefficient of the solution (1/°C); water's by default.
    distribution : {"rectangular", "triangular"}
        Distribution within a volumetric tolerance, for the stock flask and the dilution.
        Rectangular (the default, as for dilutions elsewhere) is the cautious reading;
        the Eurachem/CITAC guide uses triangular for glassware.
    dilution : str or Dilution, optional
        Dilution of the stock, ``ALIQUOT/FINAL[,...]`` in mL as for
        :func:`mixsolve.uncertainty.volumetric.parse_dilution` (``"10/100"``,
        ``"1:pipette-A/50:flask-A"``), or a parsed :class:`Dilution`.
    unit : str
        Concentration unit of the result (any mass or amount per volume, pint).
    molar_mass_g_per_mol : float, optional
        Needed for an amount unit (``mmol/L``); its own uncertainty is not included.

    Returns
    -------
    PreparedStandard
        ``concentration``, ``u_stock_rel``, ``u_dilution_rel``, ``std_uncertainty``,
        ``u_concentration`` and the budget (``table()``).

    Raises
    ------
    InputError
        A value out of range, both or neither of ``u_mass_mg`` and
        ``balance_linearity_mg``, ``u_volume_ml`` given with its parts, a flask size not
        in the table, a malformed dilution.
    UnitError
        ``unit`` is not a concentration, or an amount unit without a molar mass.

    Notes
    -----
    Measurement model (mg, mL → mg/L; F the dilution factor, Π V_final / Π V_aliquot):

        c = 1000 · m · P / (V · F).

    Uncorrelated inputs, law of propagation of uncertainty (JCGM 100:2008, eq. 10),
    relative form for a product of powers (5.1.6, eq. 12):

        u_stock_rel² = (u(P)/P)² + (u(m)/m)² + (u(V)/V)²,
        u_dilution_rel² = Σᵢ (u(Vᵢ)/Vᵢ)²,
        u_c(c)/c = √(u_stock_rel² + u_dilution_rel²).

    Stock volume: u(V)² = (a/d)² + s_fill² + (V·γ·ΔT/√3)², a the flask tolerance, d = √3
    (rectangular, JCGM 100:2008, 4.3.7) or √6 (triangular, 4.3.9), γ the expansion
    coefficient and ΔT the temperature range (rectangular), as in the Eurachem/CITAC guide
    "Quantifying Uncertainty in Analytical Measurement", 3rd ed. (2012), example A1.

    For a library built from standards: every standard diluted from one stock shares
    ``u_stock_rel`` (give the stock a label in the sheet's ``stock`` column) and carries
    its own ``u_concentration``. A standard weighed on its own has no shared part: give
    its ``std_uncertainty`` as ``u_concentration`` and no stock.
    """
    mass = check_number(mass_mg, "mass_mg", "mg", positive=True)
    volume = check_number(volume_ml, "volume_ml", "mL", positive=True)
    p = check_number(purity, "purity", low=0, low_open=True, high=1,
                     hint="a mass fraction such as 0.9999")
    u_p = check_number(u_purity, "u_purity", low=0)
    check_option(distribution, tuple(DIVISORS), "distribution")
    u_m = _mass_uncertainty(u_mass_mg, balance_linearity_mg)
    volume_parts = _volume_sources(
        volume, u_volume_ml=u_volume_ml, flask=flask, volume_tolerance_ml=volume_tolerance_ml,
        fill_sd_ml=fill_sd_ml, temperature_range_c=temperature_range_c,
        expansion_per_c=expansion_per_c, distribution=distribution)
    if isinstance(dilution, str):
        dilution = parse_dilution(dilution, distribution=distribution)
    elif dilution is not None and not isinstance(dilution, Dilution):
        raise InputError(f"dilution: {dilution!r} is not ALIQUOT/FINAL text or a Dilution")
    basis, _ = concentration_basis(unit, "unit")
    if basis == "molar" and molar_mass_g_per_mol is None:
        raise UnitError(f"unit: {unit} is an amount concentration; give molar_mass_g_per_mol "
                        "to convert the weighed mass")
    molar = (None if molar_mass_g_per_mol is None else
             check_number(molar_mass_g_per_mol, "molar_mass_g_per_mol", "g/mol", positive=True))
    to_unit = float(conversion_factor("mg/L", unit, molar))
    stock = 1000.0 * mass * p / volume * to_unit

    rows = [PreparationSource("purity", p, "", u_p, u_p / p, "stock"),
            PreparationSource("mass", mass, "mg", u_m, u_m / mass, "stock")]
    rows += [PreparationSource(name, 0.0 if name.startswith(("volume, fill", "volume, temp"))
                               else volume, "mL", u, u / volume, "stock")
             for name, u in volume_parts]
    factor = 1.0
    if dilution is not None:
        factor = dilution.factor
        rows += [PreparationSource(f"dilution, {s.role} ({s.device})", s.volume_ml, "mL",
                                   s.standard_uncertainty_ml, s.relative_uncertainty,
                                   "dilution") for s in dilution.steps]
    u_stock = math.sqrt(sum(r.relative_uncertainty**2 for r in rows if r.part == "stock"))
    u_dil = 0.0 if dilution is None else dilution.relative_uncertainty
    return PreparedStandard(concentration=stock / factor, stock_concentration=stock,
                            unit=unit, u_stock_rel=u_stock, u_dilution_rel=u_dil,
                            sources=tuple(rows))
