"""Results by published equations, with propagated uncertainties and per-sample checks.

For each spectrum the raw readings aₚ (the equations' wavelengths, and the reference
wavelength's when the set names one) are taken from the spectrum: exactly when the
wavelength is on its grid, else interpolated linearly between the two neighbouring
readings. With s = b_set/b (the set's pathlength over the cell used) the results are

    c = s·G·E,   Eⱼ = a_j − a_ref,

and their standard uncertainty (JCGM 100:2008, 5.1.2; independent inputs)

    u²(cₖ) = s² Σₚ Jₖₚ² σ_A²(aₚ)                      (readings; J of check.reading_jacobian)
           + s² Σₗⱼ (Sₖₗ Eⱼ u(Bₗⱼ))² + Σₗᵢ (Sₖₗ cᵢ u(Rₗᵢ))²   (coefficients, when stated)

with S = (I − R)⁻¹ and σ_A(a) of the noise model at the reading. Coefficients are exact
unless the set states their u. An interpolated reading is given the σ_A of one reading
(an upper bound: averaging two readings lowers it).

Per-sample checks, as in :func:`mixsolve.unmix` where they apply: the largest reading at
the used wavelengths against the reliable absorbance range (``above_range`` /
``below_range``), a reading within 5 % of the noise model's ceiling −log10(s/(1+s))
(``saturated_reading``; also set when the full-spectrum fit found a flat top), a
negative result (``negative:<component>``), a missing reading (``missing_readings``).

With a library, :func:`mixsolve.unmix` fits every spectrum over the library's range and
its result stands beside each published one, with z = (c_eq − c_full)/√(u_eq² + u_full²)
(the two are taken as independent, which they are not quite: they share the readings at
the equations' wavelengths). A run note ``equations_disagree`` says when some |z| > 3.

Core code: no I/O, no printing.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from mixsolve.equations.check import DEFAULT_NOISE, reading_jacobian
from mixsolve.equations.model import SEEN, EquationSet, LinearMap, linear_map, reading_label
from mixsolve.errors import InputError
from mixsolve.flags import DOUBTFUL, LOOK, RunNote, add_run_notes, run_notes_of
from mixsolve.library import COMPONENT, check_library
from mixsolve.names import name_key
from mixsolve.noise import DEFAULT_ABSORBANCE_RANGE, NoiseModel, noise_model
from mixsolve.solve.engine import METHODS, Method
from mixsolve.spectra import SAMPLE, WAVELENGTH, check_number, check_option, check_spectra

#: |z| above which the published and the full-spectrum result disagree (a run note).
DISAGREE_Z = 3.0
#: Run-note codes of this module (docs/flags.md).
EQUATIONS_DISAGREE = "equations_disagree"
EQUATIONS_FROM_MEMORY = "equations_from_memory"
#: A reading this close to the noise model's ceiling counts as saturated (fraction).
SATURATION_MARGIN = 0.05


def apply_equations(
    spectra: xr.DataArray,
    equations: EquationSet,
    *,
    pathlength_cm: float | None = None,
    noise: NoiseModel | str | float = DEFAULT_NOISE,
    absorbance_range: tuple[float, float] = DEFAULT_ABSORBANCE_RANGE,
    library: xr.Dataset | None = None,
    method: Method = "ols",
    bandwidth_nm: float | None = None,
) -> xr.Dataset:
    """Concentrations by a set of published equations, with u and the checks of unmix.

    Parameters
    ----------
    spectra : DataArray (sample, wavelength)
        Absorbance spectra covering the equations' wavelengths (and reference).
    equations : EquationSet
        From :func:`mixsolve.read_equations`.
    pathlength_cm : float, optional
        The cell used (cm); default the set's own (results unscaled).
    noise : NoiseModel, preset name or float
        As in :func:`mixsolve.unmix`; gives σ_A of each reading.
    absorbance_range : (low, high)
        Reliable absorbance range (AU) for the range flags.
    library : Dataset, optional
        The analyst's library: the full-spectrum :func:`mixsolve.unmix` result is set
        beside each published one.
    method, bandwidth_nm
        Passed to :func:`mixsolve.unmix` (with a library); ``ols`` by default, as the
        equations do not hold results at zero.

    Returns
    -------
    Dataset
        ``concentration``, ``std_uncertainty``, ``u_noise``, ``u_coefficients``
        (sample, component) in the set's unit; ``readings`` (sample, reading: the raw
        readings used, AU); ``flags`` (sample); with a library ``full_concentration``,
        ``full_std_uncertainty`` and ``difference_z`` (NaN for a component the library
        lacks) and ``full_flags``. ``attrs``: the set's name, citation, status (and
        ``status_text``), unit, pathlength, noise model, run notes.

    Raises
    ------
    InputError
        Spectra that do not cover a wavelength; an acidification set (two reads: paired
        reads are not supported here); options out of range.

    Notes
    -----
    Formulas in the module docstring. NaN results where a reading is missing.
    """
    if not isinstance(equations, EquationSet):
        raise InputError("equations: expected an equation set from read_equations, got "
                         f"{type(equations).__name__}")
    eq = equations
    check_option(method, METHODS, "method")
    if len(eq.reads) > 1:
        raise InputError(f"equations {eq.name}: an acidification set needs two reads of "
                         "each extract (before and after acid); apply reads one spectrum per "
                         "sample; apply it to paired reads by hand, or use the full-spectrum "
                         "fit")
    spectra = check_spectra(spectra)
    if spectra.dims != (SAMPLE, WAVELENGTH):
        raise InputError(f"spectra: expected dims (sample, wavelength), got {spectra.dims}; "
                         "give one spectrum per sample")
    model = noise_model(noise)
    assert model is not None
    low, high = _range(absorbance_range)
    set_path = eq.pathlength_cm
    path = set_path if pathlength_cm is None else check_number(
        pathlength_cm, "pathlength_cm", "cm", positive=True)
    scale = set_path / path
    lm = linear_map(eq)
    jac, raw = reading_jacobian(eq)
    a = _readings(spectra, [nm for _, nm in raw])  # (samples, raw)
    n_used = len(lm.readings)
    e = a[:, :n_used] - (a[:, n_used:n_used + 1] if eq.reference_nm is not None else 0.0)
    conc = scale * e @ lm.g.T
    sigma = model.sigma_absorbance(a)
    u_noise = scale * np.sqrt((sigma[:, None, :] ** 2 * jac[None] ** 2).sum(axis=-1))
    u_coef = _u_coefficients(lm, e, conc, scale)
    u = np.hypot(u_noise, u_coef)
    flags = _flags(a[:, :n_used], conc, lm.components, low, high, model)
    comps = lm.components
    coords = {SAMPLE: spectra[SAMPLE].values, COMPONENT: comps,
              "reading": [reading_label(r) for r in raw]}
    dims = (SAMPLE, COMPONENT)
    out = xr.Dataset(
        {"concentration": (dims, conc), "std_uncertainty": (dims, u),
         "u_noise": (dims, u_noise), "u_coefficients": (dims, u_coef),
         "readings": ((SAMPLE, "reading"), a), "flags": ((SAMPLE,), flags)},
        coords=coords,
        attrs={"equations": eq.name, "citation": eq.citation, "equations_status": eq.status,
               "status_text": eq.status_text, "unit": eq.unit, "pathlength_cm": path,
               "equations_pathlength_cm": set_path, "solvent": eq.solvent,
               "bandwidth_class": eq.bandwidth_class, "noise_model": json.dumps(
                   model.to_dict()), "absorbance_range": [low, high],
               "reference_nm": eq.reference_nm if eq.reference_nm is not None else np.nan,
               "interpolated_nm": [nm for _, nm in raw
                                   if nm not in spectra[WAVELENGTH].values]})
    notes = []
    if eq.status != SEEN:
        notes.append(RunNote(EQUATIONS_FROM_MEMORY, LOOK,
                             f"the coefficients of {eq.name} ({eq.citation}) are {eq.status}",
                             "check every coefficient against the paper, then mark the set "
                             "status: seen"))
    if library is not None:
        notes += _beside_library(out, spectra, check_library(library), eq, path, model,
                                 method, bandwidth_nm, absorbance_range=(low, high))
    add_run_notes(out.attrs, notes)
    return out


def _range(absorbance_range: tuple[float, float]) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in absorbance_range)
    except (TypeError, ValueError):
        raise InputError(f"absorbance_range: expected (low, high) in AU, got "
                         f"{absorbance_range!r}") from None
    if not (np.isfinite(low) and np.isfinite(high) and 0 <= low < high):
        raise InputError(f"absorbance_range: ({low:g}, {high:g}) AU is not 0 <= low < high")
    return low, high


def _readings(spectra: xr.DataArray, wavelengths: list[float]) -> np.ndarray:
    """Readings at each wavelength (exact on the grid, else linear between neighbours)."""
    grid = spectra[WAVELENGTH].values.astype(float)
    values = np.asarray(spectra.values, dtype=float)
    out = np.empty((values.shape[0], len(wavelengths)))
    for j, nm in enumerate(wavelengths):
        if not grid[0] <= nm <= grid[-1]:
            raise InputError(f"spectra: the equations read {nm:g} nm, outside the spectra's "
                             f"{grid[0]:g}-{grid[-1]:g} nm; give spectra that cover it")
        i = int(np.searchsorted(grid, nm))
        if grid[i] == nm:
            out[:, j] = values[:, i]
            continue
        f = (nm - grid[i - 1]) / (grid[i] - grid[i - 1])
        out[:, j] = (1 - f) * values[:, i - 1] + f * values[:, i]
    return out


def _u_coefficients(lm: LinearMap, e: np.ndarray, conc: np.ndarray, scale: float) -> np.ndarray:
    """u of the results from the coefficients' stated u (0 when all are exact)."""
    if not (lm.u_b.any() or lm.u_r.any()):
        return np.zeros_like(conc)
    s = lm.solve  # (n, n)
    # d c_k / d B_lj = scale * S_kl * E_j ; d c_k / d R_li = S_kl * c_i
    part_b = (s[None, :, :, None] * e[:, None, None, :] * scale * lm.u_b[None, None]) ** 2
    part_r = (s[None, :, :, None] * conc[:, None, None, :] * lm.u_r[None, None]) ** 2
    return np.sqrt(part_b.sum(axis=(2, 3)) + part_r.sum(axis=(2, 3)))


def _flags(used: np.ndarray, conc: np.ndarray, comps: list[str], low: float, high: float,
           model: NoiseModel) -> np.ndarray:
    """Per-sample flag codes joined with ``;`` (docs/flags.md)."""
    ceiling = model.saturation_absorbance()
    out = []
    for row, c in zip(used, conc, strict=True):
        codes = []
        if np.isnan(row).any():
            codes.append("missing_readings")
        peak = np.nanmax(row) if not np.isnan(row).all() else np.nan
        if peak > high:
            codes.append("above_range")
        elif peak < low:
            codes.append("below_range")
        if np.isfinite(ceiling) and np.nanmax(row, initial=-np.inf) >= (
                1 - SATURATION_MARGIN) * ceiling:
            codes.append("saturated_reading")
        codes += [f"negative:{k}" for k, v in zip(comps, c, strict=True) if v < 0]
        out.append(";".join(codes))
    return np.array(out, dtype=object)


def _beside_library(out: xr.Dataset, spectra: xr.DataArray, library: xr.Dataset,
                    eq: EquationSet, path: float, model: NoiseModel, method: Method,
                    bandwidth_nm: float | None, *,
                    absorbance_range: tuple[float, float]) -> list[RunNote]:
    """Add the full-spectrum result beside the published one; the notes it gives."""
    from mixsolve.solve.unmix import unmix

    full = unmix(spectra, library, method=method, pathlength_cm=path, unit=eq.unit,
                 noise=model, absorbance_range=absorbance_range,
                 bandwidth_nm=bandwidth_nm)
    names = {name_key(c): c for c in full[COMPONENT].values.tolist()}
    shape = out["concentration"].shape
    c_full, u_full = np.full(shape, np.nan), np.full(shape, np.nan)
    for k, comp in enumerate(out[COMPONENT].values.tolist()):
        if name_key(comp) in names:
            sel = full.sel({COMPONENT: names[name_key(comp)]})
            c_full[:, k] = sel["concentration"].values
            u_full[:, k] = sel["std_uncertainty"].values
    dims = (SAMPLE, COMPONENT)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (out["concentration"].values - c_full) / np.hypot(out["std_uncertainty"].values,
                                                              u_full)
    out["full_concentration"] = (dims, c_full)
    out["full_std_uncertainty"] = (dims, u_full)
    out["difference_z"] = (dims, z)
    out["full_flags"] = ((SAMPLE,), full["flags"].values.astype(object))
    flags = out["flags"].values.copy()
    for i, text in enumerate(full["flags"].values):
        if "saturated_reading" in str(text).split(";") and "saturated_reading" not in \
                str(flags[i]).split(";"):
            flags[i] = ";".join([f for f in (flags[i], "saturated_reading") if f])
    out["flags"] = ((SAMPLE,), flags)
    notes = [RunNote(n.code, n.severity, f"full-spectrum fit: {n.text}", n.fix)
             for n in run_notes_of(full.attrs)]
    bad = np.abs(z) > DISAGREE_Z
    if np.any(bad):
        worst = float(np.nanmax(np.abs(z)))
        comps = [c for k, c in enumerate(out[COMPONENT].values) if bad[:, k].any()]
        notes.append(RunNote(
            EQUATIONS_DISAGREE, DOUBTFUL,
            f"the published equations and the full-spectrum fit differ by more than "
            f"{DISAGREE_Z:g} combined u in {int(bad.any(axis=1).sum())} of {shape[0]} samples "
            f"({', '.join(comps)}; largest |z| {worst:.3g})",
            "check the library against the equations (equations check --library): "
            "another absorber, a wavelength or bandwidth difference, or coefficients "
            "that do not hold for this instrument"))
    return notes
