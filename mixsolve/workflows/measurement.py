"""Corrections and the uncertainty budget of ``unmix`` runs on files.

:class:`MeasurementOptions` gathers what ``mixsolve unmix`` takes beyond the fit itself:
a cell-blank file and pathlength ratio, a known wavelength offset, repeat scans, the budget
CSV to write and the budget's inputs (one
:class:`~mixsolve.uncertainty.inputs.BudgetInputs`). The files are read by
:mod:`mixsolve.workflows.unmix_files`; here the options become the corrections that core
applies before fitting (:func:`correct_measurement`) and the budget's inputs after it
(:func:`file_budget_inputs`), and the budget travels with the result
(:func:`attach_budget`) so the text report can show its largest contributors.
"""

from __future__ import annotations

import dataclasses
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import xarray as xr

from mixsolve.errors import InputError
from mixsolve.report.budget_text import format_budget
from mixsolve.spectra import check_number
from mixsolve.uncertainty.corrections import (
    CellCorrection,
    cell_blank,
    check_offset,
    correct_spectra,
)
from mixsolve.uncertainty.inputs import BudgetInputs, budget_inputs

PathLike = str | os.PathLike[str]
BUDGET_PREFIX = "budget_"
#: Command-line option of each budget input it sets (fields of BudgetInputs).
BUDGET_FLAGS: dict[str, str] = {
    "pathlength_u_cm": "--pathlength-u", "dilution": "--dilution",
    "carryover_ul": "--carryover", "fill_volume_ul": "--fill-volume",
    "stray_fraction": "--stray", "monte_carlo": "--monte-carlo"}
_VALUE_U = re.compile(r"^\s*([-+]?[0-9.eE+-]+?)\s*(?:(?:±|\+-|\+/-)\s*([0-9.eE+-]+))?\s*$")


@dataclass(frozen=True)
class MeasurementOptions:
    """Options of ``unmix`` on files beyond the fit (CLI names in brackets).

    ``cell_blank`` [--cell-blank] spectra file of the sample cell with solvent;
    ``cell_ratio`` [--cell-ratio] ``R`` or ``R±U``; ``wavelength_offset``
    [--wavelength-offset] ``NM`` or ``NM±U`` (read − true); ``budget`` [--budget] CSV to
    write; ``repeat_scans`` [--repeat-scans] file; ``inputs`` the budget's inputs
    (:class:`~mixsolve.uncertainty.inputs.BudgetInputs`; options in :data:`BUDGET_FLAGS`).
    The corrections and the files come from the options; ``inputs`` need ``budget``.
    """

    cell_blank: PathLike | None = None
    cell_ratio: str | None = None
    wavelength_offset: str | None = None
    budget: PathLike | None = None
    repeat_scans: PathLike | None = None
    inputs: BudgetInputs = field(default_factory=BudgetInputs)

    def __post_init__(self) -> None:
        if self.budget is None:
            given = [*self.inputs.changed(), *(["repeat_scans"] if self.repeat_scans else [])]
            if given:
                flag = BUDGET_FLAGS.get(given[0], "--" + given[0].replace("_", "-"))
                raise InputError(f"{flag}: a budget setting; give --budget FILE.csv too")


def measurement_options(options: MeasurementOptions | Mapping[str, Any] | None
                        ) -> MeasurementOptions:
    """Accept a :class:`MeasurementOptions`, a mapping of its fields, or None.

    A mapping may also hold the fields of :class:`BudgetInputs` by name, or by the name
    of their command-line option (``pathlength_u`` for ``pathlength_u_cm``, as click
    passes ``--pathlength-u``); None values are left at their defaults.
    """
    if options is None or isinstance(options, MeasurementOptions):
        return options or MeasurementOptions()
    own = {f.name for f in dataclasses.fields(MeasurementOptions)}
    by_option = {flag[2:].replace("-", "_"): name for name, flag in BUDGET_FLAGS.items()}
    settings = {f.name for f in dataclasses.fields(BudgetInputs)}
    files: dict[str, Any] = {}
    given: dict[str, Any] = {}
    unknown = []
    for key, value in options.items():
        if key in own:
            files[key] = value
        elif key in settings or key in by_option:
            if value is not None:
                given[by_option.get(key, key)] = value
        else:
            unknown.append(key)
    if unknown:
        raise InputError(f"measurement options: unknown {', '.join(sorted(unknown))}")
    files["inputs"] = budget_inputs(files.get("inputs"), **given)
    return MeasurementOptions(**files)


def parse_value_u(text: str | None, option: str, unit: str = ""
                  ) -> tuple[float, float | None] | None:
    """Parse ``"V"`` or ``"V±U"`` (also ``V+-U``) into (value, u or None); u ≥ 0."""
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
    if u is not None:
        check_number(u, f"{option} uncertainty", unit, low=0)
    return value, u


@dataclass(frozen=True)
class Corrections:
    """The corrections of a measurement: the cell (blank and ratio) and the λ offset."""

    cell: CellCorrection | None = None
    offset_nm: float | None = None
    u_offset_nm: float | None = None


def measurement_corrections(options: MeasurementOptions,
                            blank_scans: xr.DataArray | None = None) -> Corrections:
    """The corrections ``options`` ask for, with the cell-blank scans read from their file.

    Raises
    ------
    InputError
        Text that is not ``V`` or ``V±U``, a ratio that is not positive, an offset beyond
        ±10 nm (named by their options), or a blank with a missing reading.
    """
    ratio = parse_value_u(options.cell_ratio, "cell_ratio")
    offset = parse_value_u(options.wavelength_offset, "wavelength_offset", "nm")
    if offset is not None:
        check_offset(offset[0], "wavelength_offset")
    cell = None
    if blank_scans is not None or ratio is not None:
        r, u_r = ratio if ratio is not None else (1.0, None)
        r = check_number(r, "cell_ratio", positive=True)
        cell = (cell_blank(blank_scans, ratio=r, u_ratio=u_r or 0.0) if blank_scans is not None
                else CellCorrection(ratio=r, u_ratio=u_r or 0.0))
    return Corrections(cell, *(offset if offset is not None else (None, None)))


def correct_measurement(spectra: xr.DataArray, corrections: Corrections
                        ) -> tuple[xr.DataArray, Corrections]:
    """The spectra corrected (:func:`mixsolve.uncertainty.corrections.correct_spectra`),
    and the corrections with the cell blank moved onto the corrected axis."""
    spectra, cell = correct_spectra(spectra, corrections.cell, corrections.offset_nm)
    return spectra, dataclasses.replace(corrections, cell=cell)


def file_budget_inputs(options: MeasurementOptions, corrections: Corrections,
                       repeat_scans: xr.DataArray | None = None) -> BudgetInputs:
    """The budget's inputs of a file run: the options', plus what the corrections and the
    repeat scans (read from their file) state.

    The cell correction enters as ``cell``, the offset's uncertainty as
    ``wavelength_u_nm`` (normal), and the SD of the repeat scans (on the corrected axis)
    as ``noise_sd``.
    """
    found: dict[str, Any] = {}
    if corrections.cell is not None:
        found["cell"] = corrections.cell
    if corrections.u_offset_nm is not None:
        found["wavelength_u_nm"] = corrections.u_offset_nm
    if repeat_scans is not None:
        from mixsolve.instrument.repeatability import repeatability  # scipy.stats: ~0.5 s

        sd = repeatability(repeat_scans)["sd"]
        found["noise_sd"] = correct_spectra(sd, offset_nm=corrections.offset_nm)[0]
    return budget_inputs(options.inputs, **found)


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
