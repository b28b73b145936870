"""The numpy engine: batched non-negative least squares, some coefficients left free.

For every spectrum a solve

    min ‖a − D x‖²   subject to  x_j ≥ 0 for the constrained columns j,

D = [K | B]: absorptivity columns K (constrained) then baseline columns B (free), given
in reduced form (:func:`solve_reduced`; :func:`mixsolve.solve.batch.nnls_batch` reduces
a batch and picks the engine).

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

The KKT tolerance τ, the iteration limit and the scipy fallback are those of
:mod:`mixsolve.solve.engine`, shared with the compiled engine (:mod:`mixsolve.solve.fused`)
and the per-spectrum solver; the conditions are tested in tests/test_nnls.py (random,
degenerate and nearly collinear problems).
"""

from __future__ import annotations

import itertools

import numpy as np

from mixsolve.solve.engine import scipy_fallback


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
        Relative KKT tolerance (:func:`mixsolve.solve.engine.kkt_rtol`).
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
            x[:, cols] = scipy_fallback(sub.r, y[:, cols], constrained)
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
