"""Fit a power-law scatter term per spectrum with the concentrations (``baseline="scatter"``).

Model: A(λ) = Σₖ xₖ εₖ(λ) + o + a·(λ/λ₀)^(−n), with λ₀ the shortest used wavelength, so
that the amplitude a is the scatter (AU) at λ₀. The exponent is of Ångström type: about 4
for particles much smaller than the wavelength (Rayleigh), falling towards 0 for large
particles (van de Hulst, *Light Scattering by Small Particles*, 1957; from memory). For
each spectrum the residual sum of squares RSS(n) (the linear part x, o, a solved exactly
at each n, NNLS on the components, o and a free) is minimised over n in
``EXPONENT_RANGE``. Below 0.25 the term cannot be told from the offset over any visible
window (its shape beside the offset is −n·ln(λ/λ₀) to first order, whatever n), so the
search starts there; the fitted concentrations do not depend on where below 0.25 it would
stop.

Method, batched over spectra, the steps of :mod:`mixsolve.solve.shift_fit` with the
exponent in place of the shift (and its search and final-fit code):

1. Grid of n with step ``GRID_STEP`` over the range, one shared design per grid point
   (:func:`mixsolve.solve.cls.fit_spectra`, either engine); each spectrum's best point and
   its neighbours bracket its minimum.
2. Brent's bounded minimisation in each bracket to ``XATOL`` (vectorised over spectra).
3. Final fit at the chosen n and the linearised joint covariance of the nonlinear least
   squares problem, s²(JᵀJ)⁻¹ with J = [D(n) | ∂A/∂n], ∂A/∂n = −a·ln(λ/λ₀)·(λ/λ₀)^(−n), and
   s² = RSS/(m − p − 1): the exponent costs one degree of freedom and its uncertainty
   reaches the concentrations through their correlation with it (Bates & Watts,
   *Nonlinear Regression Analysis and Its Applications*, 1988, §2.3; Seber & Wild,
   *Nonlinear Regression*, 1989, §2.1; checked against ``scipy.optimize.curve_fit`` in
   tests/test_scatter.py). When a = 0 exactly the exponent is undetermined and J is rank
   deficient: the uncertainties are then those of the fit at the chosen n, and u(n) is NaN.
"""

from __future__ import annotations

import numpy as np

from mixsolve.solve.cls import fit_spectra, refuse_infinity
from mixsolve.solve.design import scatter_column
from mixsolve.solve.engine import Engine, Method
from mixsolve.solve.per_spectrum import inverse_diagonal
from mixsolve.solve.shift_fit import (
    _brent_bounded,
    _final_fit,
    _masked,
    _rss_each,
    _start,
)

#: Range of the Ångström-type exponent searched (n = 0 is the offset itself).
EXPONENT_RANGE: tuple[float, float] = (0.25, 4.5)
#: Step of the coarse grid of exponents.
GRID_STEP = 0.25
#: Absolute tolerance on the fitted exponent (``xatol`` of scipy's bounded minimize_scalar).
XATOL = 1e-3
#: The exponent of the scatter shape the unmodelled-scatter check projects the residual on
#: (Rayleigh scatter, λ⁻⁴).
PROBE_EXPONENT = 4.0


class ScatterDesigns:
    """Designs [K | 1 | (λ/λ₀)^(−n)] for one exponent or one per spectrum.

    Has the interface :func:`mixsolve.solve.shift_fit._final_fit` and the search steps
    expect (``n_components``, ``n_terms``, ``wl``, ``design``, ``designs``, ``jacobian``),
    with the exponent n in place of the shift δ.
    """

    def __init__(self, base: np.ndarray, wavelengths_nm: np.ndarray, n_components: int
                 ) -> None:
        self.base = np.asarray(base, dtype=float)  #: (m, q + 1): absorptivities, offset
        self.wl = np.asarray(wavelengths_nm, dtype=float)
        self.log_ratio = np.log(self.wl / self.wl.min())
        self.n_components = n_components
        self.n_terms = self.base.shape[1] + 1

    def design(self, exponent: float) -> np.ndarray:
        """The design (m, n_terms) at one exponent."""
        return np.hstack([self.base, scatter_column(self.wl, exponent)[:, None]])

    def designs(self, exponents: np.ndarray) -> np.ndarray:
        """One design per exponent: (k, m, n_terms), the transposed view of a C-contiguous
        (k, n_terms, m) array."""
        columns = np.empty((exponents.size, self.n_terms, self.wl.size))
        columns[:, :-1] = self.base.T
        columns[:, -1] = scatter_column(self.wl, exponents)
        return columns.transpose(0, 2, 1)

    def jacobian(self, exponents: np.ndarray, coef: np.ndarray) -> np.ndarray:
        """∂A/∂n = −a·ln(λ/λ₀)·(λ/λ₀)^(−n) per spectrum (k, m); a = coef[:, -1] (NaN as 0)."""
        amplitude = np.nan_to_num(coef[:, -1])
        return -(amplitude[:, None] * self.log_ratio) * scatter_column(self.wl, exponents)


def fit_with_scatter(spectra: np.ndarray, base: np.ndarray, wavelengths_nm: np.ndarray,
                     n_components: int, method: Method, *, engine: Engine = "auto"
                     ) -> tuple[np.ndarray, ...]:
    """Fit concentrations, offset and a power-law scatter term for every spectrum.

    Parameters
    ----------
    spectra : array, shape (n, m)
        Absorbance (AU) at the used wavelengths; NaN marks a missing reading. Infinity is
        refused (:class:`mixsolve.errors.InfiniteReadingError`).
    base : array, shape (m, q + 1)
        Absorptivity columns (q, 1 cm) then the offset column.
    wavelengths_nm : array, shape (m,)
        The used wavelengths; λ₀ is the shortest.
    n_components : int
        q, the leading columns constrained ≥ 0 by ``nnls``.
    method : {"nnls", "ols"}
    engine : {"auto", "numpy", "compiled"}
        Who fits the grid's shared designs.

    Returns
    -------
    coef, std_error, fitted, dof, status, exponent, u_exponent
        coef (n, q + 2): components (library concentration × cm), offset (AU), amplitude a
        (AU at λ₀); std_error their linearised standard uncertainties with the exponent's
        included; fitted (n, m) AU; dof = readings − q − 3; status bits; the exponent n and
        u(n) (dimensionless; NaN when no fit).

    Notes
    -----
    Module docstring: grid, Brent's bounded search, linearised joint covariance.
    """
    flat = np.asarray(spectra, dtype=float)
    refuse_infinity(flat, np.arange(flat.shape[0]))
    lib = ScatterDesigns(base, wavelengths_nm, n_components)
    exponent = _search(flat, lib, method, engine)
    coef, se, fitted, dof, status, u_exp = _final_fit(flat, lib, exponent, method)
    zero = np.flatnonzero(np.isfinite(coef[:, -1]) & (coef[:, -1] == 0) & np.isnan(u_exp))
    if zero.size:  # a = 0: n undetermined, the uncertainties of the fit at the chosen n
        se[zero] = _fixed_exponent_errors(flat[zero], fitted[zero], lib, exponent[zero],
                                          dof[zero])
    return coef, se, fitted, dof, status, np.where(np.isfinite(coef[:, 0]), exponent, np.nan), \
        u_exp


def _search(flat: np.ndarray, lib: ScatterDesigns, method: Method, engine: Engine
            ) -> np.ndarray:
    """n minimising each spectrum's RSS over ``EXPONENT_RANGE``; NaN where no n fits."""
    low, high = EXPONENT_RANGE
    grid = np.arange(low, high + GRID_STEP / 2, GRID_STEP)
    rss = np.empty((flat.shape[0], grid.size))
    for g, n in enumerate(grid):
        fit = fit_spectra(flat, lib.design(float(n)), lib.n_components, method, engine=engine)
        rss[:, g] = fit.summary.sum_squares
    rss[~np.isfinite(rss)] = np.inf
    best = np.argmin(rss, axis=1)
    exponent = np.full(flat.shape[0], np.nan)
    rows = np.flatnonzero(np.isfinite(rss[np.arange(flat.shape[0]), best]))
    if not rows.size:
        return exponent

    def rss_at(idx: np.ndarray, at: np.ndarray) -> np.ndarray:
        return _rss_each(flat[rows[idx]], lib, at, method)  # type: ignore[arg-type]

    exponent[rows] = _brent_bounded(rss_at, _start(grid, best[rows], rss_at), XATOL)
    return exponent


def _fixed_exponent_errors(values: np.ndarray, fitted: np.ndarray, lib: ScatterDesigns,
                           exponent: np.ndarray, dof: np.ndarray) -> np.ndarray:
    """Standard errors s·√diag((DᵀD)⁻¹) at fixed n, s² = Σr²/dof of the final fit, for
    spectra with a = 0 (where the joint J is rank deficient)."""
    designs, _ = _masked(lib.designs(exponent), values)
    diag, ok = inverse_diagonal(designs)
    residual = np.where(np.isnan(values), 0.0, values - fitted)
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.einsum("nm,nm->n", residual, residual) / np.where(dof > 0, dof, np.nan)
    return np.sqrt(np.clip(diag * np.where(ok, s2, np.nan)[:, None], 0, None))


def scatter_probe(design: np.ndarray, wavelengths_nm: np.ndarray) -> np.ndarray | None:
    """Orthonormal columns (m, k) spanning what a constant and (λ/λ₀)^(−4) add to the
    design, the constant's part first (k = 2 without an offset in D, else 1): the last
    column v is the part of the λ⁻⁴ shape orthogonal to [D | 1], of unit length. None when
    [D | 1] holds the shape to within 1 % of its norm (then a residual cannot show it).

    Notes
    -----
    v is orthogonal to a constant so that an unmodelled cell offset is not taken for
    scatter. vᵀr/σ of a residual r is N(0, 1) for white noise of SD σ whatever the fit,
    since v is orthogonal to the design: the score of a one-column extension of the
    linear model (Seber & Lee, *Linear Regression Analysis*, 2003, §4.3, from memory).
    """
    shape = scatter_column(wavelengths_nm, PROBE_EXPONENT)
    added = np.column_stack([np.ones_like(shape), shape])
    left = added - design @ np.linalg.lstsq(design, added, rcond=None)[0]
    norms = np.linalg.norm(added, axis=0)
    if np.linalg.norm(left[:, 0]) <= 1e-9 * norms[0]:  # the design has the constant
        left, norms = left[:, 1:], norms[1:]
    q, r = np.linalg.qr(left)
    if abs(r[-1, -1]) <= 0.01 * norms[-1]:
        return None
    return q * np.sign(np.diag(r))  # v along +λ⁻⁴ (positive scatter gives z > 0)


def reference_gain(design: np.ndarray, n_components: int) -> np.ndarray:
    """(G·1)ⱼ for the components (G = D⁺): how much each coefficient moves per AU of error
    in a reference reading subtracted from every reading; 0 when the design has an offset."""
    gain = np.linalg.lstsq(design, np.ones(design.shape[0]), rcond=None)[0][:n_components]
    ones_in_span = np.allclose(design @ np.linalg.lstsq(design, np.ones(design.shape[0]),
                                                        rcond=None)[0], 1.0, atol=1e-9)
    return np.zeros(n_components) if ones_in_span else gain
