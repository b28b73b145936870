"""Several SPECTRA on the command line: files, folders, globs (issue 16, item 2).

Acceptance: a folder of one-spectrum files gives the same results as the equivalent wide
table (unmix, library build, calibrate). The comparison is against the run on the wide
table, which the rest of the suite checks against outside sources; the data are the
invented mixtures of ``helpers_io``/``helpers_pls`` (synthetic, seeded).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error, assert_nothing_written
from helpers_io import (
    STANDARDS,
    WL,
    fmt,
    mixture_absorbance,
    mixture_columns,
    write_library_file,
    write_standards,
    write_text,
    write_wide,
)
from helpers_pls import WL as PLS_WL
from helpers_pls import as_inputs, simulate

import mixsolve as ms


def _split(columns, folder, header="absorbance", wl=WL):
    """One file per spectrum: wavelength_nm and one generic value column."""
    folder.mkdir(exist_ok=True)
    for name, values in columns.items():
        lines = [f"wavelength_nm,{header}"] + [f"{fmt(w)},{fmt(v)}" for w, v in zip(
            wl, values, strict=True)]
        write_text(folder / f"{name}.csv", "\n".join(lines) + "\n")
    return folder


@pytest.fixture
def setup(tmp_path):
    columns = mixture_columns(noise_au=1e-3)
    return (write_library_file(tmp_path / "lib.nc"), write_wide(tmp_path / "wide.csv", columns),
            _split(columns, tmp_path / "cuvette"), tmp_path)


def test_unmix_folder_equals_wide_table(setup, cli):
    lib, wide, folder, tmp = setup
    cli.ok("unmix", lib, wide, "--out", tmp / "a.csv")
    run = cli.ok("unmix", lib, folder, "--out", tmp / "b.csv")
    pd.testing.assert_frame_equal(pd.read_csv(tmp / "a.csv", comment="#"),
                                  pd.read_csv(tmp / "b.csv", comment="#"))
    assert "note: mix_1.csv: one spectrum, named 'mix_1' from the file name (its column " \
           "header 'absorbance' is a generic word)" in run.stderr.splitlines()


def test_unmix_several_paths_and_a_glob(setup, cli):
    lib, wide, folder, tmp = setup
    cli.ok("unmix", lib, wide, "--out", tmp / "a.csv")
    cli.ok("unmix", lib, folder / "mix_1.csv", folder / "mix_2.csv", "--out", tmp / "b.csv")
    cli.ok("unmix", lib, str(folder / "mix_*.csv"), "--out", tmp / "c.csv")
    a = pd.read_csv(tmp / "a.csv", comment="#")
    pd.testing.assert_frame_equal(a, pd.read_csv(tmp / "b.csv", comment="#"))
    pd.testing.assert_frame_equal(a, pd.read_csv(tmp / "c.csv", comment="#"))


def test_output_inside_the_input_folder_refused(setup, cli):
    lib, _, folder, _ = setup
    out = folder / "results.csv"
    assert_cli_error(cli("unmix", lib, folder, "--out", out),
                     r"^error: .*results\.csv: lies inside .*cuvette, an input of this run; "
                     r"writing it would destroy input data")
    assert_nothing_written(out)


def test_output_over_one_of_the_inputs_refused(setup, cli):
    lib, _, folder, _ = setup
    assert_cli_error(cli("unmix", lib, str(folder / "mix_*.csv"), "--out", folder / "mix_2.csv"),
                     r"mix_2\.csv: is also an input of this run")


def test_swapped_arguments_refused(setup, cli):
    lib, wide, _, _ = setup
    assert_cli_error(cli("unmix", wide, lib),
                     r"^error: wide\.csv: not a readable netCDF file \(a spectra table or "
                     r"JCAMP-DX file, by its name\); a library is written by `mixsolve library "
                     r"import` or `library build`, and comes first: mixsolve unmix LIBRARY "
                     r"SPECTRA\.\.\.$")


def test_cube_among_tables_refused(setup, cli):
    lib, wide, _, tmp = setup
    assert_cli_error(cli("unmix", lib, wide, tmp / "cube.zarr"),
                     r"^error: spectra: a cube \(\.zarr, \.nc\) is read alone; give one cube, "
                     r"or spectra tables$")


def test_same_name_in_two_files_refused_on_the_command_line(setup, cli):
    lib, wide, folder, tmp = setup
    assert_cli_error(cli("unmix", lib, wide, folder / "mix_2.csv", "--out", tmp / "r.csv"),
                     r"^error: sample 'mix_2' is in both wide\.csv and mix_2\.csv; sample "
                     r"names must be unique across the files")
    assert_nothing_written(tmp / "r.csv")


def test_library_build_from_a_folder(tmp_path, cli):
    spectra, sheet = write_standards(tmp_path)
    columns = {s: mixture_absorbance({comp: c * 1e-3}) for s, (comp, c) in STANDARDS.items()}
    folder = _split(columns, tmp_path / "standards")
    cli.ok("library", "build", spectra, "--standards", sheet, "--out", tmp_path / "a.nc")
    run = cli.ok("library", "build", folder, "--standards", sheet, "--out", tmp_path / "b.nc")
    a, b = ms.read_library(tmp_path / "a.nc"), ms.read_library(tmp_path / "b.nc")
    xr.testing.assert_allclose(a["absorptivity"], b["absorptivity"], rtol=1e-12)
    assert "note: r1.csv: one spectrum, named 'r1'" in run.stderr


def test_calibrate_from_a_folder(tmp_path, cli):
    rng = np.random.default_rng(16)
    conc, absorbance = simulate(rng, 12)
    spectra, ref = as_inputs(conc, absorbance)
    ref.to_csv(tmp_path / "ref.csv", index=False)
    columns = {str(s): spectra.sel(sample=s).values for s in spectra["sample"].values}
    write_wide(tmp_path / "cal.csv", columns, wl=PLS_WL)
    folder = _split(columns, tmp_path / "cal", header="A", wl=PLS_WL)
    a = cli.ok("calibrate", tmp_path / "cal.csv", "--reference", tmp_path / "ref.csv",
               "--out", tmp_path / "a.nc", "--latent", "3")
    b = cli.ok("calibrate", folder, "--reference", tmp_path / "ref.csv",
               "--out", tmp_path / "b.nc", "--latent", "3")
    assert a.stdout == b.stdout
    ma, mb = ms.read_model(tmp_path / "a.nc"), ms.read_model(tmp_path / "b.nc")
    xr.testing.assert_allclose(ma["cv_predicted"], mb["cv_predicted"], rtol=1e-12)
