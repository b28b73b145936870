"""Replicate means of a plate without the non-negativity bound's bias (issue 14, item 6).

The plates are **synthetic**: the coverage study's invented components and simulated
readings (benchmarks/coverage_sim.py), exact library, white noise σ_A = 0.002 AU, each
sample read in three wells with one component absent. NNLS holds an absent component's
wells at ≥ 0, so the mean of those values is biased upwards by about E[max(0, Z)]·u_well
(for n = 3 wells: +0.69 in units of the mean's u) whatever n; the sample means are now
formed from the wells' unconstrained (OLS) estimates and the bound applied to the mean.

Expected values come from the normal distribution (scipy.stats, scipy.integrate): for n
normal replicates the mean and the SD are independent and (n − 1)·SD²/σ² is χ² with n − 1
degrees of freedom (Cochran's theorem); E[max(0, Z)] = φ(0) = 1/√(2π).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import integrate, stats
from test_coverage_harness import cs  # benchmarks/coverage_sim.py, loaded once

import mixsolve.plate.analysis as analysis
from mixsolve.errors import MixsolveWarning
from mixsolve.plate.wells import replicate_statistics

REPLICATES = 3
SEED = 14


def _honest_rates(n: int) -> tuple[float, float]:
    """P(|z| < 2) of the unconstrained mean and E[z] of the bounded one at a true 0.

    u(mean)² = max(SD², σ²)/n (the fit's u is σ to within 1/√(2·298)); z = m/u with
    m ~ N(0, σ²/n) independent of W = SD²/σ² ~ χ²_(n−1)/(n − 1).
    """
    w = stats.chi2(n - 1, scale=1.0 / (n - 1))
    inflate = lambda x: np.sqrt(max(x, 1.0))  # noqa: E731
    p2 = integrate.quad(lambda x: (2 * stats.norm.cdf(2 * inflate(x)) - 1) * w.pdf(x),
                        0, np.inf)[0]
    mean_inverse = integrate.quad(lambda x: w.pdf(x) / inflate(x), 0, np.inf)[0]
    return p2, stats.norm.pdf(0.0) * mean_inverse


@pytest.fixture(scope="module")
def plates():
    """Five labs' plates (exact library, 120 triplicate samples each) and their truth."""
    cond = cs.condition("6")
    assert cond.library == "exact" and cond.replicates == REPLICATES
    out = []
    for lab in np.random.SeedSequence(SEED).spawn(5):
        rng = np.random.default_rng(lab)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", MixsolveWarning)
            lib = cs.lab_library(cond, rng)
            conc = cs.draw_samples(cond, rng, 120)
            plate, layout = cs.replicate_plate(cond, conc, rng)
            done = analysis.analyse_plate(plate, layout, lib, pathlength_cm=1.0,
                                          window=cs.WINDOW_NM, unit=cs.CONCENTRATION_UNIT)
        table = done.samples.set_index(["sample", "component"])
        names = [f"s{i + 1:03d}" for i in range(conc.shape[0])]
        rows = table.loc[[(s, c) for s in names for c in cs.BANDS]]
        truth = conc.ravel()
        out.append((rows, truth, done))
    return out


def test_absent_means_are_unbiased_and_covered(plates):
    """Absent components: the unconstrained mean's z has mean ≈ 0 and P(|z|<2) in band."""
    z, z_bounded, z_old = [], [], []
    for rows, truth, done in plates:
        absent = truth == 0
        u = rows["std_uncertainty"].to_numpy()[absent]
        z.append(rows["mean_unconstrained"].to_numpy()[absent] / u)
        z_bounded.append(rows["concentration"].to_numpy()[absent] / u)
        # Before: the mean of the wells' NNLS values (those in the wells table).
        wells = done.wells[done.wells["role"] == "sample"]
        old = wells.groupby(["sample", "component"], sort=False)["concentration"].mean()
        z_old.append(old.loc[rows.index].to_numpy()[absent] / u)
    z, z_bounded, z_old = map(np.concatenate, (z, z_bounded, z_old))
    assert z.size == 600 and np.isfinite(z).all()
    p2, bounded_mean = _honest_rates(REPLICATES)  # 0.966 and 0.363 from scipy
    within = float(np.mean(np.abs(z) < 2))
    assert cs.TARGET_BAND[0] <= within <= cs.TARGET_BAND[1]
    # Binomial standard error of a rate near 0.966 over 600 results: 0.0074; allow 3.
    assert abs(within - p2) < 3 * np.sqrt(p2 * (1 - p2) / z.size)
    # Mean z of an honest u: 0 ± 1/√600 = 0.04 (band 0.15, about 4 standard errors).
    assert abs(z.mean()) < 0.15
    # The bound applied once, to the mean: z averages E[max(0, Z)]·E[σ/u] (0.363) at a
    # true 0, not the old √3·φ(0) ≈ 0.69 of averaging values already held at zero.
    assert (z_bounded >= 0).all() and (z_bounded == np.maximum(z, 0)).all()
    assert abs(z_bounded.mean() - bounded_mean) < 0.1  # about 4 standard errors
    # The old mean of the wells' NNLS values sits far higher (0.54 measured here with
    # today's u; 0.68 with the old rule's u, docs/uncertainty.md).
    assert z_old.mean() > bounded_mean + 0.1


def test_present_means_stay_in_band(plates):
    """Present components: z of the reported mean has mean ≈ 0 and P(|z|<2) in band."""
    z = np.concatenate([
        ((rows["concentration"].to_numpy() - truth) / rows["std_uncertainty"].to_numpy())
        [truth > 0] for rows, truth, _ in plates])
    assert z.size == 1200
    within = float(np.mean(np.abs(z) < 2))
    assert cs.TARGET_BAND[0] <= within <= cs.TARGET_BAND[1]
    assert abs(within - _honest_rates(REPLICATES)[0]) < 3 * np.sqrt(0.034 * 0.966 / z.size)
    assert abs(z.mean()) < 0.15


def test_flags_describe_the_mean(plates):
    """at_zero marks a sample whose unconstrained mean was negative, and only those."""
    for rows, _, _ in plates:
        flagged = rows.apply(lambda r: f"at_zero:{r.name[1]}" in r["flags"].split(";"),
                             axis=1)
        assert (flagged == (rows["mean_unconstrained"] < 0)).all()
        assert (rows.loc[flagged, "concentration"] == 0).all()


def test_shared_parts_are_not_averaged_down():
    """u_library and u_stray are shared by every well: the mean keeps their mean, not /√n.

    JCGM 100:2008 (GUM) 5.2.2: fully correlated inputs (r = +1) add linearly, so the mean
    of n wells with shared parts uᵢ has u = Σ (1/n)·uᵢ.
    """
    values = np.array([1.0, 1.2, 0.8])  # SD 0.2 (n − 1 denominator)
    noise = np.full(3, 0.01)
    library = np.array([0.3, 0.3, 0.6])  # e.g. a well at a different dilution
    stray = np.array([0.4, 0.4, 0.8])
    got = replicate_statistics(values, noise, u_shared=[library, stray])
    assert got["u_noise"] == pytest.approx(0.2 / np.sqrt(3))
    assert got["u_shared"] == pytest.approx(np.hypot(0.4, 0.4 * 4 / 3))
    assert got["std_uncertainty"] == pytest.approx(np.sqrt(0.2**2 / 3 + 0.4**2 + (1.6 / 3)**2))
    # Unknown shared part: the uncertainty is unknown, not silently smaller.
    assert np.isnan(replicate_statistics(values, noise, u_shared=[[0.3, np.nan, 0.3]])
                    ["std_uncertainty"])
    # The bound applies to the mean only.
    low = replicate_statistics(np.array([-0.1, 0.05, -0.04]), noise, non_negative=True)
    assert low["mean"] == pytest.approx(-0.03) and low["value"] == 0 and low["at_zero"]


def test_plate_means_use_u_noise_and_keep_the_shared_parts(monkeypatch):
    """Through analyse_plate, with a result built by hand to carry the parts of issue 14.

    The fit's result is given u_noise (its std_uncertainty today), u_library = 0.3 and
    u_stray = 0.4 mg/L per well, and std_uncertainty = √(u_noise² + u_library² + u_stray²);
    the wells of each sample are at dilutions 1, 1 and 2.
    """
    real = analysis.unmix

    def with_parts(*args, **kwargs):
        result = real(*args, **kwargs)
        u_noise = result["std_uncertainty"]
        library, stray = 0.3 + 0 * u_noise, 0.4 + 0 * u_noise
        return result.assign(u_noise=u_noise, u_library=library, u_stray=stray,
                             std_uncertainty=np.sqrt(u_noise**2 + library**2 + stray**2))

    monkeypatch.setattr(analysis, "unmix", with_parts)
    cond = cs.condition("6")
    rng = np.random.default_rng(SEED)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        lib = cs.lab_library(cond, rng)
        plate, layout = cs.replicate_plate(cond, cs.draw_samples(cond, rng, 4), rng)
        layout["dilution"] = np.tile([1.0, 1.0, 2.0], 4)
        done = analysis.analyse_plate(plate, layout, lib, pathlength_cm=1.0,
                                      window=cs.WINDOW_NM, unit=cs.CONCENTRATION_UNIT)
    free = done.unconstrained
    for row in done.samples.itertuples():
        wells = row.wells.split(";")
        d = layout.set_index("well").loc[wells, "dilution"].to_numpy()
        x = free["concentration"].sel(component=row.component, well=wells).to_numpy() * d
        u = free["u_noise"].sel(component=row.component, well=wells).to_numpy() * d
        noise = np.sqrt(max(np.var(x, ddof=1), np.mean(u**2)) / 3)
        shared = np.hypot(0.3, 0.4) * d.mean()  # 0.5 × 4/3, the same for every sample
        assert row.std_uncertainty == pytest.approx(np.hypot(noise, shared))
        assert row.std_uncertainty > shared > np.hypot(0.3, 0.4)  # not 0.667/√3 = 0.385
