"""A netCDF output that does not fit fails like any other output (issue 12, docs/errors.md
"Outputs"): exit 2, one ``error:`` line, no traceback, nothing left behind.

HDF5 writing straight to disk crashed the process (exit 139, hundreds of lines of h5py
errors) when a write failed midway. Each case here runs the command line in a real process
under a file-size limit (``ulimit -f``), so the failure is a real one, not a mock, and
checks that the folder (inputs and an earlier output of the same name) is byte for byte as
it was. The data are invented (helpers_io) or the invented demo files.
"""

from __future__ import annotations

import hashlib
import re
import shutil
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from types import SimpleNamespace

import pytest
from helpers_io import write_absorptivity_table, write_library_file, write_standards, write_wide

import mixsolve.io.cubes as cubes
from mixsolve.errors import OutputError
from mixsolve.io.cubes import write_cube
from mixsolve.io.library_store import read_library
from mixsolve.workflows.demo import demo_file

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX file-size limit")

#: The file-size limit of the limited runs (bytes): every netCDF file here is larger.
LIMIT = 2048
#: Run in the child before the command line; the streamed case lowers the in-memory bound.
IN_MEMORY = "pass"
STREAMED = "import mixsolve.io.cubes as c; c.NETCDF_IN_MEMORY_BYTES = 0"


def digests(folder: Path) -> dict[str, str]:
    """Every file in ``folder`` (name → SHA-256): a new file, ``.part`` or change shows."""
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


def run_limited(args: list[object], prelude: str = IN_MEMORY) -> subprocess.CompletedProcess:
    """``mixsolve ARGS`` in a child process whose files may not exceed ``LIMIT`` bytes."""
    import resource

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (LIMIT, LIMIT))

    return subprocess.run(
        [sys.executable, "-c", f"{prelude}; from mixsolve.cli import main; main()",
         *map(str, args)],
        capture_output=True, text=True, preexec_fn=limit, timeout=300)


def _library_import(folder: Path) -> tuple[list[object], Path]:
    table = write_absorptivity_table(folder / "eps.csv")
    out = folder / "lib.nc"
    return ["library", "import", table, "--absorptivity-unit", "L/(mol*cm)", "--out", out], out


def _library_build(folder: Path) -> tuple[list[object], Path]:
    spectra, sheet = write_standards(folder)
    out = folder / "L2.nc"
    return ["library", "build", spectra, "--standards", sheet, "--out", out], out


def _unmix(folder: Path) -> tuple[list[object], Path]:
    lib = write_library_file(folder / "lib.nc")
    spectra = write_wide(folder / "mix.csv")
    out = folder / "Y.nc"
    return ["unmix", lib, spectra, "--out", out], out


def _calibrate(folder: Path) -> tuple[list[object], Path]:
    spectra = Path(shutil.copy(demo_file("calibration_spectra.csv"), folder))
    reference = Path(shutil.copy(demo_file("calibration_reference.csv"), folder))
    out = folder / "m.nc"
    return ["calibrate", spectra, "--reference", reference, "--out", out], out


COMMANDS: dict[str, Callable[[Path], tuple[list[object], Path]]] = {
    "library import": _library_import, "library build": _library_build,
    "unmix cube": _unmix, "calibrate": _calibrate}


@pytest.mark.parametrize("earlier", [False, True], ids=["new", "earlier file"])
@pytest.mark.parametrize("command", list(COMMANDS))
def test_netcdf_output_over_the_file_size_limit_fails_cleanly(tmp_path, cli, command, earlier):
    """Libraries, models and small cubes are built in memory, then written in one plain
    write: over the limit, one line and exit 2; the folder is as it was."""
    args, out = COMMANDS[command](tmp_path)
    control = tmp_path / "control" / out.name  # the same run without a limit, elsewhere
    control.parent.mkdir()
    cli.ok(*args[:-1], control)
    assert control.stat().st_size > LIMIT  # else the limit would not bite
    shutil.rmtree(control.parent)
    if earlier:
        out.write_bytes(b"an earlier file of the same name\n")
    before = digests(tmp_path)

    proc = run_limited(args)

    assert proc.returncode == 2, proc.stderr[-2000:]
    assert "Traceback" not in proc.stderr and "h5py" not in proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, lines[:5]
    assert lines[0] == f"error: {out}: cannot write the file (File too large)"
    assert digests(tmp_path) == before  # inputs intact, no output, no .part, earlier kept


@pytest.mark.parametrize("earlier", [False, True], ids=["new", "earlier file"])
def test_streamed_cube_over_the_file_size_limit_is_refused_before_writing(tmp_path, cli,
                                                                          earlier):
    """A cube too big to build in memory streams to disk, where HDF5 cannot survive a failed
    write: it is refused beforehand when the file-size limit is below its size."""
    args, out = _unmix(tmp_path)
    if earlier:
        out.write_bytes(b"an earlier result\n")
    before = digests(tmp_path)

    proc = run_limited(args, prelude=STREAMED)

    assert proc.returncode == 2, proc.stderr[-2000:]
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1 and "Traceback" not in proc.stderr, lines[:5]
    assert lines[0].startswith(f"error: {out}: needs about ")
    assert lines[0].endswith(" but the file-size limit (ulimit -f) is 2.05 kB; raise the "
                             "limit or write a .zarr store (many smaller files)")
    assert digests(tmp_path) == before


def test_streamed_cube_without_free_space_is_refused_before_writing(tmp_path, monkeypatch):
    """The free-space half of that check: a disk with less room than the cube needs."""
    lib = read_library(write_library_file(tmp_path / "lib.nc"))
    before = digests(tmp_path)
    monkeypatch.setattr(cubes, "NETCDF_IN_MEMORY_BYTES", 0)
    monkeypatch.setattr(cubes.shutil, "disk_usage", lambda _: SimpleNamespace(free=1000))
    out = tmp_path / "cube.nc"
    with pytest.raises(OutputError, match=rf"^{re.escape(str(out))}: needs about 1(\.\d+)? MB "
                                          rf"but only 1 kB are free in "
                                          rf"{re.escape(str(tmp_path))}; free some space or "
                                          r"write to another disk$"):
        write_cube(lib["absorptivity"], out)
    assert digests(tmp_path) == before


def test_streamed_and_in_memory_cubes_are_the_same_file(tmp_path, monkeypatch):
    """Building a cube in memory changes nothing in the file: the same arrays, attributes
    and layout as one streamed to disk."""
    import xarray as xr

    lib = read_library(write_library_file(tmp_path / "lib.nc"))
    cube = lib["absorptivity"].chunk({"component": 1})
    write_cube(cube, tmp_path / "memory.nc")
    monkeypatch.setattr(cubes, "NETCDF_IN_MEMORY_BYTES", 0)
    write_cube(cube, tmp_path / "streamed.nc")
    with xr.open_dataset(tmp_path / "memory.nc", engine="h5netcdf") as a, \
            xr.open_dataset(tmp_path / "streamed.nc", engine="h5netcdf") as b:
        assert a.identical(b)
        assert a["absorptivity"].encoding.get("chunksizes") \
            == b["absorptivity"].encoding.get("chunksizes")
