"""Command line: a thin click layer. Each command parses, calls one API function, prints.

The root group (:class:`OneLineErrors`) handles every command's failures once: an error a
user can cause (:class:`mixsolve.errors.MixsolveError`) becomes one line on stderr and exit
code 2, Ctrl-C one line and exit code 130, and ``--debug`` shows the traceback instead.
mixsolve's own warnings (:class:`mixsolve.errors.MixsolveWarning`) become ``warning:``
lines on stderr; a library's warnings are not the user's business (``--debug`` shows them).

Option values are parsed by click callbacks (``parse_*``); choices and defaults are read
from the core (:class:`CoreChoice`, :class:`CoreDefault`) when a command needs them, so that
``mixsolve --help`` and ``mixsolve --version`` import none of the numerical libraries.
"""

from __future__ import annotations

import ast
import contextlib
import functools
import importlib
import importlib.util
import inspect
import re
import sys
import warnings
from collections.abc import Callable, Iterator
from typing import Any, TypeVar

import click

from mixsolve._version import __version__
from mixsolve.errors import InputError, MixsolveError, MixsolveWarning

T = TypeVar("T")


class UsageError(click.ClickException):
    """A mixsolve error shown as one plain line, exit code 2."""

    exit_code = 2

    def show(self, file: Any = None) -> None:
        click.echo(f"error: {self.format_message()}", err=True)


class Interrupted(click.ClickException):
    """Ctrl-C: one line and exit code 130 (128 + SIGINT, the shell's convention)."""

    exit_code = 130

    def show(self, file: Any = None) -> None:
        click.echo(f"error: {self.format_message()}", err=True)


#: What Ctrl-C prints: every output is staged until the run succeeds (mixsolve.io.outputs).
INTERRUPTED = "interrupted (Ctrl-C); this run changed no file"


@contextlib.contextmanager
def one_line_errors(debug: bool) -> Iterator[None]:
    """Map a mixsolve error to exit 2 and Ctrl-C to exit 130, each as one line."""
    try:
        yield
    except MixsolveError as exc:
        if debug:
            raise
        raise UsageError(" ".join(str(exc).split())) from None
    except KeyboardInterrupt:
        if debug:
            raise
        raise Interrupted(INTERRUPTED) from None


@contextlib.contextmanager
def interrupts_noted() -> Iterator[None]:
    """Ctrl-C raises ``KeyboardInterrupt`` as usual and is also noted
    (:func:`mixsolve.io.outputs.note_interrupt`): a run whose interrupt some callback
    swallowed still commits nothing and ends with exit 130."""
    import signal
    import threading

    from mixsolve.io.outputs import clear_interrupt, note_interrupt

    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def on_sigint(signum: int, frame: Any) -> None:
        note_interrupt()
        raise KeyboardInterrupt

    def unraisable(info: Any) -> None:  # "Exception ignored in ...": noted, so not shown
        if not issubclass(info.exc_type, KeyboardInterrupt):
            hook(info)

    clear_interrupt()
    previous = signal.signal(signal.SIGINT, on_sigint)
    hook, sys.unraisablehook = sys.unraisablehook, unraisable
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
        sys.unraisablehook = hook
        if clear_interrupt():
            raise KeyboardInterrupt  # mapped to one line and exit 130 by one_line_errors


@contextlib.contextmanager
def warning_lines(debug: bool) -> Iterator[None]:
    """Echo mixsolve's own warnings as ``warning: ...`` lines on stderr when the command ends.

    Other warnings (a library's note about a busy port, a numpy RuntimeWarning) say nothing
    the user can act on: they are dropped, or shown as Python shows them with ``--debug``.
    """
    caught: list[warnings.WarningMessage] = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            if not debug:
                warnings.simplefilter("ignore")
            warnings.simplefilter("always", MixsolveWarning)
            yield
    finally:
        for w in caught:
            if issubclass(w.category, MixsolveWarning):
                click.echo(f"warning: {w.message}", err=True)
            else:
                warnings.showwarning(w.message, w.category, w.filename, w.lineno)


# --- choices and defaults read from the core ----------------------------------------------


def core(ref: str) -> Any:
    """The core object ``ref`` names, as ``"package.module:name"`` (imported on first use)."""
    module, _, name = ref.partition(":")
    return getattr(importlib.import_module(module), name)


_NOT_LITERAL = object()


def core_value(ref: str, keyword: str | None = None) -> Any:
    """A core constant, or the default of a core function's keyword, as the core defines it.

    Read from the module's source when it is a literal (a number, a string, a tuple, a
    dict, or a module-level constant that is one), so that ``mixsolve unmix --help`` need
    not import numpy, xarray and scipy (a few seconds) to show its choices and defaults;
    anything else is imported. ``tests/test_cli_root.py`` checks both roads agree.
    """
    value = _literal(ref, keyword)
    if value is not _NOT_LITERAL:
        return value
    value = core(ref)
    return value if keyword is None else inspect.signature(value).parameters[keyword].default


@functools.cache
def _module_tree(module: str) -> ast.Module | None:
    spec = importlib.util.find_spec(module)
    if spec is None or spec.origin is None or not spec.origin.endswith(".py"):
        return None
    with open(spec.origin, encoding="utf-8") as handle:
        return ast.parse(handle.read())


def _literal(ref: str, keyword: str | None) -> Any:
    module, _, name = ref.partition(":")
    try:
        tree = _module_tree(module)
    except (ImportError, OSError, SyntaxError, ValueError):
        return _NOT_LITERAL
    if tree is None:
        return _NOT_LITERAL
    constants = {}
    imported = {alias.asname or alias.name: f"{node.module}:{alias.name}"
                for node in tree.body if isinstance(node, ast.ImportFrom) and node.module
                for alias in node.names}
    for node in tree.body:
        target = node.targets[0] if isinstance(node, ast.Assign) and len(node.targets) == 1 \
            else node.target if isinstance(node, ast.AnnAssign) and node.value else None
        if isinstance(target, ast.Name):
            constants[target.id] = node.value  # type: ignore[union-attr]
    if keyword is None:
        expr = constants.get(name)
    else:
        function = next((n for n in tree.body if isinstance(n, ast.FunctionDef)
                         and n.name == name), None)
        if function is None:
            return _NOT_LITERAL
        args = function.args
        pairs = list(zip(args.args[len(args.args) - len(args.defaults):], args.defaults,
                         strict=True))
        pairs += [(a, d) for a, d in zip(args.kwonlyargs, args.kw_defaults, strict=True) if d]
        expr = next((d for a, d in pairs if a.arg == keyword), None)
    if isinstance(expr, ast.Name):  # a module-level constant, here or imported
        if expr.id not in constants:
            return _literal(imported[expr.id], None) if expr.id in imported else _NOT_LITERAL
        expr = constants.get(expr.id)
    try:
        return ast.literal_eval(expr) if expr is not None else _NOT_LITERAL
    except ValueError:
        return _NOT_LITERAL


def number_text(value: float) -> str:
    """A number as the command line takes it: ``2.0`` as ``2``, ``241.15`` as it is."""
    return f"{value:.15g}"


class CoreDefault:
    """An option's default, read from the core when a command needs it.

    ``CoreDefault("mixsolve.noise:DEFAULT_ABSORBANCE_RANGE")`` is a constant;
    ``CoreDefault("mixsolve.solve.unmix:unmix", "max_shift_nm")`` the default of a keyword
    of a core function. ``text`` turns the value into what the option takes on the command
    line (its callback parses that again). click calls the object for the value, and shows
    ``str()`` of it in the help.
    """

    def __init__(self, ref: str, keyword: str | None = None,
                 text: Callable[[Any], Any] = lambda value: value) -> None:
        self.ref = ref
        self.keyword = keyword
        self.text = text

    def __call__(self) -> Any:
        return self.text(core_value(self.ref, self.keyword))

    def __str__(self) -> str:
        return str(self())

    def __repr__(self) -> str:
        return f"CoreDefault({self.ref!r}, {self.keyword!r})"


class CoreChoice(click.Choice):
    """A ``click.Choice`` over a tuple (or the keys of a dict) of the core, e.g.
    ``CoreChoice("mixsolve.solve.design:BASELINES")``, read when a command needs it."""

    def __init__(self, ref: str) -> None:
        # not click.Choice.__init__, which would read the choices now: they are a property
        self.ref = ref
        self.case_sensitive = True

    @property
    def choices(self) -> tuple[str, ...]:
        return tuple(str(choice) for choice in core_value(self.ref))

    def __repr__(self) -> str:
        return f"CoreChoice({self.ref!r})"


# --- option values: click callbacks -----------------------------------------------------


def callback(parse: Callable[[str, str], T]) -> Callable[..., T | None]:
    """A click callback running ``parse(text, flag)`` on an option given (or defaulted);
    ``flag`` (e.g. ``--range``) names the option in messages."""

    def parse_option(ctx: click.Context, param: click.Parameter, text: str | None) -> T | None:
        if text is None or ctx.resilient_parsing:
            return None
        return parse(text, param.opts[0])

    return parse_option


def number(text: str) -> float:
    """A number as a person writes it: ``float`` without Python's ``1_000`` digit grouping
    (``6_20`` is a typo, not 620)."""
    if "_" in text:
        raise ValueError(text)
    return float(text)


def _finite(values: list[float], option: str, text: str) -> list[float]:
    """``values`` parsed from ``text``, refused when one is NaN or infinite."""
    for value in values:
        if value != value or value in (float("inf"), float("-inf")):
            raise InputError(f"{option}: {value:g} in {text!r} is not a finite number")
    return values


def parse_window(text: str, option: str = "--window") -> tuple[float, float]:
    """Parse ``"400-700"`` (nm) into a pair; both ends are included in the fit."""
    parts = text.replace(":", "-").split("-")
    try:
        low, high = (number(p) for p in parts)
    except ValueError:
        raise InputError(f"{option}: {text!r} is not LOW-HIGH, e.g. 400-700") from None
    low, high = _finite([low, high], option, text)
    return low, high


def window_text(window: tuple[float, float]) -> str:
    """A (low, high) pair as :func:`parse_window` reads it: ``(0.3, 2.0)`` as ``0.3-2``."""
    return "-".join(number_text(end) for end in window)


def numbers_text(values: tuple[float, ...]) -> str:
    """Numbers as :func:`parse_numbers` reads them: ``241.15,287.15``."""
    return ",".join(number_text(value) for value in values)


def parse_wavelengths(text: str, option: str = "--wavelengths") -> list[float]:
    """Parse ``"663.6,646.6"`` (nm)."""
    try:
        values = [number(p) for p in text.split(",") if p.strip()]
    except ValueError:
        raise InputError(f"{option}: {text!r} is not a comma-separated list of nm, "
                         "e.g. 663.6,646.6") from None
    return _finite(values, option, text)


def parse_numbers(text: str, option: str) -> list[float]:
    """Parse a comma-separated list of numbers given to ``option``."""
    try:
        values = [number(p) for p in text.split(",") if p.strip()]
    except ValueError:
        raise InputError(f"{option}: {text!r} is not a comma-separated list of numbers") from None
    return _finite(values, option, text)


def parse_names(text: str, option: str) -> list[str] | None:
    """Parse ``"red,blue"`` into names; an empty text is no list."""
    return [name.strip() for name in text.split(",")] if text else None


def parse_noise(text: str, option: str = "--noise") -> str | float:
    """``--noise``: a preset name or σ_A in AU."""
    try:
        value = number(text)
    except ValueError:
        return text
    return _finite([value], option, text)[0]


def parse_molar_masses(text: str, option: str = "--molar-mass") -> dict[str, float] | None:
    """Parse ``"chl_a=893.5,chl_b=907.5"`` (g/mol)."""
    if not text:
        return None
    return _named_numbers(text, option, "NAME=G_PER_MOL")


def _named_numbers(text: str, option: str, form: str) -> dict[str, float]:
    """Parse ``"a=1,b=2"`` into {name: number}: each item ``form``, each name once, finite."""
    out: dict[str, float] = {}
    for item in text.split(","):
        name, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            parsed = number(value)
        except ValueError:
            raise InputError(f"{option}: {item!r} is not {form}") from None
        if name.strip() in out:
            raise InputError(f"{option}: {name.strip()!r} is given twice; give each "
                             "component once")
        out[name.strip()] = parsed
        _finite([parsed], option, item)
    return out


def parse_scale_uncertainty(text: str, option: str = "--u-scale-rel"
                            ) -> float | dict[str, float] | None:
    """Parse ``"0.02"`` (every component) or ``"chl_a=0.02,chl_b=0.03"`` (relative)."""
    if not text:
        return None
    if "=" not in text:
        try:
            value = number(text)
        except ValueError:
            raise InputError(f"{option}: {text!r} is not a number or NAME=VALUE,...; give a "
                             "relative standard uncertainty as a fraction, e.g. 0.02 for 2 %, "
                             "or chl_a=0.02,chl_b=0.03") from None
        _finite([value], option, text)
        return value
    return _named_numbers(text, option, "NAME=VALUE (a relative standard uncertainty, e.g. "
                          "chl_a=0.02)")


def parse_latent(text: str, option: str = "--latent") -> int | str:
    """Parse ``--latent``: ``auto`` or a whole number of latent variables."""
    if text.strip().lower() == "auto":
        return "auto"
    try:
        return int(text)
    except ValueError:
        raise InputError(f"{option}: {text!r} is not a whole number or 'auto'") from None


def parse_whole(text: str, option: str) -> int:
    """A choice made of digits (``--plate-size 384``) as the number it names."""
    return int(text)


# where the defaults live: the API functions the commands call
UNMIX = "mixsolve.solve.unmix:unmix"
ANALYSE_PLATE = "mixsolve.plate.analysis:analyse_plate"
CALIBRATE = "mixsolve.pls.calibrate:calibrate"
ABSORBANCE_SCALE = "mixsolve.instrument.absorbance_scale:check_absorbance_scale"
WAVELENGTH_SCALE = "mixsolve.instrument.wavelength_scale:check_wavelength_scale"
STRAY_LIGHT = "mixsolve.instrument.stray_light:check_stray_light"
BASELINE_CHOICE = CoreChoice("mixsolve.solve.design:BASELINES")

#: What --noise is, in every command that has it (the ``noise`` of ``mixsolve.unmix``).
NOISE_HELP = ("Noise model: a preset (benchtop_double_beam, diode_array, microplate, "
              "field_photometer) or σ_A in AU")

fit_options = [
    click.option("--method", type=CoreChoice("mixsolve.solve.engine:METHODS"),
                 default=CoreDefault(UNMIX, "method"), show_default=True),
    click.option("--baseline", type=BASELINE_CHOICE, default=CoreDefault(UNMIX, "baseline"),
                 show_default=True, help="Baseline terms fitted with the components: none, "
                 "offset, linear (offset and slope) or scatter (offset and a·(λ/λ₀)^-n, n "
                 "fitted per sample)."),
    click.option("--reference-wavelength", "reference_wavelength", type=float,
                 help="Subtract each sample's mean reading within ±2 nm of this wavelength "
                 "(nm), outside the fitted ones, before the fit (e.g. 750 for pigments)."),
]
noise_options = [
    click.option("--weights", type=CoreChoice("mixsolve.solve.unmix:WEIGHTS"),
                 default=CoreDefault(UNMIX, "weights"), show_default=True,
                 help="Weight readings by 1/σ_A² of the noise model."),
    click.option("--noise", callback=callback(parse_noise),
                 help=NOISE_HELP + "; enables the lack-of-fit test."),
    click.option("--range", "absorbance_range", type=str,
                 default=CoreDefault(UNMIX, "absorbance_range", window_text), show_default=True,
                 callback=callback(parse_window),
                 help="Reliable absorbance range LOW-HIGH (AU) for the range flags."),
]

#: What the numbers of the spectra files are (mixsolve.spectra.to_absorbance); no default,
#: so that values which cannot be absorbance are refused unless the option is given.
quantity_option = click.option(
    "--quantity", type=CoreChoice("mixsolve.spectra:QUANTITIES"),
    help="What the file's numbers are: absorbance, transmittance (0-1), "
    "percent_transmittance (0-100) or milliabsorbance (mAU); converted to absorbance on "
    "reading. Not given: absorbance, and values that cannot be (median above 10) are "
    "refused, naming the likely quantity.")

selection_options = [
    click.option("--window", callback=callback(parse_window),
                 help="Wavelength window LOW-HIGH in nm, both ends included."),
    click.option("--wavelengths", callback=callback(parse_wavelengths),
                 help="Discrete wavelengths in nm, comma-separated."),
]


#: The stated stray-light fraction and its uncertainty (unmix and plate; the readings are
#: corrected before the fit, docs/uncertainty.md "Stray light").
stray_options = [
    click.option("--stray", type=float, help="Stray-light fraction, e.g. 0.0005: readings "
                 "are corrected for it before the fit, too dark ones left out [that of "
                 "--noise]."),
    click.option("--u-stray", type=float, help="Standard uncertainty of --stray, "
                 "propagated to u_stray [stray/√3]."),
]

#: The spectra's spectral bandpass (unmix and plate; docs/method.md "Spectral bandwidth").
spectra_bandwidth_option = click.option(
    "--bandwidth-nm", "bandwidth_nm", type=float,
    help="Spectral bandpass (FWHM, nm) the spectra were read with; a narrower library is "
    "broadened to it with a triangular slit function before the fit.")

#: Options of ``unmix`` beyond the fit: corrections and the uncertainty budget
#: (mixsolve.workflows.measurement.MeasurementOptions; docs/uncertainty.md).
measurement_options = [
    click.option("--cell-blank", help="Spectra of the sample cell filled with solvent, read "
                  "against the reference cell; subtracted from every spectrum."),
    click.option("--cell-ratio", help="Pathlength of the sample cell / nominal, R or R±U; "
                 "spectra are divided by R."),
    click.option("--wavelength-offset", help="Known wavelength-scale offset in nm (read - true, "
                 "from 'instrument wavelength'), NM or NM±U; the axis is corrected first."),
    click.option("--budget", help="Uncertainty budget CSV to write (GUM; docs/uncertainty.md)."),
    click.option("--pathlength-u", type=float,
                 help="Standard uncertainty of the pathlength (cm), for --budget."),
    click.option("--dilution", help="Dilution before measuring, ALIQUOT/FINAL in mL, e.g. 1/10, "
                 "0.1:piston/10:flask-A or 1±0.01/10; for --budget."),
    click.option("--carryover", type=float,
                 help="Liquid left in the cell when refilled without drying (µL), for --budget."),
    click.option("--fill-volume", type=float, help="Volume filled into the cell (µL) [3000]."),
    click.option("--repeat-scans", help="Repeated scans of one solution: their SD per "
                 "wavelength is the Type A noise of --budget."),
    *stray_options,
    click.option("--monte-carlo", type=int,
                 help="Also propagate by Monte Carlo with this many draws (--budget)."),
]


def add_options(options: list[Callable[..., Any]]) -> Callable[..., Any]:
    """Apply a list of click options as one decorator."""
    def decorate(func: Callable[..., Any]) -> Callable[..., Any]:
        for option in reversed(options):
            func = option(func)
        return func
    return decorate


#: API parameter names (as core errors name them) → the click parameter of the same value,
#: where the two differ. The flag shown is that parameter's, in the command that ran.
API_PARAMETERS = {
    "pathlength_cm": "pathlength", "molar_mass_g_per_mol": "molar_mass",
    "water_k_au_per_cm": "water_k", "library": "library_file", "pathlength_u_cm": "pathlength_u",
    "carryover_ul": "carryover", "fill_volume_ul": "fill_volume", "stray_fraction": "stray",
    "u_stray_fraction": "u_stray",
    "concentration_mg_l": "concentration", "tolerance_pct": "tolerance",
    "linearity_tolerance_pct": "linearity_tolerance", "uv_tolerance_nm": "uv_tolerance",
    "vis_tolerance_nm": "vis_tolerance", "fit_half_width_nm": "fit_half_width",
    "search_nm": "search", "reference_u_nm": "reference_u", "bands_nm": "bands",
    "wavelength_nm": "wavelength", "limit_au": "limit", "max_shift_nm": "max_shift",
    "wavelength_tolerance_nm": "wavelength_tolerance", "bandwidth_nm": "bandwidth",
    "pixels": "cube_pixels", "n_wavelengths": "cube_wavelengths",
    "reference_wavelength_nm": "reference_wavelength",
}
_LEADING_NAME = re.compile(r"^([a-z][a-z0-9_]*)(?=:)")
#: An API parameter named mid-sentence: an identifier with an underscore, not part of a file
#: name or path (``plate_1.csv``), not already a flag (``--water-band``), and not a field of a
#: file (``attribute pathlength_cm``, ``first column wavelength_nm``), which keeps its name.
_INNER_NAME = re.compile(
    r"(?<![\w./\\-])(?<!attribute )(?<!variable )(?<!column )(?<!optionally )(?<!has )"
    r"(?<!starts with )([a-z][a-z0-9]*(?:_[a-z0-9]+)+)(?![\w/\\-])(?!\.\w)")
#: A fix that gives a keyword with its value as the API takes it (``give
#: quantity='milliabsorbance'``, ``(or quantity='absorbance' ...``), shown as the flag and
#: its value (``--quantity milliabsorbance``) when the command has that option.
_KEYWORD_VALUE = re.compile(r"(?:(?<=\bgive )|(?<=\bor ))([a-z][a-z0-9_]*)='([^'\s]+)'")


def in_flag_words(message: str, command: click.Command) -> str:
    """A core error names API parameters (``pathlength_cm: 0 cm is ...``, ``give one of
    pathlength_cm, volume_ul with well_diameter_mm``); on the command line it names the flags
    the user typed (``--pathlength: 0 cm is ...``, ``give one of --pathlength, --volume-ul
    with --well-diameter-mm``).

    A leading ``name:`` is mapped whatever the name (``window:`` → ``--window``); further on,
    only identifiers with an underscore are, so plain words mid-sentence ("window", "unit",
    "library") stay words. Names the running command has no flag for stay as they are.
    """
    flags = {p.name: p.opts[0] for p in command.params
             if isinstance(p, click.Option) and p.name}
    valued = {p.name for p in command.params
              if isinstance(p, click.Option) and p.name and not p.is_flag}

    def flag(name: str) -> str | None:
        return flags.get(name) or flags.get(API_PARAMETERS.get(name, ""))

    def with_value(m: re.Match[str]) -> str:
        name = m.group(1) if m.group(1) in flags else API_PARAMETERS.get(m.group(1), "")
        return f"{flags[name]} {m.group(2)}" if name in valued else m.group(0)

    match = _LEADING_NAME.match(message)
    head, rest = "", message
    if match is not None:
        head = flag(match.group(1)) or match.group(1)
        rest = message[match.end():]
    rest = _KEYWORD_VALUE.sub(with_value, rest)
    return head + _INNER_NAME.sub(lambda m: flag(m.group(1)) or m.group(1), rest)


class FlagWordsCommand(click.Command):
    """A command whose errors name its flags, not the API parameters behind them."""

    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except MixsolveError as exc:
            text = in_flag_words(" ".join(str(exc).split()), self)
            exc.args = (text, *exc.args[1:])
            raise


class OneLineErrors(click.Group):
    """The root group: every command's errors and warnings are handled here, once.

    A mixsolve error is one ``error:`` line and exit code 2, Ctrl-C one line and exit code
    130 (:func:`one_line_errors`); mixsolve's warnings are ``warning:`` lines
    (:func:`warning_lines`); click's own usage errors are one ``error:`` line too (exit 2).
    """

    command_class = FlagWordsCommand
    group_class = type  # subgroups are OneLineErrors too, so their commands name flags

    def invoke(self, ctx: click.Context) -> Any:
        debug = bool(ctx.params.get("debug"))
        with warning_lines(debug), one_line_errors(debug), interrupts_noted():
            return super().invoke(ctx)

    def main(self, *args: Any, **kwargs: Any) -> Any:
        if not kwargs.pop("standalone_mode", True):
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            rv = super().main(*args, standalone_mode=False, **kwargs)
        except click.UsageError as exc:
            hint = f" (see '{exc.ctx.command_path} --help')" if exc.ctx is not None else ""
            click.echo(f"error: {' '.join(exc.format_message().split())}{hint}", err=True)
            sys.exit(exc.exit_code)
        except click.ClickException as exc:
            exc.show()
            sys.exit(exc.exit_code)
        except click.Abort:
            click.echo(f"error: {INTERRUPTED}", err=True)
            sys.exit(Interrupted.exit_code)
        if isinstance(rv, int):
            sys.exit(rv)
        return rv


@click.group(cls=OneLineErrors, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="mixsolve")
@click.option("--debug", is_flag=True, help="Show tracebacks instead of one-line errors.")
def main(debug: bool) -> None:
    """Resolve overlapping absorbance spectra into concentrations, and say how far to trust them."""


@main.command()
@click.option("--out", "out_dir", default=CoreDefault("mixsolve.workflows.demo:run_demo",
                                                      "out_dir"), show_default=True,
              help="Folder for the demo's library, results and comparison.")
@click.option("--cube", "cube_pixels", type=int, default=None, metavar="PIXELS",
              help="Instead: write a synthetic PIXELS x PIXELS image cube (Zarr) into "
                   "OUT/cube/ and unmix it chunk by chunk (needs the scale extra).")
@click.option("--cube-wavelengths", type=int, show_default=True,
              default=CoreDefault("mixsolve.workflows.demo_cube:run_cube_demo", "n_wavelengths"),
              help="Wavelengths of that cube, from 380 to 760 nm.")
def demo(out_dir: str, cube_pixels: int | None, cube_wavelengths: int) -> None:
    """Run the whole job on the bundled synthetic demo data."""
    if cube_pixels is not None:
        from mixsolve.workflows.demo_cube import run_cube_demo

        run = run_cube_demo(out_dir, cube_pixels, cube_wavelengths,
                            progress=sys.stderr)
        click.echo(run.text, nl=False)
        return
    from mixsolve.workflows.demo import run_demo

    click.echo(run_demo(out_dir).text, nl=False)


@main.group()
def library() -> None:
    """Make and inspect pure-component absorptivity libraries."""


@library.command("import")
@click.argument("table")
@click.option("--absorptivity-unit", "absorptivity_unit",
              help='Unit of the table\'s absorptivities, e.g. "L/(mol*cm)" or "L/(g*cm)" '
              "(required).")
@click.option("--unit", "old_unit", hidden=True,
              help="Old name of --absorptivity-unit (until the next release); --unit is the "
              "results' concentration unit elsewhere.")
@click.option("--out", required=True, help="Library file to write (.nc).")
@click.option("--molar-mass", callback=callback(parse_molar_masses),
              help="Molar masses, NAME=G_PER_MOL,...")
@click.option("--solvent", default="", help="Solvent or matrix the values hold for.")
@click.option("--bandwidth-nm", type=float, help="Spectral bandwidth of the instrument (nm).")
@click.option("--u-scale-rel", callback=callback(parse_scale_uncertainty),
              help="Relative standard uncertainty of each whole spectrum, e.g. 0.02, or "
              "NAME=VALUE,... (a published absorptivity's).")
def library_import(table: str, absorptivity_unit: str | None, old_unit: str | None, out: str,
                   molar_mass: dict[str, float] | None,
                   solvent: str, bandwidth_nm: float | None,
                   u_scale_rel: float | dict[str, float] | None) -> None:
    """Make a library from a table of known absorptivities (wavelength_nm, one column each)."""
    from mixsolve.errors import InputError, renamed
    from mixsolve.workflows.library_files import import_library_file

    unit = renamed("--unit", "--absorptivity-unit", old_unit, absorptivity_unit)
    if unit is None:
        raise InputError('missing --absorptivity-unit: the unit of the table\'s values, e.g. '
                         '--absorptivity-unit "L/(mol*cm)" or "L/(g*cm)"')

    lib = import_library_file(table, unit, out, molar_mass=molar_mass,
                              solvent=solvent, bandwidth_nm=bandwidth_nm,
                              u_scale_rel=u_scale_rel)
    click.echo(f"wrote {out}: {lib.sizes['component']} components, "
               f"{lib.sizes['wavelength']} wavelengths, {lib.attrs['unit']}", err=True)


@library.command("build")
@click.argument("spectra", nargs=-1, required=True)
@click.option("--standards", required=True,
              help="Sheet: sample, component, concentration, unit [, pathlength_cm, "
              "u_concentration, stock, u_stock_rel].")
@click.option("--out", required=True, help="Library file to write (.nc).")
@click.option("--intercept", is_flag=True, help="Fit an intercept to expose blank offsets.")
@click.option("--pathlength", type=float, help="Pathlength in cm of rows that give none [1].")
@click.option("--molar-mass", callback=callback(parse_molar_masses),
              help="Molar masses, NAME=G_PER_MOL,...")
@click.option("--solvent", default="", help="Solvent or matrix of the standards.")
@click.option("--bandwidth-nm", type=float, help="Spectral bandwidth of the instrument (nm).")
@quantity_option
def library_build(spectra: tuple[str, ...], standards: str, out: str, intercept: bool,
                  pathlength: float | None, molar_mass: dict[str, float] | None, solvent: str,
                  bandwidth_nm: float | None, quantity: str | None) -> None:
    """Build a library from SPECTRA of pure standards and their concentrations.

    SPECTRA: one or more tables or JCAMP-DX files, folders of them, or globs.
    """
    from mixsolve.report.text import format_library
    from mixsolve.workflows.library_files import build_library_files

    lib = build_library_files(spectra, standards, out, intercept=intercept,
                              pathlength_cm=pathlength,
                              molar_mass=molar_mass, solvent=solvent,
                              bandwidth_nm=bandwidth_nm,
                              quantity=quantity, notes=sys.stderr)  # type: ignore[arg-type]
    click.echo(format_library(lib, out), nl=False)


@library.command("show")
@click.argument("library_file")
def library_show(library_file: str) -> None:
    """Print a readable summary of a library file."""
    from mixsolve.io.library_store import read_library
    from mixsolve.report.text import format_library

    click.echo(format_library(read_library(library_file), library_file), nl=False)


@main.command()
@click.argument("library_file")
@click.argument("spectra", nargs=-1, required=True)
@add_options(selection_options)
@add_options(fit_options)
@click.option("--pathlength", type=float, help="Pathlength in cm [1].")
@click.option("--unit", help='Concentration unit of the results, e.g. "mg/L", "umol/L".')
@add_options(noise_options)
@click.option("--fit-shift", is_flag=True, help="Fit one wavelength offset per sample.")
@click.option("--max-shift", type=float, default=CoreDefault(UNMIX, "max_shift_nm"),
              show_default=True,
              help="Largest wavelength offset searched with --fit-shift (nm).")
@click.option("--wavelength-tolerance", type=float, show_default=True,
              default=CoreDefault(UNMIX, "wavelength_tolerance_nm"),
              help="Instrument wavelength accuracy (nm) for the shift_risk run note.")
@click.option("--out", help="Results to write, by suffix: .csv (shaped by --shape), .xlsx "
              "(workbook: wide and tidy tables, flags, run notes, settings), .zarr or .nc "
              "(cube); each with its provenance.")
@click.option("--shape", type=CoreChoice("mixsolve.report.tables:SHAPES"), show_default=True,
              default=CoreDefault("mixsolve.workflows.unmix_files:unmix_files", "shape"),
              help="Shape of a CSV --out: one row per sample × component (tidy) or per "
              "sample (wide).")
@click.option("--report", help="HTML page to write: settings, results, notes and figures.")
@click.option("--scheduler", help="Run on this dask.distributed scheduler (tcp://HOST:PORT).")
@click.option("--workers", type=int, help="Run on a local dask cluster of N worker processes.")
@quantity_option
@spectra_bandwidth_option
@add_options(measurement_options)
def unmix(library_file: str, spectra: tuple[str, ...], window: tuple[float, float] | None,
          wavelengths: list[float] | None, method: str, baseline: str,
          reference_wavelength: float | None,
          pathlength: float | None, unit: str | None, weights: str, noise: str | float | None,
          absorbance_range: tuple[float, float], fit_shift: bool,
          max_shift: float, wavelength_tolerance: float, out: str | None, shape: str,
          report: str | None, scheduler: str | None, workers: int | None,
          quantity: str | None, bandwidth_nm: float | None, **measurement: Any) -> None:
    """Resolve SPECTRA into concentrations with the library (or PLS model) LIBRARY_FILE.

    SPECTRA: one or more tables or JCAMP-DX files, folders of them, or globs (one array,
    one wavelength grid; docs/formats.md); or one .zarr/.nc cube (any dims besides
    wavelength, run chunk by chunk on dask; docs/scale.md).
    """
    from mixsolve.report.unmix_text import format_unmix
    from mixsolve.workflows.measurement import budget_text
    from mixsolve.workflows.unmix_files import unmix_files

    result = unmix_files(library_file, spectra, window=window,
                         wavelengths=wavelengths, method=method,
                         baseline=baseline, pathlength_cm=pathlength, unit=unit, out=out,
                         report=report,
                         weights=weights, noise=noise, absorbance_range=absorbance_range,
                         fit_shift=fit_shift, max_shift_nm=max_shift,
                         wavelength_tolerance_nm=wavelength_tolerance,
                         stray_fraction=measurement.pop("stray"),
                         u_stray_fraction=measurement.pop("u_stray"),
                         bandwidth_nm=bandwidth_nm, measurement=measurement,
                         scheduler=scheduler, workers=workers,
                         progress=sys.stderr, quantity=quantity,  # type: ignore[arg-type]
                         notes=sys.stderr, reference_wavelength_nm=reference_wavelength,
                         shape=shape)  # type: ignore[arg-type]
    click.echo(format_unmix(result) + budget_text(result), nl=False)
    if out:
        click.echo(f"wrote {out}", err=True)
    if measurement.get("budget"):
        click.echo(f"wrote {measurement['budget']}", err=True)


merit_options = [
    click.option("--noise", type=str, show_default=True, callback=callback(parse_noise),
                 default=CoreDefault("mixsolve.wavelengths.check:DEFAULT_SIGMA_A", text=str),
                 help=NOISE_HELP + ", taken at A = 0 for the figures of merit."),
    click.option("--baseline", type=BASELINE_CHOICE, show_default=True,
                 default=CoreDefault("mixsolve.wavelengths.check:check_wavelengths", "baseline")),
    click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead."),
]


@main.group()
def wavelengths() -> None:
    """Check a wavelength selection, or choose a better one."""


@wavelengths.command("check")
@click.argument("library_file")
@add_options(selection_options)
@click.option("--components", callback=callback(parse_names),
              help="Check only these components (comma-separated).")
@add_options(merit_options)
def wavelengths_check(library_file: str, window: tuple[float, float] | None,
                      wavelengths: list[float] | None, components: list[str] | None,
                      noise: str | float, baseline: str,
                      as_json: bool) -> None:
    """Conditioning and figures of merit of LIBRARY_FILE at the chosen wavelengths."""
    import json

    from mixsolve.io.library_store import read_library
    from mixsolve.report.merit_text import format_check
    from mixsolve.wavelengths.check import check_wavelengths, merit_to_dict

    check = check_wavelengths(
        read_library(library_file), window=window, wavelengths=wavelengths, noise=noise,
        components=components, baseline=baseline)  # type: ignore[arg-type]
    click.echo(json.dumps(merit_to_dict(check)) if as_json else format_check(check),
               nl=as_json)


@wavelengths.command("choose")
@click.argument("library_file")
@click.option("--count", type=int, required=True, help="How many wavelengths to choose.")
@click.option("--window", callback=callback(parse_window),
              help="Candidate window LOW-HIGH in nm, both ends included.")
@click.option("--contiguous", is_flag=True, help="Choose a contiguous run of wavelengths.")
@click.option("--against", callback=callback(parse_wavelengths),
              help="Your own wavelengths (nm, comma-separated) to report beside the choice.")
@click.option("--compare", callback=callback(parse_wavelengths), hidden=True,
              help="Old name of --against (until the next release).")
@add_options(merit_options)
def wavelengths_choose(library_file: str, count: int, window: tuple[float, float] | None,
                       contiguous: bool, against: list[float] | None,
                       compare: list[float] | None, noise: str | float,
                       baseline: str,
                       as_json: bool) -> None:
    """Choose COUNT wavelengths that minimise the predicted concentration variance."""
    import json

    from mixsolve.errors import renamed
    from mixsolve.io.library_store import read_library
    from mixsolve.report.merit_text import format_choice
    from mixsolve.wavelengths.choose import choose_wavelengths

    choice = choose_wavelengths(read_library(library_file), count, window=window,
                                contiguous=contiguous, noise=noise,
                                baseline=baseline,  # type: ignore[arg-type]
                                against=renamed("--compare", "--against", compare,
                                                against))  # type: ignore[arg-type]
    click.echo(json.dumps(choice.to_dict()) if as_json else format_choice(choice),
               nl=as_json)




EQUATIONS_CHECK = "mixsolve.equations.check:check_equations"
EQUATIONS_APPLY = "mixsolve.equations.apply:apply_equations"
equations_noise_option = click.option(
    "--noise", type=str, show_default=True, callback=callback(parse_noise),
    default=CoreDefault("mixsolve.equations.check:DEFAULT_NOISE", text=str),
    help=NOISE_HELP + ", the readings' noise the results' u comes from.")


@main.group()
def equations() -> None:
    """Published fixed-wavelength equations: check them, apply them (docs/equations.md)."""


@equations.command("check")
@click.argument("equations_file", metavar="EQUATIONS")
@click.option("--library", "library_file", help="Your own library (.nc): published vs "
              "measured absorptivities, shift and bandwidth sensitivity.")
@equations_noise_option
@click.option("--shift-nm", type=float, show_default=True,
              default=CoreDefault(EQUATIONS_CHECK, "shift_nm"),
              help="Wavelength error (nm) the shift sensitivity is stated for.")
@click.option("--bandpass-nm", type=float, show_default=True,
              default=CoreDefault(EQUATIONS_CHECK, "bandpass_nm"),
              help="Spectral bandpass (nm) the bandwidth sensitivity is stated for.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead.")
def equations_check(equations_file: str, library_file: str | None, noise: str | float,
                    shift_nm: float, bandpass_nm: float, as_json: bool) -> None:
    """What the equations EQUATIONS imply and how far to trust them.

    EQUATIONS: an equations file (docs/formats.md) or a shipped set's name (porra1989,
    lichtenthaler1987, jeffrey_humphrey1975, lorenzen1967).
    """
    import json

    from mixsolve.report.equations_text import format_check
    from mixsolve.workflows.equations_files import check_equations_file

    check = check_equations_file(equations_file, library=library_file, noise=noise,
                                 shift_nm=shift_nm, bandpass_nm=bandpass_nm)
    click.echo(json.dumps(check.to_dict()) if as_json else format_check(check),
               nl=as_json)


@equations.command("apply")
@click.argument("equations_file", metavar="EQUATIONS")
@click.argument("spectra", nargs=-1, required=True)
@click.option("--library", "library_file", help="Your own library (.nc): the full-spectrum "
              "result beside each published one.")
@click.option("--out", help="Results to write (tidy CSV).")
@click.option("--pathlength", type=float, help="Pathlength in cm [that of the equations].")
@equations_noise_option
@click.option("--range", "absorbance_range", type=str, show_default=True,
              default=CoreDefault(EQUATIONS_APPLY, "absorbance_range", window_text),
              callback=callback(parse_window),
              help="Reliable absorbance range LOW-HIGH (AU) for the range flags.")
@click.option("--method", type=CoreChoice("mixsolve.solve.engine:METHODS"),
              default=CoreDefault(EQUATIONS_APPLY, "method"), show_default=True,
              help="Method of the full-spectrum fit (with --library).")
@quantity_option
@spectra_bandwidth_option
def equations_apply(equations_file: str, spectra: tuple[str, ...], library_file: str | None,
                    out: str | None, pathlength: float | None, noise: str | float,
                    absorbance_range: tuple[float, float], method: str,
                    quantity: str | None, bandwidth_nm: float | None) -> None:
    """Results of SPECTRA by the equations EQUATIONS, with u and checks.

    EQUATIONS: an equations file or a shipped set's name. SPECTRA: one or more tables or
    JCAMP-DX files, folders of them, or globs.
    """
    from mixsolve.report.equations_text import format_apply
    from mixsolve.workflows.equations_files import apply_equations_files

    result = apply_equations_files(
        equations_file, spectra, library=library_file, out=out, pathlength_cm=pathlength,
        noise=noise, absorbance_range=absorbance_range, method=method,
        bandwidth_nm=bandwidth_nm, quantity=quantity, notes=sys.stderr)  # type: ignore[arg-type]
    click.echo(format_apply(result), nl=False)
    if out:
        click.echo(f"wrote {out}", err=True)

@main.command()
@click.argument("spectra", nargs=-1, required=True)
@click.option("--reference", required=True,
              help="Known concentrations: sample, component, concentration, unit "
                   "[, group].")
@click.option("--out", required=True, help="Model file to write (.nc).")
@click.option("--window", callback=callback(parse_window),
              help="Wavelength window LOW-HIGH in nm, both ends included.")
@click.option("--latent", type=str, default=CoreDefault(CALIBRATE, "latent"), show_default=True,
              callback=callback(parse_latent),
              help="Latent variables: a number, or auto (cross-validation).")
@click.option("--max-latent", type=int, default=CoreDefault(CALIBRATE, "max_latent"),
              show_default=True,
              help="Most latent variables tried by cross-validation.")
@click.option("--folds", type=int, help="Cross-validation folds [min(10, samples)].")
@click.option("--split", type=CoreChoice("mixsolve.pls.cross_validation:SPLITS"),
              default=CoreDefault(CALIBRATE, "split"), show_default=True,
              help="Folds as contiguous blocks in file order, or shuffled.")
@click.option("--seed", type=int, default=CoreDefault(CALIBRATE, "seed"), show_default=True,
              help="Seed of --split random.")
@click.option("--mode", type=CoreChoice("mixsolve.pls.calibrate:MODES"),
              default=CoreDefault(CALIBRATE, "mode"), show_default=True,
              help="One PLS2 model, one PLS1 per component, or the better.")
@click.option("--scale", type=CoreChoice("mixsolve.pls.preprocessing:SCALES"),
              default=CoreDefault(CALIBRATE, "scale"), show_default=True,
              help="Scale each wavelength to unit variance after centring.")
@click.option("--scatter", type=CoreChoice("mixsolve.pls.preprocessing:SCATTERS"),
              default=CoreDefault(CALIBRATE, "scatter"), show_default=True,
              help="Scatter correction of each spectrum: offset removal, standard normal "
                   "variate (snv) or multiplicative scatter correction (msc).")
@click.option("--derivative", type=int,
              help="Savitzky-Golay first derivative over this many points (odd).")
@click.option("--polyorder", type=int, default=CoreDefault(CALIBRATE, "polyorder"),
              show_default=True,
              help="Polynomial order of the derivative filter.")
@click.option("--pathlength", type=float, help="Pathlength of the calibration spectra, cm [1].")
@click.option("--compare", is_flag=True,
              help="Also cross-validate CLS on the same folds and print both.")
@click.option("--plot", help="PNG file for the CV curve and predicted-vs-reference plots.")
@quantity_option
def calibrate(spectra: tuple[str, ...], reference: str, out: str,
              window: tuple[float, float] | None, latent: int | str,
              max_latent: int, folds: int | None, split: str, seed: int, mode: str,
              scale: str, scatter: str, derivative: int | None, polyorder: int,
              pathlength: float | None, compare: bool, plot: str | None,
              quantity: str | None) -> None:
    """Build a PLS model from SPECTRA of mixtures of known composition (--reference).

    SPECTRA: one or more tables or JCAMP-DX files, folders of them, or globs. A group
    column in the reference keeps each group's spectra in one cross-validation fold.
    """
    from mixsolve.workflows.calibrate import calibrate_files

    run = calibrate_files(spectra, reference, out, plot=plot, window=window,
                          latent=latent, max_latent=max_latent, folds=folds,
                          split=split, seed=seed, mode=mode, scale=scale,
                          scatter=scatter, derivative=derivative, polyorder=polyorder,
                          pathlength_cm=pathlength, compare=compare,
                          quantity=quantity, notes=sys.stderr)  # type: ignore[arg-type]
    click.echo(run.text, nl=False)
    click.echo(f"wrote {out}" + (f" and {plot}" if plot else ""), err=True)


class PlateProgress:
    """Progress of a plate batch on stderr: a bar on a terminal, plain lines otherwise."""

    def __init__(self) -> None:
        self.bar: Any = None

    def __call__(self, done: int, total: int, message: str) -> None:
        if not sys.stderr.isatty():
            click.echo(f"plate {done}/{total}: {message}", err=True)
            return
        if self.bar is None:
            self.bar = click.progressbar(length=total, label="plates", file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(1)

    def close(self) -> None:
        """End the bar's line, if one was drawn."""
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


@main.command()
@click.argument("paths", nargs=-1, required=True, metavar="LIBRARY_FILE EXPORTS...")
@click.option("--layout", "layout_file", required=True,
              help="Layout: well, role, sample, dilution (standards: component, "
                   "concentration, unit).")
@click.option("--library", "library_file", hidden=True,
              help="Old spelling of LIBRARY_FILE, given first as for unmix.")
@click.option("--library-from-plate", is_flag=True,
              help="Build the library from the plate's standard wells (then give no "
              "LIBRARY_FILE, only EXPORTS).")
@click.option("--out", "out_dir", required=True,
              help="Output folder: a subfolder per export, samples.csv for all.")
@add_options(selection_options)
@add_options(fit_options)
@click.option("--unit", help='Concentration unit of the results, e.g. "mg/L", "umol/L".')
@click.option("--pathlength", type=float, help="One pathlength for every well (cm); or "
              "--volume-ul with --well-diameter-mm, or --water-band: one is required.")
@click.option("--volume-ul", type=float, help="Fill volume (µL), with --well-diameter-mm.")
@click.option("--well-diameter-mm", type=float, help="Well diameter (mm), flat bottom.")
@click.option("--water-band", is_flag=True,
              help="Pathlength per well from A(977) - A(900) of the raw readings.")
@click.option("--water-k", type=float, show_default=True,
              default=CoreDefault(ANALYSE_PLATE, "water_k_au_per_cm"),
              help="A(977) - A(900) of 1 cm of water (AU/cm); depends on temperature.")
@click.option("--max-cv", "max_cv_percent", type=float, show_default=True,
              default=CoreDefault(ANALYSE_PLATE, "max_cv_percent"),
              help="Replicate CV (%) above which a sample is flagged high_cv.")
@click.option("--sheet", help="XLSX sheet of the exports [first].")
@click.option("--layout-sheet", help="XLSX sheet of the layout [first].")
@click.option("--plate-size", type=CoreChoice("mixsolve.plate.wells:PLATE_SHAPES"),
              callback=callback(parse_whole), help="Plate format [detected].")
@quantity_option
@add_options(noise_options)
@add_options(stray_options)
@spectra_bandwidth_option
def plate(paths: tuple[str, ...], layout_file: str, library_file: str | None,
          library_from_plate: bool, out_dir: str, window: tuple[float, float] | None,
          wavelengths: list[float] | None,
          method: str, baseline: str, reference_wavelength: float | None, unit: str | None,
          pathlength: float | None, volume_ul: float | None,
          well_diameter_mm: float | None, water_band: bool,
          water_k: float, max_cv_percent: float, sheet: str | None, layout_sheet: str | None,
          plate_size: int | None, quantity: str | None, weights: str,
          noise: str | float | None, absorbance_range: tuple[float, float],
          stray: float | None, u_stray: float | None, bandwidth_nm: float | None) -> None:
    """Turn plate-reader EXPORTS (files or folders) into concentrations per well and sample
    with the library LIBRARY_FILE (given first, as for unmix), or with --library-from-plate.
    """
    from mixsolve.workflows.plate import plate_arguments, run_plates

    if library_file is not None:
        click.echo("note: --library LIB is now given as the first argument, as for unmix "
                   "(mixsolve plate LIB EXPORTS...); --library works until the next release",
                   err=True)
    library_file, exports = plate_arguments(paths, library_file, library_from_plate)
    progress = PlateProgress()
    try:
        batch = run_plates(
            exports, layout_file, out=out_dir, library=library_file,
            library_from_plate=library_from_plate, sheet=sheet, layout_sheet=layout_sheet,
            plate_size=plate_size, quantity=quantity,  # type: ignore[arg-type]
            progress=progress, window=window, wavelengths=wavelengths,
            method=method, baseline=baseline, unit=unit, pathlength_cm=pathlength,
            volume_ul=volume_ul, well_diameter_mm=well_diameter_mm, water_band=water_band,
            water_k_au_per_cm=water_k, max_cv_percent=max_cv_percent, weights=weights,
            noise=noise,
            absorbance_range=absorbance_range, stray_fraction=stray, u_stray_fraction=u_stray,
            bandwidth_nm=bandwidth_nm, reference_wavelength_nm=reference_wavelength)
    finally:
        progress.close()
    click.echo(batch.text, nl=False)



@main.group()
def instrument() -> None:
    """Check the instrument: absorbance scale, wavelength scale, stray light, repeatability."""


log_option = click.option("--log", help="CSV log to append dated records to (created if missing).")
bandwidth_option = click.option("--bandwidth", type=float,
                                help="Spectral bandwidth of the instrument (nm), recorded.")


@instrument.command("absorbance")
@click.argument("spectra")
@click.option("--concentration", required=True, callback=callback(parse_numbers),
              help="Dichromate concentration (mg/L): one value, or one per spectrum in order.")
@click.option("--pathlength", type=float, default=CoreDefault(ABSORBANCE_SCALE, "pathlength_cm"),
              show_default=True, help="Cell (cm).")
@click.option("--tolerance", type=float, help="Accept nominal ± this % instead of the table.")
@click.option("--linearity-tolerance", type=float, show_default=True,
              default=CoreDefault(ABSORBANCE_SCALE, "linearity_tolerance_pct"),
              help="Largest deviation of a level from the mean specific absorbance (%).")
@bandwidth_option
@log_option
@quantity_option
def instrument_absorbance(spectra: str, concentration: list[float], pathlength: float,
                          tolerance: float | None, linearity_tolerance: float,
                          bandwidth: float | None, log: str | None,
                          quantity: str | None) -> None:
    """Absorbance scale from potassium dichromate SPECTRA (235, 257, 313, 350 nm)."""
    from mixsolve.workflows.instrument import run_check

    _, text = run_check("absorbance", spectra, log=log, quantity=quantity,  # type: ignore[arg-type]
                        concentration_mg_l=concentration,
                        pathlength_cm=pathlength, tolerance_pct=tolerance,
                        linearity_tolerance_pct=linearity_tolerance, bandwidth_nm=bandwidth)
    click.echo(text, nl=False)


@instrument.command("wavelength")
@click.argument("spectra")
@click.option("--bands", type=str, callback=callback(parse_numbers), show_default=True,
              default=CoreDefault(WAVELENGTH_SCALE, "bands_nm", numbers_text),
              help="Certified band positions (nm).")
@click.option("--uv-tolerance", type=float, show_default=True,
              default=CoreDefault(WAVELENGTH_SCALE, "uv_tolerance_nm"),
              help="± nm accepted below 400 nm.")
@click.option("--vis-tolerance", type=float, show_default=True,
              default=CoreDefault(WAVELENGTH_SCALE, "vis_tolerance_nm"),
              help="± nm accepted from 400 nm.")
@click.option("--fit", type=CoreChoice("mixsolve.instrument.wavelength_scale:BAND_FITS"),
              default=CoreDefault(WAVELENGTH_SCALE, "method"), show_default=True,
              help="Peak model fitted around each maximum.")
@click.option("--fit-half-width", type=float, show_default=True,
              default=CoreDefault(WAVELENGTH_SCALE, "fit_half_width_nm"),
              help="Half-width of the fitted region (nm).")
@click.option("--search", type=float, help="Half-width of the band search (nm) [tolerance + 2].")
@click.option("--reference-u", type=float, show_default=True,
              default=CoreDefault(WAVELENGTH_SCALE, "reference_u_nm"),
              help="Standard uncertainty of the certified positions (nm).")
@bandwidth_option
@log_option
@quantity_option
def instrument_wavelength(spectra: str, bands: list[float], uv_tolerance: float,
                          vis_tolerance: float, fit: str, fit_half_width: float,
                          search: float | None, reference_u: float, bandwidth: float | None,
                          log: str | None, quantity: str | None) -> None:
    """Wavelength scale from a holmium oxide SPECTRA: band positions, offset and its u."""
    from mixsolve.workflows.instrument import run_check

    _, text = run_check("wavelength", spectra, log=log, quantity=quantity,  # type: ignore[arg-type]
                        bands_nm=bands,
                        uv_tolerance_nm=uv_tolerance, vis_tolerance_nm=vis_tolerance,
                        method=fit, fit_half_width_nm=fit_half_width, search_nm=search,
                        reference_u_nm=reference_u, bandwidth_nm=bandwidth)
    click.echo(text, nl=False)


@instrument.command("stray-light")
@click.argument("spectra")
@click.option("--wavelength", type=float, default=CoreDefault(STRAY_LIGHT, "wavelength_nm"),
              show_default=True,
              help="Where the limit applies (nm).")
@click.option("--limit", type=float, default=CoreDefault(STRAY_LIGHT, "limit_au"),
              show_default=True,
              help="Each reading must exceed this absorbance (AU).")
@bandwidth_option
@log_option
@quantity_option
def instrument_stray_light(spectra: str, wavelength: float, limit: float,
                           bandwidth: float | None, log: str | None,
                           quantity: str | None) -> None:
    """Stray light from cut-off filter SPECTRA (12 g/L KCl: A at 200 nm above 2)."""
    from mixsolve.workflows.instrument import run_check

    _, text = run_check("stray_light", spectra, log=log, wavelength_nm=wavelength,
                        limit_au=limit, bandwidth_nm=bandwidth,
                        quantity=quantity)  # type: ignore[arg-type]
    click.echo(text, nl=False)


@instrument.command("repeatability")
@click.argument("scans")
@click.option("--out", help="CSV of mean, SD and drift per wavelength to write.")
@quantity_option
def instrument_repeatability(scans: str, out: str | None, quantity: str | None) -> None:
    """SD per wavelength and drift of repeated SCANS of one solution (columns in order)."""
    from mixsolve.workflows.instrument import run_repeatability

    click.echo(run_repeatability(scans, out=out,
                                 quantity=quantity)[1], nl=False)  # type: ignore[arg-type]
