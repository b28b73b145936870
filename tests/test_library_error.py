"""The library's error with its correlation over wavelengths (mixsolve.library_error).

Checks against things outside the code: Beer–Lambert (a scale error of ε moves c by the same
relative amount and nothing else), a brute-force Monte Carlo with numpy's least squares, and
seeded simulation-based calibration (synthetic labs of benchmarks/coverage_sim.py: the
reported std_uncertainty must cover the truth about as often as a standard uncertainty
should, P(|z| < 2) in [0.90, 0.99]). The HC2 sandwich is checked against statsmodels in
tests/external/test_library_sandwich.py.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from test_coverage_harness import cs  # benchmarks/coverage_sim.py, loaded once

import mixsolve as ms
from mixsolve.errors import InputError, LargeUncertaintyWarning, MixsolveWarning
from mixsolve.io.library_store import read_library, write_library
from mixsolve.library_error import error_patterns, patterns_at

WL = cs.WAVELENGTHS_NM
EPS = cs.absorptivity()
NAMES = list(cs.BANDS)


def _table(eps: np.ndarray = EPS) -> xr.DataArray:
    return cs.exact_table().copy(data=eps)


def _standards(rng: np.random.Generator, *, prep: float = 0.0, stock: float = 0.0,
               declare: bool = True) -> tuple[xr.DataArray, pd.DataFrame]:
    """Five synthetic standards per component (coverage_sim.lab_standards), errors as asked."""
    return cs.lab_standards(cs.Condition("t", "test", library="standards", prep_rel=prep,
                                         stock_rel=stock, declared=declare), rng)


def _build(spectra: xr.DataArray, sheet: pd.DataFrame, **kw) -> xr.Dataset:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        return ms.build_library(spectra, sheet, **kw)


def test_a_scale_error_moves_its_own_component_by_the_same_fraction_and_no_other() -> None:
    """Beer–Lambert c = A/(ε b): ε known to 2 % (whole spectrum) gives c to 2 %; the fit of an
    exact spectrum with ε_A·(1 + δ) returns c_A/(1 + δ) and c_B unchanged, so u_library of
    the others is 0."""
    lib = ms.import_absorptivities(_table(), "L/(g*cm)", u_scale_rel={NAMES[0]: 0.02})
    conc = np.array([[2.0, 3.0, 4.0]])
    result = ms.unmix(ms.make_spectra(conc @ EPS / 1000.0, WL), lib, unit="mg/L",
                      method="ols")
    u = result["u_library"].values[0]
    assert u[0] == pytest.approx(0.02 * 2.0, rel=1e-9)
    assert np.all(np.abs(u[1:]) < 1e-12)
    assert np.allclose(result["std_uncertainty"].values[0],
                       np.hypot(u, result["u_noise"].values[0]))


def test_a_stated_u_is_one_error_of_the_whole_spectrum() -> None:
    """An imported u(ε) counts as fully correlated within its component: a u of 3 % of ε at
    every wavelength is a 3 % scale uncertainty (Beer–Lambert as above), not 3 %/√301."""
    lib = ms.import_absorptivities(_table(), "L/(g*cm)", u_absorptivity=_table(0.03 * EPS))
    result = ms.unmix(ms.make_spectra(np.array([[2.0, 3.0, 4.0]]) @ EPS / 1e3, WL), lib,
                      unit="mg/L", method="ols")
    assert np.allclose(result["u_library"].values[0], 0.03 * np.array([2.0, 3.0, 4.0]),
                       rtol=1e-9)


def test_propagation_matches_a_brute_force_monte_carlo(rng) -> None:
    """u_library (first order, δx = −G δD x) against refitting one spectrum with 4000 whole
    libraries drawn from the error patterns (numpy.linalg.lstsq): within 5 %."""
    spectra, sheet = _standards(rng, prep=0.015, stock=0.015)
    lib = _build(spectra, sheet)
    conc = np.array([[3.0, 5.0, 2.0]])
    clean = conc @ EPS / 1e3
    result = ms.unmix(ms.make_spectra(clean, WL), lib, unit="mg/L", method="ols")
    patterns = error_patterns(lib)  # (F, n, m), L/(g*cm)
    eps = lib["absorptivity"].values
    draws = []
    for z in rng.standard_normal((4000, patterns.shape[0])):
        drawn = eps + np.einsum("f,fnm->nm", z, patterns)
        draws.append(np.linalg.lstsq(drawn.T, clean[0], rcond=None)[0] * 1e3)
    sd = np.std(draws, axis=0, ddof=1)
    assert np.allclose(result["u_library"].values[0], sd, rtol=0.05), (sd, result["u_library"])


def test_a_shared_stock_is_invisible_to_the_regression_but_not_to_u(rng) -> None:
    """Every standard from one stock 1.5 % strong: the line fits perfectly, so only the
    declared u_stock_rel can say it; the stock pattern is ε·u_stock_rel (all standards of the
    component share it, weights sum to 1)."""
    spectra, sheet = _standards(rng, stock=0.015)
    lib = _build(spectra, sheet)
    kinds = [str(k) for k in lib["error_kind"].values]
    assert kinds.count("stock") == 3
    stock = error_patterns(lib)[[i for i, k in enumerate(kinds) if k == "stock"]]
    for k in range(3):
        assert np.allclose(stock[k, k], 0.015 * lib["absorptivity"].values[k])
    undeclared = _build(*_standards(np.random.default_rng(1), stock=0.015, declare=False))
    assert "stock" not in [str(k) for k in undeclared["error_kind"].values]


def test_declared_preparation_stands_for_the_scale_part_unless_the_scatter_refutes_it() -> None:
    """Five standards at 1, 2, 3, 4, 5 × x₀ each declared to 1.5 %: the slope's relative
    uncertainty is 1.5 %·√Σx⁴/Σx² = 1.5 %·√979/55 (least squares through the origin: the
    slope is Σx·A/Σx², a weighted mean of A/x with weights x²/Σx²)."""
    spectra, sheet = _standards(np.random.default_rng(3), prep=0.015)
    lib = _build(spectra, sheet)
    expected = 0.015 * np.sqrt(979.0) / 55.0
    assert np.allclose(lib["u_preparation_rel_declared"].values, expected, rtol=1e-2)
    used = lib["u_preparation_rel"].values
    scatter = lib["u_preparation_rel_scatter"].values
    assert np.all((used == lib["u_preparation_rel_declared"].values) | (used == scatter))


def test_the_library_file_keeps_its_error_and_resampling_moves_it(tmp_path, rng) -> None:
    lib = _build(*_standards(rng, prep=0.015, stock=0.015))
    back = read_library(write_library(lib, tmp_path / "lab.nc"))
    assert np.array_equal(error_patterns(back), error_patterns(lib))
    assert list(back["error_kind"].values) == list(lib["error_kind"].values)
    fine = np.arange(400.0, 700.01, 0.5)
    resampled, _ = ms.resample_library(lib, fine)
    assert np.allclose(error_patterns(resampled), np.moveaxis(patterns_at(lib, fine), 1, 2))
    assert np.allclose(error_patterns(resampled)[:, :, ::2], error_patterns(lib))


@pytest.mark.parametrize(("column", "value", "other", "message"), [
    ("u_stock_rel", 0.01, {}, r"line 2: u_stock_rel 0\.01 is given without a stock; name"),
    ("stock", "S1", {}, r"line 2: stock 'S1' has no u_stock_rel; give its relative"),
    ("u_concentration", -1.0, {}, r"line 2, u_concentration: -1 is not a number ≥ 0"),
    # a percentage (or a relative u) where the sheet wants mg/L: 100 % or more is refused
    ("u_concentration", 1e6, {}, r"line 2: u_concentration 1e\+06 is not below the "
                                 r"concentration [0-9.]+; it is a standard uncertainty"),
    ("u_stock_rel", 1.5, {"stock": "S1"}, r"line 2, u_stock_rel: 1\.5 is not a number ≥ 0 and"),
])
def test_uncertainty_columns_are_checked(rng, column, value, other, message) -> None:
    spectra, sheet = _standards(rng)
    sheet[column] = pd.Series([value] + [None] * (len(sheet) - 1), dtype=object)
    for key, text in other.items():
        sheet[key] = [text] + [None] * (len(sheet) - 1)
    with pytest.raises(InputError, match=message):
        _build(spectra, sheet)


def test_one_stock_has_one_uncertainty(rng) -> None:
    spectra, sheet = _standards(rng)
    sheet["stock"] = "S1"
    sheet["u_stock_rel"] = 0.01
    sheet.loc[3, "u_stock_rel"] = 0.02
    with pytest.raises(InputError, match=r"line 5: stock 'S1' has u_stock_rel 0\.02 here and "
                                         r"0\.01 on another row; one stock has one"):
        _build(spectra, sheet)


@pytest.mark.parametrize("key", ["2", "3"])
def test_results_with_a_library_from_declared_standards_are_covered(key) -> None:
    """Simulation-based calibration (synthetic labs, seeded): 1.5 % preparation error, and
    a 1.5 % shared-stock error on top, both declared in the standards sheet: P(|z| < 2) in
    [0.90, 0.99] (the issue's target band; honest: 0.954)."""
    (row,) = cs.run_condition(cs.condition(key), n_labs=60, n_samples=4, seed=14,
                              fits=("defaults",))
    low, high = cs.TARGET_BAND
    assert low <= row.p_within_2u <= high, row
    assert abs(row.mean_z) < 0.2, row


def test_the_command_line_reports_what_the_api_does(tmp_path, cli, rng) -> None:
    """library build from a sheet with the uncertainty columns, then unmix, through the CLI:
    the results file holds the API's std_uncertainty and its parts, to the 6 significant
    digits written."""
    spectra, sheet = _standards(rng, prep=0.015, stock=0.015)
    spectra.to_pandas().T.rename_axis("wavelength_nm").to_csv(tmp_path / "std.csv")
    sheet.to_csv(tmp_path / "sheet.csv", index=False)
    conc = cs.draw_samples(cs.condition("3"), rng, 6)
    samples = ms.make_spectra(cs.measure(conc @ EPS / 1e3, cs.condition("3"), rng), WL,
                              [f"s{i}" for i in range(6)])
    samples.to_pandas().T.rename_axis("wavelength_nm").to_csv(tmp_path / "samples.csv")
    cli.ok("library", "build", str(tmp_path / "std.csv"), "--standards",
           str(tmp_path / "sheet.csv"), "--out", str(tmp_path / "lab.nc"))
    cli.ok("unmix", str(tmp_path / "lab.nc"), str(tmp_path / "samples.csv"), "--unit", "mg/L",
           "--out", str(tmp_path / "results.csv"))
    table = pd.read_csv(tmp_path / "results.csv", comment="#").set_index(["sample", "component"])
    api = ms.unmix(ms.read_spectra(tmp_path / "samples.csv"),
                   ms.read_library(tmp_path / "lab.nc"), unit="mg/L")
    expected = ms.results_table(api).set_index(["sample", "component"])
    for column in ("std_uncertainty", "u_noise", "u_library"):
        got, want = table[column].to_numpy(), expected.loc[table.index, column].to_numpy()
        assert np.allclose(got, want, rtol=1e-5), np.max(np.abs(got / want - 1))
    assert (table["u_library"] > table["u_noise"]).mean() > 0.5  # the library dominates here


def test_budget_and_its_monte_carlo_draw_the_same_correlated_library(rng) -> None:
    """The budget's absorptivity term on a noise-free spectrum equals the result's u_library
    (the residual term of ∂x/∂ε vanishes), and 20 000 Monte Carlo draws of whole library
    spectra agree with it within 5 % (JCGM 101:2008, 8.2 style comparison)."""
    lib = _build(*_standards(rng, prep=0.015, stock=0.015))
    conc = np.array([[3.0, 5.0, 2.0]])
    result = ms.unmix(ms.make_spectra(conc @ EPS / 1e3, WL, ["x"]), lib, unit="mg/L",
                      method="ols")
    budget = ms.uncertainty_budget(result, lib, wavelength_tolerance_nm=0.0, stray_fraction=0,
                                   monte_carlo=20000, seed=5)
    term = budget["contribution"].sel(sample="x", source="absorptivity").values
    assert np.allclose(term, result["u_library"].values[0], rtol=1e-6)
    ratio = budget["mc_standard_uncertainty"].values[0] / budget["combined_uncertainty"].values[0]
    assert np.all(np.abs(ratio - 1) < 0.05), ratio


def test_a_percentage_written_as_a_fraction_is_warned_of(rng) -> None:
    """u_stock_rel 0.8 meant as 0.8 %: a warning naming the line and the likely meaning."""
    spectra, sheet = _standards(rng, stock=0.015)
    sheet["u_stock_rel"] = 0.8
    with pytest.warns(LargeUncertaintyWarning, match=r"line 2: u_stock_rel is 80 % of the "
                      r"concentration; if you meant 0\.8 %, write 0\.008$"):
        ms.build_library(spectra, sheet)


def test_cli_import_states_a_scale_uncertainty_like_the_api(tmp_path, cli) -> None:
    """``library import --u-scale-rel``: a 2 % scale of one component gives it u_library
    = 2 % of c (Beer–Lambert, as above) and the API's patterns; junk, a value outside 0–1,
    an unknown or repeated name are one-line errors (exit 2) and write nothing."""

    table = pd.DataFrame(EPS.T, columns=NAMES)
    table.insert(0, "wavelength_nm", WL)
    table.to_csv(tmp_path / "t.csv", index=False, float_format="%.17g")
    cli.ok("library", "import", tmp_path / "t.csv", "--absorptivity-unit", "L/(g*cm)", "--out",
           tmp_path / "lib.nc", "--u-scale-rel", f"{NAMES[0]}=0.02")
    api = ms.import_absorptivities(_table(), "L/(g*cm)", u_scale_rel={NAMES[0]: 0.02})
    np.testing.assert_allclose(error_patterns(read_library(tmp_path / "lib.nc")),
                               error_patterns(api), rtol=1e-12, atol=1e-12)
    result = ms.unmix(ms.make_spectra(np.array([[2.0, 3.0, 4.0]]) @ EPS / 1e3, WL),
                      read_library(tmp_path / "lib.nc"), unit="mg/L", method="ols")
    assert result["u_library"].values[0, 0] == pytest.approx(0.02 * 2.0, rel=1e-9)
    for given, says in (("abc", "--u-scale-rel: 'abc' is not a number"),
                        ("1.5", "--u-scale-rel: 1.5 is not a number from 0 to 1"),
                        ("nosuch=0.02", "--u-scale-rel given for 'nosuch', which is not a"),
                        (f"{NAMES[1]}=0.02,{NAMES[1]}=0.03",
                         f"--u-scale-rel: '{NAMES[1]}' is given twice")):
        out = tmp_path / "refused.nc"
        refused = cli("library", "import", tmp_path / "t.csv", "--absorptivity-unit", "L/(g*cm)",
                      "--out",
                      out, "--u-scale-rel", given)
        assert_cli_error(refused, says, literal=True, must_not_exist=[out])


def test_an_old_library_file_is_read_with_a_warning_to_rebuild(tmp_path, rng) -> None:
    """A library from standards without error patterns (written before them): read, its
    u(ε) taken as fully correlated, and a warning says to rebuild it."""
    from mixsolve.errors import OutdatedLibraryWarning

    lib = _build(*_standards(rng, prep=0.015))
    old = lib.drop_vars(["error_pattern", "error_kind", "error_source"])
    path = write_library(old, tmp_path / "old.nc")
    with pytest.warns(OutdatedLibraryWarning, match=r"^old\.nc: built from standards by an "
                      r"older mixsolve.*rebuild it with `mixsolve library build`$"):
        back = read_library(path)
    assert error_patterns(back).shape[0] == 3  # one declared_u pattern per component
    with warnings.catch_warnings():
        warnings.simplefilter("error", OutdatedLibraryWarning)
        read_library(write_library(lib, tmp_path / "new.nc"))  # a current file: no warning
