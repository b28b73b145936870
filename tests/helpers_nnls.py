"""Invented NNLS problems, the KKT check and a reference fit shared by the solver tests.

The KKT conditions of min ½‖a − Dx‖², x_j ≥ 0 (Lawson & Hanson 1974, from memory; they
hold for any true minimiser, so they check by internal consistency) with the tolerance
:mod:`mixsolve.solve.engine` states: τ = 10·max(m, p)·ε·max(‖a‖, ‖x̂‖) on unit-norm columns.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import nnls

from mixsolve.solve.engine import kkt_rtol

#: (wavelengths, terms, spectra) of the random problems both solvers are checked on: a
#: typical spectrum, short and few-wavelength designs, one component, ten components.
PROBLEM_SHAPES = [(300, 5, 400), (40, 3, 200), (12, 6, 150), (200, 1, 50), (25, 10, 120)]

def kkt_ratio(design: np.ndarray, spectra: np.ndarray, x: np.ndarray, n_con: int) -> float:
    """Largest KKT violation as a fraction of the stated tolerance τ (≤ 1 passes)."""
    norms = np.linalg.norm(design, axis=0)
    norms[norms == 0] = 1.0
    d_hat, x_hat = design / norms, x * norms
    w = (spectra - x_hat @ d_hat.T) @ d_hat
    tau = kkt_rtol(*design.shape) * np.maximum(np.linalg.norm(spectra, axis=1),
                                                np.linalg.norm(x_hat, axis=1))
    at_zero = np.zeros_like(x_hat, dtype=bool)
    at_zero[:, :n_con] = x_hat[:, :n_con] == 0
    assert np.all(x_hat[:, :n_con] >= 0), "a constrained coefficient is negative"
    excess = np.where(at_zero, w, np.abs(w))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(tau[:, None] > 0, excess / tau[:, None],
                         np.where(excess > 0, np.inf, 0.0))
    return float(ratio.max()) if ratio.size else 0.0


def bands(m: int, centres: list[float], width: float = 0.12) -> np.ndarray:
    """Gaussian band columns on [0, 1] (m rows)."""
    t = np.linspace(0.0, 1.0, m)
    return np.stack([np.exp(-0.5 * ((t - c) / width) ** 2) for c in centres], axis=1)


def problem(rng: np.random.Generator, m: int, p: int, n: int, zero_fraction: float = 0.3,
            noise: float = 0.01) -> tuple[np.ndarray, np.ndarray]:
    """Design (m × p) of overlapping bands and n spectra, some components truly absent."""
    design = bands(m, list(np.linspace(0.15, 0.85, p) + rng.uniform(-0.03, 0.03, p)))
    design *= rng.uniform(0.5, 3.0, p)
    conc = rng.uniform(0.0, 1.0, (n, p))
    conc[rng.random(conc.shape) < zero_fraction] = 0.0
    spectra = conc @ design.T + noise * rng.standard_normal((n, m))
    return design, spectra


def scipy_loop(design: np.ndarray, spectra: np.ndarray) -> np.ndarray:
    return np.vstack([nnls(design, a, maxiter=50 * design.shape[1])[0] for a in spectra])


def nnls_free_reference(design: np.ndarray, a: np.ndarray, n_con: int) -> np.ndarray:
    """scipy.optimize.nnls on the free columns projected out, then lstsq for them."""
    k, b = design[:, :n_con], design[:, n_con:]
    if not b.shape[1]:
        return nnls(k, a, maxiter=50 * max(n_con, 1))[0]
    proj = np.eye(design.shape[0]) - b @ np.linalg.pinv(b)
    c = nnls(proj @ k, proj @ a, maxiter=50 * max(n_con, 1))[0]
    beta = np.linalg.lstsq(b, a - k @ c, rcond=None)[0]
    return np.r_[c, beta]
