"""Fit one wavelength offset per spectrum together with the concentrations.

Model: A(λ) = b Σₖ cₖ εₖ(λ + δ) + baseline. For each spectrum the residual sum of squares
is minimised over δ in [−max, +max] nm (``scipy.optimize.minimize_scalar``, bounded), the
library being re-interpolated at λ + δ for every trial and the linear part solved exactly
at each δ. The standard uncertainty of δ is the linearised value u(δ) = s/‖P⊥J‖, with
J = Σₖ xₖ εₖ′(λ + δ) the derivative of the model with respect to δ and P⊥ the projector
onto the complement of the design columns. Concentration and shift uncertainties come from
the joint linearised covariance s²([D | J]ᵀ[D | J])⁻¹, s² = RSS/(n − p − 1): the shift
costs one degree of freedom and its correlation with the concentrations is included.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize_scalar

from mixsolve.solve.cls import MISSING, NO_DOF, Method, solve_cls
from mixsolve.solve.design import Baseline, design_matrix


def _shifted_design(eps: np.ndarray, grid: np.ndarray, wl: np.ndarray, delta: float,
                    baseline: Baseline) -> np.ndarray:
    k = np.stack([np.interp(wl + delta, grid, row) for row in eps], axis=1)
    return design_matrix(k, wl, baseline)


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
        As :func:`mixsolve.solve.cls.solve_cls`, plus the offset δ (nm) and u(δ) (nm).
    """
    n = eps.shape[0]
    lead = spectra.shape[:-1]
    flat = spectra.reshape(-1, spectra.shape[-1])
    slope = np.gradient(eps, grid_nm, axis=1)
    outs: list[list[np.ndarray]] = [[] for _ in range(7)]
    for a in flat:
        row = a[None, :]

        def rss(delta: float, row: np.ndarray = row) -> float:
            d = _shifted_design(eps, grid_nm, wavelengths_nm, delta, baseline)
            _, _, fitted, _, _ = solve_cls(row, d, n, method)
            value = float(np.nansum((row - fitted) ** 2))
            return value if np.isfinite(value) else np.inf

        best = minimize_scalar(rss, bounds=(-max_shift_nm, max_shift_nm), method="bounded",
                               options={"xatol": 1e-4})
        delta = float(best.x)
        d = _shifted_design(eps, grid_nm, wavelengths_nm, delta, baseline)
        coef, se, fitted, dof, status = solve_cls(row, d, n, method)
        mask = np.isfinite(a)
        dof_s = int(dof[0]) - 1
        jac = np.stack([np.interp(wavelengths_nm + delta, grid_nm, s) for s in slope],
                       axis=1) @ np.nan_to_num(coef[0, :n])
        u_delta = np.nan
        if dof_s > 0 and not status[0] & ~NO_DOF & ~MISSING:
            # Linearised joint covariance of (coefficients, δ): s² (JᵀJ)⁻¹, J = [D | ∂A/∂δ].
            full = np.hstack([d[mask], jac[mask, None]])
            resid = a[mask] - fitted[0, mask]
            s2 = np.sum(resid**2) / dof_s
            norms = np.linalg.norm(full, axis=0)
            norms[norms == 0] = 1.0
            try:
                cov = np.linalg.inv((full / norms).T @ (full / norms)) / np.outer(norms, norms)
                sd = np.sqrt(np.clip(np.diag(cov) * s2, 0, None))
                se = sd[None, :-1]
                u_delta = float(sd[-1])
            except np.linalg.LinAlgError:
                se = np.full_like(se, np.nan)
        else:
            se = np.full_like(se, np.nan)
            if dof_s <= 0:
                status = status | NO_DOF
        for store, value in zip(outs, (coef[0], se[0], fitted[0], np.array(max(dof_s, 0)),
                                       status[0], np.array(delta), np.array(u_delta)),
                                strict=True):
            store.append(np.asarray(value))
    coef, se, fitted, dof, status, shift, u_shift = (np.stack(o) for o in outs)
    return (coef.reshape(*lead, -1), se.reshape(*lead, -1), fitted.reshape(*lead, -1),
            dof.reshape(lead).astype(np.int64), status.reshape(lead).astype(np.int64),
            shift.reshape(lead), u_shift.reshape(lead))
