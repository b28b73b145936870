"""The coverage harness of benchmarks/coverage_sim.py checks itself (synthetic data).

With the exact library and white noise whose σ the user states with ``noise=``, the fit's
std_uncertainty is what the code claims to be honest about, so the harness must find
P(|z| < 2) inside the target band. If it did not, the harness (or the claim) is wrong, and
nothing the study says about the harder conditions could be trusted.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np

_PATH = Path(__file__).resolve().parents[1] / "benchmarks" / "coverage_sim.py"
_SPEC = importlib.util.spec_from_file_location("coverage_sim", _PATH)
assert _SPEC is not None and _SPEC.loader is not None
cs = importlib.util.module_from_spec(_SPEC)
sys.modules["coverage_sim"] = cs  # dataclasses look their module up by name
_SPEC.loader.exec_module(cs)


def test_exact_library_white_noise_covers() -> None:
    """Exact library, white σ_A stated as noise=: P(|z|<2) in [0.90, 0.99], z unbiased."""
    exact = cs.condition("1")
    assert exact.library == "exact" and exact.noise_fwhm_nm == 0 and exact.stray == 0
    (row,) = cs.run_condition(exact, n_labs=4, n_samples=40, seed=14, fits=("noise stated",))
    assert row.n_results == 4 * 40 * len(cs.BANDS)
    low, high = cs.TARGET_BAND
    assert low <= row.p_within_2u <= high, row
    # N(0, 1): median |z| 0.674; mean z within about 3 standard errors of 0
    assert 0.55 <= row.median_abs_z <= 0.80, row
    assert abs(row.mean_z) < 3.0 / np.sqrt(row.n_results), row
