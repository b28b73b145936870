"""Risks of the whole design, said once per run (:class:`mixsolve.flags.RunNote`).

A per-sample flag says something about one sample's measurement; a property of the library
and the wavelength choice holds for every sample alike and is said once, with its size and
its fix, in ``result.attrs["run_notes"]`` (docs/flags.md, "Run notes"):

- ``shift_risk``: how far a wavelength error of the stated tolerance would move the run's
  quantified results (c > 3u), from the bias per nm ``shift_bias_per_nm`` = S c
  (:mod:`mixsolve.solve.shift_sensitivity`): for component k over the spectra where it is
  quantified, the relative move |bias_k|·tol / c_k, its largest and its median value.
  Given when the largest exceeds :data:`mixsolve.flags.SHIFT_FLAG_FRACTION`.
- ``ill_conditioned_design``: the scaled condition number κ of the design above
  :data:`mixsolve.solve.design.ILL_CONDITIONED_ABOVE`, with each component's noise
  amplification 1/SEL_k, SEL_k = ‖d_k^⊥‖ / ‖d_k‖ the selectivity of Lorber (1986): the
  part of the component's column not explained by the others (its net analyte signal)
  over its whole length; u(c_k) is 1/SEL_k times what it would be with the component
  alone over the same wavelengths.
"""

from __future__ import annotations

import numpy as np

from mixsolve.flags import (
    ILL_CONDITIONED_DESIGN,
    LOOK,
    SHIFT_FLAG_FRACTION,
    SHIFT_RISK,
    RunNote,
)
from mixsolve.solve.design import ILL_CONDITIONED_ABOVE

#: The fix of the shift risk, in CLI words (the API's are the same with underscores).
SHIFT_FIX = ("check the wavelength scale (mixsolve instrument wavelength) and correct it "
             "(--wavelength-offset) or fit it (--fit-shift); or choose wavelengths nearer "
             "band maxima (mixsolve wavelengths choose)")
DESIGN_FIX = ("choose better wavelengths (mixsolve wavelengths check / choose), widen the "
              "window, or drop a component that is not there")


def shift_risk(conc: np.ndarray, u: np.ndarray, bias: np.ndarray, components: list[str],
               tolerance_nm: float) -> RunNote | None:
    """The ``shift_risk`` note from a run's results (None when no result moves > 2 %).

    Parameters
    ----------
    conc, u, bias : arrays, shape (..., n_components)
        Concentrations, standard uncertainties and bias per +1 nm (one unit).
    components : list of str
    tolerance_nm : float
        The instrument's wavelength accuracy (nm).

    Returns
    -------
    RunNote or None
        Text "a wavelength error of 0.5 nm would move amber by up to 3.1 % (typical 1.2 %)"
        for each component whose largest move exceeds ``SHIFT_FLAG_FRACTION``.

    Notes
    -----
    Over the spectra where component k is quantified (cₖ > 3u(cₖ), u finite):
    rₖ = |biasₖ|·tol / cₖ; "up to" is max rₖ, "typical" the median.
    """
    n = len(components)
    conc, u, bias = (np.asarray(a, dtype=float).reshape(-1, n) for a in (conc, u, bias))
    parts = []
    with np.errstate(invalid="ignore", divide="ignore"):
        quantified = (conc > 3 * u) & np.isfinite(u) & np.isfinite(bias)
        moves = np.abs(bias) * tolerance_nm / conc
    for k, name in enumerate(components):
        rel = moves[quantified[:, k], k]
        if rel.size and rel.max() > SHIFT_FLAG_FRACTION:
            parts.append(f"{name} by up to {100 * rel.max():.2g} % (typical "
                         f"{100 * np.median(rel):.2g} %)")
    if not parts:
        return None
    return RunNote(SHIFT_RISK, LOOK, f"a wavelength error of {tolerance_nm:g} nm would move "
                   + ", ".join(parts) + ": wavelengths on steep band flanks", SHIFT_FIX)


def design_shift_risk(shift_matrix: np.ndarray, design: np.ndarray, components: list[str],
                      tolerance_nm: float) -> RunNote | None:
    """``shift_risk`` from the design alone (lazy results, whose values are not computed):
    each component's relative move in a mixture of equal peak absorbances.

    Notes
    -----
    c⁰ₖ = 1/maxλ Dλₖ (each component 1 AU at its own peak over the used wavelengths at
    1 cm), bias = S c⁰ with S the bias per nm per unit of each component (the matrix
    ``shift_bias_per_nm`` is made with), rₖ = |biasₖ|·tol / c⁰ₖ. The off-diagonal terms
    count: in a mixture a component moves mostly through its neighbours' flanks.
    """
    shift_matrix = np.asarray(shift_matrix, dtype=float)
    n = shift_matrix.shape[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        typical = 1.0 / np.max(np.asarray(design, dtype=float)[:, :n], axis=0)
        moves = np.abs(shift_matrix @ typical) * tolerance_nm / typical
    parts = [f"{name} by {100 * r:.2g} %" for name, r in
             zip(components, moves, strict=True) if np.isfinite(r)
             and r > SHIFT_FLAG_FRACTION]
    if not parts:
        return None
    return RunNote(SHIFT_RISK, LOOK, f"a wavelength error of {tolerance_nm:g} nm would move "
                   + ", ".join(parts) + " in a mixture of equal peak absorbances (a lazy "
                   "run's results are not read for this note): wavelengths on steep band "
                   "flanks", SHIFT_FIX)


def noise_amplification(design: np.ndarray, n_components: int) -> np.ndarray:
    """1/SEL_k per component: u(c_k) over what it would be with the component alone.

    SEL_k = 1/√([(DᵀD)⁻¹]ₖₖ ‖d_k‖²) (Lorber 1986, net analyte signal over the whole
    column; baseline columns count as the other terms).
    """
    norms = np.linalg.norm(design, axis=0)
    scaled = design / norms
    inverse = np.linalg.pinv(scaled.T @ scaled)
    return np.sqrt(np.diag(inverse)[:n_components])


def ill_conditioned_design(design: np.ndarray, components: list[str], condition: float
                           ) -> RunNote | None:
    """The ``ill_conditioned_design`` note (None when κ ≤ ``ILL_CONDITIONED_ABOVE``)."""
    if not condition > ILL_CONDITIONED_ABOVE:
        return None
    amp = noise_amplification(design, len(components))
    worst = int(np.argmax(amp))
    return RunNote(
        ILL_CONDITIONED_DESIGN, LOOK,
        f"the wavelengths separate the components poorly: scaled condition number "
        f"{condition:.3g}; the overlap makes u({components[worst]}) {amp[worst]:.3g} times "
        "what it would be alone (every result's uncertainty includes it)", DESIGN_FIX)
