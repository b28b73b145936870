"""Command line: a thin click layer. Each command parses, calls one API function, prints.

Errors a user can cause (:class:`mixsolve.errors.MixsolveError`) become one line on stderr
and exit code 2; ``--debug`` shows the traceback instead. Warnings go to stderr.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Callable
from typing import Any

import click

from mixsolve._version import __version__
from mixsolve.errors import InputError, MixsolveError


class UsageError(click.ClickException):
    """A mixsolve error shown as one plain line, exit code 2."""

    exit_code = 2

    def show(self, file: Any = None) -> None:
        click.echo(f"error: {self.format_message()}", err=True)


def _guarded(func: Callable[..., Any]) -> Callable[..., Any]:
    """Map mixsolve errors to exit 2 and print warnings as single lines on stderr."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        debug = click.get_current_context().find_root().params.get("debug", False)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                out = func(*args, **kwargs)
            except MixsolveError as exc:
                if debug:
                    raise
                raise UsageError(" ".join(str(exc).split())) from None
            finally:
                for w in caught:
                    click.echo(f"warning: {w.message}", err=True)
        return out

    return wrapper


def parse_window(text: str | None) -> tuple[float, float] | None:
    """Parse ``"400-700"`` (nm) into a pair; both ends are included in the fit."""
    if text is None:
        return None
    parts = text.replace(":", "-").split("-")
    try:
        low, high = (float(p) for p in parts)
    except ValueError:
        raise InputError(f"--window: {text!r} is not LOW-HIGH in nm, e.g. 400-700") from None
    return low, high


def parse_wavelengths(text: str | None) -> list[float] | None:
    """Parse ``"663.6,646.6"`` (nm)."""
    if text is None:
        return None
    try:
        return [float(p) for p in text.split(",") if p.strip()]
    except ValueError:
        raise InputError(f"--wavelengths: {text!r} is not a comma-separated list of nm, "
                         "e.g. 663.6,646.6") from None


def parse_molar_masses(text: str | None) -> dict[str, float] | None:
    """Parse ``"chl_a=893.5,chl_b=907.5"`` (g/mol)."""
    if not text:
        return None
    out = {}
    for item in text.split(","):
        name, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            out[name.strip()] = float(value)
        except ValueError:
            raise InputError(f"--molar-mass: {item!r} is not NAME=G_PER_MOL") from None
    return out


selection_options = [
    click.option("--window", help="Wavelength window LOW-HIGH in nm, both ends included."),
    click.option("--wavelengths", help="Discrete wavelengths in nm, comma-separated."),
]


def add_options(options: list[Callable[..., Any]]) -> Callable[..., Any]:
    """Apply a list of click options as one decorator."""
    def decorate(func: Callable[..., Any]) -> Callable[..., Any]:
        for option in reversed(options):
            func = option(func)
        return func
    return decorate


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="mixsolve")
@click.option("--debug", is_flag=True, help="Show tracebacks instead of one-line errors.")
def main(debug: bool) -> None:
    """Resolve overlapping absorbance spectra into concentrations, and say how far to trust them."""


@main.command()
@click.option("--out", "out_dir", default="mixsolve-demo", show_default=True,
              help="Folder for the demo's library, results and comparison.")
@_guarded
def demo(out_dir: str) -> None:
    """Run the whole job on the bundled synthetic demo data."""
    from mixsolve.workflows.demo import run_demo

    click.echo(run_demo(out_dir).text, nl=False)


@main.group()
def library() -> None:
    """Make and inspect pure-component absorptivity libraries."""


@library.command("import")
@click.argument("table")
@click.option("--unit", required=True, help='Absorptivity unit, e.g. "L/(mol*cm)" or "L/(g*cm)".')
@click.option("--out", required=True, help="Library file to write (.nc).")
@click.option("--molar-mass", help="Molar masses, NAME=G_PER_MOL,...")
@click.option("--solvent", default="", help="Solvent or matrix the values hold for.")
@click.option("--bandwidth-nm", type=float, help="Spectral bandwidth of the instrument (nm).")
@_guarded
def library_import(table: str, unit: str, out: str, molar_mass: str | None, solvent: str,
                   bandwidth_nm: float | None) -> None:
    """Make a library from a table of known absorptivities (wavelength_nm, one column each)."""
    from mixsolve.workflows.library_files import import_library_file

    lib = import_library_file(table, unit, out, molar_mass=parse_molar_masses(molar_mass),
                              solvent=solvent, bandwidth_nm=bandwidth_nm)
    click.echo(f"wrote {out}: {lib.sizes['component']} components, "
               f"{lib.sizes['wavelength']} wavelengths, {lib.attrs['unit']}", err=True)


@library.command("build")
@click.argument("spectra")
@click.option("--standards", required=True, help="Sheet: sample, component, concentration, unit.")
@click.option("--out", required=True, help="Library file to write (.nc).")
@click.option("--intercept", is_flag=True, help="Fit an intercept to expose blank offsets.")
@click.option("--pathlength", type=float, help="Pathlength in cm of rows that give none [1].")
@click.option("--molar-mass", help="Molar masses, NAME=G_PER_MOL,...")
@click.option("--solvent", default="", help="Solvent or matrix of the standards.")
@click.option("--bandwidth-nm", type=float, help="Spectral bandwidth of the instrument (nm).")
@_guarded
def library_build(spectra: str, standards: str, out: str, intercept: bool,
                  pathlength: float | None, molar_mass: str | None, solvent: str,
                  bandwidth_nm: float | None) -> None:
    """Build a library from spectra of pure standards and their concentrations."""
    from mixsolve.report.text import format_library
    from mixsolve.workflows.library_files import build_library_files

    lib = build_library_files(spectra, standards, out, intercept=intercept,
                              pathlength_cm=pathlength,
                              molar_mass=parse_molar_masses(molar_mass), solvent=solvent,
                              bandwidth_nm=bandwidth_nm)
    click.echo(format_library(lib, out), nl=False)


@library.command("show")
@click.argument("library_file")
@_guarded
def library_show(library_file: str) -> None:
    """Print a readable summary of a library file."""
    from mixsolve.io.library_store import read_library
    from mixsolve.report.text import format_library

    click.echo(format_library(read_library(library_file), library_file), nl=False)


@main.command()
@click.argument("library_file")
@click.argument("spectra")
@add_options(selection_options)
@click.option("--method", type=click.Choice(["nnls", "ols"]), default="nnls", show_default=True)
@click.option("--baseline", type=click.Choice(["none", "offset", "linear"]), default="none",
              show_default=True)
@click.option("--pathlength", type=float, help="Pathlength in cm [1].")
@click.option("--unit", help='Concentration unit of the results, e.g. "mg/L", "umol/L".')
@click.option("--out", help="Tidy results CSV to write.")
@_guarded
def unmix(library_file: str, spectra: str, window: str | None, wavelengths: str | None,
          method: str, baseline: str, pathlength: float | None, unit: str | None,
          out: str | None) -> None:
    """Resolve SPECTRA into concentrations with the library LIBRARY_FILE."""
    from mixsolve.report.text import format_results
    from mixsolve.workflows.unmix_files import unmix_files

    result = unmix_files(library_file, spectra, window=parse_window(window),
                         wavelengths=parse_wavelengths(wavelengths), method=method,
                         baseline=baseline, pathlength_cm=pathlength, unit=unit, out=out)
    click.echo(format_results(result), nl=False)
    if out:
        click.echo(f"wrote {out}", err=True)
