"""The public classical-least-squares entry point, :func:`unmix`."""

from __future__ import annotations

import functools
import json
import operator
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import xarray as xr

from mixsolve._version import __version__
from mixsolve.errors import (
    ExtrapolationWarning,
    IllConditionedWarning,
    InfiniteReadingError,
    InputError,
)
from mixsolve.flags import ILL_CONDITIONED, VLEN_STR, RunNote, add_run_notes, flag_texts
from mixsolve.library import COMPONENT, absorptivity_at, check_library
from mixsolve.library_error import (
    library_quadratic,
    library_residual_form,
    library_sensitivity,
    pattern_counts,
    patterns_at,
)
from mixsolve.noise import (
    DEFAULT_ABSORBANCE_RANGE,
    PRESETS,
    TYPICAL_BANDWIDTH_NM,
    NoiseModel,
    noise_model,
)
from mixsolve.slit import (
    assumed_bandwidth,
    broaden_library,
    extra_fwhm,
    fitted_range,
    mismatch_bias,
    mismatch_note,
)
from mixsolve.solve.block import (
    BlockSettings,
    FitKind,
    PlainFit,
    ScatterFit,
    ShiftFit,
    WeightedFit,
    unmix_block,
)
from mixsolve.solve.cls import default_threads
from mixsolve.solve.design import (
    BASELINE_TERMS,
    BASELINES,
    ILL_CONDITIONED_ABOVE,
    Baseline,
    check_solvable,
    design_matrix,
    select_wavelengths,
)
from mixsolve.solve.engine import METHODS, Method, choose_engine
from mixsolve.solve.model_spectra import fitted_and_residual
from mixsolve.solve.outputs import (
    BASELINE_TERM,
    TERM,
    UNCERTAINTY_BASIS,
    describe,
    kernel_outputs,
    result_outputs,
)
from mixsolve.solve.run_notes import design_shift_risk, ill_conditioned_design, shift_risk
from mixsolve.solve.scatter import reference_gain, scatter_probe
from mixsolve.solve.stray import (
    StrayCorrectedNoise,
    StrayCorrection,
    darkness_limit,
    default_u_fraction,
)
from mixsolve.solve.trust import (
    DEFAULT_WAVELENGTH_TOLERANCE_NM,
    shift_bias_matrix,
    structure_lag,
)
from mixsolve.spectra import (
    WAVELENGTH,
    WAVENUMBER_AXIS,
    check_number,
    check_option,
    check_same_axis,
    check_spectra,
    check_window,
)
from mixsolve.units import conversion_factor

#: Attributes of the input spectra that must not label the result's variables.
INPUT_ATTRS = ("quantity", "quantity_read", "dark_readings", "source", "layout", "separator",
               "decimal", "pathlength_cm", "read_notes", "files", "axis")
Weights = Literal["none", "noise"]
WEIGHTS: tuple[str, ...] = ("none", "noise")


def unmix(
    spectra: xr.DataArray,
    library: xr.Dataset,
    *,
    window: tuple[float, float] | None = None,
    wavelengths: Sequence[float] | None = None,
    method: Method = "nnls",
    baseline: Baseline = "none",
    pathlength_cm: float | xr.DataArray | None = None,
    unit: str | None = None,
    weights: Weights = "none",
    noise: NoiseModel | str | float | None = None,
    absorbance_range: tuple[float, float] = DEFAULT_ABSORBANCE_RANGE,
    fit_shift: bool = False,
    max_shift_nm: float = 3.0,
    wavelength_tolerance_nm: float = DEFAULT_WAVELENGTH_TOLERANCE_NM,
    stray_fraction: float | None = None,
    u_stray_fraction: float | None = None,
    bandwidth_nm: float | None = None,
    reference_wavelength_nm: float | None = None,
) -> xr.Dataset:
    """Resolve absorbance spectra into component concentrations by classical least squares.

    Parameters
    ----------
    spectra : DataArray with dims (..., "wavelength")
        Blank-corrected absorbance (AU); wavelength in nm. NaN marks a missing reading:
        that spectrum is fitted on the wavelengths it has and flagged. Any other
        dimensions (``sample``; ``y, x`` of an image cube; none for one spectrum); the
        result has the same ones. Numpy- or dask-backed: with dask the whole result,
        flags included, stays lazy and is computed chunk by chunk (chunk along the other
        dimensions only; docs/scale.md).
    library : Dataset
        A mixsolve library (:func:`import_absorptivities`, :func:`build_library`).
        It is interpolated onto the measured wavelengths, never extrapolated.
    window : (float, float), optional
        Fit the measured wavelengths from ``low`` to ``high`` nm, both ends included.
    wavelengths : sequence of float, optional
        Fit exactly these measured wavelengths (nm). Without ``window`` or
        ``wavelengths``, every measured wavelength inside the library range is used.
    method : {"nnls", "ols"}
        ``nnls`` constrains concentrations to ≥ 0 (baseline terms stay free);
        ``ols`` is ordinary least squares.
    baseline : {"none", "offset", "linear", "scatter"}
        Extra columns for a constant offset (AU) and a linear slope (AU/nm, about the
        mean used wavelength), for cell offsets or turbidity; ``scatter``: the offset and
        a power-law scatter term a·(λ/λ₀)^(−n) per spectrum, λ₀ the shortest used
        wavelength, the exponent n fitted over 0.25–4.5 (:mod:`mixsolve.solve.scatter`;
        not with ``fit_shift`` or ``weights="noise"``).
    pathlength_cm : float or DataArray, optional
        Pathlength b (cm), one value or one per spectrum; default the ``pathlength_cm``
        attribute of ``spectra``, else 1 cm.
    unit : str, optional
        Concentration unit of the result, e.g. ``"mg/L"``, ``"µmol/L"``; default the
        library's (mol/L or g/L). Converting between mass and amount needs the library's
        molar masses.
    weights : {"none", "noise"}
        ``noise`` weights each reading by 1/σ_A² from the noise model, evaluated at the
        fitted absorbance of a first, unweighted pass (two-pass weighted least squares).
    noise : NoiseModel, preset name or float, optional
        Photometric noise model (:mod:`mixsolve.noise`); a float is a constant σ_A in AU.
        Needed for ``weights="noise"``; when given, each fit is also tested for lack of fit.
    absorbance_range : (float, float)
        Reliable absorbance range (AU) for the range flags; default 0.3–2 (common practice
        for a benchtop double-beam instrument).
    fit_shift : bool
        Also fit one wavelength offset per spectrum (``wavelength_shift_nm``), searched
        within ±``max_shift_nm``.
    max_shift_nm : float
        Bound of the shift search (nm).
    wavelength_tolerance_nm : float
        Wavelength accuracy of the instrument (nm) for the run note ``shift_risk``: said
        once when an error this large would move a quantified result by more than 2 %.
    stray_fraction : float, optional
        Stray-light fraction s of the instrument (0.001 = 0.1 %T), 0 ≤ s < 1; default the
        ``stray`` of ``noise``. When s > 0 every reading is corrected before the fit,
        A = −log10(T_app·(1 + s) − s) (:mod:`mixsolve.solve.stray`); readings too dark to
        correct are left out and the spectrum flagged ``too_dark_for_stray``. Given with a
        noise model whose ``stray`` is above 0, the two must agree.
    u_stray_fraction : float, optional
        Standard uncertainty u(s) of the stated fraction, propagated to ``u_stray``;
        default s/√3 (s the middle of a rectangular distribution from 0 to 2s). Needs a
        stated fraction, and below 0.1 (readings with T ≤ 10·u(s) are too dark).
    bandwidth_nm : float, optional
        The spectra's spectral bandpass (FWHM, nm). When it is wider than the library's
        ``attrs["bandwidth_nm"]`` b, the library (absorptivities and error patterns) is first
        convolved with a triangular slit function of FWHM √(X² − b²) (:mod:`mixsolve.slit`),
        which shortens its range by that much at each end. A library of unknown or wider
        bandwidth, or a library's bandwidth without this one, gives the run note
        ``bandwidth_mismatch`` with the predicted bias per component (docs/method.md,
        "Spectral bandwidth").
    reference_wavelength_nm : float, optional
        Subtract each spectrum's mean reading over ±``REFERENCE_HALF_BAND_NM`` (2 nm) of
        this wavelength before the fit (after any stray-light correction), e.g. 750 nm for
        pigment extracts (common practice). It must lie outside the fitted wavelengths and
        inside the measured ones. Its error moves every reading alike and is propagated
        to u_noise (docs/method.md, "Reference wavelength").

    Returns
    -------
    Dataset
        The variables below (``...``: the spectra's dimensions other than wavelength;
        ``unit``: the concentration unit of the result, ``attrs["unit"]``; trust checks
        in docs/diagnostics.md, flag codes in docs/flags.md and :func:`flags_of`):

{outputs}

        For numpy-backed spectra ``fitted`` and ``residual`` are computed when read (the
        part read), from the coefficients and the spectra, which the result holds by
        reference: changing the spectra array in place before they have been read changes
        them, so call ``result.load()`` first if you will. ``attrs`` record method,
        baseline, wavelengths, pathlength, unit, the uncertainty basis and the library
        provenance.

    Raises
    ------
    InputError
        Bad options, a selection outside the data or the library, a non-positive
        pathlength, an impossible unit conversion, or an infinite absorbance (named by
        spectrum and wavelength; for dask-backed spectra raised when computed).
    SolveError
        Fewer wavelengths than unknowns, or linearly dependent components.

    Warns
    -----
    ExtrapolationWarning
        Measured wavelengths outside the library were left out (no selection given).

    Notes
    -----
    Beer–Lambert for non-interacting absorbers (ASTM E169): A(λ) = b Σₖ εₖ(λ) cₖ
    + baseline(λ) + e(λ). With D the design matrix [ε at 1 cm | baseline columns],
    the fit solves min ‖A − D x‖² (for ``ols`` through the QR factorisation of the
    column-scaled D, or its pseudo-inverse over the readings a spectrum has; for ``nnls``
    fast combinatorial active-set NNLS over all spectra at once with the baseline columns
    free, checked against ``scipy.optimize.nnls``: :mod:`mixsolve.solve.nnls`, or its
    compiled twin :mod:`mixsolve.solve.fused` for jobs of 10⁴ spectra or more when numba
    is installed) and c = x / b. The standard uncertainty is the combined standard
    uncertainty u(cₖ) = √(u_noise² + u_library² + u_stray²) of independent inputs
    (JCGM 100:2008, 5.1.2): u_noise = s √[(DᵀD)⁻¹]ₖₖ / b with s² = RSS/(n − p) (Type A),
    inflated when neighbouring readings are correlated; u_library the library's error
    patterns P_f propagated to first order, δx = −G·δD·x, u² = Σ_f (G P_f x)²ₖ / b²
    (:mod:`mixsolve.library_error`); u_stray = |G ∂A/∂s|ₖ u(s) / b for a stated stray
    fraction (:mod:`mixsolve.solve.stray`). For NNLS they are the linearised values of the
    unconstrained model at the solution, ignoring the constraint. ``attrs
    ["uncertainty_basis"]`` says which sources the result holds (docs/uncertainty.md).

    Examples
    --------
    >>> result = unmix(spectra, lib, window=(400, 700), method="nnls")  # doctest: +SKIP
    >>> result["concentration"].sel(component="chl_a")  # doctest: +SKIP
    """
    options = _check_options(
        spectra, library, window=window, wavelengths=wavelengths, method=method,
        baseline=baseline, pathlength_cm=pathlength_cm, unit=unit, weights=weights,
        noise=noise, absorbance_range=absorbance_range, fit_shift=fit_shift,
        max_shift_nm=max_shift_nm, wavelength_tolerance_nm=wavelength_tolerance_nm,
        stray_fraction=stray_fraction, u_stray_fraction=u_stray_fraction,
        bandwidth_nm=bandwidth_nm, reference_wavelength_nm=reference_wavelength_nm)
    plan = _plan(options)
    return _result(options, plan, _run_kernel(options, plan))


if unmix.__doc__:  # the outputs, described once (mixsolve.solve.outputs)
    unmix.__doc__ = unmix.__doc__.replace("{outputs}", describe(" " * 8))


@dataclass(frozen=True, eq=False)
class _Options:
    """The options of one unmix call, checked."""

    spectra: xr.DataArray
    library: xr.Dataset
    window: tuple[float, float] | None
    wavelengths: Sequence[float] | None
    method: Method
    baseline: Baseline
    pathlength: xr.DataArray  #: cm
    unit: str | None
    weights: Weights
    noise: NoiseModel | None
    absorbance_range: tuple[float, float]  #: AU
    fit_shift: bool
    max_shift_nm: float
    tolerance_nm: float
    stray: StrayCorrection | None = None  #: the stated stray fraction, when above 0
    bandwidth: _Bandwidth | None = None  #: the bandpasses and any broadening of the library
    reference_nm: float | None = None  #: the reference wavelength (nm), checked


@dataclass(frozen=True, eq=False)
class _Bandwidth:
    """The spectra's and the library's bandpasses and what was done about them."""

    stated_nm: float | None  #: the spectra's, as given (None: not stated)
    library_nm: float  #: the library's own (NaN: not stated)
    broadened_nm: float  #: FWHM of the triangle the library was convolved with (0: none)
    original: xr.Dataset  #: the library as given


def _check_options(spectra: Any, library: Any, *, window: Any, wavelengths: Any,
                   method: Any, baseline: Any, pathlength_cm: Any, unit: str | None,
                   weights: Any, noise: Any, absorbance_range: Any, fit_shift: bool,
                   max_shift_nm: Any, wavelength_tolerance_nm: Any,
                   stray_fraction: Any = None, u_stray_fraction: Any = None,
                   bandwidth_nm: Any = None,
                   reference_wavelength_nm: Any = None) -> _Options:
    """Check every option of :func:`unmix` (the public boundary: the spectra are checked
    here once, their values by the solver as it reads them)."""
    spectra = check_spectra(spectra, scan_values=False)
    library = check_library(library)
    if check_same_axis(library, "library", spectra, "spectra") == WAVENUMBER_AXIS \
            and bandwidth_nm is not None:
        raise InputError("bandwidth_nm: the spectra are on a wavenumber axis, where a "
                         "bandpass is constant in cm⁻¹, not in nm; leave bandwidth_nm out")
    check_option(method, METHODS, "method")
    check_option(baseline, BASELINES, "baseline")
    check_option(weights, WEIGHTS, "weights")
    window = check_window(window)
    try:
        low, high = (float(v) for v in absorbance_range)
    except (TypeError, ValueError):
        raise InputError(f"absorbance_range: expected (low, high) in AU, got "
                         f"{absorbance_range!r}") from None
    hint = "give two increasing absorbances above 0, e.g. 0.3-2"
    check_number(low, "absorbance_range", "AU", positive=True, hint=hint)
    check_number(high, "absorbance_range", "AU", low=low, low_open=True, hint=hint)
    model = noise_model(noise)
    tolerance = check_number(wavelength_tolerance_nm, "wavelength_tolerance_nm", "nm", low=0)
    # finite even when fit_shift is off; above zero when it is on
    max_shift = check_number(max_shift_nm, "max_shift_nm", "nm", positive=fit_shift)
    if fit_shift and weights != "none":
        raise InputError("fit_shift: a fitted wavelength shift cannot be combined with "
                         "weights='noise' (the shift search is unweighted); drop one of them")
    if baseline == "scatter" and fit_shift:
        raise InputError("baseline: 'scatter' cannot be combined with fit_shift (one "
                         "nonlinear term per fit); drop one of them")
    if baseline == "scatter" and weights != "none":
        raise InputError("baseline: 'scatter' is fitted unweighted and cannot be combined "
                         "with weights='noise'; drop one of them")
    reference = None if reference_wavelength_nm is None else check_number(
        reference_wavelength_nm, "reference_wavelength_nm", "nm", positive=True)
    if weights == "noise" and model is None:
        raise InputError("weights='noise' needs a noise model: give noise= a preset name "
                         f"({', '.join(PRESETS)}), a NoiseModel or σ_A in AU")
    if spectra.chunks is not None:
        axis = spectra.dims.index(WAVELENGTH)
        if len(spectra.chunks[axis]) > 1:
            raise InputError(
                "spectra: the wavelength dimension spans several dask chunks; rechunk with "
                "spectra.chunk({'wavelength': -1})")
    bandwidth = _bandwidth(library, bandwidth_nm, window, wavelengths)
    return _Options(spectra, _fitted_library(bandwidth), window, wavelengths, method,
                    baseline, _pathlength(spectra, pathlength_cm), unit, weights, model,
                    (low, high), bool(fit_shift), max_shift, tolerance,
                    _stray(model, stray_fraction, u_stray_fraction), bandwidth, reference)


def _bandwidth(library: xr.Dataset, bandwidth_nm: Any, window: tuple[float, float] | None,
               wavelengths: Any) -> _Bandwidth:
    """The bandpasses, and the broadening the library needs (a stated selection must lie
    within the broadened library's range)."""
    own = float(library.attrs.get("bandwidth_nm", np.nan))
    if bandwidth_nm is None:
        return _Bandwidth(None, own, 0.0, library)
    stated = check_number(bandwidth_nm, "bandwidth_nm", "nm", positive=True)
    if not (np.isfinite(own) and stated > own):
        return _Bandwidth(stated, own, 0.0, library)
    width = extra_fwhm(stated, own)
    low, high = fitted_range(library, stated)
    try:
        chosen = np.asarray(window if window is not None else
                            [] if wavelengths is None else wavelengths, dtype=float).ravel()
    except (TypeError, ValueError):  # refused with its reason where the selection is checked
        chosen = np.empty(0)
    chosen = chosen[np.isfinite(chosen)]
    grid = library[WAVELENGTH].values
    if chosen.size and low <= high and (chosen.min() < low - 1e-9 or chosen.max() > high + 1e-9) \
            and grid[0] <= chosen.min() and chosen.max() <= grid[-1]:
        raise InputError(
            f"bandwidth_nm: broadening the library from {own:g} to {stated:g} nm (a "
            f"{width:.3g} nm triangle) uses {width:.3g} nm of it at each end, so it covers "
            f"{low:g}-{high:g} nm; keep the selection within that range")
    return _Bandwidth(stated, own, width, library)


def _fitted_library(bandwidth: _Bandwidth) -> xr.Dataset:
    """The library the fit uses: broadened to the spectra's bandpass when that is wider."""
    if bandwidth.broadened_nm > 0 and bandwidth.stated_nm is not None:
        return broaden_library(bandwidth.original, bandwidth.stated_nm)
    return bandwidth.original


def _stray(model: NoiseModel | None, stray_fraction: Any, u_stray_fraction: Any
           ) -> StrayCorrection | None:
    """The stated stray fraction and its uncertainty (None when no fraction above 0 is
    stated): ``stray_fraction``, else the noise model's ``stray``."""
    stated = 0.0 if model is None else model.stray
    if stray_fraction is not None:
        given = check_number(stray_fraction, "stray_fraction", low=0, high=1, high_open=True)
        if stated > 0 and given != stated:
            raise InputError(f"stray_fraction: {given:g} disagrees with the noise model's "
                             f"stray {stated:g}; give one of them, or the same value")
        stated = given
    if u_stray_fraction is None:
        return StrayCorrection(stated, default_u_fraction(stated)) if stated > 0 else None
    u = check_number(u_stray_fraction, "u_stray_fraction", low=0)
    if stated == 0:
        raise InputError(f"u_stray_fraction: {u:g} given without a stray fraction; state "
                         "stray_fraction (or a noise model with stray above 0)")
    if darkness_limit(stated, u) >= 1:  # every reading would be too dark to correct
        raise InputError(f"u_stray_fraction: {u:g} leaves no reading to correct (a corrected "
                         f"transmittance must exceed {darkness_limit(stated, u):g}); give the "
                         f"absolute standard uncertainty of the fraction, e.g. "
                         f"{0.2 * stated:.2g} for {stated:g} known to 20 %")
    return StrayCorrection(stated, u)


@dataclass(frozen=True, eq=False)
class _Plan:
    """What the kernel needs and the result records: used wavelengths, design, settings."""

    used: xr.DataArray  #: the spectra at the used wavelengths
    used_wl: np.ndarray  #: nm
    left_out: np.ndarray  #: measured wavelengths outside the library (nm)
    components: list[str]
    terms: list[str]  #: components, then baseline terms
    condition: float  #: scaled condition number of the design
    unit: str  #: concentration unit of the result
    settings: BlockSettings
    #: each spectrum's mean reading at the reference wavelength (AU), or None
    reference: xr.DataArray | None = None


def _plan(options: _Options) -> _Plan:
    """Choose the wavelengths, build the design and the settings every block shares."""
    spectra, library = options.spectra, options.library
    measured = spectra[WAVELENGTH].values
    lib_wl = library[WAVELENGTH].values
    index, left_out = select_wavelengths(
        measured, (float(lib_wl[0]), float(lib_wl[-1])), window=options.window,
        wavelengths=options.wavelengths)
    if left_out.size:
        warnings.warn(
            f"{left_out.size} measured wavelength(s) outside the library "
            f"({lib_wl[0]:g}-{lib_wl[-1]:g} nm) were left out of the fit",
            ExtrapolationWarning, stacklevel=3)
    used = spectra.isel({WAVELENGTH: _as_slice(index)})
    used_wl = measured[index]
    components = [str(c) for c in library[COMPONENT].values]
    absorptivity = absorptivity_at(library, used_wl)
    design = design_matrix(absorptivity, used_wl, options.baseline)
    reference, k_ref = _reference(options, used_wl)
    terms = components + list(BASELINE_TERMS[options.baseline])
    condition = check_solvable(design, terms)
    if condition > ILL_CONDITIONED_ABOVE:
        warnings.warn(
            f"the design is ill conditioned (scaled condition number {condition:.3g}): noise "
            "is amplified that much; choose better wavelengths (mixsolve wavelengths choose)",
            IllConditionedWarning, stacklevel=3)

    conc_unit = library.attrs["concentration_unit"]
    factor = np.ones(len(components))
    if options.unit is not None:
        factor = factor * conversion_factor(conc_unit, options.unit,
                                            library["molar_mass_g_per_mol"].values)
        conc_unit = options.unit
    patterns = patterns_at(library, used_wl)
    settings = BlockSettings(
        design=design, components=components, method=options.method,
        noise=_fit_noise(options), fit=_fit_kind(options, used_wl),
        threads=1 if used.chunks is not None else default_threads(),
        absorbance_range=options.absorbance_range,
        design_status=ILL_CONDITIONED if condition > ILL_CONDITIONED_ABOVE else 0,
        unit_factor=factor, shift_matrix=shift_bias_matrix(library, design, used_wl),
        library_quadratic=library_quadratic(
            library_sensitivity(design, patterns), len(components)),
        tolerance_nm=options.tolerance_nm,
        engine=choose_engine("auto", int(np.prod([used.sizes[d] for d in used.dims
                                                   if d != WAVELENGTH]))),
        stray=options.stray,
        structure_lag=structure_lag(used_wl),
        scatter_probe=None if options.baseline == "scatter" else scatter_probe(design, used_wl),
        reference_readings=k_ref,
        reference_gain=None if reference is None else reference_gain(design, len(components)),
        library_residual=None if options.noise is None else library_residual_form(
            design, patterns))
    return _Plan(used, used_wl, left_out, components, terms, condition, conc_unit, settings,
                 reference)


#: Half-width (nm) of the band averaged at the reference wavelength (judgement: a few
#: readings at 1 nm spacing, narrow beside the flat region a reference is chosen in).
REFERENCE_HALF_BAND_NM = 2.0


def _reference(options: _Options, used_wl: np.ndarray) -> tuple[xr.DataArray | None, int]:
    """Each spectrum's mean reading over ±``REFERENCE_HALF_BAND_NM`` of the reference
    wavelength (NaN readings skipped), and how many readings the band holds; refused
    inside the fitted range or outside the measured one."""
    ref = options.reference_nm
    if ref is None:
        return None, 0
    spectra = options.spectra
    measured = spectra[WAVELENGTH].values
    if used_wl[0] <= ref <= used_wl[-1]:
        raise InputError(f"reference_wavelength_nm: {ref:g} nm lies inside the fitted "
                         f"wavelengths ({used_wl[0]:g}-{used_wl[-1]:g} nm); choose one "
                         "outside them where nothing absorbs, e.g. 750 nm for pigments")
    band = np.flatnonzero(np.abs(measured - ref) <= REFERENCE_HALF_BAND_NM + 1e-9)
    if not band.size:
        raise InputError(f"reference_wavelength_nm: no reading within "
                         f"{REFERENCE_HALF_BAND_NM:g} nm of {ref:g} nm (measured "
                         f"{measured[0]:g}-{measured[-1]:g} nm); choose a measured wavelength")
    fitted = np.isin(measured[band], used_wl)
    if fitted.any():
        raise InputError(f"reference_wavelength_nm: the band {ref:g} ± "
                         f"{REFERENCE_HALF_BAND_NM:g} nm includes the fitted wavelength "
                         f"{measured[band][fitted][0]:g} nm; move the reference or the window")
    mean = spectra.isel({WAVELENGTH: band}).mean(WAVELENGTH, skipna=True)
    return mean.drop_vars([c for c in mean.coords if WAVELENGTH in spectra[c].dims],
                          errors="ignore"), int(band.size)


def _fit_noise(options: _Options) -> NoiseModel | None:
    """The noise of the readings fitted: the stated model, or for readings corrected for
    stray light the model of corrected readings (:class:`StrayCorrectedNoise`)."""
    if options.noise is None or options.stray is None:
        return options.noise
    return StrayCorrectedNoise.of(options.noise, options.stray.fraction)


def _fit_kind(options: _Options, used_wl: np.ndarray) -> FitKind:
    """The fit the options ask for; the shift fit needs the library around the used λ."""
    noise = _fit_noise(options)
    if options.weights == "noise" and noise is not None:
        return WeightedFit(noise)
    if options.baseline == "scatter":  # the design's last column: the nominal exponent's
        return ScatterFit(base=design_matrix(absorptivity_at(options.library, used_wl),
                                             used_wl, "offset"), wavelengths_nm=used_wl)
    if not options.fit_shift:
        return PlainFit()
    library, max_shift = options.library, options.max_shift_nm
    grid = library[WAVELENGTH].values
    if grid.size < 3:
        raise InputError("fit_shift: the library has fewer than 3 wavelengths, so it "
                         "carries no slope to fit a shift with")
    if used_wl[0] - max_shift < grid[0] or used_wl[-1] + max_shift > grid[-1]:
        raise InputError(
            f"fit_shift: the used wavelengths {used_wl[0]:g}-{used_wl[-1]:g} nm ± "
            f"{max_shift:g} nm reach outside the library ({grid[0]:g}-{grid[-1]:g} nm); "
            f"narrow the window to {grid[0] + max_shift:g}-{grid[-1] - max_shift:g} nm")
    eps = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    return ShiftFit(eps=eps, grid_nm=grid, wavelengths_nm=used_wl, baseline=options.baseline,
                    max_shift_nm=max_shift)


def _run_kernel(options: _Options, plan: _Plan) -> dict[str, xr.DataArray]:
    """The kernel's outputs (:func:`mixsolve.solve.block.unmix_block`), labelled, by name."""
    described = kernel_outputs(*_nonlinear(plan))
    inputs = [plan.used, options.pathlength]
    if plan.reference is not None:
        inputs.append(plan.reference)
    sizes = {TERM: len(plan.terms), COMPONENT: len(plan.components),
             WAVELENGTH: plan.used.sizes[WAVELENGTH]}
    block = functools.partial(_block, settings=plan.settings)
    try:
        outputs = xr.apply_ufunc(
            block if plan.used.chunks is None else
            functools.partial(_lazy_blocks, block, described, sizes), *inputs,
            input_core_dims=[[WAVELENGTH]] + [[]] * (len(inputs) - 1),
            output_core_dims=[list(o.dims) for o in described],
            dask="allowed",
        )
    except InfiniteReadingError as exc:  # eager: say which spectrum and wavelength
        raise InputError(_where_infinite(plan.used, exc)) from None
    return {o.name: da for o, da in zip(described, outputs, strict=True)}


def _lazy_blocks(block: Any, described: Sequence[Any], sizes: dict[str, int],
                 spectra: Any, *others: Any) -> tuple[Any, ...]:
    """``block`` on every dask chunk of ``spectra`` (..., m), the wavelength in one chunk;
    ``others`` (pathlength, reference) are numpy or dask arrays over the trailing
    dimensions of the spectra's but the wavelength, of size 1 (broadcast) or chunked like
    the spectra. One dask array per output.

    ``dask.array.blockwise`` with ``concatenate=False``: each task gets its chunk of
    spectra as it is. ``apply_ufunc(dask="parallelized")`` (dask's ``apply_gufunc``)
    concatenates the wavelength axis of every chunk first, which copies the whole chunk
    even when it is a single piece: a second pass over the data and fresh memory the size
    of the chunk.
    """
    import dask.array as dsa
    from dask.highlevelgraph import HighLevelGraph

    loop = tuple(f"s{d}" for d in range(spectra.ndim - 1))
    args: list[Any] = [spectra, (*loop, "m")]
    for other in others:  # xarray leaves out leading dimensions of size 1
        args += [dsa.asarray(other), loop[len(loop) - np.ndim(other):]]
    tuples = dsa.blockwise(_chunk, loop, *args, block=block, concatenate=False,
                           dtype=float, meta=np.empty((0,) * len(loop)))
    keys = list(dsa.core.flatten(tuples.__dask_keys__()))
    outputs = []
    for i, o in enumerate(described):
        core = tuple(sizes[d] for d in o.dims)
        name = f"{tuples.name}-{i}"
        graph = {(name, *key[1:], *(0,) * len(core)): (operator.getitem, key, i)
                 for key in keys}
        outputs.append(dsa.Array(
            HighLevelGraph.from_collections(name, graph, dependencies=[tuples]), name,
            chunks=(*tuples.chunks, *((c,) for c in core)), dtype=o.dtype,
            meta=np.empty((0,) * (len(loop) + len(core)), dtype=o.dtype)))
    return tuple(outputs)


def _chunk(spectra: Any, *others: np.ndarray, block: Any) -> tuple[np.ndarray, ...]:
    """One dask chunk through ``block``: the spectra arrive as a list of their pieces along
    the wavelength (one piece: the wavelength is never split)."""
    if isinstance(spectra, list):
        (spectra,) = spectra
    return block(spectra, *others)


def _block(spectra: np.ndarray, pathlength_cm: np.ndarray,
           reference: np.ndarray | None = None, *, settings: BlockSettings
           ) -> tuple[np.ndarray, ...]:
    """:func:`unmix_block` with the reference readings as an optional third input."""
    if reference is None:
        return unmix_block(spectra, pathlength_cm, settings)
    return unmix_block(spectra, pathlength_cm, settings, reference)


def _nonlinear(plan: _Plan) -> tuple[bool, bool]:
    """Whether the fit has a shift, and whether a scatter exponent."""
    return isinstance(plan.settings.fit, ShiftFit), isinstance(plan.settings.fit, ScatterFit)


def _result(options: _Options, plan: _Plan, kernel: dict[str, xr.DataArray]) -> xr.Dataset:
    """The result Dataset: the kernel's outputs and those built here, with their
    attributes (:mod:`mixsolve.solve.outputs`), coordinates and the call's record."""
    shift, scatter = _nonlinear(plan)
    n_comp = len(plan.components)
    coef = kernel["coef"].assign_coords({TERM: plan.terms})
    # plain variables and one set of coordinates: no alignment per variable
    made = {name: da.variable for name, da in kernel.items()}
    baseline_part = coef.variable[..., n_comp:]
    made["baseline"] = xr.Variable(tuple(BASELINE_TERM if d == TERM else d
                                         for d in baseline_part.dims), baseline_part.data)
    if "fitted" not in made:  # one design for all: computed from the coefficients
        fitted, residual = fitted_and_residual(_fitted_readings(plan), coef,
                                               plan.settings.design)
        made.update(fitted=fitted.variable, residual=residual.variable)
    made["pathlength_cm"] = options.pathlength.variable
    made["unit_factor"] = xr.Variable((COMPONENT,), plan.settings.unit_factor)
    variables = {}
    for o in result_outputs(shift, scatter):
        variables[o.name] = made[o.name]
        variables[o.name].attrs.update(o.attrs(plan.unit))
    coords = {**dict(plan.used.coords.items()), COMPONENT: plan.components,
              BASELINE_TERM: plan.terms[n_comp:]}
    window, (low, high) = options.window, options.absorbance_range
    result = xr.Dataset(
        variables, coords=coords,
        attrs={
            "method": options.method,
            "baseline": options.baseline,
            "window_nm": "" if window is None else f"{window[0]:g}-{window[1]:g}",
            "wavelengths_nm": json.dumps([float(w) for w in plan.used_wl]),
            "left_out_wavelengths_nm": json.dumps([float(w) for w in plan.left_out]),
            "unit": plan.unit,
            "condition_number": plan.condition,
            "library_unit": options.library.attrs["unit"],
            "library_provenance": options.library.attrs.get("provenance", ""),
            "source": options.spectra.attrs.get("source", ""),
            "quantity_read": options.spectra.attrs.get("quantity_read", "absorbance"),
            "uncertainty_basis": _uncertainty_basis(options, plan),
            "mixsolve_version": __version__,
            "weights": options.weights,
            "noise_model": json.dumps(options.noise.to_dict())
            if options.noise is not None else "",
            "absorbance_range": f"{low:g}-{high:g}",
            "fit_shift": int(options.fit_shift),
            "wavelength_tolerance_nm": options.tolerance_nm,
            **_stray_attrs(options.stray),
            **_bandwidth_attrs(options.bandwidth),
            "scatter_lambda0_nm": float(plan.used_wl[0]) if scatter else float("nan"),
            "reference_wavelength_nm": float("nan") if options.reference_nm is None
            else options.reference_nm,
            "reference_band_nm": 0.0 if options.reference_nm is None
            else REFERENCE_HALF_BAND_NM,
            **({"axis": WAVENUMBER_AXIS} if options.spectra.attrs.get("axis")
               == WAVENUMBER_AXIS else {}),
        },
    )
    note = _bandwidth_note(options, plan, result)
    add_run_notes(result.attrs, _run_notes(options, plan, result)
                  + ([] if note is None else [note]))
    # Variables derived from the spectra inherit their attributes; a concentration is not an
    # "absorbance" from "samples.csv": keep only what describes the variable itself.
    for var in result.variables.values():
        for key in INPUT_ATTRS:
            var.attrs.pop(key, None)
    return result


def _run_notes(options: _Options, plan: _Plan, result: xr.Dataset) -> list[RunNote]:
    """The design's risks, said once (:mod:`mixsolve.solve.run_notes`): poor conditioning,
    and the shift risk over the run's quantified results (from the design alone when the
    result is lazy; none with ``fit_shift``, which fits the shift instead)."""
    notes = [ill_conditioned_design(plan.settings.design, plan.components, plan.condition)]
    if not options.fit_shift:
        tol = options.tolerance_nm
        if result["concentration"].chunks is None:
            notes.append(shift_risk(result["concentration"].values,
                                    result["std_uncertainty"].values,
                                    result["shift_bias_per_nm"].values, plan.components, tol))
        else:
            notes.append(design_shift_risk(plan.settings.shift_matrix, plan.settings.design,
                                            plan.components, tol))
    return [n for n in notes if n is not None]


def _uncertainty_basis(options: _Options, plan: _Plan) -> str:
    """One paragraph naming the sources ``std_uncertainty`` holds in this result."""
    kinds = pattern_counts(options.library)
    count = sum(kinds.values())
    if count:
        counts = ", ".join(f"{n} {k}" for k, n in kinds.items())
        library = (f"u_library from the library's {count} error pattern{'s' * (count > 1)} "
                   f"({counts}), correlated over wavelengths, propagated as "
                   "delta x = -G delta D x with the unweighted design and shared by every "
                   "spectrum of the run")
    else:
        library = "u_library = 0: the library states no error of its own"
    stray = plan.settings.stray
    stray_text = ("u_stray from the stated stray-light fraction "
                  f"{stray.fraction:g} +- {stray.u_fraction:g} after the readings were "
                  "corrected" if stray is not None else
                  "u_stray = 0: no stray-light fraction stated, readings not corrected")
    return (f"{UNCERTAINTY_BASIS}. In this result: {library}; {stray_text}.")


def _fitted_readings(plan: _Plan) -> xr.DataArray:
    """The readings the fit saw: the used spectra, corrected for stray light when a
    fraction is stated (too dark ones NaN; lazy for dask-backed spectra)."""
    stray, reference = plan.settings.stray, plan.reference
    used = plan.used
    if stray is not None:
        used = xr.apply_ufunc(lambda a: stray.apply(a)[0], used, dask="parallelized",
                              output_dtypes=[float]).assign_attrs(used.attrs)
    if reference is not None:
        if stray is not None:
            reference = xr.apply_ufunc(lambda a: stray.apply(a)[0], reference,
                                       dask="parallelized", output_dtypes=[float])
        used = (used - reference).assign_attrs(plan.used.attrs)
    return used


def _stray_attrs(stray: StrayCorrection | None) -> dict[str, Any]:
    """The record of the stray-light correction (fraction 0 and no text without one)."""
    if stray is None:
        return {"stray_fraction": 0.0, "u_stray_fraction": 0.0, "stray_correction": ""}
    return {"stray_fraction": stray.fraction, "u_stray_fraction": stray.u_fraction,
            "stray_correction": stray.describe()}


def _bandwidth_attrs(bandwidth: _Bandwidth | None) -> dict[str, float]:
    """The record of the bandpasses (nm; NaN not stated) and of the library's broadening
    (FWHM of the triangle applied, 0 when none)."""
    if bandwidth is None:
        return {}
    stated = np.nan if bandwidth.stated_nm is None else bandwidth.stated_nm
    return {"bandwidth_nm": stated, "library_bandwidth_nm": bandwidth.library_nm,
            "library_broadened_nm": bandwidth.broadened_nm}


def _bandwidth_note(options: _Options, plan: _Plan, result: xr.Dataset) -> RunNote | None:
    """The ``bandwidth_mismatch`` run note, or None when the bandpasses match or the
    library was broadened to the spectra's (docs/method.md, "Spectral bandwidth")."""
    record = options.bandwidth
    if record is None or record.broadened_nm > 0:
        return None
    own, stated = record.library_nm, record.stated_nm
    typical = None if options.noise is None else TYPICAL_BANDWIDTH_NM.get(options.noise.name)
    spectra = stated if stated is not None else assumed_bandwidth(own, typical)
    if spectra is None or spectra == own:
        return None
    wider = not np.isfinite(own) or spectra > own
    width = spectra if not np.isfinite(own) else extra_fwhm(max(spectra, own),
                                                            min(spectra, own))
    library = record.original
    eps = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    n = eps.shape[0]
    conc = result["concentration"]
    u_rel = None
    if conc.chunks is None:  # eager: the run's median result
        others = [d for d in conc.dims if d != COMPONENT]
        coef = (conc * result["pathlength_cm"] / result["unit_factor"]).median(others)
        coef = coef.transpose(COMPONENT).values
        median_c = np.abs(conc.median(others).transpose(COMPONENT).values)
        with np.errstate(divide="ignore", invalid="ignore"):
            u_rel = result["std_uncertainty"].median(others).transpose(
                COMPONENT).values / median_c
        basis = "the run's median result"
    else:  # lazy: equal peak absorbances, nothing computed
        peak = np.abs(plan.settings.design[:, :n]).max(axis=0)
        coef = np.where(peak > 0, 1.0 / (n * np.where(peak > 0, peak, 1.0)), 0.0)
        basis = "equal peak absorbances of the components"
    bias = mismatch_bias(eps, library[WAVELENGTH].values, plan.used_wl,
                         plan.settings.design[:, n:], np.nan_to_num(coef), width,
                         spectra_wider=wider)
    return mismatch_note(library_nm=own, spectra_nm=stated, typical_nm=spectra,
                         bias=bias, components=plan.components,
                         u_relative=None if stated is None else u_rel, basis=basis)


def _where_infinite(used: xr.DataArray, exc: InfiniteReadingError) -> str:
    """The refusal of an infinite reading, naming its spectrum (labels) and wavelength."""
    if exc.spectrum is None or exc.reading is None:
        return str(exc)
    lead = [d for d in used.dims if d != WAVELENGTH]
    position = np.unravel_index(exc.spectrum, tuple(used.sizes[d] for d in lead))
    where = [f"{d} {used[d].values[i]!s}" if d in used.coords else f"{d} {i}"
             for d, i in zip(lead, position, strict=True)]
    wl = float(used[WAVELENGTH].values[exc.reading])
    return (f"spectra: absorbance is infinite at {', '.join([*where, f'{wl:g} nm'])}; use "
            "NaN for a missing reading")


def _as_slice(index: np.ndarray) -> np.ndarray | slice:
    """A run of consecutive positions as a slice, so that selecting it copies nothing."""
    if index.size and np.array_equal(index, np.arange(index[0], index[0] + index.size)):
        return slice(int(index[0]), int(index[0]) + index.size)
    return index


def _pathlength(spectra: xr.DataArray, pathlength_cm: Any) -> xr.DataArray:
    """The pathlength (cm) as a DataArray over none or some of the spectra's dims."""
    if pathlength_cm is None:
        pathlength_cm = spectra.attrs.get("pathlength_cm", 1.0)
    b = pathlength_cm if isinstance(pathlength_cm, xr.DataArray) else xr.DataArray(
        check_number(pathlength_cm, "pathlength_cm", "cm", positive=True))
    for dim in b.dims:
        # One value per spectrum: every dim must be a spectra dim and cover all its labels,
        # else xarray alignment would silently drop spectra or leave NaN results.
        if dim == WAVELENGTH or dim not in spectra.dims:
            raise InputError(f"pathlength_cm: dimension {dim!r} is not one of the spectra's "
                             f"dimensions other than wavelength "
                             f"({', '.join(d for d in spectra.dims if d != WAVELENGTH)})")
        if dim in b.coords and dim in spectra.coords:
            have = set(b[dim].values.tolist())
            lacking = [v for v in spectra[dim].values.tolist() if v not in have]
            if lacking:
                raise InputError(f"pathlength_cm: no value for {dim} {str(lacking[0])!r}")
            b = b.sel({dim: spectra[dim].values})
        elif b.sizes[dim] != spectra.sizes[dim]:
            raise InputError(f"pathlength_cm: {b.sizes[dim]} value(s) along {dim!r} for "
                             f"{spectra.sizes[dim]} spectra")
    values = np.asarray(b.values, dtype=float)
    bad = values[~(np.isfinite(values) & (values > 0))].ravel()
    if bad.size:
        check_number(bad[0], "pathlength_cm", "cm", positive=True)  # raises, naming it
    return b.astype(float).assign_attrs(units="cm")


def flags_of(result: xr.Dataset) -> xr.DataArray:
    """Each spectrum's flag codes joined with ``;`` (empty string when nothing is doubtful).

    Parameters
    ----------
    result : Dataset
        An :func:`unmix` result (numpy- or dask-backed; ``unmix`` already stores this as
        ``result["flags"]``, so call it after editing a result or to rebuild the flags).

    Returns
    -------
    DataArray of str, dims of ``result["status"]``
        Python strings (object dtype marked as holding str, which netCDF and Zarr store
        as variable-length text; one string object per distinct combination of codes).
        Lazy when the result is dask-backed: computed with the rest of the result, chunk
        by chunk.

    Notes
    -----
    Codes, in this order: the status codes of ``mixsolve.flags.STATUS_CODES``;
    ``at_zero:<component>`` where NNLS held a component at zero; ``negative:<component>``
    where OLS returned a negative concentration. Risks of the whole design are run notes
    (``attrs["run_notes"]``, :func:`mixsolve.flags.run_notes_of`), not flags. See
    docs/flags.md (:func:`mixsolve.flags.flag_texts`).
    """
    comps = [str(c) for c in result[COMPONENT].values]
    core = [[], [COMPONENT], [COMPONENT]]
    flags = xr.apply_ufunc(
        functools.partial(flag_texts, components=comps, ols=result.attrs["method"] == "ols"),
        result["status"], result["at_zero"], result["concentration"],
        input_core_dims=core, dask="parallelized", output_dtypes=[VLEN_STR])
    return flags.rename("flags")
