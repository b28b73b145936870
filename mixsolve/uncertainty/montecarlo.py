"""Monte Carlo propagation of the measurement model (JCGM 101:2008), to check the linear budget.

Each draw samples every stated input from its distribution and recomputes the measurand
with the full (non-linear) model of :mod:`mixsolve.uncertainty.measurement_model`:

- readings: A + N(0, σ_noise) + N(0, σ_blank) + U(−1, 1)·δA_stray + a wavelength error
  δ ~ U(−a, a) (or N(0, u)) applied through the library itself,
  Σⱼ xⱼ (εⱼ(λ + δ) − εⱼ(λ)), ε between grid points from a cubic spline (linear
  interpolation would put a kink at every grid point and, for δ of either sign, a spurious
  bias of order |δ|·Δε′);
- absorptivities: whole library spectra ε + Σ_f P_f·z_f, z_f ~ N(0, 1), with the library's
  error patterns P_f (:mod:`mixsolve.library_error`: correlated over wavelengths and, through
  a shared stock, across components), then the least-squares system is solved again
  (weighted as the fit was);
- pathlength N(b, u_b); cell ratio N(r, u_r); each volume V + U(−a, a) (or triangular)
  + N(0, s_r), F = Π V_final / Π V_aliquot; carry-over U(−1, 1)·δ_carry.

Sources the linear budget marks "not stated" (NaN) are left out here too. The reported
estimate y stays the fit's (for NNLS the constrained one): each draw adds the change of the
unconstrained solution, f(inputs drawn) − f(nominal inputs), to y.

Comparison, with a numerical tolerance δ stated as a fraction of u_c (default 5 %, see
docs/uncertainty.md) rather than through significant digits:

- the standard uncertainty and mean of the draws against u_c and y (``agrees``): this
  checks the linearisation and the arithmetic of the budget;
- JCGM 101:2008, 8.2: with U₉₅ = 1.96·u_c the interval y ± U₉₅ against the
  probabilistically symmetric 95 % interval [y_low, y_high] of the draws,
  d_low = |y − U₉₅ − y_low|, d_high = |y + U₉₅ − y_high|, both ≤ δ (``interval_agrees``).
  This also tests whether the output is near normal, which it is not when rectangular
  sources (wavelength, volumes, carry-over) dominate: then the 95 % interval is shorter
  than ±1.96·u_c and the draws' interval is the better one to quote.
"""

from __future__ import annotations

import numpy as np

from mixsolve.spectra import check_number
from mixsolve.uncertainty.inputs import DEFAULT_MC_TOLERANCE, MIN_DRAWS
from mixsolve.uncertainty.measurement_model import MeasurementModel, SampleModel

#: Coverage factor of a 95 % interval under a normal distribution (JCGM 101, 8.2).
K95 = 1.96
BATCH = 4000


def _symmetric(rng: np.random.Generator, size: int | tuple[int, ...], kind: str
               ) -> np.ndarray:
    """Unit-half-width draws: U(−1, 1) or triangular(−1, 0, 1)."""
    if kind == "triangular":
        return rng.triangular(-1.0, 0.0, 1.0, size)
    return rng.uniform(-1.0, 1.0, size)


def _solve(design: np.ndarray, values: np.ndarray, w: np.ndarray | None) -> np.ndarray:
    """Batched weighted least squares: design (B, n, p) or (n, p), values (B, n) → (B, p)."""
    d = np.broadcast_to(design, (values.shape[0], *design.shape[-2:]))
    norms = np.linalg.norm(d, axis=1, keepdims=True)
    ds = d / norms
    wd = ds if w is None else ds * w[None, :, None]
    lhs = np.einsum("bni,bnj->bij", wd, ds)
    rhs = np.einsum("bni,bn->bi", wd, values)
    return np.linalg.solve(lhs, rhs[..., None])[..., 0] / norms[:, 0, :]


def _sample_draws(model: MeasurementModel, s: SampleModel, draws: int,
                  rng: np.random.Generator) -> np.ndarray:
    n_comp = len(model.components)
    n = s.observed.size
    scale = model.unit_factor * model.dilution_factor / s.pathlength_cm
    nominal = _solve(s.design, s.observed[None, :], s.weights)[0]
    out = []
    for start in range(0, draws, BATCH):
        size = min(BATCH, draws - start)
        a = np.broadcast_to(s.observed, (size, n)).copy()
        if np.all(np.isfinite(s.sigma_noise)):
            a += rng.standard_normal((size, n)) * s.sigma_noise
        if model.cell.blank is not None and np.all(np.isfinite(s.sigma_blank)):
            a += rng.standard_normal((size, n)) * s.sigma_blank
        if np.all(np.isfinite(s.stray_bias)):
            a += rng.uniform(-1.0, 1.0, (size, 1)) * s.stray_bias
        if np.isfinite(model.wavelength_u_nm) and np.all(np.isfinite(s.derivative)):
            if model.wavelength_distribution == "normal":
                delta = rng.standard_normal(size) * model.wavelength_u_nm
            else:
                delta = rng.uniform(-1.0, 1.0, size) * model.wavelength_u_nm * np.sqrt(3.0)
            from scipy.interpolate import CubicSpline  # only a wavelength term needs it

            spline = CubicSpline(model.grid_nm, model.absorptivity_grid, axis=1)
            moved = spline(s.wavelengths_nm[None, :] + delta[:, None])  # (n_comp, size, n)
            here = spline(s.wavelengths_nm)  # (n_comp, n)
            a += np.einsum("j,jbn->bn", s.coef[:n_comp], moved - here[:, None, :])
        design = s.design
        patterns = s.library_patterns
        if patterns.shape[0]:
            design = np.broadcast_to(s.design, (size, *s.design.shape)).copy()
            z = rng.standard_normal((size, patterns.shape[0]))
            design[:, :, :n_comp] += np.einsum("bf,fnk->bnk", z, patterns)
        x = _solve(design, a, s.weights)[:, :n_comp]
        value = (x - nominal[:n_comp]) * scale
        factor = np.ones(size)
        if np.isfinite(model.u_pathlength_cm):
            factor *= s.pathlength_cm / (s.pathlength_cm
                                         + rng.standard_normal(size) * model.u_pathlength_cm)
        if model.cell.u_ratio > 0:
            ratio = model.cell.ratio
            factor *= ratio / (ratio + rng.standard_normal(size) * model.cell.u_ratio)
        if model.dilution is not None:
            drawn = np.ones(size)
            for step in model.dilution.steps:
                volume = (step.volume_ml
                          + _symmetric(rng, size, step.distribution) * step.tolerance_ml
                          + rng.standard_normal(size) * step.random_sd_ml)
                drawn *= volume / step.volume_ml if step.role == "final" \
                    else step.volume_ml / volume
            factor *= drawn
        y = s.coef[:n_comp] * scale
        value = (y + value) * factor[:, None] - y
        value += rng.uniform(-1.0, 1.0, (size, 1)) * (
            s.carry_delta * model.unit_factor * model.dilution_factor)
        out.append(value + y)
    return np.concatenate(out, axis=0)


def propagate(model: MeasurementModel, *, draws: int = 20000, seed: int = 0
              ) -> dict[str, np.ndarray]:
    """Draw the measurand of every sample and component.

    Parameters
    ----------
    model : MeasurementModel
    draws : int
        Draws per sample (≥ 1000).
    seed : int
        Seed of ``numpy.random.default_rng``: the same seed gives the same numbers.

    Returns
    -------
    dict of ndarray, shape (n_samples, n_components)
        ``mean``, ``sd`` (standard uncertainty, m − 1 divisor), ``low`` and ``high`` (the
        2.5 % and 97.5 % quantiles), in the budget's value unit; NaN for unfitted samples.

    Raises
    ------
    InputError
        Fewer than 1000 draws.
    """
    draws = int(check_number(draws, "draws", low=MIN_DRAWS, integer=True))
    rng = np.random.default_rng(seed)
    shape = (len(model.samples), len(model.components))
    out = {key: np.full(shape, np.nan) for key in ("mean", "sd", "low", "high")}
    for i, s in enumerate(model.samples):
        if not s.ok:
            continue
        values = _sample_draws(model, s, draws, rng)
        out["mean"][i] = values.mean(axis=0)
        out["sd"][i] = values.std(axis=0, ddof=1)
        out["low"][i], out["high"][i] = np.quantile(values, [0.025, 0.975], axis=0)
    return out


def compare(y: np.ndarray, u_c: np.ndarray, mc: dict[str, np.ndarray],
            tolerance: float = DEFAULT_MC_TOLERANCE) -> dict[str, np.ndarray]:
    """Compare the linear budget with the draws, δ = ``tolerance``·u_c.

    Returns
    -------
    dict of ndarray
        ``d_low``, ``d_high`` (value unit): JCGM 101:2008, 8.2, with U₉₅ = 1.96·u_c;
        ``interval_agrees``: both ≤ δ (fails, correctly, when rectangular sources dominate
        and the output is flatter than a normal distribution); ``agrees``: the standard
        uncertainty and the mean of the draws both within δ of u_c and y. False where
        anything is NaN.
    """
    d_low = np.abs(y - K95 * u_c - mc["low"])
    d_high = np.abs(y + K95 * u_c - mc["high"])
    delta = tolerance * u_c
    with np.errstate(invalid="ignore"):
        interval = (d_low <= delta) & (d_high <= delta)
        agrees = (np.abs(mc["sd"] - u_c) <= delta) & (np.abs(mc["mean"] - y) <= delta)
    return {"d_low": d_low, "d_high": d_high, "interval_agrees": interval, "agrees": agrees}
