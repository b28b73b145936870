"""Uncertainty budget of unmixed concentrations, after the GUM (JCGM 100:2008).

For every sample × component the budget lists each source's standard uncertainty
contribution uᵢ(y) = |cᵢ|·u(xᵢ) (sensitivity coefficient × input standard uncertainty),
the combined standard uncertainty u_c(y) = √Σ uᵢ²(y) (law of propagation of uncertainty,
JCGM 100:2008, 5.1.2, inputs taken as uncorrelated), the expanded uncertainty U = k·u_c
(k = 2) and each source's share uᵢ²/u_c² of the variance. Definitions of every source are
in :func:`uncertainty_budget` and docs/uncertainty.md; a Monte Carlo propagation
(JCGM 101:2008, :mod:`mixsolve.uncertainty.montecarlo`) can check the linear result.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.library import COMPONENT
from mixsolve.spectra import SAMPLE
from mixsolve.uncertainty.inputs import BudgetInputs, budget_inputs
from mixsolve.uncertainty.measurement_model import MeasurementModel, SampleModel, measurement_model
from mixsolve.uncertainty.montecarlo import compare, propagate
from mixsolve.uncertainty.sensitivity import design_sensitivity, propagate_independent

SOURCE = "source"
#: Source → (evaluation type, distribution, unit of the input quantity, what it is).
SOURCES: dict[str, tuple[str, str, str, str]] = {
    "spectral_noise": ("A", "normal", "AU", "scatter of the readings (fit residual or "
                       "repeat scans)"),
    "absorptivity": ("A, B", "normal", "library unit", "library absorptivities: their error "
                     "patterns, correlated over wavelengths (standards, preparation, stock)"),
    "pathlength": ("B", "normal", "cm", "cell pathlength"),
    "dilution": ("B", "rectangular", "1", "dilution factor from the volumetric ware"),
    "carryover": ("B", "rectangular", "1", "residual liquid left in a refilled cell"),
    "wavelength": ("B", "rectangular", "nm", "wavelength-scale accuracy"),
    "stray_light": ("B", "rectangular", "1", "stray light (fraction of incident power): "
                    "u(s) of the fraction corrected for, or the uncorrected bias at s"),
    "cell_blank": ("A", "normal", "AU", "mean of the cell-blank scans"),
    "cell_ratio": ("B", "normal", "1", "cell pathlength ratio"),
}


def _linear(model: MeasurementModel, s: SampleModel, conc: np.ndarray, u_fit: np.ndarray,
            use_fit_u: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Contribution, sensitivity (per component × source) and input u (per source)."""
    n_comp = len(model.components)
    big_f = model.dilution_factor
    scale = model.unit_factor * big_f / s.pathlength_cm  # coefficient x → value unit
    value = conc * big_f
    src = list(SOURCES)
    contrib = np.full((n_comp, len(src)), np.nan)
    sens = np.full((n_comp, len(src)), np.nan)
    u_in = np.full(len(src), np.nan)

    def put(name: str, sensitivity: np.ndarray | float, u_input: float) -> None:
        k = src.index(name)
        sens[:, k] = sensitivity
        u_in[k] = u_input
        contrib[:, k] = np.abs(sens[:, k]) * u_input

    # Vector inputs: only the contribution is defined (docs/uncertainty.md).
    noise = u_fit * big_f if use_fit_u else \
        propagate_independent(s.g, s.sigma_noise)[:n_comp] * scale
    contrib[:, src.index("spectral_noise")] = noise
    jac = design_sensitivity(s.g, s.m, s.residual, s.coef, n_comp, s.weights)[:n_comp]
    patterns = s.library_patterns  # (F, n, n_comp): δε = Σ_f P_f z_f
    contrib[:, src.index("absorptivity")] = (
        np.sqrt(np.sum(np.einsum("kij,fij->fk", jac, patterns) ** 2, axis=0)) * scale
        if patterns.shape[0] else np.nan)
    contrib[:, src.index("cell_blank")] = (
        0.0 if model.cell.blank is None
        else propagate_independent(s.g, s.sigma_blank)[:n_comp] * scale)
    # Scalar inputs: sensitivity coefficient × input standard uncertainty.
    put("pathlength", -value / s.pathlength_cm, model.u_pathlength_cm)
    rel_f = 0.0 if model.dilution is None else model.dilution.relative_uncertainty
    put("dilution", conc, big_f * rel_f)
    f = model.carryover_fraction
    carry = s.carry_delta * model.unit_factor * big_f  # value change at fraction f
    put("carryover", carry / f if f > 0 else 0.0, f / np.sqrt(3.0))
    per_nm = (s.g @ (s.derivative @ s.coef[:n_comp]))[:n_comp] * scale
    put("wavelength", per_nm, model.wavelength_u_nm)
    u_stray = model.u_stray_fraction  # stray_bias is √3·u(s)·∂A/∂s per reading
    if np.isfinite(u_stray) and u_stray > 0:
        put("stray_light", (s.g @ s.stray_bias)[:n_comp] * scale / (np.sqrt(3.0) * u_stray),
            u_stray)
    else:
        put("stray_light", 0.0 if u_stray == 0 else np.nan, u_stray)
    put("cell_ratio", -value / model.cell.ratio, model.cell.u_ratio)
    return contrib, sens, u_in


def uncertainty_budget(
    result: xr.Dataset,
    library: xr.Dataset,
    inputs: BudgetInputs | None = None,
    **settings: Any,
) -> xr.Dataset:
    """Uncertainty budget of every concentration of an unmixing result.

    Parameters
    ----------
    result : Dataset
        Output of :func:`mixsolve.unmix` (ols or nnls) with dims (sample, component).
    library : Dataset
        The library the result was fitted with.
    inputs : BudgetInputs, optional
        The inputs' uncertainties and the budget's settings
        (:class:`mixsolve.uncertainty.inputs.BudgetInputs`, which documents each);
        default all defaults.
    **settings
        Fields of :class:`~mixsolve.uncertainty.inputs.BudgetInputs` given by name
        (``pathlength_u_cm=0.002``, ``dilution="1/10"``, ``monte_carlo=4000`` ...),
        replacing those of ``inputs``.

    Returns
    -------
    Dataset
        ``value`` (sample, component): the measurand F·c, unit ``attrs["unit"]``;
        ``contribution`` (sample, component, source): uᵢ(y), same unit, NaN = not stated;
        ``sensitivity`` (sample, component, source): cᵢ = ∂y/∂xᵢ for the scalar inputs
        (value unit per input unit; NaN for the vector inputs spectral_noise,
        absorptivity, cell_blank); ``input_uncertainty`` (sample, source): u(xᵢ) in the
        ``input_unit`` coordinate's unit; ``share`` (sample, component, source):
        uᵢ²/u_c²; ``combined_uncertainty`` and ``expanded_uncertainty`` (sample,
        component). Coordinates on ``source``: ``evaluation`` (A/B), ``distribution``,
        ``input_unit``. With ``monte_carlo``: ``mc_mean``, ``mc_standard_uncertainty``,
        ``mc_low_95``, ``mc_high_95`` (2.5 % and 97.5 % quantiles), ``mc_d_low``, ``mc_d_high``,
        ``mc_agrees`` (u and mean of the draws within δ of u_c and y) and
        ``mc_interval_agrees`` (JCGM 101:2008, 8.2), see
        :func:`mixsolve.uncertainty.montecarlo.compare`.

    Raises
    ------
    InputError
        Not a least-squares result, components differing from the library's, and every
        refusal of :class:`~mixsolve.uncertainty.inputs.BudgetInputs` (negative
        uncertainties or volumes, both wavelength settings given, too few draws).
    TypeError
        A setting that is not a field of BudgetInputs.

    Notes
    -----
    Sources (docs/uncertainty.md has the reasoning and a worked example):

    - spectral_noise: the fit's ``u_noise`` (× F; ``std_uncertainty`` of a result made
      before it had the parts); with ``noise_sd``,
      √(Σᵢ G_kᵢ² σᵢ²)·f_k·F/b, G the fit's least-squares operator.
    - absorptivity: √(Σ_f (Σᵢⱼ ∂x_k/∂ε_j(λᵢ)·P_f[λᵢ, j])²)·f_k·F/b, P_f the library's
      error patterns (:mod:`mixsolve.library_error`: errors correlated over wavelengths,
      and across components through a shared stock) and the linearised sensitivity of
      :func:`mixsolve.uncertainty.sensitivity.design_sensitivity`; NaN when the library
      states no error at all.
    - pathlength: |y|·u(b)/b. cell_ratio: |y|·u(r)/r.
    - dilution: |y|·u(F)/F, u(F)/F = √Σ(u(Vᵢ)/Vᵢ)².
    - carryover: fraction f = v/(V_fill + v); the uncorrected change f·(c_prev − c)·F is
      the half-width of a rectangular distribution: u = |f·(c_prev − c)|·F/√3.
    - wavelength: |∂y/∂λ|·a/√3 (a the ± tolerance, rectangular) or ·u_λ, with
      ∂y/∂λ = (G K′ x)_k f_k F/b, K′ = dε/dλ from the library.
    - stray_light: for a result corrected for a stated fraction s (``unmix``'s
      ``stray_fraction``), |(G ∂A/∂s)_k|·f_k·F/b·u(s) with ∂A/∂s of each corrected
      reading (:func:`mixsolve.solve.stray.stray_sensitivity`), the result's ``u_stray``.
      For an uncorrected result and a budget ``stray_fraction`` s: the bias of every
      fitted reading, δAᵢ = −log10((10^−Aᵢ + s)/(1 + s)) − Aᵢ, propagated
      δy = (G δA)_k f_k F/b, is the half-width of a rectangular distribution: u = |δy|/√3.
    - cell_blank: √(Σᵢ G_kᵢ² (u_blank,ᵢ/r)²)·f_k·F/b; 0 without a blank.

    u_c sums the stated sources only; ``attrs["not_stated"]`` lists the others. A sample
    without a result (too few readings) has NaN throughout. The linearised sensitivities
    of an NNLS fit are those of the unconstrained model at the solution.
    """
    inputs = budget_inputs(inputs, **settings)
    k_factor = inputs.coverage_factor
    model = measurement_model(result, library, inputs)
    conc = result["concentration"].transpose(SAMPLE, COMPONENT).values
    noise_part = "u_noise" if "u_noise" in result else "std_uncertainty"
    u_fit = result[noise_part].transpose(SAMPLE, COMPONENT).values
    n_s, n_c, n_src = conc.shape[0], conc.shape[1], len(SOURCES)
    contrib = np.full((n_s, n_c, n_src), np.nan)
    sens = np.full((n_s, n_c, n_src), np.nan)
    u_in = np.full((n_s, n_src), np.nan)
    for i, s in enumerate(model.samples):
        if s.ok:
            contrib[i], sens[i], u_in[i] = _linear(model, s, conc[i], u_fit[i],
                                                   use_fit_u=inputs.noise_sd is None)
    combined = np.sqrt(np.nansum(contrib**2, axis=-1))
    combined[~np.all(np.isfinite(conc), axis=1)] = np.nan
    with np.errstate(invalid="ignore", divide="ignore"):
        share = contrib**2 / combined[..., None] ** 2
    share[~(combined > 0)] = np.nan
    unit = model.unit
    ok_rows = np.array([s.ok for s in model.samples])
    not_stated = [name for k, name in enumerate(SOURCES)
                  if ok_rows.any() and np.isnan(contrib[ok_rows][..., k]).any()]
    dims2, dims3 = (SAMPLE, COMPONENT), (SAMPLE, COMPONENT, SOURCE)
    budget = xr.Dataset(
        {
            "value": (dims2, conc * model.dilution_factor,
                      {"units": unit, "meaning": "dilution factor × concentration found"}),
            "contribution": (dims3, contrib, {"units": unit}),
            "sensitivity": (dims3, sens, {"units": f"{unit} per input unit"}),
            "input_uncertainty": ((SAMPLE, SOURCE), u_in),
            "share": (dims3, share, {"units": "1", "meaning": "u_i^2 / u_c^2"}),
            "combined_uncertainty": (dims2, combined, {"units": unit}),
            "expanded_uncertainty": (dims2, k_factor * combined,
                                     {"units": unit, "coverage_factor": k_factor}),
        },
        coords={
            SAMPLE: result[SAMPLE].values,
            COMPONENT: model.components,
            SOURCE: list(SOURCES),
            "evaluation": (SOURCE, [v[0] for v in SOURCES.values()]),
            "distribution": (SOURCE, [model.wavelength_distribution if name == "wavelength"
                                      else v[1] for name, v in SOURCES.items()]),
            "input_unit": (SOURCE, [v[2] if v[2] != "library unit" else
                                    library.attrs["unit"] for v in SOURCES.values()]),
        },
        attrs={
            "unit": unit,
            "coverage_factor": k_factor,
            "dilution_factor": model.dilution_factor,
            "dilution": model.dilution.describe() if model.dilution else "none",
            "noise_from": model.noise_from,
            "wavelength_rule": (f"{model.wavelength_distribution}, u = "
                                f"{model.wavelength_u_nm:.3g} nm"),
            "stray_fraction": model.stray_fraction,
            "carryover_fraction": model.carryover_fraction,
            "carryover_from": inputs.carryover_from,
            "not_stated": json.dumps(not_stated),
            "notes": json.dumps(model.notes),
            "reference": "JCGM 100:2008 (GUM), law of propagation of uncertainty, "
                         "uncorrelated inputs",
        },
    )
    if inputs.monte_carlo is not None:
        budget = _add_monte_carlo(budget, model, inputs.monte_carlo, inputs.seed,
                                  inputs.mc_tolerance)
    return budget


def _add_monte_carlo(budget: xr.Dataset, model: MeasurementModel, draws: int, seed: int,
                     tolerance: float) -> xr.Dataset:
    mc = propagate(model, draws=draws, seed=seed)
    y = budget["value"].values
    u_c = budget["combined_uncertainty"].values
    check = compare(y, u_c, mc, tolerance)
    dims, unit = (SAMPLE, COMPONENT), {"units": budget.attrs["unit"]}
    budget = budget.assign(
        mc_mean=(dims, mc["mean"], unit),
        mc_standard_uncertainty=(dims, mc["sd"], unit),
        mc_low_95=(dims, mc["low"], unit),
        mc_high_95=(dims, mc["high"], unit),
        mc_d_low=(dims, check["d_low"], unit),
        mc_d_high=(dims, check["d_high"], unit),
        mc_agrees=(dims, check["agrees"]),
        mc_interval_agrees=(dims, check["interval_agrees"]),
    )
    budget.attrs.update({"mc_draws": draws, "mc_seed": seed, "mc_tolerance": tolerance,
                         "mc_reference": "JCGM 101:2008; tolerance as a fraction of u_c"})
    return budget


def budget_table(budget: xr.Dataset) -> pd.DataFrame:
    """The budget as a tidy table: one row per sample × component × source.

    Returns
    -------
    DataFrame
        ``sample, component, value, unit, source, evaluation, distribution,
        input_uncertainty, input_unit, sensitivity, contribution, share,
        combined_uncertainty, expanded_uncertainty, coverage_factor`` and, with a Monte
        Carlo run, ``mc_standard_uncertainty, mc_low_95, mc_high_95, mc_agrees,
        mc_interval_agrees``.
        Empty numeric cells (NaN) mean not stated or not applicable.
    """
    samples = [str(s) for s in budget[SAMPLE].values]
    comps = [str(c) for c in budget[COMPONENT].values]
    sources = [str(s) for s in budget[SOURCE].values]
    n_s, n_c, n_src = len(samples), len(comps), len(sources)

    def per_pair(name: str) -> np.ndarray:
        return np.repeat(budget[name].transpose(SAMPLE, COMPONENT).values.ravel(), n_src)

    def per_source(name: str) -> np.ndarray:
        return budget[name].transpose(SAMPLE, COMPONENT, SOURCE).values.ravel()

    table = {
        "sample": np.repeat(samples, n_c * n_src),
        "component": np.tile(np.repeat(comps, n_src), n_s),
        "value": per_pair("value"),
        "unit": budget.attrs["unit"],
        "source": np.tile(sources, n_s * n_c),
        "evaluation": np.tile(budget["evaluation"].values, n_s * n_c),
        "distribution": np.tile(budget["distribution"].values, n_s * n_c),
        "input_uncertainty": np.repeat(budget["input_uncertainty"].transpose(
            SAMPLE, SOURCE).values[:, None, :], n_c, axis=1).ravel(),
        "input_unit": np.tile(budget["input_unit"].values, n_s * n_c),
        "sensitivity": per_source("sensitivity"),
        "contribution": per_source("contribution"),
        "share": per_source("share"),
        "combined_uncertainty": per_pair("combined_uncertainty"),
        "expanded_uncertainty": per_pair("expanded_uncertainty"),
        "coverage_factor": budget.attrs["coverage_factor"],
    }
    for name in ("mc_standard_uncertainty", "mc_low_95", "mc_high_95", "mc_agrees",
                 "mc_interval_agrees"):
        if name in budget:
            table[name] = per_pair(name)
    return pd.DataFrame(table)
