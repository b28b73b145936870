"""Scale: spectra of any shape, dask-backed (lazy) unmixing, cubes on disk, clusters, CLI.

All spectra are invented (Gaussian bands, seeded noise). Lazy results are compared with
eager ones computed from the same numbers, so no reference value is involved.
"""

from __future__ import annotations

import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from helpers_cli import assert_cli_error

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError, OutputError
from mixsolve.flags import STATUS_CODES
from mixsolve.io.cubes import chunk_plan
from mixsolve.solve.sample_checks import runs_test

WL = np.arange(400.0, 701.0, 5.0)
#: Invented bands (height L/(mol*cm), centre nm, width nm).
BANDS = {"ochre": (1.1e4, 450.0, 28.0), "plum": (0.9e4, 530.0, 30.0),
         "jade": (1.3e4, 610.0, 26.0)}


def _eps() -> np.ndarray:
    return np.vstack([h * np.exp(-0.5 * ((WL - c) / w) ** 2) for h, c, w in BANDS.values()])


@pytest.fixture(scope="module")
def library() -> xr.Dataset:
    """Three invented components on 400-700 nm, 5 nm steps."""
    da = xr.DataArray(_eps(), dims=("component", "wavelength"),
                      coords={"component": list(BANDS), "wavelength": WL})
    return ms.import_absorptivities(da, "L/(mol*cm)", molar_mass_g_per_mol={
        "ochre": 300.0, "plum": 410.0, "jade": 520.0})


def make_cube(shape: tuple[int, ...], seed: int = 7, dims: tuple[str, ...] = ("y", "x"),
              noise: float = 0.004) -> xr.DataArray:
    """An image cube (dims + wavelength): random mixtures, some components absent, NaNs."""
    rng = np.random.default_rng(seed)
    conc = rng.uniform(0.0, 6e-5, (*shape, 3))
    conc[rng.random(conc.shape) < 0.25] = 0.0
    values = conc @ _eps() + noise * rng.standard_normal((*shape, WL.size)) + 0.01
    flat = values.reshape(-1, WL.size)
    flat[3, 5] = np.nan  # a missing reading
    flat[4, :] = 0.0  # a blank pixel
    return xr.DataArray(values, dims=(*dims, "wavelength"), coords={"wavelength": WL},
                        name="absorbance", attrs={"quantity": "absorbance"})


def assert_same(eager: xr.Dataset, other: xr.Dataset) -> None:
    """Same variables, dims, attrs and values (floats to 1e-12 relative, NaN = NaN).

    The residual is a − D·x: a last-bit difference in D·x (a product computed in other
    blocks) shows at the scale of the spectra, so it is compared to 1e-12 of that scale.
    """
    assert set(eager.data_vars) == set(other.data_vars)
    scale = float(np.nanmax(np.abs(eager["fitted"].values)))
    for name in eager.data_vars:
        a, b = eager[name], other[name].transpose(*eager[name].dims)
        assert a.dims == b.dims, name
        if a.dtype.kind == "f":
            np.testing.assert_allclose(a.values, b.values, rtol=1e-12,
                                       atol=1e-12 * scale if name == "residual" else 1e-18,
                                       err_msg=name)
        elif name == "flags":  # str, object or StringDType (read back from Zarr)
            np.testing.assert_array_equal(np.asarray(a.values, dtype=object).astype(str),
                                          np.asarray(b.values, dtype=object).astype(str))
        else:
            np.testing.assert_array_equal(a.values, b.values, err_msg=name)


# --- any shape ------------------------------------------------------------------------------

def test_image_cube_keeps_its_dims_and_equals_the_flat_fit(library: xr.Dataset) -> None:
    """A y × x cube gives results over (y, x, ...) equal to fitting the spectra as samples."""
    cube = make_cube((6, 7))
    result = ms.unmix(cube, library, baseline="offset")
    assert result["concentration"].dims == ("y", "x", "component")
    assert result["fitted"].dims == ("y", "x", "wavelength")
    assert result["flags"].dims == ("y", "x")
    flat = ms.make_spectra(cube.values.reshape(-1, WL.size), WL)
    by_sample = ms.unmix(flat, library, baseline="offset")
    np.testing.assert_allclose(result["concentration"].values.reshape(-1, 3),
                               by_sample["concentration"].values, rtol=1e-12)
    np.testing.assert_array_equal(result["flags"].values.ravel(), by_sample["flags"].values)
    assert "missing_readings" in result["flags"].values[0, 3]


def test_more_dims_and_wavelength_first(library: xr.Dataset) -> None:
    """Three other dims, wavelength stored first: results over the other dims, same values."""
    cube = make_cube((2, 3, 4), dims=("plate", "row", "col"))
    moved = cube.transpose("wavelength", ...)
    a = ms.unmix(cube, library)
    b = ms.unmix(moved, library)
    assert a["concentration"].dims == ("plate", "row", "col", "component")
    np.testing.assert_allclose(a["concentration"].values,
                               b["concentration"].transpose(*a["concentration"].dims).values)


def test_one_spectrum_without_other_dims(library: xr.Dataset) -> None:
    """A lone spectrum (dims only wavelength) gives scalars per component, and a table."""
    one = make_cube((2, 5))[0, 0]
    result = ms.unmix(one, library)
    assert result["concentration"].dims == ("component",)
    assert result["flags"].dims == ()
    table = ms.results_table(result)
    assert list(table["sample"]) == ["spectrum"] * 3


def test_results_table_of_a_cube(library: xr.Dataset) -> None:
    """Tidy table of a y × x result: sample labels 'y/x' and one column per dim."""
    result = ms.unmix(make_cube((3, 4)), library)
    table = ms.results_table(result)
    assert len(table) == 3 * 4 * 3
    assert list(table.columns[-2:]) == ["y", "x"]
    assert table["sample"].iloc[3] == "0/1"
    row = table[(table["y"] == 2) & (table["x"] == 3) & (table["component"] == "plum")]
    assert float(row["concentration"].iloc[0]) == pytest.approx(
        float(result["concentration"].sel(component="plum").values[2, 3]))


# --- flags and residual runs: vectorised forms against per-spectrum definitions --------------

def _flags_by_definition(result: xr.Dataset) -> np.ndarray:
    """docs/flags.md, spectrum by spectrum (the definition flags_of vectorises)."""
    comps = [str(c) for c in result["component"].values]
    status = result["status"].values.ravel()
    n = len(comps)
    at_zero = result["at_zero"].values.reshape(-1, n)
    conc = result["concentration"].values.reshape(-1, n)
    out = []
    for i in range(status.size):
        codes = [code for bit, code in STATUS_CODES.items() if status[i] & bit]
        codes += [f"at_zero:{c}" for c, z in zip(comps, at_zero[i], strict=True) if z]
        if result.attrs["method"] == "ols":
            codes += [f"negative:{c}" for c, v in zip(comps, conc[i], strict=True) if v < 0]
        out.append(";".join(codes))
    return np.array(out)


@pytest.mark.parametrize("method", ["nnls", "ols"])
def test_flags_of_equals_the_definition(library: xr.Dataset, method: str) -> None:
    """The vectorised flags equal the per-spectrum definition, and flags_of rebuilds them."""
    result = ms.unmix(make_cube((5, 6), noise=0.02), library, method=method, noise=0.004)
    want = _flags_by_definition(result)
    np.testing.assert_array_equal(result["flags"].values.ravel(), want)
    np.testing.assert_array_equal(ms.flags_of(result).values, result["flags"].values)
    assert any(";" in f for f in want)  # several codes on one spectrum occur


def test_block_checks_equal_whole_array_checks(library: xr.Dataset) -> None:
    """The trust figures computed block by block inside the fit equal those computed from
    the result's own residual, fitted and measured arrays (sample_checks definitions)."""
    from mixsolve.noise import noise_model
    from mixsolve.solve.sample_checks import absorbance_extent, lack_of_fit

    cube = make_cube((6, 7), noise=0.01)
    result = ms.unmix(cube, library, noise=0.004)
    z, p, lag1 = runs_test(result["residual"].values)
    np.testing.assert_allclose(result["runs_z"].values, z, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(result["runs_p"].values, p, rtol=1e-12, equal_nan=True)
    # a correlation in [-1, 1]: summed in another order by the compiled engine
    np.testing.assert_allclose(result["residual_lag1"].values, lag1, atol=1e-12,
                               equal_nan=True)
    a_max, a_min = absorbance_extent(cube.values)
    np.testing.assert_allclose(result["absorbance_max"].values, a_max)
    np.testing.assert_allclose(result["absorbance_min"].values, a_min)
    ratio, _ = lack_of_fit(result["residual"].values, result["fitted"].values,
                           result["dof"].values, noise_model(0.004))
    np.testing.assert_allclose(result["lack_of_fit_ratio"].values, ratio, rtol=1e-12)
    rms = np.sqrt(np.nanmean(result["residual"].values ** 2, axis=-1))
    np.testing.assert_allclose(result["rms_residual"].values, rms, rtol=1e-12)


# --- dask: lazy == eager ---------------------------------------------------------------------

@pytest.fixture
def dask_array() -> object:
    """dask.array, or skip."""
    return pytest.importorskip("dask.array")


@pytest.mark.parametrize("options", [
    {},
    {"baseline": "linear", "noise": 0.004},
    {"method": "ols", "unit": "mg/L"},
    {"weights": "noise", "noise": "diode_array"},
])
def test_lazy_equals_eager(library: xr.Dataset, dask_array: object,
                           options: dict[str, object]) -> None:
    """A dask-backed cube gives a lazy result (every per-spectrum variable a dask array,
    flags included) whose computed values equal the eager result."""
    cube = make_cube((6, 8))
    eager = ms.unmix(cube, library, **options)
    lazy = ms.unmix(cube.chunk({"y": 2, "x": 3}), library, **options)
    for name in ("concentration", "fitted", "residual", "status", "runs_p", "flags"):
        assert lazy[name].chunks is not None, name
    assert lazy["concentration"].chunks[:2] == ((2, 2, 2), (3, 3, 2))
    assert_same(eager, lazy.compute())


@pytest.mark.parametrize("options", [{}, {"fit_shift": True, "window": (420, 680)}])
def test_dask_compute_of_a_whole_result(library: xr.Dataset, dask_array: object,
                                        options: dict[str, object]) -> None:
    """dask.compute on the whole lazy result Dataset (not only result.compute()) gives the
    eager result: no variable is derived from another through xarray arithmetic, which
    loses graph keys in dask.compute with dask 2026.8 (xarray issue 11329)."""
    import dask

    cube = make_cube((4, 5))
    eager = ms.unmix(cube, library, **options)
    (computed,) = dask.compute(ms.unmix(cube.chunk({"y": 2}), library, **options))
    assert_same(eager, computed)


def test_lazy_shift_fit_equals_eager(library: xr.Dataset, dask_array: object) -> None:
    """The per-spectrum shift fit runs lazily too (its two extra outputs included)."""
    cube = make_cube((2, 3))
    eager = ms.unmix(cube, library, fit_shift=True, window=(420, 680))
    lazy = ms.unmix(cube.chunk({"x": 2}), library, fit_shift=True, window=(420, 680))
    assert lazy["wavelength_shift_nm"].chunks is not None
    assert_same(eager, lazy.compute())


def test_wavelength_split_across_chunks_is_refused(library: xr.Dataset,
                                                   dask_array: object) -> None:
    """Chunks along wavelength: one line naming the dimension and the fix."""
    cube = make_cube((2, 3)).chunk({"wavelength": 20})
    with pytest.raises(InputError, match=r"wavelength dimension spans several dask chunks; "
                                         r"rechunk with spectra.chunk\(\{'wavelength': -1\}\)"):
        ms.unmix(cube, library)


def test_local_cluster_on_loopback_equals_eager(library: xr.Dataset, tmp_path: Path, cli) -> None:
    """A dask.distributed LocalCluster (tcp on 127.0.0.1): unmix runs on it, same result."""
    distributed = pytest.importorskip("distributed")
    cube = make_cube((6, 8))
    eager = ms.unmix(cube, library, baseline="offset")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  protocol="tcp", host="127.0.0.1",
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        lazy = ms.unmix(cube.chunk({"y": 3}), library, baseline="offset")
        computed = lazy.compute()  # with a Client active this runs on the cluster
        assert client.run_on_scheduler(lambda dask_scheduler: len(dask_scheduler.tasks)) \
            is not None
        assert_same(eager, computed)
        ms.write_library(library, tmp_path / "lib.nc")
        ms.write_cube(cube.chunk({"y": 3}), tmp_path / "cube.zarr")
        run = cli("unmix", tmp_path / "lib.nc", tmp_path / "cube.zarr", "--baseline", "offset",
                  "--out", tmp_path / "res.nc", "--scheduler", cluster.scheduler_address)
        assert run.exit_code == 0, run.output
        table = cli("unmix", tmp_path / "lib.nc", tmp_path / "cube.zarr", "--baseline",
                    "offset", "--out", tmp_path / "res.csv", "--scheduler",
                    cluster.scheduler_address)
        assert table.exit_code == 0, table.output
    written = xr.open_dataset(tmp_path / "res.nc", engine="h5netcdf").load()
    assert_same(eager, written)
    rows = [r for r in (tmp_path / "res.csv").read_text().splitlines()
            if not r.startswith("#")]  # the provenance lines
    assert len(rows) == 1 + 6 * 8 * 3


# --- cubes on disk ---------------------------------------------------------------------------

@pytest.mark.parametrize("suffix", [".zarr", ".nc"])
def test_cube_round_trip(tmp_path: Path, dask_array: object, suffix: str) -> None:
    """write_cube then read_cube: same values, lazy, wavelength in one chunk."""
    pytest.importorskip("zarr")
    cube = make_cube((5, 6))
    path = tmp_path / f"cube{suffix}"
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # e.g. zarr's note on consolidated metadata
        assert ms.write_cube(cube.chunk({"y": 2}), path) == path
    back = ms.read_cube(path, chunk_spectra=12)
    assert back.chunks is not None and len(back.chunks[-1]) == 1
    assert back.attrs["source"] == path.name
    np.testing.assert_array_equal(back.values, cube.values)
    np.testing.assert_array_equal(back["wavelength"].values, WL)


@pytest.mark.parametrize("suffix", [".zarr", ".nc"])
def test_result_round_trip(library: xr.Dataset, tmp_path: Path, dask_array: object,
                           suffix: str) -> None:
    """A lazy result written to Zarr or netCDF reads back equal to the eager result,
    attrs and flag strings included; writing computes each chunk once."""
    pytest.importorskip("zarr")
    cube = make_cube((4, 6))
    eager = ms.unmix(cube, library, baseline="offset")
    path = tmp_path / f"result{suffix}"
    ms.write_cube(ms.unmix(cube.chunk({"y": 2}), library, baseline="offset"), path)
    back = (xr.open_zarr(path, consolidated=True) if suffix == ".zarr"
            else xr.open_dataset(path, engine="h5netcdf")).load()
    assert_same(eager, back)
    assert back.attrs["method"] == "nnls" and back.attrs["unit"] == eager.attrs["unit"]


def test_zarr_store_replaced_only_when_complete(library: xr.Dataset, tmp_path: Path,
                                               dask_array: object) -> None:
    """An existing store survives a failed write; a good write replaces it; no temporaries
    are left beside it."""
    pytest.importorskip("zarr")
    path = tmp_path / "out.zarr"
    ms.write_cube(make_cube((2, 3)), path)

    def boom(delayed: object) -> None:
        raise OSError(28, "No space left on device")

    with pytest.raises(OutputError, match=r"out.zarr: cannot write the store \(No space left"):
        ms.write_cube(make_cube((4, 4), seed=2), path, compute=boom)
    assert ms.read_cube(path).shape == (2, 3, WL.size)
    ms.write_cube(make_cube((4, 4), seed=2), path)
    assert ms.read_cube(path).shape == (4, 4, WL.size)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.zarr"]


def test_cube_errors_name_file_and_fix(tmp_path: Path, dask_array: object) -> None:
    """Missing file, no spectral variable, unknown output suffix: one-line errors."""
    with pytest.raises(FileFormatError, match=r"nope.zarr: file not found"):
        ms.read_cube(tmp_path / "nope.zarr")
    xr.Dataset({"a": ("t", [1.0, 2.0])}).to_netcdf(tmp_path / "other.nc", engine="h5netcdf")
    with pytest.raises(FileFormatError, match=r"other.nc: expected one variable with a "
                                              r"'wavelength' dimension, found 0"):
        ms.read_cube(tmp_path / "other.nc")
    with pytest.raises(OutputError, match=r"cube.h5: a cube is written as .zarr or .nc"):
        ms.write_cube(make_cube((2, 3)), tmp_path / "cube.h5")


def test_chunk_plan_keeps_wavelength_whole_and_rows_together() -> None:
    """About N spectra a chunk, trailing dims whole first, multiples of disk chunks."""
    plan = chunk_plan({"y": 1000, "x": 1000, "wavelength": 300}, 32768)
    assert plan == {"wavelength": -1, "x": 1000, "y": 32}
    plan = chunk_plan({"y": 1000, "x": 1000, "wavelength": 300}, 32768, {"y": 10})
    assert plan["y"] == 30
    assert chunk_plan({"sample": 50, "wavelength": 9}, 32768) == {"wavelength": -1,
                                                                   "sample": 50}


# --- command line ----------------------------------------------------------------------------

@pytest.fixture
def cube_files(library: xr.Dataset, tmp_path: Path) -> Path:
    """lib.nc and a small y × x cube.zarr in tmp_path."""
    pytest.importorskip("dask")
    pytest.importorskip("zarr")
    ms.write_library(library, tmp_path / "lib.nc")
    ms.write_cube(make_cube((6, 8)).chunk({"y": 3}), tmp_path / "cube.zarr")
    return tmp_path


def test_cli_zarr_in_zarr_out(cube_files: Path, library: xr.Dataset, cli) -> None:
    """mixsolve unmix LIB CUBE.zarr --out RESULT.zarr: exit 0, a summary on stdout, the
    result store equal to the eager fit."""
    out = cube_files / "result.zarr"
    run = cli("unmix", cube_files / "lib.nc", cube_files / "cube.zarr", "--out", out)
    assert run.exit_code == 0, run.output
    assert "Unmixed 6 × 8 spectra (y × x)" in run.stdout
    assert f"wrote {out}" in run.stderr
    written = xr.open_zarr(out, consolidated=True).load()
    assert_same(ms.unmix(make_cube((6, 8)), library), written)


def test_cli_cube_to_csv_and_local_workers(cube_files: Path, cli) -> None:
    """A cube into the tidy CSV (one row per pixel × component, y and x columns), run on
    a local cluster of one worker process (--workers 1)."""
    pytest.importorskip("distributed")
    out = cube_files / "result.csv"
    run = cli("unmix", cube_files / "lib.nc", cube_files / "cube.zarr", "--out", out,
              "--workers", "1")
    assert run.exit_code == 0, run.output
    lines = [r for r in out.read_text().splitlines() if not r.startswith("#")]
    assert lines[0].endswith(",sample_flags,u_noise,u_library,u_stray,y,x")
    assert len(lines) == 1 + 6 * 8 * 3


def test_cli_infinity_in_a_cube_on_local_workers(cube_files: Path) -> None:
    """An infinite reading found while a local cluster computes: exit 2, one line on
    stderr (the workers' own log of the failed task is silenced), no result store."""
    pytest.importorskip("distributed")
    cube = make_cube((4, 5))
    cube.values[1, 2, 7] = np.inf
    ms.write_cube(cube.chunk({"y": 2}), cube_files / "bad.zarr")
    out = cube_files / "bad-result.zarr"
    # a child process: the workers write to the terminal's stderr, which CliRunner does
    # not capture
    run = subprocess.run([sys.executable, "-c", "from mixsolve.cli import main; main()",
                          "unmix", str(cube_files / "lib.nc"), str(cube_files / "bad.zarr"),
                          "--out", str(out), "--workers", "1"],
                         capture_output=True, text=True, check=False, timeout=300)
    assert run.returncode == 2
    assert run.stderr.strip() == ("error: spectra: absorbance values include infinity; use "
                                  "NaN for a missing reading")
    assert not out.exists()


def test_cli_scale_errors_exit_2(cube_files: Path, cli) -> None:
    """Bad combinations are one line on stderr with exit code 2."""
    lib, cube = str(cube_files / "lib.nc"), str(cube_files / "cube.zarr")
    both = cli("unmix", lib, cube, "--workers", "2", "--scheduler", "tcp://127.0.0.1:1")
    assert_cli_error(both, r"^error: give either a scheduler address or a number of "
                           r"workers, not both$")
    report = cli("unmix", lib, cube, "--report", "r.html")
    assert_cli_error(report, "--report: not available for a cube", literal=True)
    missing = cli("unmix", lib, cube_files / "none.zarr")
    assert_cli_error(missing, "none.zarr: file not found", literal=True)
