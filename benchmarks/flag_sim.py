"""Pieces of the flag study (issue 15 item 7): how often each flag fires, with and without
the problem it is meant to catch.

Everything here is **synthetic**: the three invented components of the coverage study
(benchmarks/coverage_sim.py: overlapping Gaussian bands, 400–700 nm at 1 nm), invented
concentrations, an invented extra absorber and simulated instrument errors; nothing is
measured. Only the public API is used (``make_spectra``, ``import_absorptivities``,
``build_library``, ``unmix``), the way a user would call it.

The instrument is a noise preset of :mod:`mixsolve.noise` (default
``benchtop_double_beam``): a reading of true absorbance A shows the transmittance
T' = (10^−A + s)/(1 + s) (its stray fraction s) plus normal noise of σ_T(T'), as absorbance,
and never above the instrument's ceiling ``CEILING_AU``. The user states the same preset
with ``noise=`` (so ``unmix`` corrects for its stray light and tests the lack of fit).

A *lab* is one library (the exact absorptivities, or built from five standards per
component read on the same instrument, 1.5 % declared preparation error; the standards
come from :func:`coverage_sim.lab_standards`) and the samples it measures under each
problem. Every lab draws from its own child of one ``numpy.random.SeedSequence``.

Problems (``PROBLEMS``), each at the size issue 15 states: none (a clean sample on a
perfect wavelength scale); a 1 nm wavelength-scale error; λ⁻⁴ scatter of 0.03 AU at 400 nm;
an unmodelled absorber whose peak is 2 % of the sample's peak absorbance; a saturated
reading (peak above the ceiling, readings clipped there). Each problem is fitted with each
option set of ``OPTIONS`` that ``unmix`` knows (the plain fit, ``fit_shift=True``,
``baseline="scatter"``); an option set ``unmix`` refuses is skipped and named.

``CODE_PROBLEMS`` says which problems each flag is meant to catch; ``MEANT`` which flags
should catch a problem under an option set, in order of preference (the first group with a
code that exists in :data:`mixsolve.flags.FLAG_MEANINGS` is the one meant).

Used by ``benchmarks/flag_study.py`` (the matrix) and ``tests/test_flag_confusion.py``.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Iterable
from dataclasses import dataclass, field

import coverage_sim as cs
import numpy as np
import pandas as pd
import xarray as xr

import mixsolve as ms
from mixsolve import flags
from mixsolve.errors import MixsolveError, MixsolveWarning
from mixsolve.noise import PRESETS

#: Noise preset of the simulated instrument, stated to ``unmix`` as ``noise=``.
NOISE_PRESET = "benchtop_double_beam"
#: Highest absorbance the simulated instrument reports (AU); readings above show this.
CEILING_AU = 3.5
#: Fit window (nm): 5 nm inside the 400–700 nm library, room for fit_shift's ±3 nm search.
WINDOW_NM: tuple[float, float] = (405.0, 695.0)
#: Peak true absorbance of a sample (AU), drawn uniformly.
PEAK_AU: tuple[float, float] = (0.3, 1.5)
#: Peak true absorbance of a saturated sample (AU): above the ceiling.
SATURATED_PEAK_AU: tuple[float, float] = (3.7, 4.5)
#: The unmodelled absorber (synthetic): a Gaussian band, centre and SD (nm).
ABSORBER_BAND_NM: tuple[float, float] = (665.0, 12.0)
#: Libraries compared.
LIBRARIES: tuple[str, ...] = ("exact", "standards")
#: The library built from standards: 1.5 % preparation error per standard, declared.
STANDARDS = cs.Condition("standards", "5 standards/component, 1.5 % preparation error",
                         library="standards", prep_rel=0.015)

#: Option sets, by name: keyword arguments added to every ``unmix`` call.
OPTIONS: dict[str, dict[str, object]] = {
    "plain": {},
    "fit_shift": {"fit_shift": True},
    "baseline scatter": {"baseline": "scatter"},
}


@dataclass(frozen=True)
class Problem:
    """One simulated problem of a sample, at a stated size.

    Attributes
    ----------
    key : str
        Short label printed in the matrix.
    description : str
    shift_nm : float
        Wavelength-scale error: the reading at nominal λ shows the true spectrum at
        λ + ``shift_nm``.
    scatter_au : float
        λ⁻⁴ scatter added to every reading, this many AU at 400 nm.
    absorber_rel : float
        Peak of the unmodelled absorber band (``ABSORBER_BAND_NM``) as a fraction of the
        sample's peak true absorbance.
    peak_au : (float, float)
        Range of the sample's peak true absorbance (AU).
    """

    key: str
    description: str
    shift_nm: float = 0.0
    scatter_au: float = 0.0
    absorber_rel: float = 0.0
    peak_au: tuple[float, float] = PEAK_AU


PROBLEMS: tuple[Problem, ...] = (
    Problem("clean", "no problem, perfect wavelength scale"),
    Problem("shift", "wavelength scale off by 1 nm", shift_nm=1.0),
    Problem("scatter", "lambda^-4 scatter, 0.03 AU at 400 nm", scatter_au=0.03),
    Problem("absorber", "unmodelled absorber, peak 2 % of the sample's peak", absorber_rel=0.02),
    Problem("saturated", f"peak {SATURATED_PEAK_AU[0]:g}-{SATURATED_PEAK_AU[1]:g} AU, "
            f"readings clipped at {CEILING_AU:g} AU", peak_au=SATURATED_PEAK_AU),
)

#: The flags that report the fit does not describe the spectrum (any model failure).
RESIDUAL_CODES: tuple[str, ...] = ("lack_of_fit", "structured_residual")
#: Problems each flag code is meant to catch; on samples with none of them it is a false
#: alarm. Codes not listed are not scored (``at_zero`` and the like describe the result).
CODE_PROBLEMS: dict[str, tuple[str, ...]] = {
    "lack_of_fit": ("shift", "scatter", "absorber", "saturated"),
    "structured_residual": ("shift", "scatter", "absorber", "saturated"),
    "shifted": ("shift",),
    "scatter": ("scatter",),
    "unmodelled_scatter": ("scatter",),
    "saturated_reading": ("saturated",),
    "above_range": ("saturated",),
}
#: Flags meant to catch (problem, option set), groups in order of preference: the first
#: group holding a code that exists (``FLAG_MEANINGS``) is meant; a sample is *caught* when
#: it carries any existing code of that group. (problem, "*"): any option set.
MEANT: dict[tuple[str, str], tuple[tuple[str, ...], ...]] = {
    ("shift", "plain"): (RESIDUAL_CODES,),
    ("shift", "fit_shift"): (("shifted",),),
    ("shift", "baseline scatter"): (RESIDUAL_CODES,),
    ("scatter", "plain"): (("unmodelled_scatter",), RESIDUAL_CODES),
    # with a fitted shift, the shift takes up part of the scatter and the residual left is
    # not λ⁻⁴-shaped: the residual flags (doubtful) catch it, not unmodelled_scatter
    # (measured 2 %: the probe is made orthogonal to the design, not to each spectrum's
    # shift column)
    ("scatter", "fit_shift"): (RESIDUAL_CODES,),
    ("scatter", "baseline scatter"): (("scatter",),),
    ("absorber", "*"): (RESIDUAL_CODES,),
    ("saturated", "*"): (("saturated_reading",), ("above_range",)),
}


def code_exists(code: str) -> bool:
    """Whether this branch of mixsolve knows the flag code (``flags.FLAG_MEANINGS``)."""
    return code in flags.FLAG_MEANINGS


def meant_codes(problem: str, option: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """(codes meant to catch ``problem`` under ``option`` that exist, those that do not yet).

    Both empty for the clean problem; the second names the preferred codes still missing.
    """
    groups = MEANT.get((problem, option), MEANT.get((problem, "*"), ()))
    missing: list[str] = []
    for group in groups:
        present = tuple(c for c in group if code_exists(c))
        if present:
            return present, tuple(missing)
        missing += group
    return (), tuple(missing)


@functools.cache
def option_refused(option: str) -> str | None:
    """Why ``unmix`` refuses an option set (its one-line error), or None if it knows it."""
    spectra = ms.make_spectra(cs.exact_table().values[:1] / 100.0, cs.WAVELENGTHS_NM)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", MixsolveWarning)
            ms.unmix(spectra, exact_library(), window=WINDOW_NM, **OPTIONS[option])
    except (MixsolveError, TypeError) as exc:
        return str(exc).splitlines()[0]
    return None


@functools.cache
def exact_library() -> xr.Dataset:
    """The exact absorptivities imported as a table (no error stated)."""
    return ms.import_absorptivities(cs.exact_table(), cs.ABSORPTIVITY_UNIT,
                                    source="synthetic flag study (exact)")


def read(true_au: np.ndarray, rng: np.random.Generator,
         noise: ms.NoiseModel) -> np.ndarray:
    """Readings (AU) of true absorbances on the simulated instrument.

    T' = (10^−A + s)/(1 + s) + σ_T(T')·N(0, 1) (``noise``: its σ_T and stray fraction s),
    shown as −log10 T', at most ``CEILING_AU`` (also where T' ≤ 0).
    """
    t = (10.0 ** -true_au + noise.stray) / (1.0 + noise.stray)
    t = t + noise.sigma_transmittance(t) * rng.standard_normal(t.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        shown = np.where(t > 0, -np.log10(np.where(t > 0, t, 1.0)), CEILING_AU)
    return np.minimum(shown, CEILING_AU)


def lab_library(kind: str, rng: np.random.Generator, noise: ms.NoiseModel) -> xr.Dataset:
    """The exact library, or one built from the lab's standards read on its instrument."""
    if kind == "exact":
        return exact_library()
    standards, sheet = cs.lab_standards(STANDARDS, rng,
                                        read=lambda a, r: read(a, r, noise))
    return ms.build_library(standards, sheet, source="synthetic flag study (standards)")


def true_absorbance(problem: Problem, conc: np.ndarray) -> np.ndarray:
    """True absorbance (samples × wavelengths, AU) of concentrations ``conc`` (mg/L, 1 cm)
    with the problem's shift, scatter and extra absorber."""
    wl = cs.WAVELENGTHS_NM
    a = conc @ cs.absorptivity(wl + problem.shift_nm) / 1000.0
    if problem.scatter_au:
        a = a + problem.scatter_au * (wl / 400.0) ** -4
    if problem.absorber_rel:
        centre, sd = ABSORBER_BAND_NM
        band = np.exp(-0.5 * ((wl - centre) / sd) ** 2)
        a = a + problem.absorber_rel * a.max(axis=1, keepdims=True) * band
    return a


def samples(problem: Problem, rng: np.random.Generator, n: int,
            noise: ms.NoiseModel) -> xr.DataArray:
    """``n`` samples with the problem, read on the instrument (concentrations drawn as in
    the coverage study: shares 0.2–1 per component, scaled to a peak in ``peak_au``)."""
    conc = cs.draw_samples(cs.Condition(problem.key, problem.description,
                                        peak_au=problem.peak_au), rng, n)
    return ms.make_spectra(read(true_absorbance(problem, conc), rng, noise),
                           cs.WAVELENGTHS_NM, pathlength_cm=1.0)


@dataclass
class Tally:
    """Flag texts of one row of the matrix (problem, option set, library)."""

    problem: str
    option: str
    library: str
    texts: list[str] = field(default_factory=list)

    def codes(self) -> list[set[str]]:
        """Each sample's flag codes, without the component part (``at_zero:x`` → ``at_zero``)."""
        return [{c.partition(":")[0] for c in t.split(";") if c} for t in self.texts]


def simulate_lab(rng: np.random.Generator, n_samples: int, noise: ms.NoiseModel,
                 noise_stated: object, problems: Iterable[Problem] = PROBLEMS,
                 options: Iterable[str] = tuple(OPTIONS),
                 libraries: Iterable[str] = LIBRARIES) -> list[Tally]:
    """One lab: its libraries, ``n_samples`` samples per problem, every known option set.

    ``noise`` simulates the instrument; ``noise_stated`` is what ``unmix`` is told. The
    samples of a problem are fitted with every library and option set alike.
    """
    out = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        libs = {kind: lab_library(kind, rng, noise) for kind in libraries}
        for problem in problems:
            spectra = samples(problem, rng, n_samples, noise)
            for option in options:
                if option_refused(option):
                    continue
                for kind, lib in libs.items():
                    result = ms.unmix(spectra, lib, window=WINDOW_NM, method="nnls",
                                      unit=cs.CONCENTRATION_UNIT, noise=noise_stated,
                                      **OPTIONS[option])
                    out.append(Tally(problem.key, option, kind,
                                     [str(t) for t in result["flags"].values]))
    return out


def run_study(n_labs: int, n_samples: int, seed: int, noise: str = NOISE_PRESET,
              problems: Iterable[Problem] = PROBLEMS,
              options: Iterable[str] = tuple(OPTIONS),
              libraries: Iterable[str] = LIBRARIES) -> list[Tally]:
    """``n_labs`` independent labs (lab j from ``SeedSequence(seed)`` child j); the tallies
    of all labs merged per row, in the order problem, option set, library."""
    model = PRESETS[noise]
    problems, options, libraries = tuple(problems), tuple(options), tuple(libraries)
    merged: dict[tuple[str, str, str], Tally] = {}
    for lab_seed in np.random.SeedSequence(seed).spawn(n_labs):
        rng = np.random.default_rng(lab_seed)
        for tally in simulate_lab(rng, n_samples, model, noise, problems, options, libraries):
            key = (tally.problem, tally.option, tally.library)
            merged.setdefault(key, Tally(*key)).texts.extend(tally.texts)
    return sorted(merged.values(), key=lambda t: (
        [p.key for p in problems].index(t.problem), options.index(t.option),
        libraries.index(t.library)))


def rates(tally: Tally, codes: Iterable[str]) -> dict[str, float]:
    """Fraction of the row's samples carrying each code, any code, any doubtful code, and
    (``caught``) any code meant to catch the row's problem (NaN when none is meant)."""
    per_sample = tally.codes()
    n = len(per_sample)
    out = {code: sum(code in s for s in per_sample) / n for code in codes}
    out["any flag"] = sum(bool(s) for s in per_sample) / n
    out["any doubtful"] = sum(any(flags.severity_of(c) == flags.DOUBTFUL for c in s)
                              for s in per_sample) / n
    meant, _ = meant_codes(tally.problem, tally.option)
    out["caught"] = (sum(bool(s & set(meant)) for s in per_sample) / n if meant
                     else float("nan"))
    return out


def matrix(tallies: list[Tally]) -> pd.DataFrame:
    """The confusion matrix: one row per (problem, option set, library), one column per
    flag code seen or scored (``CODE_PROBLEMS``; NaN for a code this branch does not
    have), then ``any flag``, ``any doubtful``, ``caught`` and ``n``."""
    seen = {c for t in tallies for s in t.codes() for c in s}
    codes = list(CODE_PROBLEMS) + sorted(seen - set(CODE_PROBLEMS))
    rows = []
    for t in tallies:
        r = rates(t, codes)
        for code in codes:
            if not code_exists(code) and code not in seen:
                r[code] = float("nan")
        rows.append({"problem": t.problem, "option": t.option, "library": t.library, **r,
                     "n": len(t.texts)})
    return pd.DataFrame(rows).set_index(["problem", "option", "library"])


def false_alarms(table: pd.DataFrame) -> pd.Series:
    """Each scored code's highest rate on a row without a problem it is meant to catch."""
    out = {}
    for code, problems in CODE_PROBLEMS.items():
        if code not in table or table[code].isna().all():
            continue
        without = table[~table.index.get_level_values("problem").isin(problems)]
        out[code] = float(without[code].max())
    return pd.Series(out, name="highest false-alarm rate")
