"""Residual spectra summarised per spectrum, block by block, without storing them.

The trust checks of a fit need only a few numbers from each residual spectrum r (AU, in
wavelength order, over the readings present): Σr², Σrᵢrᵢ₊₁ (neighbours among the
readings present), how many rᵢ are > 0 and ≠ 0, and how many sign changes occur between
consecutive non-zero rᵢ; and, from the measured spectrum, its largest and smallest
reading. :mod:`mixsolve.solve.trust` turns them into the runs test, the lag-1
autocorrelation and the RMS residual. From the autocovariances of the residual up to a
few lags, :func:`lag_figures` adds the correlated-noise inflation f of the standard
errors (Newey & West 1987) and the test of structure beyond the noise's own lags.
Computing them block by block, while each block is in cache, avoids holding full-size
fitted and residual arrays (3× the data's memory); :mod:`mixsolve.solve.fused` computes
the same numbers in compiled code.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import NamedTuple

import numpy as np

#: Spectra per block of the numpy pass (a few MB at 300 wavelengths: stays in cache).
BLOCK_SPECTRA = 1024
#: Rows per product coef @ designᵀ: small enough that OpenBLAS runs it on one thread.
GEMM_ROWS = 128


class ResidualSummary(NamedTuple):
    """Per-spectrum sums and counts of the residual (1-d arrays, NaN where not fitted)."""

    sum_squares: np.ndarray  #: Σ r² over the readings present (AU²)
    lag_sum: np.ndarray  #: Σ rᵢ rᵢ₊₁ over neighbouring readings present (AU²)
    n_points: np.ndarray  #: readings present
    n_positive: np.ndarray  #: residuals > 0
    n_nonzero: np.ndarray  #: residuals ≠ 0
    sign_changes: np.ndarray  #: sign changes between consecutive non-zero residuals
    absorbance_max: np.ndarray  #: largest reading present (AU)
    absorbance_min: np.ndarray  #: smallest reading present (AU)
    noise_inflation: np.ndarray  #: f of :func:`lag_figures` (1 where no lag is used)
    noise_lags: np.ndarray  #: L, the Bartlett window of f (readings)
    structure_z: np.ndarray  #: z of the autocorrelation beyond q lags (:func:`lag_figures`)

    def rms(self) -> np.ndarray:
        """√(Σr²/n) over the readings present (AU); NaN where not fitted."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.sqrt(self.sum_squares / self.n_points)


def empty_summary(n: int) -> ResidualSummary:
    """A summary of ``n`` spectra, all NaN."""
    return ResidualSummary(*(np.full(n, np.nan) for _ in ResidualSummary._fields))


def put(target: ResidualSummary, rows: np.ndarray | slice, source: ResidualSummary) -> None:
    """Write ``source`` into ``target`` at ``rows``."""
    for store, value in zip(target, source, strict=True):
        store[rows] = value


def summarise(values: np.ndarray, residual: np.ndarray, n_terms: int = 0,
              structure_lag: int | None = None) -> ResidualSummary:
    """Summary of each row of ``residual`` (NaN = reading missing) and of ``values``.

    Parameters
    ----------
    values, residual : arrays, shape (n, m)
        Measured absorbance and residual (AU), wavelength on the last axis.
    n_terms : int
        Coefficients fitted to make the residual (p of :func:`lag_figures`; 0: a plain
        series, no fit).
    structure_lag : int, optional
        s of :func:`lag_figures` (readings).

    Notes
    -----
    Rows with a missing reading or an exact zero residual are summarised one by one
    (readings present only, in order: lags count among them; zeros left out of the sign
    counts, as the runs test requires); the rest in vectorised passes.
    """
    n, m = residual.shape
    with np.errstate(invalid="ignore"):
        ss = np.einsum("ij,ij->i", residual, residual)
        lag = np.einsum("ij,ij->i", residual[:, :-1], residual[:, 1:])
        pos = residual > 0
        n_nonzero = np.count_nonzero(residual, axis=1).astype(float)
    a_max, a_min = values.max(axis=1), values.min(axis=1)
    odd = ~np.isfinite(ss) | (n_nonzero < m) | np.isnan(a_max)
    lagged = lag_figures(np.where(odd[:, None], 0.0, residual), n_terms, structure_lag) \
        if odd.any() else lag_figures(residual, n_terms, structure_lag, (ss, lag))
    out = ResidualSummary(
        ss, lag, np.full(n, float(m)), np.count_nonzero(pos, axis=1).astype(float),
        n_nonzero, np.count_nonzero(pos[:, 1:] != pos[:, :-1], axis=1).astype(float),
        a_max, a_min, *lagged)
    for i in np.flatnonzero(odd):
        put(out, i, _summarise_row(values[i], residual[i], n_terms, structure_lag))
    return out


def _summarise_row(values: np.ndarray, residual: np.ndarray, n_terms: int,
                   structure_lag: int | None) -> ResidualSummary:
    """One spectrum with missing readings or exact zeros (scalars in 0-d arrays)."""
    r = residual[np.isfinite(residual)]
    v = values[~np.isnan(values)]
    signs = np.sign(r[r != 0])
    lagged = (np.nan, np.nan, np.nan) if not r.size else \
        tuple(float(f[0]) for f in lag_figures(r[None, :], n_terms, structure_lag))
    fields = (
        float(np.sum(r**2)) if r.size else np.nan,
        float(np.sum(r[:-1] * r[1:])) if r.size else np.nan,
        float(r.size),
        float(np.sum(signs > 0)),
        float(signs.size),
        float(np.sum(signs[1:] != signs[:-1])),
        float(v.max()) if v.size else np.nan,
        float(v.min()) if v.size else np.nan,
        *lagged,
    )
    return ResidualSummary(*(np.asarray(f) for f in fields))


#: Newey & West (1994) constant of the Bartlett kernel's automatic lag (from memory):
#: L = ⌊1.1447 (ŝ⁽¹⁾/ŝ⁽⁰⁾)^(2/3) n^(1/3)⌋.
BARTLETT_LAG_CONSTANT = 1.1447


class LagConstants(NamedTuple):
    """What :func:`lag_figures` fixes from n readings and p coefficients alone."""

    q: int  #: ⌊4 (n/100)^(2/9)⌋ (at most n − 1): NW 1994's pre-lag and the flag's lag
    scale: float  #: n^(1/3)
    l_max: int  #: the largest window L allowed


def lag_constants(n: int, n_terms: int) -> LagConstants:
    """q, n^(1/3) and the largest L for ``n`` readings and ``n_terms`` coefficients.

    L ≤ ⌊1.1447 (q(q+1)/(2q+1))^(2/3) n^(1/3)⌋ (what the automatic rule gives for a
    residual with ρ̂₁ = … = ρ̂_q = 1, its largest for a positive long-run variance), and
    p(L + 1) ≤ (n − p)/2 so that the degrees-of-freedom factor of :func:`lag_figures` stays
    below 2; L ≤ n − 1.
    """
    q = max(min(int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0))), n - 1), 0)
    scale = n ** (1.0 / 3.0)
    cap = BARTLETT_LAG_CONSTANT * (q * (q + 1) / (2 * q + 1)) ** (2.0 / 3.0) if q else 0.0
    l_dof = (n - n_terms) // (2 * n_terms) - 1 if n_terms > 0 else n - 1
    return LagConstants(q, scale, max(min(int(np.floor(cap * scale)), l_dof, n - 1), 0))


def lag_figures(residual: np.ndarray, n_terms: int = 0, structure_lag: int | None = None,
                sums: tuple[np.ndarray, np.ndarray] | None = None
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Correlated-noise inflation f, its window L and the structure z beyond s lags.

    Parameters
    ----------
    residual : array, shape (k, n)
        Residual rows, every reading present, in wavelength order (lags count in readings).
    n_terms : int
        p, the coefficients fitted to make the residual (0: a plain series).
    structure_lag : int, optional
        s, the readings over which the noise may be correlated, for z
        (:func:`mixsolve.solve.trust.structure_lag` turns a span in nm into readings);
        None: q of :func:`lag_constants`.
    sums : (array, array), optional
        Σr² and Σrᵢrᵢ₊₁ of each row when the caller has them (not computed again).

    Returns
    -------
    f, L, z : arrays, shape (k,)
        f (≥ 1, dimensionless): the factor by which the standard errors of independent
        readings, s·√diag((DᵀD)⁻¹), grow when the noise is correlated over neighbouring
        readings. L (readings, as float): the Bartlett window. z: the autocorrelation at
        lag s + 1 in units of its standard error when the noise is correlated over at most
        s readings.

    Notes
    -----
    With γ̂_l = Σᵢ rᵢ rᵢ₊ₗ (the divisor n cancels) and ρ̂_l = γ̂_l/γ̂₀:

    - Window (Newey & West 1994, Rev. Econ. Stud. 61:631, Bartlett kernel; from memory):
      q = ⌊4 (n/100)^(2/9)⌋, ŝ⁽⁰⁾ = 1 + 2 Σ_{j≤q} ρ̂_j, ŝ⁽¹⁾ = 2 Σ_{j≤q} j ρ̂_j,
      L = ⌊1.1447 |ŝ⁽¹⁾/ŝ⁽⁰⁾|^(2/3) n^(1/3)⌋, at most :func:`lag_constants`' ``l_max``
      (which it is where ŝ⁽⁰⁾ ≤ 0).
    - Inflation (Newey & West 1987, Econometrica 55:703, Bartlett weights
      w_l = 1 − l/(L + 1)): the long-run-variance ratio f²_NW = 1 + 2 Σ_{l≤L} w_l ρ̂_l,
      times a degrees-of-freedom factor for the fit, f² = f²_NW (n − p)/(n − p(L + 1)).
      The factor: under independent readings of variance σ², E[Σ_{|l|≤L} w_l γ̂_l] =
      σ² tr(K M), K the Bartlett weight matrix and M = I − H the residual maker, and
      tr(K H) = p(L + 1) when the design is smooth over L readings; with
      E[γ̂₀] = σ²(n − p) this makes f² unbiased (= 1) for independent readings, as
      s² = RSS/(n − p) is. Without it, the fitted terms, which take up the noise's slow
      part, bias f low by about p(L + 1)/n. Variance of a coefficient:
      s² f² diag((DᵀD)⁻¹), exact for a design smooth over L readings (then the sandwich
      (DᵀD)⁻¹ Dᵀ Ω D (DᵀD)⁻¹ of Newey & West reduces to it). f = 1 where L = 0 or
      Σr² = 0 (no lag to use, or nothing to inflate). f is clipped at 1 (f² = max(f², 1)):
      a slit or smoothing kernel with non-negative weights correlates noise positively, so
      f < 1 is sampling error of the estimate, and at small n a large one (61 readings:
      dividing by the unclipped f widened z to a standard deviation of 1.05–1.17 under
      white noise; clipped 0.96–1.04, tests/test_solve.py's case).
    - Structure beyond the noise: z = ρ̂_{s+1} √n / √(1 + 2 Σ_{j≤s} ρ̂_j²), Bartlett's
      (1946) large-sample standard error of an autocorrelation beyond the lags s over
      which the series is correlated (Box & Jenkins, *Time Series Analysis*, the check of
      a moving average of order s; from memory). About N(0, 1) when the noise is
      correlated over at most s readings; large for a residual with shape wider than s
      readings (an unmodelled absorber). NaN where s + 1 ≥ n or Σr² = 0.
    """
    r = np.asarray(residual, dtype=float)
    k, n = r.shape
    c = lag_constants(n, n_terms)
    s = c.q if structure_lag is None else int(structure_lag)
    gamma0 = np.einsum("ij,ij->i", r, r) if sums is None else sums[0]
    rho: dict[int, np.ndarray] = {}

    def at(lag: int) -> np.ndarray:
        if lag not in rho:
            rho[lag] = np.einsum("ij,ij->i", r[:, :-lag], r[:, lag:]) * scale
        return rho[lag]

    with np.errstate(invalid="ignore", divide="ignore"):
        scale = np.where(gamma0 > 0, 1.0 / gamma0, 0.0)
        if sums is not None and n > 1:
            rho[1] = sums[1] * scale
        first = min(max(c.q, s + 1), n - 1)
        for lag in range(1, first + 1):
            at(lag)
        head = np.array([at(j) for j in range(1, c.q + 1)]).reshape(c.q, k)
        s0 = 1.0 + 2.0 * head.sum(axis=0)
        s1 = 2.0 * (np.arange(1, c.q + 1) @ head)
        gamma = BARTLETT_LAG_CONSTANT * ((s1 / s0) ** 2) ** (1.0 / 3.0)
        window = np.where(s0 > 0, np.minimum(np.floor(gamma * c.scale), c.l_max), c.l_max)
        window = np.where(gamma0 > 0, window, 0.0)
        longer = np.flatnonzero(window > first)  # the few rows whose window reaches further
        if longer.size:
            sub, sub_scale = r[longer], scale[longer]
            for lag in range(first + 1, int(window.max()) + 1):
                rho[lag] = np.zeros(k)
                rho[lag][longer] = np.einsum("ij,ij->i", sub[:, :-lag], sub[:, lag:]) \
                    * sub_scale
        total = np.zeros(k)
        for lag in range(1, int(window.max(initial=0)) + 1):
            total += np.clip(1.0 - lag / (window + 1.0), 0.0, None) * at(lag)
        f2 = (1.0 + 2.0 * total) * (n - n_terms) / (n - n_terms * (window + 1.0))
        f = np.where(window > 0, np.sqrt(np.clip(f2, 1.0, None)), 1.0)
        z = np.full(k, np.nan)
        if 0 <= s and s + 1 < n:
            squares = sum((at(j) ** 2 for j in range(1, s + 1)), np.zeros(k))
            z = np.where(gamma0 > 0, at(s + 1) * np.sqrt(n) / np.sqrt(1.0 + 2.0 * squares),
                         np.nan)
    return f, window, z


def summarise_model(values: np.ndarray, coef: np.ndarray, design: np.ndarray,
                    structure_lag: int | None = None) -> ResidualSummary:
    """Summary of r = values − coef · designᵀ, computed block by block (p = the design's
    columns).

    Parameters
    ----------
    values : array, shape (n, m)
        Measured absorbance (AU).
    coef : array, shape (n, p)
        Fitted coefficients (NaN rows give NaN sums).
    design : array, shape (m, p)
    structure_lag : int, optional
        s of :func:`lag_figures` (readings).

    Returns
    -------
    ResidualSummary
        As :func:`summarise` of the full residual, which is never held whole.
    """
    out = empty_summary(values.shape[0])
    for rows, block, _, residual in model_blocks(values, coef, design):
        put(out, rows, summarise(block, residual, design.shape[1], structure_lag))
    return out


def model_blocks(values: np.ndarray, coef: np.ndarray, design: np.ndarray
                 ) -> Iterator[tuple[slice, np.ndarray, np.ndarray, np.ndarray]]:
    """Yield (rows, values, fitted, residual) block by block (for per-block figures).

    The fitted and residual blocks are scratch space, overwritten by the next block.
    """
    n, m = values.shape
    design_t = np.ascontiguousarray(design.T)
    block = min(BLOCK_SPECTRA, max(n, 1))
    fitted = np.empty((block, m))
    residual = np.empty((block, m))
    for start in range(0, n, block):
        stop = min(start + block, n)
        f, r = fitted[:stop - start], residual[:stop - start]
        for sub in range(start, stop, GEMM_ROWS):
            end = min(sub + GEMM_ROWS, stop)
            np.matmul(coef[sub:end], design_t, out=f[sub - start:end - start])
        np.subtract(values[start:stop], f, out=r)
        yield slice(start, stop), values[start:stop], f, r
