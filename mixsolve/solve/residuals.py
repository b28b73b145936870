"""Residual spectra summarised per spectrum, block by block, without storing them.

The trust checks of a fit need only a few numbers from each residual spectrum r (AU, in
wavelength order, over the readings present): Σr², Σrᵢrᵢ₊₁ (neighbours among the
readings present), how many rᵢ are > 0 and ≠ 0, and how many sign changes occur between
consecutive non-zero rᵢ; and, from the measured spectrum, its largest and smallest
reading. :mod:`mixsolve.solve.trust` turns them into the runs test, the lag-1
autocorrelation and the RMS residual. Computing them block by block, while each block is
in cache, avoids holding full-size fitted and residual arrays (3× the data's memory);
:mod:`mixsolve.solve.fused` computes the same numbers in compiled code.
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


def summarise(values: np.ndarray, residual: np.ndarray) -> ResidualSummary:
    """Summary of each row of ``residual`` (NaN = reading missing) and of ``values``.

    Parameters
    ----------
    values, residual : arrays, shape (n, m)
        Measured absorbance and residual (AU), wavelength on the last axis.

    Notes
    -----
    Rows with a missing reading or an exact zero residual are summarised one by one
    (readings present only; zeros left out of the sign counts, as the runs test
    requires); the rest in vectorised passes.
    """
    n, m = residual.shape
    with np.errstate(invalid="ignore"):
        ss = np.einsum("ij,ij->i", residual, residual)
        lag = np.einsum("ij,ij->i", residual[:, :-1], residual[:, 1:])
        pos = residual > 0
        n_nonzero = np.count_nonzero(residual, axis=1).astype(float)
    a_max, a_min = values.max(axis=1), values.min(axis=1)
    out = ResidualSummary(
        ss, lag, np.full(n, float(m)), np.count_nonzero(pos, axis=1).astype(float),
        n_nonzero, np.count_nonzero(pos[:, 1:] != pos[:, :-1], axis=1).astype(float),
        a_max, a_min)
    odd = np.flatnonzero(~np.isfinite(ss) | (n_nonzero < m) | np.isnan(a_max))
    for i in odd:
        put(out, i, _summarise_row(values[i], residual[i]))
    return out


def _summarise_row(values: np.ndarray, residual: np.ndarray) -> ResidualSummary:
    """One spectrum with missing readings or exact zeros (scalars in 0-d arrays)."""
    r = residual[np.isfinite(residual)]
    v = values[~np.isnan(values)]
    signs = np.sign(r[r != 0])
    fields = (
        float(np.sum(r**2)) if r.size else np.nan,
        float(np.sum(r[:-1] * r[1:])) if r.size else np.nan,
        float(r.size),
        float(np.sum(signs > 0)),
        float(signs.size),
        float(np.sum(signs[1:] != signs[:-1])),
        float(v.max()) if v.size else np.nan,
        float(v.min()) if v.size else np.nan,
    )
    return ResidualSummary(*(np.asarray(f) for f in fields))


def summarise_model(values: np.ndarray, coef: np.ndarray, design: np.ndarray
                    ) -> ResidualSummary:
    """Summary of r = values − coef · designᵀ, computed block by block.

    Parameters
    ----------
    values : array, shape (n, m)
        Measured absorbance (AU).
    coef : array, shape (n, p)
        Fitted coefficients (NaN rows give NaN sums).
    design : array, shape (m, p)

    Returns
    -------
    ResidualSummary
        As :func:`summarise` of the full residual, which is never held whole.
    """
    out = empty_summary(values.shape[0])
    for rows, block, _, residual in model_blocks(values, coef, design):
        put(out, rows, summarise(block, residual))
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
