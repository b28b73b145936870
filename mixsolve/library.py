"""Pure-component absorptivity libraries: import, build from standards, resample.

A library is an :class:`xarray.Dataset` with dims ``("component", "wavelength")``:

``absorptivity``
    ε(λ) in the library's canonical unit, ``L/(mol*cm)`` or ``L/(g*cm)`` (``attrs["unit"]``).
``u_absorptivity``
    Standard uncertainty of ε(λ), same unit; NaN where not stated (imported tables).
``molar_mass_g_per_mol`` (component)
    NaN where unknown.

Libraries built from standards also carry per-component linearity figures (see
:func:`build_library`). ``attrs`` hold ``unit``, ``basis`` ("molar"/"mass"),
``concentration_unit``, ``solvent``, ``bandwidth_nm`` (NaN if unknown) and ``provenance``
(a JSON string saying how the library was made).
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve._version import __version__
from mixsolve.errors import InputError, LargeUncertaintyWarning, LinearityWarning, renamed
from mixsolve.library_error import (
    ERROR_KIND,
    ERROR_PATTERN,
    ERROR_SOURCE,
    check_patterns,
    component_patterns,
    declared_patterns,
    stock_weights,
)
from mixsolve.names import check_spellings, check_unique_names, per_component
from mixsolve.spectra import (
    SAMPLE,
    WAVELENGTH,
    WAVENUMBER_AXIS,
    check_number,
    check_spectra,
    native_axis,
    nm_from_wavenumber,
)
from mixsolve.units import (
    ABSORPTIVITY_UNITS,
    CONCENTRATION_UNITS,
    absorptivity_basis,
    concentration_basis,
)

COMPONENT = "component"
LIBRARY_KIND = "mixsolve-library"
#: ``provenance["method"]`` of a library made by :func:`build_library`.
BUILT_FROM_STANDARDS = "built from standards"
FORMAT_VERSION = 1

#: Default linearity criteria for standards (common practice, configurable).
DEFAULT_MIN_R2 = 0.995
DEFAULT_MAX_RELATIVE_DEVIATION = 0.05
DEFAULT_MIN_LEVELS = 3


def _molar_masses(components: list[str], molar_mass: Mapping[str, float] | None) -> np.ndarray:
    return per_component(molar_mass or {}, components, "molar mass", lambda value, label:
                         check_number(value, label, "g/mol", positive=True), np.nan,
                         value_name="molar_mass_g_per_mol")


def _bandwidth(bandwidth_nm: float | None) -> float:
    """Spectral bandwidth (nm) as stored: NaN when not stated; refused unless positive."""
    if bandwidth_nm is None:
        return float("nan")
    return check_number(bandwidth_nm, "bandwidth_nm", "nm", positive=True)


def _new_library(
    absorptivity: np.ndarray,
    u_absorptivity: np.ndarray,
    components: list[str],
    wavelengths: np.ndarray,
    basis: str,
    molar_mass: Mapping[str, float] | None,
    solvent: str,
    bandwidth_nm: float | None,
    provenance: dict[str, Any],
    patterns: tuple[np.ndarray, list[str], list[str]] | None = None,
    axis: str = "nm",
) -> xr.Dataset:
    unit = ABSORPTIVITY_UNITS[basis]
    dims = (COMPONENT, WAVELENGTH)
    data: dict[str, Any] = {
        "absorptivity": (dims, absorptivity, {"units": unit}),
        "u_absorptivity": (dims, u_absorptivity, {"units": unit}),
        "molar_mass_g_per_mol": ((COMPONENT,), _molar_masses(components, molar_mass),
                                 {"units": "g/mol"}),
    }
    coords: dict[str, Any] = {COMPONENT: components,
                              WAVELENGTH: ("wavelength", wavelengths, {"units": "nm"})}
    if patterns is not None and patterns[0].shape[0]:  # none stated: no variable
        values, sources, kinds = patterns
        data[ERROR_PATTERN] = ((ERROR_SOURCE, *dims), values, {
            "units": unit, "meaning": "library error δε = Σ_f pattern_f·z_f, z_f independent "
            "with variance 1 (docs/uncertainty.md, 'Library')"})
        coords[ERROR_SOURCE] = sources
        coords[ERROR_KIND] = ((ERROR_SOURCE,), kinds)
    ds = xr.Dataset(
        data,
        coords=coords,
        attrs={
            "mixsolve_kind": LIBRARY_KIND,
            "format_version": FORMAT_VERSION,
            "unit": unit,
            "basis": basis,
            "concentration_unit": CONCENTRATION_UNITS[basis],
            "solvent": solvent,
            "bandwidth_nm": _bandwidth(bandwidth_nm),
            "provenance": json.dumps({**provenance, "mixsolve_version": __version__}),
            **({} if axis == "nm" else {"axis": axis}),
        },
    )
    return check_library(ds)


def import_absorptivities(
    absorptivity: xr.DataArray | pd.DataFrame,
    unit: str,
    *,
    u_absorptivity: xr.DataArray | pd.DataFrame | None = None,
    molar_mass_g_per_mol: Mapping[str, float] | None = None,
    solvent: str = "",
    bandwidth_nm: float | None = None,
    source: str = "",
    u_scale_rel: float | Mapping[str, float] | None = None,
) -> xr.Dataset:
    """Make a library from a table of known absorptivities.

    Parameters
    ----------
    absorptivity : DataArray with dims ("component", "wavelength") or DataFrame
        Absorptivity per component and wavelength (nm). A DataFrame has wavelengths
        (nm) as its index and one column per component.
    unit : str
        Unit of the values, parsed with pint: molar (``"L/(mol*cm)"``) or specific
        (``"L/(g*cm)"``), or any equivalent such as ``"mL/(mg*cm)"``.
    u_absorptivity : same shape as ``absorptivity``, optional
        Standard uncertainties in ``unit``; NaN (not stated) when omitted.
    molar_mass_g_per_mol : mapping of component to g/mol, optional
        Allows results in the other basis (mass ↔ amount concentration).
    solvent : str
        Solvent or matrix the absorptivities hold for.
    bandwidth_nm : float, optional
        Spectral bandwidth (nm) of the instrument the values were measured with.
    source : str
        Where the table came from; recorded in the provenance.
    u_scale_rel : float or mapping of component to float, optional
        Relative standard uncertainty of each component's whole spectrum (e.g. 0.02 for a
        published absorptivity known to 2 %): a fully correlated scale error, stored as a
        ``declared_scale`` error pattern (:mod:`mixsolve.library_error`).

    Returns
    -------
    Dataset
        A library (see the module docstring), values converted to the canonical unit.
        Stated ``u_absorptivity`` and ``u_scale_rel`` become its ``error_pattern``
        (stated u(ε) taken as fully correlated within its component).

    Raises
    ------
    UnitError
        Unknown unit, or one that is not an absorptivity.
    InputError
        Non-finite values, duplicate components or wavelengths.
    """
    basis, factor = absorptivity_basis(unit)
    eps = _as_component_array(absorptivity, "absorptivity")
    u = (
        np.full(eps.shape, np.nan)
        if u_absorptivity is None
        else _as_component_array(u_absorptivity, "u_absorptivity")
        .reindex_like(eps)
        .values
    )
    values = eps.values * factor
    if not np.all(np.isfinite(values)):
        comp, idx = np.argwhere(~np.isfinite(values))[0]
        raise InputError(
            f"absorptivity of {str(eps[COMPONENT].values[comp])!r} at "
            f"{eps[WAVELENGTH].values[idx]:g} nm is missing or not a number"
        )
    provenance = {"method": "imported table", "source": source, "unit_given": unit}
    components = [str(c) for c in eps[COMPONENT].values]
    u_values = np.asarray(u, dtype=float) * factor
    if np.any(np.isinf(u_values)) or np.any(u_values < 0):
        raise InputError("library: u_absorptivity holds "
                         f"{u_values[np.isinf(u_values) | (u_values < 0)].flat[0]:g}; an "
                         "uncertainty is a number ≥ 0 (NaN where not stated)")
    patterns = declared_patterns(values, u_values, components, u_scale_rel)
    return _new_library(
        values,
        u_values,
        components,
        eps[WAVELENGTH].values,
        basis,
        molar_mass_g_per_mol,
        solvent,
        bandwidth_nm,
        provenance,
        patterns,
        native_axis(eps, "absorptivity"),
    )


def _as_component_array(table: xr.DataArray | pd.DataFrame, name: str) -> xr.DataArray:
    if isinstance(table, pd.DataFrame):
        if table.columns.has_duplicates:
            dup = table.columns[table.columns.duplicated()][0]
            raise InputError(f"{name}: component {dup!r} appears twice")
        da = xr.DataArray(
            table.to_numpy(dtype=float).T,
            dims=(COMPONENT, WAVELENGTH),
            coords={COMPONENT: [str(c) for c in table.columns],
                    WAVELENGTH: table.index.to_numpy(dtype=float)},
        )
    elif isinstance(table, xr.DataArray):
        other = [d for d in table.dims if d != WAVELENGTH]
        if len(other) != 1:
            raise InputError(f"{name}: expected dims (component, wavelength), got {table.dims}")
        da = table.rename({other[0]: COMPONENT}).transpose(COMPONENT, WAVELENGTH)
    else:
        raise InputError(f"{name}: expected a DataFrame or DataArray, got {type(table).__name__}")
    da = check_spectra(da, name)
    names = [str(c) for c in da[COMPONENT].values]
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise InputError(f"{name}: component {dup!r} appears twice")
    if len(names) == 0:
        raise InputError(f"{name}: no components")
    return da.astype(float)


def describe_dtype(kind: str) -> str:
    """What values of a numpy dtype kind (``dtype.kind``) are, for a message."""
    return {"b": "true/false values", "U": "text", "S": "text", "O": "text",
            "c": "complex numbers", "M": "dates", "m": "time spans"}.get(kind, "numbers")


def parse_json_object(text: Any, where: str) -> dict[str, Any]:
    """The JSON object (``{...}``) held as text by an attribute.

    Raises
    ------
    InputError
        Not text, not JSON, or JSON of something else than an object.
    """
    try:
        value = json.loads(text) if isinstance(text, str) else None
    except json.JSONDecodeError:
        value = None
    if not isinstance(value, dict):
        shown = str(text) if len(str(text)) <= 40 else str(text)[:37] + "..."
        raise InputError(f"{where} {shown!r} is not JSON text of an object ({{...}}); "
                         "write it as such or remove it")
    return value


def _check_contents(library: xr.Dataset, name: str) -> xr.Dataset:
    """Check what a library holds beyond its names (kind, dims, dtypes, units, values).

    Returns the library with every array in (component, wavelength) order, text component
    names, and the optional parts a library may lack filled in: ``u_absorptivity`` and
    ``molar_mass_g_per_mol`` NaN (not stated), ``basis`` and ``concentration_unit`` from
    the unit.
    """
    attrs = library.attrs
    kind = attrs.get("mixsolve_kind")
    if kind is not None and kind != LIBRARY_KIND:
        raise InputError(f"{name}: marked as a {str(kind)!r} file, not a library "
                         f"({LIBRARY_KIND!r}); give a library")
    version = attrs.get("format_version", FORMAT_VERSION)
    if isinstance(version, bool) or not isinstance(version, int | np.integer):
        raise InputError(f"{name}: attribute format_version {version!r} is not a whole number; "
                         f"a library written by this mixsolve has {FORMAT_VERSION}")
    if version > FORMAT_VERSION:
        raise InputError(f"{name}: library format {int(version)} is newer than this mixsolve "
                         f"reads ({FORMAT_VERSION}); update mixsolve")
    dims = library["absorptivity"].dims
    if set(dims) != {COMPONENT, WAVELENGTH} or len(dims) != 2:
        raise InputError(f"{name}: absorptivity has dims ({', '.join(map(str, dims))}); a "
                         "library's are (component, wavelength), one value per pair")
    for var, array in library.data_vars.items():
        allowed = (COMPONENT, WAVELENGTH, ERROR_SOURCE) if var == ERROR_PATTERN \
            else (COMPONENT, WAVELENGTH)
        extra = [str(d) for d in array.dims if d not in allowed]
        if extra:
            raise InputError(f"{name}: variable {var!r} has dimension {extra[0]!r}; a library "
                             "holds arrays over component and wavelength only")
        if array.dtype.kind not in "iuf":
            raise InputError(f"{name}: {var} holds {describe_dtype(array.dtype.kind)} "
                             f"({array.dtype}), not numbers; store it as floating-point numbers")
    for dim in (COMPONENT, WAVELENGTH):
        if dim not in library.coords:
            what = "component names" if dim == COMPONENT else "wavelengths in nm"
            raise InputError(f"{name}: the {dim} dimension has no coordinate; give the {what}")
    wl = library[WAVELENGTH]
    if wl.dtype.kind not in "iuf":
        first = f" ({str(wl.values.flat[0])!r} ...)" if wl.size else ""
        raise InputError(f"{name}: the wavelengths hold {describe_dtype(wl.dtype.kind)}"
                         f"{first}; give them as numbers in nm")
    comps = [c.decode() if isinstance(c, bytes) else c for c in library[COMPONENT].values]
    if not all(isinstance(c, str) for c in comps):
        library = library.assign_coords({COMPONENT: [str(c) for c in comps]})
    library = _check_units(library, name)
    if any(v.dims[-2:] == (WAVELENGTH, COMPONENT) for v in library.data_vars.values()):
        library = library.transpose(..., COMPONENT, WAVELENGTH)
    check_patterns(library, name)
    eps = library["absorptivity"].values
    if not np.all(np.isfinite(eps)):
        k, j = np.argwhere(~np.isfinite(eps))[0]
        raise InputError(
            f"{name}: absorptivity of {str(library[COMPONENT].values[k])!r} at "
            f"{float(library[WAVELENGTH].values[j]):g} nm is {eps[k, j]}; a library needs a "
            "finite value at every wavelength (leave the wavelength out or give the value)")
    if "u_absorptivity" in library:
        u = library["u_absorptivity"].values
        if np.any(np.isinf(u)) or np.any(u < 0):
            raise InputError(f"{name}: u_absorptivity holds "
                             f"{u[np.isinf(u) | (u < 0)].flat[0]:g}; an uncertainty is a "
                             "number ≥ 0 (NaN where not stated)")
    else:
        library = library.assign(u_absorptivity=xr.full_like(library["absorptivity"], np.nan,
                                                             dtype=float))
    if "molar_mass_g_per_mol" not in library:
        library = library.assign(molar_mass_g_per_mol=(
            (COMPONENT,), np.full(library.sizes[COMPONENT], np.nan), {"units": "g/mol"}))
    if "provenance" in attrs:
        parse_json_object(attrs["provenance"], f"{name}: attribute provenance")
    bandwidth = attrs.get("bandwidth_nm", np.nan)
    if isinstance(bandwidth, bool) or not isinstance(bandwidth, int | float | np.number) \
            or not (np.isnan(bandwidth) or (np.isfinite(bandwidth) and bandwidth > 0)):
        raise InputError(f"{name}: attribute bandwidth_nm {bandwidth!r} is not a positive "
                         "number of nm (NaN when not stated)")
    if not isinstance(attrs.get("solvent", ""), str):
        raise InputError(f"{name}: attribute solvent {attrs['solvent']!r} is not text")
    return library


def _check_units(library: xr.Dataset, name: str) -> xr.Dataset:
    """Refuse a missing, unknown or inconsistent unit; fill ``basis`` and
    ``concentration_unit`` from it when absent."""
    unit = library.attrs.get("unit")
    allowed = ", ".join(ABSORPTIVITY_UNITS.values())
    if unit is None:
        raise InputError(f"{name}: no absorptivity unit (attribute 'unit'); a library states "
                         f"one of {allowed}")
    basis = next((b for b, u in ABSORPTIVITY_UNITS.items() if u == unit), None)
    if basis is None:
        raise InputError(f"{name}: absorptivity unit {unit!r} is not one of {allowed}")
    derived = {"basis": basis, "concentration_unit": CONCENTRATION_UNITS[basis]}
    for what, value, right in (
            ("absorptivity's attribute units", library["absorptivity"].attrs.get("units", unit),
             unit),
            *((f"attribute {k}", library.attrs.get(k, v), v) for k, v in derived.items())):
        if value != right:
            raise InputError(f"{name}: {what} is {value!r}, which does not match the library "
                             f"unit {unit!r} (expected {right!r})")
    missing = {k: v for k, v in derived.items() if k not in library.attrs}
    return library.assign_attrs(missing) if missing else library


def check_library(library: Any, name: str = "library") -> xr.Dataset:
    """Check that ``library`` is a mixsolve library Dataset and return it, λ ascending.

    Returns
    -------
    Dataset
        The library, arrays in (component, wavelength) order; ``u_absorptivity`` and
        ``molar_mass_g_per_mol`` NaN (not stated) and ``basis`` and
        ``concentration_unit`` derived from the unit when the library lacks them.

    Raises
    ------
    InputError
        If it is not a Dataset or lacks ``absorptivity``; is marked as another kind of
        file or a newer format; has a missing, unknown or inconsistent unit; an array
        over other dims than (component, wavelength) or holding text or true/false
        values; wavelengths that are not numbers; a non-finite absorptivity, a negative
        or infinite uncertainty; provenance that is not JSON of an object; a bandwidth
        that is not a positive number; or component names that are empty or repeated
        (:func:`mixsolve.names.check_unique_names`), or a molar mass that is not positive.
    """
    if not isinstance(library, xr.Dataset) or "absorptivity" not in library:
        raise InputError(
            f"{name}: not a mixsolve library (expected an xarray.Dataset with an "
            "'absorptivity' variable; make one with import_absorptivities or build_library)"
        )
    library = _check_contents(library, name)
    native_axis(library, name)
    if library.attrs.get("unit") not in ABSORPTIVITY_UNITS.values():
        raise InputError(
            f"{name}: absorptivity unit {library.attrs.get('unit')!r} is not one of "
            f"{', '.join(ABSORPTIVITY_UNITS.values())}"
        )
    if library.sizes.get(COMPONENT, 0) == 0:
        raise InputError(f"{name}: the library has no components")
    library = _check_component_names(library, name)
    _check_molar_masses(library, name)
    check_spectra(library["absorptivity"], name)
    if np.any(np.diff(library[WAVELENGTH].values) < 0):
        library = library.sortby(WAVELENGTH)  # resampling and range checks need ascending λ
    return library


def _check_component_names(library: xr.Dataset, name: str) -> xr.Dataset:
    """The library with its component names in normal form; refuses two names a person
    would read as one (:func:`mixsolve.names.check_unique_names`), exact repeats included."""
    if COMPONENT not in library.coords:
        return library
    given = [str(c) for c in library[COMPONENT].values]
    normal = check_unique_names(given, f"{name}, components")
    return library if normal == given else library.assign_coords({COMPONENT: normal})


def _check_molar_masses(library: xr.Dataset, name: str) -> None:
    """Refuse a stated molar mass that is not a positive finite number (NaN: unknown)."""
    if "molar_mass_g_per_mol" not in library:
        return
    masses = np.asarray(library["molar_mass_g_per_mol"].values, dtype=float).ravel()
    bad = np.flatnonzero(~np.isnan(masses) & ~(np.isfinite(masses) & (masses > 0)))
    if bad.size:
        comps = [str(c) for c in library[COMPONENT].values] \
            if masses.size == library.sizes[COMPONENT] else []
        who = f"of {comps[bad[0]]!r} " if comps else ""
        raise InputError(f"{name}: molar mass {who}is {masses[bad[0]]:g} g/mol; a molar mass "
                         "must be a positive number (or NaN when unknown)")


def build_library(
    spectra: xr.DataArray | None = None,
    standards: pd.DataFrame | None = None,
    *,
    intercept: bool = False,
    pathlength_cm: float | None = None,
    molar_mass_g_per_mol: Mapping[str, float] | None = None,
    solvent: str = "",
    bandwidth_nm: float | None = None,
    min_r2: float = DEFAULT_MIN_R2,
    max_relative_deviation: float = DEFAULT_MAX_RELATIVE_DEVIATION,
    min_levels: int = DEFAULT_MIN_LEVELS,
    source: str = "",
    standards_name: str | None = None,
    sheet: pd.DataFrame | None = None,
    sheet_name: str | None = None,
) -> xr.Dataset:
    """Build a library from spectra of pure standards of known concentration.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Blank-corrected absorbance of each standard solution (required).
    standards : DataFrame
        The standards sheet (what ``mixsolve library build --standards`` reads), one row
        per standard: ``sample``, ``component``, ``concentration``, ``unit``
        and optionally ``pathlength_cm`` (cm). A ``line`` column, if present, is used
        to name the row in error messages. Optional uncertainty columns:
        ``u_concentration`` (standard uncertainty of that standard's own preparation,
        same unit as ``concentration``, independent between standards), ``stock`` (a
        label: standards that share it were made from one stock) and ``u_stock_rel``
        (relative standard uncertainty of that stock's concentration: purity, weighing,
        volume; :func:`mixsolve.prepared_standard` computes it). Every sample must be a
        pure standard of one component; a row with concentration 0 is a blank of that
        component's series.
    intercept : bool
        Fit A = ε·b·c + a₀ instead of A = ε·b·c, exposing a blank offset a₀(λ)
        (stored as ``intercept`` and ``u_intercept``).
    pathlength_cm : float, optional
        Pathlength (cm) of rows without a ``pathlength_cm`` value; default the
        ``pathlength_cm`` attribute of ``standards``, else 1 cm.
    molar_mass_g_per_mol : mapping, optional
        Molar masses (g/mol) per component.
    solvent, bandwidth_nm, source
        Recorded in the library (see :func:`import_absorptivities`).
    min_r2, max_relative_deviation, min_levels
        Linearity criteria at each component's peak wavelength; a component that
        misses one triggers a :class:`LinearityWarning` (common practice: R² ≥ 0.995,
        every standard within 5 % of the line, at least 3 concentration levels).
    standards_name : str, optional
        How error messages name the standards sheet (default "standards sheet"; the
        workflow passes the file name).
    sheet, sheet_name
        Old names of ``standards`` and ``standards_name``, and ``standards`` given a
        DataArray by keyword is the old name of ``spectra``: they work until the next
        release, with a :class:`~mixsolve.errors.RenamedWarning`.

    Returns
    -------
    Dataset
        A library with, besides ``absorptivity`` and ``u_absorptivity``, per component:
        ``n_standards``, ``n_levels`` (distinct non-zero concentrations),
        ``concentration_min``/``concentration_max`` (library concentration unit),
        ``peak_wavelength_nm``, and at that peak ``r_squared``, ``residual_sd``
        (AU) and ``worst_relative_deviation`` (fraction); the library's error as
        ``error_pattern`` (error_source, component, wavelength) with its ``error_kind``
        (:mod:`mixsolve.library_error`), and per component the relative scale
        uncertainty used (``u_preparation_rel``), shown by the standards' scatter
        (``u_preparation_rel_scatter``) and declared (``u_preparation_rel_declared``,
        NaN when not declared).

    Warns
    -----
    LinearityWarning
        A component has fewer than ``min_levels`` levels or fails a linearity criterion.

    Notes
    -----
    Per wavelength and component, with x = b·c over that component's standards, the
    slope through the origin is ε = Σ x·A / Σ x², with u(ε) = s/√(Σ x²) and
    s² = Σ (A − εx)² / (n − 1). With ``intercept`` the ordinary straight-line fit is
    used, u(ε) = s/√Sxx with s² = RSS/(n − 2). R² is the centred coefficient
    1 − RSS/Σ(A − Ā)². The worst relative deviation is max |A − Â|/Â over standards
    with c > 0. The error patterns and why they are built so: :mod:`mixsolve.library_error`
    and docs/uncertainty.md, "Library".
    """
    if spectra is None and isinstance(standards, xr.DataArray):  # the old keyword
        spectra = renamed("standards", "spectra", standards, None)  # type: ignore[assignment]
        standards = None
    standards = renamed("sheet", "standards", sheet, standards)  # type: ignore[assignment]
    standards_name = renamed(  # type: ignore[assignment]
        "sheet_name", "standards_name", sheet_name, standards_name)
    spectra = check_spectra(spectra, "standards")
    table = _check_sheet(standards, spectra, standards_name or "standards sheet")
    default_b = check_number(pathlength_cm if pathlength_cm is not None else
                             spectra.attrs.get("pathlength_cm", 1.0), "pathlength_cm", "cm",
                             positive=True)
    basis = table["basis"].iloc[0]
    components = list(dict.fromkeys(table["component"]))
    wl = spectra[WAVELENGTH].values
    shape = (len(components), wl.size)
    eps = np.empty(shape)
    u_eps = np.empty(shape)
    icpt = np.zeros(shape)
    u_icpt = np.zeros(shape)
    scatter_parts: list[np.ndarray] = []
    prep_parts: list[np.ndarray] = []
    scale_u: list[tuple[float, float, float]] = []
    stock_share: dict[str, np.ndarray] = {}
    figures: dict[str, list[float]] = {k: [] for k in (
        "n_standards", "n_levels", "concentration_min", "concentration_max",
        "peak_wavelength_nm", "r_squared", "residual_sd", "worst_relative_deviation")}
    for k, comp in enumerate(components):
        rows = table[table["component"] == comp]
        conc = rows["concentration_canonical"].to_numpy(dtype=float)
        b = rows["pathlength_cm"].fillna(default_b).to_numpy(dtype=float)
        x = conc * b
        absorb = spectra.sel({SAMPLE: rows["sample"].tolist()}).transpose(
            SAMPLE, WAVELENGTH).values
        if np.isnan(absorb).any():
            s_idx, w_idx = np.argwhere(np.isnan(absorb))[0]
            raise InputError(
                f"standards: sample {rows['sample'].iloc[s_idx]!r} has no reading at "
                f"{wl[w_idx]:g} nm; every standard needs a full spectrum"
            )
        fit = _line_fit(x, absorb, intercept)
        eps[k], u_eps[k], icpt[k], u_icpt[k] = fit["slope"], fit["u_slope"], fit["icpt"], \
            fit["u_icpt"]
        declared = rows["u_relative"].to_numpy(dtype=float)
        error = component_patterns(x, absorb - np.outer(x, fit["slope"]) - fit["icpt"],
                                   fit["slope"], intercept=intercept, u_relative=declared)
        scatter_parts.append(error.scatter)
        prep_parts.append(error.preparation)
        scale_u.append((error.scale, error.scale_scatter, error.scale_declared))
        for label, weight in stock_weights(x, rows["stock"].tolist(), intercept).items():
            stock_share.setdefault(label, np.zeros(len(components)))[k] = weight
        peak = int(np.argmax(eps[k]))
        predicted = fit["slope"][peak] * x + fit["icpt"][peak]
        observed = absorb[:, peak]
        resid = observed - predicted
        sst = float(np.sum((observed - observed.mean()) ** 2))
        positive = conc > 0
        rel = np.abs(resid[positive]) / np.abs(predicted[positive]) if positive.any() else []
        levels = np.unique(conc[positive]).size
        figures["n_standards"].append(conc.size)
        figures["n_levels"].append(levels)
        figures["concentration_min"].append(float(conc.min()))
        figures["concentration_max"].append(float(conc.max()))
        figures["peak_wavelength_nm"].append(float(wl[peak]))
        figures["r_squared"].append(1 - float(np.sum(resid**2)) / sst if sst > 0 else np.nan)
        figures["residual_sd"].append(float(fit["s"][peak]))
        figures["worst_relative_deviation"].append(float(np.max(rel)) if len(rel) else np.nan)
        _warn_linearity(comp, figures, min_r2, max_relative_deviation, min_levels)
    provenance = {
        "method": BUILT_FROM_STANDARDS,
        "source": source,
        "fit": "slope and intercept" if intercept else "through the origin",
        "standards": {c: table.loc[table["component"] == c, "sample"].tolist()
                      for c in components},
        "criteria": {"min_r2": min_r2, "max_relative_deviation": max_relative_deviation,
                     "min_levels": min_levels},
    }
    stock_u = table.groupby("stock")["u_stock_rel"].first().to_dict() if stock_share else {}
    provenance["uncertainty"] = {
        "preparation_declared": bool(np.isfinite(table["u_relative"]).any()),
        "stocks": {label: float(stock_u[label]) for label in stock_share}}
    patterns = _standards_patterns(components, eps, scatter_parts, prep_parts, stock_share,
                                   stock_u, table)
    lib = _new_library(eps, u_eps, components, wl, basis, molar_mass_g_per_mol, solvent,
                       bandwidth_nm, provenance, patterns, native_axis(spectra, "standards"))
    for name, values in zip(("u_preparation_rel", "u_preparation_rel_scatter",
                             "u_preparation_rel_declared"), zip(*scale_u, strict=True),
                            strict=True):
        lib[name] = ((COMPONENT,), np.asarray(values, dtype=float), {"units": "1"})
    for name, values in figures.items():
        lib[name] = ((COMPONENT,), np.asarray(values))
    lib["concentration_min"].attrs["units"] = lib.attrs["concentration_unit"]
    lib["concentration_max"].attrs["units"] = lib.attrs["concentration_unit"]
    lib["residual_sd"].attrs["units"] = "AU"
    if intercept:
        lib["intercept"] = ((COMPONENT, WAVELENGTH), icpt, {"units": "AU"})
        lib["u_intercept"] = ((COMPONENT, WAVELENGTH), u_icpt, {"units": "AU"})
    return lib


def _standards_patterns(components: list[str], eps: np.ndarray, scatter: list[np.ndarray],
                        prep: list[np.ndarray], stock_share: dict[str, np.ndarray],
                        stock_u: Mapping[str, float], table: pd.DataFrame
                        ) -> tuple[np.ndarray, list[str], list[str]]:
    """The error patterns of a library built from standards (:mod:`mixsolve.library_error`):
    one ``standards_scatter`` pattern per standard, one ``preparation`` pattern per
    component, one ``stock`` pattern per declared stock."""
    n, m = eps.shape
    patterns, sources, kinds = [], [], []
    for k, comp in enumerate(components):
        names = table.loc[table["component"] == comp, "sample"].tolist()
        for i, row in enumerate(scatter[k]):
            p = np.zeros((n, m))
            p[k] = row
            patterns.append(p)
            sources.append(f"scatter of standard {names[i]}")
            kinds.append("standards_scatter")
    for k, comp in enumerate(components):
        p = np.zeros((n, m))
        p[k] = prep[k]
        patterns.append(p)
        sources.append(f"preparation of {comp}")
        kinds.append("preparation")
    for label, share in stock_share.items():
        patterns.append(eps * (share * float(stock_u[label]))[:, None])
        sources.append(f"stock {label}")
        kinds.append("stock")
    return np.stack(patterns), sources, kinds


def _line_fit(x: np.ndarray, absorb: np.ndarray, intercept: bool) -> dict[str, np.ndarray]:
    """Least-squares line per wavelength column of ``absorb`` against ``x``."""
    n = x.size
    if intercept:
        xm = x.mean()
        sxx = float(np.sum((x - xm) ** 2))
        if n < 2 or sxx == 0:
            raise InputError("standards: a fit with intercept needs at least two different "
                             "concentrations per component")
        slope = (x - xm) @ (absorb - absorb.mean(axis=0)) / sxx
        icpt = absorb.mean(axis=0) - slope * xm
        dof = n - 2
        resid = absorb - np.outer(x, slope) - icpt
        s = np.sqrt(np.sum(resid**2, axis=0) / dof) if dof > 0 else np.full(slope.shape, np.nan)
        u_slope = s / np.sqrt(sxx)
        u_icpt = s * np.sqrt(1 / n + xm**2 / sxx)
    else:
        sxx = float(x @ x)
        if sxx == 0:
            raise InputError("standards: every standard of a component has concentration 0")
        slope = x @ absorb / sxx
        icpt = np.zeros_like(slope)
        dof = n - 1
        resid = absorb - np.outer(x, slope)
        s = np.sqrt(np.sum(resid**2, axis=0) / dof) if dof > 0 else np.full(slope.shape, np.nan)
        u_slope = s / np.sqrt(sxx)
        u_icpt = np.zeros_like(slope)
    return {"slope": slope, "u_slope": u_slope, "icpt": icpt, "u_icpt": u_icpt, "s": s}


def _warn_linearity(comp: str, figures: dict[str, list[float]], min_r2: float,
                    max_rel: float, min_levels: int) -> None:
    problems = []
    if figures["n_levels"][-1] < min_levels:
        problems.append(f"only {figures['n_levels'][-1]} concentration level(s), "
                        f"fewer than {min_levels}")
    r2 = figures["r_squared"][-1]
    if np.isfinite(r2) and r2 < min_r2:
        problems.append(f"R² {r2:.4f} below {min_r2}")
    worst = figures["worst_relative_deviation"][-1]
    if np.isfinite(worst) and worst > max_rel:
        problems.append(f"a standard deviates {100 * worst:.1f} % from the line "
                        f"(limit {100 * max_rel:g} %)")
    if problems:
        warnings.warn(
            f"component {comp!r} at {figures['peak_wavelength_nm'][-1]:g} nm: "
            + "; ".join(problems),
            LinearityWarning,
            stacklevel=3,
        )


def _check_sheet(sheet: pd.DataFrame, spectra: xr.DataArray, name: str = "standards sheet"
                 ) -> pd.DataFrame:
    """Validate the standards sheet and add canonical concentrations."""
    if not isinstance(sheet, pd.DataFrame):
        raise InputError(f"{name}: expected a DataFrame, got {type(sheet).__name__}")
    table = sheet.copy()
    table.columns = [str(c).strip().lower() for c in table.columns]
    missing = [c for c in ("sample", "component", "concentration", "unit")
               if c not in table.columns]
    if missing:
        raise InputError(
            f"{name}: missing column(s) {', '.join(missing)}; expected "
            "sample, component, concentration, unit (and optionally pathlength_cm)")
    if table.empty:
        raise InputError(f"{name}: no rows")
    if "line" not in table.columns:
        table["line"] = np.arange(len(table)) + 2
    if "pathlength_cm" not in table.columns:
        table["pathlength_cm"] = np.nan
    table["sample"] = check_spellings(table["sample"].astype(str), f"{name}, samples")
    table["component"] = check_spellings(table["component"].astype(str),
                                         f"{name}, components")
    known = set(map(str, spectra[SAMPLE].values))
    canon, bases, values = [], [], []
    for row in table.itertuples(index=False):
        where = f"{name}, line {row.line}"
        if row.sample not in known:
            raise InputError(f"{where}: sample {row.sample!r} has no spectrum in the standards "
                             "spectra file")
        if not row.component or row.component.lower() == "nan":
            raise InputError(f"{where}: empty component")
        value = check_number(row.concentration, f"{where}, concentration", low=0)
        if not pd.isna(row.pathlength_cm):
            check_number(row.pathlength_cm, f"{where}, pathlength_cm", "cm", positive=True)
        basis, factor = concentration_basis(str(row.unit), f"{where}: unit")
        canon.append(value * factor)
        bases.append(basis)
        values.append(value)
    table["concentration_canonical"] = canon
    table["basis"] = bases
    table["concentration"] = values  # checked numbers, in each row's unit
    table = _check_uncertainty_columns(table, name)
    if len(set(bases)) > 1:
        first = table.iloc[0]
        other = table[table["basis"] != first["basis"]].iloc[0]
        raise InputError(
            f"{name}, line {other['line']}: unit {other['unit']!r} is "
            f"{other['basis']}-based but line {first['line']} uses {first['unit']!r}; give all "
            "standards as amount (mol/L) or all as mass (g/L) concentrations")
    per_sample = table.groupby("sample")["component"].nunique()
    if (per_sample > 1).any():
        bad = per_sample[per_sample > 1].index[0]
        raise InputError(
            f"{name}: sample {bad!r} lists more than one component; library build "
            "needs pure standards (use `mixsolve calibrate` for mixtures)")
    dup = table["sample"].duplicated()
    if dup.any():
        row = table[dup].iloc[0]
        raise InputError(f"{name}, line {row['line']}: sample {row['sample']!r} "
                         "appears twice")
    unused = sorted(known - set(table["sample"]))
    if unused:
        raise InputError(
            f"standards: spectra {', '.join(map(repr, unused[:5]))} have no row in the standards "
            "sheet; add them or remove them from the spectra file")
    return table


def _check_uncertainty_columns(table: pd.DataFrame, name: str) -> pd.DataFrame:
    """Check the optional ``u_concentration``, ``stock`` and ``u_stock_rel`` columns (after
    :func:`_check_sheet` has checked the concentrations); add ``u_relative``
    (u_concentration/concentration, NaN when not declared), ``stock`` ("" when none) and
    ``u_stock_rel`` (NaN when none)."""
    for col in ("u_concentration", "u_stock_rel"):
        if col not in table.columns:
            table[col] = np.nan
    if "stock" not in table.columns:
        table["stock"] = ""
    table["stock"] = ["" if pd.isna(v) else str(v).strip() for v in table["stock"]]
    rel, stock_u = [], []
    for row in table.itertuples(index=False):
        where = f"{name}, line {row.line}"
        u_c = np.nan
        if not pd.isna(row.u_concentration):
            u_c = check_number(row.u_concentration, f"{where}, u_concentration", low=0,
                               hint="the standard uncertainty of this standard's "
                               "concentration, in its unit; leave empty if not known")
        conc = float(row.concentration)  # checked by _check_sheet
        if conc > 0 and u_c >= conc:
            raise InputError(f"{where}: u_concentration {u_c:g} is not below the concentration "
                             f"{conc:g}; it is a standard uncertainty in the concentration's "
                             "unit (e.g. 0.015 × concentration for 1.5 %), not a percentage")
        rel.append(u_c / conc if conc > 0 and np.isfinite(u_c) else
                   (0.0 if np.isfinite(u_c) else np.nan))
        u_s = np.nan
        if not pd.isna(row.u_stock_rel):
            u_s = check_number(row.u_stock_rel, f"{where}, u_stock_rel", low=0, high=1,
                               high_open=True, hint="a relative standard uncertainty, e.g. "
                               "0.005 for 0.5 %")
            if not row.stock:
                raise InputError(f"{where}: u_stock_rel {u_s:g} is given without a stock; "
                                 "name the stock the standard was made from in the stock "
                                 "column")
        stock_u.append(u_s)
    table["u_relative"] = rel
    table["u_stock_rel"] = stock_u
    _warn_large(table, name)
    for label, group in table[table["stock"] != ""].groupby("stock"):
        values = group["u_stock_rel"].dropna().unique()
        if values.size == 0:
            raise InputError(f"{name}, line {group['line'].iloc[0]}: stock {label!r} has no "
                             "u_stock_rel; give its relative standard uncertainty (purity, "
                             "weighing, volume; e.g. 0.005) on at least one of its rows")
        if values.size > 1:
            line = group.loc[group["u_stock_rel"] == values[1], "line"].iloc[0]
            raise InputError(f"{name}, line {line}: stock {label!r} has u_stock_rel "
                             f"{values[1]:g} here and {values[0]:g} on another row; one stock "
                             "has one uncertainty")
        table.loc[group.index, "u_stock_rel"] = float(values[0])
    return table


#: A stated relative standard uncertainty above this draws a LargeUncertaintyWarning
#: (common practice: standards are made up to well under 10 %).
LARGE_RELATIVE_U = 0.1


def _warn_large(table: pd.DataFrame, name: str) -> None:
    """Warn once for the first relative uncertainty above ``LARGE_RELATIVE_U``."""
    for col, what in (("u_relative", "u_concentration"), ("u_stock_rel", "u_stock_rel")):
        big = table[table[col] > LARGE_RELATIVE_U]
        if len(big):
            row = big.iloc[0]
            value = float(row[col])
            warnings.warn(
                f"{name}, line {row['line']}: {what} is {100 * value:.3g} % of the "
                f"concentration; if you meant {value:g} %, write {value / 100:g}",
                LargeUncertaintyWarning, stacklevel=4)


def absorptivity_at(library: xr.Dataset, wavelengths_nm: np.ndarray) -> np.ndarray:
    """ε at wavelengths inside the library's range, as :func:`resample_library` gives it.

    Parameters
    ----------
    library : Dataset
        A checked library (:func:`check_library`: λ ascending).
    wavelengths_nm : array, shape (n,)
        Wavelengths (nm) within the library's range (the caller has checked).

    Returns
    -------
    ndarray, shape (n, n_components)
        Absorptivity in the library's unit, linearly interpolated (``numpy.interp``);
        values on the library grid are kept exactly.
    """
    grid = library[WAVELENGTH].values
    eps = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    at = np.clip(np.asarray(wavelengths_nm, dtype=float), grid[0], grid[-1])
    return np.stack([np.interp(at, grid, row) for row in eps], axis=1)


def resample_library(
    library: xr.Dataset, wavelengths_nm: np.ndarray
) -> tuple[xr.Dataset, np.ndarray]:
    """Interpolate a library onto measured wavelengths, inside its range only.

    Parameters
    ----------
    library : Dataset
        A mixsolve library.
    wavelengths_nm : array, shape (n,)
        Target wavelengths (nm), ascending.

    Returns
    -------
    resampled : Dataset
        The library on the target wavelengths that lie within its range.
    outside : ndarray
        Target wavelengths (nm) outside the library's range, which were left out.

    Notes
    -----
    Linear interpolation (``numpy.interp``) of ε and of u(ε), linear in the library's
    own axis (``attrs["axis"]``: in λ, or in ν̃ = 10⁷/λ for a library given in cm⁻¹);
    wavelengths that are already on the library grid keep their values exactly. Nothing
    is extrapolated.
    """
    library = check_library(library)
    target = np.asarray(wavelengths_nm, dtype=float)
    grid = library[WAVELENGTH].values
    # −ν̃ rises with λ: interpolating in it is linear in wavenumber, on ascending abscissas
    on_axis = ((lambda w: -nm_from_wavenumber(w)) if native_axis(library, "library")
               == WAVENUMBER_AXIS else (lambda w: w))
    tol = 1e-9 * max(1.0, float(grid.max()))
    inside = (target >= grid[0] - tol) & (target <= grid[-1] + tol)
    keep = np.clip(target[inside], grid[0], grid[-1])
    data_vars = {}
    for name, var in library.data_vars.items():
        if WAVELENGTH not in var.dims:
            data_vars[name] = var
            continue
        moved = np.moveaxis(var.values, var.dims.index(WAVELENGTH), -1)
        flat = moved.reshape(-1, grid.size)
        new = (np.stack([np.interp(on_axis(keep), on_axis(grid), row) for row in flat])
               if flat.size else flat)
        new = np.moveaxis(new.reshape(*moved.shape[:-1], keep.size), -1,
                          var.dims.index(WAVELENGTH))
        data_vars[name] = (var.dims, new, var.attrs)
    coords = {c: library.coords[c] for c in library.coords if c != WAVELENGTH}
    coords[WAVELENGTH] = (WAVELENGTH, target[inside], library[WAVELENGTH].attrs)
    out = xr.Dataset(data_vars, coords=coords, attrs=library.attrs)
    return out, target[~inside]
