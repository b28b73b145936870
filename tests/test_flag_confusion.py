"""Each flag measured on seeded simulations: it fires on the samples that have its problem
and stays quiet on the others (issue 15, item 7; synthetic data, benchmarks/flag_sim.py).

The study of benchmarks/flag_study.py at a size that runs in a few seconds: 2 labs × 20
samples per problem, each fitted with an exact library and one built from standards, the
noise of the ``benchtop_double_beam`` preset stated. Targets are issue 15's (the project's
acceptance criteria): on clean samples fewer than 10 % carry any flag; each flag fires on
at least 90 % of the samples with its problem and on fewer than 10 % of those without.
A flag or option this version does not have yet is skipped by name, so the check starts to
run when it lands.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


def _load(name: str):
    spec = importlib.util.spec_from_file_location(name, _BENCH / f"{name}.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses and flag_sim's import look it up by name
    spec.loader.exec_module(module)
    return module


if "coverage_sim" not in sys.modules:  # another test module may have loaded it
    _load("coverage_sim")
fs = _load("flag_sim")

#: Issue 15, item 7 (acceptance targets of the project).
HIT_AT_LEAST = 0.90
FALSE_ALARM_BELOW = 0.10
CLEAN_ANY_FLAG_BELOW = 0.10


@pytest.fixture(scope="module")
def tallies():
    return fs.run_study(n_labs=2, n_samples=20, seed=15)


@pytest.fixture(scope="module")
def table(tallies):
    return fs.matrix(tallies)


def _rows(table, problem: str, option: str | None = None):
    rows = table.xs(problem, level="problem")
    return rows if option is None else rows.xs(option, level="option")


def test_every_row_is_simulated(table) -> None:
    """Every problem × known option set × library has its 40 samples (harness check)."""
    known = [o for o in fs.OPTIONS if not fs.option_refused(o)]
    assert len(table) == len(fs.PROBLEMS) * len(known) * len(fs.LIBRARIES)
    assert (table["n"] == 40).all()


def test_clean_samples_carry_few_flags(table) -> None:
    """Clean samples on a perfect wavelength scale: < 10 % carry any flag at all, in every
    row (issue 15, item 7), and none carries ``shift_sensitive``, a property of the design
    now said once as the run note ``shift_risk`` (item 1)."""
    clean = _rows(table, "clean")
    assert (clean["any flag"] < CLEAN_ANY_FLAG_BELOW).all(), clean["any flag"]
    assert (clean["any doubtful"] < CLEAN_ANY_FLAG_BELOW).all()
    assert "shift_sensitive" not in clean or not clean["shift_sensitive"].max() > 0


_MEANT = [(problem, option) for problem in ("shift", "scatter", "absorber", "saturated")
          for option in fs.OPTIONS]


@pytest.mark.parametrize(("problem", "option"), _MEANT)
def test_each_problem_is_caught_by_its_flag(table, problem: str, option: str) -> None:
    """≥ 90 % of the samples with a problem carry a flag meant to catch it (issue 15).

    Where the preferred flag is not there yet, its stand-in (``flag_sim.MEANT``) is held to
    the target and the test is then skipped naming the missing flag."""
    why = fs.option_refused(option)
    if why:
        pytest.skip(f"unmix does not know option set {option!r} yet: {why}")
    meant, missing = fs.meant_codes(problem, option)
    if meant:
        caught = _rows(table, problem, option)["caught"]
        assert (caught >= HIT_AT_LEAST).all(), (meant, caught)
    if missing:
        pytest.skip(f"flag {', '.join(missing)} not in flags.FLAG_MEANINGS yet"
                    + (f" (stand-in {', '.join(meant)} checked)" if meant else ""))


@pytest.mark.parametrize("code", list(fs.CODE_PROBLEMS))
def test_each_flag_is_quiet_without_its_problem(table, code: str) -> None:
    """Each flag fires on < 10 % of the samples without a problem it is meant to catch, in
    every row (problem × option set × library; issue 15)."""
    if not fs.code_exists(code):
        pytest.skip(f"flag {code} not in flags.FLAG_MEANINGS yet")
    without = table[~table.index.get_level_values("problem").isin(fs.CODE_PROBLEMS[code])]
    assert (without[code] < FALSE_ALARM_BELOW).all(), without[code]


def test_library_from_standards_raises_no_lack_of_fit_on_clean_samples(table) -> None:
    """The false alarm issue 15 reported: with a library built from standards and the noise
    stated, ``lack_of_fit`` fired on > 50 % of clean samples (the library's own error in the
    residual). It must stay under the false-alarm target with both libraries."""
    clean = _rows(table, "clean")
    assert (clean["lack_of_fit"] < FALSE_ALARM_BELOW).all(), clean["lack_of_fit"]
