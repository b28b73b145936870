"""Text summaries of a PLS calibration and of a PLS prediction: pure functions returning ``str``.

``mixsolve calibrate`` prints :func:`format_calibration`; ``mixsolve unmix MODEL.nc``
prints :func:`format_prediction`. Figures of a calibration: :mod:`mixsolve.report.figures`.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

import numpy as np
import xarray as xr

from mixsolve.flags import FLAG_MEANINGS
from mixsolve.library import COMPONENT
from mixsolve.pls.compare import AS_GOOD, CLEARLY_BETTER, compare_verdict
from mixsolve.report.text import CAUTION, _notes, _num, value_with_uncertainty
from mixsolve.spectra import SAMPLE, WAVELENGTH


def _who(names: list[str]) -> str:
    return ", ".join(names[:6]) + (f" and {len(names) - 6} more" if len(names) > 6 else "")


#: How each scatter correction is named in a summary (none: not mentioned).
SCATTER_WORDS = {"offset": "offset removed (each spectrum's mean)",
                 "snv": "standard normal variate", "msc": "multiplicative scatter correction "
                 "(reference: mean calibration spectrum)"}


def describe_preprocessing(preprocessing: str) -> str:
    """One line saying how spectra are preprocessed.

    Parameters
    ----------
    preprocessing : str
        The model's (or prediction's) ``preprocessing`` attribute (JSON).

    Returns
    -------
    str
        E.g. ``"Savitzky–Golay 1st derivative (11 points, order 2); mean-centred; no
        scaling"``.
    """
    prep = json.loads(preprocessing)
    parts = ["mean-centred",
             "each wavelength scaled to unit variance" if prep["scale"] == "autoscale"
             else "no scaling"]
    d = prep.get("derivative")
    parts.insert(0, "no derivative" if not d else
                 f"Savitzky–Golay 1st derivative ({d['window_points']} points, "
                 f"order {d['polyorder']})")
    scatter = SCATTER_WORDS.get(prep.get("scatter", "none"))
    if scatter:
        parts.insert(0, scatter)
    return "; ".join(parts)


def format_calibration(model: xr.Dataset) -> str:
    """Summarise a PLS model: settings, RMSEC/RMSECV per component, CV curve, limits, notes.

    Parameters
    ----------
    model : Dataset
        From :func:`mixsolve.calibrate` or :func:`mixsolve.read_model`.

    Returns
    -------
    str
        Header lines, a table per component (latent variables, RMSEC, RMSECV and the
        reference range, in the model unit), the cross-validation curve (RMSECV against
        latent variables, the chosen number marked ``*``), the T² and Q limits and their
        false-alarm rates measured in cross-validation (when the model holds them), the CLS
        comparison when the model holds one, then numbered notes.
    """
    comps = [str(c) for c in model[COMPONENT].values]
    unit = model.attrs["unit"]
    cvs = json.loads(model.attrs["cross_validation"])
    mode = model.attrs["mode"]
    wl = model[WAVELENGTH].values
    a = model["n_latent"].values[model["block_of_component"].values]
    lvs = (f"{a[0]} latent variable(s)" if mode == "pls2"
           else "one model per component")
    how = "chosen by cross-validation" if cvs["latent_requested"] == "auto" else "as requested"
    lines = [
        f"PLS calibration: {mode}, {lvs} ({how})",
        f"  mixtures       {model.sizes[SAMPLE]} samples, {wl.size} wavelengths "
        f"{wl[0]:g}-{wl[-1]:g} nm, pathlength {model.attrs['pathlength_cm']:g} cm",
        f"  preprocessing  {describe_preprocessing(model.attrs['preprocessing'])}",
        f"  validation     {_validation(cvs)}, one-standard-error rule",
        f"  unit           {unit}",
        "",
    ]
    cw = max(12, *(len(c) for c in comps)) + 2
    lines.append(f"{'component':<{cw}}{'LVs':>4}{'RMSEC':>11}{'RMSECV':>11}"
                 f"{'reference range':>22}")
    for k, c in enumerate(comps):
        lo, hi = float(model["reference_min"].values[k]), float(model["reference_max"].values[k])
        lines.append(f"{c:<{cw}}{a[k]:>4d}{_num(model['rmsec'].values[k], 11)}"
                     f"{_num(model['rmsecv'].values[k], 11)}{f'{lo:.4g}-{hi:.4g}':>22}")
    lines += ["", f"Cross-validation curve: RMSECV ({unit}) by latent variables, "
              f"{mode} (* chosen)"]
    curve = model["cv_rmsecv"].sel(cv_mode=mode).transpose(COMPONENT, "cv_latent").values
    choice = model["cv_choice"].sel(cv_mode=mode).values
    lines.append(f"{'LVs':>5}" + "".join(f"{c:>{max(13, len(c) + 2)}}" for c in comps))
    for j, n_lv in enumerate(model["cv_latent"].values):
        cells = "".join(
            f"{_num(curve[k, j], max(12, len(c) + 1))}{'*' if choice[k] == n_lv else ' '}"
            for k, c in enumerate(comps))
        lines.append(f"{n_lv:>5d}{cells}")
    lines += ["", "Limits for new samples (Hotelling T²; Q residual, preprocessed units)"]
    lines += _per_block(model, cw, "t2_limit", "q_limit", lambda v: f"{v:.4g}")
    lines += _false_alarm_lines(model, cw)
    if "cls_rmsecv" in model:
        lines += ["", *_comparison(model, comps, cw)]
    lines += ["", *_notes(_calibration_notes(model, comps, cvs)), CAUTION]
    return "\n".join(lines) + "\n"


def _validation(cvs: dict[str, Any]) -> str:
    """How the folds were made, e.g. ``5 folds of whole groups (12 groups, never split),
    balanced by size``."""
    groups = cvs.get("groups")
    if not groups:
        return f"{cvs['folds']} folds, " + (
            "contiguous blocks" if cvs["split"] == "blocks" else f"random (seed {cvs['seed']})")
    how = ("leave one group out" if cvs["folds"] == groups else
           "balanced by size" if cvs["split"] == "blocks" else
           f"groups shuffled (seed {cvs['seed']})")
    return f"{cvs['folds']} folds of whole groups ({groups} groups, never split), {how}"


def _false_alarm_lines(model: xr.Dataset, cw: int) -> list[str]:
    """The false-alarm rates of the limits measured in cross-validation (none in older models).

    Each rate is the share of calibration mixtures above the limit recomputed without their
    fold (:func:`mixsolve.pls.limits.cv_false_alarm`), shown as a percentage and a count.
    """
    if "t2_false_alarm_cv" not in model or "q_false_alarm_cv" not in model:
        return []
    n = model.sizes[SAMPLE]

    def rate(value: float) -> str:
        return "n/a" if not np.isfinite(value) else f"{100 * value:.2g} % ({round(value * n)}/{n})"

    return ["", "False alarms measured in cross-validation (mixtures above the limit "
                "computed without their fold; nominal 5 % and 1 %)",
            *_per_block(model, cw, "t2_false_alarm_cv", "q_false_alarm_cv", rate)]


def _per_block(model: xr.Dataset, cw: int, t2_name: str, q_name: str,
               shown: Callable[[float], str]) -> list[str]:
    """One line per model block: its T² and Q figures at 95 % and 99 %, each ``shown``."""
    lines = []
    for b, name in enumerate(model["block"].values):
        t2, q = model[t2_name].values[b], model[q_name].values[b]
        label = "all components" if name == "all" else str(name)
        lines.append(f"  {label:<{cw}} T² 95 % {shown(t2[0])}, 99 % {shown(t2[1])};  "
                     f"Q 95 % {shown(q[0])}, 99 % {shown(q[1])}")
    return lines


def _comparison(model: xr.Dataset, comps: list[str], cw: int) -> list[str]:
    """The CLS-against-PLS table and its verdict (:func:`compare_verdict`)."""
    cls_cv, pls_cv = model["cls_rmsecv"].values, model["rmsecv"].values
    ratio = cls_cv / pls_cv
    low = model["cls_ratio_low"].values if "cls_ratio_low" in model else None
    baseline = model.attrs.get("cls_baseline", "none")
    lines = [f"CLS against PLS on the same folds: RMSECV ({model.attrs['unit']})",
             f"CLS baseline: {baseline} (of none, offset, linear, scatter λ⁻⁴: the lowest "
             "cross-validated error)" if low is not None else "CLS baseline: none",
             f"{'component':<{cw}}{'CLS':>11}{'PLS':>11}{'CLS/PLS':>9}"
             + (f"{'≥ (95 %)':>10}" if low is not None else "")]
    for k, c in enumerate(comps):
        lines.append(f"{c:<{cw}}{_num(cls_cv[k], 11)}{_num(pls_cv[k], 11)}{_num(ratio[k], 9)}"
                     + (_num(low[k], 10) if low is not None else ""))
    verdict = compare_verdict(cls_cv, pls_cv, low)
    if verdict == "no_verdict":
        text = ("CLS could not be fitted on every fold (the training concentrations do not "
                "separate the components); no verdict.")
    elif verdict == "pls_better":
        limit = CLEARLY_BETTER if low is None else AS_GOOD
        better = [c for c, r in zip(comps, ratio if low is None else low, strict=True)
                  if r > limit]
        rule = (f"CLS/PLS > {CLEARLY_BETTER:g}" if low is None else
                f"the ratio's 95 % lower bound > {AS_GOOD:g}")
        text = (f"PLS predicts {', '.join(better)} clearly better than CLS ({rule}): the "
                "spectra are probably not additive (interaction, matrix effect or an "
                "unlisted absorber that varies); use the PLS model.")
    elif verdict == "additive":
        rule = (f"CLS/PLS ≤ {AS_GOOD:g}" if low is None else
                "no ratio's 95 % lower bound above 1")
        text = (f"CLS does as well as PLS ({rule}): the mixtures behave "
                "additively; a library (CLS) is simpler and safer to extrapolate.")
    else:
        text = ("PLS does somewhat better than CLS: mild non-additivity or an unlisted "
                "absorber; prefer PLS inside the calibrated range.")
    return [*lines, f"Verdict: {text}"]


def _calibration_notes(model: xr.Dataset, comps: list[str], cvs: dict[str, Any]) -> list[str]:
    """Notes on a calibration: odd mixtures, choice at the edge, mode, too few mixtures.

    A mixture is odd when its T² (final fit) or its cross-validated Q is above the 99 %
    limit for new samples (models written before ``cv_q`` existed: the Q of the fit).
    """
    notes = []
    samples = [str(s) for s in model[SAMPLE].values]
    q_name = "cv_q" if "cv_q" in model else "calibration_q"
    for stat, limit, label in (("calibration_t2", "t2_limit", "Hotelling T²"),
                               (q_name, "q_limit", "Q residual")):
        over = np.any(model[stat].values > model[limit].values[:, 1][None, :], axis=1)
        if over.any():
            names = [s for s, o in zip(samples, over, strict=True) if o]
            notes.append(f"{_who(names)}: {label} above the 99 % limit within the calibration; "
                         "check for a wrong reference value or an odd spectrum.")
    mode = model.attrs["mode"]
    choice = model["cv_choice"].sel(cv_mode=mode).values
    top = int(model["cv_latent"].values[-1])
    at_top = [c for c, a in zip(comps, choice, strict=True) if a == top]
    if at_top and cvs["latent_requested"] == "auto":
        notes.append(f"{', '.join(at_top)}: the chosen number of latent variables is the most "
                     f"tried ({top}); the error may still fall with more (--max-latent), or the "
                     "model needs more calibration mixtures.")
    if model.attrs["mode_requested"] == "auto" and len(comps) > 1:
        notes.append(f"{mode} cross-validated better than "
                     f"{'pls1' if mode == 'pls2' else 'pls2'} (mean RMSECV²/variance of the "
                     "reference over components).")
    n, a_max = model.sizes[SAMPLE], int(model["n_latent"].max())
    if n < 5 * a_max:
        notes.append(f"{n} calibration mixtures for {a_max} latent variables: limits and RMSECV "
                     "are rough; use more mixtures spanning the expected range.")
    return notes


def format_prediction(result: xr.Dataset) -> str:
    """Summarise a PLS prediction: one row per sample, T² and Q against their limits, notes.

    Parameters
    ----------
    result : Dataset
        From :func:`mixsolve.predict`.

    Returns
    -------
    str
        Value ± standard uncertainty per component (result unit), the largest T²/T²₉₅ and
        Q/Q₉₅ over the sample's model blocks (dimensionless; above 1: beyond the 95 %
        limit) and the flags, then notes.
    """
    comps = [str(c) for c in result[COMPONENT].values]
    samples = [str(s) for s in result[SAMPLE].values]
    used = json.loads(result.attrs["wavelengths_nm"])
    lines = [
        f"Concentrations by PLS prediction ({result.attrs['mode']} model, calibrated on "
        f"{result.attrs['n_calibration']} mixtures)",
        f"  wavelengths   {len(used)}, {min(used):g}-{max(used):g} nm (the model's grid)",
        f"  preprocessing {describe_preprocessing(result.attrs['preprocessing'])}",
        f"  unit          {result.attrs['unit']}, value ± standard uncertainty "
        "(from RMSECV and leverage)",
        "",
    ]
    name_w = max(8, *(len(s) for s in samples)) + 2
    cell_w = max(24, *(len(c) + 2 for c in comps))
    lines.append(f"{'sample':<{name_w}}" + "".join(f"{c:<{cell_w}}" for c in comps)
                 + f"{'T²/95%':>8}{'Q/95%':>8}  flags")
    conc = result["concentration"].transpose(SAMPLE, COMPONENT).values
    u = result["std_uncertainty"].transpose(SAMPLE, COMPONENT).values
    t2 = np.nanmax(result["t2"].values / result["t2_limit_95"].values, axis=1, initial=-np.inf)
    q = np.nanmax(result["q_residual"].values / result["q_limit_95"].values, axis=1,
                  initial=-np.inf)
    flags = result["flags"].values
    for i, s in enumerate(samples):
        cells = "".join(f"{value_with_uncertainty(conc[i, k], u[i, k]):<{cell_w}}"
                        for k in range(len(comps)))
        lines.append(f"{s:<{name_w}}{cells}{_num(t2[i], 8)}{_num(q[i], 8)}  {flags[i]}")
    by_code: dict[str, list[str]] = {}
    for s, text in zip(samples, flags, strict=True):
        for code in filter(None, str(text).split(";")):
            by_code.setdefault(code, []).append(s)
    notes = []
    for code, who in by_code.items():
        base, _, comp = code.partition(":")
        meaning = FLAG_MEANINGS.get(base, base) + (f" ({comp})" if comp else "")
        notes.append(f"{_who(who)}: {meaning} [{code}].")
    lines += ["", *_notes(notes), CAUTION]
    return "\n".join(lines) + "\n"
