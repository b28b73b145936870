"""Photometric precision of mixsolve.noise against the classical error theory.

Source: the error propagation σc/c = 0.434·σT / (T·|log10 T|) and its minima for the
three noise forms, **seen** in a university course text derived from Rothman, Crouch &
Ingle, Anal. Chem. 1975, 47:1226 (CHECKS.md, "Photometric precision"). Stray light: the
apparent absorbance saturates near −log10 s under the convention
A = −log10((T + s)/(1 + s)) (CHECKS.md); the typical stray radiant power ratio of a single
monochromator, 0.1 %T, is from ASTM E387 (**seen**).

The minima also follow by calculus from the formula (d/dA of σT/(T·A) = 0), so each
check holds by construction as well as by the source; every test states the noise form
it assumes. The size of the k's never matters: σc/c is proportional to them.
"""

from __future__ import annotations

import numpy as np
import pytest

from mixsolve.noise import NoiseModel

LOG10_E = np.log10(np.e)  # 0.43429...: A at T = 1/e


def textbook_relative_error(sigma_t: np.ndarray, t: np.ndarray) -> np.ndarray:
    """σc/c = 0.434·σT/(T·|log10 T|), as printed in the course text (0.434 rounded)."""
    return 0.434 * sigma_t / (t * np.abs(np.log10(t)))


def sigma_t(t: np.ndarray, k0: float = 0.0, k1: float = 0.0, k2: float = 0.0) -> np.ndarray:
    """σT written out here: σT² = k0² + k1²·T + k2²·T², the constant, ∝√T (shot) and ∝T
    (flicker) forms of Rothman, Crouch & Ingle (seen) added in quadrature as independent
    sources (common practice), not mixsolve's ``sigma_transmittance``."""
    return np.sqrt(k0**2 + k1**2 * t + k2**2 * t**2)


def grid_minimum(model: NoiseModel) -> float:
    """Absorbance of the smallest textbook σc/c on a 0.0001 AU grid (independent search)."""
    a = np.arange(0.01, 6.0, 1e-4)
    t = 10.0**-a
    sig = sigma_t(t, model.k0, model.k1, model.k2)
    return float(a[np.argmin(textbook_relative_error(sig, t))])


def test_constant_sigma_t_gives_minimum_at_0_434():
    """Constant σT (detector/readout limited, k0 only): minimum at A = 0.4343 (T = 1/e).

    Rothman, Crouch & Ingle 1975 via a course text (seen).
    """
    for k0 in (1e-4, 3e-3):
        model = NoiseModel(k0=k0)
        assert model.best_absorbance() == pytest.approx(LOG10_E, abs=1e-4)
        assert model.best_absorbance() == pytest.approx(0.4343, abs=2e-4)
        assert grid_minimum(model) == pytest.approx(0.4343, abs=2e-4)


def test_shot_noise_gives_minimum_at_0_869():
    """σT ∝ √T (shot-noise limited, k1 only): minimum at A = 0.8686 (T = 1/e²).

    Rothman, Crouch & Ingle 1975 via a course text (seen).
    """
    model = NoiseModel(k1=1e-3)
    assert model.best_absorbance() == pytest.approx(2 * LOG10_E, abs=1e-4)
    assert model.best_absorbance() == pytest.approx(0.8686, abs=2e-4)
    assert grid_minimum(model) == pytest.approx(0.8686, abs=2e-4)


def test_shot_plus_flicker_gives_minimum_near_0_96():
    """σT = k·√(T² + T) (equal shot and flicker terms, k1 = k2): minimum at A ≈ 0.96.

    Rothman, Crouch & Ingle 1975 via a course text (seen; "≈ 0.96", so 0.01 AU
    tolerance); the independent grid search must agree to 0.001 AU.
    """
    model = NoiseModel(k1=2e-3, k2=2e-3)
    best = model.best_absorbance()
    assert best == pytest.approx(0.96, abs=0.01)
    assert best == pytest.approx(grid_minimum(model), abs=1e-3)


def test_flicker_noise_has_no_minimum_and_error_falls_as_one_over_a():
    """σT ∝ T (flicker limited, k2 only): σc/c = 0.434 k2/A, no minimum.

    Rothman, Crouch & Ingle 1975 via a course text (seen). ``best_absorbance`` reports
    inf; A·σc/c is the constant 0.4343·k2 everywhere.
    """
    model = NoiseModel(k2=5e-3)
    assert model.best_absorbance() == float("inf")
    a = np.linspace(0.05, 5.0, 60)
    err = model.relative_concentration_error(a)
    assert np.all(np.diff(err) < 0)
    np.testing.assert_allclose(a * err, LOG10_E * 5e-3, rtol=1e-12)


@pytest.mark.parametrize(("form", "kwargs"), [
    ("constant σT", {"k0": 1e-3}),
    ("σT ∝ √T", {"k1": 1e-3}),
    ("σT ∝ T", {"k2": 1e-3}),
    ("mixed k0, k1, k2", {"k0": 2e-4, "k1": 1e-3, "k2": 5e-4}),
])
def test_relative_error_matches_the_textbook_formula(form, kwargs):
    """NoiseModel.relative_concentration_error (no stray light) is 0.434·σT/(T·|log10 T|).

    Rothman, Crouch & Ingle 1975 via a course text (seen). The printed 0.434 is 1/ln 10
    rounded, so it agrees to 0.1 %; with 1/ln 10 itself it agrees to round-off.
    Noise form: see the parameter ``form``.
    """
    model = NoiseModel(**kwargs)
    a = np.linspace(0.02, 3.0, 150)
    t = 10.0**-a
    ours = model.relative_concentration_error(a)
    np.testing.assert_allclose(model.sigma_transmittance(t), sigma_t(t, **kwargs), rtol=1e-12)
    np.testing.assert_allclose(ours, textbook_relative_error(sigma_t(t, **kwargs), t),
                               rtol=1e-3)
    exact = sigma_t(t, **kwargs) / (np.log(10.0) * t * np.abs(np.log10(t)))
    np.testing.assert_allclose(ours, exact, rtol=1e-12)


def test_stray_light_convention_and_saturation_near_minus_log10_s():
    """Apparent absorbance A = −log10((T + s)/(1 + s)) saturates near −log10 s.

    Convention of CHECKS.md (stray light); constant σT assumed where it matters. At a true
    absorbance far beyond the limit (10 AU) the reading is −log10(s/(1 + s)) within
    1e-6 AU, i.e. −log10 s within log10(1 + s).
    """
    for s in (1e-2, 1e-3, 1e-4):
        model = NoiseModel(k0=1e-3, stray=s)
        a = np.array([0.5, 1.0, 2.0])
        t = 10.0**-a
        np.testing.assert_allclose(model.apparent_absorbance(a), -np.log10((t + s) / (1 + s)),
                                   rtol=1e-14)
        limit = -np.log10(s / (1 + s))
        assert model.saturation_absorbance() == pytest.approx(limit, rel=1e-14)
        assert float(model.apparent_absorbance(10.0)) == pytest.approx(limit, abs=1e-6)
        assert model.saturation_absorbance() == pytest.approx(-np.log10(s),
                                                              abs=np.log10(1 + s) + 1e-12)


def test_astm_e387_single_monochromator_stray_light_saturates_near_3_au():
    """0.1 %T stray light (typical single monochromator, ASTM E387, seen) → ≈ 3 AU ceiling.

    Constant σT (k0) assumed for the precision part: the predicted σc/c at 2.9 AU is
    many times worse than at 1 AU, because the apparent absorbance barely moves there.
    """
    model = NoiseModel(k0=1e-3, stray=1e-3)
    assert model.saturation_absorbance() == pytest.approx(3.0, abs=0.01)
    assert float(model.apparent_absorbance(2.0)) < 2.0
    assert model.relative_concentration_error(2.9) > 10 * model.relative_concentration_error(1.0)
    # a range that stays well away from the ceiling
    assert model.reliable_range()[1] < model.saturation_absorbance()


def test_stray_light_gives_even_flicker_limited_readings_a_best_absorbance():
    """σT ∝ T (flicker, k2) with 0.1 %T stray light: the error now rises towards the
    ceiling, so there is a finite best absorbance below −log10 s. Consistency of the
    stray-light convention with the flicker case of Rothman, Crouch & Ingle (seen).
    """
    model = NoiseModel(k2=1e-3, stray=1e-3)
    best = model.best_absorbance()
    assert np.isfinite(best)
    assert 1.0 < best < model.saturation_absorbance()
    # the slope dA_app/dA = T/(T + s) used in the error agrees with a finite difference
    a, h = 2.0, 1e-6
    slope = (model.apparent_absorbance(a + h) - model.apparent_absorbance(a - h)) / (2 * h)
    t = 10.0**-a
    assert float(slope) == pytest.approx(t / (t + 1e-3), rel=1e-6)
