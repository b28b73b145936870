"""Coverage study: does the reported std_uncertainty cover the truth (issue 14)?

A seeded simulation of a **synthetic** scenario (three invented components with
overlapping Gaussian bands, 400–700 nm at 1 nm, peak absorbance 0.1–1.5 AU, σ_A =
0.002 AU; benchmarks/coverage_sim.py) under the conditions of issue 14's Acceptance:

1. exact library, white noise;
2. library built from 5 standards per component, 1.5 % independent preparation error;
3. as 2, plus a 1.5 % shared-stock error per component (one draw per lab);
4. exact library, noise correlated over 4 nm (Gaussian-smoothed, same marginal σ);
5. exact library, stray light 0.1 %, peak absorbance up to 3;
6. exact library, triplicate plate means (``analyse_plate``) of absent components.

Each condition simulates ``--trials`` independent labs (one library each, re-drawn per
lab) measuring ``--samples`` samples each, and fits every spectrum twice with the public
API: with the defaults a user gives (window 400–700 nm, NNLS) and, as a careful user
would, also stating the noise (σ_A and the stray fraction) with ``noise=``. For every
result z = (estimate − truth)/std_uncertainty; the table gives P(|z| < 2) over all
components, samples and labs (target band 0.90–0.99; honest ≈ 0.954), the median |z|
(honest ≈ 0.674), the mean z (bias; honest ≈ 0), the share of results whose spectrum
was flagged ``lack_of_fit`` or ``structured_residual`` (the user was warned) and the
number of results.

Run: ``python benchmarks/coverage_study.py [--trials N] [--samples M] [--seed S]``.
A measurement, not a test: it changes nothing and asserts nothing.
"""

from __future__ import annotations

import argparse
import time

from coverage_sim import CONDITIONS, TARGET_BAND, run_condition

import mixsolve as ms


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=100,
                        help="simulated labs per condition (one library each) [100]")
    parser.add_argument("--samples", type=int, default=30,
                        help="samples measured per lab [30]")
    parser.add_argument("--seed", type=int, default=14, help="seed of the whole study [14]")
    parser.add_argument("--via", choices=("api", "cli"), default="api",
                        help="call the Python API, or run every lab through the command line "
                        "(library import/build and unmix on files; conditions 1-5, the "
                        "defaults fit) [api]")
    args = parser.parse_args()
    if args.trials < 1 or args.samples < 1:
        parser.error("--trials and --samples must be at least 1")
    start = time.perf_counter()
    conditions = [c for c in CONDITIONS if args.via == "api" or not c.replicates]
    rows = [row for cond in conditions
            for row in run_condition(cond, args.trials, args.samples, args.seed,
                                     via=args.via)]
    elapsed = time.perf_counter() - start
    low, high = TARGET_BAND
    print(f"mixsolve {ms.__version__} coverage study (synthetic data): seed {args.seed}, "
          f"{args.trials} labs x {args.samples} samples per condition, through the "
          f"{'Python API' if args.via == 'api' else 'command line'}")
    print(f"target P(|z|<2) in [{low:.2f}, {high:.2f}]; honest: P 0.954, median |z| 0.674, "
          "mean z 0")
    header = (f"{'condition':<16} {'fit':<13} {'P(|z|<2)':>9} {'in band':>8} "
              f"{'median|z|':>10} {'mean z':>8} {'flagged':>8} {'results':>8}")
    print(header)
    print("-" * len(header))
    for row in rows:
        print(f"{row.condition:<16} {row.fit:<13} {row.p_within_2u:>9.3f} "
              f"{'yes' if row.in_band else 'NO':>8} {row.median_abs_z:>10.2f} "
              f"{row.mean_z:>8.2f} {row.doubted:>8.2f} {row.n_results:>8}")
    print(f"({elapsed:.0f} s)")


if __name__ == "__main__":
    main()
