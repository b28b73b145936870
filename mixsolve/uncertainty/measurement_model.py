"""The measurement model behind an unmixing result: every input with its uncertainty.

For one sample and component k, the reported quantity (the measurand) is

    y_k = F · f_k · x_k(A_corr, ε) / (b · r) + carry-over correction (0 ± …)

with x = G A_corr the least-squares coefficients (:mod:`mixsolve.uncertainty.sensitivity`),
A_corr the corrected absorbance at the used wavelengths (AU), ε the library absorptivities
(canonical unit), b the pathlength (cm), r the cell pathlength ratio, F the dilution factor
and f_k the unit conversion factor. This module gathers, per sample, the arrays the linear
budget (:mod:`mixsolve.uncertainty.budget`) and the Monte Carlo propagation
(:mod:`mixsolve.uncertainty.montecarlo`) both need, so the two always propagate the same inputs.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.library_error import error_patterns
from mixsolve.noise import NoiseModel
from mixsolve.slit import as_fitted
from mixsolve.solve.design import design_matrix
from mixsolve.solve.shift_sensitivity import library_derivative
from mixsolve.solve.stray import StrayCorrectedNoise, stray_sensitivity
from mixsolve.spectra import SAMPLE, WAVELENGTH
from mixsolve.uncertainty.corrections import CellCorrection, on_wavelengths
from mixsolve.uncertainty.inputs import BudgetInputs
from mixsolve.uncertainty.sensitivity import ls_operators
from mixsolve.uncertainty.volumetric import Dilution


@dataclass
class SampleModel:
    """Inputs of one sample's fit (rows: the used wavelengths that had a reading).

    Concentrations are in the library's canonical unit; ``coef`` holds b·c for components
    and the baseline terms. NaN entries mean "not stated".
    """

    name: str
    ok: bool
    wavelengths_nm: np.ndarray = field(default_factory=lambda: np.empty(0))
    design: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))
    weights: np.ndarray | None = None
    observed: np.ndarray = field(default_factory=lambda: np.empty(0))
    residual: np.ndarray = field(default_factory=lambda: np.empty(0))
    coef: np.ndarray = field(default_factory=lambda: np.empty(0))
    g: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))
    m: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))
    pathlength_cm: float = 1.0
    sigma_noise: np.ndarray = field(default_factory=lambda: np.empty(0))
    #: (F, n, n_components) the library's error patterns at the used wavelengths that had
    #: a reading (:mod:`mixsolve.library_error`); F = 0 when the library states none
    library_patterns: np.ndarray = field(default_factory=lambda: np.empty((0, 0, 0)))
    derivative: np.ndarray = field(default_factory=lambda: np.empty((0, 0)))
    #: half-width (AU) of each reading's rectangular stray-light error: the bias at s of
    #: an uncorrected result, √3·u(s)·∂A/∂s of a result corrected for s
    stray_bias: np.ndarray = field(default_factory=lambda: np.empty(0))
    sigma_blank: np.ndarray = field(default_factory=lambda: np.empty(0))
    carry_delta: np.ndarray = field(default_factory=lambda: np.empty(0))


@dataclass
class MeasurementModel:
    """Everything shared by the samples of one result, and the per-sample models."""

    components: list[str]
    samples: list[SampleModel]
    unit: str
    unit_factor: np.ndarray
    grid_nm: np.ndarray
    absorptivity_grid: np.ndarray
    u_pathlength_cm: float
    dilution: Dilution | None
    wavelength_u_nm: float
    wavelength_distribution: str
    stray_fraction: float
    #: u(s): of the fraction a corrected result was corrected with, else s/√3
    u_stray_fraction: float
    carryover_fraction: float
    cell: CellCorrection
    noise_from: str
    notes: list[str]

    @property
    def dilution_factor(self) -> float:
        """F (1 without a dilution)."""
        return 1.0 if self.dilution is None else self.dilution.factor


def _stated(value: float | None) -> float:
    """A checked input of :class:`BudgetInputs`; NaN (not stated) for None."""
    return float("nan") if value is None else float(value)


def _result_noise_model(result: xr.Dataset) -> NoiseModel | None:
    text = result.attrs.get("noise_model", "")
    return NoiseModel(**json.loads(text)) if text else None


def check_result(result: xr.Dataset, library: xr.Dataset) -> xr.Dataset:
    """Refuse what the budget cannot handle: PLS, other dims, another library."""
    if not isinstance(result, xr.Dataset) or "concentration" not in result:
        raise InputError("budget: expected the Dataset returned by mixsolve.unmix")
    if result.attrs.get("method") not in ("ols", "nnls"):
        raise InputError(f"budget: method {result.attrs.get('method')!r} is not a "
                         "least-squares fit (ols, nnls); PLS predictions have no budget here")
    dims = set(result["concentration"].dims)
    if dims != {SAMPLE, COMPONENT}:
        raise InputError(f"budget: concentration dims {tuple(result['concentration'].dims)} "
                         "must be (sample, component)")
    comps = [str(c) for c in result[COMPONENT].values]
    lib_comps = [str(c) for c in library[COMPONENT].values]
    if comps != lib_comps:
        raise InputError(f"budget: the library's components ({', '.join(lib_comps)}) are not "
                         f"those of the result ({', '.join(comps)})")
    return result


def measurement_model(result: xr.Dataset, library: xr.Dataset, inputs: BudgetInputs
                      ) -> MeasurementModel:
    """Assemble the inputs of :func:`mixsolve.uncertainty_budget` for every sample.

    ``inputs`` were checked when made; the result's own ``wavelength_tolerance_nm`` and
    noise model's stray fraction stand in for those not given.
    """
    library = as_fitted(check_library(library), result.attrs)  # as broadened for the fit
    result = check_result(result, library)
    notes: list[str] = []
    if inputs.wavelength_u_nm is not None:
        u_wl, wl_dist = inputs.wavelength_u_nm, "normal"
    else:
        tol = inputs.wavelength_tolerance_nm
        if tol is None:
            tol = result.attrs.get("wavelength_tolerance_nm")
        u_wl = _stated(tol) / np.sqrt(3.0)
        wl_dist = "rectangular"
    fill = float(inputs.fill_volume_ul)  # type: ignore[arg-type]  # None became the default
    carry_ul = _stated(inputs.carryover_ul)
    carry_frac = 0.0 if np.isnan(carry_ul) else carry_ul / (fill + carry_ul)
    corrected = float(result.attrs.get("stray_fraction", 0.0)) > 0
    if corrected:  # the readings were corrected: u(s) remains (docs/uncertainty.md)
        stray = float(result.attrs["stray_fraction"])
        u_stray = float(result.attrs["u_stray_fraction"])
        if inputs.stray_fraction is not None and inputs.stray_fraction != stray:
            raise InputError(f"stray_fraction: {inputs.stray_fraction:g} disagrees with the "
                             f"fraction {stray:g} the result was corrected with")
    elif inputs.stray_fraction is None:
        model = _result_noise_model(result)
        stray = model.stray if model is not None else float("nan")
        u_stray = stray / np.sqrt(3.0)
    else:
        stray = inputs.stray_fraction
        u_stray = stray / np.sqrt(3.0)
    cell = inputs.cell if inputs.cell is not None else CellCorrection()
    noise_sd = inputs.noise_sd
    carryover_from = inputs.carryover_from

    used_wl = np.asarray(json.loads(result.attrs["wavelengths_nm"]), dtype=float)
    lib_used, outside = resample_library(library, used_wl)
    if outside.size:
        raise InputError(f"budget: used wavelength {outside[0]:g} nm lies outside the library")
    comps = [str(c) for c in library[COMPONENT].values]
    n_comp = len(comps)
    eps = lib_used["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
    design = design_matrix(eps, used_wl, result.attrs["baseline"])
    patterns = error_patterns(lib_used).transpose(0, 2, 1)  # resampled with the library
    grid = library[WAVELENGTH].values
    eps_grid = library["absorptivity"].transpose(COMPONENT, WAVELENGTH).values
    deriv = library_derivative(eps_grid, grid, used_wl)
    sd = None if noise_sd is None else on_wavelengths(noise_sd, used_wl, "repeat-scan SD")
    blank_u = (np.full(used_wl.shape, 0.0) if cell.u_blank is None
               else on_wavelengths(cell.u_blank, used_wl, "cell blank"))
    weighted = result.attrs.get("weights") == "noise"
    noise = _result_noise_model(result)
    if corrected and noise is not None:  # the fit weighted the corrected readings
        noise = StrayCorrectedNoise.of(noise, stray)
    if result.attrs.get("fit_shift"):
        notes.append("the fit also fitted a wavelength shift; the budget linearises the "
                     "plain least-squares model at the fitted concentrations")

    factor = result["unit_factor"].values.astype(float)
    conc = result["concentration"].transpose(SAMPLE, COMPONENT).values
    b_all = np.broadcast_to(result["pathlength_cm"].values, (conc.shape[0],)) \
        if result["pathlength_cm"].ndim == 0 else result["pathlength_cm"].values
    fitted = result["fitted"].transpose(SAMPLE, WAVELENGTH).values
    residual = result["residual"].transpose(SAMPLE, WAVELENGTH).values
    base = (result["baseline"].transpose(SAMPLE, ...).values
            if result["baseline"].size else np.zeros((conc.shape[0], 0)))
    dof = result["dof"].values
    inflation = (result["noise_inflation"].values if "noise_inflation" in result
                 else np.ones(dof.shape))
    samples = []
    for i, name in enumerate(str(s) for s in result[SAMPLE].values):
        present = np.isfinite(residual[i]) & np.isfinite(fitted[i])
        if not np.all(np.isfinite(conc[i])) or present.sum() < design.shape[1]:
            samples.append(SampleModel(name=name, ok=False))
            continue
        b = float(b_all[i])
        canonical = conc[i] / factor
        coef = np.concatenate([canonical * b, base[i].reshape(-1)])
        d = design[present]
        w = None
        if weighted and noise is not None:
            w = noise.weights(fitted[i, present])
        g, m = ls_operators(d, w)
        r = residual[i, present]
        if sd is not None:
            sigma = sd[present]
        elif dof[i] > 0:
            wr2 = r**2 if w is None else w * r**2
            # × the fit's correlated-noise inflation f: independent readings of σ·f move the
            # fit as much as the correlated ones did (u_noise); their shape is not redrawn
            s = np.sqrt(np.sum(wr2) / dof[i]) * inflation[i]
            sigma = s / np.sqrt(w) if w is not None else np.full(r.shape, s)
        else:
            sigma = np.full(r.shape, np.nan)
        a_fit = fitted[i, present]
        if np.isnan(stray):
            bias = np.full(r.shape, np.nan)
        elif corrected:
            bias = np.sqrt(3.0) * u_stray * stray_sensitivity(a_fit, stray)
        else:
            t = 10.0 ** -a_fit
            bias = -np.log10((t + stray) / (1.0 + stray)) - a_fit
        if carryover_from == "previous" and i > 0:
            previous = conc[i - 1]
        else:
            previous = np.zeros(n_comp)
        samples.append(SampleModel(
            name=name, ok=True, wavelengths_nm=used_wl[present], design=d, weights=w,
            observed=a_fit + r, residual=r, coef=coef, g=g, m=m, pathlength_cm=b,
            sigma_noise=sigma, library_patterns=patterns[:, present, :],
            derivative=deriv[present],
            stray_bias=bias, sigma_blank=blank_u[present] / cell.ratio,
            carry_delta=carry_frac * (previous - conc[i]) / factor))
    return MeasurementModel(
        components=comps, samples=samples, unit=result.attrs["unit"], unit_factor=factor,
        grid_nm=grid, absorptivity_grid=eps_grid,
        u_pathlength_cm=_stated(inputs.pathlength_u_cm),
        dilution=inputs.dilution,  # type: ignore[arg-type]  # text became a Dilution
        wavelength_u_nm=u_wl, wavelength_distribution=wl_dist, stray_fraction=stray,
        u_stray_fraction=u_stray,
        carryover_fraction=carry_frac, cell=cell,
        noise_from="repeat scans" if sd is not None else "fit residual", notes=notes)
