"""baseline="scatter", reference_wavelength_nm and the scatter flags (issue 15, item 2).

Every spectrum here is **synthetic**: turbid extracts of four invented components with
broad overlapping bands (400–700 nm), λ⁻⁴ scatter and a cell offset, read with the noise of
the ``benchtop_double_beam`` preset (its values are themselves from memory). The numbers
the acceptance asks for are printed by ``pytest -s`` and recorded in docs/diagnostics.md.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from scipy.optimize import curve_fit

import mixsolve as ms
from mixsolve.errors import InputError, MixsolveWarning
from mixsolve.flags import SCATTER, UNMODELLED_SCATTER
from mixsolve.noise import PRESETS
from mixsolve.solve.scatter import fit_with_scatter

WL = np.arange(400.0, 761.0)  #: nm; 700-760 nm holds no band (the reference region)
WINDOW = (400.0, 700.0)
#: invented bands (centre nm, SD nm), 50 L/(g·cm) at the peak
BANDS = [(450.0, 30.0), (520.0, 35.0), (590.0, 40.0), (640.0, 25.0)]
NOISE = PRESETS["benchtop_double_beam"]


def _absorptivity() -> np.ndarray:
    k = np.stack([50.0 * np.exp(-0.5 * ((WL - c) / s) ** 2) for c, s in BANDS], axis=1)
    k[WL > 710] = 0.0
    return k


@pytest.fixture(scope="module")
def library() -> xr.Dataset:
    table = xr.DataArray(_absorptivity().T, dims=("component", "wavelength"),
                         coords={"component": ["p1", "p2", "p3", "p4"], "wavelength": WL})
    return ms.import_absorptivities(table, "L/(g*cm)")


def _extracts(seed: int, n: int, scatter_au: tuple[float, float], offset_au: float = 0.005
              ) -> tuple[xr.DataArray, np.ndarray, np.ndarray]:
    """n synthetic extracts: concentrations 2-10 mg/L, λ⁻⁴ scatter with amplitude drawn
    from ``scatter_au`` at 400 nm, an offset within ±offset_au; the spectra, the true
    concentrations (mg/L) and amplitudes (AU)."""
    rng = np.random.default_rng(seed)
    conc = rng.uniform(2.0, 10.0, (n, len(BANDS)))
    amplitude = rng.uniform(*scatter_au, n)
    true = conc @ _absorptivity().T / 1000 + amplitude[:, None] * (WL / 400.0) ** -4 \
        + rng.uniform(-offset_au, offset_au, (n, 1))
    readings = true + rng.normal(size=true.shape) * NOISE.sigma_absorbance(true)
    return ms.make_spectra(readings, WL), conc, amplitude


def _unmix(spectra: xr.DataArray, library: xr.Dataset, **options: object) -> xr.Dataset:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        return ms.unmix(spectra, library, window=WINDOW, unit="mg/L", **options)


def _coverage(result: xr.Dataset, conc: np.ndarray) -> float:
    z = (result["concentration"].values - conc) / result["std_uncertainty"].values
    return float(np.mean(np.abs(z) < 2))


def test_covariance_matches_scipy_curve_fit() -> None:
    """The fit and its linearised covariance, exponent included, equal those of
    ``scipy.optimize.curve_fit`` (Levenberg–Marquardt, pcov = s²(JᵀJ)⁻¹ with
    absolute_sigma False) on the same model, started at our solution (source: scipy)."""
    rng = np.random.default_rng(11)
    wl = WL[WL <= 700]
    k = _absorptivity()[WL <= 700] / 1000  # AU per mg/L
    base = np.hstack([k, np.ones((wl.size, 1))])
    truth = np.array([6.0, 3.0, 5.0, 4.0])
    spectra = np.stack([k @ truth + 0.002 + a * (wl / 400) ** -n
                        + rng.normal(0, 5e-4, wl.size) for a, n in
                        [(0.03, 4.0), (0.05, 2.0), (0.02, 3.0)]])
    coef, se, _, dof, _, exponent, u_exponent = fit_with_scatter(spectra, base, wl, 4, "ols")

    def model(lam: np.ndarray, *p: float) -> np.ndarray:
        return k @ np.array(p[:4]) + p[4] + p[5] * (lam / 400.0) ** -p[6]

    for i in range(3):
        start = [*coef[i], exponent[i]]
        popt, pcov = curve_fit(model, wl, spectra[i], p0=start)
        np.testing.assert_allclose(popt, start, rtol=2e-3, atol=1e-6)
        np.testing.assert_allclose(np.sqrt(np.diag(pcov)), [*se[i], u_exponent[i]], rtol=1e-2)
        assert dof[i] == wl.size - 7


def test_scatter_coverage_and_linear_baseline(library: xr.Dataset) -> None:
    """Acceptance (issue 15): on turbid extracts (scatter 0.01-0.05 AU at 400 nm, offset
    ±0.005 AU, benchtop noise; synthetic) P(|z| < 2) ≥ 0.90 with baseline scatter, for an
    honest u ≈ 0.954 (normal distribution, from memory); with baseline linear it is far
    below (the bias of the unmodelled curvature), and flagged."""
    spectra, conc, amplitude = _extracts(1, 300, (0.01, 0.05))
    scatter = _unmix(spectra, library, baseline="scatter")
    linear = _unmix(spectra, library, baseline="linear")
    cov_scatter, cov_linear = _coverage(scatter, conc), _coverage(linear, conc)
    print(f"\nP(|z|<2): scatter {cov_scatter:.3f}, linear {cov_linear:.3f}")
    assert 0.90 <= cov_scatter <= 0.99
    assert cov_linear < 0.5
    np.testing.assert_allclose(scatter["scatter_amplitude"].values, amplitude, atol=0.01)
    assert np.median(np.abs(scatter["scatter_exponent"].values - 4.0)) < 0.2
    assert (scatter["status"].values & SCATTER).all()
    assert np.mean((linear["status"].values & UNMODELLED_SCATTER) > 0) >= 0.9
    z_n = (scatter["scatter_exponent"].values - 4.0) / scatter["u_scatter_exponent"].values
    assert np.mean(np.abs(z_n) < 2) >= 0.9  # u(n) honest too


def test_clean_extracts_keep_their_coverage_with_scatter(library: xr.Dataset) -> None:
    """Without scatter the scatter baseline costs little and stays honest (synthetic):
    P(|z| < 2) within 0.90-0.999 (it is conservative when a ≈ 0: the exponent's column
    then counts as a free term) and the scatter flag quiet (< 1 %)."""
    spectra, conc, _ = _extracts(2, 200, (0.0, 0.0))
    result = _unmix(spectra, library, baseline="scatter")
    coverage = _coverage(result, conc)
    print(f"\nclean, baseline scatter: P(|z|<2) {coverage:.3f}")
    assert 0.90 <= coverage <= 0.999
    assert np.mean((result["status"].values & SCATTER) > 0) < 0.01


@pytest.mark.parametrize("baseline", ["none", "offset", "linear"])
def test_unmodelled_scatter_rates(library: xr.Dataset, baseline: str) -> None:
    """The unmodelled_scatter flag (synthetic, benchtop noise): < 10 % false alarms on clean
    extracts (target of issue 15, item 7; the one-sided 0.1 % point gives ~0.1 % for white
    noise), ≥ 90 % hits at λ⁻⁴ scatter of 0.03 AU at 400 nm. Offsets only with a baseline
    that models them: an unmodelled offset is not scatter and must not raise this flag."""
    offset = 0.0 if baseline == "none" else 0.005
    clean, _, _ = _extracts(3, 200, (0.0, 0.0), offset)
    turbid, _, _ = _extracts(4, 200, (0.03, 0.03), offset)
    false_alarm = np.mean((_unmix(clean, library, baseline=baseline)["status"].values
                           & UNMODELLED_SCATTER) > 0)
    hits = np.mean((_unmix(turbid, library, baseline=baseline)["status"].values
                    & UNMODELLED_SCATTER) > 0)
    print(f"\nunmodelled_scatter, baseline {baseline}: false alarms {false_alarm:.3f}, "
          f"hits {hits:.3f}")
    assert false_alarm < 0.10
    assert hits >= 0.90


def test_unmodelled_scatter_rates_with_noise_weights(library: xr.Dataset) -> None:
    """weights='noise' keeps the unmodelled_scatter rates of the unweighted fit (synthetic,
    benchtop noise; targets of issue 15, item 7: < 10 % false alarms, >= 90 % hits at 0.03
    AU). The probe's extended fit is an unweighted least-squares extension: a weighted
    residual is not orthogonal to the design, and taking it as the extended fit's residual
    left the components' shapes in it, called it structured and silenced the flag (0 % hits
    before the fix)."""
    clean, _, _ = _extracts(3, 200, (0.0, 0.0), 0.0)
    turbid, _, _ = _extracts(4, 200, (0.03, 0.03), 0.0)
    options = {"baseline": "none", "noise": NOISE, "weights": "noise"}
    false_alarm = np.mean((_unmix(clean, library, **options)["status"].values
                           & UNMODELLED_SCATTER) > 0)
    hits = np.mean((_unmix(turbid, library, **options)["status"].values
                    & UNMODELLED_SCATTER) > 0)
    print(f"\nunmodelled_scatter, weights noise: false alarms {false_alarm:.3f}, hits {hits:.3f}")
    assert false_alarm < 0.10
    assert hits >= 0.90


def test_offset_alone_is_not_taken_for_scatter(library: xr.Dataset) -> None:
    """An unmodelled cell offset of ±0.005 AU (baseline none; synthetic) leaves the
    unmodelled_scatter flag quiet: the probe is orthogonal to a constant."""
    spectra, _, _ = _extracts(5, 200, (0.0, 0.0), 0.005)
    result = _unmix(spectra, library, baseline="none")
    assert np.mean((result["status"].values & UNMODELLED_SCATTER) > 0) < 0.02


def test_reference_wavelength_subtracts_the_band_mean(library: xr.Dataset) -> None:
    """The fit with reference_wavelength_nm=750 equals the fit of the spectra minus their
    mean reading over 748-752 nm, computed here with numpy; its error enters u_noise as
    (G·1)²·s²·f²/k with G = D⁺ from ``numpy.linalg.pinv`` and k = 5 readings (source:
    first-order propagation of a reading common to all, JCGM 100:2008 5.1.2)."""
    spectra, conc, _ = _extracts(6, 40, (0.0, 0.0), 0.01)
    result = _unmix(spectra, library, reference_wavelength_nm=750.0)
    band = (WL >= 748) & (WL <= 752)
    by_hand = spectra - spectra.values[:, band].mean(axis=1)[:, None]
    plain = _unmix(by_hand, library)
    np.testing.assert_allclose(result["concentration"], plain["concentration"], rtol=1e-10)
    design = _absorptivity()[WL <= 700] / 1000
    gain = np.linalg.pinv(design) @ np.ones(design.shape[0])  # mg/L per AU
    s = plain["rms_residual"].values * np.sqrt(301 / plain["dof"].values)
    extra = (gain[None, :] * (s * plain["noise_inflation"].values)[:, None]) ** 2 / 5
    np.testing.assert_allclose(result["u_noise"] ** 2, plain["u_noise"] ** 2 + extra,
                               rtol=1e-6)
    assert 0.90 <= _coverage(result, conc) <= 0.999
    assert result.attrs["reference_wavelength_nm"] == 750.0


def test_reference_with_an_offset_costs_nothing(library: xr.Dataset) -> None:
    """With an offset in the design the reference's error goes into the offset: u_noise
    is that of the fit (G·1 = 0 for the components, numpy.linalg.pinv)."""
    spectra, _, _ = _extracts(7, 10, (0.0, 0.0))
    with_ref = _unmix(spectra, library, baseline="offset", reference_wavelength_nm=750.0)
    without = _unmix(spectra, library, baseline="offset")
    np.testing.assert_allclose(with_ref["u_noise"], without["u_noise"], rtol=1e-8)


@pytest.mark.parametrize(("reference", "message"), [
    (650.0, r"reference_wavelength_nm: 650 nm lies inside the fitted wavelengths "
            r"\(400-700 nm\)"),
    (900.0, r"reference_wavelength_nm: no reading within 2 nm of 900 nm"),
    (701.0, r"reference_wavelength_nm: the band 701 ± 2 nm includes the fitted wavelength "
            r"699 nm"),
    (-5.0, r"reference_wavelength_nm"),
])
def test_reference_refusals(library: xr.Dataset, reference: float, message: str) -> None:
    spectra, _, _ = _extracts(8, 2, (0.0, 0.0))
    with pytest.raises(InputError, match=message):
        _unmix(spectra, library, reference_wavelength_nm=reference)


@pytest.mark.parametrize(("options", "message"), [
    ({"fit_shift": True}, r"baseline: 'scatter' cannot be combined with fit_shift"),
    ({"weights": "noise", "noise": "benchtop_double_beam"},
     r"baseline: 'scatter' is fitted unweighted"),
])
def test_scatter_refusals(library: xr.Dataset, options: dict, message: str) -> None:
    spectra, _, _ = _extracts(9, 2, (0.0, 0.0))
    with pytest.raises(InputError, match=message):
        _unmix(spectra, library, baseline="scatter", **options)


def test_scatter_with_stray_and_missing_readings(library: xr.Dataset) -> None:
    """Stray-light correction and a missing reading work with the scatter fit: results
    finite, the missing reading flagged, u_stray > 0 (synthetic)."""
    spectra, _, _ = _extracts(10, 4, (0.03, 0.03))
    values = spectra.values.copy()
    values[0, 30] = np.nan
    result = _unmix(ms.make_spectra(values, WL), library, baseline="scatter",
                    noise="benchtop_double_beam", reference_wavelength_nm=750.0)
    assert np.isfinite(result["concentration"]).all()
    assert (result["u_stray"] > 0).all()
    assert "missing_readings" in str(result["flags"].values[0])
    assert result.attrs["scatter_lambda0_nm"] == 400.0


def test_cli_scatter_and_reference(cli, tmp_path, library: xr.Dataset) -> None:
    """--baseline scatter and --reference-wavelength on the command line: the flag shows,
    and a reference inside the window is refused in one line naming the flag."""
    spectra, _, _ = _extracts(12, 2, (0.03, 0.03))
    lib_path, spec_path = tmp_path / "lib.nc", tmp_path / "spectra.csv"
    ms.write_library(library, lib_path)
    spectra.to_pandas().T.rename_axis("wavelength_nm").to_csv(spec_path)
    table = tmp_path / "results.csv"
    out = cli.ok("unmix", str(lib_path), str(spec_path), "--window", "400-700",
                 "--baseline", "scatter", "--reference-wavelength", "750", "--out", str(table))
    assert "baseline scatter" in out.output and "scatter" in out.output.split("flags")[1]
    header = next(ln for ln in table.read_text().splitlines()  # after the '#' lines
                  if not ln.startswith("#")).split(",")
    assert {"scatter_exponent", "u_scatter_exponent", "scatter_amplitude",
            "u_scatter_amplitude"} <= set(header)
    bad = cli("unmix", str(lib_path), str(spec_path), "--window", "400-700",
              "--reference-wavelength", "650")
    assert_cli_error(bad, "--reference-wavelength: 650 nm lies inside", literal=True)


def test_plate_passes_scatter_and_reference(library: xr.Dataset) -> None:
    """analyse_plate hands baseline="scatter" and reference_wavelength_nm to unmix for every
    well (synthetic plate: two blank wells, four turbid sample wells)."""
    import pandas as pd

    from mixsolve.plate.analysis import analyse_plate

    spectra, _, _ = _extracts(13, 4, (0.03, 0.03))
    wells = ["A1", "B1", "A2", "B2", "C2", "D2"]
    values = np.vstack([np.zeros((2, WL.size)), spectra.values]) + 0.04  # plate absorbance
    plate = xr.DataArray(values, dims=("well", "wavelength"),
                         coords={"well": wells, "wavelength": WL})
    layout = pd.DataFrame({
        "line": range(2, 8), "well": wells, "role": ["blank"] * 2 + ["sample"] * 4,
        "sample": ["", "", "s1", "s2", "s3", "s4"], "dilution": [1.0] * 6,
        "component": [""] * 6, "concentration": [np.nan] * 6, "unit": [""] * 6})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        result = analyse_plate(plate, layout, library, window=WINDOW, baseline="scatter",
                               reference_wavelength_nm=750.0, pathlength_cm=1.0)
    assert result.result is not None
    assert np.isfinite(result.result["scatter_exponent"]).all()
    assert result.result.attrs["reference_wavelength_nm"] == 750.0
    samples = result.result.sel(well=wells[2:])
    assert (samples["status"].values & SCATTER).all()


def test_scatter_coverage_with_libraries_from_standards() -> None:
    """Acceptance with libraries built from each lab's own standards (the coverage harness of
    benchmarks/coverage_sim.py, its condition 2: five standards per component, 1.5 %
    preparation error, white noise 0.002 AU; synthetic), turbid samples as above: with
    baseline scatter P(|z| < 2) ≥ 0.90 (an honest u: 0.954, normal distribution; measured
    0.988 over 20 labs, 0.994 over these 6); with baseline linear it is well below (0.57
    over 20 labs)."""
    import runpy
    from pathlib import Path

    cs = runpy.run_path(str(Path(__file__).resolve().parents[1] / "benchmarks"
                            / "coverage_sim.py"), run_name="coverage_sim_for_scatter")
    cond = cs["condition"]("2")
    z: dict[str, list[np.ndarray]] = {"scatter": [], "linear": []}
    for seed in np.random.SeedSequence(15).spawn(6):
        rng = np.random.default_rng(seed)
        lib = cs["lab_library"](cond, rng)
        conc = cs["draw_samples"](cond, rng, 20)
        wl = cs["WAVELENGTHS_NM"]
        true = conc @ cs["absorptivity"]() / 1000.0 \
            + rng.uniform(0.01, 0.05, (20, 1)) * (wl / 400) ** -4 \
            + rng.uniform(-0.005, 0.005, (20, 1))
        spectra = ms.make_spectra(cs["measure"](true, cond, rng), wl, pathlength_cm=1.0)
        for baseline, found in z.items():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", MixsolveWarning)
                result = ms.unmix(spectra, lib, window=(400.0, 700.0), unit="mg/L",
                                  baseline=baseline)
            found.append(((result["concentration"].values - conc)
                          / result["std_uncertainty"].values).ravel())
    covered = {k: float(np.mean(np.abs(np.concatenate(v)) < 2)) for k, v in z.items()}
    print(f"\nstandards libraries: P(|z|<2) scatter {covered['scatter']:.3f}, "
          f"linear {covered['linear']:.3f}")
    # 6 labs share 6 library errors: the coverage of so few labs scatters (20 labs: 0.988)
    assert 0.90 <= covered["scatter"] <= 0.999
    assert covered["linear"] < 0.8


@pytest.mark.parametrize("baseline", ["scatter", "none"])
def test_dask_chunks_give_the_eager_result(library: xr.Dataset, baseline: str) -> None:
    """Scatter fit and reference subtraction chunk by chunk on dask equal the eager run (the
    reference band is averaged lazily, per chunk)."""
    spectra, _, _ = _extracts(14, 24, (0.03, 0.03))
    eager = _unmix(spectra, library, baseline=baseline, reference_wavelength_nm=750.0)
    lazy = _unmix(spectra.chunk({"sample": 8}), library, baseline=baseline,
                  reference_wavelength_nm=750.0).compute()
    for name in ("concentration", "u_noise", "residual", "scatter_z"):
        np.testing.assert_allclose(lazy[name], eager[name], rtol=1e-9, atol=1e-12)


def test_scatter_term_fitted_to_a_shift_is_not_called_scatter() -> None:
    """A 1 nm wavelength error, no scatter, fitted with ``baseline="scatter"``: the scatter
    term takes up part of the shift's derivative residual (the exponent runs to its 4.5
    bound) and |a|/u(a) exceeds the limit on every spectrum (found by an independent review;
    issue 15 target: a flag fires on < 10 % of samples without its problem). The residual
    flags say what is wrong, and ``scatter`` is not set (docs/flags.md). Synthetic bands of
    12-30 nm SD, benchtop noise."""
    wl = np.arange(400.0, 761.0)

    def eps(x: np.ndarray) -> np.ndarray:
        def g(c: float, w: float) -> np.ndarray:
            return np.exp(-0.5 * ((x - c) / w) ** 2)
        return np.stack([60 * g(430, 18) + 45 * g(662, 12) + 10 * g(580, 30),
                         50 * g(460, 20) + 25 * g(645, 14) + 8 * g(600, 25),
                         40 * g(450, 22) + 35 * g(480, 18) + 20 * g(420, 15)])

    lib = ms.import_absorptivities(xr.DataArray(
        eps(wl), dims=("component", "wavelength"),
        coords={"component": ["pa", "pb", "car"], "wavelength": wl}), "L/(g*cm)")
    rng = np.random.default_rng(3)
    true = rng.uniform(0.004, 0.015, (100, 3)) @ eps(wl + 1.0)
    readings = true + rng.normal(size=true.shape) * NOISE.sigma_absorbance(true)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        result = ms.unmix(ms.make_spectra(readings, wl), lib, window=WINDOW,
                          baseline="scatter", noise="benchtop_double_beam")
    assert np.mean(np.abs(result["scatter_z"].values) > 3.09) > 0.9  # the term is "significant"
    status = result["status"].values
    assert np.mean((status & SCATTER) > 0) < 0.1
    flagged = [set(t.split(";")) for t in result["flags"].values]
    assert np.mean([bool({"lack_of_fit", "structured_residual"} & f) for f in flagged]) > 0.9
