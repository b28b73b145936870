"""Figures of merit of a library over a wavelength selection: ``check_wavelengths``."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.names import normalise_name
from mixsolve.noise import NoiseModel, blank_noise_sd
from mixsolve.solve.design import BASELINE_TERMS, BASELINES, Baseline, design_matrix
from mixsolve.solve.shift_sensitivity import library_derivative, shift_matrix
from mixsolve.spectra import WAVELENGTH, check_option, check_wavelength_list, check_window
from mixsolve.wavelengths.merit import (
    net_analyte_sensitivity,
    overlap_matrix,
    scaled_condition_number,
    verdict,
)

#: σ_A (AU) assumed when none is given: a typical benchtop reading noise (common practice).
DEFAULT_SIGMA_A = 0.001
#: Selectivity below which a component is called poorly resolved (judgement).
LOW_SELECTIVITY = 0.1


def candidate_wavelengths(library: xr.Dataset, *, window: tuple[float, float] | None = None,
                          wavelengths: Sequence[float] | None = None) -> np.ndarray:
    """Wavelengths (nm) a check or choice works on: the library grid, a window of it, or a list.

    Raises
    ------
    InputError
        Both selectors given, an empty window, or wavelengths outside the library.
    """
    grid = library[WAVELENGTH].values
    if window is not None and wavelengths is not None:
        raise InputError("give either a window or a list of wavelengths, not both")
    if wavelengths is not None:
        chosen = np.sort(check_wavelength_list(wavelengths))
        outside = chosen[(chosen < grid[0]) | (chosen > grid[-1])]
        if outside.size:
            raise InputError(f"wavelengths: {outside[0]:g} nm is outside the library "
                             f"({grid[0]:g}-{grid[-1]:g} nm), which is never extrapolated")
        if np.unique(chosen).size != chosen.size:
            raise InputError("wavelengths: a wavelength is listed twice")
        return chosen
    if window is not None:
        low, high = check_window(window)  # type: ignore[misc]
        chosen = grid[(grid >= low) & (grid <= high)]
        if chosen.size == 0:
            raise InputError(f"window {low:g}-{high:g} nm holds no library wavelength "
                             f"(library {grid[0]:g}-{grid[-1]:g} nm)")
        return chosen
    return grid


def check_wavelengths(
    library: xr.Dataset,
    *,
    window: tuple[float, float] | None = None,
    wavelengths: Sequence[float] | None = None,
    components: Sequence[str] | None = None,
    noise: NoiseModel | str | float = DEFAULT_SIGMA_A,
    baseline: Baseline = "none",
) -> xr.Dataset:
    """Conditioning and figures of merit of a library at a set of wavelengths.

    Parameters
    ----------
    library : Dataset
        A mixsolve library.
    window : (float, float), optional
        Library wavelengths from ``low`` to ``high`` nm, both included.
    wavelengths : sequence of float, optional
        Exactly these wavelengths (nm), interpolated inside the library range.
    components : sequence of str, optional
        Check only these components (default all).
    noise : NoiseModel, preset name or float
        Reading noise, as :func:`mixsolve.unmix` takes it: σ_A in AU (default 0.001 AU, a
        typical benchtop figure: common practice), or a noise model or preset
        (:data:`mixsolve.noise.PRESETS`), whose σ_A at A = 0 (a blank reading) is used.
        σ_A is taken constant across wavelengths.
    baseline : {"none", "offset", "linear"}
        Include baseline columns as in the fit.

    Returns
    -------
    Dataset
        Per component: ``sensitivity`` (SEN, AU per library concentration unit at 1 cm),
        ``selectivity`` (SEL, 0–1), ``analytical_sensitivity`` (γ = SEN/σ_A, per
        concentration unit), ``predicted_uncertainty`` (σ_A/SEN), ``lod`` (3.3 σ_A/SEN),
        ``loq`` (10 σ_A/SEN), ``shift_sensitivity`` (relative bias per +1 nm when the
        component is alone, 1/nm; NaN when the library grid cannot give a slope);
        ``overlap`` (component, other) cosine similarity; ``shift_matrix`` (component,
        source) bias of each component per nm per unit of each source component.
        ``attrs``: ``condition_number``, ``verdict``, ``noise_au``, ``baseline``,
        ``wavelengths_nm``, ``concentration_unit``, ``notes`` (list of str).

    Notes
    -----
    Definitions in :mod:`mixsolve.wavelengths.merit` and :mod:`mixsolve.solve.shift_sensitivity`
    (Lorber 1986; Olivieri et al. 2006). LOD/LOQ use the 3.3 and 10 multipliers of σ/SEN
    for a blank-limited reading; they are predictions under the stated σ_A, not measured
    detection limits. The condition number counts the baseline columns when present.
    """
    library = check_library(library)
    check_option(baseline, BASELINES, "baseline")
    sigma = blank_noise_sd(noise)
    if components is not None:
        components = [normalise_name(c) for c in components]  # as the library's names
        names = [str(c) for c in library[COMPONENT].values]
        unknown = [c for c in components if c not in names]
        if unknown:
            raise InputError(f"components: {unknown[0]!r} is not in the library "
                             f"({', '.join(names)})")
        library = library.sel({COMPONENT: list(components)})
    at = candidate_wavelengths(library, window=window, wavelengths=wavelengths)
    return _figures(library, at, sigma, baseline)


def _figures(library: xr.Dataset, at: np.ndarray, sigma: float, baseline: Baseline
             ) -> xr.Dataset:
    comps = [str(c) for c in library[COMPONENT].values]
    lib_at, _ = resample_library(library, at)
    k = lib_at["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
    design = design_matrix(k, at, baseline)
    n = len(comps)
    notes: list[str] = []
    if design.shape[0] < design.shape[1]:
        notes.append(f"{design.shape[0]} wavelength(s) for {design.shape[1]} unknowns: "
                     "underdetermined")
    cond = scaled_condition_number(design)
    sen = net_analyte_sensitivity(design)[:n] if design.shape[0] >= design.shape[1] \
        else np.zeros(n)
    col_norm = np.linalg.norm(k, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        sel = np.where(col_norm > 0, sen / col_norm, 0.0)
        inv_sen = np.where(sen > 0, 1.0 / sen, np.inf)
    deriv = library_derivative(library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values,
                               library[WAVELENGTH].values, at)
    if np.isnan(deriv).all():
        notes.append("the library has too few wavelengths to estimate spectral slopes: "
                     "shift sensitivity not available")
        shift = np.full((n, n), np.nan)
    elif np.isfinite(cond):
        shift = shift_matrix(design, deriv)[:n]
    else:
        shift = np.full((n, n), np.nan)
    for name, s in zip(comps, sel, strict=True):
        if 0 < s < LOW_SELECTIVITY:
            notes.append(f"{name}: selectivity {s:.3f} is below {LOW_SELECTIVITY}: little of "
                         "its signal is its own, so its result is sensitive to the others")
    other = "other"
    ds = xr.Dataset(
        {
            "sensitivity": ((COMPONENT,), sen),
            "selectivity": ((COMPONENT,), sel),
            "analytical_sensitivity": ((COMPONENT,), sen / sigma),
            "predicted_uncertainty": ((COMPONENT,), sigma * inv_sen),
            "lod": ((COMPONENT,), 3.3 * sigma * inv_sen),
            "loq": ((COMPONENT,), 10.0 * sigma * inv_sen),
            "shift_sensitivity": ((COMPONENT,), np.diag(shift).copy()),
            "shift_matrix": ((COMPONENT, "source"), shift),
            "overlap": ((COMPONENT, other), overlap_matrix(k)),
        },
        coords={COMPONENT: comps, "source": comps, other: comps},
        attrs={
            "condition_number": cond,
            "verdict": verdict(cond),
            "noise_au": sigma,
            "baseline": baseline,
            "baseline_terms": list(BASELINE_TERMS[baseline]),
            "wavelengths_nm": [float(w) for w in at],
            "concentration_unit": library.attrs["concentration_unit"],
            "notes": notes,
        },
    )
    unit = library.attrs["concentration_unit"]
    for var, u in (("sensitivity", f"AU per {unit} at 1 cm"), ("selectivity", "1"),
                   ("analytical_sensitivity", f"1/({unit})"), ("predicted_uncertainty", unit),
                   ("lod", unit), ("loq", unit), ("shift_sensitivity", "1/nm"),
                   ("shift_matrix", "1/nm"), ("overlap", "1")):
        ds[var].attrs["units"] = u
    return ds


def merit_to_dict(check: xr.Dataset) -> dict[str, object]:
    """Plain JSON-safe form of a :func:`check_wavelengths` result (for ``--json``)."""
    def num(v: float) -> float | None:
        v = float(v)
        return v if np.isfinite(v) else None

    comps = [str(c) for c in check[COMPONENT].values]
    return {
        "condition_number": num(check.attrs["condition_number"]),
        "verdict": check.attrs["verdict"],
        "noise_au": check.attrs["noise_au"],
        "baseline": check.attrs["baseline"],
        "concentration_unit": check.attrs["concentration_unit"],
        "wavelengths_nm": check.attrs["wavelengths_nm"],
        "components": {
            c: {key: num(check[key].values[i]) for key in (
                "sensitivity", "selectivity", "analytical_sensitivity",
                "predicted_uncertainty", "lod", "loq", "shift_sensitivity")}
            for i, c in enumerate(comps)
        },
        "overlap": {c: {o: num(check["overlap"].values[i, j]) for j, o in enumerate(comps)}
                    for i, c in enumerate(comps)},
        "notes": list(check.attrs["notes"]),
    }
