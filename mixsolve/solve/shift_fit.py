"""Fit one wavelength offset per spectrum together with the concentrations.

Model: A(λ) = b Σₖ cₖ εₖ(λ + δ) + baseline. For each spectrum the residual sum of squares
RSS(δ) (over the readings present; the linear part solved exactly at each δ, the library
linearly interpolated at λ + δ) is minimised over δ in [−max, +max] nm. The standard
uncertainty of δ is the linearised value u(δ) = s/‖P⊥J‖, with J = Σₖ xₖ εₖ′(λ + δ) the
derivative of the model with respect to δ and P⊥ the projector onto the complement of the
design columns. Concentration and shift uncertainties come from the joint linearised
covariance s²([D | J]ᵀ[D | J])⁻¹, s² = RSS/(n − p − 1): the shift costs one degree of
freedom and its correlation with the concentrations is included.

Method, batched over spectra:

1. Coarse grid: δ on a grid of step ≤ ``GRID_STEP_NM`` over [−max, +max], shared by all
   spectra, so that each grid point is one design for the whole batch
   (:func:`mixsolve.solve.cls.fit_spectra`). Each spectrum's best grid point and its two
   neighbours bracket its minimum (ties: the grid point nearest δ = 0). The three are
   evaluated again spectrum by spectrum (as in step 2), so that no result depends on the
   batch a spectrum came in: the shared-design fit rounds differently in other batches.
2. Refinement: Brent's bounded minimisation (golden section with parabolic interpolation;
   Brent, *Algorithms for Minimization without Derivatives*, 1973, ch. 5, as in
   ``scipy.optimize.minimize_scalar(method="bounded")``, the same stopping rule with
   ``xatol`` = ``XATOL_NM``) in each bracket, vectorised over spectra: each step evaluates
   every unfinished spectrum at its own δ, interpolating the library for all of them at
   once and solving them with :func:`mixsolve.solve.per_spectrum.fit_each`. It starts
   from the best grid point, its two neighbours giving the first parabola.
3. Final fit at the chosen δ, u(δ) and the joint uncertainties, batched the same way.

A spectrum that cannot be fitted at all (too few readings, rank deficient) has NaN
results, NaN shift and the status bits saying why.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from mixsolve.solve.cls import (
    DEPENDENT,
    MISSING,
    NO_DOF,
    TOO_FEW,
    fit_spectra,
    refuse_infinity,
)
from mixsolve.solve.design import Baseline, design_matrix
from mixsolve.solve.engine import Method
from mixsolve.solve.per_spectrum import block_spectra, fit_each, inverse_diagonal

#: Largest spacing of the coarse grid of shifts (nm).
GRID_STEP_NM = 0.25
#: Absolute tolerance on the fitted shift (nm): ``xatol`` of scipy's bounded minimize_scalar.
XATOL_NM = 1e-4
#: Most refinement steps per spectrum (each step at least shrinks the bracket or is a
#: parabolic step; about 10 are typical).
MAX_STEPS = 500
_GOLDEN = 0.5 * (3.0 - math.sqrt(5.0))
_SQRT_EPS = math.sqrt(2.2e-16)


class _ShiftedLibrary:
    """The library ε and its slope ε′ at λ + δ: one δ for all spectra or one per spectrum.

    Per spectrum, ε(λ + δ) is linear interpolation as ``numpy.interp`` (clamped to the end
    values outside the grid): on grid interval j, ε_j + (ε_{j+1} − ε_j)·f with f the
    fraction of the interval, for all spectra at once.
    """

    def __init__(self, eps: np.ndarray, grid_nm: np.ndarray, wavelengths_nm: np.ndarray,
                 baseline: Baseline) -> None:
        self.grid = np.asarray(grid_nm, dtype=float)
        self.wl = np.asarray(wavelengths_nm, dtype=float)
        self.eps = np.asarray(eps, dtype=float)
        self.tables = (_interval_table(self.eps),
                       _interval_table(np.gradient(self.eps, self.grid, axis=1)))
        steps = np.diff(self.grid)
        self.step = float(steps[0]) if np.allclose(steps, steps[0], rtol=1e-9, atol=0) \
            else None
        self.baseline = design_matrix(np.zeros((self.wl.size, 0)), self.wl, baseline)
        self.n_components = self.eps.shape[0]
        self.n_terms = self.n_components + self.baseline.shape[1]

    def design(self, delta: float) -> np.ndarray:
        """The design (n_wavelengths, n_terms) at one shift δ (nm)."""
        k = np.stack([np.interp(self.wl + delta, self.grid, row) for row in self.eps], axis=1)
        return np.hstack([k, self.baseline])

    def designs(self, deltas: np.ndarray) -> np.ndarray:
        """One design per shift: (n, n_wavelengths, n_terms), the transposed view of a
        C-contiguous (n, n_terms, n_wavelengths) array."""
        q = self.n_components
        columns = np.empty((deltas.size, self.n_terms, self.wl.size))
        _interpolate(self.tables[0], *self._locate(deltas), columns[:, :q])
        columns[:, q:] = self.baseline.T
        return columns.transpose(0, 2, 1)

    def slopes(self, deltas: np.ndarray) -> np.ndarray:
        """ε′(λ + δ) per shift: (n, n_wavelengths, n_components), a transposed view."""
        columns = np.empty((deltas.size, self.n_components, self.wl.size))
        _interpolate(self.tables[1], *self._locate(deltas), columns)
        return columns.transpose(0, 2, 1)

    def jacobian(self, deltas: np.ndarray, coef: np.ndarray) -> np.ndarray:
        """∂(model)/∂δ per spectrum (n, n_wavelengths): Σₖ xₖ εₖ′(λ + δ) (coef (n, n_terms);
        NaN coefficients count as 0)."""
        return np.einsum("nmk,nk->nm", self.slopes(deltas),
                         np.nan_to_num(coef[:, :self.n_components]))

    def _locate(self, deltas: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Grid interval j (n, m) of each λ + δ and the fraction f of it, clamped."""
        last = self.grid.size - 1
        if self.step is not None:  # even grid: arithmetic, no search
            pos = (self.wl[None, :] - self.grid[0]) / self.step + (deltas / self.step)[:, None]
            np.clip(pos, 0.0, float(last), out=pos)
            j = np.minimum(pos.astype(np.intp), last - 1)
            return j, pos - j
        x = np.clip(self.wl[None, :] + deltas[:, None], self.grid[0], self.grid[-1])
        j = np.clip(np.searchsorted(self.grid, x, side="right") - 1, 0, last - 1)
        return j, (x - self.grid[j]) / (self.grid[j + 1] - self.grid[j])


def _interval_table(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start value and rise of every grid interval, per component: two (q, n_grid − 1)."""
    return (np.ascontiguousarray(values[:, :-1]),
            np.ascontiguousarray(np.diff(values, axis=1)))


def _interpolate(table: tuple[np.ndarray, np.ndarray], j: np.ndarray, frac: np.ndarray,
                 out: np.ndarray) -> None:
    """out[:, c, :] = start[c, j] + rise[c, j]·f for every component c (out (n, q, m))."""
    start, rise = table
    for c in range(start.shape[0]):
        out[:, c, :] = start[c][j] + rise[c][j] * frac


def fit_with_shift(
    spectra: np.ndarray,
    eps: np.ndarray,
    grid_nm: np.ndarray,
    wavelengths_nm: np.ndarray,
    baseline: Baseline,
    method: Method,
    max_shift_nm: float,
) -> tuple[np.ndarray, ...]:
    """Fit concentrations and a wavelength offset for every spectrum.

    Parameters
    ----------
    spectra : array, shape (..., n_wavelengths)
        Absorbance (AU); NaN marks a missing reading (fitted on the readings present).
        Infinity is refused (:class:`mixsolve.errors.InfiniteReadingError`).
    eps : array, shape (n_components, n_grid)
        Library absorptivity on its own grid ``grid_nm`` (nm).
    wavelengths_nm : array, shape (n_wavelengths,)
        Used wavelengths; λ ± ``max_shift_nm`` must lie inside the library grid.
    baseline, method
        As for :func:`mixsolve.unmix`.
    max_shift_nm : float
        Search bound (nm).

    Returns
    -------
    coef, std_error, fitted, dof, status, shift, u_shift
        As the fields of :func:`mixsolve.solve.cls.fit_spectra`, with the fitted spectra
        D·coef (..., n_wavelengths) in place of the residual summary, plus the offset δ
        (nm) and u(δ) (nm); leading axes as the spectra's. ``dof`` is n − p − 1;
        ``std_error`` and u(δ) are NaN without degrees of freedom or when [D | J] is rank
        deficient (e.g. every component at zero, so J = 0).

    Notes
    -----
    Coarse grid shared by all spectra, then Brent's bounded search per spectrum to
    ``XATOL_NM``, vectorised over spectra (module docstring); checked against
    ``scipy.optimize.minimize_scalar`` per spectrum.
    """
    spectra = np.asarray(spectra, dtype=float)
    lead = spectra.shape[:-1]
    flat = spectra.reshape(-1, spectra.shape[-1])
    refuse_infinity(flat, np.arange(flat.shape[0]))
    lib = _ShiftedLibrary(eps, grid_nm, wavelengths_nm, baseline)
    shift = _search(flat, lib, method, float(max_shift_nm))
    coef, se, fitted, dof, status, u_shift = _final_fit(flat, lib, shift, method)
    return (coef.reshape(*lead, coef.shape[-1]), se.reshape(*lead, se.shape[-1]),
            fitted.reshape(*lead, fitted.shape[-1]),
            dof.reshape(lead), status.reshape(lead), shift.reshape(lead),
            u_shift.reshape(lead))


# --- search -----------------------------------------------------------------------------------

def _coarse_grid(max_shift_nm: float) -> np.ndarray:
    """Shifts from −max to +max (nm), evenly spaced by at most ``GRID_STEP_NM``."""
    half = max(1, math.ceil(max_shift_nm / GRID_STEP_NM))
    return np.linspace(-max_shift_nm, max_shift_nm, 2 * half + 1)


def _search(flat: np.ndarray, lib: _ShiftedLibrary, method: Method, max_shift_nm: float
            ) -> np.ndarray:
    """δ (nm) minimising each spectrum's RSS; NaN where no δ gives a fit."""
    deltas = _coarse_grid(max_shift_nm)
    rss = _grid_rss(flat, lib, deltas, method)
    order = np.argsort(np.abs(deltas), kind="stable")  # ties: the point nearest δ = 0
    best = order[np.argmin(rss[:, order], axis=1)]
    shift = np.full(flat.shape[0], np.nan)
    rows = np.flatnonzero(np.isfinite(rss[np.arange(flat.shape[0]), best]))
    if not rows.size:
        return shift

    def rss_at(idx: np.ndarray, at: np.ndarray) -> np.ndarray:
        return _rss_each(flat[rows[idx]], lib, at, method)

    shift[rows] = _brent_bounded(rss_at, _start(deltas, best[rows], rss_at), XATOL_NM)
    return shift


def _grid_rss(flat: np.ndarray, lib: _ShiftedLibrary, deltas: np.ndarray, method: Method
              ) -> np.ndarray:
    """RSS (n, n_grid) of every spectrum at every grid shift; inf where not fitted."""
    rss = np.empty((flat.shape[0], deltas.size))
    for g, delta in enumerate(deltas):
        fit = fit_spectra(flat, lib.design(float(delta)), lib.n_components, method)
        rss[:, g] = fit.summary.sum_squares
    rss[~np.isfinite(rss)] = np.inf
    return rss


def _start(deltas: np.ndarray, g: np.ndarray,
           rss_at: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> _BrentState:
    """Brent's state at each best grid point g: bracket and parabola from its neighbours.

    The grid's RSS only chose g; the three points are evaluated again spectrum by spectrum
    (module docstring, step 1). The lower neighbour is Brent's w (second best), the other
    its v; the last two step lengths are set to the grid step, so that the first parabolic
    step (at most half a grid step from g) is accepted.
    """
    n = g.size
    left, right = np.maximum(g - 1, 0), np.minimum(g + 1, deltas.size - 1)
    f_centre, f_left, f_right = np.split(
        rss_at(np.tile(np.arange(n), 3), deltas[np.r_[g, left, right]]), 3)
    w_is_left = f_left <= f_right
    return _BrentState(
        a=deltas[left], b=deltas[right], x=deltas[g], fx=f_centre,
        w=np.where(w_is_left, deltas[left], deltas[right]),
        fw=np.where(w_is_left, f_left, f_right),
        v=np.where(w_is_left, deltas[right], deltas[left]),
        fv=np.where(w_is_left, f_right, f_left),
        step=np.full(n, deltas[1] - deltas[0]))


def _rss_each(values: np.ndarray, lib: _ShiftedLibrary, deltas: np.ndarray, method: Method
              ) -> np.ndarray:
    """RSS of each spectrum (n, m) at its own δ (n,), over its readings present; inf where
    the design is rank deficient."""
    out = np.empty(values.shape[0])
    step = block_spectra(lib.wl.size, lib.n_terms)
    for lo in range(0, values.shape[0], step):
        part = slice(lo, lo + step)
        designs, masked = _masked(lib.designs(deltas[part]), values[part])
        fit = fit_each(designs, masked, lib.n_components, method)
        out[part] = np.where(fit.full_rank, fit.rss, np.inf)
    return out


def _masked(designs: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Absent readings (NaN) as zero rows of the designs and zero values."""
    present = ~np.isnan(values)
    if present.all():
        return designs, values
    return designs * present[:, :, None], np.where(present, values, 0.0)


class _BrentState:
    """Brent's bounded search for many functions at once (arrays, one entry each).

    ``a, b``: bracket; ``x, fx``: best point so far; ``w, fw``: second best; ``v, fv``:
    the previous w; ``step``: the last step and ``before``: the one before it (their
    lengths decide whether a parabolic step is accepted).
    """

    def __init__(self, *, a: np.ndarray, b: np.ndarray, x: np.ndarray, fx: np.ndarray,
                 w: np.ndarray, fw: np.ndarray, v: np.ndarray, fv: np.ndarray,
                 step: np.ndarray) -> None:
        self.a, self.b, self.x, self.fx = a.copy(), b.copy(), x.copy(), fx.copy()
        self.w, self.fw, self.v, self.fv = w.copy(), fw.copy(), v.copy(), fv.copy()
        self.step, self.before = step.copy(), step.copy()


def _brent_bounded(func: Callable[[np.ndarray, np.ndarray], np.ndarray], s: _BrentState,
                   xatol: float) -> np.ndarray:
    """Minimise every function in its bracket; return the x of each (``func(idx, at)``
    evaluates the functions ``idx`` at the points ``at``).

    The steps and the stopping rule are those of scipy's ``_minimize_scalar_bounded``
    (Brent 1973): stop when |x − m| ≤ 2·tol − (b − a)/2, m the bracket's middle and
    tol = √ε·|x| + xatol/3.
    """
    active = np.arange(s.x.size)
    for _ in range(MAX_STEPS):
        tol1 = _SQRT_EPS * np.abs(s.x[active]) + xatol / 3.0
        middle = 0.5 * (s.a[active] + s.b[active])
        going = np.abs(s.x[active] - middle) > 2.0 * tol1 - 0.5 * (s.b[active] - s.a[active])
        active, tol1, middle = active[going], tol1[going], middle[going]
        if not active.size:
            break
        at = _next_point(s, active, tol1, middle)
        _update(s, active, at, func(active, at))
    return s.x


def _next_point(s: _BrentState, i: np.ndarray, tol1: np.ndarray, middle: np.ndarray
                ) -> np.ndarray:
    """The next trial point of each active search: parabolic where acceptable, else golden
    section; never closer than tol1 to x."""
    a, b, x, fx = s.a[i], s.b[i], s.x[i], s.fx[i]
    with np.errstate(invalid="ignore", over="ignore"):
        r = (x - s.w[i]) * (fx - s.fv[i])
        q = (x - s.v[i]) * (fx - s.fw[i])
        p = (x - s.v[i]) * q - (x - s.w[i]) * r
        q = 2.0 * (q - r)
        p = np.where(q > 0, -p, p)
        q = np.abs(q)
        before = s.before[i]
        parabolic = (np.abs(before) > tol1) & (np.abs(p) < np.abs(0.5 * q * before)) \
            & (p > q * (a - x)) & (p < q * (b - x))
        rat = np.where(parabolic, p / np.where(parabolic, q, 1.0), 0.0)
    near_end = parabolic & (((x + rat - a) < 2 * tol1) | ((b - x - rat) < 2 * tol1))
    towards = np.sign(middle - x) + ((middle - x) == 0)
    rat = np.where(near_end, tol1 * towards, rat)
    golden = ~parabolic
    gap = np.where(x >= middle, a - x, b - x)
    # the step before last becomes the last one (a golden step records the gap instead)
    s.before[i] = np.where(golden, gap, s.step[i])
    rat = np.where(golden, _GOLDEN * gap, rat)
    s.step[i] = rat
    sign = np.sign(rat) + (rat == 0)
    return x + sign * np.maximum(np.abs(rat), tol1)


def _update(s: _BrentState, i: np.ndarray, u: np.ndarray, fu: np.ndarray) -> None:
    """Shrink each bracket around the best point and shift the x, w, v records."""
    x, fx, w, fw, v, fv = s.x[i], s.fx[i], s.w[i], s.fw[i], s.v[i], s.fv[i]
    better = fu <= fx
    # better: u becomes x, x becomes w, w becomes v; the bracket closes on x's other side
    s.a[i] = np.where(better, np.where(u >= x, x, s.a[i]), np.where(u < x, u, s.a[i]))
    s.b[i] = np.where(better, np.where(u >= x, s.b[i], x), np.where(u < x, s.b[i], u))
    to_w = ~better & ((fu <= fw) | (w == x))
    to_v = ~better & ~to_w & ((fu <= fv) | (v == x) | (v == w))
    s.v[i] = np.where(better | to_w, w, np.where(to_v, u, v))
    s.fv[i] = np.where(better | to_w, fw, np.where(to_v, fu, fv))
    s.w[i] = np.where(better, x, np.where(to_w, u, w))
    s.fw[i] = np.where(better, fx, np.where(to_w, fu, fw))
    s.x[i] = np.where(better, u, x)
    s.fx[i] = np.where(better, fu, fx)


# --- final fit and uncertainties ------------------------------------------------------------

def _final_fit(flat: np.ndarray, lib: _ShiftedLibrary, shift: np.ndarray, method: Method
               ) -> tuple[np.ndarray, ...]:
    """coef, std_error, fitted, dof, status, u_shift at each spectrum's δ, block by block.

    ``lib`` may be any object with ``n_components``, ``n_terms``, ``designs(deltas)`` and
    ``jacobian(deltas, coef)``: the scatter fit (:mod:`mixsolve.solve.scatter`) uses it with
    the exponent in place of δ."""
    n_spec, m = flat.shape
    p = lib.n_terms
    coef = np.full((n_spec, p), np.nan)
    se = np.full((n_spec, p), np.nan)
    fitted = np.full((n_spec, m), np.nan)
    dof = np.zeros(n_spec, dtype=np.int64)
    status = np.zeros(n_spec, dtype=np.int64)
    u_shift = np.full(n_spec, np.nan)
    step = block_spectra(m, p + 1)
    for lo in range(0, n_spec, step):
        part = slice(lo, lo + step)
        outs = _final_block(flat[part], lib, np.nan_to_num(shift[part]), method)
        for store, value in zip((coef, se, fitted, dof, status, u_shift), outs, strict=True):
            store[part] = value
    return coef, se, fitted, dof, status, u_shift


def _final_block(values: np.ndarray, lib: _ShiftedLibrary, shift: np.ndarray, method: Method
                 ) -> tuple[np.ndarray, ...]:
    """:func:`_final_fit` for one block of spectra (finite shifts)."""
    p = lib.n_terms
    present = ~np.isnan(values)
    n_present = present.sum(axis=1)
    design = lib.designs(shift)
    masked_design, masked = _masked(design, values)
    fit = fit_each(masked_design, masked, lib.n_components, method)
    too_few = n_present < p
    ok = fit.full_rank & ~too_few
    status = np.where(n_present < values.shape[1], MISSING, 0) | np.where(too_few, TOO_FEW, 0) \
        | np.where(~too_few & ~fit.full_rank, DEPENDENT, 0)
    coef = np.where(ok[:, None], fit.coef, np.nan)
    fitted = np.einsum("nmp,np->nm", design, coef)
    dof = np.where(ok, n_present - p - 1, -1)  # the shift costs one degree of freedom
    status |= np.where(ok & (dof <= 0), NO_DOF, 0)  # (a spectrum not fitted has no fit)
    residual = np.where(present, values - fitted, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.einsum("nm,nm->n", residual, residual) / dof
    # linearised joint covariance of (coefficients, δ): s² (JᵀJ)⁻¹, J = [D | ∂A/∂δ]
    jac = lib.jacobian(shift, coef) * present
    diag, joint_ok = inverse_diagonal(np.concatenate([masked_design, jac[:, :, None]], axis=2))
    good = ok & (dof > 0) & joint_ok
    sd = np.sqrt(np.clip(diag * np.where(good, s2, np.nan)[:, None], 0, None))
    return coef, sd[:, :p], fitted, np.maximum(dof, 0), status, sd[:, p]
