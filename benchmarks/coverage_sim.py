"""Pieces of the coverage study (issue 14): a synthetic scenario, simulated labs, z scores.

Everything here is **synthetic**: three invented components with overlapping Gaussian
bands, invented concentrations and simulated instrument errors; nothing is measured. Only
the public API of mixsolve is used (``make_spectra``, ``import_absorptivities``,
``build_library``, ``unmix``, ``analyse_plate``), the way a user would call it.

A *lab* is one library (exact, or built from that lab's own standards) and the samples
measured with it. Library errors are shared by every sample of a lab, so each condition
simulates many labs with many samples each; the labs are independent. Every lab draws from
its own child of one ``numpy.random.SeedSequence``, so a run is reproducible and the first
labs of a long run are the labs of a short one.

For a result with estimate ĉ, true value c and reported standard uncertainty u,
z = (ĉ − c)/u. An honest u gives z near N(0, 1): P(|z| < 2) ≈ 0.954, median |z| ≈ 0.674,
mean z ≈ 0. The study's target band for P(|z| < 2) is ``TARGET_BAND``.

Used by ``benchmarks/coverage_study.py`` (the table) and ``tests/test_coverage_harness.py``.
"""

from __future__ import annotations

import tempfile
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr
from scipy.ndimage import correlate1d

import mixsolve as ms
from mixsolve.errors import MixsolveWarning

#: The range P(|z| < 2) must fall in for an honest standard uncertainty (issue 14).
TARGET_BAND: tuple[float, float] = (0.90, 0.99)
#: Wavelength grid of the scenario (nm): 400–700 nm at 1 nm.
WAVELENGTHS_NM: np.ndarray = np.arange(400.0, 701.0, 1.0)
#: Photometric noise of every reading (AU), constant in absorbance.
SIGMA_AU: float = 0.002
#: The fit window a user gives (nm): the whole grid.
WINDOW_NM: tuple[float, float] = (400.0, 700.0)
#: Invented components (synthetic): bands (height in L/(g*cm), centre nm, SD nm).
BANDS: dict[str, list[tuple[float, float, float]]] = {
    "synth_yellow": [(60.0, 455.0, 28.0), (15.0, 515.0, 30.0)],
    "synth_red": [(70.0, 520.0, 32.0)],
    "synth_blue": [(50.0, 585.0, 38.0), (20.0, 640.0, 25.0)],
}
ABSORPTIVITY_UNIT = "L/(g*cm)"
CONCENTRATION_UNIT = "mg/L"  #: unit of truth and results; A = ε·c/1000 at 1 cm
#: Nominal peak absorbance of the five standards of each component (AU).
STANDARD_LEVELS_AU: tuple[float, ...] = (0.2, 0.4, 0.6, 0.8, 1.0)
#: The two ways of calling unmix compared on the same spectra.
FITS: tuple[str, ...] = ("defaults", "noise stated")
#: Flags that tell the user the model does not describe the spectrum (docs/flags.md).
DOUBT_CODES: tuple[str, ...] = ("lack_of_fit", "structured_residual")

LibraryKind = Literal["exact", "standards"]


def absorptivity(wavelengths_nm: np.ndarray = WAVELENGTHS_NM) -> np.ndarray:
    """True absorptivities (components × wavelengths) in L/(g*cm) of the invented bands."""
    wl = np.asarray(wavelengths_nm, dtype=float)
    return np.vstack([
        sum(h * np.exp(-0.5 * ((wl - c) / w) ** 2) for h, c, w in bands)
        for bands in BANDS.values()
    ])


@dataclass(frozen=True)
class Condition:
    """One simulated condition of the study.

    Parameters
    ----------
    key : str
        Short label printed in the table.
    description : str
        What is simulated, in a few words.
    library : {"exact", "standards"}
        The true absorptivities imported as a table, or a library built with
        ``build_library`` from five standards per component measured by the lab.
    prep_rel : float
        Relative standard deviation of each standard's preparation (independent per
        standard); the sheet states the nominal concentration.
    stock_rel : float
        Relative standard deviation of the stock each component's standards are made from:
        one draw per component per lab, shared by all its standards.
    noise_fwhm_nm : float
        0 for white noise; otherwise white noise smoothed by a Gaussian kernel of this
        full width at half maximum (nm), rescaled to the same marginal σ.
    stray : float
        Stray-light fraction s the lab states: a reading of true absorbance A shows
        −log10((10^−A + s_lab)/(1 + s_lab)) (../shared/CHECKS.md), s_lab the lab's true
        fraction.
    stray_u_rel : float
        What the lab knows of its fraction (from its own stray-light check): the relative
        standard uncertainty it states with s; each lab's true s_lab is drawn as
        s·(1 + ``stray_u_rel``·N(0, 1)), ≥ 0. Both fits state s and u(s) to ``unmix``
        (``stray_fraction``, ``u_stray_fraction``), which corrects the readings.
    peak_au : (float, float)
        Range of each sample's peak true absorbance (AU), drawn uniformly.
    declared : bool
        Whether the standards sheet states what the lab knows: ``u_concentration`` =
        ``prep_rel`` × nominal, and a ``stock`` with ``u_stock_rel`` = ``stock_rel``
        (columns of the standards sheet, docs/uncertainty.md).
    replicates : int
        0: every well is a result of its own. n > 0: each sample is read in n wells of a
        plate, one component is absent (true 0), and the results are the replicate means
        of the absent components from ``analyse_plate``.
    """

    key: str
    description: str
    library: LibraryKind = "exact"
    prep_rel: float = 0.0
    stock_rel: float = 0.0
    noise_fwhm_nm: float = 0.0
    stray: float = 0.0
    stray_u_rel: float = 0.0
    peak_au: tuple[float, float] = (0.1, 1.5)
    replicates: int = 0
    declared: bool = True

    def noise_model(self) -> ms.NoiseModel:
        """What a careful user states: σ_A constant (σ_T ∝ T: k2 = σ·ln 10) and the stray light."""
        return ms.NoiseModel(k2=SIGMA_AU * np.log(10.0), stray=self.stray,
                             name="simulated instrument")


#: The conditions of issue 14's Acceptance, plus the replicate-mean bias.
CONDITIONS: tuple[Condition, ...] = (
    Condition("1 exact", "exact library, white noise"),
    Condition("2 standards", "5 standards/component, 1.5 % preparation error",
              library="standards", prep_rel=0.015),
    Condition("3 +stock", "as 2, plus 1.5 % shared-stock error per component",
              library="standards", prep_rel=0.015, stock_rel=0.015),
    Condition("4 corr. noise", "exact library, noise correlated over 4 nm (FWHM)",
              noise_fwhm_nm=4.0),
    Condition("5 stray", "exact library, stray light 0.1 % (known to 20 %), peak A up to 3",
              stray=0.001, stray_u_rel=0.2, peak_au=(0.1, 3.0)),
    Condition("6 absent, mean", "exact library, triplicate means of absent components",
              replicates=3),
)


def condition(key: str) -> Condition:
    """The condition of ``CONDITIONS`` whose key starts with ``key`` (e.g. ``"4"``)."""
    found = [c for c in CONDITIONS if c.key.startswith(key)]
    if len(found) != 1:
        raise KeyError(f"no single condition starts with {key!r}")
    return found[0]


def correlated_noise(rng: np.random.Generator, shape: tuple[int, int], fwhm_nm: float,
                     step_nm: float = 1.0) -> np.ndarray:
    """Noise of standard deviation ``SIGMA_AU``, white or Gaussian-smoothed along the last axis.

    The kernel's weights are scaled to a unit sum of squares, so each reading keeps the
    marginal σ exactly; the white noise is drawn beyond both ends so no edge is special.
    """
    if fwhm_nm <= 0:
        return SIGMA_AU * rng.standard_normal(shape)
    sd = fwhm_nm / (2.0 * np.sqrt(2.0 * np.log(2.0))) / step_nm
    half = int(np.ceil(5.0 * sd))
    kernel = np.exp(-0.5 * (np.arange(-half, half + 1) / sd) ** 2)
    kernel /= np.sqrt(np.sum(kernel**2))
    white = rng.standard_normal((shape[0], shape[1] + 2 * half))
    return SIGMA_AU * correlate1d(white, kernel, axis=-1)[:, half:-half]


def measure(true_au: np.ndarray, cond: Condition, rng: np.random.Generator,
            stray: float | None = None) -> np.ndarray:
    """Readings (AU) of true absorbances (spectra × wavelengths): stray light, then noise.

    ``stray``: the lab's true fraction (default the condition's stated one)."""
    shown = true_au
    stray = cond.stray if stray is None else stray
    if stray > 0:
        shown = -np.log10((10.0 ** -true_au + stray) / (1.0 + stray))
    return shown + correlated_noise(rng, true_au.shape, cond.noise_fwhm_nm)


def exact_table() -> xr.DataArray:
    """The true absorptivities as a table (component × wavelength, ``ABSORPTIVITY_UNIT``)."""
    return xr.DataArray(absorptivity(), dims=("component", "wavelength"),
                        coords={"component": list(BANDS), "wavelength": WAVELENGTHS_NM})


def lab_library(cond: Condition, rng: np.random.Generator) -> xr.Dataset:
    """The library one lab works with: the exact table, or built from its own standards."""
    if cond.library == "exact":
        return ms.import_absorptivities(exact_table(), ABSORPTIVITY_UNIT,
                                        source="synthetic coverage study (exact)")
    standards, sheet = lab_standards(cond, rng)
    return ms.build_library(standards, sheet, source="synthetic coverage study (standards)")


def lab_standards(cond: Condition, rng: np.random.Generator,
                  read: Callable[[np.ndarray, np.random.Generator], np.ndarray] | None = None
                  ) -> tuple[xr.DataArray, pd.DataFrame]:
    """One lab's standards: five per component at ``STANDARD_LEVELS_AU``, made up with the
    condition's preparation and stock errors, read with its noise; and the standards sheet
    (nominal concentrations, and what the lab declares, see ``Condition.declared``).

    ``read(true_au, rng)``: how the lab's instrument reads true absorbances (default
    :func:`measure` with the condition's noise); benchmarks/flag_sim.py passes its own."""
    eps = absorptivity()
    names = list(BANDS)
    rows, true_au = [], []
    for k, comp in enumerate(names):
        stock = 1.0 + cond.stock_rel * rng.standard_normal()
        for i, level in enumerate(STANDARD_LEVELS_AU):
            nominal = round(1000.0 * level / eps[k].max(), 2)
            actual = nominal * stock * (1.0 + cond.prep_rel * rng.standard_normal())
            true_au.append(eps[k] * actual / 1000.0)
            row = {"sample": f"{comp}_std{i + 1}", "component": comp,
                   "concentration": nominal, "unit": CONCENTRATION_UNIT}
            if cond.declared and cond.prep_rel > 0:
                row["u_concentration"] = cond.prep_rel * nominal
            if cond.declared and cond.stock_rel > 0:
                row.update(stock=f"stock of {comp}", u_stock_rel=cond.stock_rel)
            rows.append(row)
    sheet = pd.DataFrame(rows)
    readings = (measure(np.array(true_au), cond, rng) if read is None
                else read(np.array(true_au), rng))
    standards = ms.make_spectra(readings, WAVELENGTHS_NM,
                                sheet["sample"].tolist(), pathlength_cm=1.0)
    return standards, sheet


def draw_samples(cond: Condition, rng: np.random.Generator, n: int) -> np.ndarray:
    """True concentrations (n × components, mg/L): peak absorbance uniform in ``peak_au``.

    Each component's share is uniform in 0.2–1 before scaling; for replicate conditions
    component ``i % 3`` of sample i is absent (0).
    """
    eps = absorptivity()
    shares = rng.uniform(0.2, 1.0, (n, eps.shape[0]))
    if cond.replicates:
        shares[np.arange(n), np.arange(n) % eps.shape[0]] = 0.0
    peak = (shares @ eps).max(axis=1) / 1000.0
    target = rng.uniform(*cond.peak_au, n)
    return shares * (target / peak)[:, None]


def _fit_options(cond: Condition, fit: str) -> dict[str, object]:
    options: dict[str, object] = {"window": WINDOW_NM, "method": "nnls",
                                  "unit": CONCENTRATION_UNIT}
    if cond.stray > 0:
        options.update(stray_fraction=cond.stray, u_stray_fraction=cond.stray * cond.stray_u_rel)
    if fit == "noise stated":
        options["noise"] = cond.noise_model()
    elif fit != "defaults":
        raise ValueError(f"fit: {fit!r} is not one of {FITS}")
    return options


def _well_names(n: int) -> list[str]:
    rows, cols = (8, 12) if n <= 96 else (16, 24)
    if n > rows * cols:
        raise ValueError(f"{n} wells do not fit on a 384-well plate; simulate fewer samples")
    return [f"{chr(65 + i // cols)}{i % cols + 1}" for i in range(n)]


def _doubted(flags: object) -> np.ndarray:
    """True where a flag text (``;``-joined codes) holds one of ``DOUBT_CODES``."""
    texts = np.asarray(flags, dtype=object).ravel()
    return np.array([any(code in str(t).split(";") for code in DOUBT_CODES) for t in texts],
                    dtype=bool)


def replicate_plate(cond: Condition, conc: np.ndarray, rng: np.random.Generator
                    ) -> tuple[xr.DataArray, pd.DataFrame]:
    """A plate reading each sample of ``conc`` in ``cond.replicates`` wells, and its layout.

    Sample i (named ``s001`` ...) fills wells ``replicates·i`` ... in reading order, neat
    (dilution 1), read at 1 cm; the readings are simulated by :func:`measure`.
    """
    n, reps = conc.shape[0], cond.replicates
    readings = measure(np.repeat(conc @ absorptivity() / 1000.0, reps, axis=0), cond, rng)
    wells = _well_names(n * reps)
    samples = [f"s{i + 1:03d}" for i in range(n) for _ in range(reps)]
    plate = xr.DataArray(readings, dims=("well", "wavelength"),
                         coords={"well": wells, "wavelength": WAVELENGTHS_NM},
                         name="absorbance", attrs={"source": "synthetic plate"})
    layout = pd.DataFrame({"line": np.arange(2, len(wells) + 2), "well": wells,
                           "role": "sample", "sample": samples, "dilution": 1.0,
                           "component": "", "concentration": np.nan, "unit": ""})
    return plate, layout


def _replicate_z(cond: Condition, lib: xr.Dataset, conc: np.ndarray,
                 rng: np.random.Generator, fits: tuple[str, ...]
                 ) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """z of the absent components' replicate means, through ``analyse_plate``.

    The estimate is the samples table's ``mean_unconstrained``: the mean of the wells'
    unconstrained estimates, whose uncertainty ``std_uncertainty`` is. The reported
    ``concentration`` is that mean with the non-negativity bound applied (0 where it is
    negative); at a true 0 no estimate held ≥ 0 can be unbiased, and for an honest u its z
    averages E[max(0, Z)] = 1/√(2π) ≈ 0.40 whatever the number of wells.
    """
    n = conc.shape[0]
    plate, layout = replicate_plate(cond, conc, rng)
    absent = pd.DataFrame({"sample": [f"s{i + 1:03d}" for i in range(n)],
                           "component": [list(BANDS)[i % len(BANDS)] for i in range(n)]})
    out = {}
    for fit in fits:
        options = _fit_options(cond, fit)
        table = ms.analyse_plate(plate, layout, lib, pathlength_cm=1.0, **options).samples
        hit = absent.merge(table, on=["sample", "component"], how="left")
        out[fit] = ((hit["mean_unconstrained"] / hit["std_uncertainty"]).to_numpy(),
                    _doubted(hit["flags"].fillna("")))
    return out


def simulate_lab(cond: Condition, rng: np.random.Generator, n_samples: int,
                 fits: tuple[str, ...] = FITS) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """z scores of one lab: its library, its samples, each fit of ``fits``.

    Returns
    -------
    dict
        Per fit, two flat arrays over samples and components (for replicate conditions:
        over the absent components' sample means): z = (estimate − truth)/std_uncertainty,
        and whether the result's spectrum (sample) carries one of ``DOUBT_CODES``.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        lib = lab_library(cond, rng)
        conc = draw_samples(cond, rng, n_samples)
        if cond.replicates:
            return _replicate_z(cond, lib, conc, rng, fits)
        lab_stray = None
        if cond.stray > 0:
            lab_stray = max(0.0, cond.stray * (1.0 + cond.stray_u_rel * rng.standard_normal()))
        readings = measure(conc @ absorptivity() / 1000.0, cond, rng, lab_stray)
        spectra = ms.make_spectra(readings, WAVELENGTHS_NM, pathlength_cm=1.0)
        out = {}
        for fit in fits:
            result = ms.unmix(spectra, lib, **_fit_options(cond, fit))
            est = result["concentration"].transpose("sample", "component").values
            u = result["std_uncertainty"].transpose("sample", "component").values
            doubt = np.repeat(_doubted(result["flags"].values), conc.shape[1])
            out[fit] = (((est - conc) / u).ravel(), doubt)
    return out


def simulate_lab_cli(cond: Condition, rng: np.random.Generator, n_samples: int,
                     folder: Path) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """The lab of :func:`simulate_lab` (the same draws), through the command line.

    Its inputs are written as files in ``folder`` (an absorptivity table, or the standards'
    spectra and sheet; the samples' spectra), then ``mixsolve library import`` or
    ``mixsolve library build`` and ``mixsolve unmix`` run in this process through click's
    test runner, exactly as typed at a prompt, and the z scores come from the results CSV.
    Only the ``defaults`` fit (the command line states a noise model differently) and
    conditions without replicates.
    """
    from click.testing import CliRunner

    from mixsolve.cli import main

    if cond.replicates:
        raise ValueError("replicate conditions run through the plate workflow; use the API")
    runner = CliRunner()

    def run(*args: str) -> None:
        done = runner.invoke(main, list(args))
        if done.exit_code != 0:
            raise RuntimeError(f"mixsolve {' '.join(args)}: {done.output}")

    def write_spectra(values: np.ndarray, names: list[str], path: Path) -> None:
        frame = pd.DataFrame(values.T, columns=names)
        frame.insert(0, "wavelength_nm", WAVELENGTHS_NM)
        frame.to_csv(path, index=False, float_format="%.9g")

    lib = str(folder / "lab.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MixsolveWarning)
        if cond.library == "exact":
            exact_table().to_pandas().T.rename_axis("wavelength_nm").to_csv(folder / "eps.csv")
            run("library", "import", str(folder / "eps.csv"), "--unit", ABSORPTIVITY_UNIT,
                "--out", lib)
        else:
            standards, sheet = lab_standards(cond, rng)
            write_spectra(standards.values, sheet["sample"].tolist(), folder / "std.csv")
            sheet.to_csv(folder / "sheet.csv", index=False)
            run("library", "build", str(folder / "std.csv"), "--standards",
                str(folder / "sheet.csv"), "--out", lib)
        conc = draw_samples(cond, rng, n_samples)
        lab_stray = None
        if cond.stray > 0:
            lab_stray = max(0.0, cond.stray * (1.0 + cond.stray_u_rel * rng.standard_normal()))
        readings = measure(conc @ absorptivity() / 1000.0, cond, rng, lab_stray)
        names = [f"s{i:03d}" for i in range(n_samples)]
        write_spectra(readings, names, folder / "samples.csv")
        stray = ["--stray", f"{cond.stray:g}", "--u-stray",
                 f"{cond.stray * cond.stray_u_rel:g}"] if cond.stray > 0 else []
        run("unmix", lib, str(folder / "samples.csv"), "--window",
            f"{WINDOW_NM[0]:g}-{WINDOW_NM[1]:g}", "--method", "nnls", "--unit",
            CONCENTRATION_UNIT, *stray, "--out", str(folder / "results.csv"))
    table = pd.read_csv(folder / "results.csv", keep_default_na=False, na_values=[""])
    truth = pd.DataFrame({"sample": np.repeat(names, len(BANDS)),
                          "component": np.tile(list(BANDS), n_samples),
                          "truth": conc.ravel()})
    hit = truth.merge(table, on=["sample", "component"], how="left")
    z = ((hit["concentration"] - hit["truth"]) / hit["std_uncertainty"]).to_numpy()
    return {"defaults": (z, _doubted(hit["flags"].fillna("")))}


@dataclass(frozen=True)
class Coverage:
    """Summary of the z scores of one condition and fit."""

    condition: str
    fit: str
    p_within_2u: float  #: fraction of results with |z| < 2
    median_abs_z: float
    mean_z: float
    doubted: float  #: fraction of results whose spectrum carries one of ``DOUBT_CODES``
    n_results: int
    n_labs: int

    @property
    def in_band(self) -> bool:
        """P(|z| < 2) inside ``TARGET_BAND``."""
        return TARGET_BAND[0] <= self.p_within_2u <= TARGET_BAND[1]


def summarise(z: np.ndarray, doubt: np.ndarray, cond_key: str, fit: str,
              n_labs: int) -> Coverage:
    """P(|z| < 2), median |z|, mean z and the doubted fraction of the finite z scores."""
    z = np.asarray(z, dtype=float)
    keep = np.isfinite(z)
    z = z[keep]
    return Coverage(cond_key, fit, float(np.mean(np.abs(z) < 2.0)),
                    float(np.median(np.abs(z))), float(np.mean(z)),
                    float(np.mean(np.asarray(doubt, dtype=bool)[keep])), int(z.size), n_labs)


def run_condition(cond: Condition, n_labs: int, n_samples: int, seed: int,
                  fits: tuple[str, ...] = FITS, via: Literal["api", "cli"] = "api"
                  ) -> list[Coverage]:
    """Simulate ``n_labs`` independent labs of ``n_samples`` samples; one summary per fit.

    ``via="cli"``: every lab through the command line (:func:`simulate_lab_cli`, the
    ``defaults`` fit only), in a temporary folder.

    The labs of condition i draw from ``SeedSequence(seed)`` child i (its position in
    ``CONDITIONS``), lab j from that child's child j.
    """
    index = CONDITIONS.index(cond) if cond in CONDITIONS else len(CONDITIONS)
    labs = np.random.SeedSequence(seed).spawn(len(CONDITIONS) + 1)[index].spawn(n_labs)
    z: dict[str, list[np.ndarray]] = {fit: [] for fit in fits}
    doubt: dict[str, list[np.ndarray]] = {fit: [] for fit in fits}
    if via == "cli":
        fits = ("defaults",)
        z, doubt = {"defaults": []}, {"defaults": []}
    for lab_seed in labs:
        rng = np.random.default_rng(lab_seed)
        if via == "cli":
            with tempfile.TemporaryDirectory() as folder:
                lab = simulate_lab_cli(cond, rng, n_samples, Path(folder))
        else:
            lab = simulate_lab(cond, rng, n_samples, fits)
        for fit, (values, doubted) in lab.items():
            z[fit].append(values)
            doubt[fit].append(doubted)
    return [summarise(np.concatenate(z[fit]), np.concatenate(doubt[fit]), cond.key, fit,
                      n_labs) for fit in fits]
