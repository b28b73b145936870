"""The root group of the command line (mixsolve.cli.OneLineErrors) and the options' values.

Every command gets the same treatment from one place: a mixsolve error is one ``error:``
line and exit code 2, Ctrl-C one line and exit code 130, mixsolve's own warnings are
``warning:`` lines and other warnings are not shown (``--debug`` shows both as Python
would). Choices and defaults are the core's own, read when a command needs them.

Each command's body is replaced here by a stand-in, so these tests need no input files.
"""

from __future__ import annotations

import warnings
from collections.abc import Iterator

import click
import pytest
from helpers_cli import Cli
from helpers_imports import numerical_imports

from mixsolve.cli import CoreChoice, CoreDefault, core, in_flag_words, main
from mixsolve.errors import ExtrapolationWarning, InputError

#: The shared in-process runner (the ``cli`` fixture's class), for module-level helpers.
invoke = Cli()


def leaf_commands(group: click.Group = main,
                  path: tuple[str, ...] = ()) -> Iterator[tuple[tuple[str, ...], click.Command]]:
    """Every command that does a job, with the words that call it."""
    for name, command in sorted(group.commands.items()):
        if isinstance(command, click.Group):
            yield from leaf_commands(command, (*path, name))
        else:
            yield (*path, name), command


COMMANDS = list(leaf_commands())
IDS = [" ".join(path) for path, _ in COMMANDS]


def required(command: click.Command) -> list[str]:
    """The fewest words that satisfy click: "1" for each argument and required option."""
    words: list[str] = []
    for param in command.params:
        if isinstance(param, click.Argument):
            words.append("1")
        elif param.required:
            words += [param.opts[0], "1"]
    return words


def run_instead(command: click.Command, body, monkeypatch, *args: object):
    """Run ``command`` with ``body`` in place of its own work."""
    monkeypatch.setattr(command, "callback", body)
    path = next(p for p, c in COMMANDS if c is command)
    return invoke(*args, *path, *required(command))


def test_the_commands_are_all_here():
    assert len(COMMANDS) == 15
    assert ("instrument", "stray-light") in [path for path, _ in COMMANDS]
    assert {("equations", "check"), ("equations", "apply")} <= {p for p, _ in COMMANDS}


# --- errors and Ctrl-C: one line, from the root group ------------------------------------


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_every_command_turns_a_mixsolve_error_into_one_line(path, command, monkeypatch):
    def fail(**options):
        raise InputError("what went wrong\n  and where")

    result = run_instead(command, fail, monkeypatch)
    assert result.exit_code == 2, (result.output, result.exception)
    assert result.stderr == "error: what went wrong and where\n"
    assert result.stdout == ""


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_every_command_turns_ctrl_c_into_one_line(path, command, monkeypatch):
    def interrupted(**options):
        raise KeyboardInterrupt

    result = run_instead(command, interrupted, monkeypatch)
    assert result.exit_code == 130
    assert result.stderr == "error: interrupted (Ctrl-C); this run changed no file\n"


def test_debug_shows_the_error_itself(monkeypatch):
    command = dict(COMMANDS)[("unmix",)]

    def fail(**options):
        raise InputError("what went wrong")

    result = run_instead(command, fail, monkeypatch, "--debug")
    assert result.exit_code == 1
    assert isinstance(result.exception, InputError)


def test_a_bug_is_not_disguised_as_bad_input(monkeypatch):
    """Only mixsolve's errors are the user's: anything else keeps its traceback (exit 1)."""
    command = dict(COMMANDS)[("unmix",)]

    def bug(**options):
        raise ZeroDivisionError("a bug")

    result = run_instead(command, bug, monkeypatch)
    assert result.exit_code == 1
    assert isinstance(result.exception, ZeroDivisionError)


def test_an_option_value_refused_by_its_callback_is_one_line():
    """Option values are parsed by click callbacks; their errors get the same treatment."""
    result = invoke("wavelengths", "choose", "lib.nc", "--count", "3", "--compare", "460,x")
    assert result.exit_code == 2
    assert result.stderr == ("error: --compare: '460,x' is not a comma-separated list of nm, "
                             "e.g. 663.6,646.6\n")


# --- warnings: mixsolve's own as one line each, others not shown --------------------------


def warn_three(**options):
    warnings.warn("4 wavelengths left out", ExtrapolationWarning, stacklevel=1)
    warnings.warn("port 8787 is busy", UserWarning, stacklevel=1)
    warnings.warn("invalid value encountered in divide", RuntimeWarning, stacklevel=1)
    warnings.warn("4 wavelengths left out", ExtrapolationWarning, stacklevel=1)


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_every_command_shows_only_mixsolve_warnings(path, command, monkeypatch):
    with warnings.catch_warnings(record=True) as shown:
        warnings.simplefilter("always")
        result = run_instead(command, warn_three, monkeypatch)
    assert result.exit_code == 0, (result.output, result.exception)
    assert result.stderr == "warning: 4 wavelengths left out\n" * 2
    assert result.stdout == ""
    assert shown == []  # nor shown by Python


def test_debug_shows_other_warnings_as_python_does(monkeypatch):
    """With --debug the other warnings go to Python's own display (recorded here)."""
    command = dict(COMMANDS)[("unmix",)]
    with warnings.catch_warnings(record=True) as shown:
        result = run_instead(command, warn_three, monkeypatch, "--debug")
    assert result.exit_code == 0
    assert result.stderr == "warning: 4 wavelengths left out\n" * 2
    assert [(w.category, str(w.message)) for w in shown] == [
        (UserWarning, "port 8787 is busy"),
        (RuntimeWarning, "invalid value encountered in divide")]


def test_warnings_come_before_the_error(monkeypatch):
    command = dict(COMMANDS)[("unmix",)]

    def warn_then_fail(**options):
        warnings.warn("a mixsolve warning", ExtrapolationWarning, stacklevel=1)
        raise InputError("bad input")

    result = run_instead(command, warn_then_fail, monkeypatch)
    assert result.exit_code == 2
    assert result.stderr == "warning: a mixsolve warning\nerror: bad input\n"


# --- choices and defaults: the core's own ------------------------------------------------


def core_defaults(command: click.Command) -> list[click.Parameter]:
    return [p for p in command.params if isinstance(p.default, CoreDefault)]


def test_most_defaults_and_choices_come_from_the_core():
    params = [p for _, command in COMMANDS for p in command.params]
    assert len([p for p in params if isinstance(p.default, CoreDefault)]) >= 25
    assert len([p for p in params if isinstance(p.type, CoreChoice)]) >= 10
    assert not [p.name for p in params if type(p.type) is click.Choice]


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_each_default_reaches_the_command_as_the_core_value(path, command, monkeypatch):
    """What the command receives for an option left out is the core's default itself (after
    the round trip through the option's text and callback, e.g. 0.2 → 20 % → 0.2)."""
    seen: dict[str, object] = {}
    result = run_instead(command, lambda **options: seen.update(options), monkeypatch)
    assert result.exit_code == 0, (result.output, result.exception)
    for param in core_defaults(command):
        expected = CoreDefault(param.default.ref, param.default.keyword)()
        value = seen[param.name]
        if isinstance(expected, tuple) and isinstance(value, list):
            value = tuple(value)
        assert value == expected, param.name


@pytest.mark.parametrize(("path", "command"), COMMANDS, ids=IDS)
def test_each_command_help_shows_the_core_defaults_and_choices(path, command):
    result = invoke(*path, "--help")
    assert result.exit_code == 0, (result.output, result.exception)
    text = " ".join(result.stdout.split())
    for param in command.params:
        if isinstance(param.type, CoreChoice):
            choices = core(param.type.ref)
            assert param.type.choices == tuple(str(c) for c in choices)
            assert f"[{'|'.join(param.type.choices)}]" in text, param.name
        if isinstance(param.default, CoreDefault):
            assert f"[default: {param.default}]" in text, param.name


def test_the_choices_are_the_cores_tuples():
    from mixsolve.plate.wells import PLATE_SHAPES
    from mixsolve.solve.design import BASELINES
    from mixsolve.solve.engine import METHODS

    params = {p.name: p for p in dict(COMMANDS)[("plate",)].params}
    assert params["method"].type.choices == METHODS
    assert params["baseline"].type.choices == BASELINES
    assert params["plate_size"].type.choices == tuple(str(n) for n in PLATE_SHAPES)


def test_max_cv_is_a_percent_on_the_command_line_and_in_the_core(monkeypatch):
    """--max-cv and max_cv_percent are one number in % (issue 17 item 4: CV as a percent
    everywhere); the core's default is the command's."""
    from mixsolve.plate.analysis import analyse_plate

    command = dict(COMMANDS)[("plate",)]
    seen: dict[str, object] = {}
    result = run_instead(command, lambda **options: seen.update(options), monkeypatch)
    assert result.exit_code == 0
    assert seen["max_cv_percent"] == 20.0
    assert analyse_plate.__kwdefaults__["max_cv_percent"] == 20.0
    assert "[default: 20.0]" in invoke("plate", "--help").stdout
    assert invoke("plate", *required(command), "--max-cv", "5").exit_code == 0
    assert seen["max_cv_percent"] == 5.0


def test_plate_size_reaches_the_core_as_a_number(monkeypatch):
    command = dict(COMMANDS)[("plate",)]
    seen: dict[str, object] = {}
    monkeypatch.setattr(command, "callback", lambda **options: seen.update(options))
    assert invoke("plate", *required(command), "--plate-size", "384").exit_code == 0
    assert seen["plate_size"] == 384


def test_help_texts_name_what_the_core_offers():
    """Values named in help texts (not options' defaults) match the core."""
    from mixsolve.noise import PRESETS
    from mixsolve.pls.cross_validation import DEFAULT_FOLDS
    from mixsolve.uncertainty.inputs import DEFAULT_FILL_VOLUME_UL

    unmix = " ".join(invoke("unmix", "--help").stdout.split())
    for preset in PRESETS:
        assert preset in unmix
    assert f"[{DEFAULT_FILL_VOLUME_UL:g}]" in unmix
    calibrate = " ".join(invoke("calibrate", "--help").stdout.split())
    assert f"[min({DEFAULT_FOLDS}, samples)]" in calibrate


def test_help_and_version_import_no_numerical_library():
    """`mixsolve --help`, `--version` and each command's help stay quick: the core's
    choices and defaults are read from its source (core_value), not by importing numpy,
    xarray and scipy; a real run does import them."""
    assert numerical_imports(
        "from click.testing import CliRunner\n"
        "from mixsolve.cli import main\n"
        "for args in (['--help'], ['--version'], ['instrument', '--help'],\n"
        "             ['unmix', '--help'], ['plate', '--help'], ['calibrate', '--help'],\n"
        "             ['wavelengths', 'choose', '--help'],\n"
        "             ['instrument', 'wavelength', '--help']):\n"
        "    assert CliRunner().invoke(main, args).exit_code == 0, args\n") == []
    assert "numpy" in numerical_imports(
        "from click.testing import CliRunner\n"
        "from mixsolve.cli import main\n"
        "CliRunner().invoke(main, ['unmix', 'no-such.nc', 'no-such.csv'])\n")


def test_defaults_read_from_source_equal_the_imported_ones():
    """core_value reads literals from the source; each equals what importing gives."""
    import inspect

    from mixsolve.cli import _NOT_LITERAL, _literal

    compared = 0
    for _, command in COMMANDS:
        for param in command.params:
            for ref, keyword in [(getattr(param.default, "ref", None),
                                  getattr(param.default, "keyword", None)),
                                 (getattr(param.type, "ref", None), None)]:
                if ref is None:
                    continue
                read = _literal(ref, keyword)
                real = core(ref) if keyword is None \
                    else inspect.signature(core(ref)).parameters[keyword].default
                assert read is _NOT_LITERAL or read == real, (ref, keyword, read, real)
                compared += read is not _NOT_LITERAL
    assert compared >= 20, compared  # the source road is really taken


@pytest.mark.parametrize(("command", "message", "expected"), [
    ("unmix", "pathlength_cm: 0 cm is not a positive number",
     "--pathlength: 0 cm is not a positive number"),
    ("unmix", "absorbance_range: 0-2 AU must be increasing", "--range: 0-2 AU must be increasing"),
    ("unmix", "max_shift_nm: nan nm is not a finite number",
     "--max-shift: nan nm is not a finite number"),
    ("unmix", "window 800-900 nm holds no measured wavelength",
     "window 800-900 nm holds no measured wavelength"),
    ("unmix", "window: 900-800 nm must be increasing", "--window: 900-800 nm must be increasing"),
    ("unmix", "lib.nc: not a mixsolve library", "lib.nc: not a mixsolve library"),
    ("unmix", "volume_ul: 0 µL is not a positive number",
     "volume_ul: 0 µL is not a positive number"),
    ("unmix", "fit_shift needs max_shift_nm > 0 and a unit for the window",
     "--fit-shift needs --max-shift > 0 and a unit for the window"),
    ("unmix", "max_shift.csv: max_shift_nm is not a column; see data/max_shift_nm",
     "max_shift.csv: --max-shift is not a column; see data/max_shift_nm"),
    ("plate", "pathlength given 2 ways (fixed, water band); give one of pathlength_cm, "
              "volume_ul with well_diameter_mm, or water_band",
     "pathlength given 2 ways (fixed, water band); give one of --pathlength, --volume-ul with "
     "--well-diameter-mm, or --water-band"),
    ("plate", "volume_ul and well_diameter_mm go together: the pathlength from the fill volume "
              "needs both",
     "--volume-ul and --well-diameter-mm go together: the pathlength from the fill volume "
     "needs both"),
    ("plate", "no library: give a library, or build it from the plate's standard wells "
              "(library_from_plate)",
     "no library: give a library, or build it from the plate's standard wells "
     "(--library-from-plate)"),
    ("plate", "window 800-900 nm holds no library wavelength (library 400-700 nm)",
     "window 800-900 nm holds no library wavelength (library 400-700 nm)"),
    ("unmix", "model.nc: attribute pathlength_cm 0.0 is not a positive number",
     "model.nc: attribute pathlength_cm 0.0 is not a positive number"),
    ("unmix", "s.csv: expected sample, component, concentration, unit (and optionally "
              "pathlength_cm)",
     "s.csv: expected sample, component, concentration, unit (and optionally pathlength_cm)"),
])
def test_core_errors_name_the_flags_of_the_command_that_ran(command, message, expected):
    """A core error names API parameters; the command line names the flags of the running
    command for them, wherever they stand (unmix has no --volume-ul, so that name stays). Mid-
    sentence only names with an underscore are mapped: plain words ("window", "library") and
    file names stay as they are."""
    assert in_flag_words(message, main.commands[command]) == expected
