"""matplotlib figures for reports. Each function returns a ``matplotlib.figure.Figure``.

Figures are made with the object API (no pyplot state), so they work without a display
and from threads; :func:`mixsolve.report.html.figure` embeds them in a page.

Names from the user's files (samples, components, wells, flags) are shown as written:
:func:`literal` escapes the ``$`` that would start matplotlib's mathtext. Values beyond
±``PLOT_LIMIT`` are left out of a figure (:func:`drawable`) and the figure says how many.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from mixsolve.library import COMPONENT
from mixsolve.noise import NoiseModel
from mixsolve.spectra import SAMPLE, WAVELENGTH

#: Largest magnitude drawn (judgement): far beyond any absorbance or result, and far below
#: the largest float (1.8e308), near which matplotlib's axis and tick arithmetic overflows.
PLOT_LIMIT = 1e100


def literal(text: object) -> str:
    """``text`` as matplotlib should show it, character for character.

    matplotlib reads text between two unescaped ``$`` as mathtext ("Writing mathematical
    expressions" in its documentation) and fails on what does not parse (``$\\frac$``);
    an escaped dollar ``\\$`` is drawn as a plain ``$``. Escaping every ``$`` leaves an even
    count of unescaped ones (none), so no mathtext is read.
    """
    return str(text).replace("$", r"\$")


def drawable(values: object) -> tuple[np.ndarray, int]:
    """Values as float with those beyond ±``PLOT_LIMIT`` (and ±inf) as NaN, and their count."""
    v = np.asarray(values, dtype=float)
    with np.errstate(invalid="ignore"):
        far = np.abs(v) > PLOT_LIMIT
    return np.where(far, np.nan, v), int(np.count_nonzero(far))


def hidden_note(count: int) -> str:
    """What a figure says about the values :func:`drawable` left out ('' for none)."""
    return f" ({count} beyond ±{PLOT_LIMIT:.0e} not drawn)" if count else ""


def library_figure(library: xr.Dataset, used_nm: np.ndarray | None = None) -> Figure:
    """Absorptivity of every component (± u(ε) where stated), used wavelengths marked."""
    fig = Figure(figsize=(7.5, 3.4), layout="constrained")
    ax = fig.add_subplot()
    wl = library[WAVELENGTH].values
    hidden = 0
    for name in library[COMPONENT].values:
        eps, far = drawable(library["absorptivity"].sel({COMPONENT: name}).values)
        u, _ = drawable(library["u_absorptivity"].sel({COMPONENT: name}).values)
        hidden += far
        line = ax.plot(wl, eps, label=literal(name), marker="o" if wl.size < 12 else None)[0]
        if np.isfinite(u).any():
            ax.fill_between(wl, eps - 2 * u, eps + 2 * u, color=line.get_color(), alpha=0.2,
                            linewidth=0)
    if used_nm is not None and len(used_nm):
        if len(used_nm) <= 24:
            for w in used_nm:
                ax.axvline(w, color="0.4", linewidth=0.8, linestyle=":")
        else:
            ax.axvspan(float(np.min(used_nm)), float(np.max(used_nm)), color="0.85",
                       zorder=0, label="used window")
    ax.set_xlabel("wavelength (nm)")
    ax.set_ylabel(literal(f"absorptivity ({library.attrs['unit']})"))
    ax.legend(fontsize="small")
    ax.set_title("Library (band: ±2 u(ε)); dotted lines or grey: wavelengths used"
                 + hidden_note(hidden), fontsize="small")
    return fig


def sample_figure(result: xr.Dataset, sample: str) -> Figure:
    """Measured and fitted spectrum (top) and residual (bottom) of one sample."""
    fig = Figure(figsize=(4.6, 3.4), layout="constrained")
    top, bottom = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [2, 1]})
    one = result.sel(sample=sample)
    wl = one[WAVELENGTH].values
    with np.errstate(over="ignore", invalid="ignore"):
        measured = one["fitted"].values + one["residual"].values
    fitted, far_fit = drawable(one["fitted"].values)
    measured, far_meas = drawable(measured)
    residual, far_res = drawable(one["residual"].values)
    style = {"marker": "o"} if wl.size < 12 else {}
    top.plot(wl, measured, color="black", linewidth=1, label="measured", **style)
    top.plot(wl, fitted, color="#c0392b", linewidth=1, linestyle="--", label="fitted")
    top.set_ylabel("A (AU)")
    top.legend(fontsize="x-small")
    top.set_title(literal(f"{sample}  {one['flags'].item() if 'flags' in one else ''}")
                  + hidden_note(far_fit + far_meas + far_res), fontsize="small")
    bottom.axhline(0, color="0.5", linewidth=0.8)
    bottom.plot(wl, residual, color="#2f6f73", linewidth=1, **style)
    bottom.set_ylabel("residual")
    bottom.set_xlabel("wavelength (nm)")
    return fig


def precision_figure(noise: NoiseModel, absorbance_range: tuple[float, float]) -> Figure:
    """Predicted relative concentration error of one reading against absorbance."""
    fig = Figure(figsize=(5.5, 3.4), layout="constrained")
    ax = fig.add_subplot()
    a = np.linspace(0.02, min(3.5, 0.98 * noise.saturation_absorbance()), 400)
    ax.plot(a, 100 * noise.relative_concentration_error(a), color="#2f6f73")
    ax.axvspan(*absorbance_range, color="#d5e8d4", zorder=0, label="reliable range (flags)")
    best = noise.best_absorbance()
    if np.isfinite(best):
        ax.axvline(best, color="0.4", linestyle=":", label=f"minimum at {best:.2f} AU")
    ax.set_yscale("log")
    ax.set_xlabel("absorbance (AU)")
    ax.set_ylabel("σc/c (%)")
    ax.set_title(literal(f"Predicted relative error, noise model '{noise.name}'"),
                 fontsize="small")
    ax.legend(fontsize="x-small")
    return fig


def calibration_figure(model: xr.Dataset) -> Figure:
    """Cross-validation curve and predicted-against-reference panels of a PLS ``model``
    (a Dataset from :func:`mixsolve.calibrate` or :func:`mixsolve.read_model`).

    Returns
    -------
    Figure
        Top: RMSECV divided by the standard deviation of each component's reference
        values (dimensionless, log scale) against the number of latent variables, the
        chosen number circled. Below, one panel per component: the cross-validated
        prediction against the reference value (model unit), with the 1:1 line.
    """
    comps = [str(c) for c in model[COMPONENT].values]
    mode = model.attrs["mode"]
    unit = model.attrs["unit"]
    n_c = len(comps)
    fig = Figure(figsize=(4.0 * max(2, n_c), 7.5), layout="constrained")
    grid = fig.add_gridspec(2, max(2, n_c))
    ax = fig.add_subplot(grid[0, :])
    lv = model["cv_latent"].values
    sd = model["reference"].std(SAMPLE, ddof=1).values
    choice = model["cv_choice"].sel(cv_mode=mode).values
    for k, c in enumerate(comps):
        with np.errstate(divide="ignore", invalid="ignore"):
            curve, _ = drawable(model["cv_rmsecv"].sel(cv_mode=mode).values[k] / sd[k])
        (line,) = ax.plot(lv, curve, marker=".", label=literal(c))
        ax.plot([choice[k]], [curve[choice[k] - 1]], "o", mfc="none", ms=10,
                color=line.get_color())
    ax.set_xlabel("latent variables")
    ax.set_ylabel("RMSECV / sd of reference")
    ax.set_yscale("log")
    ax.set_title(f"Cross-validation ({mode}); circles: chosen by the one-standard-error rule")
    ax.legend()
    for k, c in enumerate(comps):
        sub = fig.add_subplot(grid[1, k])
        ref, far_ref = drawable(model["reference"].values[:, k])
        predicted, far_pred = drawable(model["cv_predicted"].values[:, k])
        sub.plot(ref, predicted, ".", label="cross-validated")
        lims = [float(np.nanmin(ref)), float(np.nanmax(ref))] if np.isfinite(ref).any() \
            else []
        sub.plot(lims, lims, "k-", lw=0.8, label="1:1")
        sub.set_xlabel(literal(f"reference ({unit})"))
        sub.set_ylabel(literal(f"predicted ({unit})"))
        sub.set_title(literal(f"{c}: RMSECV {float(model['rmsecv'].values[k]):.3g}")
                      + hidden_note(far_ref + far_pred))
        sub.legend(fontsize="small")
    return fig
