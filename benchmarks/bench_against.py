"""The whole ``unmix`` call now against an earlier revision, timed in one run.

Checks a speed target stated relative to "today's" code (e.g. issue 14: whole unmix no worse
than 1.3x with the library's error on). ``--base REV`` is checked out into a temporary git
worktree; each round times both trees in fresh subprocesses (``PYTHONPATH`` set to the
tree, the same interpreter and installed libraries), alternating, best of ``--rounds``
rounds. The problem is ``bench_nnls.py``'s (300 wavelengths, 5 components); the library
is imported (no error stated) or, with ``--library standards``, built from synthetic
standards with declared preparation and stock (``bench_library_error.py``; 35 error
patterns) where the tree has that builder, else imported.

Run: ``python benchmarks/bench_against.py --base 0146a59 [--sizes 1000,10000,100000]``.
Never a test.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent

TIMER = textwrap.dedent("""
    import sys, warnings
    tree, sizes, kind = sys.argv[1], sys.argv[2], sys.argv[3]
    sys.path[:0] = [tree, tree + "/benchmarks"]
    warnings.simplefilter("ignore")
    import mixsolve as ms
    assert ms.__file__.startswith(tree), ms.__file__
    from bench_nnls import best_of, design, spectra
    from bench_unmix import labelled, library
    k = design()
    lib = library(k)
    if kind == "standards":
        try:
            from bench_library_error import library_from_standards
            lib = library_from_standards(k)
        except ImportError:
            pass
    ms.unmix(labelled(spectra(500, k)), lib)
    for n in map(int, sizes.split(",")):
        sp = labelled(spectra(n, k))
        print(n, best_of(3, lambda sp=sp: ms.unmix(sp, lib)))
""")


def time_tree(tree: Path, sizes: str, kind: str) -> dict[int, float]:
    """Seconds per unmix call of each size, in a fresh interpreter on ``tree``."""
    done = subprocess.run([sys.executable, "-c", TIMER, str(tree), sizes, kind],
                          capture_output=True, text=True, check=True,
                          env={**os.environ, "PYTHONPATH": str(tree)})
    return {int(n): float(t) for n, t in (line.split() for line in done.stdout.splitlines())}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--base", required=True, help="git revision to compare against")
    parser.add_argument("--sizes", default="1000,10000,100000")
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--library", choices=("imported", "standards"), default="standards")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(tmp) / "base"
        subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", "-q",
                        str(base), args.base], check=True)
        try:
            best: dict[str, dict[int, float]] = {"base": {}, "now": {}}
            for _ in range(args.rounds):
                for name, tree in (("base", base), ("now", ROOT)):
                    for n, t in time_tree(tree, args.sizes, args.library).items():
                        best[name][n] = min(best[name].get(n, t), t)
        finally:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force",
                            str(base)], check=True)
    print(f"whole unmix, {args.library} library: now against {args.base} "
          f"(best of {args.rounds} rounds x 3 calls; load {os.getloadavg()[0]:.2f})")
    print(f"{'N':>9} {'base s':>9} {'now s':>9} {'now/base':>9}")
    for n in sorted(best["now"]):
        print(f"{n:>9} {best['base'][n]:>9.4f} {best['now'][n]:>9.4f} "
              f"{best['now'][n] / best['base'][n]:>9.2f}")


if __name__ == "__main__":
    main()
