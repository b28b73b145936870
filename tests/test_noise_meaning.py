"""A float ``noise`` means one thing everywhere: a constant σ_A in AU (issue 15, item 6).

Seeded synthetic spectra (benchmarks/coverage_sim.py's invented bands, exact library), read
with constant σ_A: stated as that σ_A, the lack-of-fit test stays quiet; stated as half the
true σ_A (twofold excess noise), it fires on nearly every spectrum, high absorbances
included. The χ² reasoning is the test's: with σ stated right, RSS/σ² ~ χ²(dof).
"""

from __future__ import annotations

import numpy as np
import pytest
from test_coverage_harness import cs  # benchmarks/coverage_sim.py, loaded once

import mixsolve as ms
from mixsolve.noise import blank_noise_sd, noise_model


def _lack_of_fit_share(true_sigma: float, stated: float) -> float:
    rng = np.random.default_rng(15)
    lib = ms.import_absorptivities(cs.exact_table(), cs.ABSORPTIVITY_UNIT)
    conc = cs.draw_samples(cs.Condition("t", "test", peak_au=(1.5, 2.5)), rng, 200)
    clean = conc @ cs.absorptivity() / 1000.0
    spectra = ms.make_spectra(clean + true_sigma * rng.standard_normal(clean.shape),
                              cs.WAVELENGTHS_NM)
    result = ms.unmix(spectra, lib, unit="mg/L", noise=stated)
    return float(np.mean(["lack_of_fit" in str(f).split(";") for f in result["flags"].values]))


def test_a_float_is_sigma_a_at_every_absorbance_in_every_use() -> None:
    model = noise_model(0.002)
    assert np.allclose(model.sigma_absorbance(np.array([0.0, 1.0, 2.0, 3.0])), 0.002)
    assert blank_noise_sd(0.002) == pytest.approx(0.002)  # the figures of merit's σ_A


def test_lack_of_fit_is_quiet_with_the_true_sigma_and_fires_on_twice_it() -> None:
    assert _lack_of_fit_share(0.002, 0.002) < 0.10
    assert _lack_of_fit_share(0.004, 0.002) > 0.90
