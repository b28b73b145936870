"""Peak memory of ``mixsolve unmix`` on a Zarr cube larger than the memory it may use.

Writes the synthetic demo cube with the demo generator
(``reference_spectra_demo/make_demo_cube.py``: an invented test card, chunk by chunk, in
this process; not timed), then runs
``mixsolve unmix library.nc cube.zarr --baseline offset --out result.zarr`` as a child
process and reads the child's peak resident set size from
``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` once it has exited. Prints the cube's
size on disk and in memory, the wall time, the peak RSS and its ratio to the 1.5 GB
target. The default cube is 1000 × 1000 pixels × 500 wavelengths of float64: 4.0 GB of
data. ``--demo`` instead runs ``mixsolve demo --cube PIXELS`` as the child, which writes
the cube and unmixes it in one process.

Run: ``python benchmarks/bench_memory.py [--pixels 1000] [--wavelengths 500]
[--folder DIR] [--keep] [--demo]``. Never a test.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from mixsolve.reference_spectra_demo.make_demo_cube import write_demo_cube

TARGET_BYTES = 1.5e9


def folder_bytes(path: Path) -> int:
    """Bytes on disk of a file or a folder tree."""
    if path.is_file():
        return path.stat().st_size
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--pixels", type=int, default=1000)
    parser.add_argument("--wavelengths", type=int, default=500)
    parser.add_argument("--folder", type=Path, help="where to write (default: a temp dir)")
    parser.add_argument("--keep", action="store_true", help="keep the cube and the result")
    parser.add_argument("--demo", action="store_true",
                        help="measure `mixsolve demo --cube PIXELS` (writes and unmixes)")
    parser.add_argument("--cli-args", default="", help="extra options for mixsolve unmix")
    args = parser.parse_args()
    folder = args.folder or Path(tempfile.mkdtemp(prefix="mixsolve-bench-"))
    data_gb = args.pixels**2 * args.wavelengths * 8 / 1e9
    cli = [sys.executable, "-c", "from mixsolve.cli import main; main()"]
    try:
        if args.demo:
            out = folder / "cube" / "result.zarr"
            command = [*cli, "demo", "--out", str(folder), "--cube", str(args.pixels),
                       "--cube-wavelengths", str(args.wavelengths)]
        else:
            start = time.perf_counter()
            lib, cube = write_demo_cube(folder, args.pixels, args.wavelengths)
            print(f"cube {args.pixels} x {args.pixels} x {args.wavelengths} float64: "
                  f"{data_gb:.2f} GB of data, {folder_bytes(cube) / 1e9:.2f} GB on disk "
                  f"(written in {time.perf_counter() - start:.0f} s)")
            out = folder / "result.zarr"
            command = [*cli, "unmix", str(lib), str(cube), "--baseline", "offset", "--out",
                       str(out), *args.cli_args.split()]
        print("running: mixsolve", " ".join(command[3:]))
        start = time.perf_counter()
        run = subprocess.run(command, capture_output=True, text=True, check=False)
        elapsed = time.perf_counter() - start
        if run.returncode != 0 or not out.is_dir():
            print(run.stderr[-3000:])
            raise SystemExit(f"mixsolve failed (exit {run.returncode})")
        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024  # KiB on Linux
        print(f"{'demo' if args.demo else 'unmix'}: {elapsed:.0f} s wall, "
              f"{args.pixels**2 / elapsed:,.0f} spectra/s; result "
              f"{folder_bytes(out) / 1e9:.2f} GB on disk")
        print(f"peak RSS of the child process: {peak / 1e9:.2f} GB "
              f"({peak / TARGET_BYTES:.2f} x the 1.5 GB target; the data are "
              f"{data_gb / (peak / 1e9):.1f} x the peak)")
        print(f"load average: {' '.join(f'{v:.2f}' for v in os.getloadavg())}")
    finally:
        if not args.keep:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
