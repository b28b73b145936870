"""One cuvette through the command line against the bare ``import xarray, pandas``, in one run.

Issue 19's targets (2-core machine): ``mixsolve unmix LIB one.csv --out r.csv`` on one
spectrum, CSV in and out, at most 1.5x the process ``python -c "import xarray, pandas"``;
with ``--report`` (the HTML page and its figures) at most 3x. Most of a one-spectrum run
is starting Python and importing; this shows what a command pays beyond the libraries
every run needs.

The problem is ``bench_nnls.py``'s (300 wavelengths, 5 invented bands, specific
absorptivities); the library and a one-spectrum CSV (one of its synthetic mixtures, seeded
noise) are written to a temporary folder first (not timed). Each
round then runs, as fresh subprocesses with the same interpreter and alternating:

- ``bare``: ``python -c "import xarray, pandas"``, the reference of the targets;
- ``labelled``: the same plus one ``DataArray`` with an index, for information: xarray
  then imports pint and dask itself when they are installed (duck-array checks), a cost
  every mixsolve run pays whatever mixsolve imports;
- ``unmix``: the command on the one spectrum, writing the results CSV;
- ``unmix --report``: the same with the HTML page.

The command runs as ``python -c "from mixsolve.cli import main; main()" unmix ...`` with
the tree first on ``sys.path`` (the console script does the same). ``--base REV`` also
times an earlier revision, checked out into a temporary git worktree, in the same rounds.
Prints the best of ``--rounds`` rounds for each (wall time, and CPU time, user + system,
which other work on a shared machine inflates less), the ratios to ``bare``, and the load.

Run: ``python benchmarks/bench_cli_start.py [--rounds 5] [--base 78566d6]``. Never a test.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from bench_nnls import WAVELENGTHS_NM, design, spectra
from bench_unmix import library

import mixsolve as ms

ROOT = Path(__file__).resolve().parent.parent
TARGETS = {"unmix": 1.5, "unmix --report": 3.0}
BARE = "import xarray, pandas"
LABELLED = ("import xarray, pandas, numpy\n"
            "xarray.DataArray(numpy.zeros(3), dims='x', coords={'x': [1.0, 2.0, 3.0]})")
CLI = "import sys; sys.path.insert(0, {tree!r}); from mixsolve.cli import main; main()"


def write_inputs(folder: Path) -> tuple[Path, Path]:
    """The library file and a one-spectrum CSV (wide: wavelength_nm, one column)."""
    k = design()
    ms.write_library(library(k), folder / "lib.nc")
    absorbance = spectra(1, k, seed=19)[0]
    rows = [f"{w:.4f},{a:.5f}" for w, a in zip(WAVELENGTHS_NM, absorbance, strict=True)]
    (folder / "one.csv").write_text("wavelength_nm,extract_1\n" + "\n".join(rows) + "\n")
    return folder / "lib.nc", folder / "one.csv"


def commands(tree: Path, lib: Path, one: Path, out: Path, tag: str) -> dict[str, list[str]]:
    """The two command-line runs of ``tree``, writing into ``out``."""
    run = [sys.executable, "-c", CLI.format(tree=str(tree)), "unmix", str(lib), str(one),
           "--out", str(out / f"r{tag}.csv")]
    return {"unmix": run, "unmix --report": [*run, "--report", str(out / f"r{tag}.html")]}


def timed(argv: list[str]) -> tuple[float, float]:
    """Wall and CPU (user + system) time (s) of one subprocess; exits on failure."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run(argv, capture_output=True, text=True,
                          env={**os.environ, "MPLBACKEND": "Agg"})
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        sys.exit(f"{' '.join(argv[3:5])} failed ({done.returncode}): {done.stderr.strip()}")
    return wall, after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime


def main() -> None:
    """Write the inputs, time every command ``--rounds`` times, print the best and ratios."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    parser.add_argument("--base", help="also time this earlier revision (git worktree)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        lib, one = write_inputs(folder)
        runs = {"bare": [sys.executable, "-c", BARE],
                "labelled": [sys.executable, "-c", LABELLED],
                **commands(ROOT, lib, one, folder, "")}
        base = folder / "base"
        if args.base:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", "-q",
                            str(base), args.base], check=True)
            runs |= {f"{name} @ {args.base}": argv
                     for name, argv in commands(base, lib, one, folder, "_base").items()}
        try:
            for argv in runs.values():  # warm the file cache and the bytecode once
                timed(argv)
            best = dict.fromkeys(runs, (float("inf"), float("inf")))
            for _ in range(args.rounds):
                for name, argv in runs.items():
                    best[name] = tuple(map(min, best[name], timed(argv)))  # type: ignore[assignment]
        finally:
            if args.base:
                subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force",
                                str(base)], check=False)
    print(f"one spectrum ({WAVELENGTHS_NM.size} wavelengths, {design().shape[1]} components), "
          f"CSV in and out; best of {args.rounds} rounds, {os.cpu_count()} CPU(s)")
    print(f"  {'':<28} {'wall':>6}    {'ratio':>5}       {'CPU':>6}    {'ratio':>5}"
          "  (CPU = user + system: less sensitive to other load)")
    (bare_wall, bare_cpu) = best["bare"]
    for name, (wall, cpu) in best.items():
        target = TARGETS.get(name.split(" @ ")[0])
        goal = f"  (target <= {target:g}x)" if target and " @ " not in name else ""
        print(f"  {name:<28} {wall:6.2f} s  {wall / bare_wall:5.2f}x bare  "
              f"{cpu:6.2f} s  {cpu / bare_cpu:5.2f}x bare{goal}")
    print(f"load average (1 min) {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPU(s)")


if __name__ == "__main__":
    main()
