"""matplotlib figures for reports. Each function returns a ``matplotlib.figure.Figure``.

Figures are made with the object API (no pyplot state), so they work without a display
and from threads; :func:`mixsolve.report.html.figure` embeds them in a page.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from mixsolve.library import COMPONENT
from mixsolve.noise import NoiseModel
from mixsolve.spectra import SAMPLE, WAVELENGTH


def library_figure(library: xr.Dataset, used_nm: np.ndarray | None = None) -> Figure:
    """Absorptivity of every component (± u(ε) where stated), used wavelengths marked."""
    fig = Figure(figsize=(7.5, 3.4), layout="constrained")
    ax = fig.add_subplot()
    wl = library[WAVELENGTH].values
    for name in library[COMPONENT].values:
        eps = library["absorptivity"].sel({COMPONENT: name}).values
        u = library["u_absorptivity"].sel({COMPONENT: name}).values
        line = ax.plot(wl, eps, label=str(name), marker="o" if wl.size < 12 else None)[0]
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
    ax.set_ylabel(f"absorptivity ({library.attrs['unit']})")
    ax.legend(fontsize="small")
    ax.set_title("Library (band: ±2 u(ε)); dotted lines or grey: wavelengths used",
                 fontsize="small")
    return fig


def sample_figure(result: xr.Dataset, sample: str) -> Figure:
    """Measured and fitted spectrum (top) and residual (bottom) of one sample."""
    fig = Figure(figsize=(4.6, 3.4), layout="constrained")
    top, bottom = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [2, 1]})
    one = result.sel(sample=sample)
    wl = one[WAVELENGTH].values
    fitted = one["fitted"].values
    measured = fitted + one["residual"].values
    style = {"marker": "o"} if wl.size < 12 else {}
    top.plot(wl, measured, color="black", linewidth=1, label="measured", **style)
    top.plot(wl, fitted, color="#c0392b", linewidth=1, linestyle="--", label="fitted")
    top.set_ylabel("A (AU)")
    top.legend(fontsize="x-small")
    top.set_title(f"{sample}  {one['flags'].item() if 'flags' in one else ''}",
                  fontsize="small")
    bottom.axhline(0, color="0.5", linewidth=0.8)
    bottom.plot(wl, one["residual"].values, color="#2f6f73", linewidth=1, **style)
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
    ax.set_title(f"Predicted relative error, noise model '{noise.name}'", fontsize="small")
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
        curve = model["cv_rmsecv"].sel(cv_mode=mode).values[k] / sd[k]
        (line,) = ax.plot(lv, curve, marker=".", label=c)
        ax.plot([choice[k]], [curve[choice[k] - 1]], "o", mfc="none", ms=10,
                color=line.get_color())
    ax.set_xlabel("latent variables")
    ax.set_ylabel("RMSECV / sd of reference")
    ax.set_yscale("log")
    ax.set_title(f"Cross-validation ({mode}); circles: chosen by the one-standard-error rule")
    ax.legend()
    for k, c in enumerate(comps):
        sub = fig.add_subplot(grid[1, k])
        ref = model["reference"].values[:, k]
        sub.plot(ref, model["cv_predicted"].values[:, k], ".", label="cross-validated")
        lims = [float(ref.min()), float(ref.max())]
        sub.plot(lims, lims, "k-", lw=0.8, label="1:1")
        sub.set_xlabel(f"reference ({unit})")
        sub.set_ylabel(f"predicted ({unit})")
        sub.set_title(f"{c}: RMSECV {float(model['rmsecv'].values[k]):.3g}")
        sub.legend(fontsize="small")
    return fig
