"""Inverse calibration by partial least squares (PLS) from mixtures of known composition.

A PLS model is an :class:`xarray.Dataset` (stored by :mod:`mixsolve.io.model_store`) holding
everything prediction needs: the wavelength grid, the preprocessing (Savitzky–Golay first
derivative, centring, scaling), weights and loadings per model block, the cross-validation
figures and the Hotelling T² and Q-residual limits. :func:`calibrate` makes one,
:func:`predict` applies it. The PLS algorithm itself is scikit-learn's ``PLSRegression``
(NIPALS); this module does preprocessing, cross-validation, limits and labels around it.

Model blocks: ``pls2`` is one block predicting every component; ``pls1`` is one block per
component. Block arrays are padded with NaN beyond the block's number of latent variables.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr
from scipy import stats
from scipy.signal import savgol_filter
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold

from mixsolve._version import __version__
from mixsolve.errors import InputError
from mixsolve.library import COMPONENT
from mixsolve.solve.cls import solve_cls
from mixsolve.spectra import SAMPLE, WAVELENGTH, check_option, check_spectra, check_window
from mixsolve.units import concentration_basis

MODEL_KIND = "mixsolve-pls-model"
FORMAT_VERSION = 1
Scale = Literal["none", "autoscale"]
Split = Literal["blocks", "random"]
Mode = Literal["auto", "pls2", "pls1"]
SCALES: tuple[str, ...] = ("none", "autoscale")
SPLITS: tuple[str, ...] = ("blocks", "random")
MODES: tuple[str, ...] = ("auto", "pls2", "pls1")
#: Confidence levels of the T² and Q limits.
CONFIDENCE: tuple[float, ...] = (0.95, 0.99)
DEFAULT_MAX_LATENT = 15
DEFAULT_FOLDS = 10
ONE_SE_RULE = (
    "fewest latent variables whose cross-validated error is within one standard error of the "
    "minimum; error = mean over samples (and components) of (prediction - reference)^2 / "
    "variance of the reference, standard error = sd over folds / sqrt(folds)"
)
UNCERTAINTY_BASIS = (
    "approximation from cross-validation and leverage: u = RMSECV * sqrt((1 + h) / (1 + h_cal)), "
    "h = 1/n + T^2/(n - 1) the sample's leverage, h_cal = (1 + a)/n the mean calibration "
    "leverage; includes the reference-value error as it shows in RMSECV, assumes the sample "
    "resembles the calibration mixtures"
)
#: Flag codes of PLS predictions (docs/pls.md).
FLAG_CODES = {
    "t2_above_95": "Hotelling T² above its 95 % limit",
    "t2_above_99": "Hotelling T² above its 99 % limit: outside the calibration space",
    "q_above_95": "Q residual above its 95 % limit",
    "q_above_99": "Q residual above its 99 % limit: a spectral feature the calibration "
                  "does not explain",
    "outside_range": "prediction outside the calibrated concentration range",
    "incomplete_spectrum": "missing readings at model wavelengths: no prediction",
}


# ----------------------------------------------------------------------------- reference


def reference_matrix(reference: pd.DataFrame | xr.DataArray, *,
                     unit: str | None = None) -> xr.DataArray:
    """Turn known concentrations into a labelled (sample, component) array in one unit.

    Parameters
    ----------
    reference : DataFrame or DataArray
        Tidy table with columns ``sample, component, concentration, unit`` (one row per
        sample × component; a ``line`` column, if present, names rows in messages; other
        columns are ignored), or a DataArray with dims ``("sample", "component")``.
    unit : str, optional
        Unit of a DataArray's values (default its ``attrs["unit"]``). Ignored for tables,
        whose values are converted to the unit of their first row.

    Returns
    -------
    DataArray with dims ("sample", "component")
        Concentrations; ``attrs["unit"]`` is the common unit.

    Raises
    ------
    InputError
        Missing columns, a sample × component given twice or not at all, a negative or
        missing value, units of mixed kind (amount and mass) or not a concentration.
    """
    if isinstance(reference, xr.DataArray):
        return _reference_from_array(reference, unit)
    if not isinstance(reference, pd.DataFrame):
        raise InputError(f"reference: expected a DataFrame or DataArray, got "
                         f"{type(reference).__name__}")
    source = reference.attrs.get("source", "reference")
    missing = [c for c in ("sample", "component", "concentration", "unit")
               if c not in reference.columns]
    if missing:
        raise InputError(f"{source}: missing column(s) {', '.join(missing)}; a reference table "
                         "has columns sample, component, concentration, unit")
    if reference.empty:
        raise InputError(f"{source}: no rows")
    lines = (reference["line"].tolist() if "line" in reference.columns
             else list(range(1, len(reference) + 1)))
    label = "line" if "line" in reference.columns else "row"
    first_unit = str(reference["unit"].iloc[0])
    basis0, f0 = concentration_basis(first_unit, f"{source}, {label} {lines[0]}: unit")
    values: dict[tuple[str, str], float] = {}
    seen: dict[tuple[str, str], Any] = {}
    for line, row in zip(lines, reference.itertuples(index=False), strict=True):
        where = f"{source}, {label} {line}"
        key = (str(row.sample), str(row.component))
        if key in seen:
            raise InputError(f"{where}: sample {key[0]!r}, component {key[1]!r} appears twice "
                             f"(also {label} {seen[key]})")
        seen[key] = line
        value = float(row.concentration)
        if not np.isfinite(value):
            raise InputError(f"{where}: concentration of {key[1]!r} in {key[0]!r} is missing; "
                             "a calibration needs every known value")
        if value < 0:
            raise InputError(f"{where}: concentration {value:g} is negative")
        basis, factor = concentration_basis(str(row.unit), f"{where}: unit")
        if basis != basis0:
            raise InputError(
                f"{where}: unit {row.unit!r} is {basis}-based but {label} {lines[0]} uses "
                f"{first_unit!r}; give all reference values as amount (mol/L) or all as mass "
                "(g/L) concentrations")
        values[key] = value * factor / f0
    samples = list(dict.fromkeys(k[0] for k in values))
    comps = list(dict.fromkeys(k[1] for k in values))
    matrix = np.empty((len(samples), len(comps)))
    for i, s in enumerate(samples):
        for j, c in enumerate(comps):
            if (s, c) not in values:
                raise InputError(f"{source}: sample {s!r} has no concentration for {c!r}; give "
                                 "every component for every sample (0 where absent)")
            matrix[i, j] = values[(s, c)]
    return xr.DataArray(matrix, dims=(SAMPLE, COMPONENT),
                        coords={SAMPLE: samples, COMPONENT: comps},
                        attrs={"unit": first_unit, "source": source}, name="concentration")


def _reference_from_array(reference: xr.DataArray, unit: str | None) -> xr.DataArray:
    if set(reference.dims) != {SAMPLE, COMPONENT}:
        raise InputError(f"reference: expected dims ('sample', 'component'), got "
                         f"{reference.dims}")
    unit = unit or reference.attrs.get("unit")
    if not unit:
        raise InputError("reference: the concentration unit is not given (attrs['unit'] or "
                         "unit=...)")
    concentration_basis(str(unit), "reference unit")
    ref = reference.transpose(SAMPLE, COMPONENT).astype(float)
    values = ref.values
    bad = ~np.isfinite(values) | (values < 0)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        raise InputError(f"reference: concentration of {str(ref[COMPONENT].values[j])!r} in "
                         f"{str(ref[SAMPLE].values[i])!r} is {values[i, j]:g}; known values "
                         "must be finite and not negative")
    return ref.assign_coords({SAMPLE: [str(s) for s in ref[SAMPLE].values],
                              COMPONENT: [str(c) for c in ref[COMPONENT].values]}
                             ).assign_attrs(unit=str(unit))


def _names(values: Sequence[str], most: int = 5) -> str:
    shown = ", ".join(map(repr, values[:most]))
    return shown + (f" and {len(values) - most} more" if len(values) > most else "")


def _match_samples(spectra: xr.DataArray, ref: xr.DataArray) -> xr.DataArray:
    measured = [str(s) for s in spectra[SAMPLE].values]
    known = [str(s) for s in ref[SAMPLE].values]
    no_ref = [s for s in measured if s not in set(known)]
    no_spec = [s for s in known if s not in set(measured)]
    if no_ref:
        raise InputError(f"reference: no concentrations for spectra {_names(no_ref)}; every "
                         "calibration spectrum needs its known composition")
    if no_spec:
        raise InputError(f"spectra: no spectrum for reference samples {_names(no_spec)}; "
                         "remove them from the reference or add their spectra")
    return ref.sel({SAMPLE: measured})


# ----------------------------------------------------------------------------- preprocessing


def check_derivative(window_points: int | None, polyorder: int, wavelengths_nm: np.ndarray
                     ) -> dict[str, Any] | None:
    """Validate Savitzky–Golay settings against the wavelength grid.

    Returns
    -------
    dict or None
        ``{"order": 1, "window_points", "polyorder", "step_nm"}``; None without a derivative.

    Raises
    ------
    InputError
        An even or too short window, a window longer than the grid, or an uneven grid.
    """
    if window_points is None:
        return None
    w, p = int(window_points), int(polyorder)
    if w != window_points or w < 3 or w % 2 == 0:
        raise InputError(f"derivative: window of {window_points} points must be an odd whole "
                         "number ≥ 3, e.g. 11")
    if not 1 <= p < w:
        raise InputError(f"derivative: polynomial order {polyorder} must be ≥ 1 and below the "
                         f"window ({w} points)")
    if w > wavelengths_nm.size:
        raise InputError(f"derivative: window of {w} points is longer than the "
                         f"{wavelengths_nm.size} wavelengths used")
    steps = np.diff(wavelengths_nm)
    step = float(np.median(steps))
    if np.any(np.abs(steps - step) > 1e-6 * max(step, 1e-12) + 1e-9):
        raise InputError(
            f"derivative: the wavelengths used are not evenly spaced (steps "
            f"{steps.min():g}-{steps.max():g} nm); a Savitzky–Golay derivative needs an even grid")
    return {"order": 1, "window_points": w, "polyorder": p, "step_nm": step}


def preprocess(absorbance: np.ndarray, derivative: dict[str, Any] | None) -> np.ndarray:
    """Apply the per-spectrum preprocessing (last axis: wavelength).

    Parameters
    ----------
    absorbance : array, shape (n_samples, n_wavelengths)
        Absorbance (AU).
    derivative : dict or None
        From :func:`check_derivative`.

    Returns
    -------
    ndarray
        Absorbance (AU) unchanged, or its first derivative dA/dλ (AU/nm) by
        ``scipy.signal.savgol_filter(..., deriv=1, delta=step_nm)`` (edges: polynomial fit
        to the first/last window, the filter's ``mode="interp"``).
    """
    if derivative is None:
        return np.asarray(absorbance, dtype=float)
    return savgol_filter(np.asarray(absorbance, dtype=float), derivative["window_points"],
                         derivative["polyorder"], deriv=1, delta=derivative["step_nm"],
                         axis=-1, mode="interp")


def _centre_scale(x: np.ndarray, scale: str) -> tuple[np.ndarray, np.ndarray]:
    mean = x.mean(axis=0)
    if scale == "none":
        return mean, np.ones(x.shape[1])
    sd = x.std(axis=0, ddof=1)
    return mean, np.where(sd > 0, sd, 1.0)


# ----------------------------------------------------------------------------- limits


def t2_limit(n_latent: int, n_calibration: int, confidence: float) -> float:
    """Hotelling T² limit for a new sample.

    Notes
    -----
    T²_lim = a (n − 1)(n + 1) / (n (n − a)) · F(confidence; a, n − a), with a latent
    variables and n calibration samples (the limit for a future observation, Tracy, Young &
    Mason 1992, J. Qual. Technol. 24:88; from memory). F quantile from ``scipy.stats.f``.
    """
    a, n = n_latent, n_calibration
    if n - a < 1:
        return float("nan")
    return float(a * (n - 1) * (n + 1) / (n * (n - a)) * stats.f.ppf(confidence, a, n - a))


def q_limit(residual_eigenvalues: np.ndarray, confidence: float) -> tuple[float, str]:
    """Q-residual (squared prediction error) limit.

    Parameters
    ----------
    residual_eigenvalues : array
        Eigenvalues λⱼ of the calibration residual covariance EᵀE/(n − 1).
    confidence : float
        E.g. 0.95.

    Returns
    -------
    limit : float
        NaN when the calibration leaves no residual (θ₁ = 0).
    method : str
        ``"jackson-mudholkar"`` or ``"box"`` (fallback).

    Notes
    -----
    Jackson & Mudholkar (1979, Technometrics 21:341): with θᵢ = Σⱼ λⱼⁱ (i = 1, 2, 3),
    h₀ = 1 − 2θ₁θ₃/(3θ₂²) and c the standard normal quantile at ``confidence``
    (``scipy.stats.norm.ppf``), Q_lim = θ₁ [c √(2θ₂h₀²)/θ₁ + 1 + θ₂h₀(h₀ − 1)/θ₁²]^(1/h₀).
    When h₀ ≤ 0 or the bracket is not positive (one large eigenvalue among many small
    ones) the approximation breaks down, and Box's (1954) scaled chi-square is used:
    Q_lim = g χ²(confidence; h) with g = θ₂/θ₁, h = θ₁²/θ₂.
    """
    lam = np.clip(np.asarray(residual_eigenvalues, dtype=float), 0.0, None)
    th1, th2, th3 = (float(np.sum(lam**i)) for i in (1, 2, 3))
    if th1 <= 0 or th2 <= 0:
        return float("nan"), "none"
    h0 = 1.0 - 2.0 * th1 * th3 / (3.0 * th2**2)
    c = float(stats.norm.ppf(confidence))
    if h0 > 0:
        base = c * np.sqrt(2.0 * th2 * h0**2) / th1 + 1.0 + th2 * h0 * (h0 - 1.0) / th1**2
        if base > 0:
            return float(th1 * base ** (1.0 / h0)), "jackson-mudholkar"
    g, h = th2 / th1, th1**2 / th2
    return float(g * stats.chi2.ppf(confidence, h)), "box"


# ----------------------------------------------------------------------------- fitting


def _fit_block(xs: np.ndarray, ys: np.ndarray, n_latent: int) -> dict[str, np.ndarray]:
    """Fit one PLS block on centred (and scaled) X and Y with scikit-learn."""
    pls = PLSRegression(n_components=n_latent, scale=False).fit(xs, ys)
    return {"rotations": pls.x_rotations_, "loadings": pls.x_loadings_,
            "weights": pls.x_weights_, "y_loadings": pls.y_loadings_}


def _x_space(xs: np.ndarray, rotations: np.ndarray, loadings: np.ndarray,
             score_variance: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Scores, T², residual matrix and Q of spectra ``xs`` in one block."""
    scores = xs @ rotations
    t2 = np.sum(scores**2 / score_variance, axis=1)
    residual = xs - scores @ loadings.T
    return scores, t2, residual, np.sum(residual**2, axis=1)


def one_standard_error_choice(criterion: np.ndarray, standard_error: np.ndarray) -> int:
    """Fewest latent variables within one standard error of the minimum.

    Parameters
    ----------
    criterion, standard_error : array, shape (n_candidates,)
        Cross-validated error for 1, 2, ... latent variables and its standard error.

    Returns
    -------
    int
        The chosen number of latent variables (1-based).
    """
    best = int(np.nanargmin(criterion))
    threshold = criterion[best] + (standard_error[best] if np.isfinite(standard_error[best])
                                   else 0.0)
    return int(np.flatnonzero(criterion <= threshold)[0]) + 1


def make_folds(n_samples: int, folds: int, split: str, seed: int) -> np.ndarray:
    """Fold index (0-based) of each sample: contiguous blocks in order, or shuffled."""
    kfold = KFold(n_splits=folds, shuffle=split == "random",
                  random_state=seed if split == "random" else None)
    index = np.empty(n_samples, dtype=np.int64)
    for f, (_, test) in enumerate(kfold.split(np.zeros(n_samples))):
        index[test] = f
    return index


def _groups(n_components: int, mode: str) -> list[list[int]]:
    return [list(range(n_components))] if mode == "pls2" else [[k] for k in range(n_components)]


def _cv_predictions(x: np.ndarray, y: np.ndarray, fold: np.ndarray, a_max: int, scale: str,
                    mode: str) -> np.ndarray:
    """Cross-validated predictions for 1..a_max latent variables, shape (a_max, n, n_y).

    One NIPALS fit with ``a_max`` latent variables per fold and block; the prediction with
    a latent variables uses its first a (NIPALS components are sequential, so this equals
    a fit with a components; tested).
    """
    pred = np.empty((a_max, *y.shape))
    for f in np.unique(fold):
        test, train = fold == f, fold != f
        mx, sx = _centre_scale(x[train], scale)
        my, sy = y[train].mean(axis=0), y[train].std(axis=0, ddof=1)
        sy = np.where(sy > 0, sy, 1.0)
        xs_train, xs_test = (x[train] - mx) / sx, (x[test] - mx) / sx
        for cols in _groups(y.shape[1], mode):
            block = _fit_block(xs_train, (y[train][:, cols] - my[cols]) / sy[cols], a_max)
            scores = xs_test @ block["rotations"]  # (n_test, a_max)
            parts = scores[:, :, None] * block["y_loadings"].T[None, :, :]
            ys_hat = np.cumsum(parts, axis=1)  # (n_test, a_max, n_cols)
            pred[:, np.flatnonzero(test)[:, None], cols] = (
                np.moveaxis(ys_hat, 1, 0) * sy[cols] + my[cols])
    return pred


def _criterion(pred: np.ndarray, y: np.ndarray, fold: np.ndarray, cols: list[int]
               ) -> tuple[np.ndarray, np.ndarray]:
    """Pooled CV error (variance-scaled) and its standard error over folds, per candidate."""
    var = y[:, cols].var(axis=0, ddof=1)
    sq = ((pred[:, :, cols] - y[None, :, cols]) ** 2 / var).mean(axis=2)  # (a_max, n)
    per_fold = np.stack([sq[:, fold == f].mean(axis=1) for f in np.unique(fold)], axis=1)
    k = per_fold.shape[1]
    return sq.mean(axis=1), per_fold.std(axis=1, ddof=1) / np.sqrt(k)


def _cls_cv(x: np.ndarray, y: np.ndarray, fold: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """CLS cross-validated and fitted predictions with absorptivities from the mixtures."""
    def fit_predict(train: np.ndarray, spectra: np.ndarray) -> np.ndarray:
        c = y[train]
        if np.linalg.matrix_rank(c) < c.shape[1]:
            return np.full((spectra.shape[0], y.shape[1]), np.nan)
        k_matrix = np.linalg.lstsq(c, x[train], rcond=None)[0]  # (n_y, n_wl), AU per unit
        coef = solve_cls(spectra, k_matrix.T, y.shape[1], "ols")[0]
        return coef

    cv = np.empty(y.shape)
    for f in np.unique(fold):
        cv[fold == f] = fit_predict(fold != f, x[fold == f])
    return cv, fit_predict(np.ones(len(y), dtype=bool), x)


def _rms(pred: np.ndarray, y: np.ndarray) -> np.ndarray:
    return np.sqrt(np.mean((pred - y) ** 2, axis=-2))


def _calibration_arrays(spectra: xr.DataArray, window: tuple[float, float] | None
                        ) -> tuple[np.ndarray, np.ndarray]:
    wl = spectra[WAVELENGTH].values
    if window is not None:
        tol = 1e-9 * max(1.0, float(wl.max()))
        keep = (wl >= window[0] - tol) & (wl <= window[1] + tol)
        if keep.sum() < 2:
            raise InputError(f"window {window[0]:g}-{window[1]:g} nm holds {int(keep.sum())} "
                             f"measured wavelength(s) (measured {wl[0]:g}-{wl[-1]:g} nm); a "
                             "calibration needs at least 2")
        spectra = spectra.isel({WAVELENGTH: np.flatnonzero(keep)})
    values = spectra.transpose(SAMPLE, WAVELENGTH).values.astype(float)
    if np.isnan(values).any():
        i, j = np.argwhere(np.isnan(values))[0]
        raise InputError(
            f"spectra: calibration sample {str(spectra[SAMPLE].values[i])!r} has no reading at "
            f"{spectra[WAVELENGTH].values[j]:g} nm; calibration spectra must be complete over "
            "the window (narrow it with a window)")
    return values, spectra[WAVELENGTH].values.astype(float)


def _check_counts(n: int, folds: int | None, max_latent: int) -> int:
    if n < 3:
        raise InputError(f"calibration: {n} sample(s); cross-validation needs at least 3 "
                         "calibration mixtures (use many more in practice)")
    k = min(DEFAULT_FOLDS, n) if folds is None else int(folds)
    if not 2 <= k <= n:
        raise InputError(f"folds: {folds} is not between 2 and the number of calibration "
                         f"samples ({n})")
    if int(max_latent) < 1:
        raise InputError(f"max_latent: {max_latent} must be at least 1")
    return k


def _latent_bound(x: np.ndarray, fold: np.ndarray, max_latent: int) -> int:
    """Largest usable number of latent variables: ≤ rank of every training set."""
    bound = min(int(max_latent), x.shape[1])
    for f in np.unique(fold):
        train = x[fold != f]
        bound = min(bound, int(np.linalg.matrix_rank(train - train.mean(axis=0))))
    bound = min(bound, int(np.linalg.matrix_rank(x - x.mean(axis=0))))
    if bound < 1:
        raise InputError("calibration: the spectra do not vary between the training samples "
                         "(rank 0); nothing to calibrate")
    return bound


def calibrate(
    spectra: xr.DataArray,
    reference: pd.DataFrame | xr.DataArray,
    *,
    window: tuple[float, float] | None = None,
    latent: int | Literal["auto"] = "auto",
    max_latent: int = DEFAULT_MAX_LATENT,
    folds: int | None = None,
    split: Split = "blocks",
    seed: int = 0,
    mode: Mode = "auto",
    scale: Scale = "none",
    derivative: int | None = None,
    polyorder: int = 2,
    compare: bool = False,
    pathlength_cm: float | None = None,
) -> xr.Dataset:
    """Build a PLS calibration from mixture spectra and their known concentrations.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Blank-corrected absorbance (AU) of the calibration mixtures; wavelength in nm.
        Complete (no NaN) over the wavelengths used.
    reference : DataFrame or DataArray
        Known concentrations (see :func:`reference_matrix`); its samples must be exactly
        those of ``spectra``.
    window : (float, float), optional
        Use the measured wavelengths from ``low`` to ``high`` nm, both included; default all.
    latent : int or "auto"
        Number of latent variables; ``"auto"`` chooses it by cross-validation with the
        one-standard-error rule (per block).
    max_latent : int
        Most latent variables tried (also bounded by the rank of every training set).
    folds : int, optional
        Number of cross-validation folds, 2 ≤ folds ≤ n; default min(10, n).
    split : {"blocks", "random"}
        Folds as contiguous blocks in the order of the spectra (keeps replicates measured
        one after another together), or shuffled with ``seed``.
    seed : int
        Seed of the ``random`` split.
    mode : {"auto", "pls2", "pls1"}
        One PLS2 model for all components, one PLS1 model per component, or whichever
        cross-validates better (lower mean variance-scaled error).
    scale : {"none", "autoscale"}
        After mean-centring (always), divide each wavelength by its standard deviation.
    derivative : int, optional
        Savitzky–Golay first derivative over this many points (odd), before centring.
    polyorder : int
        Polynomial order of the derivative filter.
    compare : bool
        Also cross-validate classical least squares (absorptivities estimated from the
        same mixtures) on the same folds; adds ``cls_rmsecv`` and ``cls_rmsec``.
    pathlength_cm : float, optional
        Pathlength of the calibration spectra (cm), recorded so that :func:`predict` can
        rescale spectra measured in other cells; default ``spectra.attrs``, else 1 cm.

    Returns
    -------
    Dataset
        The model: ``x_mean``, ``x_scale`` (wavelength); ``y_mean``, ``y_scale``
        (component); per block ``x_weights`` W, ``x_rotations`` R = W(PᵀW)⁻¹ and
        ``x_loadings`` P (block, wavelength, latent),
        ``y_loadings`` (block, component, latent), ``score_variance`` (block, latent),
        ``n_latent``, ``t2_limit`` and ``q_limit`` (block, confidence), ``q_theta``;
        ``block_of_component``; calibration figures ``rmsec``, ``rmsecv``,
        ``reference_min``/``reference_max`` (component); ``reference``, ``fitted``,
        ``cv_predicted`` (sample, component), ``fold``, ``calibration_t2``/``_q`` (sample,
        block); the CV curves ``cv_rmsecv``, ``cv_criterion``, ``cv_standard_error``
        (cv_mode, component, cv_latent) and ``cv_choice`` (cv_mode, component). ``attrs``
        record ``mixsolve_kind``, the mode, preprocessing, CV settings, unit and pathlength.

    Raises
    ------
    InputError
        Bad options, samples without reference values (or the reverse), incomplete
        spectra, too few samples, a component that does not vary.

    Notes
    -----
    Scikit-learn's ``PLSRegression`` (NIPALS, ``scale=False``) is fitted on X centred
    (and scaled) here and on Y centred and divided by its standard deviation, so each
    component weighs equally in PLS2; with ``scale="autoscale"`` this is exactly
    ``PLSRegression(scale=True)``. Centring and scaling are recomputed inside every CV
    training set. RMSEC = √(mean (ŷ − y)²) of the final fit (no degrees-of-freedom
    correction); RMSECV the same over the cross-validated predictions. The number of
    latent variables follows the one-standard-error rule (Hastie, Tibshirani & Friedman,
    Elements of Statistical Learning, §7.10): the CV error of a candidate is the mean over
    samples of (ŷ − y)²/var(y) (averaged over the block's components); its standard error
    is the standard deviation of the per-fold means over √folds. Hotelling T² and Q limits:
    :func:`t2_limit`, :func:`q_limit`.
    """
    spectra = check_spectra(spectra)
    if set(spectra.dims) != {SAMPLE, WAVELENGTH}:
        raise InputError(f"spectra: expected dims ('sample', 'wavelength'), got {spectra.dims}")
    check_option(split, SPLITS, "split")
    check_option(mode, MODES, "mode")
    check_option(scale, SCALES, "scale")
    window = check_window(window)
    if latent != "auto" and (isinstance(latent, bool) or not isinstance(latent, int | np.integer)
                             or latent < 1):
        raise InputError(f"latent: {latent!r} is not 'auto' or a whole number ≥ 1")
    b = float(spectra.attrs.get("pathlength_cm", 1.0) if pathlength_cm is None
              else pathlength_cm)
    if not np.isfinite(b) or b <= 0:
        raise InputError(f"pathlength: {b:g} cm is not a positive number")
    ref = _match_samples(spectra, reference_matrix(reference))
    raw, wl = _calibration_arrays(spectra, window)
    y = ref.values
    comps = [str(c) for c in ref[COMPONENT].values]
    flat = np.flatnonzero(y.std(axis=0) == 0)
    if flat.size:
        raise InputError(f"reference: component {comps[flat[0]]!r} has the same concentration "
                         "in every calibration sample; it must vary to be calibrated")
    deriv = check_derivative(derivative, polyorder, wl)
    x = preprocess(raw, deriv)
    n = x.shape[0]
    k_folds = _check_counts(n, folds, max_latent)
    fold = make_folds(n, k_folds, split, seed)
    a_max = _latent_bound(x, fold, max_latent)
    if latent != "auto" and latent > a_max:
        raise InputError(f"latent: {latent} latent variables is more than the {a_max} this "
                         f"calibration supports ({n} samples in {k_folds} folds, "
                         f"{wl.size} wavelengths, max_latent {max_latent})")

    cv = _cross_validate(x, y, fold, a_max, scale, latent)
    chosen_mode = mode if mode != "auto" else (
        "pls1" if len(comps) > 1 and cv["pls1"]["total"] < cv["pls2"]["total"] else "pls2")
    if len(comps) == 1:
        chosen_mode = "pls1"
    model = _final_model(x, y, wl, comps, fold, scale, chosen_mode, cv)
    model["reference"] = ((SAMPLE, COMPONENT), y)
    model = model.assign_coords({SAMPLE: [str(s) for s in ref[SAMPLE].values]})
    model["fold"] = ((SAMPLE,), fold)
    model["reference_min"] = ((COMPONENT,), y.min(axis=0))
    model["reference_max"] = ((COMPONENT,), y.max(axis=0))
    _add_cv_curves(model, cv, y)
    if compare:
        cls_cv, cls_fit = _cls_cv(x, y, fold)
        model["cls_rmsecv"] = ((COMPONENT,), _rms(cls_cv, y))
        model["cls_rmsec"] = ((COMPONENT,), _rms(cls_fit, y))
        model["cls_cv_predicted"] = ((SAMPLE, COMPONENT), cls_cv)
    unit = ref.attrs["unit"]
    for name in ("rmsec", "rmsecv", "reference_min", "reference_max", "reference", "fitted",
                 "cv_predicted", "cv_rmsecv", "y_mean", "y_scale", "cls_rmsecv", "cls_rmsec",
                 "cls_cv_predicted"):
        if name in model:
            model[name].attrs["units"] = unit
    model.attrs.update({
        "mixsolve_kind": MODEL_KIND,
        "format_version": FORMAT_VERSION,
        "mode": chosen_mode,
        "mode_requested": mode,
        "unit": unit,
        "pathlength_cm": b,
        "window_nm": "" if window is None else f"{window[0]:g}-{window[1]:g}",
        "preprocessing": json.dumps({"centring": "mean", "scale": scale, "derivative": deriv}),
        "cross_validation": json.dumps({
            "split": split, "folds": k_folds, "seed": seed if split == "random" else None,
            "latent_requested": latent, "max_latent_tried": a_max, "rule": ONE_SE_RULE}),
        "uncertainty_basis": UNCERTAINTY_BASIS,
        "source": str(spectra.attrs.get("source", "")),
        "reference_source": str(ref.attrs.get("source", "")),
        "mixsolve_version": __version__,
    })
    return model


def _cross_validate(x: np.ndarray, y: np.ndarray, fold: np.ndarray, a_max: int, scale: str,
                    latent: int | str) -> dict[str, dict[str, Any]]:
    """CV curves and choices for both modes (pls1 only when there are several components)."""
    out: dict[str, dict[str, Any]] = {}
    n_y = y.shape[1]
    for mode in ("pls2", "pls1"):
        pred = _cv_predictions(x, y, fold, a_max, scale, mode)
        crit = np.empty((n_y, a_max))
        se = np.empty((n_y, a_max))
        choice = np.empty(n_y, dtype=np.int64)
        for cols in _groups(n_y, mode):
            c, s = _criterion(pred, y, fold, cols)
            a = one_standard_error_choice(c, s) if latent == "auto" else int(latent)
            crit[cols], se[cols], choice[cols] = c, s, a
        per_comp = np.array([crit[k, choice[k] - 1] for k in range(n_y)])
        out[mode] = {"pred": pred, "criterion": crit, "se": se, "choice": choice,
                     "total": float(per_comp.mean())}
        if n_y == 1:
            out["pls1"] = out["pls2"]
            break
    return out


def _final_model(x: np.ndarray, y: np.ndarray, wl: np.ndarray, comps: list[str],
                 fold: np.ndarray, scale: str, mode: str, cv: dict[str, dict[str, Any]]
                 ) -> xr.Dataset:
    n, n_y = y.shape
    mx, sx = _centre_scale(x, scale)
    my, sy = y.mean(axis=0), y.std(axis=0, ddof=1)
    xs, ys = (x - mx) / sx, (y - my) / sy
    groups = _groups(n_y, mode)
    choice = cv[mode]["choice"]
    a_blocks = [int(choice[cols[0]]) for cols in groups]
    a_pad = max(a_blocks)
    nb = len(groups)
    rot = np.full((nb, wl.size, a_pad), np.nan)
    weights = np.full((nb, wl.size, a_pad), np.nan)
    load = np.full((nb, wl.size, a_pad), np.nan)
    yload = np.full((nb, n_y, a_pad), np.nan)
    svar = np.full((nb, a_pad), np.nan)
    t2_lim = np.empty((nb, len(CONFIDENCE)))
    q_lim = np.empty((nb, len(CONFIDENCE)))
    theta = np.empty((nb, 3))
    cal_t2, cal_q = np.empty((n, nb)), np.empty((n, nb))
    fitted = np.empty_like(y)
    block_of = np.empty(n_y, dtype=np.int64)
    methods = []
    for b, (cols, a) in enumerate(zip(groups, a_blocks, strict=True)):
        block = _fit_block(xs, ys[:, cols], a)
        scores = xs @ block["rotations"]
        var = scores.var(axis=0, ddof=1)
        _, t2, resid, q = _x_space(xs, block["rotations"], block["loadings"], var)
        lam = np.linalg.svd(resid, compute_uv=False) ** 2 / (n - 1)
        rot[b, :, :a], load[b, :, :a], svar[b, :a] = block["rotations"], block["loadings"], var
        weights[b, :, :a] = block["weights"]
        yload[b, :, :a] = 0.0
        yload[b, cols, :a] = block["y_loadings"]
        fitted[:, cols] = scores @ block["y_loadings"].T * sy[cols] + my[cols]
        t2_lim[b] = [t2_limit(a, n, c) for c in CONFIDENCE]
        limits = [q_limit(lam, c) for c in CONFIDENCE]
        q_lim[b] = [v for v, _ in limits]
        methods.append(limits[0][1])
        theta[b] = [np.sum(lam**i) for i in (1, 2, 3)]
        cal_t2[:, b], cal_q[:, b] = t2, q
        block_of[cols] = b
    cv_pred = np.stack([cv[mode]["pred"][choice[k] - 1, :, k] for k in range(n_y)], axis=1)
    blocks = ["all"] if mode == "pls2" else comps
    return xr.Dataset(
        {
            "x_mean": ((WAVELENGTH,), mx), "x_scale": ((WAVELENGTH,), sx),
            "y_mean": ((COMPONENT,), my), "y_scale": ((COMPONENT,), sy),
            "x_weights": (("block", WAVELENGTH, "latent"), weights),
            "x_rotations": (("block", WAVELENGTH, "latent"), rot),
            "x_loadings": (("block", WAVELENGTH, "latent"), load),
            "y_loadings": (("block", COMPONENT, "latent"), yload),
            "score_variance": (("block", "latent"), svar),
            "n_latent": (("block",), np.asarray(a_blocks, dtype=np.int64)),
            "t2_limit": (("block", "confidence"), t2_lim),
            "q_limit": (("block", "confidence"), q_lim,
                        {"method": json.dumps(dict(zip(blocks, methods, strict=True)))}),
            "q_theta": (("block", "theta"), theta),
            "block_of_component": ((COMPONENT,), block_of),
            "rmsec": ((COMPONENT,), _rms(fitted, y)),
            "rmsecv": ((COMPONENT,), _rms(cv_pred, y)),
            "fitted": ((SAMPLE, COMPONENT), fitted),
            "cv_predicted": ((SAMPLE, COMPONENT), cv_pred),
            "calibration_t2": ((SAMPLE, "block"), cal_t2),
            "calibration_q": ((SAMPLE, "block"), cal_q),
        },
        coords={WAVELENGTH: (WAVELENGTH, wl, {"units": "nm"}), COMPONENT: comps,
                "block": blocks, "latent": np.arange(1, a_pad + 1),
                "confidence": list(CONFIDENCE), "theta": [1, 2, 3]},
    )


def _add_cv_curves(model: xr.Dataset, cv: dict[str, dict[str, Any]], y: np.ndarray) -> None:
    modes = ["pls2", "pls1"]
    a_max = cv["pls2"]["pred"].shape[0]
    model.coords["cv_mode"] = modes
    model.coords["cv_latent"] = np.arange(1, a_max + 1)
    dims = ("cv_mode", COMPONENT, "cv_latent")
    model["cv_rmsecv"] = (dims, np.stack([_rms(cv[m]["pred"], y[None]).T for m in modes]))
    model["cv_criterion"] = (dims, np.stack([cv[m]["criterion"] for m in modes]))
    model["cv_standard_error"] = (dims, np.stack([cv[m]["se"] for m in modes]))
    model["cv_choice"] = (("cv_mode", COMPONENT), np.stack([cv[m]["choice"] for m in modes]))


# ----------------------------------------------------------------------------- prediction


def check_model(model: Any, name: str = "model") -> xr.Dataset:
    """Check that ``model`` is a mixsolve PLS model Dataset and return it."""
    if not isinstance(model, xr.Dataset) or model.attrs.get("mixsolve_kind") != MODEL_KIND:
        raise InputError(f"{name}: not a mixsolve PLS model (make one with mixsolve.calibrate "
                         "or `mixsolve calibrate`)")
    if int(model.attrs.get("format_version", 0)) > FORMAT_VERSION:
        raise InputError(f"{name}: model format {model.attrs['format_version']} is newer than "
                         f"this mixsolve reads ({FORMAT_VERSION}); update mixsolve")
    return model


def resample_to_model(spectra: xr.DataArray, model_nm: np.ndarray) -> np.ndarray:
    """Absorbance at the model's wavelengths, interpolated inside the measured range only.

    Returns
    -------
    ndarray, shape (n_samples, n_model_wavelengths)
        Exact values where the model wavelength was measured (within 1e-6 nm), linear
        interpolation (``numpy.interp``) between measured ones otherwise. A NaN reading
        makes the interpolated values it touches NaN.

    Raises
    ------
    InputError
        The measured range does not cover the model's wavelengths (nothing is extrapolated).
    """
    wl = spectra[WAVELENGTH].values.astype(float)
    values = spectra.transpose(SAMPLE, WAVELENGTH).values.astype(float)
    tol = 1e-6
    if wl[0] > model_nm[0] + tol or wl[-1] < model_nm[-1] - tol:
        raise InputError(
            f"spectra: measured {wl[0]:g}-{wl[-1]:g} nm does not cover the model's "
            f"{model_nm[0]:g}-{model_nm[-1]:g} nm; nothing is extrapolated, so measure the "
            "model's whole range")
    lo = np.clip(np.searchsorted(wl, model_nm, side="right") - 1, 0, max(wl.size - 2, 0))
    hi = np.minimum(lo + 1, wl.size - 1)
    span = np.where(wl[hi] > wl[lo], wl[hi] - wl[lo], 1.0)
    frac = np.clip((model_nm - wl[lo]) / span, 0.0, 1.0)
    frac[np.abs(model_nm - wl[lo]) <= tol] = 0.0  # on the measured grid: that reading only
    frac[np.abs(model_nm - wl[hi]) <= tol] = 1.0
    out = np.where(frac == 1.0, values[:, hi], values[:, lo])
    mid = (frac > 0.0) & (frac < 1.0)
    out[:, mid] = values[:, lo[mid]] * (1 - frac[mid]) + values[:, hi[mid]] * frac[mid]
    return out


def predict(
    spectra: xr.DataArray,
    model: xr.Dataset,
    *,
    pathlength_cm: float | None = None,
    unit: str | None = None,
) -> xr.Dataset:
    """Predict concentrations with a PLS model, with T², Q and flags per sample.

    Parameters
    ----------
    spectra : DataArray with dims ("sample", "wavelength")
        Blank-corrected absorbance (AU), any wavelength grid covering the model's range.
    model : Dataset
        From :func:`calibrate` or :func:`mixsolve.io.model_store.read_model`.
    pathlength_cm : float, optional
        Pathlength of ``spectra`` (cm); default their ``attrs``, else the calibration's.
        Spectra are rescaled to the calibration pathlength before prediction.
    unit : str, optional
        Concentration unit of the result, of the same kind (amount or mass) as the model's.

    Returns
    -------
    Dataset
        Per (sample, component): ``concentration``, ``std_uncertainty``, ``leverage``,
        ``t2``, ``q_residual`` (of the block predicting the component; the same for all
        components in PLS2) and ``rms_residual`` (√(Q·scale²/n_wavelengths): RMS spectral
        residual in AU, AU/nm after a derivative); per component ``t2_limit_95``,
        ``t2_limit_99``, ``q_limit_95``, ``q_limit_99``, ``n_latent`` and ``dof``
        (n_calibration − a − 1); per sample ``flags`` (``;``-joined codes of
        :data:`FLAG_CODES`, docs/pls.md). ``attrs["method"] = "pls"``.

    Raises
    ------
    InputError
        Not a model, spectra not covering the model's wavelengths, a bad pathlength or unit.

    Notes
    -----
    With x the preprocessed spectrum centred and scaled as in calibration, a block's scores
    are t = x R (R the x rotations), ŷ = t Qᵀ · s_y + ȳ, T² = Σₐ tₐ²/s²(tₐ) over the
    calibration score variances, Q = ‖x − t Pᵀ‖² (P the x loadings). The uncertainty is an
    approximation: see ``attrs["uncertainty_basis"]``.
    """
    spectra = check_spectra(spectra)
    model = check_model(model)
    if set(spectra.dims) != {SAMPLE, WAVELENGTH}:
        raise InputError(f"spectra: expected dims ('sample', 'wavelength'), got {spectra.dims}")
    b_cal = float(model.attrs["pathlength_cm"])
    b = float(spectra.attrs.get("pathlength_cm", b_cal) if pathlength_cm is None
              else pathlength_cm)
    if not np.isfinite(b) or b <= 0:
        raise InputError(f"pathlength: {b:g} cm is not a positive number")
    factor = _unit_factor(model.attrs["unit"], unit)
    model_nm = model[WAVELENGTH].values
    raw = resample_to_model(spectra, model_nm) * (b_cal / b)
    prep = json.loads(model.attrs["preprocessing"])
    incomplete = np.isnan(raw).any(axis=1)
    x = preprocess(np.where(np.isnan(raw), 0.0, raw), prep["derivative"])
    xs = (x - model["x_mean"].values) / model["x_scale"].values
    comps = [str(c) for c in model[COMPONENT].values]
    n, n_y = xs.shape[0], len(comps)
    n_cal = model.sizes[SAMPLE]
    block_of = model["block_of_component"].values
    conc = np.empty((n, n_y))
    per = {k: np.empty((n, n_y)) for k in ("t2", "q_residual", "leverage", "rms_residual")}
    residuals = np.empty((model.sizes["block"], n, model_nm.size))
    for b_i in range(model.sizes["block"]):
        a = int(model["n_latent"].values[b_i])
        rot = model["x_rotations"].values[b_i, :, :a]
        scores, t2, resid, q = _x_space(xs, rot, model["x_loadings"].values[b_i, :, :a],
                                        model["score_variance"].values[b_i, :a])
        residuals[b_i] = resid * model["x_scale"].values
        cols = np.flatnonzero(block_of == b_i)
        yl = model["y_loadings"].values[b_i][cols, :a]
        conc[:, cols] = (scores @ yl.T * model["y_scale"].values[cols]
                         + model["y_mean"].values[cols])
        per["t2"][:, cols] = t2[:, None]
        per["q_residual"][:, cols] = q[:, None]
        per["leverage"][:, cols] = (1.0 / n_cal + t2 / (n_cal - 1))[:, None]
        per["rms_residual"][:, cols] = np.sqrt(np.mean(residuals[b_i] ** 2, axis=1))[:, None]
    a_comp = model["n_latent"].values[block_of]
    h_cal = (1.0 + a_comp) / n_cal
    u = model["rmsecv"].values * np.sqrt((1.0 + per["leverage"]) / (1.0 + h_cal))
    for arr in (conc, u, *per.values()):
        arr[incomplete] = np.nan
    residuals[:, incomplete] = np.nan
    conc_unit = unit or model.attrs["unit"]
    sd = (SAMPLE, COMPONENT)
    t2_lim = model["t2_limit"].values[block_of]
    q_lim = model["q_limit"].values[block_of]
    result = xr.Dataset(
        {
            "concentration": (sd, conc * factor, {"units": conc_unit}),
            "std_uncertainty": (sd, u * factor, {"units": conc_unit,
                                                 "basis": UNCERTAINTY_BASIS}),
            "leverage": (sd, per["leverage"]),
            "t2": (sd, per["t2"]),
            "q_residual": (sd, per["q_residual"], {"units": "preprocessed, scaled units²"}),
            "rms_residual": (sd, per["rms_residual"],
                             {"units": "AU/nm" if prep["derivative"] else "AU"}),
            "t2_limit_95": ((COMPONENT,), t2_lim[:, 0]),
            "t2_limit_99": ((COMPONENT,), t2_lim[:, 1]),
            "q_limit_95": ((COMPONENT,), q_lim[:, 0]),
            "q_limit_99": ((COMPONENT,), q_lim[:, 1]),
            "n_latent": ((COMPONENT,), a_comp),
            "dof": ((COMPONENT,), n_cal - a_comp - 1),
            "x_residual": (("block", SAMPLE, WAVELENGTH), residuals,
                           {"units": "AU/nm" if prep["derivative"] else "AU"}),
        },
        coords={SAMPLE: [str(s) for s in spectra[SAMPLE].values], COMPONENT: comps,
                "block": model["block"].values, WAVELENGTH: model_nm},
        attrs={
            "method": "pls",
            "mode": model.attrs["mode"],
            "unit": conc_unit,
            "n_calibration": n_cal,
            "pathlength_cm": b,
            "calibration_pathlength_cm": b_cal,
            "wavelengths_nm": json.dumps([float(w) for w in model_nm]),
            "preprocessing": model.attrs["preprocessing"],
            "uncertainty_basis": UNCERTAINTY_BASIS,
            "source": str(spectra.attrs.get("source", "")),
            "model_source": str(model.attrs.get("source", "")),
            "mixsolve_version": __version__,
        },
    )
    result["flags"] = _flags(result, model, incomplete, factor)
    return result


def _unit_factor(model_unit: str, unit: str | None) -> float:
    if unit is None:
        return 1.0
    basis_m, f_m = concentration_basis(model_unit, "model unit")
    basis_u, f_u = concentration_basis(unit, "unit")
    if basis_m != basis_u:
        raise InputError(f"unit: {unit!r} is {basis_u}-based but the model predicts {model_unit} "
                         "({basis_m}-based); a PLS model holds no molar masses to convert")
    return f_m / f_u


def _flags(result: xr.Dataset, model: xr.Dataset, incomplete: np.ndarray,
           factor: float) -> xr.DataArray:
    comps = [str(c) for c in result[COMPONENT].values]
    conc = result["concentration"].values
    u = result["std_uncertainty"].values
    lo = model["reference_min"].values * factor
    hi = model["reference_max"].values * factor
    levels = {}
    for stat, name in (("t2", "t2"), ("q_residual", "q")):
        value = result[stat].values
        above_99 = np.any(value > result[f"{name}_limit_99"].values, axis=1)
        above_95 = np.any(value > result[f"{name}_limit_95"].values, axis=1)
        levels[name] = np.where(above_99, f"{name}_above_99",
                                np.where(above_95, f"{name}_above_95", ""))
    margin = np.maximum(u, 1e-6 * (hi - lo))  # exact data: u ≈ 0, allow rounding
    outside = (conc < lo - margin) | (conc > hi + margin)
    out = []
    for i in range(conc.shape[0]):
        if incomplete[i]:
            out.append("incomplete_spectrum")
            continue
        codes = [str(levels["t2"][i]), str(levels["q"][i])]
        codes += [f"outside_range:{c}" for k, c in enumerate(comps) if outside[i, k]]
        out.append(";".join(filter(None, codes)))
    return xr.DataArray(np.asarray(out, dtype=str), dims=(SAMPLE,),
                        coords={SAMPLE: result[SAMPLE].values})

