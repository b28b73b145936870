"""Corrections and the uncertainty budget of ``unmix`` runs on files.

:class:`MeasurementOptions` gathers what ``mixsolve unmix`` takes beyond the fit itself:
a cell-blank file and pathlength ratio, a known wavelength offset, and the budget's
settings. :func:`prepare_spectra` applies the corrections before fitting,
:func:`file_budget` builds the budget after it, and the budget travels with the result
(:func:`attach_budget`) so the text report can show its largest contributors.
"""

from __future__ import annotations

import dataclasses
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import xarray as xr

from mixsolve.errors import InputError
from mixsolve.instrument.repeatability import repeatability
from mixsolve.io.spectra_io import read_spectra
from mixsolve.report.budget_text import format_budget
from mixsolve.uncertainty.budget import uncertainty_budget
from mixsolve.uncertainty.corrections import (
    CellCorrection,
    cell_blank,
    correct_cells,
    shift_wavelengths,
)
from mixsolve.uncertainty.measurement_model import DEFAULT_FILL_VOLUME_UL
from mixsolve.uncertainty.volumetric import parse_dilution

PathLike = str | os.PathLike[str]
BUDGET_PREFIX = "budget_"
_VALUE_U = re.compile(r"^\s*([-+]?[0-9.eE+-]+?)\s*(?:(?:±|\+-|\+/-)\s*([0-9.eE+-]+))?\s*$")


@dataclass(frozen=True)
class MeasurementOptions:
    """Options of ``unmix`` beyond the fit (CLI names in brackets).

    ``cell_blank`` [--cell-blank] spectra file of the sample cell with solvent;
    ``cell_ratio`` [--cell-ratio] ``R`` or ``R±U``; ``wavelength_offset``
    [--wavelength-offset] ``NM`` or ``NM±U`` (read − true); ``budget`` [--budget] CSV to
    write; ``pathlength_u`` [--pathlength-u] cm; ``dilution`` [--dilution] e.g. ``1/10``;
    ``carryover`` [--carryover] µL; ``fill_volume`` [--fill-volume] µL; ``repeat_scans``
    [--repeat-scans] file; ``stray`` [--stray] fraction; ``monte_carlo`` [--monte-carlo]
    draws.
    """

    cell_blank: PathLike | None = None
    cell_ratio: str | None = None
    wavelength_offset: str | None = None
    budget: PathLike | None = None
    pathlength_u: float | None = None
    dilution: str | None = None
    carryover: float | None = None
    fill_volume: float | None = None
    repeat_scans: PathLike | None = None
    stray: float | None = None
    monte_carlo: int | None = None

    def __post_init__(self) -> None:
        if self.budget is None:
            for field in ("pathlength_u", "dilution", "carryover", "fill_volume",
                          "repeat_scans", "stray", "monte_carlo"):
                if getattr(self, field) is not None:
                    raise InputError(f"--{field.replace('_', '-')}: a budget setting; give "
                                     "--budget FILE.csv too")


def measurement_options(options: MeasurementOptions | Mapping[str, Any] | None
                        ) -> MeasurementOptions:
    """Accept a :class:`MeasurementOptions`, a mapping of its fields, or None."""
    if options is None or isinstance(options, MeasurementOptions):
        return options or MeasurementOptions()
    known = {f.name for f in dataclasses.fields(MeasurementOptions)}
    unknown = sorted(set(options) - known)
    if unknown:
        raise InputError(f"measurement options: unknown {', '.join(unknown)}")
    return MeasurementOptions(**dict(options))


def parse_value_u(text: str | None, option: str) -> tuple[float, float | None] | None:
    """Parse ``"V"`` or ``"V±U"`` (also ``V+-U``) into (value, u or None)."""
    if text is None:
        return None
    m = _VALUE_U.match(str(text))
    try:
        if m is None:
            raise ValueError
        value = float(m[1])
        u = float(m[2]) if m[2] else None
    except ValueError:
        raise InputError(f"{option}: {text!r} is not a number or NUMBER±U, e.g. 0.4±0.05"
                         ) from None
    return value, u


@dataclass(frozen=True)
class Prepared:
    """What :func:`prepare_spectra` did: the cell correction and the wavelength offset."""

    cell: CellCorrection | None
    offset_nm: float | None
    u_offset_nm: float | None


def prepare_spectra(spectra: xr.DataArray, options: MeasurementOptions
                    ) -> tuple[xr.DataArray, Prepared]:
    """Subtract the cell blank, divide by the cell ratio, then correct the wavelength axis."""
    ratio = parse_value_u(options.cell_ratio, "--cell-ratio")
    offset = parse_value_u(options.wavelength_offset, "--wavelength-offset")
    cell = None
    if options.cell_blank is not None or ratio is not None:
        r, u_r = ratio if ratio is not None else (1.0, None)
        if options.cell_blank is not None:
            cell = cell_blank(read_spectra(options.cell_blank), ratio=r, u_ratio=u_r or 0.0)
        else:
            cell = CellCorrection(ratio=r, u_ratio=u_r or 0.0)
        spectra = correct_cells(spectra, cell)
    if offset is not None:
        spectra = shift_wavelengths(spectra, offset[0])
        if cell is not None and cell.blank is not None:
            cell = dataclasses.replace(
                cell, blank=shift_wavelengths(cell.blank, offset[0]),
                u_blank=shift_wavelengths(cell.u_blank, offset[0]))  # type: ignore[arg-type]
    return spectra, Prepared(cell, offset[0] if offset else None, offset[1] if offset else None)


def file_budget(result: xr.Dataset, library: xr.Dataset, options: MeasurementOptions,
                prepared: Prepared) -> xr.Dataset:
    """The budget of ``result`` with the file-level options (repeat scans read here)."""
    noise_sd = None
    if options.repeat_scans is not None:
        noise_sd = repeatability(read_spectra(options.repeat_scans))["sd"]
        if prepared.offset_nm is not None:
            noise_sd = shift_wavelengths(noise_sd, prepared.offset_nm)
    return uncertainty_budget(
        result, library, pathlength_u_cm=options.pathlength_u,
        dilution=parse_dilution(options.dilution) if options.dilution else None,
        carryover_ul=options.carryover,
        fill_volume_ul=DEFAULT_FILL_VOLUME_UL if options.fill_volume is None
        else options.fill_volume,
        wavelength_u_nm=prepared.u_offset_nm, stray_fraction=options.stray,
        noise_sd=noise_sd, cell=prepared.cell, monte_carlo=options.monte_carlo)


def attach_budget(result: xr.Dataset, budget: xr.Dataset) -> xr.Dataset:
    """``result`` with the budget's variables and attributes added under the prefix ``budget_``."""
    out = result.merge(budget.rename({n: BUDGET_PREFIX + str(n) for n in budget.data_vars}))
    out.attrs = {**result.attrs, **{BUDGET_PREFIX + k: v for k, v in budget.attrs.items()}}
    return out


def attached_budget(result: xr.Dataset) -> xr.Dataset | None:
    """The budget added by :func:`attach_budget`, or None."""
    names = [str(n) for n in result.data_vars if str(n).startswith(BUDGET_PREFIX)]
    if not names:
        return None
    budget = result[names].rename({n: n[len(BUDGET_PREFIX):] for n in names})
    budget.attrs = {k[len(BUDGET_PREFIX):]: v for k, v in result.attrs.items()
                    if k.startswith(BUDGET_PREFIX)}
    return budget


def budget_text(result: xr.Dataset) -> str:
    """The budget summary of an unmix result, or "" when it carries no budget."""
    budget = attached_budget(result)
    return "" if budget is None else "\n" + format_budget(budget)
