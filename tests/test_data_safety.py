"""No run may delete, replace or write beside the user's files (docs/errors.md, "Outputs").

Each case drives the command line as a careless user would and asserts that every input
file is byte-for-byte intact afterwards, and that a refused or failed run left no output
(and no temporary file). The data are the invented demo files and small invented tables.
"""

from __future__ import annotations

import errno
import hashlib
import os
import resource
import shutil
import stat
import subprocess
import sys
from pathlib import Path

import pytest
from helpers_cli import assert_cli_error
from helpers_io import WL, band, write_wide

import mixsolve.io.outputs as outputs
from mixsolve.errors import OutputError
from mixsolve.io.outputs import (
    RECORD,
    all_or_nothing,
    guard_outputs,
    recorded_files,
    unique_names,
)
from mixsolve.io.results_io import write_text
from mixsolve.workflows.demo import demo_file


def snapshot(folder: Path) -> dict[str, str]:
    """Every file below ``folder`` (relative name → SHA-256), special files by their kind."""
    out = {}
    for path in sorted(folder.rglob("*")):
        rel = str(path.relative_to(folder))
        mode = os.lstat(path).st_mode
        if stat.S_ISREG(mode):
            out[rel] = hashlib.sha256(path.read_bytes()).hexdigest()
        elif not stat.S_ISDIR(mode):
            out[rel] = f"special {stat.S_IFMT(mode):o}"
    return out


@pytest.fixture(scope="module")
def library(tmp_path_factory, cli) -> Path:
    """The demo library, built once from the (invented) demo standards."""
    path = tmp_path_factory.mktemp("lib") / "library.nc"
    result = cli("library", "build", demo_file("standards_spectra.csv"), "--standards",
                 demo_file("standards.csv"), "--out", path)
    assert result.exit_code == 0, result.output
    return path


@pytest.fixture
def cuvette(tmp_path: Path, cli) -> dict[str, Path]:
    """A two-band library file and spectra in tmp_path, plus an unrelated notes file."""
    eps = write_wide(tmp_path / "eps.csv", {n: band(n) for n in ("red", "blue")})
    lib = tmp_path / "lib.nc"
    assert cli("library", "import", eps, "--absorptivity-unit", "L/(mol*cm)",
               "--out", lib).exit_code == 0
    spectra = write_wide(tmp_path / "mix.csv",
                         {"s1": 2e-5 * band("red") + 3e-5 * band("blue"),
                          "s2": 1e-5 * band("red") + 2e-5 * band("blue")})
    notes = tmp_path / "notes.txt"
    notes.write_text("my lab notes\n")
    return {"dir": tmp_path, "lib": lib, "spectra": spectra, "notes": notes, "eps": eps}


@pytest.fixture
def plate_dir(tmp_path: Path, library: Path) -> dict[str, Path]:
    """A folder with the demo plate export, its layout and a copy of the library."""
    folder = tmp_path / "plates"
    folder.mkdir()
    shutil.copy(demo_file("plate_export.csv"), folder / "run.csv")
    shutil.copy(demo_file("plate_layout.csv"), folder / "samples.csv")
    shutil.copy(library, folder / "lib.nc")
    return {"dir": folder, "export": folder / "run.csv", "layout": folder / "samples.csv",
            "lib": folder / "lib.nc"}


# --- 1. one output guard -------------------------------------------------------------


def test_zarr_out_over_a_folder_of_inputs_and_notes_is_refused(cuvette, cli):
    """`unmix LIB SPECTRA --out X.zarr`, X.zarr a folder holding the inputs and notes:
    refused (it used to replace the whole folder); everything stays."""
    store = cuvette["dir"] / "X.zarr"
    store.mkdir()
    for key in ("lib", "spectra", "notes"):
        shutil.copy(cuvette[key], store / cuvette[key].name)
    before = snapshot(cuvette["dir"])
    result = cli("unmix", store / "lib.nc", store / "mix.csv", "--out", store)
    assert_cli_error(result, "X.zarr", "choose", literal=True)
    assert snapshot(cuvette["dir"]) == before


def test_zarr_out_over_a_folder_of_other_files_is_refused(cuvette, cli):
    """A folder that is not a Zarr store is never replaced, even without inputs in it."""
    pytest.importorskip("zarr")
    store = cuvette["dir"] / "Y.zarr"
    store.mkdir()
    (store / "keep.txt").write_text("not mine\n")
    before = snapshot(cuvette["dir"])
    result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", store)
    assert_cli_error(result, "Y.zarr", "'keep.txt'", "not part of a Zarr store", literal=True)
    assert snapshot(cuvette["dir"]) == before


def test_zarr_out_replaces_an_earlier_result_store(cuvette, cli):
    """An earlier result store is a store: a second run replaces it (rc 0), nothing else."""
    pytest.importorskip("zarr")
    store = cuvette["dir"] / "result.zarr"
    for _ in range(2):
        result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", store)
        assert result.exit_code == 0, result.output
    assert (store / "zarr.json").exists()
    assert not [p for p in cuvette["dir"].iterdir() if p.name.startswith(".")]


@pytest.mark.parametrize("stem", ["..", ".", "...", "samples.csv", "", "a/b"])
def test_plate_subfolder_names_stay_inside_out(stem):
    """Export stems such as '..' or 'samples.csv' give safe, unique names inside --out."""
    names = unique_names([stem, stem], fallback="plate", taken=["samples.csv"])
    for name in names:
        assert name not in {"", ".", ".."} and "/" not in name and not name.startswith(".")
        assert name.casefold() != "samples.csv"
    assert names[0] != names[1]


@pytest.mark.parametrize("name", ["...csv", "..csv", "samples.csv.csv"])
def test_plate_export_with_a_dotted_name_writes_inside_its_subfolder(plate_dir, tmp_path,
                                                                     name, cli):
    """An export named '..csv', '...csv' or 'samples.csv.csv': rc 0; the layout beside
    --out is untouched and every output lies in a subfolder of --out."""
    export = plate_dir["dir"] / name
    plate_dir["export"].rename(export)
    out = plate_dir["dir"] / "out"
    before = snapshot(plate_dir["dir"])
    result = cli("plate", plate_dir["lib"], export, "--layout", plate_dir["layout"],
                 "--out", out, "--pathlength", "0.5")
    assert result.exit_code == 0, result.output
    after = snapshot(plate_dir["dir"])
    assert {k: v for k, v in after.items() if not k.startswith("out/")} == before
    subfolders = [p for p in out.iterdir() if p.is_dir()]
    assert len(subfolders) == 1 and not subfolders[0].name.startswith(".")
    assert (subfolders[0] / "wells.csv").exists() and (out / "samples.csv").is_file()


def test_plate_out_holding_the_layout_is_refused(plate_dir, cli):
    """`plate RUN.csv --layout DIR/samples.csv --out DIR`: the combined table would replace
    the layout; refused before any work, nothing written."""
    before = snapshot(plate_dir["dir"])
    result = cli("plate", plate_dir["lib"], plate_dir["export"], "--layout",
                 plate_dir["layout"], "--out", plate_dir["dir"], "--pathlength", "0.5")
    assert_cli_error(result, "samples.csv", "is also an input", literal=True)
    assert snapshot(plate_dir["dir"]) == before


@pytest.mark.parametrize("case", ["repeatability", "budget", "out", "cell_blank_workers"])
def test_an_input_named_as_an_output_is_refused(cuvette, case, cli):
    """The input is never replaced: repeatability --out, --repeat-scans with --budget or
    --out the same file, --cell-blank as --out with --workers."""
    d = cuvette
    scans = write_wide(d["dir"] / "scans.csv",
                       {f"scan{i}": 0.5 + 1e-3 * i + 0 * WL for i in range(4)})
    blank = write_wide(d["dir"] / "blank.csv", {"blank": 1e-3 + 0 * WL})
    args = {
        "repeatability": ["instrument", "repeatability", scans, "--out", scans],
        "budget": ["unmix", d["lib"], d["spectra"], "--repeat-scans", scans, "--budget", scans],
        "out": ["unmix", d["lib"], d["spectra"], "--repeat-scans", scans, "--budget",
                d["dir"] / "b.csv", "--out", scans],
        "cell_blank_workers": ["unmix", d["lib"], d["spectra"], "--cell-blank", blank,
                               "--out", blank, "--workers", "1"],
    }[case]
    before = snapshot(d["dir"])
    result = cli(*args)
    assert_cli_error(result, "is also an input", literal=True)
    assert snapshot(d["dir"]) == before


def test_out_inside_an_input_folder_of_exports_is_fine_but_not_over_an_export(plate_dir, cli):
    """A results file may not be one of the exports taken from a folder."""
    before = snapshot(plate_dir["dir"])
    result = cli("unmix", plate_dir["lib"], demo_file("batches_spectra.csv"), "--out",
                 plate_dir["lib"])
    assert_cli_error(result, "lib.nc", "is also an input", literal=True)
    assert snapshot(plate_dir["dir"]) == before


def test_out_through_a_link_to_an_input_is_refused(cuvette, cli):
    """Real paths are compared: a symbolic link to the spectra is the spectra."""
    link = cuvette["dir"] / "link.csv"
    link.symlink_to(cuvette["spectra"])
    before = snapshot(cuvette["dir"])
    result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", link)
    assert_cli_error(result, "is also an input", literal=True)
    assert snapshot(cuvette["dir"]) == before


def test_out_naming_a_fifo_is_refused(cuvette, cli):
    """A FIFO (named pipe) given as --out stays a FIFO; nothing is written."""
    fifo = cuvette["dir"] / "pipe.csv"
    os.mkfifo(fifo)
    result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", fifo)
    assert_cli_error(result, "a FIFO", literal=True)
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)


def test_out_naming_a_device_is_refused():
    """/dev/null, a character device on every POSIX system, is refused as an output by the
    guard, which only looks at it (it writes nothing, so the device is never at risk)."""
    with pytest.raises(OutputError, match=r"^/dev/null: is a character device, not a "
                                          r"regular file; write to a file instead$"):
        guard_outputs(["/dev/null"])
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_out_naming_a_socket_is_refused(cuvette, cli):
    """A special file any user can make (a Unix socket), through two commands: refused
    with one line, and it stays a socket."""
    import socket

    path = cuvette["dir"] / "s.sock"
    with socket.socket(socket.AF_UNIX) as sock:
        sock.bind(str(path))
        for args in (["unmix", cuvette["lib"], cuvette["spectra"], "--report", path],
                     ["library", "import", cuvette["eps"], "--absorptivity-unit", "L/(mol*cm)",
                      "--out",
                      path]):
            assert_cli_error(cli(*args), "is a socket, not a regular file", literal=True)
            assert stat.S_ISSOCK(os.lstat(path).st_mode)


def test_two_outputs_of_one_run_collide(cuvette, cli):
    """--out and --report naming one file is refused before any work."""
    target = cuvette["dir"] / "both.html"
    result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", target,
                 "--report", target)
    assert_cli_error(result, "collides", literal=True)
    assert not target.exists()


def test_guard_api_refuses_a_store_that_holds_an_input(tmp_path):
    """Python API: a store output that contains an input would replace it."""
    (tmp_path / "in").mkdir()
    spectra = tmp_path / "in" / "s.csv"
    spectra.write_text("x\n")
    with pytest.raises(OutputError, match=r"in: would replace the folder holding .*s\.csv"):
        guard_outputs(stores=[tmp_path / "in"], inputs=[spectra])


# --- 2. all or nothing ------------------------------------------------------------------


def test_failure_in_a_later_write_leaves_earlier_outputs_as_they_were(tmp_path):
    """Staged files move into place only when the run succeeds; a failure removes them
    and the folders the run made, and earlier files keep their content."""
    old = tmp_path / "a.txt"
    old.write_text("old\n")
    with pytest.raises(RuntimeError), all_or_nothing():
        write_text("new\n", old)
        outputs.make_folder(tmp_path / "sub" / "deeper")
        write_text("b\n", tmp_path / "sub" / "deeper" / "b.txt")
        assert old.read_text() == "old\n"  # staged, not yet in place
        raise RuntimeError("a later plate failed")
    assert old.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]


def test_a_failed_move_puts_the_previous_versions_back(tmp_path, monkeypatch):
    """If moving the second staged file fails, the first is put back as it was."""
    first, second = tmp_path / "1.txt", tmp_path / "2.txt"
    first.write_text("old 1\n")
    second.write_text("old 2\n")
    real_replace = os.replace
    calls = {"n": 0}

    def flaky(src, dst):
        if Path(dst) == second and str(src).endswith(".part"):
            raise OSError(errno.ENOSPC, "No space left on device")
        calls["n"] += 1
        return real_replace(src, dst)

    monkeypatch.setattr(outputs.os, "replace", flaky)
    with pytest.raises(OutputError, match=r"nothing was changed"), all_or_nothing():
        write_text("new 1\n", first)
        write_text("new 2\n", second)
    assert first.read_text() == "old 1\n" and second.read_text() == "old 2\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["1.txt", "2.txt"]


def test_disk_full_in_a_plate_run_leaves_nothing(plate_dir, monkeypatch, cli):
    """A plate run whose workbook write fails (disk full) exits 2 and leaves no output;
    the outputs of an earlier run in --out stay exactly as they were."""
    out = plate_dir["dir"] / "out"
    args = ("plate", plate_dir["lib"], plate_dir["export"], "--layout", plate_dir["layout"],
            "--out", out, "--pathlength", "0.5")
    cli.ok(*args)
    before = snapshot(plate_dir["dir"])

    real_write = Path.write_bytes

    def full(self, data):
        if self.name.endswith(".part"):  # the workbook, the only file written as bytes
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_write(self, data)

    monkeypatch.setattr(Path, "write_bytes", full)
    assert_cli_error(cli(*args), "No space left", literal=True, progress=True)
    assert snapshot(plate_dir["dir"]) == before
    assert not [p for p in out.rglob(".*") if p.name != RECORD]


def test_plate_out_holding_a_users_own_file_is_refused(plate_dir, cli):
    """--out names a folder; a file there that no mixsolve run wrote (the user's own
    samples.csv) is never replaced: refused before any work, and a rerun into a folder
    of mixsolve's own outputs is fine."""
    out = plate_dir["dir"] / "out"
    out.mkdir()
    (out / "samples.csv").write_text("my own sample list\n")
    before = snapshot(plate_dir["dir"])
    args = ("plate", plate_dir["lib"], plate_dir["export"], "--layout", plate_dir["layout"],
            "--out", out, "--pathlength", "0.5")
    assert_cli_error(cli(*args), "samples.csv: exists and was not written by mixsolve",
                     literal=True)
    assert snapshot(plate_dir["dir"]) == before
    (out / "samples.csv").unlink()
    cli.ok(*args)
    cli.ok(*args)  # the second run replaces the first run's files, which are recorded
    assert "samples.csv" in recorded_files(out)


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX file-size limit")
def test_file_size_limit_in_a_real_process_leaves_nothing(plate_dir, library):
    """`ulimit -f` in a real process: the HTML report does not fit; exit 2, one line, the
    folder holds what it held before (a real write failure, not a mock)."""
    out = plate_dir["dir"] / "out"
    before = snapshot(plate_dir["dir"])

    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (64 * 1024, 64 * 1024))

    proc = subprocess.run(
        [sys.executable, "-c", "from mixsolve.cli import main; main()", "plate",
         str(plate_dir["lib"]), str(plate_dir["export"]), "--layout", str(plate_dir["layout"]),
         "--out", str(out), "--pathlength", "0.5"],
        capture_output=True, text=True, preexec_fn=limit, timeout=300)
    assert proc.returncode == 2, proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.startswith("error")]
    assert len(lines) == 1 and lines[0].startswith("error: ") and "Traceback" not in proc.stderr
    assert snapshot(plate_dir["dir"]) == before
    assert not out.exists()


def test_ctrl_c_exits_130_with_one_line_and_changes_nothing(cuvette, monkeypatch, cli):
    """Ctrl-C while the report is written: exit 130, one line, the earlier results file
    keeps its content and no new file appears."""
    import mixsolve.io.results_io as results_io

    results = cuvette["dir"] / "results.csv"
    results.write_text("an earlier result\n")
    before = snapshot(cuvette["dir"])
    real = results_io.write_text

    def interrupted(text, path):
        if str(path).endswith(".html"):
            raise KeyboardInterrupt
        return real(text, path)

    monkeypatch.setattr(results_io, "write_text", interrupted)
    import mixsolve.workflows.unmix_files as unmix_files

    monkeypatch.setattr(unmix_files, "write_text", interrupted)
    result = cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", results,
                 "--report", cuvette["dir"] / "page.html")
    assert result.exit_code == 130, (result.output, result.exception)
    lines = [ln for ln in result.stderr.splitlines() if ln.strip()]
    assert lines == ["error: interrupted (Ctrl-C); this run changed no file"]
    assert snapshot(cuvette["dir"]) == before


@pytest.mark.parametrize("out", ["results.xlsx", "wide.csv"])
def test_workbook_and_wide_table_are_staged_with_the_run(cuvette, monkeypatch, cli, out):
    """A results workbook or a wide CSV with its provenance is staged like any output: the
    report failing after it leaves no file, and an earlier file of that name as it was."""
    import mixsolve.workflows.unmix_files as unmix_files

    target = cuvette["dir"] / out
    target.write_bytes(b"an earlier result\n")
    before = snapshot(cuvette["dir"])

    def failing(text, path):
        raise OutputError(f"{path}: cannot write the file (No space left on device)")

    monkeypatch.setattr(unmix_files, "write_text", failing)
    assert_cli_error(cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", target,
                         "--shape", "wide", "--report", cuvette["dir"] / "page.html"),
                     r"page.html: cannot write the file \(No space left on device\)")
    assert snapshot(cuvette["dir"]) == before


def test_a_swallowed_ctrl_c_still_commits_nothing(tmp_path):
    """A Ctrl-C that some callback swallowed ('Exception ignored in ...') is noted; the run
    then moves nothing into place and ends as interrupted."""
    old = tmp_path / "a.txt"
    old.write_text("old\n")
    with pytest.raises(KeyboardInterrupt), all_or_nothing():
        write_text("new\n", old)
        outputs.note_interrupt()  # what the command line's SIGINT handler does
    assert outputs.clear_interrupt()  # noted, and now forgotten
    assert old.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]


def test_ctrl_c_while_outputs_move_into_place_is_held(tmp_path, monkeypatch):
    """SIGINT arriving between two moves does not stop the commit half way: every output
    is in place and no set-aside previous version is left behind."""
    import signal

    files = [tmp_path / f"{k}.txt" for k in range(3)]
    for f in files:
        f.write_text("old\n")
    real_replace = os.replace

    def replace_then_interrupt(src, dst):
        real_replace(src, dst)
        if str(src).endswith(".part"):
            os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C in the middle of the moves

    monkeypatch.setattr(outputs.os, "replace", replace_then_interrupt)
    with all_or_nothing():
        for f in files:
            write_text("new\n", f)
    assert [f.read_text() for f in files] == ["new\n"] * 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["0.txt", "1.txt", "2.txt"]


def test_out_that_is_the_same_file_under_another_name_is_refused(cuvette, cli):
    """File identity, not the path string: a hard link to the spectra (as a bind mount or
    another letter case on a case-insensitive file system would be) is the spectra."""
    alias = cuvette["dir"] / "alias.csv"
    os.link(cuvette["spectra"], alias)
    before = snapshot(cuvette["dir"])
    assert_cli_error(cli("unmix", cuvette["lib"], cuvette["spectra"], "--out", alias),
                     "is also an input", literal=True)
    assert snapshot(cuvette["dir"]) == before


@pytest.mark.parametrize(("args", "message"), [
    (("--wavelengths", "450,528,6_20"), "--wavelengths: '450,528,6_20' is not"),
    (("--out", "r.csv/"), "r.csv/: names a folder"),
])
def test_typos_in_paths_and_numbers_are_refused(cuvette, cli, args, message):
    """Python's digit grouping (6_20 = 620) and a trailing '/' on a file name are typos:
    refused, nothing written."""
    before = snapshot(cuvette["dir"])
    assert_cli_error(cli("unmix", cuvette["lib"], cuvette["spectra"], *args), message,
                     literal=True)
    assert snapshot(cuvette["dir"]) == before


def test_a_molar_mass_given_twice_is_refused(cuvette, cli):
    """--molar-mass amber=0,amber=3 used to keep the last value silently."""
    out = cuvette["dir"] / "l2.nc"
    assert_cli_error(cli("library", "import", cuvette["eps"], "--absorptivity-unit", "L/(mol*cm)",
                         "--molar-mass", "red=500,red=3", "--out", out),
                     "--molar-mass: 'red' is given twice", literal=True, must_not_exist=[out])
