"""Batched non-negative least squares, some coefficients left free (baseline terms).

For every spectrum a (a row of ``spectra``) solve

    min ‖a − D x‖²   subject to  x_j ≥ 0 for the constrained columns j,

D = [K | B]: absorptivity columns K (constrained) then baseline columns B (free).

Method: the fast combinatorial active-set algorithm (Bro & De Jong 1997; Van Benthem &
Keenan 2004), i.e. Lawson & Hanson's active-set NNLS run on all spectra at once:

1. Scale D's columns to unit norm (D̂) and factor D̂ = Q R once. With y = Qᵀa,
   ‖a − D̂x‖² = ‖a‖² − ‖y‖² + ‖y − R x‖², so one pass over the data (Y = A Q) reduces
   every problem to p unknowns and p equations (p = number of columns).
2. Start from the unconstrained solution; the passive set P is {x_j > 0} plus the free
   columns; drop the negatives and re-solve until feasible (Van Benthem & Keenan).
3. Lawson–Hanson outer loop on the spectra not yet optimal: gradient w = Rᵀ(y − R x);
   move the constrained j with the largest w_j > τ into P (rejected if its trial value is
   not positive, as Lawson & Hanson do); the inner loop steps back towards the previous
   point until feasible, dropping the coefficients that reach zero.

Every least-squares subproblem is solved for all spectra sharing a passive set S at once,
from one QR factorisation of the p × |S| block R[:, S] per distinct S and back
substitution (backward stable). Free columns stay in P throughout, which treats them
exactly (it is equivalent to projecting them out).

KKT tolerance: on return, with τ = KKT_RTOL · max(‖a‖₂, ‖x̂‖₂) (x̂ the coefficients of
the unit-norm columns, w = D̂ᵀ(a − D̂x̂)) and KKT_RTOL = 10 · max(m, p) · ε (m
wavelengths, ε the float64 machine epsilon): x̂_j ≥ 0 for constrained j; w_j ≤ τ where
x̂_j = 0; |w_j| ≤ τ where x̂_j > 0 and for free j. The first is enforced, the second is
the stopping test (on the stricter ‖y‖₂ ≤ ‖a‖₂), the third follows from the stable
subproblem solves; all three are tested (tests/test_nnls.py: random, degenerate and
nearly collinear problems). A spectrum not done after ``max_iter`` outer steps
(rounding-induced cycling; the tests reach it only when forced) is solved by
``scipy.optimize.nnls`` on its reduced problem.
"""

from __future__ import annotations

import itertools
from concurrent.futures import ThreadPoolExecutor
from typing import NamedTuple

import numpy as np
from scipy.optimize import nnls as _scipy_nnls


def kkt_rtol(n_wavelengths: int, n_terms: int) -> float:
    """Relative KKT tolerance 10 · max(m, p) · ε of the batched solver."""
    return 10.0 * max(n_wavelengths, n_terms, 1) * float(np.finfo(float).eps)


class NNLSSolution(NamedTuple):
    """Coefficients of :func:`nnls_batch` and how they were reached."""

    x: np.ndarray  #: (n_spectra, p) coefficients in the units of ``design``'s columns
    #: outer Lawson–Hanson iterations of the numpy steps (0: the start was optimal; the
    #: compiled engine does not count its own, only those of rows it hands on)
    n_iter: int
    n_fallback: int  #: spectra handed to scipy.optimize.nnls after ``max_iter``


class _Subspace:
    """Least squares min ‖y − R[:, S] z‖ for many y (columns), grouped by passive set S.

    Each distinct S is factored once, R[:, S] = Q₁R₁, and solved as z = R₁⁻¹(Q₁ᵀy) by
    back substitution: backward stable, so the KKT gradient of the passive coefficients
    is zero to rounding even when columns are nearly collinear (an explicit R_S⁺ would
    leave an error growing with the condition number).
    """

    def __init__(self, r: np.ndarray) -> None:
        self.r = r
        self.p = r.shape[1]
        self.cache: dict[object, tuple[np.ndarray, np.ndarray, np.ndarray | None]] = {}

    def _factor(self, key: object, mask: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Columns of the passive set, and Q₁ᵀ with R₁ (or R_S⁺ and None if singular)."""
        if key not in self.cache:
            cols = np.flatnonzero(mask)
            block = self.r[:, cols]
            q, r1 = np.linalg.qr(block)
            diag = np.abs(np.diag(r1))
            if block.shape[1] <= block.shape[0] and diag.size \
                    and diag.min() > diag.max() * max(block.shape) * np.finfo(float).eps:
                self.cache[key] = (cols, np.ascontiguousarray(q.T), r1)
            else:  # rank deficient (duplicate columns): minimum-norm solution
                self.cache[key] = (cols, np.linalg.pinv(block), None)
        return self.cache[key]

    def _solve_set(self, key: object, mask: np.ndarray, y: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray]:
        cols, qt, r1 = self._factor(key, mask)
        t = _mm(qt, y)
        if r1 is None:
            return cols, t
        return cols, _back_substitute(r1, t)

    def codes(self, passive: np.ndarray) -> np.ndarray:
        """One integer per column of ``passive`` (p, n) naming its passive set."""
        packed = np.packbits(passive, axis=0, bitorder="little")
        if packed.shape[0] == 1:
            return packed[0]
        if packed.shape[0] == 2:
            return packed[0].astype(np.uint16) | (packed[1].astype(np.uint16) << 8)
        return np.unique(packed, axis=1, return_inverse=True)[1].ravel()

    def _key(self, code: int, mask: np.ndarray) -> object:
        return code if self.p <= 16 else mask.tobytes()

    def solve_all(self, y: np.ndarray) -> np.ndarray:
        """The unconstrained solution (every column passive) for all columns of y."""
        mask = np.ones(self.p, dtype=bool)
        _, z = self._solve_set("all", mask, y)
        return z

    def solve(self, passive: np.ndarray, y: np.ndarray) -> np.ndarray:
        """z (p, n): each column's subproblem solution on its passive set, 0 elsewhere."""
        n = passive.shape[1]
        if n == 0:
            return np.zeros((self.p, 0))
        codes = self.codes(passive)
        first, last = codes.min(), codes.max()
        if first == last:  # one passive set for all
            z = np.zeros((self.p, n))
            mask = passive[:, 0]
            cols, zs = self._solve_set(self._key(int(first), mask), mask, y)
            z[cols] = zs
            return z
        order = np.argsort(codes, kind="stable")
        ordered = codes[order]
        cuts = np.r_[0, np.flatnonzero(ordered[1:] != ordered[:-1]) + 1, n]
        y_sorted = y[:, order]
        z_sorted = np.zeros((self.p, n))
        z = np.empty((self.p, n))  # every column is written below
        for start, stop in itertools.pairwise(cuts):
            mask = passive[:, order[start]]
            cols, zs = self._solve_set(self._key(int(ordered[start]), mask), mask,
                                       y_sorted[:, start:stop])
            z_sorted[cols, start:stop] = zs
        z[:, order] = z_sorted
        return z


def nnls_batch(design: np.ndarray, spectra: np.ndarray, n_constrained: int, *,
               max_iter: int | None = None, engine: str = "auto", threads: int = 1
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
        Outer iterations before the scipy fallback; default 10·p + 10.
    engine : {"auto", "numpy", "compiled"}
        Who solves the reduced problems (:func:`mixsolve.solve.cls.choose_engine`): the
        numpy steps below, or their compiled twin (:func:`mixsolve.solve.fused.solve_rows`,
        the same steps spectrum by spectrum, when numba is installed).
    threads : int
        Threads sharing the compiled solves (the projection is one BLAS product, which
        threads itself).

    Returns
    -------
    NNLSSolution
        ``x`` (n_spectra, p) in the units of the design's columns, plus iteration counts.

    Notes
    -----
    Fast combinatorial active-set NNLS (module docstring), checked against
    ``scipy.optimize.nnls`` in the tests; its KKT conditions hold to the tolerance stated
    there (:func:`kkt_rtol`). Internally the spectra are columns (p × n arrays), so that
    the per-spectrum tests run along contiguous rows.
    """
    design = np.asarray(design, dtype=float)
    spectra = np.asarray(spectra, dtype=float)
    m, p = design.shape
    constrained = np.arange(p) < n_constrained
    norms = np.linalg.norm(design, axis=0)
    norms[norms == 0] = 1.0
    q, r = np.linalg.qr(design / norms)
    if max_iter is None:
        max_iter = 10 * p + 10
    solved = _compiled_solve(design / norms, r, q, spectra, constrained, kkt_rtol(m, p),
                             max_iter, engine, threads)
    if solved is None:
        solved = solve_reduced(r, q.T @ spectra.T, constrained, kkt_rtol(m, p), max_iter)
    x, n_iter, fallback = solved
    return NNLSSolution((x / norms[:, None]).T, n_iter, fallback)


def _compiled_solve(scaled: np.ndarray, r: np.ndarray, q: np.ndarray, spectra: np.ndarray,
                    constrained: np.ndarray, rtol: float, max_iter: int, engine: str,
                    threads: int) -> tuple[np.ndarray, int, int] | None:
    """The compiled projection and solve (no residual summary) of every spectrum, split
    among threads: x (p, n), the outer iterations of the numpy steps that finished the rows
    it handed on (it does not count its own), and the scipy fallbacks. None where that
    engine does not apply (then numpy solves everything)."""
    from mixsolve.solve.cls import ROW_DONE, choose_engine  # cls builds on this module

    if choose_engine(engine, spectra.shape[0]) != "compiled":  # type: ignore[arg-type]
        return None
    from mixsolve.solve import fused

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


def _mm(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Small-by-wide product (p × p times p × n): einsum's loop, no BLAS threading overhead."""
    return np.einsum("ij,jk->ik", a, b)


def _back_substitute(r1: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Solve R₁ z = t (R₁ upper triangular k × k) for the k × n columns of t, row by row."""
    k = r1.shape[0]
    z = np.empty_like(t)
    for i in range(k - 1, -1, -1):
        acc = t[i].copy()
        for j in range(i + 1, k):
            acc -= r1[i, j] * z[j]
        z[i] = acc / r1[i, i]
    return z


def _any(mask: np.ndarray) -> np.ndarray:
    """Column-wise any of a (p, n) boolean array, fast for small p."""
    out = mask[0].copy()
    for row in mask[1:]:
        out |= row
    return out


def _argmax(values: np.ndarray) -> np.ndarray:
    """Column-wise argmax of a (p, n) array, fast for small p."""
    best = values[0].copy()
    arg = np.zeros(values.shape[1], dtype=np.intp)
    for j in range(1, values.shape[0]):
        better = values[j] > best
        best[better] = values[j][better]
        arg[better] = j
    return arg


def solve_reduced(r: np.ndarray, y: np.ndarray, constrained: np.ndarray, rtol: float,
                  max_iter: int) -> tuple[np.ndarray, int, int]:
    """min ‖y − R x‖, x_j ≥ 0 where ``constrained``, for every column of y.

    Parameters
    ----------
    r : array, shape (p, p)
        Upper triangular factor of the column-scaled design (steps 1-3 of the module
        docstring).
    y : array, shape (p, n)
        Qᵀa of each spectrum a (one column per spectrum).
    constrained : array of bool, shape (p,)
    rtol : float
        Relative KKT tolerance (:func:`kkt_rtol`).
    max_iter : int
        Outer iterations before the scipy fallback.

    Returns
    -------
    x : ndarray, shape (p, n)
        Coefficients of the scaled columns.
    n_iter, n_fallback : int
        Outer iterations used; spectra handed to scipy.optimize.nnls.
    """
    con = constrained[:, None]
    sub = _Subspace(r)
    x = sub.solve_all(y)
    passive = (x > 0) | ~con
    # columns whose unconstrained solution is feasible are optimal already
    start = np.flatnonzero(~np.logical_and.reduce(passive, axis=0))
    if not start.size:
        return x, 0, 0
    xs, n_iter, fallback = _active_set(sub, y[:, start], passive[:, start], constrained,
                                       rtol, max_iter)
    x[:, start] = xs
    return x, n_iter, fallback


def _active_set(sub: _Subspace, y: np.ndarray, passive: np.ndarray, constrained: np.ndarray,
                rtol: float, max_iter: int) -> tuple[np.ndarray, int, int]:
    """Feasible start, then Lawson–Hanson, for columns whose passive set is not full."""
    p, n = passive.shape
    con = constrained[:, None]
    x = sub.solve(passive, y)
    negative = (x <= 0) & passive & con
    passive &= ~negative
    cols = np.flatnonzero(_any(negative))
    while cols.size:  # drop negatives until feasible (Van Benthem & Keenan's start)
        sub_passive = passive[:, cols]
        z = sub.solve(sub_passive, y[:, cols])
        x[:, cols] = z
        negative = (z <= 0) & sub_passive & con
        passive[:, cols] = sub_passive & ~negative
        cols = cols[_any(negative)]
    x[~passive] = 0.0
    y_norm = np.sqrt(np.einsum("ij,ij->j", y, y))
    rejected = np.zeros((p, n), dtype=bool)
    any_rejected = False
    cols = np.arange(n)
    n_iter = 0
    while cols.size:
        full = cols.size == n
        xc = x if full else x[:, cols]
        w = _mm(sub.r.T, (y if full else y[:, cols]) - _mm(sub.r, xc))
        tau = rtol * np.maximum(y_norm if full else y_norm[cols],
                                np.sqrt(np.einsum("ij,ij->j", xc, xc)))
        cand = (w > tau) & ~(passive if full else passive[:, cols])
        if not constrained.all():
            cand &= con
        if any_rejected:
            cand &= ~rejected[:, cols]
        keep = _any(cand)
        cols = cols[keep]
        if not cols.size:
            break
        if n_iter == max_iter:
            _fallback(sub.r, y, constrained, cols, x)
            return x, n_iter, cols.size
        n_iter += 1
        t = _argmax(np.where(cand[:, keep], w[:, keep], -np.inf))
        trial = passive[:, cols]
        trial[t, np.arange(cols.size)] = True
        z = sub.solve(trial, y[:, cols])
        ok = z[t, np.arange(cols.size)] > 0
        if not ok.all():  # w_t > τ was rounding: try the next candidate
            rejected[t[~ok], cols[~ok]] = True
            any_rejected = True
        good = cols[ok]
        if any_rejected:
            rejected[:, good] = False
        x[:, good], passive[:, good] = _step_back(sub, y[:, good], x[:, good], z[:, ok],
                                                  trial[:, ok], con)
    return x, n_iter, 0


def _step_back(sub: _Subspace, y: np.ndarray, x: np.ndarray, z: np.ndarray,
               passive: np.ndarray, con: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lawson–Hanson inner loop: from feasible x towards z, until z itself is feasible."""
    idx = np.arange(x.shape[1])
    while idx.size:
        bad = (z[:, idx] <= 0) & passive[:, idx] & con
        need = _any(bad)
        idx, bad = idx[need], bad[:, need]
        if not idx.size:
            break
        xi, zi = x[:, idx], z[:, idx]
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(bad, xi / (xi - zi), np.inf)
        j = _argmax(-ratio)
        alpha = ratio[j, np.arange(idx.size)]
        xi = xi + alpha * (zi - xi)
        pi = passive[:, idx]
        drop = con & pi & (xi <= 0)
        drop[j, np.arange(idx.size)] = True
        pi &= ~drop
        xi[~pi] = 0.0
        passive[:, idx], x[:, idx] = pi, xi
        z[:, idx] = sub.solve(pi, y[:, idx])
    return z, passive


def _fallback(r: np.ndarray, y: np.ndarray, constrained: np.ndarray, cols: np.ndarray,
              x: np.ndarray) -> None:
    """scipy.optimize.nnls on each listed column's reduced problem, free terms projected out."""
    free = ~constrained
    r_con, r_free = r[:, constrained], r[:, free]
    q = np.linalg.qr(r_free)[0] if free.any() else np.zeros((r.shape[0], 0))
    r_proj = r_con - q @ (q.T @ r_con)
    for i in cols:
        yi = y[:, i] - q @ (q.T @ y[:, i])
        c = _scipy_nnls(r_proj, yi, maxiter=50 * max(r_con.shape[1], 1))[0]
        x[constrained, i] = c
        if free.any():
            x[free, i] = np.linalg.lstsq(r_free, y[:, i] - r_con @ c, rcond=None)[0]


def nnls_free(
    constrained: np.ndarray, free: np.ndarray, spectra: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Solve NNLS for many spectra sharing one design.

    Parameters
    ----------
    constrained : array, shape (n_wavelengths, n_constrained)
        Columns whose coefficients must be ≥ 0 (absorptivities).
    free : array, shape (n_wavelengths, n_free)
        Columns whose coefficients are unconstrained (baseline); may have 0 columns.
    spectra : array, shape (n_spectra, n_wavelengths)

    Returns
    -------
    c : ndarray, shape (n_spectra, n_constrained)
    beta : ndarray, shape (n_spectra, n_free)

    Notes
    -----
    Fast combinatorial active-set NNLS (:func:`nnls_batch`), checked against
    ``scipy.optimize.nnls``.
    """
    n = constrained.shape[1]
    x = nnls_batch(np.hstack([constrained, free]), spectra, n).x
    return x[:, :n], x[:, n:]


