"""Library files (mixsolve.io.library_store): round trip, refusals, atomic writes."""

from __future__ import annotations

import json
import os
import stat
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from helpers_io import (
    MOLAR_MASS,
    STANDARDS,
    absorptivity_frame,
    leftovers,
    make_library,
    write_standards,
    write_text,
)

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError, OutputError
from mixsolve.io.library_store import open_netcdf, read_library, write_library
from mixsolve.io.spectra_io import read_spectra
from mixsolve.io.standards_io import read_standards


@pytest.fixture
def library():
    """Imported library of the two invented components (molar masses, solvent, bandwidth)."""
    return make_library()


@pytest.fixture
def built_library(tmp_path):
    """Library built from the invented standards, with intercept and linearity figures."""
    spectra, sheet = write_standards(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ms.build_library(read_spectra(spectra), read_standards(sheet), intercept=True,
                                solvent="water", source="standards.csv")


# --- round trip --------------------------------------------------------------------------


def test_round_trip_imported(tmp_path, library):
    path = tmp_path / "lib.nc"
    assert write_library(library, path) == path
    back = read_library(path)
    xr.testing.assert_identical(back, library)
    np.testing.assert_array_equal(back["absorptivity"].values,
                                  absorptivity_frame().to_numpy().T)
    assert np.isnan(back["u_absorptivity"].values).all()
    assert back["absorptivity"].attrs["units"] == "L/(mol*cm)"
    assert back["u_absorptivity"].attrs["units"] == "L/(mol*cm)"
    assert back["wavelength"].attrs["units"] == "nm"
    assert back["molar_mass_g_per_mol"].attrs["units"] == "g/mol"
    assert dict(zip(back["component"].values, back["molar_mass_g_per_mol"].values,
                    strict=True)) == MOLAR_MASS
    assert back.attrs["mixsolve_kind"] == "mixsolve-library"
    assert (back.attrs["unit"], back.attrs["basis"], back.attrs["concentration_unit"]) == (
        "L/(mol*cm)", "molar", "mol/L")
    assert back.attrs["solvent"] == "water"
    assert back.attrs["bandwidth_nm"] == 2.0
    provenance = json.loads(back.attrs["provenance"])
    assert provenance["method"] == "imported table"
    assert provenance["source"] == "invented"
    assert provenance["unit_given"] == "L/(mol*cm)"
    assert provenance["mixsolve_version"] == ms.__version__


def test_round_trip_built(tmp_path, built_library):
    path = tmp_path / "built.nc"
    write_library(built_library, path)
    back = read_library(path)
    xr.testing.assert_identical(back, built_library)
    for name in ("n_standards", "n_levels", "r_squared", "residual_sd", "intercept",
                 "u_intercept", "concentration_min", "concentration_max"):
        assert name in back
    assert back["concentration_min"].attrs["units"] == "mol/L"
    assert back["intercept"].attrs["units"] == "AU"
    assert np.isnan(back.attrs["bandwidth_nm"])
    provenance = json.loads(back.attrs["provenance"])
    assert provenance["method"] == "built from standards"
    assert provenance["fit"] == "slope and intercept"
    assert provenance["standards"] == {
        "red": [s for s, (c, _) in STANDARDS.items() if c == "red"],
        "blue": [s for s, (c, _) in STANDARDS.items() if c == "blue"],
    }
    # the invented standards are exact: the stored absorptivity is the band itself
    np.testing.assert_allclose(back["absorptivity"].sel(component="red").max(), 2.0e4,
                               rtol=1e-9)


def test_round_trip_mass_basis(tmp_path):
    lib = ms.import_absorptivities(absorptivity_frame() / 1000.0, "mL/(mg*cm)")
    write_library(lib, tmp_path / "mass.nc")
    back = read_library(tmp_path / "mass.nc")
    assert back.attrs["unit"] == "L/(g*cm)"
    assert back.attrs["concentration_unit"] == "g/L"
    np.testing.assert_allclose(back["absorptivity"].values, absorptivity_frame().to_numpy().T
                               / 1000.0, rtol=1e-15)


def test_overwrite_replaces_file(tmp_path, library):
    path = tmp_path / "lib.nc"
    write_library(library, path)
    write_library(library.assign_attrs(solvent="ethanol"), path)
    assert read_library(path).attrs["solvent"] == "ethanol"
    assert leftovers(tmp_path) == []


def test_written_file_mode_follows_umask(tmp_path, library):
    old = os.umask(0o022)
    try:
        write_library(library, tmp_path / "lib.nc")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "lib.nc").stat().st_mode) == 0o644


# --- read refusals -----------------------------------------------------------------------


def test_read_csv_as_library(tmp_path):
    path = write_text(tmp_path / "eps.csv", "wavelength_nm,red\n400,1\n")
    with pytest.raises(FileFormatError,
                       match=r"^eps\.csv: not a readable netCDF file \(\w+\); a library is "
                             r"written by `mixsolve library import` or `library build`$"):
        read_library(path)


@pytest.mark.parametrize("content", [b"", b"\x89HDF\r\n\x1a\n" + b"\x00" * 40])
def test_read_empty_or_truncated_file(tmp_path, content):
    path = tmp_path / "broken.nc"
    path.write_bytes(content)
    with pytest.raises(FileFormatError, match=r"^broken\.nc: not a readable netCDF file"):
        read_library(path)


def test_read_other_netcdf(tmp_path):
    other = xr.Dataset({"temperature": (("time",), np.array([20.0, 21.5]))},
                       attrs={"title": "weather"})
    other.to_netcdf(tmp_path / "weather.nc", engine="h5netcdf")
    with pytest.raises(FileFormatError,
                       match=r"^weather\.nc: not a mixsolve library \(not written by "
                             r"mixsolve\)$"):
        read_library(tmp_path / "weather.nc")


def test_read_other_mixsolve_kind(tmp_path):
    model = xr.Dataset({"coef": (("x",), np.ones(2))}, attrs={"mixsolve_kind": "mixsolve-pls"})
    model.to_netcdf(tmp_path / "model.nc", engine="h5netcdf")
    with pytest.raises(FileFormatError,
                       match=r"^model\.nc: not a mixsolve library \(a 'mixsolve-pls' file\)$"):
        read_library(tmp_path / "model.nc")


def test_read_library_without_absorptivity(tmp_path, library):
    library.drop_vars("absorptivity").to_netcdf(tmp_path / "gutted.nc", engine="h5netcdf")
    with pytest.raises(InputError, match=r"^gutted\.nc: not a mixsolve library \(expected an "
                                         r"xarray\.Dataset with an 'absorptivity' variable"):
        read_library(tmp_path / "gutted.nc")


def test_read_missing_file(tmp_path):
    with pytest.raises(FileFormatError, match=r"absent\.nc: file not found$"):
        read_library(tmp_path / "absent.nc")


def test_read_folder(tmp_path):
    with pytest.raises(FileFormatError, match=r": is a folder, not a netCDF file$"):
        read_library(tmp_path)


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="needs /proc/self/fd")
def test_open_netcdf_loads_and_closes(tmp_path, library):
    path = tmp_path / "lib.nc"
    write_library(library, path)
    ds = open_netcdf(path)
    held = {os.path.realpath(os.path.join("/proc/self/fd", fd))
            for fd in os.listdir("/proc/self/fd")}
    assert os.path.realpath(path) not in held
    assert ds["absorptivity"].shape == (2, 31)


# --- failed writes leave no file ---------------------------------------------------------


def test_write_into_missing_folder(tmp_path, library):
    target = tmp_path / "no_such_folder" / "lib.nc"
    with pytest.raises(OutputError, match=r"lib\.nc: folder .*no_such_folder does not exist$"):
        write_library(library, target)
    assert not target.parent.exists()
    assert list(tmp_path.iterdir()) == []


def test_write_onto_a_folder(tmp_path, library):
    (tmp_path / "lib.nc").mkdir()
    with pytest.raises(OutputError, match=r"lib\.nc: is a folder; give a file name to write$"):
        write_library(library, tmp_path / "lib.nc")
    assert leftovers(tmp_path) == []


def test_write_not_a_library(tmp_path):
    with pytest.raises(InputError, match=r"^library: not a mixsolve library"):
        write_library(xr.Dataset({"x": (("t",), [1.0])}), tmp_path / "lib.nc")
    assert list(tmp_path.iterdir()) == []


def test_write_unserialisable_attribute_leaves_nothing(tmp_path, library):
    library.attrs["extra"] = {"nested": "dict"}
    with pytest.raises(TypeError, match="extra"):
        write_library(library, tmp_path / "lib.nc")
    assert list(tmp_path.iterdir()) == []


def test_write_failing_midway_leaves_nothing_and_keeps_old_file(tmp_path, library,
                                                               monkeypatch):
    path = tmp_path / "lib.nc"
    write_library(library, path)
    before = path.read_bytes()

    def half_write(self, data):  # the file, built in memory, meets a full disk
        with open(self, "wb") as fh:
            fh.write(bytes(data)[:100])
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Path, "write_bytes", half_write)
    with pytest.raises(OutputError, match=r"lib\.nc: cannot write the file \(No space left on "
                                          r"device\)$"):
        write_library(library.assign_attrs(solvent="other"), path)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["lib.nc"]
