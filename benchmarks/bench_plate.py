"""Time `mixsolve plate` end to end on a 384-well × 300-wavelength export.

The export (grid blocks, one per wavelength), layout and library are invented and written
to a temporary folder first (not timed). Then the console script runs as a subprocess, so
interpreter start-up, imports, reading, blank subtraction, unmixing all 384 wells, the
tables, the workbook and the HTML report with its figures are all inside the time.

Run: ``python benchmarks/bench_plate.py [--repeat N]``. Prints each run's wall and CPU
time and the median wall time's ratio to the 5 s target (issue 4, on a 2-core machine),
with the load average, since other work on the machine inflates wall time. Never a test.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import mixsolve as ms

TARGET_S = 5.0
WAVELENGTHS_NM = np.arange(400.0, 700.0, 1.0)  # 300 wavelengths
ROWS, COLS = 16, 24
#: Invented bands: (centre nm, width nm, peak specific absorptivity L g⁻¹ cm⁻¹).
BANDS = {"ochre": (450.0, 30.0, 50.0), "plum": (530.0, 35.0, 40.0), "jade": (620.0, 28.0, 60.0)}


def _write_inputs(folder: Path, rng: np.random.Generator) -> tuple[Path, Path, Path]:
    eps = np.vstack([h * np.exp(-0.5 * ((WAVELENGTHS_NM - c) / w) ** 2)
                     for c, w, h in BANDS.values()])
    lib = ms.import_absorptivities(
        ms.make_spectra(eps, WAVELENGTHS_NM, list(BANDS)).rename(sample="component"),
        "L/(g*cm)", source="invented benchmark bands")
    ms.write_library(lib, folder / "lib.nc")
    wells = [f"{'ABCDEFGHIJKLMNOP'[r]}{c}" for r in range(ROWS) for c in range(1, COLS + 1)]
    blank = [w for w in wells if w[1:] in ("1", "24")]  # columns 1 and 24
    layout = ["well,role,sample,dilution"]
    conc = np.zeros((len(wells), len(BANDS)))
    k = 0
    for i, w in enumerate(wells):
        if w in blank:
            layout.append(f"{w},blank,,1")
            continue
        sample = f"S{k // 4 + 1:03d}"
        k += 1
        layout.append(f"{w},sample,{sample},1")
        conc[i] = rng.uniform(0.002, 0.02, len(BANDS))  # g/L
    (folder / "layout.csv").write_text("\n".join(layout) + "\n")
    b = 0.25  # cm
    absorb = 0.04 + b * conc @ eps + rng.normal(0.0, 0.002, (len(wells), WAVELENGTHS_NM.size))
    lines = ["Invented 384-well export for the mixsolve benchmark", ""]
    header = "," + ",".join(str(c) for c in range(1, COLS + 1))
    cube = absorb.reshape(ROWS, COLS, -1)
    for j, wl in enumerate(WAVELENGTHS_NM):
        lines += [f"Wavelength: {wl:g} nm", header]
        lines += ["ABCDEFGHIJKLMNOP"[r] + "," + ",".join(f"{v:.4f}" for v in cube[r, :, j])
                  for r in range(ROWS)]
        lines.append("")
    (folder / "export.csv").write_text("\n".join(lines))
    return folder / "export.csv", folder / "layout.csv", folder / "lib.nc"


def _console_script() -> str:
    beside = Path(sys.executable).with_name("mixsolve")
    found = str(beside) if beside.exists() else shutil.which("mixsolve")
    if found is None:
        sys.exit("mixsolve console script not found; install the package (pip install -e .)")
    return found


def main() -> None:
    """Write the inputs, run `mixsolve plate` ``--repeat`` times, print the times."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    script = _console_script()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        export, layout, lib = _write_inputs(folder, np.random.default_rng(20240611))
        size_mb = export.stat().st_size / 1e6
        times, cpu = [], []
        for run in range(args.repeat):
            out = folder / f"out{run}"
            before = resource.getrusage(resource.RUSAGE_CHILDREN)
            start = time.perf_counter()
            done = subprocess.run(
                [script, "plate", str(lib), str(export), "--layout", str(layout),
                 "--out", str(out), "--volume-ul", "50", "--well-diameter-mm", "3.3"],
                capture_output=True, text=True, env={**os.environ, "MPLBACKEND": "Agg"})
            times.append(time.perf_counter() - start)
            after = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu.append(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime)
            if done.returncode != 0:
                sys.exit(f"mixsolve plate failed ({done.returncode}): {done.stderr.strip()}")
        median = statistics.median(times)
        print(f"384 wells x {WAVELENGTHS_NM.size} wavelengths, grid-block export "
              f"{size_mb:.1f} MB, {os.cpu_count()} CPU(s)")
        print("wall time per run (s): " + ", ".join(f"{t:.2f}" for t in times))
        print("CPU time per run (s):  " + ", ".join(f"{t:.2f}" for t in cpu)
              + "  (user + system; less sensitive to other load)")
        print(f"median wall time {median:.2f} s; ratio to the {TARGET_S:g} s target: "
              f"{median / TARGET_S:.2f}")
        print(f"load average (1 min) {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPU(s)")


if __name__ == "__main__":
    main()
