"""Photometric noise model: transmittance noise and stray light, turned into σ_A(A).

The model (after Rothman, Crouch & Ingle, Anal. Chem. 1975, 47:1226) writes the standard
deviation of a transmittance reading T (0–1) as

    σ_T(T) = √(k0² + k1²·T + k2²·T²)

with a constant (detector/readout) term k0, a shot-noise term k1 (σ ∝ √T) and a flicker
(source) term k2 (σ ∝ T). Stray light of fraction s of the incident power reaches the
detector unabsorbed; the apparent absorbance is A_app = −log10((T + s)/(1 + s)), which
saturates near −log10 s (convention of ../shared/CHECKS.md).

It serves three uses: weights for a weighted fit, the predicted precision of a reading, and
the reliable absorbance range.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from mixsolve.errors import InputError
from mixsolve.spectra import check_number

LN10 = np.log(10.0)

#: Reliable absorbance range used for flags when none is given (AU). Common practice for a
#: benchtop double-beam instrument: below ~0.3 I and I0 are hard to tell apart, above ~2
#: under 1 % of the light reaches the detector.
DEFAULT_ABSORBANCE_RANGE: tuple[float, float] = (0.3, 2.0)


@dataclass(frozen=True)
class NoiseModel:
    """Transmittance noise σ_T = √(k0² + k1² T + k2² T²) plus stray-light fraction ``stray``.

    Parameters
    ----------
    k0 : float
        Constant term (transmittance units, fraction of full scale).
    k1 : float
        Shot-noise term; contributes k1·√T.
    k2 : float
        Flicker term; contributes k2·T.
    stray : float
        Stray radiant power as a fraction of the incident power (0.001 = 0.1 %T).
    name : str
        Label recorded in results.
    """

    k0: float = 0.0
    k1: float = 0.0
    k2: float = 0.0
    stray: float = 0.0
    name: str = "user"

    def __post_init__(self) -> None:
        for field in ("k0", "k1", "k2"):
            check_number(getattr(self, field), f"noise model, {field}", low=0)
        check_number(self.stray, "noise model, stray", low=0, high=1, high_open=True)
        if self.k0 == self.k1 == self.k2 == 0:
            raise InputError("noise model: k0, k1 and k2 are all 0; give at least one term")

    def to_dict(self) -> dict[str, float | str]:
        """Plain JSON-safe parameters."""
        return asdict(self)

    def sigma_transmittance(self, transmittance: np.ndarray | float) -> np.ndarray:
        """σ_T at transmittance ``T`` (fraction, 0–1)."""
        t = np.asarray(transmittance, dtype=float)
        return np.sqrt(self.k0**2 + self.k1**2 * t + self.k2**2 * t**2)

    def apparent_absorbance(self, absorbance: np.ndarray | float) -> np.ndarray:
        """Absorbance read with stray light: −log10((10^−A + s)/(1 + s))."""
        t = 10.0 ** -np.asarray(absorbance, dtype=float)
        return -np.log10((t + self.stray) / (1.0 + self.stray))

    def sigma_absorbance(self, absorbance: np.ndarray | float) -> np.ndarray:
        """Standard deviation σ_A (AU) of a reading whose measured absorbance is ``A``.

        σ_A = σ_T(T) / (T ln 10), T = 10^−A: the propagation of σ_T through A = −log10 T.
        Measured absorbances below 0 are evaluated at 0.
        """
        t = 10.0 ** -np.clip(np.asarray(absorbance, dtype=float), 0.0, None)
        return self.sigma_transmittance(t) / (t * LN10)

    def weights(self, absorbance: np.ndarray | float) -> np.ndarray:
        """Weights 1/σ_A² (AU⁻²) of readings at absorbance ``A`` (:meth:`sigma_absorbance`:
        below 0 taken at 0), for a weighted least-squares fit."""
        return 1.0 / self.sigma_absorbance(absorbance) ** 2

    def relative_concentration_error(self, absorbance: np.ndarray | float) -> np.ndarray:
        """Predicted σ_c/c of a single-wavelength reading at true absorbance ``A`` (> 0).

        σ_c/c = σ_A(A_app) / (A · dA_app/dA) with dA_app/dA = T/(T + s). Without stray light
        this is 0.434·σ_T/(T·|log10 T|) (Rothman, Crouch & Ingle 1975). Infinite where A ≤ 0.
        """
        a = np.asarray(absorbance, dtype=float)
        t = 10.0 ** -a
        slope = t / (t + self.stray)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = self.sigma_absorbance(self.apparent_absorbance(a)) / (a * slope)
        return np.where(a > 0, out, np.inf)

    def best_absorbance(self) -> float:
        """Absorbance (AU) of the smallest predicted relative error, searched in 0.01–6 AU.

        Returns ``inf`` when the error keeps falling to the top of the search range
        (pure flicker noise has no minimum).
        """
        from scipy.optimize import minimize_scalar  # only this search needs it

        upper = min(6.0, self.saturation_absorbance())
        res = minimize_scalar(lambda a: float(np.log(self.relative_concentration_error(a))),
                              bounds=(0.01, upper), method="bounded",
                              options={"xatol": 1e-6})
        return float("inf") if res.x > upper - 1e-3 else float(res.x)

    def saturation_absorbance(self) -> float:
        """Largest apparent absorbance the instrument can show, −log10(s/(1+s)); inf if s = 0."""
        return float("inf") if self.stray == 0 else float(-np.log10(self.stray / (1 + self.stray)))

    def reliable_range(self, factor: float = 2.0) -> tuple[float, float]:
        """Absorbances (AU) where σ_c/c is within ``factor`` × its minimum.

        Returns
        -------
        (low, high) : tuple of float
            ``high`` is ``inf`` when the error never rises that far (flicker-limited).
        """
        grid = np.linspace(0.005, min(6.0, self.saturation_absorbance() * 0.999), 6000)
        err = self.relative_concentration_error(grid)
        ok = grid[err <= factor * np.min(err)]
        high = float("inf") if ok[-1] >= grid[-1] else float(ok[-1])
        return float(ok[0]), high


#: Presets for typical instrument classes. Values are indicative, **from memory**, not
#: measured: replace them with your instrument's figures where you have them.
PRESETS: dict[str, NoiseModel] = {
    "benchtop_double_beam": NoiseModel(k0=5e-6, k1=1e-4, k2=5e-5, stray=5e-5,
                                       name="benchtop_double_beam"),
    "diode_array": NoiseModel(k0=2e-5, k1=3e-4, k2=2e-4, stray=3e-4, name="diode_array"),
    "microplate": NoiseModel(k0=1e-4, k1=1e-3, k2=1e-3, stray=1e-3, name="microplate"),
    "field_photometer": NoiseModel(k0=3e-4, k1=2e-3, k2=2e-3, stray=2e-3,
                                   name="field_photometer"),
}

#: Typical spectral bandpass (FWHM, nm) of each preset's instrument class, **from memory**
#: (common practice: benchtop scanning instruments 1-2 nm, diode arrays about 1-2 nm,
#: monochromator plate readers several nm, filter photometers about 10 nm). Used only to
#: say what an unstated bandwidth may cost (:mod:`mixsolve.slit`); state ``bandwidth_nm``
#: for the instrument at hand.
TYPICAL_BANDWIDTH_NM: dict[str, float] = {
    "benchtop_double_beam": 1.0,
    "diode_array": 2.0,
    "microplate": 5.0,
    "field_photometer": 10.0,
}


def check_noise_sd(sigma_au: object, name: str = "noise") -> float:
    """A constant absorbance noise σ_A (AU), as float.

    Raises
    ------
    InputError
        Not a positive finite number ("noise: 0 AU is not a positive number").
    """
    return check_number(sigma_au, name, "AU", positive=True)


def noise_model(spec: NoiseModel | str | float | None) -> NoiseModel | None:
    """Resolve a noise specification.

    Parameters
    ----------
    spec : NoiseModel, preset name, float or None
        A float is a constant σ_A in AU at every absorbance (k2 = σ_A · ln 10: σ_T ∝ T,
        so σ_A = σ_T/(T ln 10) is the same at every reading), as everywhere in mixsolve
        (:func:`blank_noise_sd`, the figures of merit).

    Raises
    ------
    InputError
        Unknown preset name or a non-positive float.
    """
    if spec is None or isinstance(spec, NoiseModel):
        return spec
    if isinstance(spec, str):
        if spec not in PRESETS:
            raise InputError(f"noise: unknown preset {spec!r}; presets are "
                             f"{', '.join(PRESETS)}")
        return PRESETS[spec]
    sigma = check_noise_sd(spec)
    return NoiseModel(k2=sigma * LN10, name=f"constant sigma_A ({sigma:g} AU)")


def blank_noise_sd(spec: NoiseModel | str | float) -> float:
    """σ_A (AU) of a blank reading (A = 0) under a noise specification, as float.

    Parameters
    ----------
    spec : NoiseModel, preset name or float
        What :func:`mixsolve.unmix` takes as ``noise``: a float is σ_A itself (AU),
        returned as given; a model or a preset gives ``sigma_absorbance(0)``.

    Raises
    ------
    InputError
        Unknown preset name, or a float that is not positive and finite.

    Notes
    -----
    The figures of merit of :func:`mixsolve.check_wavelengths` take one constant σ_A. It is
    the noise at A = 0 because their LOD and LOQ are those of a blank-limited reading; a
    float ``noise`` is a constant σ_A in ``unmix`` too.
    """
    if isinstance(spec, NoiseModel | str):
        model = noise_model(spec)
        assert model is not None  # a model or a preset name, never None
        return float(model.sigma_absorbance(0.0))
    return check_noise_sd(spec)
