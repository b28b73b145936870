"""What the solvers share: engine choice, row states, KKT tolerance, iteration limit, fallback.

Two engines fit a batch of complete spectra against one design and agree to rounding:
numpy (:mod:`mixsolve.solve.nnls`, always available) and compiled code
(:mod:`mixsolve.solve.fused`, when numba is installed). :func:`choose_engine` picks one per
job; the environment variable ``MIXSOLVE_ENGINE`` (``numpy`` or ``compiled``) forces one.
The per-spectrum solver (:mod:`mixsolve.solve.per_spectrum`) is numpy only and follows the
same rules. This module imports neither engine; :mod:`mixsolve.solve.batch` and
:mod:`mixsolve.solve.cls`, above both, dispatch between them.

KKT tolerance (all solvers): on return, with τ = ``kkt_rtol(m, p)`` · max(‖a‖₂, ‖x̂‖₂)
(m wavelengths, p columns, x̂ the coefficients of the unit-norm columns,
w = D̂ᵀ(a − D̂x̂)): x̂_j ≥ 0 for constrained j; w_j ≤ τ where x̂_j = 0; |w_j| ≤ τ where
x̂_j > 0 and for free j. The first is enforced, the second is the stopping test (on the
stricter ‖y‖₂ ≤ ‖a‖₂, y = Qᵀa), the third follows from the stable subproblem solves; all
three are tested (tests/test_nnls.py, tests/test_per_spectrum.py, tests/test_fused.py).

Iteration limit: a spectrum not done after :func:`iteration_limit` outer Lawson–Hanson
steps (rounding-induced cycling; the tests reach it only when forced) is solved by
``scipy.optimize.nnls`` on its reduced problem (:func:`scipy_fallback`); the compiled
engine marks such a row ``ROW_ITERATION_LIMIT`` and the numpy steps finish it.
"""

from __future__ import annotations

import os
from typing import Literal

import numpy as np

from mixsolve.errors import InputError

Method = Literal["ols", "nnls"]
METHODS: tuple[str, ...] = ("nnls", "ols")
Engine = Literal["auto", "numpy", "compiled"]
ENGINES: tuple[str, ...] = ("auto", "numpy", "compiled")
#: Environment variable that forces an engine (``numpy`` or ``compiled``).
ENGINE_VARIABLE = "MIXSOLVE_ENGINE"
#: Smallest job for which ``auto`` uses compiled code. Loading the compiled functions
#: costs a process about 0.5 s (the first time ever, compiling them about 3 s); numpy
#: fits ~10⁴ spectra in a few tens of ms, so small jobs (plates, tables) stay with numpy.
COMPILED_MIN_SPECTRA = 10_000
#: States of a row after a pass over complete spectra (written by the compiled engine).
ROW_DONE = 0
ROW_NOT_FINITE = 1  #: a reading is missing or infinite: fitted, or refused, afterwards
ROW_ITERATION_LIMIT = 2  #: NNLS not done within its iterations: the numpy solver finishes


def choose_engine(engine: Engine, n_spectra: int) -> Literal["numpy", "compiled"]:
    """``numpy`` or ``compiled``: who fits a batch of ``n_spectra`` complete spectra.

    ``auto`` reads ``MIXSOLVE_ENGINE`` first; without it, compiled code when numba is
    installed and the batch holds at least ``COMPILED_MIN_SPECTRA`` spectra.

    Raises
    ------
    InputError
        ``compiled`` asked for without numba, or ``MIXSOLVE_ENGINE`` set to something else.
    """
    choice = engine
    if choice == "auto":
        forced = os.environ.get(ENGINE_VARIABLE, "").strip().lower()
        if forced and forced not in ("numpy", "compiled"):
            raise InputError(f"{ENGINE_VARIABLE}: {forced!r} is not 'numpy' or 'compiled'")
        choice = forced or "auto"  # type: ignore[assignment]
    if choice == "numpy" or (choice == "auto" and n_spectra < COMPILED_MIN_SPECTRA):
        return "numpy"
    if not _numba_installed():
        if choice == "compiled":
            raise InputError("the compiled engine needs numba, which is not installed: "
                             "pip install 'mixsolve[fast]'")
        return "numpy"
    return "compiled"


def _numba_installed() -> bool:
    """numba imports (only asked for jobs that would use it: the import takes ~0.5 s)."""
    try:
        import numba  # noqa: F401
    except ImportError:
        return False
    return True


def kkt_rtol(n_wavelengths: int, n_terms: int) -> float:
    """Relative KKT tolerance 10 · max(m, p) · ε of every solver (module docstring)."""
    return 10.0 * max(n_wavelengths, n_terms, 1) * float(np.finfo(float).eps)


def iteration_limit(n_terms: int) -> int:
    """Outer Lawson–Hanson iterations before the scipy fallback: 10·p + 10."""
    return 10 * n_terms + 10


def scipy_fallback(r: np.ndarray, y: np.ndarray, constrained: np.ndarray) -> np.ndarray:
    """``scipy.optimize.nnls`` on reduced problems min ‖y − R x‖ sharing R, free terms
    projected out.

    Parameters
    ----------
    r : array, shape (p, p)
        Upper triangular factor of the column-scaled design.
    y : array, shape (p, n)
        Qᵀa of each spectrum a (one column per spectrum).
    constrained : array of bool, shape (p,)

    Returns
    -------
    ndarray, shape (p, n)
        Coefficients of the scaled columns: the constrained ones by scipy's NNLS on the
        problem with the free columns projected out, then the free ones by least squares.
    """
    from scipy.optimize import nnls as _scipy_nnls  # scipy.optimize: only this fallback

    free = ~constrained
    r_con, r_free = r[:, constrained], r[:, free]
    q = np.linalg.qr(r_free)[0] if free.any() else np.zeros((r.shape[0], 0))
    r_proj = r_con - q @ (q.T @ r_con)
    x = np.zeros((r.shape[1], y.shape[1]))
    for i in range(y.shape[1]):
        c = _scipy_nnls(r_proj, y[:, i] - q @ (q.T @ y[:, i]),
                        maxiter=50 * max(r_con.shape[1], 1))[0]
        x[constrained, i] = c
        if free.any():
            x[free, i] = np.linalg.lstsq(r_free, y[:, i] - r_con @ c, rcond=None)[0]
    return x
