"""Least squares and NNLS for many spectra, each against its own design matrix.

For every spectrum i solve

    min ‖aᵢ − Dᵢ x‖²   subject to  x_j ≥ 0 for the constrained columns j,

with one design Dᵢ (m × p) per spectrum: rows scaled by √wᵢ in a weighted fit, the library
shifted by the spectrum's own offset in the shift fit. A reading that is absent from a
spectrum comes in as a zero row of Dᵢ and a zero value (weight 0). The constrained columns
come first (absorptivities); the rest (baseline terms) are free.

Method, vectorised over spectra (numpy only, no loop over spectra):

1. Scale the columns of every Dᵢ to unit norm (D̂ᵢ) and reduce each problem to p unknowns:
   Householder QR (Golub & Van Loan, *Matrix Computations*, §5.2; from memory) of
   the augmented [D̂ᵢ | aᵢ] gives Rᵢ (p × p), yᵢ = Qᵢᵀaᵢ and ρᵢ = ‖aᵢ − QᵢQᵢᵀaᵢ‖, so that
   ‖aᵢ − D̂ᵢx‖² = ρᵢ² + ‖yᵢ − Rᵢx‖² (no normal equations: the condition number is not
   squared). The reflections run on all spectra of a cache-sized chunk at once.
2. Rank: a spectrum is solved when every column is non-zero on its rows and the singular
   values of Rᵢ satisfy σ_min > σ_max · max(m, p) · ε (the default tolerance of
   ``numpy.linalg.matrix_rank``; m rows counted present or not). Others (fewer readings
   present than terms, or dependent columns) are reported in ``full_rank`` and left NaN.
3. ``ols``: back substitution Rᵢx = yᵢ.
4. ``nnls``: Lawson & Hanson's active-set NNLS (*Solving Least Squares Problems*, 1974,
   ch. 23), with the start and stopping rule of :mod:`mixsolve.solve.nnls`: the
   unconstrained solution, negatives dropped and re-solved until feasible (Van Benthem &
   Keenan 2004); then the outer loop on the spectra not yet optimal (gradient
   w = Rᵀ(y − Rx); the constrained j with the largest wⱼ > τ enters the passive set P,
   rejected if its trial value is not positive) and the inner loop stepping back until
   feasible. Each spectrum's subproblem min ‖y − R[:, P] z‖ is solved stably for all
   spectra at once: the columns outside P are zeroed and rows eⱼᵀ appended for them, and
   the 2p × p stack (with y appended as a last column) is reduced by the same Householder
   QR; back substitution then gives z with zⱼ = 0 outside P and the condition number of
   R[:, P] not squared.

KKT tolerance, iteration limit and scipy fallback: those of :mod:`mixsolve.solve.engine`
(τ = 10 · max(m, p) · ε · max(‖aᵢ‖₂, ‖x̂ᵢ‖₂)), tested in tests/test_per_spectrum.py.

Memory: the reduction works on chunks of ``CHUNK_SPECTRA`` spectra; callers that build the
designs cut their batch with :func:`block_spectra` so that one block of designs stays
within ``BLOCK_BYTES``.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from mixsolve.solve.engine import Method, iteration_limit, kkt_rtol, scipy_fallback
from mixsolve.solve.residuals import ResidualSummary, summarise

#: Bytes of one block of designs (n × m × p float64) that callers build at a time.
BLOCK_BYTES = 16 * 2**20
#: Spectra reduced together (the Householder reflections stay in cache).
CHUNK_SPECTRA = 128

__all__ = ["BLOCK_BYTES", "EachFit", "block_spectra", "fit_each", "inverse_diagonal",
           "weighted_inflation"]


class EachFit(NamedTuple):
    """Result of :func:`fit_each`; NaN rows where ``full_rank`` is False."""

    coef: np.ndarray  #: (n, p) coefficients, in the units of the design's columns
    rss: np.ndarray  #: (n,) Σ (a − D x)² over the rows (values' units squared)
    inverse_diag: np.ndarray  #: (n, p) diag((DᵢᵀDᵢ)⁻¹), reciprocal column units squared
    full_rank: np.ndarray  #: (n,) bool: the design had full column rank


class _Reduced(NamedTuple):
    """The p-unknown form of every problem (step 1 of the module docstring)."""

    norms: np.ndarray  #: (n, p) column norms (1 where a column is zero)
    r: np.ndarray  #: (n, p, p) upper triangular
    y: np.ndarray  #: (n, p) Qᵀa
    rho: np.ndarray  #: (n,) norm of the part of a outside the column space
    full_rank: np.ndarray  #: (n,) bool


def weighted_inflation(summary: ResidualSummary, weighted_residual: np.ndarray,
                       n_terms: int) -> ResidualSummary:
    """``summary`` with the correlated-noise inflation of the weighted residual.

    Parameters
    ----------
    summary : ResidualSummary
        Of the unweighted residual r (its runs, lag-1 and structure figures stay).
    weighted_residual : array, shape (n, m)
        √wᵢ·rᵢ (NaN where a reading is absent): the residual of the problem whose
        s² = Σ wᵢrᵢ²/(n − p) the standard errors use, so its autocorrelation is the one that
        inflates them (:func:`mixsolve.solve.residuals.lag_figures`).
    n_terms : int
        p, the fitted coefficients.
    """
    weighted = summarise(weighted_residual, weighted_residual, n_terms)
    return summary._replace(noise_inflation=weighted.noise_inflation,
                            noise_lags=weighted.noise_lags)


def block_spectra(n_wavelengths: int, n_terms: int) -> int:
    """Spectra per block so that one block of designs (n × m × p float64) fits
    ``BLOCK_BYTES`` (at least 1)."""
    return max(1, BLOCK_BYTES // (8 * max(n_wavelengths, 1) * max(n_terms, 1)))


def fit_each(designs: np.ndarray, values: np.ndarray, n_constrained: int, method: Method,
             *, max_iter: int | None = None) -> EachFit:
    """Solve OLS or NNLS for many spectra, each with its own design.

    Parameters
    ----------
    designs : array, shape (n_spectra, n_rows, n_terms)
        One design per spectrum (column units: those of ``values`` per unit coefficient),
        constrained columns first. An absent reading is a zero row. Fastest as the
        transposed view of a C-contiguous (n_spectra, n_terms, n_rows) array.
    values : array, shape (n_spectra, n_rows)
        Finite values (AU, or AU × √w in a weighted fit); 0 where a reading is absent.
    n_constrained : int
        Leading columns constrained ≥ 0 by ``nnls`` (the rest are free).
    method : {"ols", "nnls"}
    max_iter : int, optional
        Outer Lawson–Hanson iterations before the scipy fallback; default
        :func:`mixsolve.solve.engine.iteration_limit`.

    Returns
    -------
    EachFit
        ``coef`` (n_spectra, n_terms), ``rss`` (n_spectra,) = Σ (a − D·coef)²,
        ``inverse_diag`` (n_spectra, n_terms) = diag((DᵀD)⁻¹) (for standard errors; computed
        from the triangular factor, never from DᵀD), and ``full_rank`` (n_spectra,).
        Spectra without full column rank have NaN coef, rss and inverse_diag.

    Notes
    -----
    Householder reduction, then back substitution (``ols``) or Lawson & Hanson's active-set
    NNLS (``nnls``), all vectorised over spectra (module docstring, with the KKT tolerance);
    checked against ``numpy.linalg.lstsq`` and ``scipy.optimize.nnls`` per spectrum.
    """
    designs = np.asarray(designs, dtype=float)
    values = np.asarray(values, dtype=float)
    n, m, p = designs.shape
    red = _reduce(designs, values)
    ok = np.flatnonzero(red.full_rank)
    coef = np.full((n, p), np.nan)
    rss = np.full(n, np.nan)
    diag = np.full((n, p), np.nan)
    if ok.size:
        r, y = red.r[ok], red.y[ok]
        if method == "ols":
            x = _back_substitute(r, y)
        else:
            constrained = np.arange(p) < n_constrained
            x = _nnls(r, y, constrained, kkt_rtol(m, p),
                      iteration_limit(p) if max_iter is None else max_iter)
        gap = y - np.einsum("nij,nj->ni", r, x)
        rss[ok] = red.rho[ok] ** 2 + np.einsum("ni,ni->n", gap, gap)
        coef[ok] = x / red.norms[ok]
        diag[ok] = _inverse_diag(r) / red.norms[ok] ** 2
    return EachFit(coef, rss, diag, red.full_rank)


def inverse_diagonal(designs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """diag((DᵢᵀDᵢ)⁻¹) of many designs, from their triangular factors.

    Parameters
    ----------
    designs : array, shape (n_spectra, n_rows, n_terms)

    Returns
    -------
    diag : ndarray, shape (n_spectra, n_terms)
        Reciprocal column units squared; NaN where the design lacks full column rank.
    full_rank : ndarray of bool, shape (n_spectra,)
    """
    designs = np.asarray(designs, dtype=float)
    red = _reduce(designs, np.zeros(designs.shape[:2]))
    diag = np.full((designs.shape[0], designs.shape[2]), np.nan)
    ok = np.flatnonzero(red.full_rank)
    if ok.size:
        diag[ok] = _inverse_diag(red.r[ok]) / red.norms[ok] ** 2
    return diag, red.full_rank


# --- reduction: Householder QR of [D̂ | a] -------------------------------------------------

def _reduce(designs: np.ndarray, values: np.ndarray) -> _Reduced:
    """Column-scale, then reduce [D̂ᵢ | aᵢ] to triangular form, chunk by chunk."""
    n, m, p = designs.shape
    rows = max(m, p + 1)  # room for the residual norm below R
    norms = np.empty((n, p))
    r_aug = np.empty((n, p + 1, p + 1))
    for lo in range(0, n, CHUNK_SPECTRA):
        hi = min(lo + CHUNK_SPECTRA, n)
        aug = np.zeros((hi - lo, p + 1, rows))  # columns of [D | a], contiguous rows
        aug[:, :p, :m] = designs[lo:hi].transpose(0, 2, 1)
        aug[:, p, :m] = values[lo:hi]
        cols = aug[:, :p]
        norms[lo:hi] = np.sqrt(np.einsum("npm,npm->np", cols, cols))
        cols /= np.where(norms[lo:hi] > 0, norms[lo:hi], 1.0)[:, :, None]
        r_aug[lo:hi] = _householder_r(aug)
    nonzero = (norms > 0).all(axis=1)
    norms[norms == 0] = 1.0
    r = r_aug[:, :p, :p]
    return _Reduced(norms, r, r_aug[:, :p, p], np.abs(r_aug[:, p, p]),
                    nonzero & _full_rank(r, m))


def _householder_r(columns: np.ndarray) -> np.ndarray:
    """R of the Householder QR of many matrices given by columns, shape (n, k, m), m ≥ k.

    Returns R (n, k, k), upper triangular, with the sign convention R_jj = −sign(x₀)‖x‖
    (no cancellation). ``columns`` is overwritten.
    """
    n, k, _ = columns.shape
    r = np.zeros((n, k, k))
    for j in range(k):
        v = columns[:, j, j:]  # becomes the Householder vector, in place
        alpha = np.sqrt(np.einsum("nm,nm->n", v, v))
        beta = np.where(v[:, 0] >= 0, -alpha, alpha)
        r[:, j, j] = beta
        if j + 1 == k:
            break
        vv = 2.0 * alpha * (alpha + np.abs(v[:, 0]))  # ‖x − βe₁‖², no cancellation
        v[:, 0] -= beta
        rest = columns[:, j + 1:, j:]
        dots = np.matmul(rest, v[:, :, None])[:, :, 0]
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(vv[:, None] > 0, 2.0 * dots / vv[:, None], 0.0)
        rest -= scale[:, :, None] * v[:, None, :]
        r[:, j, j + 1:] = rest[:, :, 0]
    return r


def _full_rank(r: np.ndarray, m: int) -> np.ndarray:
    """σ_min > σ_max · max(m, p) · ε for each triangular factor (numpy's matrix_rank)."""
    n, p, _ = r.shape
    if not n:
        return np.zeros(0, dtype=bool)
    if not np.isfinite(r).all(axis=(1, 2)).all():
        finite = np.isfinite(r).all(axis=(1, 2))
        out = np.zeros(n, dtype=bool)
        out[finite] = _full_rank(r[finite], m)
        return out
    s = np.linalg.svd(r, compute_uv=False)
    return s[:, -1] > s[:, 0] * max(m, p) * np.finfo(float).eps


def _back_substitute(r: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Solve Rᵢ zᵢ = tᵢ for every i: r (n, p, p) upper triangular, t (n, p) or (n, p, q)."""
    p = r.shape[1]
    z = np.empty_like(t)
    for i in range(p - 1, -1, -1):
        acc = t[:, i] - np.einsum("nk,nk...->n...", r[:, i, i + 1:], z[:, i + 1:])
        diag = r[:, i, i] if t.ndim == 2 else r[:, i, i, None]
        z[:, i] = acc / diag
    return z


def _inverse_diag(r: np.ndarray) -> np.ndarray:
    """diag(R⁻¹R⁻ᵀ) = row sums of squares of R⁻¹, for each triangular factor."""
    n, p, _ = r.shape
    inv = _back_substitute(r, np.broadcast_to(np.eye(p), (n, p, p)).copy())
    return np.einsum("nij,nij->ni", inv, inv)


# --- NNLS on the reduced problems -----------------------------------------------------------

def _solve_passive(r: np.ndarray, y: np.ndarray, passive: np.ndarray) -> np.ndarray:
    """z (n, p): each min ‖yᵢ − Rᵢ[:, P] z‖ with zⱼ = 0 outside Pᵢ (module docstring, 4)."""
    n, p = y.shape
    if not n:
        return np.zeros((0, p))
    stack = np.zeros((n, p + 1, 2 * p))  # columns of [R_P ; E] and of [y ; 0]
    stack[:, :p, :p] = r.transpose(0, 2, 1) * passive[:, :, None]
    at = np.arange(p)
    stack[:, at, p + at] = ~passive  # eⱼᵀ rows for the columns outside P
    stack[:, p, :p] = y
    r_aug = _householder_r(stack)
    z = _back_substitute(r_aug[:, :p, :p], r_aug[:, :p, p])
    z[~passive] = 0.0
    return z


def _nnls(r: np.ndarray, y: np.ndarray, constrained: np.ndarray, rtol: float,
          max_iter: int) -> np.ndarray:
    """x (n, p) ≥ 0 where ``constrained``, minimising ‖yᵢ − Rᵢx‖ for every spectrum."""
    x = _back_substitute(r, y)
    passive = (x > 0) | ~constrained
    start = np.flatnonzero(~passive.all(axis=1))
    if start.size:
        x[start] = _active_set(r[start], y[start], passive[start], constrained, rtol,
                               max_iter)
    return x


def _active_set(r: np.ndarray, y: np.ndarray, passive: np.ndarray, constrained: np.ndarray,
                rtol: float, max_iter: int) -> np.ndarray:
    """Feasible start, then Lawson–Hanson, for spectra whose passive set is not full."""
    n, p = passive.shape
    x = _solve_passive(r, y, passive)
    negative = (x <= 0) & passive & constrained
    passive &= ~negative
    rows = np.flatnonzero(negative.any(axis=1))
    while rows.size:  # drop negatives until feasible (Van Benthem & Keenan's start)
        sub = passive[rows]
        z = _solve_passive(r[rows], y[rows], sub)
        x[rows] = z
        negative = (z <= 0) & sub & constrained
        passive[rows] = sub & ~negative
        rows = rows[negative.any(axis=1)]
    x[~passive] = 0.0
    y_norm = np.sqrt(np.einsum("ni,ni->n", y, y))
    rejected = np.zeros((n, p), dtype=bool)
    rows = np.arange(n)
    n_iter = 0
    while rows.size:
        cand, w = _candidates(r[rows], y[rows], x[rows], passive[rows] | rejected[rows],
                              y_norm[rows], constrained, rtol)
        keep = cand.any(axis=1)
        rows, cand, w = rows[keep], cand[keep], w[keep]
        if not rows.size:
            break
        if n_iter == max_iter:
            for i in rows:
                x[i] = scipy_fallback(r[i], y[i][:, None], constrained)[:, 0]
            break
        n_iter += 1
        at = np.arange(rows.size)
        t = np.argmax(np.where(cand, w, -np.inf), axis=1)
        trial = passive[rows]
        trial[at, t] = True
        z = _solve_passive(r[rows], y[rows], trial)
        ok = z[at, t] > 0
        rejected[rows[~ok], t[~ok]] = True  # w_t > τ was rounding: try the next candidate
        good = rows[ok]
        rejected[good] = False
        x[good], passive[good] = _step_back(r[good], y[good], x[good], z[ok], trial[ok],
                                            constrained)
    return x


def _candidates(r: np.ndarray, y: np.ndarray, x: np.ndarray, excluded: np.ndarray,
                y_norm: np.ndarray, constrained: np.ndarray, rtol: float
                ) -> tuple[np.ndarray, np.ndarray]:
    """Constrained columns outside P (and not rejected) whose gradient wⱼ exceeds τ."""
    w = np.einsum("nji,nj->ni", r, y - np.einsum("nij,nj->ni", r, x))
    tau = rtol * np.maximum(y_norm, np.sqrt(np.einsum("ni,ni->n", x, x)))
    return (w > tau[:, None]) & ~excluded & constrained, w


def _step_back(r: np.ndarray, y: np.ndarray, x: np.ndarray, z: np.ndarray,
               passive: np.ndarray, constrained: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lawson–Hanson inner loop: from feasible x towards z, until z itself is feasible."""
    idx = np.arange(x.shape[0])
    while idx.size:
        bad = (z[idx] <= 0) & passive[idx] & constrained
        need = bad.any(axis=1)
        idx, bad = idx[need], bad[need]
        if not idx.size:
            break
        xi, zi = x[idx], z[idx]
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(bad, np.nan_to_num(xi / (xi - zi), nan=0.0), np.inf)
        at = np.arange(idx.size)
        j = np.argmin(ratio, axis=1)
        alpha = ratio[at, j]
        xi = xi + alpha[:, None] * (zi - xi)
        pi = passive[idx]
        drop = constrained & pi & (xi <= 0)
        drop[at, j] = True
        pi &= ~drop
        xi[~pi] = 0.0
        passive[idx], x[idx] = pi, xi
        z[idx] = _solve_passive(r[idx], y[idx], pi)
    return z, passive
