"""Everything :func:`mixsolve.unmix` computes per spectrum, for one block of spectra.

:func:`unmix_block` works on plain arrays (wavelength on the last axis) and returns every
per-spectrum variable of the result in final units (described in
:mod:`mixsolve.solve.outputs`): the fit chosen by :data:`FitKind` (the plain or weighted
fit of :mod:`mixsolve.solve.cls`, or the shift fit of :mod:`mixsolve.solve.shift_fit`),
concentrations and uncertainties, the trust figures and status bits
(:mod:`mixsolve.solve.trust`), the shift bias and the flag strings. ``unmix`` runs it
once under ``xarray.apply_ufunc``: on the whole array for numpy-backed spectra, chunk by
chunk for dask-backed ones. Keeping all of it in one function keeps the data to one pass
and the result to one set of labelled variables.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import itertools
import threading
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Literal, NamedTuple

import numpy as np
from threadpoolctl import ThreadpoolController

from mixsolve.errors import InfiniteReadingError
from mixsolve.flags import (
    ILL_CONDITIONED,
    LACK_OF_FIT,
    MISSING,
    SATURATED,
    SCATTER,
    SHIFTED,
    STRUCTURED,
    TOO_DARK,
    UNMODELLED_SCATTER,
    flag_texts,
)
from mixsolve.library import COMPONENT
from mixsolve.library_error import library_variance
from mixsolve.noise import NoiseModel
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.design import Baseline
from mixsolve.solve.engine import Method
from mixsolve.solve.outputs import TERM, kernel_outputs
from mixsolve.solve.residuals import ResidualSummary, summarise
from mixsolve.solve.sample_checks import flat_top, lack_of_fit, target_absorbance
from mixsolve.solve.scatter import fit_with_scatter
from mixsolve.solve.shift_fit import fit_with_shift
from mixsolve.solve.stray import StrayCorrection, coefficient_sensitivity
from mixsolve.solve.trust import (
    CHECK_NAMES,
    STRUCTURE_Z_LIMIT,
    lack_of_fit_model,
    own_design_status,
    shifted_status,
    summary_checks,
    trust_status,
)
from mixsolve.spectra import WAVELENGTH

#: Spectra per task when several threads share a block.
TASK_SPECTRA = 8192


@dataclass(frozen=True)
class PlainFit:
    """The fit of every spectrum against the library's design, all readings alike."""


@dataclass(frozen=True)
class WeightedFit:
    """Two passes: the second weights each reading by 1/σ_A² of ``noise``, evaluated at
    the fitted absorbance of the first (unweighted) pass."""

    noise: NoiseModel


@dataclass(frozen=True, eq=False)
class ShiftFit:
    """One wavelength offset per spectrum fitted with the concentrations
    (:func:`mixsolve.solve.shift_fit.fit_with_shift`)."""

    eps: np.ndarray  #: (n_components, n_grid) library absorptivity on its own grid
    grid_nm: np.ndarray  #: (n_grid,) the library's wavelengths
    wavelengths_nm: np.ndarray  #: (m,) the used wavelengths
    baseline: Baseline
    max_shift_nm: float  #: bound of the search (nm)


@dataclass(frozen=True, eq=False)
class ScatterFit:
    """An offset and a power-law scatter term a·(λ/λ₀)^(−n) per spectrum, n fitted with the
    concentrations (:func:`mixsolve.solve.scatter.fit_with_scatter`)."""

    base: np.ndarray  #: (m, q + 1) absorptivity columns at 1 cm, then the offset column
    wavelengths_nm: np.ndarray  #: (m,) the used wavelengths; λ₀ is the shortest


#: The choice of fit of one unmix call.
FitKind = PlainFit | WeightedFit | ShiftFit | ScatterFit


@dataclass(frozen=True)
class BlockSettings:
    """What every block of one ``unmix`` call shares (all validated by ``unmix``)."""

    design: np.ndarray  #: (m, p) absorptivity columns at 1 cm, then baseline columns
    components: list[str]
    method: Method
    noise: NoiseModel | None  #: for the lack-of-fit figures (None: not computed)
    fit: FitKind
    threads: int  #: threads sharing a block (1 when dask's threads run the blocks)
    absorbance_range: tuple[float, float]  #: AU
    #: status bits of the whole design (ill conditioning): said once as run notes, not set
    #: on the spectra (:mod:`mixsolve.solve.run_notes`)
    design_status: int
    unit_factor: np.ndarray  #: (n,) result unit per library concentration unit
    shift_matrix: np.ndarray  #: (n, n) library-unit bias per nm per unit of each component
    #: (n, n, n) the library's covariance as one quadratic form per component,
    #: var(x_j) = xᵀ Q_j x (:func:`mixsolve.library_error.library_quadratic`); zeros when the
    #: library states no error
    library_quadratic: np.ndarray
    tolerance_nm: float  #: wavelength accuracy (nm) for the shift_risk run note
    #: ``numpy`` or ``compiled`` (:func:`mixsolve.solve.engine.choose_engine`), chosen for
    #: the whole job so that every block and dask chunk uses the same
    engine: Literal["numpy", "compiled"] = "numpy"
    #: the stated stray fraction the readings are corrected for (None: not corrected)
    stray: StrayCorrection | None = None
    #: readings over which noise may be correlated (:func:`mixsolve.solve.trust.structure_lag`)
    structure_lag: int | None = None
    #: orthonormal columns (m, k) of what a constant and the λ⁻⁴ shape add to the design,
    #: the last the probe of the unmodelled-scatter check
    #: (:func:`mixsolve.solve.scatter.scatter_probe`; None: scatter is fitted, or the
    #: design spans the shape)
    scatter_probe: np.ndarray | None = None
    #: readings averaged at the reference wavelength (0: no reference subtracted)
    reference_readings: int = 0
    #: (n,) G·1 of the components: how a reference reading's error moves each coefficient
    reference_gain: np.ndarray | None = None
    #: (m, n, n) the library's error left in the residual, for the lack-of-fit test
    #: (:func:`mixsolve.library_error.library_residual_form`); None: exact library
    library_residual: np.ndarray | None = None


def unmix_block(spectra: np.ndarray, pathlength_cm: np.ndarray, settings: BlockSettings,
                reference: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
    """All per-spectrum outputs of one block, in the order of
    :func:`mixsolve.solve.outputs.kernel_outputs`.

    Parameters
    ----------
    spectra : array, shape (..., m)
        Absorbance (AU) at the used wavelengths; NaN = missing reading.
    pathlength_cm : array, broadcastable to shape (...)
        Pathlength b (cm).
    settings : BlockSettings
    reference : array, broadcastable to shape (...), optional
        Each spectrum's mean reading (AU) at the reference wavelength, subtracted from every
        reading after the stray-light correction and before the fit.

    Returns
    -------
    tuple of arrays
        Concentrations c = x/b × unit factor and u(c) likewise; ``at_zero`` where NNLS
        held a component at 0; the bias S·(c/factor)·factor per +1 nm; the trust figures
        and status bits; the flag strings.

    Notes
    -----
    A block of more than ``TASK_SPECTRA`` spectra is cut into equal tasks of at most that
    many, which ``settings.threads`` threads share (the compiled and numpy passes release the GIL);
    every task uses the engine chosen for the whole job (``settings.engine``), so results
    do not depend on how the block is cut or the spectra chunked.
    """
    lead = spectra.shape[:-1]
    m = spectra.shape[-1]
    flat = spectra.reshape(-1, m)
    b = np.broadcast_to(np.asarray(pathlength_cm, dtype=float), lead).reshape(-1)
    ref = None if reference is None else np.broadcast_to(
        np.asarray(reference, dtype=float), lead).reshape(-1)
    n_spec = flat.shape[0]
    described = kernel_outputs(isinstance(settings.fit, ShiftFit),
                               isinstance(settings.fit, ScatterFit))
    sizes = {TERM: settings.design.shape[1], COMPONENT: len(settings.components),
             WAVELENGTH: m}
    outputs = {o.name: np.empty((n_spec, *(sizes[d] for d in o.dims)), dtype=o.dtype)
               for o in described}
    texts: dict[object, str] = {}

    def store(rows: slice, fitted: _Fitted) -> None:
        values = _outputs_of(fitted, b[rows], settings, texts)
        for name, out in outputs.items():
            out[rows] = values[name]

    def fit(rows: slice) -> _Fitted:
        try:
            return _reading_checks(
                _fit_task(flat[rows], settings, None if ref is None else ref[rows]),
                flat[rows], settings)
        except InfiniteReadingError as exc:  # its position within the block, not the task
            raise InfiniteReadingError(
                str(exc), None if exc.spectrum is None else rows.start + exc.spectrum,
                exc.reading) from None

    tasks = _tasks(n_spec, settings.threads)
    if settings.threads > 1 and len(tasks) > 1:
        # compiled code and numpy release the GIL while they work. Every task calls BLAS:
        # one BLAS thread each, or OpenBLAS's threads (which spin after each product)
        # would take the cores from the tasks' own threads.
        with ThreadPoolExecutor(min(settings.threads, len(tasks))) as pool, \
                one_blas_thread():
            list(pool.map(lambda rows: store(rows, fit(rows)), tasks))
    elif settings.threads == 1 and n_spec >= TASK_SPECTRA:
        # a dask chunk (or a one-core machine): other chunks run in the other threads, so
        # BLAS's own threads would only compete with them (measured: the small products of
        # a task 10-100x slower on a loaded machine)
        with one_blas_thread():
            for rows in tasks:
                store(rows, fit(rows))
    else:
        for rows in tasks:
            store(rows, fit(rows))
    return tuple(out.reshape((*lead, *out.shape[1:])) for out in outputs.values())


@functools.cache
def _blas_controller() -> ThreadpoolController:
    """threadpoolctl's view of the loaded BLAS libraries, found once (finding costs ~1 ms)."""
    return ThreadpoolController()


_blas_lock = threading.Lock()
_blas_users = 0
_blas_limiter: Any = None


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """BLAS limited to one thread while any unmix block runs its tasks.

    The limit is process-wide: the first block to start sets it and the last to finish
    restores the original, so blocks running at the same time in several threads do not
    restore each other's limits out of order (which could leave BLAS on one thread).
    A dask computation of unmix results holds it for its whole length
    (:func:`mixsolve.workflows.cluster.compute`): restoring the limit between chunks wakes
    OpenBLAS's threads, which then spin beside the chunks' threads (measured: twice the
    CPU per spectrum on 2 cores).
    """
    global _blas_users, _blas_limiter
    with _blas_lock:
        if _blas_users == 0:
            _blas_limiter = _blas_controller().limit(limits=1, user_api="blas")
        _blas_users += 1
    try:
        yield
    finally:
        with _blas_lock:
            _blas_users -= 1
            if _blas_users == 0:
                _blas_limiter.restore_original_limits()
                _blas_limiter = None


def _tasks(n_spec: int, threads: int) -> list[slice]:
    """Equal tasks of at most ``TASK_SPECTRA`` spectra, as many as a multiple of ``threads``
    (so that no thread is left with one more task than the others at the end)."""
    count = -(-n_spec // TASK_SPECTRA)
    if threads > 1 and count > 1:
        count = -(-count // threads) * threads
    bounds = np.linspace(0, n_spec, max(count, 1) + 1).round().astype(int)
    return [slice(int(lo), int(hi)) for lo, hi in itertools.pairwise(bounds)]


class _Fitted(NamedTuple):
    """The fit of one task, before units, checks and flags."""

    coef: np.ndarray
    std_error: np.ndarray
    dof: np.ndarray
    status: np.ndarray
    summary: ResidualSummary
    lack: tuple[np.ndarray, np.ndarray] | None  #: lack-of-fit ratio and p (noise model)
    #: the shift fit's outputs: shift, u(shift), fitted and residual spectra, by name
    extra: dict[str, np.ndarray]
    #: stray correction: ∂coef/∂s·u(s) (n, p) and which spectra had readings too dark
    stray: tuple[np.ndarray, np.ndarray] | None = None
    #: the scatter figure (:func:`_amplitude_z`, :func:`_probe_z`); NaN where none
    scatter_z: np.ndarray | None = None
    #: where the fit extended by the scatter probe still leaves a structured residual: the
    #: residual is not scatter-shaped (a shift or an absorber), so no ``UNMODELLED_SCATTER``
    scatter_unexplained: np.ndarray | None = None


def _fit_task(spectra: np.ndarray, settings: BlockSettings,
              reference: np.ndarray | None = None) -> _Fitted:
    """Fit spectra (n, m): the plain, weighted, shift or scatter fit, and the lack-of-fit
    figures; ``reference`` (n,) AU is subtracted first (after the stray correction)."""
    if settings.stray is not None:
        return _fit_corrected(spectra, settings, reference)
    if reference is not None:
        spectra = spectra - reference[:, None]
    n = len(settings.components)
    kind = settings.fit
    if isinstance(kind, ScatterFit):
        coef, se, fitted, dof, status, exponent, u_exponent = fit_with_scatter(
            spectra, kind.base, kind.wavelengths_nm, n, settings.method,
            engine=settings.engine)
        residual = spectra - fitted
        lack = None if settings.noise is None else lack_of_fit(
            residual, fitted, dof, settings.noise, coef[:, :n], settings.library_residual)
        summary = summarise(spectra, residual, settings.design.shape[1] + 1,  # + exponent
                            settings.structure_lag)
        return _Fitted(coef, se, dof, status, summary, lack,
                       {"scatter_exponent": exponent, "u_scatter_exponent": u_exponent,
                        "scatter_amplitude": coef[:, -1], "u_scatter_amplitude": se[:, -1],
                        "fitted": fitted, "residual": residual},
                       scatter_z=_amplitude_z(coef[:, -1], se[:, -1]))
    if isinstance(kind, ShiftFit):
        coef, se, fitted, dof, status, shift, u_shift = fit_with_shift(
            spectra, kind.eps, kind.grid_nm, kind.wavelengths_nm, kind.baseline,
            settings.method, kind.max_shift_nm)
        residual = spectra - fitted
        lack = None if settings.noise is None else lack_of_fit(
            residual, fitted, dof, settings.noise, coef[:, :n], settings.library_residual)
        summary = summarise(spectra, residual, settings.design.shape[1] + 1,  # + the shift
                            settings.structure_lag)
        status = status | shifted_status(shift, u_shift)
        return _Fitted(coef, se, dof, status, summary, lack,
                       {"wavelength_shift_nm": shift, "u_wavelength_shift_nm": u_shift,
                        "fitted": fitted, "residual": residual},
                       None, *_probe_z(residual, summary, dof, settings))
    fit = fit_spectra(spectra, settings.design, n, settings.method, engine=settings.engine,
                      structure_lag=settings.structure_lag)
    # the unmodelled-scatter probe extends the unweighted fit: a weighted fit's residual is
    # not orthogonal to the design, so it is not the residual of that extension
    unweighted = fit
    if isinstance(kind, WeightedFit):
        first = fit.coef @ settings.design.T
        at = np.where(np.isfinite(first), first, spectra)
        weights = kind.noise.weights(at)
        fit = fit_spectra(spectra, settings.design, n, settings.method, weights=weights,
                          structure_lag=settings.structure_lag)
    lack = None if settings.noise is None else lack_of_fit_model(
        spectra, fit.coef, settings.design, fit.dof, settings.noise, settings.library_residual)
    # the probe is orthogonal to the design: its product with the residual is that with
    # the readings, whatever the coefficients
    return _Fitted(fit.coef, fit.std_error, fit.dof, fit.status, fit.summary, lack, {}, None,
                   *_probe_z(spectra, unweighted.summary, unweighted.dof, settings,
                             unweighted.coef))


def _reading_checks(fit: _Fitted, spectra: np.ndarray, settings: BlockSettings) -> _Fitted:
    """The fit with the checks of the readings themselves: ``SATURATED`` where a spectrum
    has a flat top at the instrument's ceiling
    (:func:`mixsolve.solve.sample_checks.flat_top`, on the readings as measured), and
    ``ILL_CONDITIONED`` where the spectrum's own design after missing readings is ill
    conditioned while the run's is not (the run's is a run note)."""
    status = fit.status
    if not settings.design_status & ILL_CONDITIONED:
        status = status | own_design_status(spectra, settings.design, status)
    with np.errstate(invalid="ignore"):  # only spectra above the range can have one
        rows = np.flatnonzero(np.asarray(fit.summary.absorbance_max) >
                              settings.absorbance_range[1])
    if rows.size:
        fitted = fit.extra.get("fitted")
        fitted = fit.coef[rows] @ settings.design.T if fitted is None else fitted[rows]
        top = flat_top(spectra[rows], fitted, settings.absorbance_range[1], settings.noise)
        status = status.copy()
        status[rows[top]] |= SATURATED
    return fit._replace(status=status)


#: |a|/u(a) above which a fitted scatter amplitude is flagged ``scatter``: the one-sided
#: 0.1 % point of the other checks (judgement). With the exponent's uncertainty in u(a),
#: |a|/u(a) of a spectrum without scatter is narrower than N(0, 1) (99th percentile about
#: 0.4 in tests/test_scatter.py), so the limit is conservative there.
SCATTER_Z_LIMIT = 3.09
#: Projection z above which unmodelled scatter is flagged (one-sided; judgement, measured
#: in tests/test_scatter.py).
UNMODELLED_SCATTER_Z_LIMIT = 3.09
#: Screening z above which the probe's z is computed again from the extended fit.
SCREEN_Z = 2.0


def _amplitude_z(amplitude: np.ndarray, u_amplitude: np.ndarray) -> np.ndarray:
    """a/u(a) of the fitted scatter amplitude (NaN where u(a) is not finite or 0)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(u_amplitude > 0, amplitude / u_amplitude, np.nan)


def _probe_z(values: np.ndarray, summary: ResidualSummary, dof: np.ndarray,
             settings: BlockSettings, coef: np.ndarray | None = None
             ) -> tuple[np.ndarray, np.ndarray]:
    """z = vᵀr/(f′·s′) of the residual r along the unit λ⁻⁴ probe v orthogonal to the
    design; NaN without a probe, with missing readings (v is orthogonal on all of them
    only) or without dof.

    ``values`` is the residual, or the readings with ``coef`` given (then r = a − D·coef;
    vᵀa = vᵀr as v ⟂ the columns of D). s′ and f′ are the residual SD and the
    correlated-noise inflation of r′ = r − QQᵀr, the residual of the fit extended by the
    probe's basis Q (k columns: the constant too when D has none; s′² = ‖r′‖²/(dof − k)),
    so that a strong scatter residual does not widen its
    own yardstick: first a screening z from the fit's own s and f, then s′ and f′ for the
    spectra it puts above ``SCREEN_Z`` only (a t statistic of the extended linear model).

    Also returns where the extended fit's residual is still structured (its structure z
    above ``trust.STRUCTURE_Z_LIMIT``): the probe then does not explain the residual's
    shape — a wavelength shift's derivative or an absorber's band projects onto the λ⁻⁴
    shape too — and the residual is not called scatter (``structured_residual`` says it).
    """
    basis = settings.scatter_probe
    n = values.shape[0]
    unexplained = np.zeros(n, dtype=bool)
    if basis is None:
        return np.full(n, np.nan), unexplained
    along = values @ basis[:, -1]
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.sqrt(summary.sum_squares / np.where(dof > 0, dof, np.nan))
        z = along / (s * summary.noise_inflation)
        rows = np.flatnonzero(z > SCREEN_Z)
        if rows.size:
            part = values[rows] if coef is None else \
                values[rows] - coef[rows] @ settings.design.T
            rest = part - (part @ basis) @ basis.T
            extended = summarise(part, rest, settings.design.shape[1] + basis.shape[1],
                                 settings.structure_lag)
            k = dof[rows] - basis.shape[1]
            s_rest = np.sqrt(extended.sum_squares / np.where(k > 0, k, np.nan))
            z[rows] = along[rows] / (s_rest * extended.noise_inflation)
            unexplained[rows] = extended.structure_z > STRUCTURE_Z_LIMIT
    return z, unexplained


def _fit_corrected(spectra: np.ndarray, settings: BlockSettings,
                   reference: np.ndarray | None = None) -> _Fitted:
    """:func:`_fit_task` of the readings corrected for the stated stray light (too dark
    ones left out), with ∂coef/∂s·u(s) and the spectra that had readings too dark.

    ∂A/∂s is taken at the fitted absorbances of the readings used, and G is the fit's
    operator there: weighted by 1/σ² at the fitted absorbance for a weighted fit (as the
    uncertainty budget does), the plain design for the shift fit (linearised at no shift).
    """
    stray = settings.stray
    assert stray is not None
    missing = np.isnan(spectra).any(axis=1)
    corrected, dark = stray.apply(spectra)
    if reference is not None:  # the reference reading corrected as the others
        corrected = corrected - stray.apply(reference[:, None])[0]
    fit = _fit_task(corrected, dataclasses.replace(settings, stray=None))
    fitted = fit.extra["fitted"] if "fitted" in fit.extra else fit.coef @ settings.design.T
    fitted = np.where(np.isnan(corrected), np.nan, fitted)  # the readings the fit used
    weights = None
    if isinstance(settings.fit, WeightedFit):
        weights = settings.fit.noise.weights(fitted)
    per_s = coefficient_sensitivity(fitted, stray.fraction, settings.design,
                                    len(settings.components), weights)
    too_dark = dark.any(axis=1)
    # readings left out for being too dark are flagged as such, not as missing readings
    status = np.where(too_dark & ~missing, fit.status & ~MISSING, fit.status)
    return fit._replace(status=status, stray=(np.abs(per_s) * stray.u_fraction, too_dark))


def _outputs_of(fit: _Fitted, b: np.ndarray, settings: BlockSettings,
                texts: dict[object, str]) -> dict[str, np.ndarray]:
    """The kernel's outputs of one task's fit, by name; b (n,) pathlengths in cm."""
    n = len(settings.components)
    rms = fit.summary.rms()
    checks = summary_checks(fit.summary, fit.lack)
    status = fit.status | trust_status(
        checks, rms, settings.design.shape[0], settings.absorbance_range,
        settings.noise is not None) | _scatter_status(fit.scatter_z, fit.scatter_unexplained,
                                                      settings)
    # a shift fitted to a residual the model still does not explain is not read as the
    # instrument's shift: the residual flags say what is wrong
    # (and a scatter term fitted to such a residual is not the sample's turbidity: a shift's
    # derivative drove the amplitude negative with the exponent at its bound)
    status = np.where(status & (LACK_OF_FIT | STRUCTURED), status & ~(SHIFTED | SCATTER),
                      status)
    per_b = (1.0 / b)[:, None]
    canonical = fit.coef[:, :n] * per_b
    conc = canonical * settings.unit_factor
    to_result = per_b * settings.unit_factor  # coefficient units → result unit
    u_noise = _noise_term(fit, to_result, n, settings)
    u_library = np.sqrt(library_variance(fit.coef[:, :n], settings.library_quadratic))
    u_library *= to_result
    u_stray, status = _stray_terms(fit, to_result, n, status)
    # the combined standard uncertainty: independent inputs (JCGM 100:2008, 5.1.2)
    u_conc = u_noise * u_noise
    u_conc += u_library * u_library
    if fit.stray is not None:
        u_conc += u_stray * u_stray
    np.sqrt(u_conc, out=u_conc)
    at_zero = (conc == 0) & (settings.method == "nnls")
    bias = (canonical @ settings.shift_matrix.T) * settings.unit_factor
    with np.errstate(invalid="ignore"):  # no dilution brings a peak ≤ 0 AU into range
        dilution = np.where(checks[0] > 0, checks[0], np.nan) / target_absorbance(
            *settings.absorbance_range)
    flags = flag_texts(status, at_zero, conc, settings.components,
                       ols=settings.method == "ols", known=texts)
    return {"coef": fit.coef, "concentration": conc, "std_uncertainty": u_conc,
            "u_noise": u_noise, "u_library": u_library, "u_stray": u_stray,
            "at_zero": at_zero, "shift_bias_per_nm": bias, "rms_residual": rms,
            "noise_inflation": fit.summary.noise_inflation,
            "scatter_z": np.full(rms.shape, np.nan) if fit.scatter_z is None else fit.scatter_z,
            "dof": fit.dof, "status": status, **dict(zip(CHECK_NAMES, checks, strict=True)),
            "suggested_dilution": dilution, "flags": flags, **fit.extra}


def _stray_terms(fit: _Fitted, to_result: np.ndarray, n: int, status: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """u_stray (spectra, n components) in the result unit (0 without a stated fraction;
    ``to_result`` = 1/b × unit factor), and the status with ``TOO_DARK`` where a spectrum
    had readings too dark to correct."""
    if fit.stray is None:
        return np.zeros((to_result.shape[0], n)), status
    per_coef, dark = fit.stray
    return per_coef[:, :n] * to_result, status | np.where(dark, TOO_DARK, 0)


def _noise_term(fit: _Fitted, to_result: np.ndarray, n: int, settings: BlockSettings
                ) -> np.ndarray:
    """u_noise (spectra, n components), result unit: the fit's standard error
    s·√diag((DᵀD)⁻¹) times ``to_result`` (1/b × unit factor) and the correlated-noise
    inflation f of each spectrum (:func:`mixsolve.solve.residuals.lag_figures`).

    With a reference reading subtracted (the mean of k readings), its error δr moves every
    reading alike and each coefficient by (G·1)ⱼ·δr, var(δr) = f²s²/k (s² = RSS/dof, the
    spectrum's own noise): u_noise² = f²s²·diag((DᵀD)⁻¹) + (G·1)²·f²s²/k. With an offset in
    the design G·1 = 0 for every component: the offset takes the reference's error."""
    u = fit.std_error[:, :n] * (to_result * fit.summary.noise_inflation[:, None])
    gain = settings.reference_gain
    if settings.reference_readings and gain is not None and np.any(gain != 0):
        with np.errstate(invalid="ignore", divide="ignore"):
            s = np.sqrt(fit.summary.sum_squares / np.where(fit.dof > 0, fit.dof, np.nan))
        ref = (s * fit.summary.noise_inflation / np.sqrt(settings.reference_readings))
        u = np.hypot(u, np.abs(gain) * ref[:, None] * to_result)
    return u


def _scatter_status(scatter_z: np.ndarray | None, unexplained: np.ndarray | None,
                    settings: BlockSettings) -> np.ndarray:
    """``SCATTER`` where a fitted amplitude has a/u(a) > ``SCATTER_Z_LIMIT`` (positive:
    scatter only ever adds apparent absorbance);
    ``UNMODELLED_SCATTER`` where, scatter not fitted, the probe z > the one-sided limit and
    the probe explains the residual's shape (not ``unexplained``, :func:`_probe_z`)."""
    if scatter_z is None:
        return np.zeros((), dtype=np.int64)
    with np.errstate(invalid="ignore"):
        if isinstance(settings.fit, ScatterFit):
            return np.where(scatter_z > SCATTER_Z_LIMIT, SCATTER, 0)  # turbidity adds light
            # loss: only a positive amplitude is scatter
        on = scatter_z > UNMODELLED_SCATTER_Z_LIMIT
        if unexplained is not None:
            on &= ~unexplained
        return np.where(on, UNMODELLED_SCATTER, 0)
