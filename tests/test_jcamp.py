"""JCAMP-DX reading (``mixsolve.io.jcamp``): the forms of the standard, its checks, units.

Files are written by ``helpers_jcamp`` (from the standard: McDonald & Wilks 1988, Appl.
Spectrosc. 42, 151, from memory) or encoded by hand below; none comes from an instrument
maker. Spectra are the invented two-band mixtures of ``helpers_io`` (synthetic).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from helpers_cli import assert_cli_error
from helpers_io import WL, mixture_columns, write_library_file, write_text, write_wide
from helpers_jcamp import dif, dup, jcamp_block, quantized, sqz, write_jcamp

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.jcamp import read_jcamp
from mixsolve.io.spectra_io import read_notes

#: Hand-encoded (X++(Y..Y)) in SQZ, DIF and DUP, on two lines with a Y check:
#: Y = 100, 120, 140, 160, 160, 160, 150, 150 (× YFACTOR 0.001) at 400, 410, ..., 470 nm.
#: Line 1 "400A00K0U": 400 = X; A00 = +100 (SQZ); K0 = +20 (DIF), U = that difference
#: three times in all -> 120, 140, 160; the line ends in DIF form, so line 2 starts with
#: the check value: "430A60" = X of point 4 and +160 again; then %T = difference 0 twice
#: (160, 160), j0 = -10 (150), % = 0 (150).
HAND = """##TITLE=hand encoded
##JCAMP-DX=4.24
##DATA TYPE=UV/VIS SPECTRUM
##XUNITS=NANOMETERS
##YUNITS=ABSORBANCE
##XFACTOR=1
##YFACTOR=0.001
##FIRSTX=400
##LASTX=470
##NPOINTS=8
##XYDATA=(X++(Y..Y))
400A00K0U   $$ a comment after the data
430A60%Tj0%
##END=
"""
HAND_Y = [0.100, 0.120, 0.140, 0.160, 0.160, 0.160, 0.150, 0.150]


def test_hand_encoded_difdup(tmp_path):
    da = ms.read_spectra(write_text(tmp_path / "hand.jdx", HAND))
    assert list(da["sample"].values) == ["hand encoded"]
    np.testing.assert_array_equal(da["wavelength"].values, np.arange(400.0, 471.0, 10.0))
    np.testing.assert_allclose(da.values[0], HAND_Y, rtol=1e-12)
    assert da.attrs["layout"] == "jcamp-dx"


def test_helper_encodes_as_by_hand():
    """The helper's SQZ/DIF/DUP letters agree with the hand encoding above."""
    assert (sqz(100), dif(20), dup(3), dif(0), dif(-10), sqz(160)) == \
        ("A00", "K0", "U", "%", "j0", "A60")
    assert (sqz(-25), sqz(0), dup(12), dif(-9)) == ("b5", "@", "S2", "r")


def test_y_check_failure_refused(tmp_path):
    broken = HAND.replace("430A60", "430A61")
    with pytest.raises(FileFormatError, match=r"^b\.jdx, line 13: Y check failed: the line "
                                              r"starts with 161 but the line before ended "
                                              r"with 160; the data are damaged"):
        read_jcamp(write_text(tmp_path / "b.jdx", broken))


def test_lost_line_fails_the_x_check_and_the_count(tmp_path):
    lines = HAND.splitlines()
    shifted = "\n".join([*lines[:12], "450A60%Tj0%", *lines[13:]]) + "\n"
    with pytest.raises(FileFormatError, match=r"^b\.jdx, line 13: X check failed: the line "
                                              r"starts at 450 but its first point should lie "
                                              r"at 430"):
        read_jcamp(write_text(tmp_path / "b.jdx", shifted))
    short = HAND.replace("##NPOINTS=8", "##NPOINTS=9").replace("##LASTX=470", "##LASTX=480")
    with pytest.raises(FileFormatError, match=r"^b\.jdx, line 10: ##NPOINTS=9 but 8 points were "
                                              r"read; the file is damaged or cut short$"):
        read_jcamp(write_text(tmp_path / "b.jdx", short))


@pytest.mark.parametrize("form", ["AFFN", "PAC", "SQZ", "DIFDUP"])
def test_every_xydata_form_reads_back(tmp_path, form):
    values = mixture_columns()["mix_1"]
    path = write_jcamp(tmp_path / "s.dx", {"mix_1": values}, WL, form=form, yfactor=1e-6,
                       per_line=7)
    da = ms.read_spectra(path)
    np.testing.assert_array_equal(da["wavelength"].values, WL)
    np.testing.assert_allclose(da.values[0], quantized(values), rtol=0, atol=1e-12)


def test_flat_runs_and_negative_values_difdup(tmp_path):
    """DUP of values and of differences, signs, zero: the decoder gives back the integers."""
    y = np.array([5, 5, 5, 5, -3, -3, 0, 0, 0, 12, 24, 36, 48, 48, -100, 7]) * 1e-3
    wl = np.arange(500.0, 500.0 + 2 * y.size, 2.0)
    path = write_jcamp(tmp_path / "flat.jdx", {"flat": y}, wl, yfactor=1e-3, per_line=5)
    np.testing.assert_allclose(read_jcamp(path)[0].values, y, rtol=0, atol=1e-12)


def test_xypoints_and_factors(tmp_path):
    values = mixture_columns()["mix_2"]
    path = write_jcamp(tmp_path / "p.jdx", {"p": values}, WL, form="XYPOINTS", xfactor=0.1,
                       yfactor=1e-4)
    da = ms.read_spectra(path)
    np.testing.assert_allclose(da["wavelength"].values, WL, rtol=1e-12)
    np.testing.assert_allclose(da.values[0], values, rtol=1e-12)


def test_descending_x_is_sorted(tmp_path):
    values = mixture_columns()["mix_1"]
    path = write_jcamp(tmp_path / "d.jdx", {"d": values[::-1]}, WL[::-1], form="AFFN")
    da = ms.read_spectra(path)
    np.testing.assert_array_equal(da["wavelength"].values, WL)
    np.testing.assert_allclose(da.values[0], quantized(values), atol=1e-12)


def test_link_block_with_several_spectra(tmp_path):
    columns = mixture_columns()
    path = write_jcamp(tmp_path / "both.jdx", columns, WL)
    da = ms.read_spectra(path)
    assert list(da["sample"].values) == ["mix_1", "mix_2"]
    np.testing.assert_allclose(da.values, quantized(np.vstack(list(columns.values()))),
                               atol=1e-12)


def test_transmittance_converted(tmp_path):
    """##YUNITS=TRANSMITTANCE: A = −log10 T (IUPAC Gold Book, "absorbance", seen)."""
    values = mixture_columns()["mix_1"]
    path = write_jcamp(tmp_path / "t.jdx", {"t": 10 ** -values}, WL, form="XYPOINTS",
                       yunits="TRANSMITTANCE")
    da = ms.read_spectra(path)
    assert da.attrs["quantity_read"] == "transmittance"
    np.testing.assert_allclose(da.values[0], values, rtol=1e-9)
    percent = write_jcamp(tmp_path / "pt.jdx", {"t": 100 * 10 ** -values}, WL,
                          form="XYPOINTS", yunits="TRANSMITTANCE")
    with pytest.raises(InputError, match=r"^pt\.jdx, line 1: ##YUNITS=TRANSMITTANCE but values "
                                         r"reach \d+\.\d+, not a fraction 0-1; if they are "
                                         r"percent, give quantity percent_transmittance$"):
        ms.read_spectra(percent)
    np.testing.assert_allclose(
        ms.read_spectra(percent, quantity="percent_transmittance").values[0], values, rtol=1e-9)
    with pytest.raises(InputError, match=r"^quantity: 'milliabsorbance', but t\.jdx, line 1 "
                                         r"says ##YUNITS=TRANSMITTANCE; leave quantity out"):
        ms.read_spectra(path, quantity="milliabsorbance")


@pytest.mark.parametrize("xunits, pattern", [
    ("MICROMETERS", r"##XUNITS=MICROMETERS: wavelengths in µm are not read"),
    ("SECONDS", r"##XUNITS=SECONDS is not a wavelength axis")])
def test_other_x_units_refused(tmp_path, xunits, pattern):
    path = write_jcamp(tmp_path / "x.jdx", {"x": mixture_columns()["mix_1"]}, WL,
                       xunits=xunits)
    with pytest.raises(InputError, match=r"^x\.jdx, line 4: " + pattern):
        ms.read_spectra(path)


def test_other_y_units_and_missing_units_refused(tmp_path):
    values = mixture_columns()["mix_1"]
    path = write_jcamp(tmp_path / "r.jdx", {"r": values}, WL, yunits="REFLECTANCE")
    with pytest.raises(InputError, match=r"^r\.jdx, line 1: ##YUNITS=REFLECTANCE cannot be read "
                                         r"as absorbance; mixsolve reads ##YUNITS=ABSORBANCE "
                                         r"or TRANSMITTANCE$"):
        ms.read_spectra(path)
    text = "\n".join(line for line in jcamp_block("n", WL, values) if "YUNITS" not in line)
    with pytest.raises(FileFormatError, match=r"^n\.jdx, line 1: ##YUNITS= is missing; add "
                                              r"##YUNITS=ABSORBANCE"):
        ms.read_spectra(write_text(tmp_path / "n.jdx", text))
    np.testing.assert_allclose(ms.read_spectra(tmp_path / "n.jdx", quantity="absorbance")
                               .values[0], quantized(values), atol=1e-12)


@pytest.mark.parametrize("text, pattern", [
    ("##TITLE=t\n##XYDATA=(X++(Y..Y))\n400 1\n", r"the block that starts on line 1 has no "
                                                  r"##END=; the file may be cut short$"),
    ("400 1\n", r"line 1: text before the first ##TITLE="),
    ("##TITLE=t\n##END=\n", r"no ##XYDATA= or ##XYPOINTS= block"),
    (HAND.replace("430A60%Tj0%", "430A60%Tj0!"), r"line 13: '!' at column 11 is not part of a "
                                                  r"JCAMP-DX number"),
    (HAND.replace("##FIRSTX=400\n", ""), r"line 1: ##FIRSTX= is missing"),
    (HAND.replace("##XUNITS=NANOMETERS\n", ""), r"line 1: ##XUNITS= is missing; add "
                                                 r"##XUNITS=NANOMETERS"),
    (HAND.replace("400A00K0U", "400K0U"), r"line 12: a DIF value with no value before it"),
])
def test_broken_files_refused(tmp_path, text, pattern):
    with pytest.raises((FileFormatError, InputError), match=r"^b\.jdx(, |: )" + pattern):
        ms.read_spectra(write_text(tmp_path / "b.jdx", text))


def test_missing_ordinate_is_nan(tmp_path):
    text = HAND.replace("430A60%Tj0%", "430A60%T?@").replace("##YFACTOR=0.001", "##YFACTOR=1")
    values = read_jcamp(write_text(tmp_path / "m.jdx", text))[0].values
    assert np.isnan(values[6]) and values[7] == 0


def test_empty_title_named_from_file(tmp_path):
    da = ms.read_spectra(write_text(tmp_path / "run_3.jdx", HAND.replace("hand encoded", "")))
    assert list(da["sample"].values) == ["run_3"]
    assert read_notes(da) == ["run_3.jdx, line 1: ##TITLE is empty; the spectrum is named "
                              "'run_3'"]


def test_round_trip_equals_csv_run(tmp_path, cli):
    """Acceptance (issue 16): a folder of JCAMP-DX files (written by the test helper) unmixes
    to the same results as the CSV table holding the same numbers."""
    lib = write_library_file(tmp_path / "lib.nc")
    columns = {n: quantized(v) for n, v in mixture_columns(noise_au=1e-3).items()}
    write_wide(tmp_path / "spectra.csv", columns)
    folder = tmp_path / "jdx"
    folder.mkdir()
    for name, values in columns.items():
        write_jcamp(folder / f"{name}.jdx", {name: values}, WL, form="DIFDUP", per_line=8)
    cli.ok("unmix", str(lib), str(tmp_path / "spectra.csv"), "--out", str(tmp_path / "a.csv"))
    result = cli.ok("unmix", str(lib), str(folder), "--out", str(tmp_path / "b.csv"))
    a, b = (pd.read_csv(tmp_path / name, comment="#") for name in ("a.csv", "b.csv"))
    pd.testing.assert_frame_equal(a, b, check_exact=False, rtol=1e-12)
    assert "concentration" in a.columns and len(a) == 4
    assert result.stdout


def test_bad_jcamp_on_the_command_line(tmp_path, cli):
    lib = write_library_file(tmp_path / "lib.nc")
    bad = write_text(tmp_path / "bad.jdx", HAND.replace("430A60", "430A61"))
    assert_cli_error(cli("unmix", str(lib), str(bad), "--out", str(tmp_path / "r.csv")),
                     r"^error: bad\.jdx, line 13: Y check failed")


def test_dup_count_beyond_npoints_refused_before_expanding(tmp_path):
    text = HAND.replace("430A60%Tj0%", "430A60%s99999999999")
    with pytest.raises(FileFormatError, match=r"^b\.jdx, line 13: a DUP count of 999999999999 "
                                              r"runs past ##NPOINTS; the data are damaged$"):
        read_jcamp(write_text(tmp_path / "b.jdx", text))


def test_jcamp_recognised_by_content_not_a_hash_comment(tmp_path):
    """A .txt starting with ##TITLE= is JCAMP-DX; a table opening with '## ...' is a table."""
    da = ms.read_spectra(write_text(tmp_path / "export.txt", HAND))
    np.testing.assert_allclose(da.values[0], HAND_Y, rtol=1e-12)
    table = ms.read_spectra(write_text(tmp_path / "t.csv", "## exported\nnm,s1\n400,0.1\n"))
    assert list(table["sample"].values) == ["s1"]
