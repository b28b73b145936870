"""Bounded reading: inputs whose declared size is too large, and damaged library or model files.

Each bad file is built here, small: an XLSX whose zip directory declares a huge sheet, a
netCDF file declaring a 2·10⁹-long dimension with no data written, hand-made libraries and
models with one thing wrong each. Every case is refused before anything large is allocated,
with one line naming the file and the fix: in Python as a ``FileFormatError`` with a pinned
message; on the command line (``unmix LIB SPECTRA --out r.csv``, ``library show LIB``) as
exit code 2, one ``error:`` line, no traceback, no output, and every input byte-for-byte as
it was. The limits are docs/errors.md, "Size limits".
"""

from __future__ import annotations

import io
import shutil
import struct
import zipfile
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from helpers_cli import assert_cli_error
from helpers_io import (
    make_library,
    mixture_columns,
    wide_rows,
    write_library_file,
    write_wide,
    write_xlsx,
)

import mixsolve as ms
from mixsolve.errors import FileFormatError
from mixsolve.io import limits
from mixsolve.io.cubes import read_cube
from mixsolve.io.library_store import read_library
from mixsolve.io.model_store import read_model
from mixsolve.io.netcdf_store import declared_variables
from mixsolve.io.tables import read_table, xlsx_expanded_bytes
from mixsolve.workflows.demo import demo_file

HUGE = 2_000_000_000
"""Declared length (values) of the dimension of the oversized netCDF and Zarr files."""
LIBRARY_FIX = r"a library is written by `mixsolve library import` or `library build`"


def snapshot(*paths: Path) -> dict[Path, bytes]:
    """The bytes of every file (every file inside a folder) among ``paths``."""
    files = [f for p in paths for f in ([p] if p.is_file() else sorted(p.rglob("*")))
             if f.is_file()]
    return {f: f.read_bytes() for f in files}


def assert_refused(result, pattern: str, *, out: Path | None = None,
                   before: dict[Path, bytes] | None = None) -> None:
    """The one-line error matching ``pattern``, nothing written, inputs unchanged."""
    assert_cli_error(result, pattern, must_not_exist=[] if out is None else [out])
    for path, data in (before or {}).items():
        assert path.read_bytes() == data, path


# --- XLSX: refused on the declared uncompressed size, before parsing -------------------------


def set_declared_size(data: bytes, member: str, size: int) -> bytes:
    """A zip archive whose directory declares ``size`` bytes for ``member`` (data as before).

    Both records are patched: the central directory (uncompressed size at offset 24) and
    the member's local header (offset 22), as laid out in PKWARE's APPNOTE.TXT (seen).
    """
    buf = bytearray(data)
    name = member.encode()
    pos = buf.find(b"PK\x01\x02")
    while pos != -1:
        length = struct.unpack_from("<H", buf, pos + 28)[0]
        if bytes(buf[pos + 46:pos + 46 + length]) == name:
            struct.pack_into("<I", buf, pos + 24, size)
            local = struct.unpack_from("<I", buf, pos + 42)[0]
            struct.pack_into("<I", buf, local + 22, size)
            return bytes(buf)
        pos = buf.find(b"PK\x01\x02", pos + 4)
    raise KeyError(member)


@pytest.fixture
def never_opened(monkeypatch: pytest.MonkeyPatch) -> None:
    """Fail a test cleanly, rather than allocating gigabytes, if a workbook is parsed or
    a file named ``huge...`` is opened with xarray after all (the size checks come first)."""
    import openpyxl

    def refuse(*args: object, **kwargs: object) -> None:
        raise AssertionError("the file was opened before its size was checked")

    def guard(real: Callable[..., xr.Dataset]) -> Callable[..., xr.Dataset]:
        def opener(path: object, *args: object, **kwargs: object) -> xr.Dataset:
            if Path(str(path)).name.startswith("huge"):
                refuse()
            return real(path, *args, **kwargs)
        return opener

    monkeypatch.setattr(openpyxl, "load_workbook", refuse)
    for function in ("open_dataset", "open_zarr"):
        monkeypatch.setattr(xr, function, guard(getattr(xr, function)))


@pytest.fixture
def workbook(tmp_path: Path) -> Path:
    """A good one-sheet spectra workbook (31 wavelengths, two mixtures)."""
    cols = mixture_columns()
    return write_xlsx(tmp_path / "spectra.xlsx", ["wavelength_nm", *cols], wide_rows(cols))


@pytest.fixture
def library_file(tmp_path: Path) -> Path:
    return write_library_file(tmp_path / "lib.nc")


def test_xlsx_declaring_a_huge_sheet_is_refused_before_parsing(tmp_path, workbook,
                                                               library_file, never_opened, cli):
    """A 6 kB workbook whose sheet declares 1.4 GB: refused from the zip directory alone."""
    big = tmp_path / "huge.xlsx"
    big.write_bytes(set_declared_size(workbook.read_bytes(), "xl/worksheets/sheet1.xml",
                                      1_400_000_000))
    assert big.stat().st_size < 20_000
    message = (r"^huge\.xlsx: the workbook expands to 1\.4 GB of XML \(declared uncompressed "
               r"size\), more than the 200 MB an XLSX input may hold; save the sheet as CSV "
               r"or split the workbook$")
    with pytest.raises(FileFormatError, match=message):
        ms.read_spectra(big)
    out = tmp_path / "r.csv"
    before = snapshot(big, library_file)
    assert_refused(cli("unmix", library_file, big, "--out", out), message[1:].join(
        [r"^error: ", ""]), out=out, before=before)


def test_xlsx_limit_is_on_the_expanded_size_not_the_file_size(workbook, monkeypatch):
    """With the limit between the file's size and its XML's, the workbook is refused."""
    expanded = xlsx_expanded_bytes(workbook.read_bytes())
    assert workbook.stat().st_size < expanded
    assert read_table(workbook).rows  # read at the default limit
    limit = (workbook.stat().st_size + expanded) // 2
    monkeypatch.setattr(limits, "CAREFUL_MAX_BYTES", limit)
    with pytest.raises(FileFormatError, match=r"^spectra\.xlsx: the workbook expands to [\d.]+ "
                                              r"kB of XML .* more than the [\d.]+ kB an XLSX"):
        read_table(workbook)
    monkeypatch.setattr(limits, "CAREFUL_MAX_BYTES", expanded)
    assert read_table(workbook).rows  # the limit itself is allowed


def test_xlsx_whose_declared_size_understates_its_sheet_is_refused(tmp_path, workbook,
                                                                  library_file, cli):
    """A zip bomb that declares less than it holds: the zip reader stops at the declared
    size and the CRC check fails, so no more than the declared size is ever expanded."""
    liar = tmp_path / "liar.xlsx"
    liar.write_bytes(set_declared_size(workbook.read_bytes(), "xl/worksheets/sheet1.xml", 500))
    message = r"liar\.xlsx: not a readable XLSX workbook \(Bad CRC-32"
    with pytest.raises(FileFormatError, match="^" + message):
        ms.read_spectra(liar)
    out = tmp_path / "r.csv"
    assert_refused(cli("unmix", library_file, liar, "--out", out), "^error: " + message,
                   out=out, before=snapshot(liar, library_file))


def test_xlsx_that_is_not_a_zip_archive(tmp_path):
    """Zip magic then rubbish: the size check itself says the workbook is unreadable."""
    bad = tmp_path / "bad.xlsx"
    bad.write_bytes(b"PK\x03\x04" + b"\x00" * 64)
    with pytest.raises(FileFormatError, match=r"^bad\.xlsx: not a readable XLSX workbook"):
        read_table(bad)


# --- netCDF and Zarr: refused on declared sizes, before allocating ---------------------------


def huge_netcdf(path: Path, *, unlimited: bool = False, kind: str = "mixsolve-library",
                coordinate: bool = False, variable: str = "absorptivity",
                dims: tuple[str, str] = ("component", "wavelength")) -> Path:
    """A few-kB netCDF-4 file declaring a (2, 2·10⁹) float64 array; no value written.

    ``unlimited`` makes the long dimension unlimited and resizes it (HDF5 allocates chunks
    only when written, so the file stays small either way).
    """
    import h5netcdf

    with h5netcdf.File(path, "w") as f:
        if kind:
            f.attrs["mixsolve_kind"] = kind
        f.attrs["unit"] = "L/(mol*cm)"
        f.dimensions = {dims[0]: 2, dims[1]: None if unlimited else HUGE}
        f.create_variable(variable, dims, float, chunks=(1, 1_000_000))
        if coordinate:
            f.create_variable(dims[1], (dims[1],), float, chunks=(1_000_000,))
        if unlimited:
            f.resize_dimension(dims[1], HUGE)
    assert path.stat().st_size < 20_000
    return path


@pytest.mark.parametrize("unlimited", [False, True], ids=["fixed", "unlimited"])
def test_library_declaring_a_huge_dimension_is_refused(tmp_path, unlimited, never_opened, cli):
    """A 9 kB 'library' declaring 2·10⁹ wavelengths: refused from its header, exit 2."""
    lib = huge_netcdf(tmp_path / "huge.nc", unlimited=unlimited)
    assert declared_variables(lib)["absorptivity"].nbytes == 2 * HUGE * 8
    message = (r"huge\.nc: its arrays declare 32 GB \(absorptivity: component 2 × wavelength "
               r"2000000000\), more than the 200 MB a library file may hold; " + LIBRARY_FIX
               + "$")
    with pytest.raises(FileFormatError, match="^" + message):
        read_library(lib)
    spectra = write_wide(tmp_path / "mix.csv")
    out = tmp_path / "r.csv"
    before = snapshot(lib, spectra)
    assert_refused(cli("unmix", lib, spectra, "--out", out), "^error: " + message, out=out,
                   before=before)
    assert_refused(cli("library", "show", lib), "^error: " + message, before=before)


def test_huge_coordinate_is_refused_before_xarray_indexes_it(tmp_path, never_opened):
    """A declared wavelength coordinate counts too (xarray would read it whole to index it)."""
    lib = huge_netcdf(tmp_path / "huge_coord.nc", coordinate=True)
    with pytest.raises(FileFormatError, match=r"^huge_coord\.nc: its arrays declare 48 GB "
                                              r"\(absorptivity: "):
        read_library(lib)


def test_model_declaring_a_huge_dimension_is_refused(tmp_path, never_opened):
    """The same limit for PLS model files, with the model's fix."""
    path = huge_netcdf(tmp_path / "huge_model.nc", kind="mixsolve-pls-model",
                       variable="x_rotations", dims=("block", "wavelength"))
    with pytest.raises(FileFormatError, match=r"^huge_model\.nc: its arrays declare 32 GB "
                                              r"\(x_rotations: block 2 × wavelength 2000000000\),"
                                              r" more than the 200 MB a model file may hold; a "
                                              r"model is written by `mixsolve calibrate`$"):
        read_model(path)


def test_netcdf_limit_is_applied_and_a_normal_library_is_well_below(tmp_path, library_file,
                                                                    monkeypatch):
    """A real library reads at the default limit and is refused under a tiny one."""
    assert read_library(library_file).sizes["wavelength"] == 31
    monkeypatch.setattr(limits, "CAREFUL_MAX_BYTES", 1000)
    with pytest.raises(FileFormatError, match=r"^lib\.nc: its arrays declare 1\.\d+ kB "
                                              r"\(absorptivity: component 2 × wavelength 31\), "
                                              r"more than the 1 kB a library file"):
        read_library(library_file)


def huge_zarr(path: Path) -> Path:
    """A Zarr store declaring a 2·10⁹-long wavelength coordinate; no chunk written."""
    import zarr

    group = zarr.open_group(str(path), mode="w")
    group.create_array("absorbance", shape=(3, HUGE), chunks=(1, 1_000_000), dtype="f8",
                       dimension_names=("sample", "wavelength"))
    group.create_array("wavelength", shape=(HUGE,), chunks=(1_000_000,), dtype="f8",
                       dimension_names=("wavelength",))
    return path


@pytest.mark.parametrize("suffix", [".nc", ".zarr"])
def test_cube_with_a_huge_coordinate_is_refused(tmp_path, library_file, suffix,
                                                never_opened, cli):
    """Opening a cube reads its coordinates whole: a 2·10⁹-long one is refused first."""
    pytest.importorskip("dask")
    cube = tmp_path / f"huge_cube{suffix}"
    if suffix == ".zarr":
        pytest.importorskip("zarr")
        huge_zarr(cube)
    else:
        huge_netcdf(cube, kind="", coordinate=True, variable="absorbance",
                    dims=("sample", "wavelength"))
    message = (rf"huge_cube\{suffix}: its coordinates declare 16 GB \(wavelength: 2000000000 "
               r"values\), more than the 200 MB read into memory when a cube is opened \(its "
               r"absorbance is read in chunks, its coordinates whole\); keep only the wavelength "
               r"coordinate \(a dimension needs none\) or split the cube$")
    with pytest.raises(FileFormatError, match="^" + message):
        read_cube(cube)
    out = tmp_path / "r.csv"
    assert_refused(cli("unmix", library_file, cube, "--out", out), "^error: " + message,
                   out=out, before=snapshot(cube, library_file))


def test_a_large_lazy_cube_is_legitimate(tmp_path):
    """16 GB of absorbance with small coordinates opens lazily: nothing is refused."""
    pytest.importorskip("dask")
    import h5netcdf

    path = tmp_path / "big.nc"
    with h5netcdf.File(path, "w") as f:
        f.dimensions = {"sample": 1_000_000, "wavelength": 2000}
        f.create_variable("absorbance", ("sample", "wavelength"), float, chunks=(1000, 2000))
        f.create_variable("wavelength", ("wavelength",), float)[:] = np.arange(2000) + 300.0
    cube = read_cube(path)
    assert cube.chunks is not None and cube.shape == (1_000_000, 2000)


# --- library files validated fully on read --------------------------------------------------


def _set(var: str, make: Callable[[xr.DataArray], xr.DataArray]) -> Callable[[xr.Dataset],
                                                                                xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        return ds.assign({var: make(ds[var])})
    return change


def _attrs(**values: object) -> Callable[[xr.Dataset], xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        ds = ds.copy()
        for key, value in values.items():
            if value is None:
                del ds.attrs[key]
            else:
                ds.attrs[key] = value
        return ds
    return change


def _one_value(value: float, var: str = "absorptivity") -> Callable[[xr.Dataset], xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        ds = ds.copy(deep=True)
        ds[var][0, 3] = value
        return ds
    return change


def _molar_mass(value: float) -> Callable[[xr.Dataset], xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        ds = ds.copy(deep=True)
        ds["molar_mass_g_per_mol"][0] = value
        return ds
    return change


#: Hand-made library corruptions: what is changed, and the message (after "lib.nc: ").
LIBRARY_CASES: dict[str, tuple[Callable[[xr.Dataset], xr.Dataset], str]] = {
    "NaN absorptivity": (
        _one_value(np.nan),
        r"absorptivity of 'red' at 430 nm is nan; a library needs a finite value at every "
        r"wavelength \(leave the wavelength out or give the value\)$"),
    "infinite absorptivity": (
        _one_value(-np.inf), r"absorptivity of 'red' at 430 nm is -inf; a library needs"),
    "boolean absorptivity": (
        _set("absorptivity", lambda da: da > 1000),
        r"absorptivity holds true/false values \(bool\), not numbers; store it as "
        r"floating-point numbers$"),
    "string absorptivity": (
        _set("absorptivity", lambda da: da.astype(str)),
        r"absorptivity holds text \(<U\d+\), not numbers; store it as floating-point numbers$"),
    "extra dimension": (
        _set("absorptivity", lambda da: da.expand_dims(replicate=2, axis=2)),
        r"absorptivity has dims \(component, wavelength, replicate\); a library's are "
        r"\(component, wavelength\), one value per pair$"),
    "extra dimension elsewhere": (
        lambda ds: ds.assign(note=(("replicate",), [1.0, 2.0])),
        r"variable 'note' has dimension 'replicate'; a library holds arrays over component "
        r"and wavelength only$"),
    "missing unit": (
        _attrs(unit=None),
        r"no absorptivity unit \(attribute 'unit'\); a library states one of L/\(mol\*cm\), "
        r"L/\(g\*cm\)$"),
    "unknown unit": (
        _attrs(unit="furlong"),
        r"absorptivity unit 'furlong' is not one of L/\(mol\*cm\), L/\(g\*cm\)$"),
    "unit disagreeing with the concentration unit": (
        _attrs(concentration_unit="g/L"),
        r"attribute concentration_unit is 'g/L', which does not match the library unit "
        r"'L/\(mol\*cm\)' \(expected 'mol/L'\)$"),
    "absorptivity in another unit than the library's": (
        lambda ds: ds.assign(absorptivity=ds["absorptivity"].assign_attrs(units="L/(g*cm)")),
        r"absorptivity's attribute units is 'L/\(g\*cm\)', which does not match the library "
        r"unit 'L/\(mol\*cm\)' \(expected 'L/\(mol\*cm\)'\)$"),
    "string wavelengths": (
        lambda ds: ds.assign_coords(wavelength=[f"{w:g} nm" for w in ds["wavelength"].values]),
        r"the wavelengths hold text \('400 nm' \.\.\.\); give them as numbers in nm$"),
    "a model's kind": (
        _attrs(mixsolve_kind="mixsolve-pls-model"),
        r"not a mixsolve library \(a 'mixsolve-pls-model' file\); " + LIBRARY_FIX + "$"),
    "bad provenance JSON": (
        _attrs(provenance="{method: imported"),
        r"attribute provenance '\{method: imported' is not JSON text of an object "
        r"\(\{\.\.\.\}\); write it as such or remove it$"),
    "provenance JSON of a list": (
        _attrs(provenance="[1, 2]"), r"attribute provenance '\[1, 2\]' is not JSON text of"),
    "negative molar mass": (
        _molar_mass(-500.0), r"molar mass of 'red' is -500 g/mol"),
    "text molar masses": (
        _set("molar_mass_g_per_mol", lambda da: da.astype(str)),
        r"molar_mass_g_per_mol holds text \(<U\d+\), not numbers"),
    "duplicate component names": (
        lambda ds: ds.assign_coords(component=["red", "red"]),
        r"name 'red' appears twice; rename one$"),
    "no component names": (
        lambda ds: ds.drop_vars("component"),
        r"the component dimension has no coordinate; give the component names$"),
    "negative uncertainty": (
        _one_value(-1.0, "u_absorptivity"),
        r"u_absorptivity holds -1; an uncertainty is a number ≥ 0 \(NaN where not stated\)$"),
    "text bandwidth": (
        _attrs(bandwidth_nm="narrow"),
        r"attribute bandwidth_nm 'narrow' is not a positive number of nm \(NaN when not "
        r"stated\)$"),
    "newer format": (
        _attrs(format_version=7),
        r"library format 7 is newer than this mixsolve reads \(1\); update mixsolve$"),
}


def write_corrupt(path: Path, change: Callable[[xr.Dataset], xr.Dataset]) -> Path:
    """Write the invented library, changed, with xarray (bypassing write_library's check)."""
    change(make_library()).to_netcdf(path, engine="h5netcdf")
    return path


@pytest.mark.parametrize("case", list(LIBRARY_CASES))
def test_damaged_library_is_refused_in_python(tmp_path, case):
    """read_library raises FileFormatError with one line naming the file and the problem."""
    change, message = LIBRARY_CASES[case]
    lib = write_corrupt(tmp_path / "lib.nc", change)
    with pytest.raises(FileFormatError, match=r"^lib\.nc(, components)?: " + message) as info:
        read_library(lib)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("case", list(LIBRARY_CASES))
def test_damaged_library_is_refused_by_the_cli(tmp_path, case, cli):
    """unmix and library show: exit 2, one error line, no r.csv, the inputs unchanged."""
    change, message = LIBRARY_CASES[case]
    lib = write_corrupt(tmp_path / "lib.nc", change)
    spectra = write_wide(tmp_path / "mix.csv")
    out = tmp_path / "r.csv"
    before = snapshot(lib, spectra)
    pattern = r"^error: lib\.nc(, components)?: "
    if case == "a model's kind":  # unmix takes it for a model, and finds no model in it
        unmix_message = (r"not a complete PLS model \(it holds a library's 'absorptivity'\): no "
                         r"variable 'x_mean', 'x_scale', 'y_mean' \.\.\.; a model is written by "
                         r"`mixsolve calibrate`$")
    else:
        unmix_message = message
    assert_refused(cli("unmix", lib, spectra, "--out", out), pattern + unmix_message,
                   out=out, before=before)
    assert_refused(cli("library", "show", lib), pattern + message, before=before)


def test_the_good_library_passes_the_same_checks(tmp_path, cli):
    """The corruptions above start from a library that reads and unmixes cleanly."""
    lib = write_corrupt(tmp_path / "lib.nc", lambda ds: ds)
    spectra = write_wide(tmp_path / "mix.csv")
    assert cli("library", "show", lib).exit_code == 0
    assert cli("unmix", lib, spectra, "--out", tmp_path / "r.csv").exit_code == 0


def test_stored_arrays_in_another_order_are_put_in_order(tmp_path):
    """(wavelength, component) on disk reads as (component, wavelength), same values."""
    lib = write_corrupt(tmp_path / "lib.nc", lambda ds: ds.transpose("wavelength", "component"))
    back = read_library(lib)
    assert back["absorptivity"].dims == ("component", "wavelength")
    xr.testing.assert_allclose(back["absorptivity"], make_library()["absorptivity"])


def test_missing_optional_parts_are_not_stated(tmp_path, cli):
    """No u_absorptivity, molar masses or concentration unit: read as not stated (NaN) and
    derived from the unit, and the library shows."""
    lib = write_corrupt(tmp_path / "lib.nc", lambda ds: _attrs(concentration_unit=None, basis=None)(
        ds.drop_vars(["u_absorptivity", "molar_mass_g_per_mol"])))
    back = read_library(lib)
    assert np.isnan(back["u_absorptivity"].values).all()
    assert np.isnan(back["molar_mass_g_per_mol"].values).all()
    assert back.attrs["concentration_unit"] == "mol/L" and back.attrs["basis"] == "molar"
    assert cli("library", "show", lib).exit_code == 0


def test_check_library_refuses_the_same_in_memory():
    """The checks live in check_library, so a Dataset built in Python meets them too."""
    lib = make_library()
    lib["absorptivity"][1, 0] = np.nan
    with pytest.raises(ms.InputError, match=r"^library: absorptivity of 'blue' at 400 nm is nan"):
        ms.unmix(ms.make_spectra(np.ones((1, 31)), lib["wavelength"].values), lib)


# --- model files validated fully on read ----------------------------------------------------


@pytest.fixture(scope="module")
def model_path(tmp_path_factory) -> Path:
    from mixsolve.io.reference_io import read_reference

    spectra = ms.read_spectra(demo_file("calibration_spectra.csv"))
    model = ms.calibrate(spectra, read_reference(demo_file("calibration_reference.csv")),
                         folds=4, max_latent=4)
    path = tmp_path_factory.mktemp("model") / "model.nc"
    ms.write_model(model, path)
    return path


def _model_var(var: str, make: Callable[[np.ndarray], np.ndarray]
               ) -> Callable[[xr.Dataset], xr.Dataset]:
    def change(ds: xr.Dataset) -> xr.Dataset:
        ds = ds.copy(deep=True)
        ds[var].values = make(ds[var].values)
        return ds
    return change


#: Hand-made model corruptions and their messages (after "model.nc: ").
MODEL_CASES: dict[str, tuple[Callable[[xr.Dataset], xr.Dataset], str]] = {
    "missing array": (lambda ds: ds.drop_vars("x_mean"),
                      r"not a complete PLS model: no variable 'x_mean'"),
    "NaN mean": (_model_var("x_mean", lambda v: np.where(np.arange(v.size) == 2, np.nan, v)),
                 r"variable 'x_mean' holds a non-finite value \(nan\)"),
    "text loadings": (lambda ds: ds.assign(x_loadings=ds["x_loadings"].astype(str)),
                      r"variable 'x_loadings' holds text, not numbers"),
    "too many latent variables": (_model_var("n_latent", lambda v: v + 10),
                                  r"n_latent \[\d+\] must be whole numbers from 1 to 4"),
    "zero pathlength": (_attrs(pathlength_cm=0.0),
                        r"attribute pathlength_cm np\.float64\(0\.0\) is not a positive number"),
    "unknown unit": (_attrs(unit="bananas"), r"attribute unit: unknown unit 'bananas'"),
    "unit that is no concentration": (_attrs(unit="cm"),
                                      r"attribute unit: 'cm' is neither a concentration "
                                      r"nor a fraction"),
    "bad preprocessing JSON": (_attrs(preprocessing="{derivative"),
                               r"attribute preprocessing '\{derivative' is not JSON text of an "
                               r"object"),
}


@pytest.mark.parametrize("case", list(MODEL_CASES))
def test_damaged_model_is_refused(tmp_path, model_path, case, cli):
    """read_model and unmix MODEL SPECTRA: one line naming the file, the problem and the fix."""
    change, message = MODEL_CASES[case]
    path = tmp_path / "model.nc"
    with xr.open_dataset(model_path, engine="h5netcdf") as ds:
        change(ds.load()).to_netcdf(path, engine="h5netcdf")
    full = r"model\.nc: " + message + r".*; a model is written by `mixsolve calibrate`$"
    with pytest.raises(FileFormatError, match="^" + full):
        read_model(path)
    spectra = tmp_path / "test.csv"
    shutil.copy(demo_file("calibration_test_spectra.csv"), spectra)
    out = tmp_path / "r.csv"
    assert_refused(cli("unmix", path, spectra, "--out", out), "^error: " + full, out=out,
                   before=snapshot(path, spectra))


def test_good_model_still_predicts(tmp_path, model_path, cli):
    """The model the corruptions start from reads and predicts."""
    out = tmp_path / "r.csv"
    result = cli("unmix", model_path, demo_file("calibration_test_spectra.csv"), "--out", out)
    assert result.exit_code == 0, result.output
    assert out.exists()


def test_a_library_where_a_model_is_expected(library_file):
    """read_model on a library names both kinds and how a model is made."""
    with pytest.raises(FileFormatError, match=r"^lib\.nc: not a mixsolve PLS model \(a "
                                              r"'mixsolve-library' file\); a model is written "
                                              r"by `mixsolve calibrate`$"):
        read_model(library_file)


def test_xlsx_expanded_bytes_counts_the_xml_parts_only():
    """Media (not parsed) are left out; XML and relationship parts are counted."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as archive:
        archive.writestr("xl/worksheets/sheet1.xml", "x" * 1000)
        archive.writestr("_rels/.rels", "y" * 10)
        archive.writestr("xl/media/image1.png", b"z" * 5000)
    assert xlsx_expanded_bytes(buf.getvalue()) == 1010
