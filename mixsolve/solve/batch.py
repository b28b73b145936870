"""NNLS of many spectra against one design, by either engine, some columns left free.

For every spectrum a (a row of ``spectra``) solve

    min ‖a − D x‖²   subject to  x_j ≥ 0 for the constrained columns j,

D = [K | B]: absorptivity columns K (constrained) then baseline columns B (free). The
design is scaled to unit column norms and factored once (D̂ = Q R); the reduced problems
min ‖Qᵀa − R x̂‖ are then solved by the numpy engine (:func:`mixsolve.solve.nnls.solve_reduced`,
all spectra at once) or by the compiled one (:func:`mixsolve.solve.fused.fit_rows`,
spectrum by spectrum, split among threads), as :func:`mixsolve.solve.engine.choose_engine`
decides. Both meet the KKT tolerance of :mod:`mixsolve.solve.engine`.
"""

from __future__ import annotations

import itertools
from concurrent.futures import ThreadPoolExecutor
from types import ModuleType
from typing import NamedTuple

import numpy as np

from mixsolve.solve.engine import ROW_DONE, Engine, choose_engine, iteration_limit, kkt_rtol
from mixsolve.solve.nnls import solve_reduced


class NNLSSolution(NamedTuple):
    """Coefficients of :func:`nnls_batch` and how they were reached."""

    x: np.ndarray  #: (n_spectra, p) coefficients in the units of ``design``'s columns
    #: outer Lawson–Hanson iterations of the numpy steps (0: the start was optimal; the
    #: compiled engine does not count its own, only those of rows it hands on)
    n_iter: int
    n_fallback: int  #: spectra handed to scipy.optimize.nnls after ``max_iter``


def compiled_engine() -> ModuleType:
    """The compiled engine, :mod:`mixsolve.solve.fused`, imported when first used: it
    loads numba (about 0.5 s), which jobs fitted by numpy never pay."""
    from mixsolve.solve import fused

    return fused


def nnls_batch(design: np.ndarray, spectra: np.ndarray, n_constrained: int, *,
               max_iter: int | None = None, engine: Engine = "auto", threads: int = 1
               ) -> NNLSSolution:
    """Solve NNLS for many spectra against one design, the trailing columns left free.

    Parameters
    ----------
    design : array, shape (n_wavelengths, p)
        Constrained columns first (``n_constrained`` of them), then free columns.
    spectra : array, shape (n_spectra, n_wavelengths)
        Finite values (the caller removes missing readings).
    n_constrained : int
        Number of leading columns whose coefficients must be ≥ 0.
    max_iter : int, optional
        Outer iterations before the scipy fallback; default
        :func:`mixsolve.solve.engine.iteration_limit`.
    engine : {"auto", "numpy", "compiled"}
        Who solves the reduced problems (:func:`mixsolve.solve.engine.choose_engine`): the
        numpy steps of :mod:`mixsolve.solve.nnls`, or their compiled twin
        (:func:`mixsolve.solve.fused.fit_rows`, the same steps spectrum by spectrum).
    threads : int
        Threads sharing the compiled solves (the projection is one BLAS product, which
        threads itself).

    Returns
    -------
    NNLSSolution
        ``x`` (n_spectra, p) in the units of the design's columns, plus iteration counts.

    Notes
    -----
    Fast combinatorial active-set NNLS (:mod:`mixsolve.solve.nnls`), checked against
    ``scipy.optimize.nnls`` in the tests; its KKT conditions hold to the tolerance stated
    in :mod:`mixsolve.solve.engine` (:func:`~mixsolve.solve.engine.kkt_rtol`).
    """
    design = np.asarray(design, dtype=float)
    spectra = np.asarray(spectra, dtype=float)
    m, p = design.shape
    constrained = np.arange(p) < n_constrained
    norms = np.linalg.norm(design, axis=0)
    norms[norms == 0] = 1.0
    q, r = np.linalg.qr(design / norms)
    if max_iter is None:
        max_iter = iteration_limit(p)
    solved = None
    if choose_engine(engine, spectra.shape[0]) == "compiled":
        solved = _compiled_solve(design / norms, r, q, spectra, constrained, kkt_rtol(m, p),
                                 max_iter, threads)
    if solved is None:
        solved = solve_reduced(r, q.T @ spectra.T, constrained, kkt_rtol(m, p), max_iter)
    x, n_iter, fallback = solved
    return NNLSSolution((x / norms[:, None]).T, n_iter, fallback)


def _compiled_solve(scaled: np.ndarray, r: np.ndarray, q: np.ndarray, spectra: np.ndarray,
                    constrained: np.ndarray, rtol: float, max_iter: int, threads: int
                    ) -> tuple[np.ndarray, int, int] | None:
    """The compiled projection and solve (no residual summary) of every spectrum, split
    among threads: x (p, n), the outer iterations of the numpy steps that finished the rows
    it handed on (it does not count its own), and the scipy fallbacks. None where that
    engine does not apply (then numpy solves everything)."""
    fused = compiled_engine()
    tables = fused.solver_tables(r, constrained)
    if tables is None:
        return None
    n, p = spectra.shape[0], r.shape[0]
    values = np.ascontiguousarray(spectra)
    x = np.empty((n, p))
    state = np.empty(n, dtype=np.int64)
    unused = np.empty(n)  # the residual summary is not asked for
    qt, scaled_t = np.ascontiguousarray(q.T), np.ascontiguousarray(scaled.T)

    def run(part: slice) -> None:
        fused.fit_rows(values[part], qt, r, np.ones(p), scaled_t, *tables, rtol,
                       max_iter, False, x[part],
                       *[unused[part]] * len(fused.SUMMARY_FIELDS), state[part], False)

    bounds = np.linspace(0, n, max(1, threads) + 1).astype(int)
    parts = [slice(int(a), int(b)) for a, b in itertools.pairwise(bounds)]
    if len(parts) > 1:
        with ThreadPoolExecutor(len(parts)) as pool:
            list(pool.map(run, parts))
    else:
        run(parts[0])
    x = x.T.copy()
    again = np.flatnonzero(state != ROW_DONE)  # the numpy steps (and scipy) finish these
    if not again.size:
        return x, 0, 0
    x[:, again], n_iter, fallback = solve_reduced(r, q.T @ values[again].T, constrained,
                                                  rtol, max_iter)
    return x, n_iter, fallback
