"""Compiled one-pass fit of many spectra: projection, NNLS or OLS, residual summary.

The compiled engine. Optional: this module needs numba (``pip install 'mixsolve[fast]'``);
without it the same method runs in numpy (:mod:`mixsolve.solve.nnls`). Both solve the same
problems to the KKT tolerance of :mod:`mixsolve.solve.engine` and agree to rounding;
:mod:`mixsolve.solve.cls` and :mod:`mixsolve.solve.batch` choose between them.

Per spectrum a (a row of the spectra), with D̂ = Q R the QR factorisation of the design
scaled to unit column norms (computed once, by the caller):

1. y = Qᵀa (p dot products), and the largest and smallest reading, while a is read once
   from memory (then it stays in the first-level cache for the rest);
2. the reduced problem min ‖y − R x̂‖, x̂_j ≥ 0 for the constrained columns, by
   Lawson & Hanson's active-set method (the same steps, start and stopping test as the
   batched numpy solver, :mod:`mixsolve.solve.nnls`), every subproblem solved by back
   substitution from a QR factorisation of R[:, S] precomputed for every passive set S
   (2^k sets for k constrained columns: :func:`subset_factors`);
3. the residual r = a − D x (x = x̂ / column norms) while a is still in the first-level
   cache, summarised as Σr², Σrᵢrᵢ₊₁, how many rᵢ are > 0 and ≠ 0, how many sign
   changes occur between neighbours, and the lag figures of
   :func:`mixsolve.solve.residuals.lag_figures` (autocovariances up to a few lags: the
   correlated-noise inflation f, its window L and the structure z). The fitted and
   residual spectra are not stored.

The kernel is serial and releases the GIL (``nogil``): the caller runs it on blocks of
spectra in several threads, or inside dask's threads. The sums of steps 1 and 3 may be
reassociated (``REORDER``), which changes their last bits but keeps NaN and infinity.

A row whose projection y is not finite (a missing reading, an infinity, or an overflow)
is not fitted here: its state is ``ROW_NOT_FINITE`` and the caller fits it another way.
A row not solved within ``max_iter`` outer iterations gets ``ROW_ITERATION_LIMIT`` (the
row states and the iteration rule are those of :mod:`mixsolve.solve.engine`).
"""

from __future__ import annotations

import numba
import numpy as np

from mixsolve.solve.engine import ROW_DONE, ROW_ITERATION_LIMIT, ROW_NOT_FINITE

#: Largest number of constrained columns handled here (2^k passive sets are precomputed).
MAX_CONSTRAINED = 10
#: Largest number of columns in all: the passive-set tables are indexed by p-bit masks
#: (2^p entries of p × p), so they stay within ~10 MB.
MAX_TERMS = 12
#: Floating-point liberties allowed in the sums: reassociation (so that they vectorise) and
#: fused multiply-add, but not the assumption that no NaN or infinity occurs.
REORDER = {"reassoc", "contract", "nsz", "arcp"}
#: The fields of :class:`mixsolve.solve.residuals.ResidualSummary` that
#: :func:`fit_rows` fills, in the order of its arguments (``n_points`` is the caller's).
SUMMARY_FIELDS = ("sum_squares", "lag_sum", "n_positive", "n_nonzero", "sign_changes",
                  "absorbance_max", "absorbance_min", "noise_inflation", "noise_lags",
                  "structure_z")
#: :data:`mixsolve.solve.residuals.BARTLETT_LAG_CONSTANT` (numba reads module globals as
#: constants).
BARTLETT_LAG_CONSTANT = 1.1447


def solver_tables(r: np.ndarray, constrained: np.ndarray
                  ) -> tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """The bit mask of the constrained columns, then :func:`subset_factors`, in the order
    :func:`fit_rows` takes them; None where the compiled solver does not apply (too many
    columns, or a degenerate passive set: then numpy solves)."""
    try:
        factors = subset_factors(r, constrained)
    except ValueError:
        return None
    return (int(sum(1 << int(j) for j in np.flatnonzero(constrained))), *factors)


def subset_factors(r: np.ndarray, constrained: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """QR factors of R[:, S] for every passive set S (free columns always in S).

    Parameters
    ----------
    r : array, shape (p, p)
        Upper triangular factor of the column-scaled design.
    constrained : array of bool, shape (p,)
        Columns whose coefficients must be ≥ 0.

    Returns
    -------
    qt, rs, cols, size : arrays indexed by the bit mask of S (bit j set: column j passive)
        ``qt[S, :k]`` is Q_Sᵀ (k × p), ``rs[S, :k, :k]`` is R_S, ``cols[S, :k]`` the
        columns of S, ``size[S]`` = k = |S|. Masks that leave out a free column are not
        used and stay empty.

    Raises
    ------
    ValueError
        More than ``MAX_CONSTRAINED`` constrained columns or ``MAX_TERMS`` columns, or a
        rank-deficient R[:, S] (the caller then uses the numpy solver, which handles it).
    """
    p = r.shape[1]
    con = np.flatnonzero(constrained)
    if con.size > MAX_CONSTRAINED or p > MAX_TERMS:
        raise ValueError(f"{con.size} constrained columns of {p}; at most {MAX_CONSTRAINED} "
                         f"of {MAX_TERMS}")
    free_bits = sum(1 << int(j) for j in np.flatnonzero(~constrained))
    qt = np.zeros((1 << p, p, p))
    rs = np.zeros((1 << p, p, p))
    cols = np.zeros((1 << p, p), dtype=np.int64)
    size = np.zeros(1 << p, dtype=np.int64)
    tiny = max(r.shape) * np.finfo(float).eps
    for subset in range(1 << con.size):
        mask = free_bits | sum(1 << int(con[i]) for i in range(con.size) if subset >> i & 1)
        chosen = [j for j in range(p) if mask >> j & 1]
        if not chosen:
            continue
        q, r1 = np.linalg.qr(r[:, chosen])
        diag = np.abs(np.diag(r1))
        if diag.min() <= diag.max() * tiny:
            raise ValueError("rank-deficient passive set")
        k = len(chosen)
        qt[mask, :k] = q.T
        rs[mask, :k, :k] = r1
        cols[mask, :k] = chosen
        size[mask] = k
    return qt, rs, cols, size


@numba.njit(nogil=True, cache=True, fastmath=REORDER)
def _project(row: np.ndarray, qt: np.ndarray, y: np.ndarray, scratch: np.ndarray
             ) -> tuple[float, float]:
    """y = Qᵀ row; return (max, min) of the row (``scratch``: two int64).

    A NaN or infinite reading makes y non-finite (``REORDER`` keeps NaN and infinity).
    """
    _dots(row, qt, y)
    return _extent(row.view(np.int64), scratch)


@numba.njit(nogil=True, cache=True, fastmath=REORDER)
def _dots(row: np.ndarray, qt: np.ndarray, y: np.ndarray) -> None:
    """y = Qᵀ row (NaN and infinity propagate)."""
    m = row.shape[0]
    for k in range(qt.shape[0]):
        acc = 0.0
        for j in range(m):
            acc += qt[k, j] * row[j]
        y[k] = acc


#: Sign mask of a float64 as int64: k ↦ k ^ ((k >> 63) & SIGNLESS) orders float64 bit
#: patterns like the numbers (negatives reversed), so integer extremes, which vectorise,
#: give the float extremes.
SIGNLESS = np.int64(0x7FFFFFFFFFFFFFFF)


@numba.njit(nogil=True, cache=True)
def _extent(bits: np.ndarray, out: np.ndarray) -> tuple[float, float]:
    """(max, min) of float64 values given as their int64 bit patterns (no NaN among them
    matters: a row with NaN is not fitted here); ``out``: two int64 of scratch space."""
    high = np.int64(-9223372036854775807) - 1
    low = np.int64(9223372036854775807)
    for j in range(bits.shape[0]):
        key = bits[j] ^ ((bits[j] >> 63) & SIGNLESS)
        high = max(high, key)
        low = min(low, key)
    out[0] = high ^ ((high >> 63) & SIGNLESS)
    out[1] = low ^ ((low >> 63) & SIGNLESS)
    values = out.view(np.float64)
    return values[0], values[1]


@numba.njit(nogil=True, cache=True)
def _solve_set(mask: int, y: np.ndarray, qt: np.ndarray, rs: np.ndarray, cols: np.ndarray,
               size: np.ndarray, t: np.ndarray, z: np.ndarray) -> None:
    """z = the least-squares solution on passive set ``mask`` (0 off the set)."""
    p = y.shape[0]
    k = size[mask]
    for i in range(k):
        acc = 0.0
        for j in range(p):
            acc += qt[mask, i, j] * y[j]
        t[i] = acc
    for j in range(p):
        z[j] = 0.0
    for i in range(k - 1, -1, -1):
        acc = t[i]
        for j in range(i + 1, k):
            acc -= rs[mask, i, j] * t[j]
        t[i] = acc / rs[mask, i, i]
        z[cols[mask, i]] = t[i]


@numba.njit(nogil=True, cache=True)
def _nnls(y: np.ndarray, r: np.ndarray, con_mask: int, qt: np.ndarray, rs: np.ndarray,
          cols: np.ndarray, size: np.ndarray, rtol: float, max_iter: int,
          x: np.ndarray, z: np.ndarray, t: np.ndarray, res: np.ndarray) -> int:
    """Active-set NNLS of min ‖y − R x‖ (constrained bits of ``con_mask``); x is written.

    ``z``, ``t`` and ``res`` (p each) are scratch space. Returns the outer iterations
    used, or −1 when ``max_iter`` was reached.
    """
    p = y.shape[0]
    full = (1 << p) - 1
    _solve_set(full, y, qt, rs, cols, size, t, z)
    passive = full
    while True:  # drop the negatives until feasible (Van Benthem & Keenan's start)
        bad = 0
        for j in range(p):
            if (passive >> j) & 1 and (con_mask >> j) & 1 and z[j] <= 0.0:
                bad |= 1 << j
        if bad == 0:
            break
        passive &= ~bad
        _solve_set(passive, y, qt, rs, cols, size, t, z)
    for j in range(p):
        x[j] = z[j] if (passive >> j) & 1 else 0.0
    if passive == full:
        return 0
    y_norm = 0.0
    for j in range(p):
        y_norm += y[j] * y[j]
    y_norm = np.sqrt(y_norm)
    rejected = 0
    n_iter = 0
    while True:
        for i in range(p):  # residual of the reduced problem, then w = Rᵀ res
            acc = y[i]
            for j in range(i, p):
                acc -= r[i, j] * x[j]
            res[i] = acc
        x_norm = 0.0
        for j in range(p):
            x_norm += x[j] * x[j]
        tau = rtol * max(y_norm, np.sqrt(x_norm))
        best = -1
        best_w = 0.0
        for j in range(p):
            if not ((con_mask >> j) & 1) or (passive >> j) & 1 or (rejected >> j) & 1:
                continue
            w = 0.0
            for i in range(j + 1):
                w += r[i, j] * res[i]
            if w > tau and (best < 0 or w > best_w):
                best = j
                best_w = w
        if best < 0:
            return n_iter
        if n_iter == max_iter:
            return -1
        n_iter += 1
        trial = passive | (1 << best)
        _solve_set(trial, y, qt, rs, cols, size, t, z)
        if z[best] <= 0.0:  # w_best > τ was rounding: try the next candidate
            rejected |= 1 << best
            continue
        rejected = 0
        passive = trial
        while True:  # Lawson–Hanson inner loop: step back until z is feasible
            alpha = np.inf
            first = -1
            for j in range(p):
                if (passive >> j) & 1 and (con_mask >> j) & 1 and z[j] <= 0.0:
                    ratio = x[j] / (x[j] - z[j])
                    if ratio < alpha:
                        alpha = ratio
                        first = j
            if first < 0:
                break
            for j in range(p):
                x[j] += alpha * (z[j] - x[j])
            passive &= ~(1 << first)
            for j in range(p):
                if (passive >> j) & 1 and (con_mask >> j) & 1 and x[j] <= 0.0:
                    passive &= ~(1 << j)
            for j in range(p):
                if not (passive >> j) & 1:
                    x[j] = 0.0
            _solve_set(passive, y, qt, rs, cols, size, t, z)
        for j in range(p):
            x[j] = z[j]


@numba.njit(nogil=True, cache=True)
def lag_constants(n: int, n_terms: int) -> tuple[int, float, int]:
    """:func:`mixsolve.solve.residuals.lag_constants` (q, n^(1/3), largest L), compiled."""
    q = max(min(int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0))), n - 1), 0)
    scale = float(n) ** (1.0 / 3.0)
    cap = 0.0
    if q > 0:
        cap = BARTLETT_LAG_CONSTANT * (q * (q + 1) / (2 * q + 1)) ** (2.0 / 3.0)
    l_dof = n - 1
    if n_terms > 0:
        l_dof = (n - n_terms) // (2 * n_terms) - 1
    return q, scale, max(min(int(np.floor(cap * scale)), l_dof, n - 1), 0)


@numba.njit(nogil=True, cache=True, fastmath=REORDER)
def _lag_sum(r: np.ndarray, lag: int) -> float:
    """Σᵢ rᵢ rᵢ₊ₗ (over two views, which vectorises; indexing r twice does not)."""
    head = r[:r.shape[0] - lag]
    tail = r[lag:]
    acc = 0.0
    for j in range(head.shape[0]):
        acc += head[j] * tail[j]
    return acc


@numba.njit(nogil=True, cache=True, fastmath=REORDER)
def _lag_sums_2_to_5(r: np.ndarray, rho: np.ndarray, inv_ss: float) -> None:
    """rho[2..5] = Σᵢ rᵢ rᵢ₊ₗ / Σr² for l = 2..5 in one pass over r (four sums at once
    cost less than four passes; the same sums as :func:`_lag_sum`, added in another order)."""
    n = r.shape[0]
    body = n - 5
    a2 = 0.0
    a3 = 0.0
    a4 = 0.0
    a5 = 0.0
    for j in range(body):
        v = r[j]
        a2 += v * r[j + 2]
        a3 += v * r[j + 3]
        a4 += v * r[j + 4]
        a5 += v * r[j + 5]
    for j in range(body, n - 2):
        a2 += r[j] * r[j + 2]
    for j in range(body, n - 3):
        a3 += r[j] * r[j + 3]
    for j in range(body, n - 4):
        a4 += r[j] * r[j + 4]
    rho[2] = a2 * inv_ss
    rho[3] = a3 * inv_ss
    rho[4] = a4 * inv_ss
    rho[5] = a5 * inv_ss


@numba.njit(nogil=True, cache=True)
def _lag_figures(r: np.ndarray, ss: float, lag1: float, n_terms: int, q: int, scale: float,
                 l_max: int, s: int, rho: np.ndarray, out: np.ndarray) -> None:
    """f, L and z of :func:`mixsolve.solve.residuals.lag_figures` into out[:3] (``ss`` and
    ``lag1``: Σr² and Σrᵢrᵢ₊₁; ``rho``: scratch of at least max(q, s + 1, l_max) + 1; ``s``
    the structure lag)."""
    n = r.shape[0]
    if not ss > 0.0:
        out[0] = 1.0
        out[1] = 0.0
        out[2] = np.nan
        return
    first = q
    if 0 <= s and s + 1 < n:
        first = max(first, s + 1)
    first = min(first, n - 1)
    rho[1] = lag1 * (1.0 / ss)
    done = 1
    if first >= 5 and n > 8:  # the usual case (≥ 1 nm steps over ≥ 200 readings): one pass
        _lag_sums_2_to_5(r, rho, 1.0 / ss)
        done = 5
    for lag in range(done + 1, first + 1):
        rho[lag] = _lag_sum(r, lag) * (1.0 / ss)
    s0 = 0.0
    s1 = 0.0
    for j in range(1, q + 1):
        s0 += rho[j]
        s1 += j * rho[j]
    s0 = 1.0 + 2.0 * s0
    s1 = 2.0 * s1
    window = float(l_max)
    if s0 > 0.0:
        ratio = s1 / s0
        gamma = BARTLETT_LAG_CONSTANT * np.cbrt(ratio * ratio)  # |ŝ¹/ŝ⁰|^(2/3)
        window = min(np.floor(gamma * scale), l_max)
    for lag in range(first + 1, int(window) + 1):  # the window's lags beyond those
        rho[lag] = _lag_sum(r, lag) * (1.0 / ss)
    total = 0.0
    for lag in range(1, int(window) + 1):
        total += (1.0 - lag / (window + 1.0)) * rho[lag]
    f = 1.0
    if window > 0:
        f2 = (1.0 + 2.0 * total) * (n - n_terms) / (n - n_terms * (window + 1.0))
        f = np.sqrt(max(f2, 1.0))
    out[0] = f
    out[1] = window
    out[2] = np.nan
    if 0 <= s and s + 1 < n:
        squares = 0.0
        for j in range(1, s + 1):
            squares += rho[j] * rho[j]
        out[2] = rho[s + 1] * np.sqrt(float(n)) / np.sqrt(1.0 + 2.0 * squares)


@numba.njit(nogil=True, cache=True, fastmath=REORDER)
def _residual_summary(row: np.ndarray, x: np.ndarray, design_t: np.ndarray,
                      r: np.ndarray, out: np.ndarray) -> None:
    """r = row − Dx, then Σr², Σrᵢrᵢ₊₁, #(r > 0), #(r ≠ 0), sign changes into out[:5].

    Exact zeros count as negative in the sign changes; the caller summarises rows with
    zeros again (#(r ≠ 0) < m tells which). The lag figures are the caller's
    (:func:`_lag_figures`).
    """
    p, m = design_t.shape
    for j in range(m):
        r[j] = row[j]
    for k in range(p):
        xk = x[k]
        if xk != 0.0:  # components NNLS held at zero cost nothing
            for j in range(m):
                r[j] -= xk * design_t[k, j]
    ss = 0.0
    n_pos = 0.0
    n_neg = 0.0
    for j in range(m):
        v = r[j]
        ss += v * v
        n_pos += 1.0 if v > 0.0 else 0.0
        n_neg += 1.0 if v < 0.0 else 0.0
    lag = 0.0
    changes = 0.0
    for j in range(m - 1):
        lag += r[j] * r[j + 1]
        changes += 1.0 if (r[j] > 0.0) != (r[j + 1] > 0.0) else 0.0
    out[0] = ss
    out[1] = lag
    out[2] = n_pos
    out[3] = n_pos + n_neg
    out[4] = changes


@numba.njit(nogil=True, cache=True)
def fit_rows(a: np.ndarray, qt_design: np.ndarray, r: np.ndarray, norms: np.ndarray,
             design_t: np.ndarray, con_mask: int, qt: np.ndarray, rs: np.ndarray,
             cols: np.ndarray, size: np.ndarray, rtol: float, max_iter: int, ols: bool,
             coef: np.ndarray, sum_squares: np.ndarray, lag_sum: np.ndarray,
             n_positive: np.ndarray, n_nonzero: np.ndarray, sign_changes: np.ndarray,
             absorbance_max: np.ndarray, absorbance_min: np.ndarray,
             noise_inflation: np.ndarray, noise_lags: np.ndarray, structure_z: np.ndarray,
             state: np.ndarray, summarise: bool = True, structure_lag: int = -1) -> None:
    """Fit every row of ``a`` and summarise its residual (module docstring).

    Parameters
    ----------
    a : array, shape (n, m)
        Spectra (AU), C-contiguous.
    qt_design : array, shape (p, m)
        Qᵀ of the column-scaled design D̂ = Q R.
    r : array, shape (p, p)
        R of that factorisation.
    norms : array, shape (p,)
        Column norms of the design (x = x̂ / norms).
    design_t : array, shape (p, m)
        The design, transposed (for the residual).
    con_mask : int
        Bit j set: column j constrained ≥ 0 (ignored when ``ols``).
    qt, rs, cols, size
        :func:`subset_factors`.
    rtol : float
        Relative KKT tolerance (:func:`mixsolve.solve.engine.kkt_rtol`).
    max_iter : int
        Outer iterations before giving up on a row.
    ols : bool
        Unconstrained least squares instead of NNLS.
    coef : array, shape (n, p), output
        Coefficients in the units of the design's columns (left as they were where not
        fitted).
    sum_squares, lag_sum, n_positive, n_nonzero, sign_changes, absorbance_max,
    absorbance_min, noise_inflation, noise_lags, structure_z : arrays, shape (n,), output
        The residual summary (``SUMMARY_FIELDS``); left as they were where not fitted.
    state : array of int64, shape (n,), output
        ``ROW_DONE``, ``ROW_NOT_FINITE`` or ``ROW_ITERATION_LIMIT``.
    summarise : bool
        False: the coefficients only (steps 1-2; the summary arrays are not written).
    structure_lag : int
        s of :func:`mixsolve.solve.residuals.lag_figures` (readings); −1: its q.
    """
    n, m = a.shape
    p = r.shape[0]
    y = np.empty(p)
    xs = np.empty(p)
    x = np.empty(p)
    t = np.empty(p)
    z = np.empty(p)
    res = np.empty(p)
    resid = np.empty(m)
    out = np.empty(5)
    lagged = np.empty(3)
    q, scale, l_max = lag_constants(m, p)
    lag_s = q if structure_lag < 0 else structure_lag
    rho = np.zeros(max(q, lag_s + 1, l_max) + 1)
    scratch = np.empty(2, dtype=np.int64)
    full = (1 << p) - 1
    for i in range(n):
        row = a[i]
        if summarise:
            a_max, a_min = _project(row, qt_design, y, scratch)
        else:
            _dots(row, qt_design, y)
        finite = True
        for k in range(p):
            if not np.isfinite(y[k]):
                finite = False
        if not finite:
            state[i] = ROW_NOT_FINITE
            continue
        if ols:
            _solve_set(full, y, qt, rs, cols, size, t, xs)
            state[i] = ROW_DONE
        elif _nnls(y, r, con_mask, qt, rs, cols, size, rtol, max_iter, xs, z, t, res) < 0:
            state[i] = ROW_ITERATION_LIMIT
        else:
            state[i] = ROW_DONE
        for k in range(p):
            x[k] = xs[k] / norms[k]
            coef[i, k] = x[k]
        if not summarise:
            continue
        _residual_summary(row, x, design_t, resid, out)
        _lag_figures(resid, out[0], out[1], p, q, scale, l_max, lag_s, rho, lagged)
        sum_squares[i] = out[0]
        lag_sum[i] = out[1]
        n_positive[i] = out[2]
        n_nonzero[i] = out[3]
        sign_changes[i] = out[4]
        absorbance_max[i] = a_max
        absorbance_min[i] = a_min
        noise_inflation[i] = lagged[0]
        noise_lags[i] = lagged[1]
        structure_z[i] = lagged[2]
