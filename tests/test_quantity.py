"""What the numbers of a spectra file are: ``quantity`` / ``--quantity`` (mixsolve.spectra).

Readings in transmittance, percent transmittance or milliabsorbance are turned into
absorbance on reading; without the option, a file whose values cannot be absorbance is
refused with a line naming the likely quantity and the option (docs/formats.md, "What
the numbers are"; docs/errors.md).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error, assert_nothing_written

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.spectra import QUANTITIES, to_absorbance
from mixsolve.workflows.demo import demo_file

CHOICES = "'absorbance', 'transmittance', 'percent_transmittance', 'milliabsorbance'"


def readings(values, wl=(400.0, 500.0, 600.0)) -> xr.DataArray:
    """One or more spectra of raw readings, as a reader hands them over (no conversion)."""
    data = np.atleast_2d(np.asarray(values, dtype=float))
    return xr.DataArray(data, dims=("sample", "wavelength"),
                        coords={"sample": [f"s{i}" for i in range(len(data))],
                                "wavelength": list(wl)}, attrs={"source": "x.csv"})


# --- the definitions ----------------------------------------------------------------------


@pytest.mark.parametrize(("quantity", "reading", "absorbance"), [
    ("transmittance", 0.1, 1.0),            # A = -log10 T
    ("transmittance", 0.01, 2.0),
    ("transmittance", 1.0, 0.0),
    ("transmittance", 0.5, 0.30103),        # log10 2 = 0.30103
    ("percent_transmittance", 10.0, 1.0),   # A = 2 - log10 %T
    ("percent_transmittance", 1.0, 2.0),
    ("percent_transmittance", 100.0, 0.0),
    ("percent_transmittance", 50.0, 0.30103),
    ("milliabsorbance", 250.0, 0.25),       # 1 mAU = 0.001 AU
    ("milliabsorbance", 1500.0, 1.5),
    ("absorbance", 0.7, 0.7),
])
def test_hand_values(quantity, reading, absorbance):
    """IUPAC Gold Book, "absorbance" (from memory): decadic A = -log10 T = log10(I0/I);
    %T = 100 T, so A = 2 - log10 %T; mAU is 1/1000 AU (common practice); log10 2 =
    0.30103 (from memory)."""
    out = to_absorbance(readings([[reading] * 3]), quantity)
    assert out.values == pytest.approx(np.full((1, 3), absorbance), abs=5e-6)
    assert out.attrs["quantity"] == "absorbance"
    assert out.attrs["quantity_read"] == quantity


def test_round_trip_against_the_definitions():
    """A -> T = 10^-A (IUPAC Gold Book, "absorbance", from memory) -> back; %T = 100 T;
    mAU = 1000 A; the inverse written out here with math.log10, not the code's.
    Synthetic absorbances, seeded."""
    a = np.random.default_rng(15).uniform(-0.05, 3.0, size=(4, 3))
    written = {
        "transmittance": 10.0 ** -a,
        "percent_transmittance": 100.0 * 10.0 ** -a,
        "milliabsorbance": 1000.0 * a,
    }
    for quantity, values in written.items():
        back = to_absorbance(readings(values), quantity).values
        np.testing.assert_allclose(back, a, rtol=0, atol=1e-12, err_msg=quantity)
    t = written["transmittance"]
    by_hand = np.vectorize(lambda v: -math.log10(v))(t)
    np.testing.assert_allclose(to_absorbance(readings(t), "transmittance").values, by_hand,
                               rtol=1e-14)


def test_dark_readings_become_missing():
    """T <= 0 has no absorbance (-log10 0 is infinite): a missing reading (NaN), counted."""
    out = to_absorbance(readings([[0.0, -0.002, 0.5], [0.1, np.nan, 0.0]]), "transmittance")
    assert np.isnan(out.values[0, :2]).all() and np.isnan(out.values[1, 1:]).all()
    assert out.values[1, 0] == pytest.approx(1.0)
    assert out.attrs["dark_readings"] == 3  # the NaN read as such is not a dark reading


def test_dark_reading_flagged_missing_by_unmix(molar_library):
    """A dark reading reaches ``unmix`` as a missing reading and is flagged as one."""
    wl = molar_library["wavelength"].values
    t = np.full((1, wl.size), 0.5)
    t[0, 3] = 0.0
    spectra = ms.make_spectra(t, wl, quantity="transmittance")
    assert np.isnan(spectra.values[0, 3])
    result = ms.unmix(spectra, molar_library)
    assert "missing_readings" in str(result["flags"].values[0])


def test_make_spectra_takes_quantity():
    s = ms.make_spectra([[10.0, 100.0]], [500, 600], quantity="percent_transmittance")
    np.testing.assert_allclose(s.values, [[1.0, 0.0]], atol=1e-15)
    assert s.attrs["quantity_read"] == "percent_transmittance"
    assert ms.make_spectra([[0.1, 0.2]], [500, 600]).attrs["quantity_read"] == "absorbance"


# --- refusing values that cannot be absorbance --------------------------------------------


@pytest.mark.parametrize(("values", "message"), [
    ([[20.0, 50.0, 100.4]],
     r"^x\.csv: most readings are above 10 \(median 50\) and none above 110, which looks "
     r"like percent transmittance, not absorbance; give quantity='percent_transmittance' "
     r"\(or quantity='absorbance' if it really is\)$"),
    ([[3.0, 850.0, 1900.0]],
     r"^x\.csv: most readings are above 10 \(median 850, largest 1900\), which no absorbance "
     r"reading is; it looks like milliabsorbance \(mAU\): give quantity='milliabsorbance' "
     r"\(or quantity='absorbance' if it really is\)$"),
])
def test_refused_without_quantity(values, message):
    """Common practice: no photometer reads beyond about 4-6 AU, and a %T export is on a
    0-100 scale (a reading at the blank's level a little above 100)."""
    with pytest.raises(InputError, match=message):
        to_absorbance(readings(values))


def test_explicit_absorbance_never_refused():
    out = to_absorbance(readings([[20.0, 50.0, 90.0]]), "absorbance")
    np.testing.assert_array_equal(out.values, [[20.0, 50.0, 90.0]])


@pytest.mark.parametrize("values", [
    [[0.3, 0.8, 0.95]],      # fraction transmittance or a dilute sample: not guessed
    [[0.01, 2.5, 6.0]],      # absorbance, one reading high
    [[3.0, 8.0, 90.0]],      # %T of a dark sample, median below 10: not guessed
    [[np.nan, np.nan, np.nan]],
])
def test_ambiguous_values_read_as_absorbance(values):
    """Fraction transmittance (0-1) cannot be told from low absorbance, so it is not guessed
    (docs/formats.md); nor is anything whose median is not above 10."""
    out = to_absorbance(readings(values))
    np.testing.assert_array_equal(out.values, np.asarray(values))


def test_bad_quantity_lists_the_choices():
    with pytest.raises(InputError, match=rf"^quantity: 'percent' is not one of {CHOICES}$"):
        to_absorbance(readings([[0.1, 0.2, 0.3]]), "percent")  # type: ignore[arg-type]
    assert QUANTITIES == tuple(CHOICES.replace("'", "").split(", "))


# --- files --------------------------------------------------------------------------------


def demo_batches() -> pd.DataFrame:
    return pd.read_csv(demo_file("batches_spectra.csv"))


def written_as(path, quantity: str):
    """The demo's batch spectra written in another quantity (12 significant digits)."""
    frame = demo_batches()
    a = frame.iloc[:, 1:].to_numpy()
    values = {"percent_transmittance": 100.0 * 10.0 ** -a, "milliabsorbance": 1000.0 * a,
              "transmittance": 10.0 ** -a}[quantity]
    frame.iloc[:, 1:] = values
    frame.to_csv(path, index=False, float_format="%.12g")
    return path


def test_read_spectra_converts(tmp_path):
    absorbance = ms.read_spectra(demo_file("batches_spectra.csv"))
    for quantity in ("percent_transmittance", "milliabsorbance", "transmittance"):
        path = written_as(tmp_path / f"{quantity}.csv", quantity)
        read = ms.read_spectra(path, quantity=quantity)
        np.testing.assert_allclose(read.values, absorbance.values, rtol=0, atol=1e-10)
        assert read.attrs["quantity_read"] == quantity
        assert read.attrs["quantity"] == "absorbance"


def test_read_spectra_refuses_percent_transmittance(tmp_path):
    path = written_as(tmp_path / "samples.csv", "percent_transmittance")
    with pytest.raises(InputError, match=r"^samples\.csv: most readings are above 10 .* "
                       "looks like percent transmittance"):
        ms.read_spectra(path)
    with pytest.raises(InputError, match=rf"^quantity: 'T' is not one of {CHOICES}$"):
        ms.read_spectra(path, quantity="T")  # type: ignore[arg-type]


@pytest.fixture(scope="module")
def library_file(tmp_path_factory):
    """The demo's library, built from its synthetic standards by the command line."""
    from click.testing import CliRunner

    from mixsolve.cli import main

    out = tmp_path_factory.mktemp("quantity") / "library.nc"
    run = CliRunner().invoke(main, ["library", "build", str(demo_file("standards_spectra.csv")),
                                    "--standards", str(demo_file("standards.csv")),
                                    "--out", str(out)])
    assert run.exit_code == 0, run.output
    return out


def test_cli_percent_transmittance_refused_with_the_hint(tmp_path, cli, library_file):
    path = written_as(tmp_path / "samples.csv", "percent_transmittance")
    out = tmp_path / "results.csv"
    run = cli("unmix", library_file, path, "--out", out)
    line = assert_cli_error(run, must_not_exist=[out])
    median = np.median(100 * 10.0 ** -demo_batches().iloc[:, 1:].to_numpy())
    assert line == (f"error: samples.csv: most readings are above 10 (median {median:.3g}) "
                    "and none above 110, which looks like percent transmittance, not "
                    "absorbance; give --quantity percent_transmittance (or --quantity "
                    "absorbance if it really is)")
    assert_nothing_written(out)


@pytest.mark.parametrize("quantity", ["percent_transmittance", "milliabsorbance"])
def test_cli_results_match_the_absorbance_run(tmp_path, cli, library_file, quantity):
    """The acceptance line of issue 15: with --quantity, the results CSV equals the
    absorbance run's to the 6 significant digits written."""
    cli.ok("unmix", library_file, demo_file("batches_spectra.csv"), "--out",
           tmp_path / "a.csv")
    path = written_as(tmp_path / f"{quantity}.csv", quantity)
    run = cli.ok("unmix", library_file, path, "--quantity", quantity, "--out",
                 tmp_path / "q.csv")
    assert f"  readings      {quantity.replace('_', ' ')}, converted to absorbance" \
        in run.stdout  # the report says what the file held, and so does the HTML page
    cli.ok("unmix", library_file, path, "--quantity", quantity, "--report",
           tmp_path / "page.html")
    assert f"(read as {quantity.replace('_', ' ')}, converted to absorbance)" in \
        (tmp_path / "page.html").read_text(encoding="utf-8")
    expected = pd.read_csv(tmp_path / "a.csv", comment="#")
    got = pd.read_csv(tmp_path / "q.csv", comment="#")
    pd.testing.assert_frame_equal(got, expected)


def test_cli_explicit_absorbance_is_not_refused(tmp_path, cli, library_file):
    """--quantity absorbance reads the numbers as they are, however unlikely."""
    path = written_as(tmp_path / "odd.csv", "percent_transmittance")
    run = cli.ok("unmix", library_file, path, "--quantity", "absorbance")
    assert "looks like" not in run.output
    assert "above_range" in run.stdout  # read as 20-100 AU, and flagged as such


def test_cube_converted_lazily(tmp_path):
    """A cube in %T with quantity= is converted chunk by chunk (still dask-backed)."""
    absorbance = ms.read_spectra(demo_file("batches_spectra.csv"))
    percent = ms.read_spectra(written_as(tmp_path / "t.csv", "percent_transmittance"),
                              quantity="absorbance")
    ms.write_cube(percent.to_dataset(name="absorbance"), tmp_path / "t.nc")
    cube = ms.read_cube(tmp_path / "t.nc", quantity="percent_transmittance")
    assert cube.chunks is not None
    assert cube.attrs["quantity_read"] == "percent_transmittance"
    np.testing.assert_allclose(cube.values, absorbance.values, rtol=0, atol=1e-10)


def test_api_results_match_the_absorbance_run(tmp_path, library_file):
    lib = ms.read_library(library_file)
    expected = ms.unmix(ms.read_spectra(demo_file("batches_spectra.csv")), lib)
    path = written_as(tmp_path / "t.csv", "transmittance")
    got = ms.unmix(ms.read_spectra(path, quantity="transmittance"), lib)
    np.testing.assert_allclose(got["concentration"].values, expected["concentration"].values,
                               rtol=1e-8)
    np.testing.assert_array_equal(got["flags"].values, expected["flags"].values)


def test_cli_bad_quantity(tmp_path, cli, library_file):
    run = cli("unmix", library_file, demo_file("batches_spectra.csv"), "--quantity", "percent")
    line = assert_cli_error(run, "--quantity", "'percent' is not one of", literal=True)
    for choice in QUANTITIES:
        assert f"'{choice}'" in line


@pytest.mark.parametrize("command", [
    ["library", "build", "{spectra}", "--standards", str(demo_file("standards.csv")),
     "--out", "{out}"],
    ["calibrate", "{spectra}", "--reference", str(demo_file("calibration_reference.csv")),
     "--out", "{out}"],
    ["instrument", "repeatability", "{spectra}", "--out", "{out}"],
])
def test_every_reading_command_refuses_and_hints(tmp_path, cli, command):
    path = written_as(tmp_path / "spectra.csv", "percent_transmittance")
    out = tmp_path / "out.nc"
    args = [a.format(spectra=path, out=out) for a in command]
    assert_cli_error(cli(*args), "looks like percent transmittance",
                     "give --quantity percent_transmittance", literal=True,
                     must_not_exist=[out])


# --- plates -------------------------------------------------------------------------------


def well_columns(plate: xr.DataArray, path, quantity: str = "absorbance"):
    """A plate as a well-columns export (wavelength_nm, A1, A2, ...) in ``quantity``."""
    a = plate.values.T
    values = {"absorbance": a, "percent_transmittance": 100.0 * 10.0 ** -a}[quantity]
    frame = pd.DataFrame(values, columns=[str(w) for w in plate["well"].values])
    frame.insert(0, "wavelength_nm", plate["wavelength"].values)
    frame.to_csv(path, index=False, float_format="%.12g")
    return path


def test_plate_export_in_percent_transmittance(tmp_path, cli, library_file):
    plate = ms.read_plate(demo_file("plate_export.csv"))
    a_file = well_columns(plate, tmp_path / "plate_a.csv")
    t_file = well_columns(plate, tmp_path / "plate_t.csv", "percent_transmittance")
    read = ms.read_plate(t_file, quantity="percent_transmittance")
    np.testing.assert_allclose(read.values, plate.values, rtol=0, atol=1e-10)
    assert read.attrs["quantity_read"] == "percent_transmittance"
    with pytest.raises(InputError,
                       match=r"^plate_t\.csv: most readings are above 10 .* percent transmittance"):
        ms.read_plate(t_file)
    common = ["--layout", demo_file("plate_layout.csv"), "--window", "400-700",
              "--pathlength", "0.5"]
    refused = cli("plate", library_file, t_file, *common, "--out", tmp_path / "refused")
    assert_cli_error(refused, "give --quantity percent_transmittance", literal=True,
                     progress=True, must_not_exist=[tmp_path / "refused"])
    cli.ok("plate", library_file, a_file, *common, "--out", tmp_path / "a")
    cli.ok("plate", library_file, t_file, *common, "--quantity", "percent_transmittance", "--out",
           tmp_path / "t")
    expected = pd.read_csv(tmp_path / "a" / "plate_a" / "samples.csv")
    got = pd.read_csv(tmp_path / "t" / "plate_t" / "samples.csv")
    pd.testing.assert_frame_equal(got, expected)


def test_plate_dark_reading_is_a_marker(tmp_path):
    plate = ms.read_plate(demo_file("plate_export.csv"))
    path = well_columns(plate, tmp_path / "p.csv", "percent_transmittance")
    frame = pd.read_csv(path)
    frame.loc[0, "B2"] = 0.0
    frame.to_csv(path, index=False)
    read = ms.read_plate(path, quantity="percent_transmittance")
    assert np.isnan(read.sel(well="B2").values[0])
    first = float(frame["wavelength_nm"].iloc[0])
    assert [first, "dark"] in json.loads(read.attrs["markers"])["B2"]
