"""The batched NNLS solver (mixsolve.solve.nnls, through mixsolve.solve.batch.nnls_batch):
KKT conditions and scipy.optimize.nnls.

References (CHECKS.md, "Non-negative least squares"): ``scipy.optimize.nnls`` (Lawson &
Hanson 1974, ch. 23) and ``scipy.optimize.lsq_linear`` (BVLS, for free terms) are run
here as reference implementations. The KKT conditions of min ½‖a − Dx‖², x_j ≥ 0
(Lawson & Hanson, from memory; they hold for any true minimiser, so they check by
internal consistency) are tested with the tolerance mixsolve.solve.engine states:
τ = 10·max(m, p)·ε·max(‖a‖, ‖x̂‖) on unit-norm columns. All problems are invented and
seeded.
"""

from __future__ import annotations

import numpy as np
import pytest
from helpers_nnls import PROBLEM_SHAPES, bands, kkt_ratio, problem, scipy_loop
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import lsq_linear

from mixsolve.solve.batch import nnls_batch


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize(("m", "p", "n"), PROBLEM_SHAPES)
def test_matches_scipy_nnls_and_kkt_holds(seed: int, m: int, p: int, n: int) -> None:
    """Random well-posed problems: the same minimiser as scipy.optimize.nnls, KKT within τ."""
    rng = np.random.default_rng(1000 + seed)
    design, spectra = problem(rng, m, p, n)
    sol = nnls_batch(design, spectra, p)
    want = scipy_loop(design, spectra)
    scale = np.abs(want).max()
    np.testing.assert_allclose(sol.x, want, rtol=1e-8, atol=1e-10 * scale)
    np.testing.assert_array_equal(sol.x == 0, want == 0)
    assert kkt_ratio(design, spectra, sol.x, p) <= 1.0
    assert sol.n_fallback == 0


@pytest.mark.parametrize("n_free", [1, 2])
def test_free_columns_match_bounded_least_squares(rng: np.random.Generator,
                                                  n_free: int) -> None:
    """Free (baseline) columns: the minimiser of scipy.optimize.lsq_linear (BVLS) with
    bounds 0 for the components and −inf for the free terms."""
    m, p = 120, 4
    design, spectra = problem(rng, m, p, 150)
    wl = np.linspace(-1.0, 1.0, m)
    free = np.stack([np.ones(m), wl][:n_free], axis=1)
    spectra = spectra - 0.05 + 0.02 * wl
    full = np.hstack([design, free])
    sol = nnls_batch(full, spectra, p)
    lower = np.r_[np.zeros(p), np.full(n_free, -np.inf)]
    want = np.vstack([lsq_linear(full, a, bounds=(lower, np.inf), method="bvls",
                                 tol=1e-14).x for a in spectra])
    np.testing.assert_allclose(sol.x, want, rtol=1e-6, atol=1e-8)
    assert kkt_ratio(full, spectra, sol.x, p) <= 1.0


def test_zero_spectra_give_zero(rng: np.random.Generator) -> None:
    """a = 0: x = 0 exactly, and KKT holds with τ = 0."""
    design, _ = problem(rng, 60, 4, 1)
    spectra = np.zeros((5, 60))
    sol = nnls_batch(design, spectra, 4)
    np.testing.assert_array_equal(sol.x, 0.0)
    assert kkt_ratio(design, spectra, sol.x, 4) <= 1.0


def test_all_components_driven_to_zero(rng: np.random.Generator) -> None:
    """Spectra that are negative mixtures: every component held at zero; with a free
    offset, the offset alone fits them (its least-squares value, the mean)."""
    design, _ = problem(rng, 80, 3, 1)
    spectra = -rng.uniform(0.1, 1.0, (20, 3)) @ design.T
    sol = nnls_batch(design, spectra, 3)
    np.testing.assert_array_equal(sol.x, 0.0)
    np.testing.assert_array_equal(scipy_loop(design, spectra), 0.0)
    assert kkt_ratio(design, spectra, sol.x, 3) <= 1.0
    with_offset = np.hstack([design, np.ones((80, 1))])
    flat = -np.abs(rng.normal(size=(20, 1))) * np.ones((1, 80))
    sol = nnls_batch(with_offset, flat, 3)
    # the offset fits exactly, so the components' gradient is rounding: zero to 1e-12
    np.testing.assert_allclose(sol.x[:, :3], 0.0, atol=1e-12)
    assert kkt_ratio(with_offset, flat, sol.x, 3) <= 1.0
    np.testing.assert_allclose(sol.x[:, 3], flat[:, 0], rtol=1e-12)


def test_one_component_only(rng: np.random.Generator) -> None:
    """p = 1: x = max(0, dᵀa / dᵀd)."""
    d = bands(50, [0.5])
    spectra = rng.normal(0.0, 1.0, (40, 1)) @ d.T + 0.01 * rng.standard_normal((40, 50))
    sol = nnls_batch(d, spectra, 1)
    want = np.maximum(0.0, spectra @ d[:, 0] / (d[:, 0] @ d[:, 0]))
    np.testing.assert_allclose(sol.x[:, 0], want, rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("gap", [0.02, 0.002, 0.0005])
def test_nearly_collinear_columns(rng: np.random.Generator, gap: float) -> None:
    """Bands a fraction of their width apart (condition number up to ~1e4): the objective
    equals scipy's to 1e-9 relative, and KKT holds within τ."""
    design = bands(100, [0.4, 0.4 + gap, 0.6], width=0.2)
    spectra = rng.uniform(-0.5, 1.0, (300, 3)) @ design.T \
        + 0.01 * rng.standard_normal((300, 100))
    sol = nnls_batch(design, spectra, 3)
    want = scipy_loop(design, spectra)
    rss = np.sum((spectra - sol.x @ design.T) ** 2, axis=1)
    rss_want = np.sum((spectra - want @ design.T) ** 2, axis=1)
    np.testing.assert_allclose(rss, rss_want, rtol=1e-9)
    assert kkt_ratio(design, spectra, sol.x, 3) <= 1.0


def test_duplicate_columns_rank_deficient(rng: np.random.Generator) -> None:
    """Two identical columns (rank deficient; the split between them is not unique): the
    fitted spectra and the objective equal scipy's."""
    base = bands(60, [0.3, 0.7])
    design = np.hstack([base, base[:, :1]])
    spectra = rng.uniform(-0.2, 1.0, (50, 2)) @ base.T + 0.01 * rng.standard_normal((50, 60))
    sol = nnls_batch(design, spectra, 3)
    want = scipy_loop(design, spectra)
    np.testing.assert_allclose(sol.x @ design.T, want @ design.T, atol=1e-10)
    assert np.all(sol.x >= 0)


def test_batch_equals_one_at_a_time(rng: np.random.Generator) -> None:
    """Grouping by passive set changes nothing: each spectrum alone gives the same x."""
    design, spectra = problem(rng, 90, 5, 60)
    together = nnls_batch(design, spectra, 5).x
    alone = np.vstack([nnls_batch(design, a[None, :], 5).x for a in spectra])
    np.testing.assert_allclose(together, alone, rtol=1e-12, atol=1e-15)


def test_scipy_fallback_after_max_iter(rng: np.random.Generator) -> None:
    """With no outer iterations allowed, the unfinished spectra go to scipy.optimize.nnls
    (on the reduced problem) and the answer is still the minimiser."""
    design, spectra = problem(rng, 70, 5, 80, zero_fraction=0.5)
    sol = nnls_batch(design, spectra, 5, max_iter=0)
    assert sol.n_fallback > 0
    np.testing.assert_allclose(sol.x, scipy_loop(design, spectra), rtol=1e-8, atol=1e-10)


def test_empty_batch() -> None:
    """No spectra: an empty answer of the right shape."""
    sol = nnls_batch(bands(30, [0.3, 0.6]), np.empty((0, 30)), 2)
    assert sol.x.shape == (0, 2)


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), m=st.integers(2, 40), p=st.integers(1, 7),
       n=st.integers(1, 30), scale=st.floats(1e-6, 1e6))
def test_property_kkt_and_objective(seed: int, m: int, p: int, n: int, scale: float) -> None:
    """Any random dense problem (m may be below p), any scale: feasible, KKT within τ,
    and the objective no worse than scipy.optimize.nnls's."""
    rng = np.random.default_rng(seed)
    design = rng.standard_normal((m, p)) * scale
    spectra = rng.standard_normal((n, m)) * scale
    sol = nnls_batch(design, spectra, p)
    assert kkt_ratio(design, spectra, sol.x, p) <= 1.0
    want = scipy_loop(design, spectra)
    rss = np.sum((spectra - sol.x @ design.T) ** 2, axis=1)
    rss_want = np.sum((spectra - want @ design.T) ** 2, axis=1)
    assert np.all(rss <= rss_want * (1 + 1e-9) + 1e-20 * scale**2)
