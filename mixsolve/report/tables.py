"""Tables from result Datasets (the Dataset is the source; tables derive from it): tidy
(one row per sample × component) or wide (one row per sample)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.flags import (
    FLAG_MEANINGS,
    by_severity,
    flag_fix,
    order_flags,
    run_notes_of,
    severity_of,
)
from mixsolve.io.provenance import provenance_rows, settings_of
from mixsolve.io.results_io import (
    FLAGS_COLUMN,
    RESULT_COLUMNS,
    SETTINGS_COLUMNS,
    SHEETS,
    u_column,
)
from mixsolve.library import COMPONENT
from mixsolve.spectra import check_option

#: Shapes of :func:`results_table`.
SHAPES = ("tidy", "wide")
#: Columns added after ``sample_flags`` when the result holds them (the parts of std_uncertainty;
#: a fitted wavelength shift; PLS predictions).
OPTIONAL_COLUMNS = ("u_noise", "u_library", "u_stray", "wavelength_shift_nm",
                    "u_wavelength_shift_nm", "scatter_exponent", "u_scatter_exponent",
                    "scatter_amplitude", "u_scatter_amplitude", "t2", "t2_limit_95",
                    "t2_limit_99", "q_residual", "q_limit_95", "q_limit_99")


def results_table(result: xr.Dataset, *,
                  shape: Literal["tidy", "wide"] = "tidy") -> pd.DataFrame:
    """The results as a table: one row per sample × component (tidy) or per sample (wide).

    Parameters
    ----------
    result : Dataset
        Output of :func:`mixsolve.unmix`: spectra along ``sample``, or along several
        dimensions (``y, x`` of an image), or none (one spectrum); numpy- or dask-backed.
    shape : {"tidy", "wide"}
        ``"tidy"`` (default): one row per sample × component, for analysis in pandas;
        ``"wide"``: one row per sample, for a lab notebook or a LIMS.

    Returns
    -------
    DataFrame
        Tidy: columns ``sample, component, concentration, std_uncertainty, unit,
        rms_residual_au, dof, sample_flags``. ``sample_flags`` holds the sample's
        ``;``-joined flag codes, doubtful ones first (:func:`mixsolve.flags.by_severity`;
        empty when nothing is doubtful); it is named so as not to shadow pandas'
        ``DataFrame.flags`` (files written before issue 17 call it ``flags``). The parts of
        ``std_uncertainty`` follow when the
        result has them (``u_noise, u_library, u_stray``). With ``fit_shift`` the fitted
        offset adds
        ``wavelength_shift_nm, u_wavelength_shift_nm``; with ``baseline="scatter"``
        ``scatter_exponent, u_scatter_exponent, scatter_amplitude, u_scatter_amplitude``
        (AU at λ₀). Results of
        :func:`mixsolve.predict` (PLS) add
        ``t2, t2_limit_95, t2_limit_99, q_residual, q_limit_95, q_limit_99``; there
        ``rms_residual`` and ``dof`` may differ per component. Over several dimensions,
        ``sample`` joins the labels with ``/`` (``3/17``) and one column per dimension
        (``y``, ``x``) follows the others; one spectrum alone is labelled ``spectrum``.

        Wide: ``sample``, then for each component (in the library's order) its
        concentration in a column named after it and its standard uncertainty in
        ``u(<component>)``, then ``unit``, ``sample_flags``, and the columns of the tidy
        table that hold one value per sample (``rms_residual_au``, ``dof``, the shift,
        scatter and PLS figures, the dimension columns). Per-component columns other
        than the concentration and its u (``u_noise``, ``u_library``, ``u_stray``, a PLS
        model's ``rms_residual_au`` and ``dof``) are in the tidy table only. Numbers are
        the result's float64 values, not rounded.

    Raises
    ------
    InputError
        An unknown ``shape``; a wide table whose column names would repeat (a component
        named ``unit``, or ``u(a)`` beside ``a``).
    """
    check_option(shape, SHAPES, "shape")
    conc = result["concentration"].transpose(..., COMPONENT)
    sample_dims = [d for d in conc.dims if d != COMPONENT]
    names = [n for n in ("concentration", "std_uncertainty", "rms_residual", "dof", "flags",
                         *OPTIONAL_COLUMNS) if n in result]
    part = result[names]
    if any(part[n].chunks is not None for n in names):
        part = part.compute()  # one pass over a dask-backed result, not one per column
    if not sample_dims:
        part = part.expand_dims(sample=["spectrum"])
        sample_dims = ["sample"]
    stacked = part.stack(_row=sample_dims) if len(sample_dims) != 1 else part
    row_dim = "_row" if len(sample_dims) != 1 else sample_dims[0]
    conc = stacked["concentration"].transpose(row_dim, COMPONENT).values
    u = stacked["std_uncertainty"].transpose(row_dim, COMPONENT).values
    comps = [str(c) for c in stacked[COMPONENT].values]
    if row_dim == "_row":
        labels = ["/".join(map(str, idx)) if isinstance(idx, tuple) else str(idx)
                  for idx in stacked.indexes["_row"]]
    else:
        labels = [str(s) for s in stacked[row_dim].values]
    flags = stacked["flags"].values if "flags" in stacked else np.full(len(labels), "")
    flags = _by_severity(flags)
    n_c = len(comps)
    if shape == "wide":
        return _wide(stacked, row_dim, sample_dims, labels, comps, conc, u, flags,
                     result.attrs["unit"])

    def per_row(name: str) -> np.ndarray:
        var = stacked[name]
        if COMPONENT not in var.dims:
            return np.repeat(var.values, n_c)
        full = var.broadcast_like(stacked["concentration"])
        return full.transpose(row_dim, COMPONENT).values.ravel()

    extra = {name: per_row(name) for name in OPTIONAL_COLUMNS if name in stacked}
    if row_dim == "_row":  # one column per dimension of the spectra (y, x of an image)
        index = stacked.indexes["_row"]
        extra.update({dim: np.repeat(np.asarray(index.get_level_values(dim)), n_c)
                      for dim in sample_dims})
    return pd.DataFrame({
        "sample": np.repeat(labels, n_c),
        "component": np.tile(comps, len(labels)),
        "concentration": conc.ravel(),
        "std_uncertainty": u.ravel(),
        "unit": result.attrs["unit"],
        "rms_residual_au": per_row("rms_residual"),
        "dof": per_row("dof"),
        FLAGS_COLUMN: np.repeat(flags, n_c),
        **extra,
    }, columns=[*RESULT_COLUMNS, *extra])


def _wide(stacked: xr.Dataset, row_dim: str, sample_dims: list[str], labels: list[str],
          comps: list[str], conc: np.ndarray, u: np.ndarray, flags: np.ndarray,
          unit: str) -> pd.DataFrame:
    """:func:`results_table` with ``shape="wide"``, from the pieces it gathered."""
    columns: list[tuple[str, object]] = [("sample", labels)]
    for k, comp in enumerate(comps):
        columns += [(comp, conc[:, k]), (u_column(comp), u[:, k])]
    columns += [("unit", unit), (FLAGS_COLUMN, flags)]
    per_sample = [("rms_residual_au", "rms_residual"), ("dof", "dof"),
                  *((n, n) for n in OPTIONAL_COLUMNS)]
    columns += [(column, stacked[name].transpose(row_dim).values)
                for column, name in per_sample
                if name in stacked and COMPONENT not in stacked[name].dims]
    if row_dim == "_row":
        index = stacked.indexes["_row"]
        columns += [(dim, np.asarray(index.get_level_values(dim))) for dim in sample_dims]
    headers = [name for name, _ in columns]
    repeated = sorted({h for h in headers if headers.count(h) > 1})
    if repeated:
        raise InputError(f"components: the wide table would have two columns named "
                         f"{repeated[0]!r} (a component's name is also a column of the "
                         "table); use the tidy table (shape='tidy'), or rename the component")
    return pd.DataFrame(dict(columns), columns=headers)


def _by_severity(flags: np.ndarray) -> np.ndarray:
    """Each flag string with its codes doubtful first, each distinct string ordered once."""
    texts, index = np.unique(np.asarray(flags, dtype=object).astype(str), return_inverse=True)
    return np.array([order_flags(t) for t in texts], dtype=object)[index.ravel()]


#: Columns of the "flags explained" sheet.
FLAG_SHEET_COLUMNS = ("code", "severity", "meaning", "what_to_do", "samples")
#: Columns of the "run notes" sheet (the fields of :class:`mixsolve.flags.RunNote`).
RUN_NOTE_COLUMNS = ("code", "severity", "text", "fix")


def results_sheets(result: xr.Dataset,
                   provenance: Mapping[str, Any] | None = None) -> dict[str, pd.DataFrame]:
    """The sheets of a results workbook (docs/formats.md, "Results workbook").

    Returns
    -------
    dict of DataFrame
        In order: ``results`` (the wide table), ``tidy`` (the tidy table),
        ``flags explained`` (each flag code present, doubtful first: its severity, meaning,
        what to do and how many samples have it; :data:`mixsolve.flags.FLAG_MEANINGS`,
        :func:`mixsolve.flags.severity_of`, :data:`mixsolve.flags.FLAG_FIXES`),
        ``run notes`` (:func:`mixsolve.flags.run_notes_of`) and ``settings`` (the
        provenance record as ``item, value`` rows,
        :func:`mixsolve.io.provenance.provenance_rows`; without a record, the result's
        version and settings).
    """
    tidy = results_table(result)
    record = dict(provenance) if provenance else {
        "mixsolve_version": result.attrs.get("mixsolve_version", ""),
        "settings": settings_of(result)}
    notes = run_notes_of(result.attrs)
    return dict(zip(SHEETS, (
        results_table(result, shape="wide"),
        tidy,
        flags_explained(tidy[FLAGS_COLUMN].iloc[::max(1, result.sizes[COMPONENT])]),
        pd.DataFrame([n._asdict() for n in notes], columns=list(RUN_NOTE_COLUMNS)),
        pd.DataFrame(provenance_rows(record), columns=list(SETTINGS_COLUMNS)),
    ), strict=True))


def flags_explained(sample_flags: Sequence[str] | pd.Series) -> pd.DataFrame:
    """Each flag code present in ``sample_flags`` (one ``;``-joined string per sample),
    explained: ``code, severity, meaning, what_to_do, samples``.

    A code with a component (``at_zero:rose``) is listed by its code (``at_zero``); codes
    are ordered doubtful first, then as they first appear; ``samples`` counts the samples
    that carry the code.
    """
    counts: dict[str, int] = {}
    for text in sample_flags:
        for code in dict.fromkeys(c.partition(":")[0] for c in str(text).split(";") if c):
            counts[code] = counts.get(code, 0) + 1
    order = by_severity(list(counts))
    return pd.DataFrame(
        [(c, severity_of(c), FLAG_MEANINGS.get(c, ""), flag_fix(c), counts[c]) for c in order],
        columns=list(FLAG_SHEET_COLUMNS))
