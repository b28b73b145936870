"""Cell blank, cell pathlength ratio and wavelength offset (mixsolve.uncertainty.corrections), their
terms in the budget, and ``unmix --cell-blank/--cell-ratio/--wavelength-offset``.

All data are invented (Gaussian bands, seeded noise).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from helpers_io import BANDS, MIXTURES, WL, mixture_absorbance, write_library_file, write_wide

import mixsolve as ms
from mixsolve.uncertainty.corrections import pathlength_ratio

CONC = np.array([[4.0e-5, 2.0e-5, 3.0e-5], [1.0e-5, 5.0e-5, 2.0e-5]])  # mol/L, invented


def window_absorbance(wl: np.ndarray) -> np.ndarray:
    """An invented cell-window mismatch: 0.012 AU rising to the blue."""
    return 0.008 + 0.004 * (700.0 - wl) / 300.0


def test_cell_blank_is_subtracted_and_ratio_divided(wl_grid, rng) -> None:
    """(A − A_cb)/r, with the blank's mean of m scans and u = SD/√m."""
    scans = ms.make_spectra(window_absorbance(wl_grid) + rng.normal(0, 0.001, (4, wl_grid.size)),
                            wl_grid)
    corr = ms.cell_blank(scans, ratio=1.02, u_ratio=0.003)
    assert corr.n_scans == 4
    assert np.allclose(corr.blank.values, scans.values.mean(axis=0))
    assert np.allclose(corr.u_blank.values, scans.values.std(axis=0, ddof=1) / 2.0)
    spectra = ms.make_spectra(np.full((2, wl_grid.size), 0.5), wl_grid)
    out = ms.correct_cells(spectra, corr)
    assert np.allclose(out.values, (0.5 - corr.blank.values) / 1.02)
    assert "cell blank subtracted" in out.attrs["cell_correction"]


def test_single_blank_scan_has_no_stated_uncertainty(wl_grid) -> None:
    """One scan: u not stated (NaN) unless u_au is given."""
    one = ms.make_spectra(window_absorbance(wl_grid), wl_grid)
    assert np.all(np.isnan(ms.cell_blank(one).u_blank.values))
    assert np.all(ms.cell_blank(one, u_au=0.0005).u_blank.values == 0.0005)


def test_blank_is_interpolated_never_extrapolated(wl_grid) -> None:
    """A finer blank grid is interpolated; one that stops short is refused, naming λ."""
    fine = np.arange(400.0, 700.1, 1.0)
    corr = ms.cell_blank(ms.make_spectra(window_absorbance(fine), fine))
    spectra = ms.make_spectra(np.zeros((1, wl_grid.size)), wl_grid)
    assert np.allclose(ms.correct_cells(spectra, corr).values, -window_absorbance(wl_grid))
    short = ms.cell_blank(ms.make_spectra(window_absorbance(fine[:200]), fine[:200]))
    with pytest.raises(ms.InputError, match=r"cell blank: covers 400-599 nm, but 600 nm is"):
        ms.correct_cells(spectra, short)


def test_correction_recovers_concentrations(molar_library, wl_grid) -> None:
    """Spectra read in a mismatched cell (window absorbance, 2 % longer path) give the true
    concentrations after the correction, and wrong ones without it."""
    eps = molar_library["absorptivity"].values
    read = 1.02 * CONC @ eps + window_absorbance(wl_grid)
    spectra = ms.make_spectra(read, wl_grid)
    blank = ms.make_spectra(window_absorbance(wl_grid), wl_grid)
    fixed = ms.correct_cells(spectra, ms.cell_blank(blank, ratio=1.02))
    good = ms.unmix(fixed, molar_library, method="ols")["concentration"].values
    bad = ms.unmix(spectra, molar_library, method="ols")["concentration"].values
    assert np.allclose(good, CONC, rtol=1e-9)
    assert not np.allclose(bad, CONC, rtol=0.01)


def test_correction_uncertainty_enters_the_budget(molar_library, wl_grid, rng) -> None:
    """u_blank = σ at every λ propagates like reading noise σ (same operator); u(r)/r
    gives |y|·u(r)/r; without a cell correction both terms are 0."""
    eps = molar_library["absorptivity"].values
    spectra = ms.make_spectra(CONC @ eps + rng.normal(0, 0.002, (2, wl_grid.size)), wl_grid)
    sigma = 0.0007
    corr = ms.cell_blank(ms.make_spectra(np.zeros(wl_grid.size), wl_grid), u_au=sigma,
                         u_ratio=0.004)
    result = ms.unmix(ms.correct_cells(spectra, corr), molar_library, method="ols")
    budget = ms.uncertainty_budget(result, molar_library, cell=corr)
    sd = xr.DataArray(np.full(wl_grid.size, sigma), dims="wavelength",
                      coords={"wavelength": wl_grid})
    as_noise = ms.uncertainty_budget(result, molar_library, noise_sd=sd)
    assert np.allclose(budget["contribution"].sel(source="cell_blank").values,
                       as_noise["contribution"].sel(source="spectral_noise").values)
    assert np.allclose(budget["contribution"].sel(source="cell_ratio").values,
                       np.abs(result["concentration"].values) * 0.004)
    plain = ms.uncertainty_budget(result, molar_library)
    assert np.all(plain["contribution"].sel(source=["cell_blank", "cell_ratio"]).values == 0)


def test_pathlength_ratio_from_one_solution_in_both_cells(wl_grid, rng) -> None:
    """r = Σ A_c A_n / Σ A_n² with its standard uncertainty from the scatter."""
    a_n = 0.2 + 0.8 * np.exp(-0.5 * ((wl_grid - 550) / 60) ** 2)
    noise = rng.normal(0, 0.001, wl_grid.size)
    cell = xr.DataArray(1.015 * a_n + noise, dims="wavelength", coords={"wavelength": wl_grid})
    nominal = xr.DataArray(a_n, dims="wavelength", coords={"wavelength": wl_grid})
    r, u_r = pathlength_ratio(cell, nominal)
    assert r == pytest.approx(1.015, abs=3 * u_r)
    assert 0 < u_r < 0.002


def test_shift_wavelengths_moves_the_axis(wl_grid) -> None:
    """λ_corrected = λ_read − δ; values unchanged; δ recorded."""
    spectra = ms.make_spectra(np.ones((1, wl_grid.size)), wl_grid)
    out = ms.shift_wavelengths(spectra, 0.4)
    assert np.allclose(out["wavelength"].values, wl_grid - 0.4)
    assert out.attrs["wavelength_offset_nm"] == 0.4
    with pytest.raises(ms.InputError, match=r"^offset_nm: 500 nm is not a number from -10 to "
                                            r"10 nm; an error that large is a fault to repair"):
        ms.shift_wavelengths(spectra, 500.0)
    with pytest.raises(ms.InputError, match=r"^offset_nm: 10 nm is not a number below 0\.5 nm; the "
                                            r"corrected wavelengths \(read − offset\) must "
                                            r"stay above 0 nm$"):
        ms.shift_wavelengths(ms.make_spectra(np.ones((1, 3)), [0.5, 1.0, 2.0]), 10.0)


@pytest.mark.parametrize(("kwargs", "message"), [
    ({"ratio": 0.0}, r"^ratio: 0 is not a positive number$"),
    ({"u_ratio": -1.0}, r"^u_ratio: -1 is not a number ≥ 0$"),
    ({"u_au": -0.1}, r"^u_au: -0\.1 AU is not a number ≥ 0$"),
])
def test_bad_cell_options(wl_grid, kwargs, message) -> None:
    """Bad ratio or uncertainties are refused, naming the value."""
    with pytest.raises(ms.InputError, match=message):
        ms.cell_blank(ms.make_spectra(np.zeros(wl_grid.size), wl_grid), **kwargs)


def test_blank_with_a_missing_reading_is_refused(wl_grid) -> None:
    """A hole in the blank would put a hole in every sample: refused, naming λ and scan."""
    values = np.zeros(wl_grid.size)
    values[3] = np.nan
    with pytest.raises(ms.InputError, match=r"cell blank: scan 1 has no reading at 415 nm"):
        ms.cell_blank(ms.make_spectra(values, wl_grid))


# --- command line -------------------------------------------------------------------------


def read_conc(path) -> pd.DataFrame:
    """Results CSV → concentration table (sample × component)."""
    table = pd.read_csv(path, comment="#", keep_default_na=False, dtype={"sample_flags": str})
    return table.pivot(index="sample", columns="component", values="concentration")


def test_cli_cell_blank_and_ratio(tmp_path, cli) -> None:
    """--cell-blank FILE and --cell-ratio R±U recover the mixtures read in a mismatched cell,
    and the budget lists the cell terms."""
    lib = write_library_file(tmp_path / "lib.nc")
    read = {n: 1.03 * mixture_absorbance(m) + window_absorbance(WL) for n, m in MIXTURES.items()}
    spectra = write_wide(tmp_path / "mix.csv", read)
    blank = write_wide(tmp_path / "blank.csv",
                       {f"scan{i}": window_absorbance(WL) + 1e-4 * (i - 1) for i in range(3)})
    run = cli("unmix", lib, spectra, "--method", "ols", "--cell-blank", blank,
              "--cell-ratio", "1.03±0.002", "--out", tmp_path / "r.csv",
              "--budget", tmp_path / "b.csv")
    assert run.exit_code == 0, run.output
    conc = read_conc(tmp_path / "r.csv")
    for name, mix in MIXTURES.items():
        for comp in BANDS:
            assert conc.loc[name, comp] == pytest.approx(mix[comp], rel=1e-3)
    budget = pd.read_csv(tmp_path / "b.csv", comment="#")
    ratio_rows = budget[budget["source"] == "cell_ratio"]
    assert np.all(ratio_rows["contribution"] > 0)
    assert np.all(budget[budget["source"] == "cell_blank"]["contribution"] > 0)


def test_cli_wavelength_offset_corrects_a_shifted_instrument(tmp_path, cli) -> None:
    """Spectra recorded by an instrument reading 0.8 nm high (A_read(λ) = A(λ − 0.8)) are
    fitted better after --wavelength-offset 0.8."""
    wl = np.arange(400.0, 701.0, 2.0)
    fine_lib = write_library_file(tmp_path / "fine.nc", wl=wl)
    spectra = write_wide(tmp_path / "mix.csv",
                         {n: mixture_absorbance(m, wl - 0.8) for n, m in MIXTURES.items()}, wl)
    base = ["unmix", fine_lib, spectra, "--method", "ols", "--window", "420-680"]
    raw = cli(*base, "--out", tmp_path / "raw.csv")
    fixed = cli(*base, "--wavelength-offset", "0.8", "--out", tmp_path / "fixed.csv")
    assert raw.exit_code == 0 and fixed.exit_code == 0, (raw.output, fixed.output)
    truth = pd.DataFrame(MIXTURES).T
    err_raw = np.abs(read_conc(tmp_path / "raw.csv") / truth - 1).to_numpy().max()
    err_fixed = np.abs(read_conc(tmp_path / "fixed.csv") / truth - 1).to_numpy().max()
    assert err_fixed < 1e-3 < err_raw


@pytest.mark.parametrize(("args", "message"), [
    (["--cell-ratio", "abc"], "error: --cell-ratio: 'abc' is not a number or NUMBER±U"),
    (["--wavelength-offset", "0.4±x"], "error: --wavelength-offset: '0.4±x' is not a number"),
    (["--cell-blank", "missing.csv"], "missing.csv"),
])
def test_cli_bad_corrections(tmp_path, args, message, cli) -> None:
    """Bad correction options: exit 2, one error line, nothing written."""
    lib = write_library_file(tmp_path / "lib.nc")
    spectra = write_wide(tmp_path / "mix.csv")
    run = cli("unmix", lib, spectra, "--out", tmp_path / "r.csv", *args)
    assert_cli_error(run, message, literal=True, must_not_exist=[tmp_path / "r.csv"])


def test_cli_offset_uncertainty_replaces_the_tolerance_in_the_budget(tmp_path, cli) -> None:
    """--wavelength-offset 0.8±0.05 with a cell blank: the budget's wavelength input is
    u = 0.05 nm (normal), and the shifted blank still covers the shifted spectra."""
    wl = np.arange(400.0, 701.0, 2.0)
    lib = write_library_file(tmp_path / "fine.nc", wl=wl)
    read = {n: mixture_absorbance(m, wl - 0.8) + window_absorbance(wl)
            for n, m in MIXTURES.items()}
    spectra = write_wide(tmp_path / "mix.csv", read, wl)
    blank = write_wide(tmp_path / "blank.csv", {"b": window_absorbance(wl)}, wl)
    run = cli("unmix", lib, spectra, "--method", "ols", "--window", "420-680",
              "--cell-blank", blank, "--wavelength-offset", "0.8±0.05",
              "--budget", tmp_path / "b.csv")
    assert run.exit_code == 0, run.output
    budget = pd.read_csv(tmp_path / "b.csv", comment="#")
    rows = budget[budget["source"] == "wavelength"]
    assert np.allclose(rows["input_uncertainty"], 0.05)
    assert set(rows["distribution"]) == {"normal"}
    assert "cell_blank" in run.stdout  # a single blank scan: not stated, and said so


# --- one path for the data ------------------------------------------------------------------


def test_unmix_files_reads_each_file_once_then_corrects_fits_and_reports(tmp_path,
                                                                        monkeypatch) -> None:
    """Every input file is read once, by the file workflow; the corrections are made in
    core (correct_spectra) on the spectra as read, and the budget module reads nothing."""
    import ast
    import inspect

    from mixsolve.workflows import measurement, unmix_files

    lib = write_library_file(tmp_path / "lib.nc")
    spectra = write_wide(tmp_path / "mix.csv")
    blank = write_wide(tmp_path / "blank.csv", {"b": window_absorbance(WL)})
    scans = write_wide(tmp_path / "scans.csv", {f"s{i}": window_absorbance(WL) + 1e-4 * i
                                                for i in range(3)})
    reads: list[str] = []
    real = unmix_files.read_spectra

    def counted(path, *args, **kwargs):
        reads.append(str(path))
        return real(path, *args, **kwargs)

    monkeypatch.setattr(unmix_files, "read_spectra", counted)
    result = unmix_files.unmix_files(
        lib, spectra, method="ols", window=(420.0, 680.0), measurement={
            "cell_blank": blank, "cell_ratio": "1.01±0.001", "wavelength_offset": "0.2±0.05",
            "repeat_scans": scans, "budget": tmp_path / "b.csv", "pathlength_u": 0.001})
    assert sorted(reads) == sorted(map(str, (spectra, blank, scans)))
    assert result.attrs["budget_noise_from"] == "repeat scans"
    assert float(result["budget_input_uncertainty"].sel(source="pathlength").max()) == 0.001
    imported = {node.module for node in ast.walk(ast.parse(inspect.getsource(measurement)))
                if isinstance(node, ast.ImportFrom)}
    assert not any(str(m).startswith("mixsolve.io") for m in imported), imported


def test_measurement_options_carry_one_budget_inputs_record() -> None:
    """The budget's settings travel as one BudgetInputs, given by field name or by the
    name of their command-line option; without a budget file they are refused."""
    from mixsolve.uncertainty.inputs import BudgetInputs
    from mixsolve.workflows.measurement import MeasurementOptions, measurement_options

    by_option = measurement_options({"budget": "b.csv", "pathlength_u": 0.01, "carryover": 5,
                                     "fill_volume": None, "stray": 1e-4, "dilution": "1/10"})
    by_field = measurement_options({"budget": "b.csv", "pathlength_u_cm": 0.01,
                                    "carryover_ul": 5, "stray_fraction": 1e-4,
                                    "dilution": "1/10"})
    assert isinstance(by_option.inputs, BudgetInputs)
    assert by_option.inputs.changed() == by_field.inputs.changed() == [
        "pathlength_u_cm", "dilution", "carryover_ul", "stray_fraction"]
    assert by_option.inputs.fill_volume_ul == 3000.0
    with pytest.raises(ms.InputError, match=r"^--carryover: a budget setting; give --budget "):
        measurement_options({"carryover": 5})
    with pytest.raises(ms.InputError, match=r"^--repeat-scans: a budget setting"):
        MeasurementOptions(repeat_scans="scans.csv")
    with pytest.raises(ms.InputError, match=r"^measurement options: unknown colour$"):
        measurement_options({"colour": "red"})
