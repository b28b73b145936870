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
from mixsolve.flags import MISSING, TOO_DARK, flag_texts
from mixsolve.library import COMPONENT
from mixsolve.library_error import library_variance
from mixsolve.noise import NoiseModel
from mixsolve.solve.cls import fit_spectra
from mixsolve.solve.design import Baseline
from mixsolve.solve.engine import Method
from mixsolve.solve.outputs import TERM, kernel_outputs
from mixsolve.solve.residuals import ResidualSummary, summarise
from mixsolve.solve.sample_checks import lack_of_fit, target_absorbance
from mixsolve.solve.shift_fit import fit_with_shift
from mixsolve.solve.stray import StrayCorrection, coefficient_sensitivity
from mixsolve.solve.trust import (
    CHECK_NAMES,
    lack_of_fit_model,
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


#: The choice of fit of one unmix call.
FitKind = PlainFit | WeightedFit | ShiftFit


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
    design_status: int  #: status bits that hold for every spectrum (ill conditioning)
    unit_factor: np.ndarray  #: (n,) result unit per library concentration unit
    shift_matrix: np.ndarray  #: (n, n) library-unit bias per nm per unit of each component
    #: (n, n, n) the library's covariance as one quadratic form per component,
    #: var(x_j) = xᵀ Q_j x (:func:`mixsolve.library_error.library_quadratic`); zeros when the
    #: library states no error
    library_quadratic: np.ndarray
    tolerance_nm: float  #: wavelength accuracy for the shift_sensitive flag
    #: ``numpy`` or ``compiled`` (:func:`mixsolve.solve.engine.choose_engine`), chosen for
    #: the whole job so that every block and dask chunk uses the same
    engine: Literal["numpy", "compiled"] = "numpy"
    #: the stated stray fraction the readings are corrected for (None: not corrected)
    stray: StrayCorrection | None = None
    #: readings over which noise may be correlated (:func:`mixsolve.solve.trust.structure_lag`)
    structure_lag: int | None = None
    #: (m, n, n) the library's error left in the residual, for the lack-of-fit test
    #: (:func:`mixsolve.library_error.library_residual_form`); None: exact library
    library_residual: np.ndarray | None = None


def unmix_block(spectra: np.ndarray, pathlength_cm: np.ndarray, settings: BlockSettings
                ) -> tuple[np.ndarray, ...]:
    """All per-spectrum outputs of one block, in the order of
    :func:`mixsolve.solve.outputs.kernel_outputs`.

    Parameters
    ----------
    spectra : array, shape (..., m)
        Absorbance (AU) at the used wavelengths; NaN = missing reading.
    pathlength_cm : array, broadcastable to shape (...)
        Pathlength b (cm).
    settings : BlockSettings

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
    n_spec = flat.shape[0]
    described = kernel_outputs(isinstance(settings.fit, ShiftFit))
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
            return _fit_task(flat[rows], settings)
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
                _one_blas_thread():
            list(pool.map(lambda rows: store(rows, fit(rows)), tasks))
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
def _one_blas_thread() -> Iterator[None]:
    """BLAS limited to one thread while any unmix block runs its tasks.

    The limit is process-wide: the first block to start sets it and the last to finish
    restores the original, so blocks running at the same time in several threads do not
    restore each other's limits out of order (which could leave BLAS on one thread).
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


def _fit_task(spectra: np.ndarray, settings: BlockSettings) -> _Fitted:
    """Fit spectra (n, m): the plain, weighted or shift fit, and the lack-of-fit figures."""
    if settings.stray is not None:
        return _fit_corrected(spectra, settings)
    n = len(settings.components)
    kind = settings.fit
    if isinstance(kind, ShiftFit):
        coef, se, fitted, dof, status, shift, u_shift = fit_with_shift(
            spectra, kind.eps, kind.grid_nm, kind.wavelengths_nm, kind.baseline,
            settings.method, kind.max_shift_nm)
        residual = spectra - fitted
        lack = None if settings.noise is None else lack_of_fit(
            residual, fitted, dof, settings.noise, coef[:, :n], settings.library_residual)
        summary = summarise(spectra, residual, settings.design.shape[1] + 1,  # + the shift
                            settings.structure_lag)
        return _Fitted(coef, se, dof, status, summary, lack,
                       {"wavelength_shift_nm": shift, "u_wavelength_shift_nm": u_shift,
                        "fitted": fitted, "residual": residual})
    fit = fit_spectra(spectra, settings.design, n, settings.method, engine=settings.engine,
                      structure_lag=settings.structure_lag)
    if isinstance(kind, WeightedFit):
        first = fit.coef @ settings.design.T
        at = np.where(np.isfinite(first), first, spectra)
        weights = kind.noise.weights(at)
        fit = fit_spectra(spectra, settings.design, n, settings.method, weights=weights,
                          structure_lag=settings.structure_lag)
    lack = None if settings.noise is None else lack_of_fit_model(
        spectra, fit.coef, settings.design, fit.dof, settings.noise, settings.library_residual)
    return _Fitted(fit.coef, fit.std_error, fit.dof, fit.status, fit.summary, lack, {})


def _fit_corrected(spectra: np.ndarray, settings: BlockSettings) -> _Fitted:
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
    status = fit.status | settings.design_status | trust_status(
        checks, rms, settings.design.shape[0], settings.absorbance_range,
        settings.noise is not None)
    per_b = (1.0 / b)[:, None]
    canonical = fit.coef[:, :n] * per_b
    conc = canonical * settings.unit_factor
    to_result = per_b * settings.unit_factor  # coefficient units → result unit
    u_noise = _noise_term(fit, to_result, n)
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
    flags = flag_texts(status, at_zero, conc, u_conc, bias, settings.components,
                       ols=settings.method == "ols", tolerance_nm=settings.tolerance_nm,
                       known=texts)
    return {"coef": fit.coef, "concentration": conc, "std_uncertainty": u_conc,
            "u_noise": u_noise, "u_library": u_library, "u_stray": u_stray,
            "at_zero": at_zero, "shift_bias_per_nm": bias, "rms_residual": rms,
            "noise_inflation": fit.summary.noise_inflation,
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


def _noise_term(fit: _Fitted, to_result: np.ndarray, n: int) -> np.ndarray:
    """u_noise (spectra, n components), result unit: the fit's standard error
    s·√diag((DᵀD)⁻¹) times ``to_result`` (1/b × unit factor) and the correlated-noise
    inflation f of each spectrum (:func:`mixsolve.solve.residuals.lag_figures`)."""
    return fit.std_error[:, :n] * (to_result * fit.summary.noise_inflation[:, None])
