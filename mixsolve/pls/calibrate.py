"""Build a PLS calibration from mixtures of known composition: :func:`calibrate`.

The PLS algorithm itself is scikit-learn's ``PLSRegression`` (NIPALS); the modules around
it do the reference table, preprocessing, cross-validation, limits and labels. What a
model holds: :mod:`mixsolve.pls.model`.
"""

from __future__ import annotations

import json
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve._version import __version__
from mixsolve.errors import InputError
from mixsolve.library import COMPONENT
from mixsolve.pls.blocks import block_groups, fit_block, project
from mixsolve.pls.compare import CLS_BASELINES, cls_compare, ratio_lower_bound
from mixsolve.pls.cross_validation import (
    DEFAULT_MAX_LATENT,
    ONE_SE_RULE,
    SPLITS,
    Split,
    check_counts,
    cross_validate,
    cv_block_statistics,
    latent_bound,
    make_folds,
    rms_error,
)
from mixsolve.pls.limits import CONFIDENCE, cv_false_alarm, cv_limit, q_limit
from mixsolve.pls.model import FORMAT_VERSION, MODEL_KIND, UNCERTAINTY_BASIS
from mixsolve.pls.preprocessing import (
    SCALES,
    SCATTERS,
    Scale,
    Scatter,
    calibration_arrays,
    centre_scale,
    check_derivative,
    correct_scatter,
    msc_reference,
    preprocess,
)
from mixsolve.pls.reference import match_samples, reference_matrix
from mixsolve.spectra import (
    SAMPLE,
    WAVELENGTH,
    check_number,
    check_option,
    check_spectra,
    check_window,
    native_axis,
)

Mode = Literal["auto", "pls2", "pls1"]
MODES: tuple[str, ...] = ("auto", "pls2", "pls1")


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
    scatter: Scatter = "none",
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
        Known concentrations or fractions (see
        :func:`mixsolve.pls.reference.reference_matrix`); its samples must be exactly those
        of ``spectra``. With a ``group`` column (coordinate), cross-validation never
        splits a group.
    window : (float, float), optional
        Use the measured wavelengths from ``low`` to ``high`` nm, both included; default all.
    latent : int or "auto"
        Number of latent variables; ``"auto"`` chooses it by cross-validation with the
        one-standard-error rule (per block).
    max_latent : int
        Most latent variables tried (also bounded by the rank of every training set).
    folds : int, optional
        Number of cross-validation folds, 2 ≤ folds ≤ n; default min(10, n). With groups,
        2 ≤ folds ≤ the number of groups, default min(10, groups).
    split : {"blocks", "random"}
        Folds as contiguous blocks in the order of the spectra (keeps replicates measured
        one after another together), or shuffled with ``seed``. With groups: whole groups,
        balanced by size (``blocks``) or shuffled with ``seed`` (``random``)
        (:func:`mixsolve.pls.cross_validation.make_folds`).
    seed : int
        Seed of the ``random`` split.
    mode : {"auto", "pls2", "pls1"}
        One PLS2 model for all components, one PLS1 model per component, or whichever
        cross-validates better (lower mean variance-scaled error).
    scale : {"none", "autoscale"}
        After mean-centring (always), divide each wavelength by its standard deviation.
    scatter : {"none", "offset", "snv", "msc"}
        Scatter correction of each spectrum, first of all preprocessing: its mean removed
        (``offset``), standard normal variate (``snv``) or multiplicative scatter
        correction against the mean calibration spectrum (``msc``, the reference stored as
        ``msc_reference``); see :func:`mixsolve.pls.preprocessing.correct_scatter`.
    derivative : int, optional
        Savitzky–Golay first derivative over this many points (odd), after the scatter
        correction, before centring.
    polyorder : int
        Polynomial order of the derivative filter.
    compare : bool
        Also cross-validate classical least squares (absorptivities estimated from the
        same mixtures) on the same folds; adds ``cls_rmsecv`` and ``cls_rmsec``.
    pathlength_cm : float, optional
        Pathlength of the calibration spectra (cm), recorded so that :func:`mixsolve.predict` can
        rescale spectra measured in other cells; default ``spectra.attrs``, else 1 cm.

    Returns
    -------
    Dataset
        The model: ``x_mean``, ``x_scale`` and, with ``scatter="msc"``, ``msc_reference``
        (wavelength); ``y_mean``, ``y_scale``
        (component); per block ``x_weights`` W, ``x_rotations`` R = W(PᵀW)⁻¹ and
        ``x_loadings`` P (block, wavelength, latent),
        ``y_loadings`` (block, component, latent), ``score_variance`` (block, latent),
        ``n_latent``, ``t2_limit`` and ``q_limit`` (block, confidence), ``q_theta``;
        ``t2_false_alarm_cv`` and ``q_false_alarm_cv`` (block, confidence: the fraction of
        mixtures above the limit computed without their fold);
        ``block_of_component``; calibration figures ``rmsec``, ``rmsecv``,
        ``reference_min``/``reference_max`` (component); ``reference``, ``fitted``,
        ``cv_predicted`` (sample, component), ``fold``, ``calibration_t2``/``_q`` (of the
        final fit) and ``cv_t2``, ``cv_q`` (cross-validated) (sample, block); the CV curves
        ``cv_rmsecv``, ``cv_criterion``, ``cv_standard_error`` (cv_mode, component,
        cv_latent) and ``cv_choice`` (cv_mode, component). ``attrs``
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
    is the standard deviation of the per-fold means over √folds. Hotelling T² limit:
    :func:`mixsolve.pls.limits.cv_limit` of the cross-validated T² (each mixture projected
    on the block fitted without its fold, over that block's score variances); Q limit:
    :func:`mixsolve.pls.limits.q_limit`, its eigenvalues those of E_cvᵀE_cv/n, E_cv the
    cross-validated spectral residuals of the mixtures at the chosen number of latent
    variables.
    """
    spectra = check_spectra(spectra)
    if set(spectra.dims) != {SAMPLE, WAVELENGTH}:
        raise InputError(f"spectra: expected dims ('sample', 'wavelength'), got {spectra.dims}")
    check_option(split, SPLITS, "split")
    check_option(mode, MODES, "mode")
    check_option(scale, SCALES, "scale")
    check_option(scatter, SCATTERS, "scatter")
    window = check_window(window)
    if latent != "auto" and (isinstance(latent, bool) or not isinstance(latent, int | np.integer)
                             or latent < 1):
        raise InputError(f"latent: {latent!r} is not 'auto' or a whole number ≥ 1")
    b = check_number(spectra.attrs.get("pathlength_cm", 1.0) if pathlength_cm is None
                     else pathlength_cm, "pathlength_cm", "cm", positive=True)
    ref = match_samples(spectra, reference_matrix(reference))
    raw, wl = calibration_arrays(spectra, window)
    y = ref.values
    comps = [str(c) for c in ref[COMPONENT].values]
    flat = np.flatnonzero(y.std(axis=0) == 0)
    if flat.size:
        raise InputError(f"reference: component {comps[flat[0]]!r} has the same concentration "
                         "in every calibration sample; it must vary to be calibrated")
    axis = native_axis(spectra)
    deriv = check_derivative(derivative, polyorder, wl, axis)
    m_ref = msc_reference(raw) if scatter == "msc" else None
    x = preprocess(correct_scatter(raw, scatter, m_ref, [str(v) for v in ref[SAMPLE].values]),
                   deriv)
    n = x.shape[0]
    groups = ref["group"].values if "group" in ref.coords else None
    n_groups = None if groups is None else len(set(groups.tolist()))
    k_folds = check_counts(n, folds, max_latent, n_groups)
    fold = make_folds(n, k_folds, split, seed, groups)
    a_max = latent_bound(x, fold, max_latent)
    if latent != "auto" and latent > a_max:
        raise InputError(f"latent: {latent} latent variables is more than the {a_max} this "
                         f"calibration supports ({n} samples in {k_folds} folds, "
                         f"{wl.size} wavelengths, max_latent {max_latent})")

    cv = cross_validate(x, y, fold, a_max, scale, latent)
    chosen_mode = mode if mode != "auto" else (
        "pls1" if len(comps) > 1 and cv["pls1"]["total"] < cv["pls2"]["total"] else "pls2")
    if len(comps) == 1:
        chosen_mode = "pls1"
    model = _final_model(x, y, wl, comps, fold, scale, chosen_mode, cv)
    model["reference"] = ((SAMPLE, COMPONENT), y)
    model = model.assign_coords({SAMPLE: [str(s) for s in ref[SAMPLE].values]})
    model["fold"] = ((SAMPLE,), fold)
    if m_ref is not None:
        model["msc_reference"] = ((WAVELENGTH,), m_ref, {"units": "AU"})
    if groups is not None:
        model = model.assign_coords(group=(SAMPLE, [str(g) for g in groups]))
    model["reference_min"] = ((COMPONENT,), y.min(axis=0))
    model["reference_max"] = ((COMPONENT,), y.max(axis=0))
    _add_cv_curves(model, cv, y)
    if compare:
        cls = cls_compare(x, y, fold, wl, deriv)
        model["cls_rmsecv"] = ((COMPONENT,), rms_error(cls.cv, y))
        model["cls_rmsec"] = ((COMPONENT,), rms_error(cls.fitted, y))
        model["cls_cv_predicted"] = ((SAMPLE, COMPONENT), cls.cv)
        model["cls_rmsecv_by_baseline"] = (("cls_baseline", COMPONENT),
                                           cls.rmsecv_by_baseline)
        model = model.assign_coords(cls_baseline=list(CLS_BASELINES))
        model["cls_ratio_low"] = ((COMPONENT,), ratio_lower_bound(
            cls.cv, model["cv_predicted"].values, y))
        model.attrs["cls_baseline"] = cls.baseline
    unit = ref.attrs["unit"]
    for name in ("rmsec", "rmsecv", "reference_min", "reference_max", "reference", "fitted",
                 "cv_predicted", "cv_rmsecv", "y_mean", "y_scale", "cls_rmsecv", "cls_rmsec",
                 "cls_cv_predicted", "cls_rmsecv_by_baseline"):
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
        "preprocessing": json.dumps({"centring": "mean", "scale": scale, "derivative": deriv,
                                     "scatter": scatter}),
        "axis": axis,
        "cross_validation": json.dumps({
            "split": split, "folds": k_folds, "seed": seed if split == "random" else None,
            "groups": n_groups,
            "latent_requested": latent, "max_latent_tried": a_max, "rule": ONE_SE_RULE}),
        "uncertainty_basis": UNCERTAINTY_BASIS,
        "source": str(spectra.attrs.get("source", "")),
        "reference_source": str(ref.attrs.get("source", "")),
        "mixsolve_version": __version__,
    })
    return model


def _final_model(x: np.ndarray, y: np.ndarray, wl: np.ndarray, comps: list[str],
                 fold: np.ndarray, scale: str, mode: str, cv: dict[str, dict[str, Any]]
                 ) -> xr.Dataset:
    """Fit the chosen blocks on all mixtures; loadings, limits and calibration figures.

    The T² and Q limits come from the cross-validated T² and residuals
    (:func:`cv_block_statistics`), not from the final fit: a fit partly absorbs the noise
    of its own mixtures, so their residuals are smaller than those of new samples, and a
    limit taken from them would flag ordinary new samples far more often than 5 % or 1 %;
    and the normal-theory T² limit is wrong whenever the scores are not normal
    (docs/calibration.md). Each limit's false-alarm rate is measured by recomputing it
    without each fold in turn (:func:`mixsolve.pls.limits.cv_false_alarm`).
    """
    n, n_y = y.shape
    mx, sx = centre_scale(x, scale)
    my, sy = y.mean(axis=0), y.std(axis=0, ddof=1)
    xs, ys = (x - mx) / sx, (y - my) / sy
    groups = block_groups(n_y, mode)
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
    cal_t2, cal_q, cv_q = np.empty((n, nb)), np.empty((n, nb)), np.empty((n, nb))
    cv_t2 = np.empty((n, nb))
    t2_alarm, q_alarm = np.empty((nb, len(CONFIDENCE))), np.empty((nb, len(CONFIDENCE)))
    fitted = np.empty_like(y)
    block_of = np.empty(n_y, dtype=np.int64)
    methods = []
    for b, (cols, a) in enumerate(zip(groups, a_blocks, strict=True)):
        block = fit_block(xs, ys[:, cols], a)
        scores = xs @ block["rotations"]
        var = scores.var(axis=0, ddof=1)
        _, t2, _, q = project(xs, block["rotations"], block["loadings"], var)
        cv_t2[:, b], cv_resid = cv_block_statistics(x, y, fold, scale, cols, a)
        lam = np.linalg.svd(cv_resid, compute_uv=False) ** 2 / n
        rot[b, :, :a], load[b, :, :a], svar[b, :a] = block["rotations"], block["loadings"], var
        weights[b, :, :a] = block["weights"]
        yload[b, :, :a] = 0.0
        yload[b, cols, :a] = block["y_loadings"]
        fitted[:, cols] = scores @ block["y_loadings"].T * sy[cols] + my[cols]
        t2_lim[b] = [cv_limit(cv_t2[:, b], c) for c in CONFIDENCE]
        limits = [q_limit(lam, c) for c in CONFIDENCE]
        q_lim[b] = [v for v, _ in limits]
        methods.append(limits[0][1])
        theta[b] = [np.sum(lam**i) for i in (1, 2, 3)]
        cal_t2[:, b], cal_q[:, b], cv_q[:, b] = t2, q, np.sum(cv_resid**2, axis=1)
        t2_alarm[b], q_alarm[b] = _cv_false_alarms(cv_t2[:, b], cv_resid, fold)
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
            "t2_limit": (("block", "confidence"), t2_lim,
                         {"method": "cross-validated: scaled F from the mean and variance "
                                    "of cv_t2 (mixsolve.pls.limits.cv_limit)"}),
            "t2_false_alarm_cv": (("block", "confidence"), t2_alarm, {"units": "1"}),
            "q_false_alarm_cv": (("block", "confidence"), q_alarm, {"units": "1"}),
            "q_limit": (("block", "confidence"), q_lim,
                        {"method": json.dumps(dict(zip(blocks, methods, strict=True))),
                         "residuals": "cross-validated"}),
            "q_theta": (("block", "theta"), theta),
            "block_of_component": ((COMPONENT,), block_of),
            "rmsec": ((COMPONENT,), rms_error(fitted, y)),
            "rmsecv": ((COMPONENT,), rms_error(cv_pred, y)),
            "fitted": ((SAMPLE, COMPONENT), fitted),
            "cv_predicted": ((SAMPLE, COMPONENT), cv_pred),
            "calibration_t2": ((SAMPLE, "block"), cal_t2),
            "calibration_q": ((SAMPLE, "block"), cal_q),
            "cv_q": ((SAMPLE, "block"), cv_q),
            "cv_t2": ((SAMPLE, "block"), cv_t2),
        },
        coords={WAVELENGTH: (WAVELENGTH, wl, {"units": "nm"}), COMPONENT: comps,
                "block": blocks, "latent": np.arange(1, a_pad + 1),
                "confidence": list(CONFIDENCE), "theta": [1, 2, 3]},
    )


def _cv_false_alarms(cv_t2: np.ndarray, cv_resid: np.ndarray, fold: np.ndarray
                     ) -> tuple[list[float], list[float]]:
    """False-alarm rates of the T² and Q limits of one block, measured in cross-validation.

    For each fold, the limits are recomputed as the model computes them but from the other
    folds' mixtures only (T²: :func:`cv_limit` of their ``cv_t2``; Q: :func:`q_limit` of
    the eigenvalues of their cross-validated residuals, E_cvᵀE_cv/n_other); the rate at
    each confidence is the fraction of mixtures above the limit of their own fold
    (:func:`cv_false_alarm`).
    """
    folds = np.unique(fold)
    t2_rates, q_rates = [], []
    q_cv = np.sum(cv_resid**2, axis=1)
    lam = []
    for f in folds:
        other = cv_resid[fold != f]
        lam.append(np.linalg.svd(other, compute_uv=False) ** 2 / other.shape[0])
    for c in CONFIDENCE:
        t2_lims = [cv_limit(cv_t2[fold != f], c) for f in folds]
        q_lims = [q_limit(ev, c)[0] for ev in lam]
        t2_rates.append(cv_false_alarm(cv_t2, fold, np.asarray(t2_lims)))
        q_rates.append(cv_false_alarm(q_cv, fold, np.asarray(q_lims)))
    return t2_rates, q_rates


def _add_cv_curves(model: xr.Dataset, cv: dict[str, dict[str, Any]], y: np.ndarray) -> None:
    """Store the CV curves and choices of both modes in ``model`` (in place)."""
    modes = ["pls2", "pls1"]
    a_max = cv["pls2"]["pred"].shape[0]
    model.coords["cv_mode"] = modes
    model.coords["cv_latent"] = np.arange(1, a_max + 1)
    dims = ("cv_mode", COMPONENT, "cv_latent")
    model["cv_rmsecv"] = (dims, np.stack([rms_error(cv[m]["pred"], y[None]).T for m in modes]))
    model["cv_criterion"] = (dims, np.stack([cv[m]["criterion"] for m in modes]))
    model["cv_standard_error"] = (dims, np.stack([cv[m]["se"] for m in modes]))
    model["cv_choice"] = (("cv_mode", COMPONENT), np.stack([cv[m]["choice"] for m in modes]))
