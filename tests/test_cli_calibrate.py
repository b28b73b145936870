"""`mixsolve calibrate` and `mixsolve unmix MODEL.nc` through click's CliRunner.

Files are written from the invented mixtures of helpers_pls (Gaussian bands, seeded noise).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from helpers_cli import assert_cli_error
from helpers_pls import COMPONENTS, WL, as_inputs, simulate

import mixsolve as ms


def write_inputs(folder, rng, n=20, prefix="cal", shift_per_rose=0.0):
    """Write a wide spectra CSV and a tidy reference CSV; return their paths."""
    spectra, ref = as_inputs(*simulate(rng, n, shift_per_rose=shift_per_rose), prefix=prefix)
    table = pd.DataFrame(spectra.values.T, columns=spectra["sample"].values)
    table.insert(0, "wavelength_nm", WL)
    spectra_path = folder / f"{prefix}_spectra.csv"
    table.to_csv(spectra_path, index=False)
    ref_path = folder / f"{prefix}_reference.csv"
    ref.to_csv(ref_path, index=False)
    return spectra_path, ref_path


@pytest.fixture
def files(tmp_path):
    """Calibration spectra and reference, and spectra of three new mixtures."""
    rng = np.random.default_rng(20261205)
    spectra, ref = write_inputs(tmp_path, rng)
    new, _ = write_inputs(tmp_path, rng, n=3, prefix="new")
    return tmp_path, spectra, ref, new


def test_calibrate_then_unmix_with_the_model(files, cli) -> None:
    folder, spectra, ref, new = files
    model_path = folder / "model.nc"
    res = cli("calibrate", spectra, "--reference", ref, "--out", model_path, "--folds", 5,
              "--max-latent", 6)
    assert res.exit_code == 0, res.output
    assert "RMSECV" in res.stdout and f"wrote {model_path}" in res.stderr
    model = ms.read_model(model_path)
    for k, comp in enumerate(COMPONENTS):
        assert f"{float(model['rmsecv'].values[k]):.4g}" in res.stdout, comp
    out = folder / "results.csv"
    res = cli("unmix", model_path, new, "--out", out)
    assert res.exit_code == 0, res.output
    assert res.stdout.startswith("Concentrations by PLS prediction")
    table = pd.read_csv(out, comment="#", keep_default_na=False)
    assert table["sample"].unique().tolist() == ["new_01", "new_02", "new_03"]
    assert list(table.columns[:8]) == ["sample", "component", "concentration",
                                       "std_uncertainty", "unit", "rms_residual_au", "dof",
                                       "sample_flags"]
    assert {"t2", "t2_limit_95", "q_residual", "q_limit_99"} <= set(table.columns)


def test_results_of_one_run_serve_as_reference(files, cli) -> None:
    folder, spectra, ref, _ = files
    model_path = folder / "model.nc"
    assert cli("calibrate", spectra, "--reference", ref, "--out", model_path,
               "--max-latent", 5).exit_code == 0
    results = folder / "self.csv"
    assert cli("unmix", model_path, spectra, "--out", results).exit_code == 0
    res = cli("calibrate", spectra, "--reference", results, "--out", folder / "again.nc",
              "--max-latent", 5)
    assert res.exit_code == 0, res.output


def test_compare_prints_cls_and_pls_and_plot_is_written(files, cli) -> None:
    folder, spectra, ref, _ = files
    plot = folder / "cal.png"
    res = cli("calibrate", spectra, "--reference", ref, "--out", folder / "m.nc", "--compare",
              "--latent", "3", "--mode", "pls2", "--plot", plot, "--window", "440-660",
              "--derivative", "5", "--scale", "autoscale", "--split", "random", "--seed", "4")
    assert res.exit_code == 0, res.output
    assert "CLS against PLS on the same folds" in res.stdout
    assert "Verdict:" in res.stdout
    assert "pls2, 3 latent variable(s) (as requested)" in res.stdout
    assert "Savitzky–Golay 1st derivative (5 points, order 2)" in res.stdout
    assert plot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(("edit", "match"), [
    (lambda r: r[r["sample"] != "cal_20"], r"no concentrations for spectra 'cal_20'"),
    (lambda r: r.assign(concentration=r["concentration"].astype(object).where(
        r.index != 4, "lots")), r"cal_reference.csv, line 6, column 3 \('concentration'\): "
                                r"'lots' is not a number"),
    (lambda r: r.drop(columns="unit"), r"missing column\(s\) unit"),
])
def test_bad_reference_is_exit_2_with_a_plain_message(files, edit, match, cli) -> None:
    folder, spectra, ref, _ = files
    edit(pd.read_csv(ref)).to_csv(ref, index=False)
    out = folder / "model.nc"
    res = cli("calibrate", spectra, "--reference", ref, "--out", out)
    assert_cli_error(res, match, must_not_exist=[out])
    assert not [p for p in folder.iterdir() if p.name.endswith(".part")]


@pytest.mark.parametrize(("args", "match"), [
    (["--latent", "many"], r"--latent: 'many' is not a whole number or 'auto'"),
    (["--folds", "50"], r"folds: 50 is not a whole number from 2 to \d+; at most one fold"),
    (["--window", "700-800"], r"window 700-800 nm holds 0 measured wavelength"),
])
def test_bad_calibrate_options(files, args, match, cli) -> None:
    folder, spectra, ref, _ = files
    res = cli("calibrate", spectra, "--reference", ref, "--out", folder / "m.nc", *args)
    assert_cli_error(res, match)


def test_unmix_with_a_model_refuses_library_options_and_short_spectra(files, cli) -> None:
    folder, spectra, ref, new = files
    model_path = folder / "model.nc"
    assert cli("calibrate", spectra, "--reference", ref, "--out", model_path,
               "--max-latent", 5).exit_code == 0
    res = cli("unmix", model_path, new, "--window", "450-600")
    assert_cli_error(res, "--window: does not apply to the PLS model model.nc", literal=True)
    short = pd.read_csv(new)
    short[short["wavelength_nm"] >= 500].to_csv(folder / "short.csv", index=False)
    res = cli("unmix", model_path, folder / "short.csv")
    assert_cli_error(res, "does not cover the model's 420-680 nm", literal=True)


def test_calibrate_with_groups_and_scatter_correction(files, cli) -> None:
    """A group column in the reference keeps each group in one fold; --scatter msc is stored
    in the model and repeated by `unmix MODEL.nc`."""
    folder, spectra, ref, new = files
    table = pd.read_csv(ref)
    table["group"] = [f"g{(int(s[-2:]) - 1) // 4}" for s in table["sample"]]
    table.to_csv(ref, index=False)
    model_path = folder / "model.nc"
    res = cli("calibrate", spectra, "--reference", ref, "--out", model_path, "--folds", 5,
              "--max-latent", 6, "--scatter", "msc")
    assert res.exit_code == 0, res.output
    assert "5 folds of whole groups (5 groups, never split), leave one group out" in res.stdout
    assert "multiplicative scatter correction" in res.stdout
    model = ms.read_model(model_path)
    assert "msc_reference" in model
    res = cli("unmix", model_path, new, "--out", folder / "out.csv")
    assert res.exit_code == 0, res.output


def test_calibrate_refuses_ppm_with_the_fix(files, cli) -> None:
    folder, spectra, ref, _ = files
    table = pd.read_csv(ref)
    table["unit"] = "ppm"
    table.to_csv(ref, index=False)
    assert_cli_error(cli("calibrate", spectra, "--reference", ref, "--out",
                         folder / "m.nc"), r"'ppm' does not say per what \(mass or volume\); "
                     r"say mg/L or mg/kg", must_not_exist=[folder / "m.nc"])
