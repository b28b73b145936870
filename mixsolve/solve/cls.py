"""Classical least squares kernel: many spectra against one design matrix.

Works on plain float64 arrays; the public :func:`mixsolve.unmix` wraps it with labels.
Returns coefficients, their standard errors and a summary of each residual spectrum
(:mod:`mixsolve.solve.residuals`); the fitted and residual spectra themselves are not
stored (``unmix`` computes them on demand from the coefficients).

Complete spectra (the usual case) are fitted in one pass over the data: the projection
onto the column-scaled design's QR factor, the NNLS or OLS solve of the reduced problem,
and the residual summary. Two engines do this and agree to rounding: numpy (always
available; :mod:`mixsolve.solve.nnls`) and compiled code (:mod:`mixsolve.solve.fused`,
when numba is installed, for batches of at least ``COMPILED_MIN_SPECTRA`` spectra); the
environment variable ``MIXSOLVE_ENGINE`` (``numpy`` or ``compiled``) forces one
(:func:`mixsolve.solve.engine.choose_engine`, which also holds the row states, the KKT
tolerance and the iteration limit both engines share). The caller splits a large batch
among threads. Spectra with
missing readings (NaN) are fitted on the wavelengths they have, grouped by their pattern
of missing values so that each pattern is solved once. Weighted fits give every spectrum
its own design (rows scaled by √w), solved for all spectra at once by
:mod:`mixsolve.solve.per_spectrum`.
"""

from __future__ import annotations

import functools
import os
import threading
from typing import Any, NamedTuple

import numpy as np
from scipy.linalg import solve_triangular

from mixsolve.errors import InfiniteReadingError
from mixsolve.flags import DEPENDENT, MISSING, NO_DOF, STATUS_CODES, TOO_FEW
from mixsolve.solve.batch import compiled_engine, nnls_batch
from mixsolve.solve.engine import (
    ROW_DONE,
    ROW_ITERATION_LIMIT,
    ROW_NOT_FINITE,
    Engine,
    Method,
    choose_engine,
    iteration_limit,
    kkt_rtol,
)
from mixsolve.solve.nnls import solve_reduced
from mixsolve.solve.per_spectrum import block_spectra, fit_each, weighted_inflation
from mixsolve.solve.residuals import (
    ResidualSummary,
    empty_summary,
    put,
    summarise,
    summarise_model,
)

__all__ = ["DEPENDENT", "MISSING", "NO_DOF", "STATUS_CODES", "TOO_FEW", "Fit",
           "default_threads", "fit_spectra", "refuse_infinity"]


class Fit(NamedTuple):
    """Arrays of one batch fit; leading axes as the spectra's (see :func:`fit_spectra`)."""

    coef: np.ndarray
    std_error: np.ndarray
    dof: np.ndarray
    status: np.ndarray
    summary: ResidualSummary


def default_threads() -> int:
    """CPUs this process may use (its affinity mask where the system has one)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def fit_spectra(
    spectra: np.ndarray,
    design: np.ndarray,
    n_components: int,
    method: Method,
    weights: np.ndarray | None = None,
    *,
    engine: Engine = "auto",
    structure_lag: int | None = None,
) -> Fit:
    """Fit every spectrum (last axis: wavelength) to the design matrix.

    Parameters
    ----------
    spectra : array, shape (..., n_wavelengths)
        Absorbance; NaN marks a missing reading. Infinity is refused.
    design : array, shape (n_wavelengths, n_terms)
        Absorptivity columns first (``n_components`` of them), then baseline columns.
    n_components : int
        How many leading columns are absorptivities (constrained ≥ 0 by ``nnls``).
    method : {"ols", "nnls"}
    weights : array, same shape as ``spectra``, optional
        Weights wᵢ = 1/σᵢ² per reading (0 or not finite: the reading is left out); each
        spectrum is then solved with its own design, rows scaled by √wᵢ
        (:func:`mixsolve.solve.per_spectrum.fit_each`, all spectra at once), and
        s² = Σ wᵢrᵢ²/(n − p) (so u stays in concentration units).
    engine : {"auto", "numpy", "compiled"}
        Who fits the complete spectra (:func:`mixsolve.solve.engine.choose_engine`).
    structure_lag : int, optional
        Readings over which the noise may be correlated, for the summary's structure z
        (:func:`mixsolve.solve.residuals.lag_figures`; None: its default).

    Returns
    -------
    Fit
        ``coef`` (..., n_terms): fitted coefficients (concentration × pathlength for
        components, AU for the offset, AU/nm for the slope). ``std_error`` (..., n_terms):
        √(s² · diag (DᵀD)⁻¹) with s² = RSS/(n − p); NaN when n − p = 0. ``dof`` (...):
        residual degrees of freedom n − p. ``status`` (...): bitwise OR of the status bits
        of :mod:`mixsolve.flags`. ``summary``: the
        :class:`~mixsolve.solve.residuals.ResidualSummary` of each residual
        (unweighted; its ``rms()`` is √(Σ r²/n) over the n readings present, AU), fields
        shaped (...).

    Raises
    ------
    InputError
        A reading is infinite (use NaN for a missing reading).

    Notes
    -----
    ``ols``: least squares through the QR factorisation of the column-scaled design.
    ``nnls``: fast combinatorial active-set NNLS (:mod:`mixsolve.solve.nnls`, or its
    compiled twin :mod:`mixsolve.solve.fused`) with the baseline columns free, checked
    against ``scipy.optimize.nnls``.
    """
    spectra = np.asarray(spectra, dtype=float)
    lead = spectra.shape[:-1]
    flat = spectra.reshape(-1, spectra.shape[-1])
    n_spec = flat.shape[0]
    n_terms = design.shape[1]
    out = _Outputs(n_spec, n_terms)
    if weights is not None:
        w = np.broadcast_to(np.asarray(weights, dtype=float), spectra.shape).reshape(flat.shape)
        refuse_infinity(flat, np.arange(n_spec))
        values = np.where(np.isfinite(w) & (w > 0), flat, np.nan)
        _fit_weighted(values, w, design, n_components, method, out, structure_lag)
    else:
        rest = np.arange(n_spec)
        if n_spec:
            plan = _plan(np.ascontiguousarray(design, dtype=float).tobytes(), design.shape,
                         n_components, method)
            if plan.full_rank:
                rest = _fit_complete(flat, plan, out, engine, structure_lag)
        if rest.size:
            refuse_infinity(flat, rest)
            _fit_groups(flat, _missing_groups(flat, rest), design, n_components, method, out,
                        structure_lag)
    return Fit(
        out.coef.reshape(*lead, n_terms),
        out.std_error.reshape(*lead, n_terms),
        out.dof.reshape(lead),
        out.status.reshape(lead),
        ResidualSummary(*(f.reshape(lead) for f in out.summary)),
    )


class _Outputs:
    """The per-spectrum arrays a fit fills in."""

    def __init__(self, n_spec: int, n_terms: int) -> None:
        self.coef = np.full((n_spec, n_terms), np.nan)
        self.std_error = np.full((n_spec, n_terms), np.nan)
        self.dof = np.zeros(n_spec, dtype=np.int64)
        self.status = np.zeros(n_spec, dtype=np.int64)
        self.summary = empty_summary(n_spec)

    def set_errors(self, rows: np.ndarray | slice, dof: int | np.ndarray, diag: np.ndarray,
                   rss: np.ndarray) -> None:
        """dof and std errors √(s² diag) with s² = rss/dof of the listed rows (one dof for
        all, or one each; diag (p,) or one row each); NO_DOF where dof is 0."""
        dof = np.broadcast_to(dof, rss.shape)
        self.dof[rows] = dof
        with np.errstate(invalid="ignore", divide="ignore"):
            s = np.sqrt(np.where(dof > 0, rss / dof, np.nan))
        self.std_error[rows] = s[:, None] * np.sqrt(diag)
        self.status[rows] |= np.where(dof > 0, 0, NO_DOF)


def _full_rank(design: np.ndarray) -> bool:
    norms = np.linalg.norm(design, axis=0)
    return bool(np.all(norms > 0)) and \
        np.linalg.matrix_rank(design / norms) == design.shape[1]


def _inverse_diag(design: np.ndarray) -> np.ndarray:
    """diag((DᵀD)⁻¹), computed on the column-scaled design (≥ 0)."""
    norms = np.linalg.norm(design, axis=0)
    scaled = design / norms
    return np.clip(np.diag(np.linalg.inv(scaled.T @ scaled)) / norms**2, 0, None)


#: check_spectra's message, which unmix leaves to the solver (it reads every value anyway).
INFINITY_MESSAGE = ("spectra: absorbance values include infinity; use NaN for a missing "
                    "reading")


def refuse_infinity(flat: np.ndarray, rows: np.ndarray) -> None:
    """Raise InfiniteReadingError, with the first position, if a listed row of ``flat``
    (n, m) holds ±inf."""
    bad = np.isinf(flat[rows])
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InfiniteReadingError(INFINITY_MESSAGE, spectrum=int(rows[i]), reading=int(j))


# --- complete spectra: one pass, numpy or compiled --------------------------------------------

class _Plan:
    """What every batch against one design shares: the scaled design's QR and the rest.

    ``full_rank`` False (fewer rows than columns, or dependent columns): nothing else is
    set, and the spectra are fitted group by group, which flags them.
    """

    def __init__(self, design: np.ndarray, n_components: int, method: Method) -> None:
        m, p = design.shape
        self.design = design
        self.n_components = n_components
        self.full_rank = m >= p and _full_rank(design)
        if not self.full_rank:
            return
        self.norms = np.linalg.norm(design, axis=0)
        q, self.r = np.linalg.qr(design / self.norms)
        self.qt = np.ascontiguousarray(q.T)
        self.design_t = np.ascontiguousarray(design.T)
        self.ols = method == "ols"
        self.constrained = np.zeros(p, dtype=bool) if self.ols else np.arange(p) < n_components
        self.rtol = kkt_rtol(m, p)
        self.max_iter = iteration_limit(p)
        self.inverse_diag = _inverse_diag(design)
        self._kernel: Any = None
        self._lock = threading.Lock()

    def compiled(self) -> Any:
        """The compiled fit of a batch against this design, or None where it does not apply
        (more than ``fused.MAX_CONSTRAINED`` components, or a degenerate passive set)."""
        with self._lock:  # the first thread builds it; the others wait and share it
            if self._kernel is None:
                self._kernel = _compiled_kernel(self) or False
        return self._kernel or None


@functools.lru_cache(maxsize=16)
def _plan(design: bytes, shape: tuple[int, int], n_components: int, method: Method) -> _Plan:
    """One plan per design: the blocks and dask chunks of one unmix call share it."""
    return _Plan(np.frombuffer(design).reshape(shape), n_components, method)


def _fit_complete(flat: np.ndarray, plan: _Plan, out: _Outputs, engine: Engine,
                  structure_lag: int | None = None) -> np.ndarray:
    """Fit every spectrum whose readings are all finite; return the rows left over."""
    n_spec, n_wl = flat.shape
    design = plan.design
    state = np.zeros(n_spec, dtype=np.int64)
    kernel = plan.compiled() if choose_engine(engine, n_spec) == "compiled" else None
    if kernel is not None:
        kernel(np.ascontiguousarray(flat), out.coef, out.summary, state,
               -1 if structure_lag is None else structure_lag)
        out.summary.n_points[_rows(state == ROW_DONE)] = n_wl
        # rows not fitted have NaN counts, which compare False
        _fix_zero_residuals(flat, out, np.flatnonzero(out.summary.n_nonzero < n_wl), design,
                            structure_lag)
        again = np.flatnonzero(state == ROW_ITERATION_LIMIT)
        if again.size:
            values = flat[again]
            out.coef[again] = nnls_batch(design, values, plan.n_components).x
            put(out.summary, again, summarise_model(values, out.coef[again], design,
                                                    structure_lag))
            state[again] = ROW_DONE
    else:
        _numpy_pass(flat, plan, out, state, structure_lag)
    done = _rows(state == ROW_DONE)
    out.set_errors(done, n_wl - design.shape[1], plan.inverse_diag,
                   out.summary.sum_squares[done])
    return np.flatnonzero(state != ROW_DONE)


def _rows(mask: np.ndarray) -> np.ndarray | slice:
    """A boolean row mask, or a slice of everything when it selects every row (no copies)."""
    return slice(None) if mask.all() else mask


def _numpy_pass(values: np.ndarray, plan: _Plan, out: _Outputs, state: np.ndarray,
                structure_lag: int | None = None) -> None:
    """The numpy engine: project, solve the reduced problems, summarise the residuals."""
    projected = values @ plan.qt.T
    finite = np.isfinite(projected).all(axis=1)
    target: np.ndarray | slice = slice(None)
    if not finite.all():
        state[~finite] = ROW_NOT_FINITE
        target = np.flatnonzero(finite)
        values, projected = values[target], projected[target]
        if not values.shape[0]:
            return
    y = np.ascontiguousarray(projected.T)
    if plan.ols:
        x = solve_triangular(plan.r, y)
    else:
        x = solve_reduced(plan.r, y, plan.constrained, plan.rtol, plan.max_iter)[0]
    coef = (x / plan.norms[:, None]).T
    out.coef[target] = coef
    put(out.summary, target, summarise_model(values, coef, plan.design, structure_lag))


def _compiled_kernel(plan: _Plan) -> Any:
    """The compiled fit of a batch, or None where it does not apply (then numpy fits)."""
    fused = compiled_engine()
    tables = fused.solver_tables(plan.r, plan.constrained)
    if tables is None:
        return None

    def kernel(values: np.ndarray, coef: np.ndarray, summary: ResidualSummary,
               state: np.ndarray, structure_lag: int) -> None:
        fused.fit_rows(values, plan.qt, plan.r, plan.norms, plan.design_t, *tables,
                       plan.rtol, plan.max_iter, plan.ols, coef,
                       *(getattr(summary, name) for name in fused.SUMMARY_FIELDS), state,
                       structure_lag=structure_lag)

    return kernel


def _fix_zero_residuals(flat: np.ndarray, out: _Outputs, rows: np.ndarray,
                        design: np.ndarray, structure_lag: int | None = None) -> None:
    """Summarise these rows again without their exact zero residuals (the runs test drops
    zeros; the compiled pass counts them as negative)."""
    if rows.size:
        values = flat[rows]
        put(out.summary, rows, summarise_model(values, out.coef[rows], design, structure_lag))


# --- spectra with missing readings: one group per pattern -----------------------------------

def _missing_groups(flat: np.ndarray, rows: np.ndarray) -> list[tuple[np.ndarray, np.ndarray]]:
    """(pattern of readings present, rows) for each pattern among ``rows``."""
    patterns, group = np.unique(~np.isnan(flat[rows]), axis=0, return_inverse=True)
    group = group.ravel()
    return [(mask, rows[group == g]) for g, mask in enumerate(patterns)]


def _fit_groups(flat: np.ndarray, groups: list[tuple[np.ndarray, np.ndarray]],
                design: np.ndarray, n_components: int, method: Method, out: _Outputs,
                structure_lag: int | None = None) -> None:
    """Fit each group of rows on the wavelengths of its mask."""
    n_terms = design.shape[1]
    for mask, rows in groups:
        if not mask.all():
            out.status[rows] |= MISSING
        sub = design[mask]
        n_used = int(mask.sum())
        if n_used < n_terms:
            out.status[rows] |= TOO_FEW
            continue
        if not _full_rank(sub):
            out.status[rows] |= DEPENDENT
            continue
        out.coef[rows] = _fit(sub, flat[np.ix_(rows, np.flatnonzero(mask))], n_components,
                              method)
        residual = flat[rows] - out.coef[rows] @ design.T
        put(out.summary, rows, summarise(flat[rows], residual, n_terms, structure_lag))
        out.set_errors(rows, n_used - n_terms, _inverse_diag(sub),
                       out.summary.sum_squares[rows])


def _fit(design: np.ndarray, values: np.ndarray, n_components: int, method: Method) -> np.ndarray:
    if method == "ols":
        # Column scaling keeps the solve well behaved when ε (~1e4) and baseline (~1) mix.
        norms = np.linalg.norm(design, axis=0)
        sol = np.linalg.pinv(design / norms) @ values.T
        return (sol / norms[:, None]).T
    return nnls_batch(design, values, n_components).x


# --- weighted fits: one design per spectrum (rows scaled by √w), all spectra at once ----------

def _fit_weighted(values: np.ndarray, w: np.ndarray, design: np.ndarray, n_components: int,
                  method: Method, out: _Outputs, structure_lag: int | None = None) -> None:
    """Fit each spectrum with its rows scaled by √w, block by block, all spectra at once.

    ``values`` (n, m) holds NaN where a reading is absent (missing, or weight 0 or not
    finite). Each spectrum's design is √wᵢ·D with the absent rows zero
    (:func:`mixsolve.solve.per_spectrum.fit_each`); s² = Σ wᵢrᵢ²/(n − p).
    """
    m, p = design.shape
    present = ~np.isnan(values)
    n_present = present.sum(axis=1)
    out.status[n_present < m] |= MISSING
    too_few = n_present < p
    out.status[too_few] |= TOO_FEW
    step = block_spectra(m, p)
    for lo in range(0, values.shape[0], step):
        rows = np.arange(lo, min(lo + step, values.shape[0]))
        rows = rows[~too_few[rows]]
        if rows.size:
            _fit_weighted_rows(values, w, present, rows, design, n_components, method, out,
                               structure_lag)


def _fit_weighted_rows(values: np.ndarray, w: np.ndarray, present: np.ndarray,
                       rows: np.ndarray, design: np.ndarray, n_components: int,
                       method: Method, out: _Outputs, structure_lag: int | None = None
                       ) -> None:
    """:func:`_fit_weighted` for the listed rows (each with at least p readings)."""
    root_w = np.sqrt(np.where(present[rows], w[rows], 0.0))
    columns = root_w[:, None, :] * design.T  # (n, p, m): fit_each reads it by columns
    fit = fit_each(columns.transpose(0, 2, 1), np.nan_to_num(values[rows]) * root_w,
                   n_components, method)
    out.status[rows[~fit.full_rank]] |= DEPENDENT
    ok = fit.full_rank
    rows = rows[ok]
    out.coef[rows] = fit.coef[ok]
    residual = values[rows] - fit.coef[ok] @ design.T
    summary = summarise(values[rows], residual, design.shape[1], structure_lag)
    put(out.summary, rows, weighted_inflation(summary, residual * root_w[ok],
                                              design.shape[1]))
    out.set_errors(rows, present[rows].sum(axis=1) - design.shape[1], fit.inverse_diag[ok],
                   fit.rss[ok])
