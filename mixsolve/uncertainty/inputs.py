"""The uncertainty budget's inputs: one frozen record shared by the API and the command line.

:class:`BudgetInputs` is what :func:`mixsolve.uncertainty_budget` takes beyond the result
and the library (``inputs=BudgetInputs(...)``, or the same names as keywords), and what
``mixsolve unmix --budget`` builds from its options. Each number is checked once, when the
record is made, so a bad setting is refused before any work.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Any, Literal

import xarray as xr

from mixsolve.errors import InputError
from mixsolve.spectra import check_number, check_option
from mixsolve.uncertainty.corrections import CellCorrection
from mixsolve.uncertainty.volumetric import Dilution, parse_dilution

CarryFrom = Literal["previous", "solvent"]
CARRY_FROM: tuple[str, ...] = ("previous", "solvent")
#: Fill volume of a 10 mm macro cuvette (µL), common practice; used for the carry-over
#: fraction when none is given.
DEFAULT_FILL_VOLUME_UL = 3000.0
#: Default coverage factor (about 95 % for a near-normal output).
DEFAULT_COVERAGE_FACTOR = 2.0
#: Numerical tolerance of the Monte Carlo comparison, as a fraction of the combined
#: uncertainty.
DEFAULT_MC_TOLERANCE = 0.05
#: Fewest Monte Carlo draws accepted (JCGM 101 suggests 10⁶ for a 95 % interval; 2·10⁴
#: already gives interval ends within ~2 % of u for a near-normal output).
MIN_DRAWS = 1000


@dataclass(frozen=True)
class BudgetInputs:
    """The inputs of the uncertainty budget beyond the fit, and its settings.

    Attributes
    ----------
    pathlength_u_cm : float, optional
        Standard uncertainty of the pathlength (cm); for a tolerance ±a give a/√3.
        Not stated (NaN) when omitted.
    dilution : Dilution or str, optional
        The dilution of the sample before measuring; text such as ``"1/10"`` is read by
        :func:`mixsolve.uncertainty.volumetric.parse_dilution`. With it the measurand is
        the undiluted concentration F·c.
    carryover_ul : float, optional
        Residual liquid (µL) left in the cell when it is refilled without drying; 0 when
        omitted (a dried or rinsed-with-sample cell).
    fill_volume_ul : float
        Volume filled into the cell (µL); default (also for None) 3000, a 10 mm macro cell.
    carryover_from : {"previous", "solvent"}
        What the residue is: the previous sample in file order (the first sample follows
        the solvent), or solvent after every sample.
    wavelength_tolerance_nm : float, optional
        ± wavelength accuracy (nm), rectangular; default the result's
        ``wavelength_tolerance_nm`` (``unmix``'s, 0.5 nm).
    wavelength_u_nm : float, optional
        Instead, a standard uncertainty of the wavelength scale (nm), normal: e.g. the
        uncertainty of an offset found with a holmium check and corrected for.
    stray_fraction : float, optional
        Stray-light fraction s (0.001 = 0.1 %T), 0 ≤ s < 1; default the result's noise
        model's, else not stated.
    noise_sd : DataArray (wavelength) or Dataset, optional
        SD of one reading per wavelength (AU) from repeat scans
        (:func:`mixsolve.repeatability`; its ``sd`` is taken from a Dataset), used as the
        Type A noise instead of the fit's scatter.
    cell : CellCorrection, optional
        The cell correction applied to the spectra (:func:`mixsolve.cell_blank`).
    coverage_factor : float
        k of the expanded uncertainty U = k·u_c (default 2).
    monte_carlo : int, optional
        Also propagate by Monte Carlo with this many draws per sample (≥ 1000,
        JCGM 101:2008).
    seed : int
        Seed of the Monte Carlo draws.
    mc_tolerance : float
        Numerical tolerance δ of the Monte Carlo comparison, as a fraction of u_c.

    Raises
    ------
    InputError
        A negative uncertainty or volume, a stray fraction outside [0, 1), both
        wavelength settings, too few draws, or a value of the wrong kind.
    """

    pathlength_u_cm: float | None = None
    dilution: Dilution | str | None = None
    carryover_ul: float | None = None
    fill_volume_ul: float | None = DEFAULT_FILL_VOLUME_UL
    carryover_from: CarryFrom = "previous"
    wavelength_tolerance_nm: float | None = None
    wavelength_u_nm: float | None = None
    stray_fraction: float | None = None
    noise_sd: xr.DataArray | xr.Dataset | None = None
    cell: CellCorrection | None = None
    coverage_factor: float = DEFAULT_COVERAGE_FACTOR
    monte_carlo: int | None = None
    seed: int = 0
    mc_tolerance: float = DEFAULT_MC_TOLERANCE

    def __post_init__(self) -> None:
        def put(name: str, value: Any) -> None:
            object.__setattr__(self, name, value)

        for name, unit in (("pathlength_u_cm", "cm"), ("carryover_ul", "µL"),
                           ("wavelength_tolerance_nm", "nm"), ("wavelength_u_nm", "nm")):
            if getattr(self, name) is not None:
                put(name, check_number(getattr(self, name), name, unit, low=0))
        if self.wavelength_u_nm is not None and self.wavelength_tolerance_nm is not None:
            raise InputError("wavelength: give wavelength_tolerance_nm (± limits) or "
                             "wavelength_u_nm (a standard uncertainty), not both")
        put("fill_volume_ul", DEFAULT_FILL_VOLUME_UL if self.fill_volume_ul is None else
            check_number(self.fill_volume_ul, "fill_volume_ul", "µL", positive=True))
        if self.stray_fraction is not None:
            put("stray_fraction", check_number(self.stray_fraction, "stray_fraction", low=0,
                                               high=1, high_open=True))
        check_option(self.carryover_from, CARRY_FROM, "carryover_from")
        if isinstance(self.dilution, str):
            put("dilution", parse_dilution(self.dilution))
        _check_kind(self.dilution, Dilution, "dilution", "a Dilution or text such as '1/10'")
        if isinstance(self.noise_sd, xr.Dataset):
            put("noise_sd", self.noise_sd["sd"])
        _check_kind(self.noise_sd, xr.DataArray, "noise_sd",
                    "a DataArray (wavelength) of SDs in AU, e.g. mixsolve.repeatability")
        _check_kind(self.cell, CellCorrection, "cell", "a CellCorrection (mixsolve.cell_blank)")
        put("coverage_factor", check_number(self.coverage_factor, "coverage_factor",
                                            positive=True))
        if self.monte_carlo is not None:
            put("monte_carlo", int(check_number(self.monte_carlo, "monte_carlo", "draws",
                                                low=MIN_DRAWS, integer=True)))
        put("seed", int(check_number(self.seed, "seed", low=0, integer=True)))
        put("mc_tolerance", check_number(self.mc_tolerance, "mc_tolerance", positive=True))

    def changed(self) -> list[str]:
        """The settings that differ from their defaults, in field order."""
        default = BudgetInputs()
        return [f.name for f in dataclasses.fields(self)
                if not _same(getattr(self, f.name), getattr(default, f.name))]


def budget_inputs(inputs: BudgetInputs | None = None, **settings: Any) -> BudgetInputs:
    """``inputs`` (default: all defaults) with ``settings`` (fields of BudgetInputs) replaced.

    Raises
    ------
    TypeError
        A setting that is not a field of :class:`BudgetInputs`.
    """
    inputs = BudgetInputs() if inputs is None else inputs
    if not isinstance(inputs, BudgetInputs):
        raise InputError(f"inputs: expected BudgetInputs, got {type(inputs).__name__}")
    return dataclasses.replace(inputs, **settings) if settings else inputs


def _check_kind(value: Any, kind: type, name: str, expected: str) -> None:
    if value is not None and not isinstance(value, kind):
        raise InputError(f"{name}: {type(value).__name__} is not {expected}")


def _same(a: Any, b: Any) -> bool:
    """The same object, or equal numbers or text (arrays and records compare by identity)."""
    plain = int | float | str
    return a is b or (isinstance(a, plain) and isinstance(b, plain) and a == b)
