"""The plate report: one self-contained HTML page per plate (a pure function, no I/O).

First the wells whose result is doubtful and why, then the counts and the run's notes, heat
maps of every component over the plate (doubtful results crossed), the samples, the flagged
wells with their reasons, the residual spectra of the worst-fitting wells, the run's
settings and the cautions. Flag codes are explained in docs/plates.md and in
:data:`mixsolve.flags.FLAG_MEANINGS`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.flags import AT_ZERO, DOUBTFUL, FLAG_MEANINGS, SEVERITIES, order_flags
from mixsolve.plate.wells import PLATE_SHAPES, ROW_LETTERS, WELL, parse_well
from mixsolve.report import html
from mixsolve.report.plate_text import attention_table, counts_text, well_concern
from mixsolve.report.text import run_note_sentences, value_with_uncertainty
from mixsolve.spectra import WAVELENGTH

WORST_WELLS = 6


def explain(flags: str) -> str:
    """Plain-language reasons for a ``;``-joined flag string."""
    reasons = []
    for code in filter(None, flags.split(";")):
        base, _, detail = code.partition(":")
        text = FLAG_MEANINGS.get(base, base)
        reasons.append(f"{text} ({detail})" if detail else text)
    return "; ".join(dict.fromkeys(reasons))


def noteworthy(flags: str, role: str = "sample") -> bool:
    """Whether a well's flags hold a code beyond the routine ones for its role
    (:func:`mixsolve.report.plate_text.well_concern`)."""
    return well_concern(flags, role) is not None


def heat_map(wells: pd.DataFrame, component: str, plate_size: int, unit: str) -> object:
    """A matplotlib Figure: the component's concentration in every well of the plate.

    Wells without a result are grey; wells whose result is doubtful
    (:func:`mixsolve.report.plate_text.well_concern`) carry a cross, nothing else does
    (empty and unused wells, codes only worth a look); blanks are marked ``b`` and
    standards ``s``.
    """
    import matplotlib as mpl
    from matplotlib.figure import Figure

    from mixsolve.report.figures import drawable, hidden_note, literal

    n_rows, n_cols = PLATE_SHAPES[plate_size]
    grid = np.full((n_rows, n_cols), np.nan)
    rows = wells[wells["component"] == component]
    fig = Figure(figsize=(6.4, 4.2) if plate_size == 96 else (8.4, 5.6))
    # Axes placed by hand: a layout engine would cost more than the drawing itself.
    ax = fig.add_axes((0.05, 0.05, 0.82, 0.86))
    marks = []
    for well, conc, role, flags in rows[["well", "concentration", "role", "flags"]].itertuples(
            index=False):
        r, c = parse_well(well)  # type: ignore[misc]
        grid[r, c - 1] = conc
        if well_concern(flags, role) == DOUBTFUL:
            marks.append((r, c - 1))
        if role in ("blank", "standard"):
            ax.text(c - 1, r, role[0], ha="center", va="center", fontsize=7, color="white")
    cmap = mpl.colormaps["cividis"].with_extremes(bad="#d9d9d9")
    grid, hidden = drawable(grid)
    image = ax.imshow(np.ma.masked_invalid(grid), cmap=cmap, aspect="equal")
    if marks:
        ys, xs = zip(*marks, strict=True)
        ax.scatter(xs, ys, marker="x", s=30 if plate_size == 96 else 14, c="#b32d2e",
                   linewidths=1.2)
    step = 1 if plate_size == 96 else 2
    ax.set_xticks(range(0, n_cols, step), [str(c + 1) for c in range(0, n_cols, step)])
    ax.set_yticks(range(n_rows), list(ROW_LETTERS[:n_rows]))
    ax.tick_params(labelsize=7, length=0)
    ax.set_title(literal(f"{component} ({unit})") + hidden_note(hidden), fontsize=10)
    bar = fig.colorbar(image, cax=fig.add_axes((0.89, 0.12, 0.025, 0.72)), format="%.3g")
    bar.ax.tick_params(labelsize=7)
    return fig


def residual_figure(result: xr.Dataset, wells: Sequence[str], labels: Mapping[str, str]
                    ) -> object:
    """A matplotlib Figure of the residual spectra (AU) of ``wells``."""
    from matplotlib.figure import Figure

    from mixsolve.report.figures import drawable, hidden_note, literal

    fig = Figure(figsize=(8.0, 3.6))
    ax = fig.add_axes((0.09, 0.14, 0.58, 0.8))
    wl = result[WAVELENGTH].values
    for well in wells:
        residual, hidden = drawable(result["residual"].sel({WELL: well}).values)
        ax.plot(wl, residual, lw=1.2, label=literal(labels.get(well, well)) + hidden_note(hidden))
    ax.axhline(0.0, color="#50575e", lw=0.8)
    ax.set_xlabel("wavelength (nm)")
    ax.set_ylabel("residual (AU)")
    ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    ax.tick_params(labelsize=8)
    return fig


def _worst_wells(result: xr.Dataset, wells: pd.DataFrame, count: int) -> list[str]:
    rms = result["rms_residual"].to_series().dropna().sort_values(ascending=False)
    roles = wells.drop_duplicates("well").set_index("well")["role"]
    preferred = [w for w in rms.index if roles.get(w) in ("sample", "standard")]
    return (preferred or list(rms.index))[:count]


def _samples_view(samples: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({
        "sample": samples["sample"],
        "component": samples["component"],
        "value ± u": [value_with_uncertainty(c, u) for c, u in
                      zip(samples["concentration"], samples["std_uncertainty"], strict=True)],
        "U (k)": [_expanded_text(c, big_u, k) for c, big_u, k in
                  zip(samples["concentration"], samples["expanded_uncertainty"],
                      samples["coverage_factor"], strict=True)],
        "unit": samples["unit"],
        "n": samples["n_wells"],
        "CV %": samples["cv_percent"],
        "flags": samples["flags"],
    })


def _expanded_text(value: float, expanded: float, k: float) -> str:
    """``U (k = 4.30)``: the expanded uncertainty, to the digits of ``value ± U``."""
    if not (np.isfinite(expanded) and np.isfinite(k)):
        return "n/a"
    shown = value_with_uncertainty(value if np.isfinite(value) else 0.0, expanded)
    return f"{shown.split(' ± ')[-1]} (k = {k:.2f})"


def plate_page(
    wells: pd.DataFrame,
    samples: pd.DataFrame,
    *,
    result: xr.Dataset | None,
    plate_size: int,
    settings: Mapping[str, str],
    notes: Sequence[str] = (),
    title: str = "Plate report",
) -> str:
    """Build the plate's report page.

    Parameters
    ----------
    wells, samples : DataFrame
        The tidy tables of :func:`mixsolve.plate.analysis.analyse_plate`.
    result : Dataset or None
        The :func:`mixsolve.unmix` result over the fitted wells (for the residuals).
    plate_size : {96, 384}
    settings : mapping of str
        The run's settings, shown as a table.
    notes : sequence of str
        Sentences shown near the top (after the wells that need attention, the counts and
        the run notes of ``result``).
    title : str

    Returns
    -------
    str
        A self-contained HTML page with one heat map figure per component. It opens with
        the wells whose result is doubtful and why
        (:func:`mixsolve.report.plate_text.attention_table`), then the counts (doubtful
        apart from worth a look) and the run notes, each with its size and fix.
    """
    components = list(dict.fromkeys(wells["component"]))
    unit = str(wells["unit"].iloc[0]) if len(wells) else ""
    per_well = wells.drop_duplicates("well")
    concern = [well_concern(f, r) for f, r in zip(per_well["flags"], per_well["role"],
                                                  strict=True)]
    flagged = per_well[[c is not None for c in concern]].assign(
        _order=[SEVERITIES.index(c) for c in concern if c is not None]).sort_values(
        "_order", kind="stable")
    at_zero = per_well["flags"].str.contains(f"{AT_ZERO}:").sum()
    attention = attention_table(wells)
    first = html.section(
        "Wells that need attention",
        html.table(attention) if len(attention) else
        html.paragraph("No well has a doubtful result."))
    parts = [html.paragraph(
        f"{len(per_well)} wells on the plate: {counts_text(wells)}; "
        f"{samples['sample'].nunique()} samples; concentrations in {unit}.")]
    run_notes = run_note_sentences(result.attrs) if result is not None else []
    if run_notes:
        parts.append(html.paragraph("Run notes (hold for every well, said once):"))
        parts.append(html.bullet_list(run_notes, kind="note"))
    parts += [html.paragraph(n, kind="note") for n in notes]
    maps = [html.figure(heat_map(wells, c, plate_size, unit),
                        f"Heat map of {c}: concentration per well ({unit}), dilution "
                        "applied; grey = no result, × = doubtful result, b = blank, "
                        "s = standard", alt=f"heat map of {c}")
            for c in components]
    sections = [first, "".join(parts), html.section("Concentration per well", *maps)]
    sections.append(html.section(
        "Samples", html.paragraph("Mean of the sample's wells ± standard uncertainty of the "
                                  "mean (see the settings for the rule)."),
        html.table(_samples_view(samples), digits=3) if len(samples) else
        html.paragraph("The layout lists no sample wells.")))
    listed = pd.DataFrame({"well": flagged["well"], "sample": flagged["sample"],
                           "role": flagged["role"], "flags": flagged["flags"].map(order_flags),
                           "reasons": flagged["flags"].map(explain)})
    flag_parts = [html.table(listed) if len(listed) else
                  html.paragraph("No well is flagged beyond routine codes.")]
    if at_zero:
        flag_parts.append(html.paragraph(
            f"{at_zero} well(s) have a component held at zero (at_zero): usually that "
            "component is absent; wells.csv lists them."))
    sections.append(html.section("Flagged wells", *flag_parts))
    if result is not None and result.sizes.get(WELL, 0):
        worst = _worst_wells(result, wells, WORST_WELLS)
        info = per_well.set_index("well")
        labels = {w: f"{w} ({info.at[w, 'role']} {info.at[w, 'sample']}, rms "
                     f"{info.at[w, 'rms_residual_au']:.2g} AU)" for w in worst}
        sections.append(html.section(
            "Residual spectra of the worst-fitting wells",
            html.figure(residual_figure(result, worst, labels),
                        "Measured minus fitted absorbance of the wells with the largest RMS "
                        "residual; structure above the noise suggests an unmodelled absorber, "
                        "scatter or a wavelength shift", alt="residual spectra")))
    sections.append(html.section("Settings", html.key_values(settings)))
    sections.append(html.cautions())
    return html.page(title, sections)
