"""Flag study: how often each flag fires on samples with and without its problem (issue 15).

A seeded simulation of a **synthetic** scenario (benchmarks/flag_sim.py: the three invented
components of the coverage study, 400–700 nm at 1 nm, fitted 405–695 nm, peaks 0.3–1.5 AU,
read on a simulated instrument with the noise of a preset, which ``unmix`` is told with
``noise=``). Problems: none; a 1 nm wavelength-scale error; λ⁻⁴ scatter of 0.03 AU at
400 nm; an unmodelled absorber at 2 % of the peak; a saturated reading (clipped at 3.5 AU).
Each is fitted with the plain fit and with each option that models a problem
(``fit_shift=True``, ``baseline="scatter"``), with an exact library and one built from
standards.

Prints the confusion matrix: one row per problem × option set × library, one column per
flag code (cells: fraction of samples carrying the code; ``-``: the code does not exist in
this version), then "any flag", "any doubtful" (``flags.severity_of``), "caught" (any code
meant to catch that problem, ``flag_sim.MEANT``) and the number of samples; then each scored
code's highest false-alarm rate. Targets (issue 15): clean samples, any flag < 10 %; each
flag ≥ 90 % on samples with its problem and < 10 % on those without.

Run: ``python benchmarks/flag_study.py [--labs N] [--samples M] [--seed S] [--noise PRESET]``.
A measurement, not a test: it changes nothing and asserts nothing.
"""

from __future__ import annotations

import argparse
import time

import flag_sim as fs
import numpy as np

import mixsolve as ms
from mixsolve.noise import PRESETS


def _two_lines(code: str) -> tuple[str, str]:
    """A column heading on two lines of at most 10 characters, split at a separator."""
    if len(code) <= 10:
        return "", code
    cuts = [i for i, ch in enumerate(code) if ch in "_ "]
    cut = min(cuts, key=lambda i: abs(i - len(code) / 2), default=10)
    return code[:cut][:10], code[cut + 1:][:10]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--labs", type=int, default=10,
                        help="simulated labs (one library of each kind per lab) [10]")
    parser.add_argument("--samples", type=int, default=50,
                        help="samples per problem per lab [50]")
    parser.add_argument("--seed", type=int, default=15, help="seed of the whole study [15]")
    parser.add_argument("--noise", choices=list(PRESETS), default=fs.NOISE_PRESET,
                        help=f"noise preset of the simulated instrument [{fs.NOISE_PRESET}]")
    args = parser.parse_args()
    if args.labs < 1 or args.samples < 1:
        parser.error("--labs and --samples must be at least 1")
    start = time.perf_counter()
    table = fs.matrix(fs.run_study(args.labs, args.samples, args.seed, args.noise))
    elapsed = time.perf_counter() - start
    print(f"mixsolve {ms.__version__} flag study (synthetic data): seed {args.seed}, "
          f"{args.labs} labs x {args.samples} samples per problem, noise={args.noise!r}, "
          f"ceiling {fs.CEILING_AU:g} AU, window {fs.WINDOW_NM[0]:g}-{fs.WINDOW_NM[1]:g} nm")
    for option in fs.OPTIONS:
        why = fs.option_refused(option)
        if why:
            print(f"option set {option!r} skipped: unmix refuses it ({why})")
    missing = sorted(c for c in fs.CODE_PROBLEMS if not fs.code_exists(c))
    if missing:
        print(f"flags not in this version (columns '-'): {', '.join(missing)}")
    shown = [c for c in table.columns if c != "n"]
    shown = [c for c in shown if not table[c].isna().all() or c in fs.CODE_PROBLEMS]
    split = [_two_lines(c) for c in shown]
    head = f"{'problem':<10} {'option':<17} {'library':<10}" + "".join(
        f" {top:>10}" for top, _ in split)
    second = f"{'':<39}" + "".join(f" {low:>10}" for _, low in split) + f" {'n':>6}"
    print(head.rstrip())
    print(second)
    print("-" * len(second))
    for (problem, option, library), row in table.iterrows():
        cells = "".join(f" {'-' if np.isnan(row[c]) else f'{row[c]:.3f}':>10}" for c in shown)
        print(f"{problem:<10} {option:<17} {library:<10}{cells} {int(row['n']):>6}")
    print()
    for code, worst in fs.false_alarms(table).items():
        print(f"{code:<20} highest rate on samples without its problem: {worst:.3f}")
    print(f"({elapsed:.0f} s)")


if __name__ == "__main__":
    main()
