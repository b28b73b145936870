"""Stray-light correction of absorbance readings at a stated stray fraction.

Convention (../shared/CHECKS.md, "Stray light"): stray radiant power reaching the detector
is a fixed fraction ``s`` of the incident power P₀, whatever the sample absorbs
(heterochromatic stray light, the usual model). A sample of true transmittance T = P/P₀
then reads

    T_app = (T + s) / (1 + s),        A_app = −log10 T_app,

the form A_app = log10((P₀ + P_s)/(P + P_s)) of instrumental-analysis textbooks (e.g.
Skoog, Holler & Crouch, *Principles of Instrumental Analysis*, chapter on UV-visible
instruments; **from memory**). ASTM E387 defines the stray radiant power ratio that ``s``
stands for (typically about 0.1 %T for a single monochromator; **seen**, as quoted in
../shared/CHECKS.md). Inverting it at a stated ``s`` gives the corrected reading

    T = T_app·(1 + s) − s,            A = −log10 T.

This module is pure arithmetic on arrays (no labels, no I/O): the correction
(:func:`corrected_absorbance`), its sensitivity to the stated fraction
(:func:`stray_sensitivity`), its noise gain (:func:`noise_gain`), the readings too dark
to correct (:func:`too_dark`), the noise model of corrected readings
(:class:`StrayCorrectedNoise`) and the propagation of u(s) to fitted coefficients
(:func:`coefficient_sensitivity`). :func:`mixsolve.unmix` applies it when a stray fraction
is stated.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from mixsolve.noise import LN10, NoiseModel
from mixsolve.solve.cls import fit_spectra

#: A corrected transmittance must exceed this multiple of s. At T = s the correction's
#: noise gain dA/dA_app = (T + s)/T is 2: at least half the light reaching the detector is
#: stray, and the apparent absorbance is within log10(2) ≈ 0.3 AU of its saturation
#: value −log10(s/(1 + s)). Derived from the convention (module docstring).
MIN_TRANSMITTANCE_PER_STRAY = 1.0
#: A corrected transmittance must also exceed u(s) / this fraction. T changes by u(s)·(1 −
#: T_app) ≈ u(s) per standard uncertainty of s, so T > 10·u(s) keeps that change within
#: 10 % of T, where A = −log10 T is close to linear in s (the second-order term is about
#: u(s)/(2T) ≤ 5 % of the first): the linear propagation of u(s) holds. Derived.
MAX_RELATIVE_CHANGE = 0.1
#: The convention, as recorded in results.
CONVENTION = ("A_app = -log10((T + s)/(1 + s)), corrected T = T_app*(1 + s) - s, "
              "A = -log10(T); s = stray radiant power / incident power (ASTM E387)")


def default_u_fraction(fraction: float) -> float:
    """The standard uncertainty of a stated stray fraction when none is given: s/√3.

    Notes
    -----
    The stated s is taken as the middle of a rectangular distribution from 0 to 2s
    (JCGM 100:2008, 4.3.7: u = half-width/√3): a stray fraction measured with a cut-off
    filter at one wavelength, or read from a specification, is known to about a factor
    of two at the wavelengths of a fit. It is the spread the uncertainty budget gave the
    uncorrected stray bias (half-width = the bias at s), now centred on the correction.
    """
    return float(fraction) / np.sqrt(3.0)


def corrected_absorbance(apparent: np.ndarray, fraction: float) -> np.ndarray:
    """Absorbance (AU) corrected for stray light: A = −log10(T_app·(1 + s) − s).

    Parameters
    ----------
    apparent : array
        Readings A_app (AU); NaN stays NaN.
    fraction : float
        Stray fraction s (0.001 = 0.1 %T), 0 ≤ s < 1.

    Returns
    -------
    array
        A (AU); NaN where the corrected transmittance is ≤ 0 (a reading at or beyond
        saturation: see :func:`too_dark`).
    """
    t = _corrected_transmittance(apparent, fraction)
    return _absorbance(t, t > 0)


def stray_sensitivity(corrected: np.ndarray, fraction: float) -> np.ndarray:
    """∂A/∂s (AU per unit fraction) of corrected readings, at fixed apparent readings.

    Notes
    -----
    With T = T_app(1 + s) − s, ∂T/∂s = T_app − 1 and ∂A/∂s = (1 − T_app)/(T ln 10); as
    1 − T_app = (1 − T)/(1 + s), this is (1 − T)/((1 + s)·T·ln 10) with T = 10^−A the
    corrected transmittance. Positive for A > 0: a larger stated s makes the corrected
    reading darker.
    """
    t = 10.0 ** -np.asarray(corrected, dtype=float)
    return (1.0 - t) / ((1.0 + fraction) * t * LN10)


def noise_gain(corrected: np.ndarray, fraction: float) -> np.ndarray:
    """dA/dA_app of the correction at corrected readings A: (T + s)/T, T = 10^−A (≥ 1).

    Notes
    -----
    dA/dA_app = (dA/dT)(dT/dT_app)(dT_app/dA_app) = T_app(1 + s)/T = (T + s)/T: the
    noise of an apparent reading, σ(A_app), becomes σ(A_app)·(T + s)/T once corrected.
    """
    t = 10.0 ** -np.asarray(corrected, dtype=float)
    return (t + fraction) / t


def darkness_limit(fraction: float, u_fraction: float) -> float:
    """The corrected transmittance at or below which a reading is too dark to correct:
    max(``MIN_TRANSMITTANCE_PER_STRAY``·s, u(s)/``MAX_RELATIVE_CHANGE``)."""
    return max(MIN_TRANSMITTANCE_PER_STRAY * fraction, u_fraction / MAX_RELATIVE_CHANGE)


def too_dark(apparent: np.ndarray, fraction: float, u_fraction: float) -> np.ndarray:
    """True where a reading is too dark to correct (NaN readings are not).

    Parameters
    ----------
    apparent : array
        Readings A_app (AU).
    fraction, u_fraction : float
        The stated stray fraction s and its standard uncertainty u(s).

    Notes
    -----
    Too dark: T_app·(1 + s) − s ≤ :func:`darkness_limit`, i.e. the corrected
    transmittance is not above s (the correction would more than double the noise) or not
    above 10·u(s) (its linear propagation would fail). Such readings are left out of the
    fit like a missing reading.
    """
    return _corrected_transmittance(apparent, fraction) <= darkness_limit(fraction, u_fraction)


def _corrected_transmittance(apparent: np.ndarray, fraction: float) -> np.ndarray:
    """T = T_app·(1 + s) − s with T_app = 10^−A_app, as one new array changed in place."""
    t = np.multiply(np.asarray(apparent, dtype=float), -LN10)
    np.exp(t, out=t)
    t *= 1.0 + fraction
    t -= fraction
    return t


def _absorbance(t: np.ndarray, keep: np.ndarray) -> np.ndarray:
    """−log10 T where ``keep``, NaN elsewhere (and where T is NaN), in place of ``t``."""
    np.log10(t, out=t, where=keep)
    np.copyto(t, np.nan, where=~keep)
    np.negative(t, out=t)
    return t


@dataclass(frozen=True)
class StrayCorrection:
    """A stated stray fraction s and its standard uncertainty u(s), both as fractions."""

    fraction: float
    u_fraction: float

    def apply(self, apparent: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The corrected readings (NaN where too dark) and the too-dark mask."""
        t = _corrected_transmittance(apparent, self.fraction)
        dark = t <= darkness_limit(self.fraction, self.u_fraction)
        return _absorbance(t, ~dark & (t > 0)), dark

    def describe(self) -> str:
        """One line for a result's attributes."""
        return (f"stray light corrected at s = {self.fraction:.6g} (u = {self.u_fraction:.3g});"
                f" {CONVENTION}; readings with corrected T <= "
                f"{darkness_limit(self.fraction, self.u_fraction):.3g} left out")


@dataclass(frozen=True)
class StrayCorrectedNoise(NoiseModel):
    """The noise of readings corrected for this model's stray fraction ``stray``.

    :meth:`sigma_absorbance` takes the *corrected* absorbance A and returns
    σ(A_app)·(T + s)/T with A_app = −log10((T + s)/(1 + s)) the reading the instrument
    showed and σ(A_app) the parent model's noise there (:func:`noise_gain`).
    """

    @classmethod
    def of(cls, model: NoiseModel, fraction: float) -> StrayCorrectedNoise:
        """``model``'s noise for readings corrected for the stray ``fraction``."""
        return cls(**{**model.to_dict(), "stray": fraction})

    def sigma_absorbance(self, absorbance: np.ndarray | float) -> np.ndarray:
        """σ_A (AU) of a corrected reading whose corrected absorbance is ``absorbance``
        (values below 0 evaluated at 0, as the parent model does)."""
        a = np.clip(np.asarray(absorbance, dtype=float), 0.0, None)
        shown = NoiseModel.sigma_absorbance(self, self.apparent_absorbance(a))
        return shown * noise_gain(a, self.stray)


def coefficient_sensitivity(absorbance: np.ndarray, fraction: float, design: np.ndarray,
                            n_components: int, weights: np.ndarray | None = None
                            ) -> np.ndarray:
    """∂x/∂s = G·(∂A/∂s) of every spectrum's fitted coefficients x (n, p).

    Parameters
    ----------
    absorbance : array, shape (n, m)
        Corrected absorbances (AU) where ∂A/∂s is evaluated (``unmix``: the fitted ones);
        NaN where a reading is missing or too dark (left out, as in the fit).
    fraction : float
        The stated stray fraction s.
    design : array, shape (m, p)
        The fit's design (absorptivities at 1 cm, then baseline columns).
    n_components : int
        Leading absorptivity columns of ``design``.
    weights : array, shape (n, m), optional
        The weights of a weighted fit (1/σ²), so that G is that fit's operator.

    Returns
    -------
    array, shape (n, p)
        Coefficient units per unit fraction; NaN where the spectrum had too few readings.

    Notes
    -----
    G is the least-squares operator of each spectrum's fit over the readings it has,
    (DᵀWD)⁻¹DᵀW (unweighted: W = I), unconstrained also for NNLS (the linearised model at
    the solution, as the fit's own uncertainty). Fitting the sensitivity spectra ∂A/∂s
    by ordinary least squares with the same readings and weights gives G·(∂A/∂s).
    """
    sens = stray_sensitivity(absorbance, fraction)
    if weights is None:
        complete = np.isfinite(sens).all(axis=1)
        out = np.full((sens.shape[0], design.shape[1]), np.nan)
        if complete.any():
            norms = np.linalg.norm(design, axis=0)  # column scaling, as the fit's own
            g = np.linalg.pinv(design / norms) / norms[:, None]
            out[complete] = sens[complete] @ g.T
        if not complete.all():
            out[~complete] = fit_spectra(sens[~complete], design, n_components, "ols",
                                         engine="numpy").coef
        return out
    return fit_spectra(sens, design, n_components, "ols", weights=weights,
                       engine="numpy").coef
