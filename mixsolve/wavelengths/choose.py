"""Choose measuring wavelengths that minimise the predicted concentration variance.

Criterion (A-optimal, made unit-free): with D_S the design matrix at a set S of
wavelengths and constant reading noise σ_A, the predicted variance of component k is
σ_A²·[(D_SᵀD_S)⁻¹]ₖₖ. Components have different scales, so each is divided by its variance
over the whole candidate window F, and the criterion is the mean ratio

    J(S) = (1/n) Σₖ [(D_SᵀD_S)⁻¹]ₖₖ / [(D_FᵀD_F)⁻¹]ₖₖ.

J(S) compares one reading per wavelength. At equal total measuring time (each of |S|
wavelengths read |F|/|S| times as long, so σ² ∝ |S|/|F|) the figure is
J_time(S) = J(S)·|S|/|F|; J_time ≤ 1 means the short set measures as well as the full
window in the same time. For a fixed |S| both criteria rank sets the same way.

Search: greedy forward selection (add the wavelength that lowers J most; while |S| is
below the number of unknowns, a tiny ridge keeps the inverse defined), then exchange
passes (swap a chosen wavelength for a candidate whenever J falls) until none helps.
Ties go to the shorter wavelength, so the result is reproducible. ``contiguous`` scans
every run of |S| neighbouring candidate wavelengths instead.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import xarray as xr

from mixsolve.errors import InputError, renamed
from mixsolve.library import COMPONENT, check_library, resample_library
from mixsolve.noise import NoiseModel, blank_noise_sd
from mixsolve.solve.design import (
    BASELINE_TERMS,
    BASELINES,
    MAX_CONDITION_NUMBER,
    Baseline,
    design_matrix,
)
from mixsolve.spectra import WAVELENGTH, check_number, check_option
from mixsolve.wavelengths.check import DEFAULT_SIGMA_A, _figures, candidate_wavelengths
from mixsolve.wavelengths.merit import scaled_condition_number

#: Documented margin for the demo acceptance: at equal measuring time the chosen set's
#: criterion should not exceed the full window's (1.0) by more than this factor.
EQUAL_TIME_MARGIN = 1.25
MAX_EXCHANGE_PASSES = 100


@dataclass
class WavelengthChoice:
    """The chosen wavelengths with figures of merit beside the full window's."""

    wavelengths_nm: list[float]
    criterion: float
    criterion_equal_time: float
    chosen: xr.Dataset
    full: xr.Dataset
    user: xr.Dataset | None
    user_criterion: float | None
    contiguous: bool

    def to_dict(self) -> dict[str, object]:
        """Plain JSON-safe summary."""
        from mixsolve.wavelengths.check import merit_to_dict

        def num(v: float | None) -> float | None:
            return None if v is None or not np.isfinite(v) else float(v)

        return {
            "wavelengths_nm": self.wavelengths_nm,
            "criterion": num(self.criterion),
            "criterion_equal_time": num(self.criterion_equal_time),
            "contiguous": self.contiguous,
            "chosen": merit_to_dict(self.chosen),
            "full_window": merit_to_dict(self.full),
            "user_set": None if self.user is None else merit_to_dict(self.user),
            "user_criterion": num(self.user_criterion),
        }


def _variances(design: np.ndarray, n: int, ridge: float = 0.0) -> np.ndarray:
    """Diagonal of (DᵀD)⁻¹ (or of (DᵀD + λI)⁻¹ with a ridge) for the first ``n`` terms.

    Computed from the singular value decomposition of D, never by inverting DᵀD: a set
    whose D has a zero column, fewer rows than columns or a scaled condition number above
    ``MAX_CONDITION_NUMBER`` (what ``unmix`` refuses as numerically rank deficient) gets
    infinite variances. With a ridge, λ = ridge·trace(DᵀD)/p keeps them finite.
    """
    p = design.shape[1]
    norms = np.linalg.norm(design, axis=0)
    if ridge:
        # DᵀD = V diag(s²) V^T with s padded by zeros when D has fewer rows than columns
        _, sv, vt = np.linalg.svd(design, full_matrices=True)
        eig = np.zeros(p)
        eig[:sv.size] = sv[:p] ** 2
        lam = ridge * float(np.sum(norms**2)) / p
        if not lam > 0:  # every reading zero: nothing to keep defined
            return np.full(n, np.inf)
        return (vt.T**2 @ (1.0 / (eig + lam)))[:n]
    if design.shape[0] < p or np.any(norms == 0) or not np.all(np.isfinite(design)):
        return np.full(n, np.inf)
    # Columns scaled to unit length: the condition number and the variances are then
    # free of the components' units; D = S·diag(norms), so (DᵀD)⁻¹ₖₖ = (SᵀS)⁻¹ₖₖ / normₖ².
    _, sv, vt = np.linalg.svd(design / norms, full_matrices=False)
    if sv[-1] <= sv[0] / MAX_CONDITION_NUMBER:
        return np.full(n, np.inf)
    return ((vt.T**2 @ (1.0 / sv**2)) / norms**2)[:n]


def choose_wavelengths(
    library: xr.Dataset,
    count: int,
    *,
    window: tuple[float, float] | None = None,
    contiguous: bool = False,
    noise: NoiseModel | str | float = DEFAULT_SIGMA_A,
    baseline: Baseline = "none",
    against: list[float] | None = None,
    compare: list[float] | None = None,
) -> WavelengthChoice:
    """Find ``count`` wavelengths that minimise the predicted concentration variance.

    Parameters
    ----------
    library : Dataset
    count : int
        How many wavelengths; at least the number of unknowns (components + baseline terms).
    window : (float, float), optional
        Candidate library wavelengths (nm), both ends included; default the whole library.
    contiguous : bool
        Choose the best run of ``count`` neighbouring candidate wavelengths instead.
    noise : NoiseModel, preset name or float
        Reading noise for the figures of merit, as in :func:`check_wavelengths` (σ_A in
        AU, or a model or preset evaluated at A = 0); the choice itself does not depend
        on it.
    baseline : {"none", "offset", "linear"}
    against : list of float, optional
        A user's own wavelength set (nm) to report beside the choice.
    compare : list of float, optional
        Old name of ``against`` (warns :class:`~mixsolve.errors.RenamedWarning`; works until
        the next release).

    Returns
    -------
    WavelengthChoice
        See the module docstring for the criterion and the search.
    """
    against = renamed("compare", "against", compare, against)  # type: ignore[assignment]
    library = check_library(library)
    check_option(baseline, BASELINES, "baseline")
    sigma = blank_noise_sd(noise)
    candidates = candidate_wavelengths(library, window=window)
    n = library.sizes[COMPONENT]
    p = n + len(BASELINE_TERMS[baseline])
    count = int(check_number(count, "count", low=p, integer=True,
                             hint=f"one wavelength per unknown ({p}: components and baseline "
                                  "terms) at least"))
    check_number(count, "count", high=candidates.size,
                 hint=f"the window holds {candidates.size} candidate wavelengths")
    lib_c, _ = resample_library(library, candidates)
    k = lib_c["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
    full_design = design_matrix(k, candidates, baseline)
    full_var = _variances(full_design, n)
    if not np.all(np.isfinite(full_var)) or np.any(full_var <= 0) \
            or not np.isfinite(scaled_condition_number(full_design)):
        raise InputError("the full window cannot separate the components (singular); no "
                         "wavelength subset can")

    def crit(index: np.ndarray, ridge: float = 0.0) -> float:
        rows = full_design[np.sort(index)]
        # The slope column is centred on the candidate window, which is fine: it only
        # needs to be linear in wavelength.
        return float(np.mean(_variances(rows, n, ridge) / full_var))

    if contiguous:
        scores = [crit(np.arange(i, i + count)) for i in range(candidates.size - count + 1)]
        start = int(np.argmin(scores))
        chosen = np.arange(start, start + count)
    else:
        chosen = _greedy_exchange(crit, candidates.size, count, p)
    value = crit(chosen)
    if not np.isfinite(value):
        how = "contiguous run of " if contiguous else "set of "
        raise InputError(
            f"count: no {how}{count} candidate wavelengths separates the components "
            f"(every one tried is singular, scaled condition number above "
            f"{MAX_CONDITION_NUMBER:.0e}); choose more wavelengths, widen the window"
            + (" or set contiguous=False" if contiguous else ""))
    chosen_nm = candidates[np.sort(chosen)]
    user = user_value = None
    if against:
        user = _figures(library, candidate_wavelengths(library, wavelengths=against), sigma,
                        baseline)
        lib_u, _ = resample_library(library, np.sort(np.asarray(against, float)))
        ku = lib_u["absorptivity"].transpose(WAVELENGTH, COMPONENT).values
        user_value = float(np.mean(_variances(design_matrix(ku, lib_u[WAVELENGTH].values,
                                                            baseline), n) / full_var))
    return WavelengthChoice(
        wavelengths_nm=[float(w) for w in chosen_nm],
        criterion=value,
        criterion_equal_time=value * count / candidates.size,
        chosen=_figures(library, chosen_nm, sigma, baseline),
        full=_figures(library, candidates, sigma, baseline),
        user=user,
        user_criterion=user_value,
        contiguous=contiguous,
    )


def _greedy_exchange(crit: Callable[..., float], n_candidates: int, count: int,
                     p: int) -> np.ndarray:
    chosen: list[int] = []
    pool = list(range(n_candidates))
    while len(chosen) < count:
        ridge = 1e-9 if len(chosen) + 1 < p else 0.0
        scores = [crit(np.array([*chosen, c]), ridge) if c not in chosen else np.inf
                  for c in pool]
        chosen.append(int(np.argmin(scores)))
    current = crit(np.array(chosen))
    for _ in range(MAX_EXCHANGE_PASSES):
        best = (current, None, None)
        for i in range(len(chosen)):
            for c in pool:
                if c in chosen:
                    continue
                trial = chosen.copy()
                trial[i] = c
                value = crit(np.array(trial))
                if value < best[0] - 1e-12:
                    best = (value, i, c)
        if best[1] is None:
            break
        chosen[best[1]] = best[2]
        current = best[0]
    return np.sort(np.array(chosen))
