"""Published equations in words and tables: the check, the results, the tidy table.

Every output names the set, its citation and its status ("seen" or "from memory — verify
against the paper before relying on it"), and repeats the safety caution of docs/equations.md.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.equations.check import EquationCheck
from mixsolve.flags import run_notes_of

#: Said in every report of a shipped or user set (docs/equations.md, "Cautions").
CAUTION = ("caution: acetone and the other extraction solvents are flammable and harmful, and "
           "acidification uses dilute HCl; follow your local safety rules and validated "
           "methods")


def _num(value: float | None, digits: int = 4) -> str:
    return "n/a" if value is None or not np.isfinite(value) else f"{value:.{digits}g}"


def _matrix(rows: list[list[float]], row_names: list[str], col_names: list[str],
            indent: str = "  ") -> list[str]:
    width = max(len(n) for n in row_names)
    head = indent + " " * width + "".join(f"{c:>14}" for c in col_names)
    body = [indent + f"{r:<{width}}" + "".join(f"{_num(v):>14}" for v in row)
            for r, row in zip(row_names, rows, strict=True)]
    return [head, *body]


def format_check(check: EquationCheck) -> str:
    """The check of a set as plain text (what `mixsolve equations check` prints)."""
    out = [f"equations {check.name}: {check.citation}",
           f"status: {check.status}",
           f"results in {check.unit}; readings {', '.join(check.readings)}",
           "",
           f"implied absorptivities ({check.absorptivity_unit}; readings x components):",
           *_matrix(check.implied, check.readings, check.primary),
           f"scaled condition number: {_num(check.condition_number, 3)}",
           f"figures of merit at sigma_A = {check.sigma_a:.3g} AU ({check.noise}, at A = 0):",
           ]
    for c in check.components:
        sen = check.sensitivity.get(c)
        sen_text = f"SEN {_num(sen)} AU per {check.unit}, " if sen is not None else ""
        out.append(f"  {c}: {sen_text}u {_num(check.std_uncertainty[c], 3)}, LOD "
                   f"{_num(check.lod[c], 3)}, LOQ {_num(check.loq[c], 3)} {check.unit}")
    if check.measured is not None:
        out += ["", f"your library's absorptivities at these readings ({check.absorptivity_unit}):",
                *_matrix(check.measured, check.readings, check.primary),
                "published vs yours, relative difference (published - yours)/yours:",
                *_matrix(check.relative_difference or [], check.readings, check.primary),
                f"bias of the published results on spectra that follow your library "
                f"({check.unit} per {check.unit} of each component; rows results):",
                *_matrix(check.library_bias or [], check.primary, check.primary)]
    if check.shift_bias is not None:
        out += [f"a {check.shift_nm:g} nm wavelength error moves each result by "
                f"({check.unit} per {check.unit} of each component):",
                *_matrix(check.shift_bias, check.primary, check.primary)]
    if check.bandwidth_bias is not None:
        out += [f"a {check.bandpass_nm:g} nm bandpass moves each result by "
                f"({check.unit} per {check.unit} of each component):",
                *_matrix(check.bandwidth_bias, check.primary, check.primary)]
    out += [f"note: {n}" for n in check.notes]
    out.append(CAUTION)
    return "\n".join(out) + "\n"


def equations_table(result: xr.Dataset) -> pd.DataFrame:
    """Tidy rows: sample, component, method, concentration, unit, u, flags, set, status.

    ``method`` is ``equations`` for the published result and ``full_spectrum`` for the
    unmix result beside it (with ``difference_z`` on the equations rows).
    """
    rows = []
    attrs = result.attrs
    with_full = "full_concentration" in result
    for i, sample in enumerate(result["sample"].values.tolist()):
        for k, comp in enumerate(result["component"].values.tolist()):
            base = {"sample": sample, "component": comp, "unit": attrs["unit"],
                    "equations": attrs["equations"], "status": attrs["equations_status"]}
            rows.append({**base, "method": "equations",
                         "concentration": float(result["concentration"].values[i, k]),
                         "std_uncertainty": float(result["std_uncertainty"].values[i, k]),
                         "difference_z": float(result["difference_z"].values[i, k])
                         if with_full else np.nan,
                         "flags": str(result["flags"].values[i])})
            if with_full and np.isfinite(result["full_concentration"].values[i, k]):
                rows.append({**base, "method": "full_spectrum",
                             "concentration": float(result["full_concentration"].values[i, k]),
                             "std_uncertainty": float(
                                 result["full_std_uncertainty"].values[i, k]),
                             "difference_z": np.nan,
                             "flags": str(result["full_flags"].values[i])})
    cols = ["sample", "component", "method", "concentration", "unit", "std_uncertainty",
            "difference_z", "flags", "equations", "status"]
    return pd.DataFrame(rows, columns=cols)


def format_apply(result: xr.Dataset) -> str:
    """Results by published equations as plain text, the full-spectrum result beside them."""
    attrs = result.attrs
    with_full = "full_concentration" in result
    out = [f"equations {attrs['equations']}: {attrs['citation']}",
           f"status: {attrs['equations_status']}",
           f"results in {attrs['unit']} at {attrs['pathlength_cm']:g} cm"
           + " (u: readings by the noise model, coefficients as stated or exact)"]
    if len(attrs.get("interpolated_nm", [])):
        out.append("readings at " + ", ".join(f"{nm:g}" for nm in attrs["interpolated_nm"])
                   + " nm interpolated linearly between the neighbouring wavelengths")
    out.append("")
    head = f"{'sample':<16}{'component':<16}{'equations':>12}{'u':>10}"
    if with_full:
        head += f"{'full spectrum':>15}{'u':>10}{'z':>8}"
    out.append(head + "  flags")
    for i, sample in enumerate(result["sample"].values.tolist()):
        for k, comp in enumerate(result["component"].values.tolist()):
            line = (f"{sample!s:<16}{comp:<16}"
                    f"{_num(result['concentration'].values[i, k]):>12}"
                    f"{_num(result['std_uncertainty'].values[i, k], 2):>10}")
            if with_full:
                line += (f"{_num(result['full_concentration'].values[i, k]):>15}"
                         f"{_num(result['full_std_uncertainty'].values[i, k], 2):>10}"
                         f"{_num(result['difference_z'].values[i, k], 2):>8}")
            flags = str(result["flags"].values[i]) if k == 0 else ""
            out.append(line + (f"  {flags}" if flags else ""))
    notes = run_notes_of(attrs)
    if notes:
        out.append("")
        out += [f"note ({n.severity}, {n.code}): {n.text}; {n.fix}" for n in notes]
    out.append(CAUTION)
    return "\n".join(out) + "\n"
