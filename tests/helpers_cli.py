"""Running ``mixsolve`` in-process, and the one check of its one-line error (docs/errors.md).

Tests get the runner from the ``cli`` fixture (tests/conftest.py): ``cli(*args)`` runs
``mixsolve ARGS`` with ``str()`` of each argument and returns click's ``Result``;
``cli.ok(*args)`` also checks that the command succeeded. A refused run is checked with
:func:`assert_cli_error`, the contract every command keeps for bad input: exit code 2,
exactly one line on stderr starting with ``error:``, no traceback, nothing written.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from pathlib import Path

from click.testing import CliRunner, Result
from helpers_io import leftovers

from mixsolve.cli import main


class Cli:
    """``mixsolve`` run in-process by click's ``CliRunner`` (stdout and stderr apart)."""

    def __call__(self, *args: object) -> Result:
        """Run ``mixsolve ARGS`` (each argument as ``str()``); return click's Result."""
        return CliRunner().invoke(main, [str(a) for a in args])

    def ok(self, *args: object) -> Result:
        """Run a command that must succeed (exit 0, no traceback); return its Result."""
        result = self(*args)
        assert result.exit_code == 0, (result.output, result.exception)
        assert "Traceback" not in result.output
        return result


def assert_nothing_written(path: Path) -> None:
    """No file (or folder) at ``path`` and no ``.part`` temporary left beside it."""
    path = Path(path)
    assert not path.exists(), path
    if path.parent.is_dir():
        assert leftovers(path.parent) == [], path.parent


def assert_cli_error(result: Result, *patterns: str, literal: bool = False,
                     progress: bool = False, must_not_exist: Iterable[Path] = ()) -> str:
    """Check a refused run against the one-line error contract; return the error line.

    Parameters
    ----------
    result : click.testing.Result
        The run (from the ``cli`` fixture).
    *patterns : str
        Regular expressions that must each be found in the error line (``re.search``),
        or, with ``literal``, plain text that must each occur in it.
    literal : bool
        Take ``patterns`` as plain text rather than regular expressions.
    progress : bool
        Allow other lines on stdout and stderr (a plate batch's progress, a summary)
        before the error line; without it the error is the only output.
    must_not_exist : iterable of path-like
        Outputs the run must not have written, nor left a ``.part`` temporary beside.

    The run must exit with code 2 (a ``SystemExit``, not a crash), print no traceback and
    put exactly one line starting with ``error: `` on stderr, the last one printed.
    """
    assert result.exit_code == 2, (result.exit_code, result.output, result.exception)
    assert isinstance(result.exception, SystemExit), result.exception
    assert "Traceback" not in result.output
    assert "Traceback" not in result.stderr
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    errors = [line for line in lines if line.startswith("error")]
    assert len(errors) == 1 and errors[0].startswith("error: "), result.stderr
    line = errors[0]
    if progress:
        assert lines[-1] == line, result.stderr
    else:
        assert result.stderr.splitlines() == [line], result.stderr
        assert result.stdout == "", result.stdout
    for pattern in patterns:
        if literal:
            assert pattern in line, (pattern, line)
        else:
            assert re.search(pattern, line), (pattern, line)
    for path in must_not_exist:
        assert_nothing_written(path)
    return line
