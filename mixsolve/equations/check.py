"""How far to trust a set of published equations on the analyst's instrument.

:func:`check_equations` reports, for one :class:`~mixsolve.equations.model.EquationSet`:

- the absorptivity matrix K the equations imply (:func:`~mixsolve.equations.model.
  implied_absorptivity`), in L/(g·cm) or L/(mol·cm);
- its scaled condition number and the net-analyte-signal figures of merit
  (SENₖ = 1/‖row k of K⁺‖, Lorber 1986; Olivieri et al. 2006) under a noise model:
  σ(cₖ) = σ_A·√(Σⱼ Jₖⱼ²) with J the map from every raw reading (the reference reading
  included) to the results, σ_A the noise at A = 0; LOD = 3.3 σ, LOQ = 10 σ;
- with a library of the analyst's own standards (its absorptivities at the equations'
  wavelengths, interpolated linearly on its grid):
  * published against measured absorptivities, and the bias each difference causes:
    spectra that follow the library, c_true ↦ G·K_lib·b·c_true, so the result per unit of
    component j moves by (G·K_lib·b − I)[:, j];
  * shift sensitivity: a wavelength error δ moves the readings by δ·K′, the results by
    δ·G·K′·b per unit of each component (K′ the library's slope, central differences);
  * bandwidth sensitivity: spectra read through a triangular slit of FWHM X (the library
    broadened by √(X² − b²), :mod:`mixsolve.slit`) move the results by G·(K_X − K_lib)·b.

Without a library there is no spectral shape: shift and bandwidth sensitivity cannot be
computed from the few coefficients, and the check says so.

Core code: no I/O, no printing.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import xarray as xr

from mixsolve.equations.model import (
    EquationSet,
    absorptivity_unit,
    implied_absorptivity,
    linear_map,
    reading_label,
)
from mixsolve.errors import InputError
from mixsolve.library import COMPONENT, absorptivity_at, check_library
from mixsolve.names import name_key
from mixsolve.noise import NoiseModel, blank_noise_sd
from mixsolve.slit import convolve_triangle, extra_fwhm
from mixsolve.solve.conditioning import net_analyte_sensitivity, scaled_condition_number
from mixsolve.solve.shift_sensitivity import library_derivative
from mixsolve.spectra import WAVELENGTH, check_number
from mixsolve.units import absorptivity_basis, concentration_basis

#: Noise assumed when none is given: a benchtop double-beam instrument (mixsolve.noise).
DEFAULT_NOISE = "benchtop_double_beam"
#: Wavelength error (nm) and bandpass (nm) the sensitivities are stated for by default
#: (issue 18: "a 0.5 nm wavelength error or a 2 nm bandpass").
DEFAULT_SHIFT_NM = 0.5
DEFAULT_BANDPASS_NM = 2.0
#: Scaled condition number above which a note says noise is amplified a lot (the
#: thresholds of mixsolve.wavelengths.merit.verdict: judgement, stated).
POOR_CONDITION = 100.0


@dataclass
class EquationCheck:
    """What :func:`check_equations` found. Matrices are nested lists (rows first).

    Attributes
    ----------
    name, citation, status, unit : str
        Of the set; ``status`` is ``"seen"`` or the from-memory warning.
    readings : list of str
        The readings the equations use (``"663.6 nm"``).
    components : list of str
        Every result; ``primary`` those with absorbance terms (K's columns).
    absorptivity_unit : str
    implied : list of list of float
        K, readings × primary components, in ``absorptivity_unit``.
    condition_number : float
        Scaled condition number of K (inf when singular).
    sigma_a : float
        Reading noise σ_A at A = 0 (AU) the figures use.
    sensitivity : dict
        SEN per primary component (AU per result unit at the set's pathlength).
    std_uncertainty, lod, loq : dict
        Per component, in the result unit.
    measured, relative_difference, library_bias : list of list, or None
        With a library: K_lib (same unit), (K − K_lib)/K_lib, and G·K_lib·b − I
        (result change per unit of each primary component; rows results, columns
        components).
    shift_nm, shift_bias : float, list of list or None
        The wavelength error and δ·G·K′·b (rows results, columns components).
    bandpass_nm, bandwidth_bias : float, list of list or None
        The bandpass and G·(K_X − K_lib)·b.
    notes : list of str
        Limitations and warnings in words.
    """

    name: str
    citation: str
    status: str
    unit: str
    readings: list[str]
    components: list[str]
    primary: list[str]
    absorptivity_unit: str
    implied: list[list[float]]
    condition_number: float
    sigma_a: float
    noise: str
    sensitivity: dict[str, float]
    std_uncertainty: dict[str, float]
    lod: dict[str, float]
    loq: dict[str, float]
    measured: list[list[float]] | None = None
    relative_difference: list[list[float]] | None = None
    library_bias: list[list[float]] | None = None
    shift_nm: float = DEFAULT_SHIFT_NM
    shift_bias: list[list[float]] | None = None
    bandpass_nm: float = DEFAULT_BANDPASS_NM
    bandwidth_bias: list[list[float]] | None = None
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-safe contents (inf and NaN as None)."""
        def clean(v: Any) -> Any:
            if isinstance(v, float):
                return v if np.isfinite(v) else None
            if isinstance(v, list):
                return [clean(x) for x in v]
            if isinstance(v, dict):
                return {k: clean(x) for k, x in v.items()}
            return v
        return {k: clean(v) for k, v in asdict(self).items()}


def reading_jacobian(eq: EquationSet) -> tuple[np.ndarray, list[tuple[str, float]]]:
    """J: results per AU of every raw reading (the reference readings last).

    Returns
    -------
    jac : ndarray, shape (n_components, n_raw)
    raw : list of (read, nm)
        The raw readings: the set's readings, then one reference reading per read when
        the set names a reference wavelength.

    Notes
    -----
    Eⱼ = A_j − A_ref(read of j), so ∂c/∂A_j = Gⱼ and ∂c/∂A_ref = −Σ_{j in that read} Gⱼ.
    """
    lm = linear_map(eq)
    raw = list(lm.readings)
    cols = [lm.g[:, j] for j in range(len(raw))]
    if eq.reference_nm is not None:
        for read in eq.reads:
            idx = [j for j, (r, _) in enumerate(lm.readings) if r == read]
            cols.append(-lm.g[:, idx].sum(axis=1))
            raw.append((read, eq.reference_nm))
    return np.stack(cols, axis=1), raw


def check_equations(
    equations: EquationSet,
    *,
    library: xr.Dataset | None = None,
    noise: NoiseModel | str | float = DEFAULT_NOISE,
    shift_nm: float = DEFAULT_SHIFT_NM,
    bandpass_nm: float = DEFAULT_BANDPASS_NM,
) -> EquationCheck:
    """Conditioning, figures of merit and sensitivities of a set of published equations.

    Parameters
    ----------
    equations : EquationSet
        From :func:`mixsolve.read_equations` (a file or a shipped set's name).
    library : Dataset, optional
        The analyst's own library: compares the published absorptivities with it and
        gives the shift and bandwidth sensitivity from its spectra.
    noise : NoiseModel, preset name or float
        As in :func:`mixsolve.unmix`; taken at A = 0 (:func:`mixsolve.noise.blank_noise_sd`).
    shift_nm : float
        Wavelength error (nm) the shift sensitivity is stated for.
    bandpass_nm : float
        Spectral bandpass (nm, FWHM of a triangular slit) the bandwidth sensitivity is
        stated for.

    Returns
    -------
    EquationCheck

    Raises
    ------
    InputError
        Equations that imply no absorptivities; a library lacking a component or the
        wavelengths, or in a unit basis (molar/mass) it cannot be converted from.

    Notes
    -----
    See the module docstring for every formula. NaN: a figure that cannot be computed
    (a zero row of G gives SEN 0 and an infinite LOD).
    """
    if not isinstance(equations, EquationSet):
        raise InputError("equations: expected an equation set from read_equations, got "
                         f"{type(equations).__name__}")
    shift_nm = check_number(shift_nm, "shift_nm", "nm", positive=True)
    bandpass_nm = check_number(bandpass_nm, "bandpass_nm", "nm", positive=True)
    sigma_a = blank_noise_sd(noise)
    eq = equations
    lm = linear_map(eq)
    k_unit, factor = absorptivity_unit(eq)
    k = implied_absorptivity(eq)  # AU/(unit*cm)
    jac, _ = reading_jacobian(eq)
    u = sigma_a * np.sqrt((jac**2).sum(axis=1))
    comps = lm.components
    sen = net_analyte_sensitivity(k * eq.pathlength_cm)
    out = EquationCheck(
        name=eq.name, citation=eq.citation, status=eq.status, unit=eq.unit,
        readings=[reading_label(r) for r in lm.readings], components=comps,
        primary=eq.primary, absorptivity_unit=k_unit, implied=(k * factor).tolist(),
        condition_number=scaled_condition_number(k), sigma_a=sigma_a,
        noise=noise if isinstance(noise, str) else repr(noise),
        sensitivity=dict(zip(eq.primary, sen.tolist(), strict=True)),
        std_uncertainty=dict(zip(comps, u.tolist(), strict=True)),
        lod=dict(zip(comps, (3.3 * u).tolist(), strict=True)),
        loq=dict(zip(comps, (10 * u).tolist(), strict=True)),
        shift_nm=shift_nm, bandpass_nm=bandpass_nm)
    if out.condition_number > POOR_CONDITION:
        out.notes.append(f"scaled condition number {out.condition_number:.3g} (above "
                         f"{POOR_CONDITION:g}): small errors in the readings or coefficients "
                         "move the results a lot")
    if library is None:
        out.notes.append("no library given: the shift and bandwidth sensitivity need the "
                         "components' spectra, which a few coefficients do not carry; give "
                         "a library of your own standards (--library)")
        return out
    if len(eq.reads) > 1:
        out.notes.append("an acidification set reads two different solutions (before and "
                         "after acid): the library comparison and the sensitivities are "
                         "not computed for it")
        return out
    _with_library(out, eq, check_library(library), k)
    return out


def library_absorptivity(eq: EquationSet, library: xr.Dataset) -> np.ndarray:
    """The library's absorptivities at the set's readings, per (result unit · cm).

    Returns
    -------
    ndarray, shape (n_readings, n_primary)

    Raises
    ------
    InputError
        A primary component missing from the library, a reading outside its range, or a
        molar library for a mass set (or the reverse) without molar masses.
    """
    names = {name_key(c): c for c in library[COMPONENT].values.tolist()}
    missing = [c for c in eq.primary if name_key(c) not in names]
    if missing:
        raise InputError(f"library: no component {', '.join(map(repr, missing))} of the "
                         f"equations {eq.name}; it has {', '.join(names.values())}")
    grid = library[WAVELENGTH].values
    wl = np.array([nm for _, nm in eq.readings])
    outside = wl[(wl < grid[0]) | (wl > grid[-1])]
    if outside.size:
        raise InputError(f"library: {outside[0]:g} nm of the equations {eq.name} is outside "
                         f"its range {grid[0]:g}-{grid[-1]:g} nm; give a library that covers it")
    sub = library.sel({COMPONENT: [names[name_key(c)] for c in eq.primary]})
    return absorptivity_at(sub, wl) * _library_factor(eq, sub)


def _library_factor(eq: EquationSet, sub: xr.Dataset) -> np.ndarray:
    """Per-component factor from the library's unit to AU per (result unit · cm)."""
    lib_basis, lib_f = absorptivity_basis(str(sub.attrs.get("unit", "")))
    eq_basis, eq_f = concentration_basis(eq.unit, f"{eq.name}: unit")
    # canonical absorptivity (L/(g*cm) or L/(mol*cm)) times (g/L or mol/L) per result unit
    factor = np.full(sub.sizes[COMPONENT], lib_f * eq_f)
    if lib_basis == eq_basis:
        return factor
    masses = (sub["molar_mass_g_per_mol"].values if "molar_mass_g_per_mol" in sub
              else np.full(sub.sizes[COMPONENT], np.nan))
    if not np.all(np.isfinite(masses)):
        raise InputError(f"library: its absorptivities are {lib_basis}, the equations "
                         f"{eq.name} give {eq_basis} concentrations; give the library molar "
                         "masses (library import --molar-mass)")
    return factor / masses if lib_basis == "molar" else factor * masses


def _with_library(out: EquationCheck, eq: EquationSet, library: xr.Dataset,
                  k: np.ndarray) -> None:
    """Fill the library comparison and the sensitivities of ``out``."""
    lm = linear_map(eq)
    g = lm.g[[lm.components.index(c) for c in eq.primary]]
    path = eq.pathlength_cm
    k_lib = library_absorptivity(eq, library)
    with np.errstate(divide="ignore", invalid="ignore"):
        out.relative_difference = ((k - k_lib) / k_lib).tolist()
    out.measured = (k_lib * absorptivity_unit(eq)[1]).tolist()
    out.library_bias = (g @ k_lib * path - np.eye(len(eq.primary))).tolist()
    names = {name_key(c): c for c in library[COMPONENT].values.tolist()}
    sub = library.sel({COMPONENT: [names[name_key(c)] for c in eq.primary]})
    eps = sub["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    scale = _library_factor(eq, sub)
    grid = sub[WAVELENGTH].values.astype(float)
    wl = np.array([nm for _, nm in eq.readings])
    slope = library_derivative(eps, grid, wl) * scale
    if np.all(np.isfinite(slope)):
        out.shift_bias = (out.shift_nm * g @ slope * path).tolist()
    else:
        out.notes.append("the library has too few wavelengths for a slope: no shift "
                         "sensitivity")
    own = float(library.attrs.get("bandwidth_nm", np.nan))
    if not np.isfinite(own):
        own = 0.0
        out.notes.append("the library's bandwidth is not stated: taken as narrow for the "
                         "bandwidth sensitivity")
    w = extra_fwhm(out.bandpass_nm, own)
    if w <= 0:
        out.notes.append(f"the library was measured at {own:g} nm, not narrower than "
                         f"{out.bandpass_nm:g} nm: no bandwidth sensitivity")
        return
    wide, kept = convolve_triangle(eps, grid, w)
    if kept.size < 2 or wl.min() < kept[0] or wl.max() > kept[-1]:
        out.notes.append(f"the library does not reach {w:.3g} nm beyond the equations' "
                         "wavelengths: no bandwidth sensitivity")
        return
    k_wide = np.stack([np.interp(wl, kept, row) for row in wide], axis=1) * scale
    out.bandwidth_bias = (g @ (k_wide - k_lib) * path).tolist()

