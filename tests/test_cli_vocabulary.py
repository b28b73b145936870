"""One vocabulary on the command line (issue 17 item 6): an option name means one thing.

The rule is the project's own (DEVELOPERS.md, "Conventions": one meaning per parameter name
across the API and the CLI; a renamed option is kept for one release, hidden). These tests
walk every command of the root group, so a new command or option is checked without being
listed here.
"""

from __future__ import annotations

import re
from collections import defaultdict
from collections.abc import Iterator

import click
import pytest
from helpers_cli import assert_cli_error

from mixsolve.cli import NOISE_HELP, main
from mixsolve.workflows.demo import demo_file

#: The physical units an option's help can state; two uses of one name must state the same.
_UNIT = re.compile(r"(?<![\w/-])(nm|cm|mm|µL|AU/cm|AU|%|g/mol)(?![\w/-])")
#: Commands that take a library file: all take it the same way, as the first argument.
LIBRARY_COMMANDS = {("unmix",), ("plate",), ("wavelengths", "check"),
                    ("wavelengths", "choose"), ("library", "show")}


def _commands(group: click.Group = main, path: tuple[str, ...] = ()
              ) -> Iterator[tuple[tuple[str, ...], click.Command]]:
    for name, command in sorted(group.commands.items()):
        if isinstance(command, click.Group):
            yield from _commands(command, (*path, name))
        else:
            yield (*path, name), command


def _parser(param: click.Parameter) -> str:
    """The function that reads an option's text: ``callback(parse_x)`` closes over parse_x."""
    found = param.callback
    for cell in getattr(found, "__closure__", None) or ():
        if callable(cell.cell_contents):
            found = cell.cell_contents
    return getattr(found, "__name__", "") if found is not None else ""


def _meaning(param: click.Option) -> tuple[object, ...]:
    """What a use of an option says it is: type, flag or value, how its text is read, the
    choices it offers and the units its help states."""
    choices = tuple(getattr(param.type, "choices", ()) or ())
    return (param.type.name, param.is_flag, param.multiple, _parser(param), choices,
            frozenset(_UNIT.findall(param.help or "")))


def _uses() -> dict[str, list[tuple[str, click.Option]]]:
    uses: dict[str, list[tuple[str, click.Option]]] = defaultdict(list)
    for path, command in _commands():
        for param in command.params:
            if isinstance(param, click.Option) and not param.hidden:
                for name in param.opts:
                    uses[name].append((" ".join(path), param))
    return uses


def test_every_option_name_means_one_thing_in_every_command():
    """Each option name shared by several commands has one type, one reading of its text,
    one set of choices and states the same units in its help, wherever it appears."""
    shared = {name: found for name, found in _uses().items() if len(found) > 1}
    assert {"--unit", "--noise", "--pathlength", "--window"} <= set(shared)
    for name, found in shared.items():
        meanings = {command: _meaning(param) for command, param in found}
        assert len(set(meanings.values())) == 1, (name, meanings)


def test_unit_is_the_results_concentration_unit_wherever_it_is_shown():
    """``--unit`` is the concentration unit of the results; the absorptivity unit of
    ``library import`` is ``--absorptivity-unit`` (its old ``--unit`` is hidden)."""
    for command, param in _uses()["--unit"]:
        assert (param.help or "").startswith("Concentration unit of the results"), command
    assert {c for c, _ in _uses()["--absorptivity-unit"]} == {"library import"}


def test_noise_says_the_same_in_every_command():
    """``--noise`` is the noise of ``mixsolve.unmix`` (preset or σ_A in AU) everywhere, with
    one text read by one parser."""
    found = _uses()["--noise"]
    assert {c for c, _ in found} >= {"unmix", "plate", "wavelengths check",
                                     "wavelengths choose"}
    for command, param in found:
        assert (param.help or "").startswith(NOISE_HELP), command
        assert _parser(param) == "parse_noise", command


def test_hidden_options_are_old_names_that_say_so():
    """A hidden option is an old spelling kept for one release, and its help says which."""
    for path, command in _commands():
        for param in command.params:
            if isinstance(param, click.Option) and param.hidden:
                assert re.match(r"^Old (name|spelling) of ", param.help or ""), (path, param.opts)


def test_the_library_is_the_first_argument_of_every_command_that_takes_one():
    """The library file is given one way: first, before the data (``unmix LIB SPECTRA``,
    ``plate LIB EXPORTS``, ``wavelengths check LIB`` ...), never by a visible option."""
    commands = dict(_commands())
    for path in LIBRARY_COMMANDS:
        command = commands[path]
        first = next(p for p in command.params if isinstance(p, click.Argument))
        assert first.human_readable_name.startswith("LIBRARY_FILE"), path
        assert not [p for p in command.params if isinstance(p, click.Option)
                    and "--library" in p.opts and not p.hidden], path


@pytest.fixture
def table(tmp_path):
    path = tmp_path / "eps.csv"
    path.write_text("wavelength_nm,red,blue\n400,100,20\n410,80,40\n420,60,60\n")
    return path


def test_library_import_takes_absorptivity_unit_and_the_old_unit_with_a_warning(
        tmp_path, table, cli):
    """``--absorptivity-unit`` names what the number is; ``--unit`` still works, with a
    warning naming the new spelling, and writes the same library; neither is refused in
    one line."""
    new = cli.ok("library", "import", table, "--absorptivity-unit", "L/(mol*cm)", "--out",
                 tmp_path / "new.nc")
    assert "warning" not in new.stderr
    old = cli.ok("library", "import", table, "--unit", "L/(mol*cm)", "--out",
                 tmp_path / "old.nc")
    assert "warning: --unit is now called --absorptivity-unit" in old.stderr
    assert (tmp_path / "old.nc").stat().st_size > 0
    assert_cli_error(cli("library", "import", table, "--out", tmp_path / "none.nc"),
                     r"^error: missing --absorptivity-unit: the unit of the table's values",
                     must_not_exist=[tmp_path / "none.nc"])
    assert_cli_error(cli("library", "import", table, "--unit", "L/(mol*cm)",
                         "--absorptivity-unit", "L/(mol*cm)", "--out", tmp_path / "both.nc"),
                     r"^error: --unit is the old name of --absorptivity-unit; give "
                     r"--absorptivity-unit only$", progress=True,
                     must_not_exist=[tmp_path / "both.nc"])


def test_demo_layout_with_the_library_first(tmp_path, cli):
    """The documented form ``plate LIB EXPORT --layout ... --volume-ul ...`` runs."""
    lib = tmp_path / "lib.nc"
    cli.ok("library", "build", demo_file("standards_spectra.csv"), "--standards",
           demo_file("standards.csv"), "--out", lib)
    run = cli.ok("plate", lib, demo_file("plate_export.csv"), "--layout",
                 demo_file("plate_layout.csv"), "--out", tmp_path / "out", "--volume-ul",
                 "200", "--well-diameter-mm", "6.96", "--window", "400-700")
    assert "note:" not in run.stderr
