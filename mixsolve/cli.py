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


def parse_window(text: str | None, option: str = "--window") -> tuple[float, float] | None:
    """Parse ``"400-700"`` (nm) into a pair; both ends are included in the fit."""
    if text is None:
        return None
    parts = text.replace(":", "-").split("-")
    try:
        low, high = (float(p) for p in parts)
    except ValueError:
        raise InputError(f"{option}: {text!r} is not LOW-HIGH, e.g. 400-700") from None
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


def parse_noise(text: str | None) -> str | float | None:
    """``--noise``: a preset name or σ_A in AU."""
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        return text


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
@click.option("--weights", type=click.Choice(["none", "noise"]), default="none",
              show_default=True, help="Weight readings by 1/σ_A² of the noise model.")
@click.option("--noise", help="Noise model: a preset (benchtop_double_beam, diode_array, "
              "microplate, field_photometer) or σ_A in AU; enables the lack-of-fit test.")
@click.option("--range", "absorbance_range", default="0.3-2", show_default=True,
              help="Reliable absorbance range LOW-HIGH (AU) for the range flags.")
@click.option("--fit-shift", is_flag=True, help="Fit one wavelength offset per sample.")
@click.option("--max-shift", type=float, default=3.0, show_default=True,
              help="Largest wavelength offset searched with --fit-shift (nm).")
@click.option("--wavelength-tolerance", type=float, default=0.5, show_default=True,
              help="Instrument wavelength accuracy (nm) for the shift_sensitive flag.")
@click.option("--out", help="Tidy results CSV to write.")
@_guarded
def unmix(library_file: str, spectra: str, window: str | None, wavelengths: str | None,
          method: str, baseline: str, pathlength: float | None, unit: str | None,
          weights: str, noise: str | None, absorbance_range: str, fit_shift: bool,
          max_shift: float, wavelength_tolerance: float, out: str | None) -> None:
    """Resolve SPECTRA into concentrations with the library LIBRARY_FILE."""
    from mixsolve.report.text import format_results
    from mixsolve.workflows.unmix_files import unmix_files

    result = unmix_files(library_file, spectra, window=parse_window(window),
                         wavelengths=parse_wavelengths(wavelengths), method=method,
                         baseline=baseline, pathlength_cm=pathlength, unit=unit, out=out,
                         weights=weights, noise=parse_noise(noise),
                         absorbance_range=parse_window(absorbance_range, "--range"),
                         fit_shift=fit_shift, max_shift_nm=max_shift,
                         wavelength_tolerance_nm=wavelength_tolerance)
    click.echo(format_results(result), nl=False)
    if out:
        click.echo(f"wrote {out}", err=True)


@main.group()
def wavelengths() -> None:
    """Check a wavelength selection, or choose a better one."""


@wavelengths.command("check")
@click.argument("library_file")
@add_options(selection_options)
@click.option("--components", help="Check only these components (comma-separated).")
@click.option("--noise", type=float, default=0.001, show_default=True,
              help="Reading noise σ_A in AU.")
@click.option("--baseline", type=click.Choice(["none", "offset", "linear"]), default="none",
              show_default=True)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead.")
@_guarded
def wavelengths_check(library_file: str, window: str | None, wavelengths: str | None,
                      components: str | None, noise: float, baseline: str,
                      as_json: bool) -> None:
    """Conditioning and figures of merit of LIBRARY_FILE at the chosen wavelengths."""
    import json

    from mixsolve.diagnostics.check import check_wavelengths, merit_to_dict
    from mixsolve.io.library_store import read_library
    from mixsolve.report.merit_text import format_check

    check = check_wavelengths(
        read_library(library_file), window=parse_window(window),
        wavelengths=parse_wavelengths(wavelengths), noise=noise,
        components=[c.strip() for c in components.split(",")] if components else None,
        baseline=baseline)  # type: ignore[arg-type]
    click.echo(json.dumps(merit_to_dict(check)) if as_json else format_check(check),
               nl=as_json)


@wavelengths.command("choose")
@click.argument("library_file")
@click.option("--count", type=int, required=True, help="How many wavelengths to choose.")
@click.option("--window", help="Candidate window LOW-HIGH in nm, both ends included.")
@click.option("--contiguous", is_flag=True, help="Choose a contiguous run of wavelengths.")
@click.option("--compare", help="Your own wavelengths (nm, comma-separated) to compare.")
@click.option("--noise", type=float, default=0.001, show_default=True,
              help="Reading noise σ_A in AU.")
@click.option("--baseline", type=click.Choice(["none", "offset", "linear"]), default="none",
              show_default=True)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead.")
@_guarded
def wavelengths_choose(library_file: str, count: int, window: str | None, contiguous: bool,
                       compare: str | None, noise: float, baseline: str,
                       as_json: bool) -> None:
    """Choose COUNT wavelengths that minimise the predicted concentration variance."""
    import json

    from mixsolve.diagnostics.choose import choose_wavelengths
    from mixsolve.io.library_store import read_library
    from mixsolve.report.merit_text import format_choice

    choice = choose_wavelengths(read_library(library_file), count, window=parse_window(window),
                                contiguous=contiguous, noise=noise,
                                baseline=baseline,  # type: ignore[arg-type]
                                compare=parse_wavelengths(compare))
    click.echo(json.dumps(choice.to_dict()) if as_json else format_choice(choice),
               nl=as_json)
