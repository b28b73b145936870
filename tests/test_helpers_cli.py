"""The shared check of the one-line error (tests/helpers_cli.py) fails when it should.

A stand-in command prints what it is told on stdout and stderr and exits with the code it
is given, so each way a refusal can break the contract of docs/errors.md is tried once.
"""

from __future__ import annotations

from pathlib import Path

import click
import pytest
from click.testing import CliRunner, Result
from helpers_cli import assert_cli_error

LINE = "error: mix.csv, line 3: 'abc' is not a number; fix the cell"


@click.command()
@click.option("--out", "stdout", multiple=True, help="A line for stdout.")
@click.option("--err", "stderr", multiple=True, help="A line for stderr.")
@click.option("--code", default=2, help="The exit code; -1 raises ValueError instead.")
def stand_in(stdout: tuple[str, ...], stderr: tuple[str, ...], code: int) -> None:
    """Print the given lines and exit with ``code``."""
    for line in stdout:
        click.echo(line)
    for line in stderr:
        click.echo(line, err=True)
    if code == -1:
        raise ValueError("a crash, not a refusal")
    raise SystemExit(code)


def stand_in_result(*args: str) -> Result:
    """Run the stand-in command in-process."""
    return CliRunner().invoke(stand_in, list(args))


def test_a_clean_refusal_passes_and_gives_its_line() -> None:
    result = stand_in_result("--err", LINE)
    assert assert_cli_error(result, r"line 3: 'abc'", r"fix the cell$") == LINE
    assert assert_cli_error(result, "'abc' is not", literal=True) == LINE


def test_progress_lines_pass_only_when_allowed() -> None:
    result = stand_in_result("--out", "plate 1/1: done", "--err", "plate 1/2: run.csv",
                             "--err", LINE)
    assert assert_cli_error(result, progress=True) == LINE
    with pytest.raises(AssertionError):
        assert_cli_error(result)


@pytest.mark.parametrize(("args", "options"), [
    pytest.param(["--err", LINE, "--code", "0"], {}, id="success"),
    pytest.param(["--err", LINE, "--code", "1"], {}, id="exit-1"),
    pytest.param(["--err", LINE, "--code", "-1"], {}, id="crash"),
    pytest.param(["--err", "Traceback (most recent call last):", "--err", LINE],
                 {"progress": True}, id="traceback"),
    pytest.param(["--err", LINE, "--err", LINE], {"progress": True}, id="two-errors"),
    pytest.param(["--err", "Error: no such option"], {}, id="not-our-error-line"),
    pytest.param(["--err", LINE, "--err", "plate 2/2: done"], {"progress": True},
                 id="error-not-last"),
    pytest.param(["--err", LINE, "--err", "warning: late"], {}, id="second-line"),
    pytest.param(["--out", "a summary", "--err", LINE], {}, id="stdout"),
    pytest.param(["--err", LINE], {"patterns": ["line 4"]}, id="regex-not-found"),
    pytest.param(["--err", LINE], {"patterns": ["'abc' is not a (number)"], "literal": True},
                 id="text-not-found"),
])
def test_a_broken_contract_fails(args: list[str], options: dict) -> None:
    kwargs = {k: v for k, v in options.items() if k != "patterns"}
    with pytest.raises(AssertionError):
        assert_cli_error(stand_in_result(*args), *options.get("patterns", []), **kwargs)


@pytest.mark.parametrize("left", ["r.csv", ".r.csv.1234.part"])
def test_an_output_or_its_temporary_left_behind_fails(tmp_path: Path, left: str) -> None:
    result = stand_in_result("--err", LINE)
    assert_cli_error(result, must_not_exist=[tmp_path / "r.csv"])
    (tmp_path / left).write_text("partial\n")
    with pytest.raises(AssertionError):
        assert_cli_error(result, must_not_exist=[tmp_path / "r.csv"])
