"""How wrong a library may be, with the correlation of its errors over wavelengths.

A library's absorptivities ε_k(λ) carry errors that are *correlated across wavelengths*: a
standard made up 1.5 % too strong scales that component's whole spectrum; a shared stock
(purity, weighing) scales every standard made from it; a cell offset while a standard was
read shifts its whole spectrum. Treated as independent from wavelength to wavelength such
errors average out over hundreds of wavelengths, which they do not.

The library therefore carries its error as a set of *error patterns* P_f (variable
``error_pattern``, dims ``(error_source, component, wavelength)``, the library's unit):

    δε_k(λ) = Σ_f P_f[k, λ] · z_f,   z_f independent, mean 0, variance 1,

so that cov(ε_k(λ), ε_j(λ')) = Σ_f P_f[k, λ] · P_f[j, λ'] (a low-rank covariance, GUM
JCGM 100:2008 §5.2 for correlated input quantities; JCGM 102:2011 for vector quantities).
Each pattern has a kind (coordinate ``error_kind``):

``standards_scatter``
    One per standard, from the standards' residual spectra (what the line fit leaves):
    the heteroskedasticity-consistent ("sandwich") estimate of the slope's covariance
    (White 1980; the HC2 form of MacKinnon & White 1985), with the part along the
    component's own spectrum taken out when the declared preparation stands for it.
``preparation``
    One per component: a fully correlated scale error ε_k·s_k. s_k comes from the
    scale error the standards' residuals show (Type A, the part of the sandwich estimate
    along ε_k) and the one the declared preparation uncertainties give (Type B, column
    ``u_concentration``, independent between standards): one effect evaluated two ways,
    counted once. The declared value is used unless the standards' scatter shows it too
    small: s_A² > s_B²·χ²₀.₉₅(ν)/ν with ν = n − q (a one-sided χ² test of a variance
    against a stated one at the 5 % level), then s_A. Without a declaration, s_A.
``stock``
    One per stock (column ``stock``) with a declared ``u_stock_rel``: a stock error scales
    every standard made from it alike, so it is invisible to the regression; it enters
    each component in proportion to the weight its standards from that stock carry in the
    slope.
``declared_scale``
    One per component of an imported library with a stated relative scale uncertainty
    (e.g. a published absorptivity).
``declared_u``
    One per component of an imported library with stated u(ε): taken as fully correlated
    within the component (a table's error is mostly one of scale or of the standard
    behind it; conservative), independent between components.

References: JCGM 100:2008 (GUM) §5.2; JCGM 101:2008 and 102:2011 (Monte Carlo, vector
outputs); Eurachem/CITAC guide CG 4, "Quantifying Uncertainty in Analytical Measurement",
3rd ed. (2012), on calibration standards and shared stock (from memory); White, H.
Econometrica 48 (1980) 817 (sandwich estimator); MacKinnon, J. G. & White, H.
J. Econometrics 29 (1985) 305 (HC2).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal, NamedTuple

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.names import per_component
from mixsolve.spectra import check_number

ERROR_SOURCE = "error_source"
ERROR_PATTERN = "error_pattern"
ERROR_KIND = "error_kind"
ErrorKind = Literal["standards_scatter", "preparation", "stock", "declared_scale",
                    "declared_u"]
ERROR_KINDS: tuple[str, ...] = ("standards_scatter", "preparation", "stock",
                                "declared_scale", "declared_u")


def slope_weights(x: np.ndarray, intercept: bool) -> np.ndarray:
    """Weights a_i of the standards in the fitted slope, ε̂ = Σ a_i·A_i.

    Through the origin a_i = x_i/Σx²; with an intercept a_i = (x_i − x̄)/Sxx.
    """
    x = np.asarray(x, dtype=float)
    if intercept:
        centred = x - x.mean()
        return centred / float(centred @ centred)
    return x / float(x @ x)


class ComponentError(NamedTuple):
    """One component's error from its standards (:func:`component_patterns`)."""

    scatter: np.ndarray  #: (n standards, m) ``standards_scatter`` patterns
    preparation: np.ndarray  #: (m,) the ``preparation`` pattern (0 when not used)
    scale: float  #: relative scale uncertainty kept
    scale_scatter: float  #: relative scale uncertainty the residuals show (Type A)
    scale_declared: float  #: declared one (Type B), NaN when not declared


def component_patterns(
    x: np.ndarray,
    residuals: np.ndarray,
    slope: np.ndarray,
    *,
    intercept: bool,
    u_relative: np.ndarray | None = None,
) -> ComponentError:
    """Error patterns of one component built from its standards.

    Parameters
    ----------
    x : array, shape (n,)
        b·c of each standard (cm × library concentration unit).
    residuals : array, shape (n, m)
        Each standard's spectrum minus the fitted line (AU).
    slope : array, shape (m,)
        The fitted absorptivity ε̂ (library unit).
    intercept : bool
        Whether the line had an intercept (q = 2 parameters) or not (q = 1).
    u_relative : array, shape (n,), optional
        Declared relative standard uncertainty of each standard's concentration
        (independent between standards); NaN or absent: not declared.

    Returns
    -------
    scatter : ndarray, shape (n, m)
        The ``standards_scatter`` patterns (library unit); the scale part removed when the
        declared preparation is used instead.
    preparation : ndarray, shape (m,)
        The ``preparation`` pattern: ε̂·s_B when the declared preparation is used, else 0
        (the scale part stays in the scatter patterns).
    scale, scale_scatter, scale_declared : float
        The relative scale uncertainty kept (:func:`preparation_scale`), the one the
        residuals show and the declared one (NaN when nothing was declared).

    Notes
    -----
    The sandwich estimate of cov(ε̂) is Σ_i a_i² r_i r_iᵀ/(1 − h_i) with a_i the slope
    weights (:func:`slope_weights`) and h_i the leverage of standard i (HC2, MacKinnon &
    White, J. Econometrics 29 (1985) 305: unbiased when the errors have equal variance;
    with five standards HC1's n/(n − q) leaves the top standard's leverage ~0.45
    uncorrected); its patterns are a_i·r_i/√(1 − h_i), so that at each wavelength Σ_f P_f²
    is the HC2 variance of that wavelength's slope. Each pattern's projection on ε̂
    (coefficient α_i) is its scale part: the Type A relative scale uncertainty is
    s_A = √Σα_i². The declared preparation gives s_B = √Σ (a_i x_i u_i)², since
    δε̂/ε̂ = Σ a_i x_i ρ_i for relative errors ρ_i of the standards. When s_B is kept
    (:func:`preparation_scale`), the scale parts are taken out of the scatter patterns and
    one pattern ε̂·s_B stands for them; otherwise the sandwich patterns stay whole. With
    n ≤ q there is nothing to estimate from: no scatter patterns, s_A = 0.
    """
    x = np.asarray(x, dtype=float)
    n, m = residuals.shape
    q = 2 if intercept else 1
    a = slope_weights(x, intercept)
    norm2 = float(slope @ slope)
    if n <= q or norm2 == 0:
        scatter = np.zeros((0, m))
        s_a = 0.0
    else:
        scatter = (a / np.sqrt(1.0 - leverage(x, intercept)))[:, None] * residuals
        alpha = scatter @ slope / norm2
        s_a = float(np.sqrt(np.sum(alpha**2)))
    s_b = float("nan")
    if u_relative is not None and np.isfinite(u_relative).any():
        u = np.where(np.isfinite(u_relative), u_relative, 0.0)
        s_b = float(np.sqrt(np.sum((a * x * u) ** 2)))
    scale = preparation_scale(s_a, s_b, n - q)
    if not np.isfinite(s_b) or scale == s_a:
        return ComponentError(scatter, np.zeros(m), scale, s_a, s_b)
    if scatter.shape[0]:
        scatter = scatter - alpha[:, None] * slope[None, :]
    return ComponentError(scatter, slope * s_b, scale, s_a, s_b)


def leverage(x: np.ndarray, intercept: bool) -> np.ndarray:
    """Leverage h_i of each standard in the line fit: x_i²/Σx² through the origin,
    1/n + (x_i − x̄)²/Sxx with an intercept (the diagonal of the hat matrix)."""
    x = np.asarray(x, dtype=float)
    if intercept:
        centred = x - x.mean()
        return 1.0 / x.size + centred**2 / float(centred @ centred)
    return x**2 / float(x @ x)


def preparation_scale(s_a: float, s_b: float, dof: int, level: float = 0.95) -> float:
    """The relative scale uncertainty a library keeps from the two evaluations.

    The declared (Type B) ``s_b`` unless the standards' scatter (Type A, ``s_a`` with
    ``dof`` degrees of freedom) shows it too small at ``level``: s_a² > s_b²·χ²_level(ν)/ν
    (``scipy.stats.chi2``); then ``s_a``. Without a declaration (``s_b`` NaN), ``s_a``.
    """
    from scipy.stats import chi2  # here: scipy.stats costs ~0.5 s to import

    if not np.isfinite(s_b):
        return s_a
    if dof > 0 and s_a**2 > s_b**2 * chi2.ppf(level, dof) / dof:
        return s_a
    return s_b


def stock_weights(x: np.ndarray, stocks: Sequence[str], intercept: bool) -> dict[str, float]:
    """Relative sensitivity of a component's slope to each of its stocks' errors.

    A stock error ρ (relative) multiplies the concentration of every standard made from
    it by (1 + ρ), so δε̂/ε̂ = ρ·Σ_{i from the stock} a_i·x_i (a_i the slope weights);
    the sum is 1 when every standard comes from one stock (through the origin or not).
    """
    w = slope_weights(x, intercept) * np.asarray(x, dtype=float)
    out: dict[str, float] = {}
    for label, weight in zip(stocks, w, strict=True):
        if label:
            out[label] = out.get(label, 0.0) + float(weight)
    return out


def check_patterns(library: xr.Dataset, name: str) -> None:
    """Refuse an ``error_pattern`` variable that is not what this module describes."""
    if ERROR_PATTERN not in library:
        return
    var = library[ERROR_PATTERN]
    if set(var.dims) != {ERROR_SOURCE, "component", "wavelength"}:
        raise InputError(f"{name}: {ERROR_PATTERN} has dims ({', '.join(map(str, var.dims))});"
                         f" expected ({ERROR_SOURCE}, component, wavelength)")
    values = var.values
    if not np.all(np.isfinite(values)):
        raise InputError(f"{name}: {ERROR_PATTERN} holds a value that is not a finite number; "
                         "every pattern value must be finite (0 where there is no error)")
    if ERROR_KIND in library.coords:
        kinds = [str(k) for k in library[ERROR_KIND].values]
        bad = [k for k in kinds if k not in ERROR_KINDS]
        if bad:
            raise InputError(f"{name}: error_kind {bad[0]!r} is not one of "
                             f"{', '.join(ERROR_KINDS)}")


def declared_patterns(
    absorptivity: np.ndarray,
    u_absorptivity: np.ndarray,
    components: Sequence[str],
    u_scale_rel: float | Mapping[str, float] | None,
) -> tuple[np.ndarray, list[str], list[str]]:
    """Patterns of an imported table: stated u(ε) and a stated relative scale uncertainty.

    Returns
    -------
    patterns : ndarray, shape (F, n_components, n_wavelengths)
    sources, kinds : list of str
        One name and kind per pattern.
    """
    n, m = absorptivity.shape
    patterns, sources, kinds = [], [], []
    u = np.where(np.isfinite(u_absorptivity), u_absorptivity, 0.0)
    for k, comp in enumerate(components):
        if np.any(u[k] > 0):
            p = np.zeros((n, m))
            p[k] = u[k]
            patterns.append(p)
            sources.append(f"stated u(ε) of {comp}")
            kinds.append("declared_u")
    scale = _scale_per_component(u_scale_rel, components)
    for k, comp in enumerate(components):
        if scale[k] > 0:
            p = np.zeros((n, m))
            p[k] = absorptivity[k] * scale[k]
            patterns.append(p)
            sources.append(f"stated scale of {comp}")
            kinds.append("declared_scale")
    stacked = np.stack(patterns) if patterns else np.zeros((0, n, m))
    return stacked, sources, kinds


def _scale_per_component(u_scale_rel: float | Mapping[str, float] | None,
                         components: Sequence[str]) -> np.ndarray:
    if u_scale_rel is None:
        return np.zeros(len(components))
    if isinstance(u_scale_rel, Mapping):
        return per_component(u_scale_rel, components, "u_scale_rel", lambda value, label:
                             check_number(value, label, low=0, high=1), 0.0)
    return np.full(len(components), check_number(
        u_scale_rel, "u_scale_rel", low=0, high=1,
        hint="a relative standard uncertainty, e.g. 0.02 for 2 %"))


def error_patterns(library: xr.Dataset) -> np.ndarray:
    """The library's error patterns, shape (F, n_components, n_wavelengths), library unit.

    A library without an ``error_pattern`` variable (an older file) gets one pattern per
    component from its ``u_absorptivity`` (NaN: 0), fully correlated within the component
    (conservative: see the module docstring, ``declared_u``).
    """
    if ERROR_PATTERN in library:  # plain numpy: a DataArray transpose costs ~0.3 ms a call
        var = library.variables[ERROR_PATTERN]
        return np.transpose(var.values, [var.dims.index(d) for d in
                                         (ERROR_SOURCE, "component", "wavelength")])
    eps = library["absorptivity"].transpose("component", "wavelength").values
    u = library["u_absorptivity"].transpose("component", "wavelength").values
    comps = [str(c) for c in library["component"].values]
    return declared_patterns(eps, u, comps, None)[0]


def pattern_counts(library: xr.Dataset) -> dict[str, int]:
    """How many error patterns of each kind the library holds (as :func:`error_patterns`
    reads it: a library without ``error_pattern`` or ``error_kind`` has ``declared_u``)."""
    count = error_patterns(library).shape[0]
    kinds = ([str(k) for k in library[ERROR_KIND].values]
             if ERROR_PATTERN in library and ERROR_KIND in library.coords
             else ["declared_u"] * count)
    return {k: kinds.count(k) for k in dict.fromkeys(kinds)}


def patterns_at(library: xr.Dataset, wavelengths_nm: np.ndarray) -> np.ndarray:
    """Error patterns at wavelengths inside the library's range, shape (F, m, n_components).

    Linear interpolation between the grid points around each wavelength, as
    :func:`mixsolve.library.absorptivity_at` (``numpy.interp``) gives ε (the patterns are
    linear in ε, so they interpolate alike), for every pattern at once; values on the grid
    are kept exactly.
    """
    patterns = error_patterns(library)
    grid = library["wavelength"].values
    at = np.clip(np.asarray(wavelengths_nm, dtype=float), grid[0], grid[-1])
    if grid.size == 1:
        return np.repeat(patterns, at.size, axis=2).transpose(0, 2, 1)
    right = np.clip(np.searchsorted(grid, at, side="right"), 1, grid.size - 1)
    left = right - 1
    weight = (at - grid[left]) / (grid[right] - grid[left])
    if not np.any(weight):  # every wavelength on the grid (the usual case): no arithmetic
        return patterns[:, :, left].transpose(0, 2, 1)
    out = patterns[:, :, left] * (1.0 - weight) + patterns[:, :, right] * weight
    return out.transpose(0, 2, 1)


def library_sensitivity(design: np.ndarray, patterns: np.ndarray) -> np.ndarray:
    """How each error pattern moves the fitted coefficients per unit of each coefficient.

    Parameters
    ----------
    design : array, shape (m, p)
        The fit's design at the used wavelengths (absorptivities at 1 cm, then baseline).
    patterns : array, shape (F, m, n)
        The library's error patterns at those wavelengths (:func:`patterns_at`).

    Returns
    -------
    ndarray, shape (F, p, n)
        M_f = G·P_f with G = (DᵀD)⁻¹Dᵀ (the least-squares pseudo-inverse): a library in
        error by P_f·z moves the coefficients by δx = −z·M_f·x_c (x_c the component
        coefficients), to first order.
    """
    if patterns.shape[0] == 0:
        return np.zeros((0, design.shape[1], patterns.shape[2]))
    g = np.linalg.pinv(design)
    return np.einsum("pm,fmn->fpn", g, patterns)


def library_quadratic(sensitivity: np.ndarray, n_out: int | None = None) -> np.ndarray:
    """The library's covariance as one quadratic form per output coefficient.

    Parameters
    ----------
    sensitivity : array, shape (F, p, n)
        :func:`library_sensitivity`.
    n_out : int, optional
        How many leading coefficients to keep (default all p; ``unmix`` keeps the n
        components).

    Returns
    -------
    ndarray, shape (n_out, n, n)
        Q_j = Σ_f m_fjᵀ m_fj with m_fj row j of M_f, so that var(x_j) = xᵀ Q_j x: F·p·n
        numbers reduced once per design to n_out·n², and n_out·n² operations per spectrum.
    """
    n_out = sensitivity.shape[1] if n_out is None else n_out
    rows = sensitivity[:, :n_out, :]
    return np.einsum("fjn,fjm->jnm", rows, rows)


def library_residual_form(design: np.ndarray, patterns: np.ndarray) -> np.ndarray | None:
    """The library's error left in the residual, as one quadratic form per wavelength.

    ``design`` (m, p) and ``patterns`` (F, m, n) as for :func:`library_sensitivity`.

    Returns
    -------
    ndarray, shape (m, n, n), or None
        K_i = Σ_f R_f[i]ᵀ R_f[i] with R_f = (I − H)·P_f and H = D·D⁺ the hat matrix of the
        fit: a library in error by Σ_f z_f·P_f leaves (I − H)·Σ_f z_f P_f·x in the residual
        of a spectrum with component coefficients x, of expected square xᵀ K_i x at reading
        i. None when the library states no error (F = 0).

    Notes
    -----
    A pattern along a component's own spectrum (``preparation``, ``stock``,
    ``declared_scale``) lies in the span of D and leaves nothing: only the parts of the
    patterns the fit cannot absorb (the standards' scatter) count. Summed over the readings,
    Σ_i xᵀ K_i x = xᵀ (Σ_f P_fᵀ(I − H)P_f) x, the expected residual sum of squares the
    library adds; per reading, so that it can be weighted by 1/σ_i²
    (:func:`mixsolve.solve.sample_checks.lack_of_fit`).
    """
    if patterns.shape[0] == 0:
        return None
    left = patterns - np.einsum("mp,fpn->fmn", design, library_sensitivity(design, patterns))
    return np.einsum("fia,fib->iab", left, left)


def library_variance(coef: np.ndarray, quadratic: np.ndarray) -> np.ndarray:
    """Variance of each coefficient from the library's error, per spectrum.

    Parameters
    ----------
    coef : array, shape (N, n)
        The component coefficients (b·c) of N spectra (NaN allowed: NaN out).
    quadratic : array, shape (n_out, n, n)
        :func:`library_quadratic`.

    Returns
    -------
    ndarray, shape (N, n_out)
        var(x_j) = xᵀ Q_j x = Σ_f (M_f·x)_j²: the first-order propagation of the
        correlated library error (GUM eq. 13 with the covariance Σ_f P_f P_fᵀ).
    """
    n_out, n, _ = quadratic.shape
    # one product for every Q_j at once: (N, n) @ (n, n_out·n), then xᵀ(Q_j x) per row
    moved = (coef @ quadratic.transpose(1, 0, 2).reshape(n, n_out * n)).reshape(-1, n_out, n)
    out = np.einsum("sjn,sn->sj", moved, coef)
    return np.maximum(out, 0.0, out=out)  # a sum of squares; rounding may not make it < 0
