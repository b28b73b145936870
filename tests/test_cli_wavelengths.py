"""``mixsolve wavelengths check|choose`` and the trust options of ``mixsolve unmix``,
through click's CliRunner, plus the acceptance checks of the trust-check issue on the demo.

click ≥ 8.2 keeps stderr apart: ``stdout`` is the data, ``stderr`` the messages. The demo
data are synthetic (amber ~460 nm, rose ~528 nm, teal ~608 nm); the other files here are
invented Gaussian bands with seeded noise.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_cli import assert_cli_error

import mixsolve as ms
from mixsolve.noise import PRESETS
from mixsolve.wavelengths.check import check_wavelengths
from mixsolve.wavelengths.choose import EQUAL_TIME_MARGIN
from mixsolve.workflows.demo import demo_file, run_demo

SEED = 612
FIGURES = ("sensitivity", "selectivity", "lod", "loq", "shift_sensitivity")
#: Invented bands for the non-demo files: (height L/(mol*cm), centre nm, width nm).
BANDS = {"red": (2.0e4, 470.0, 25.0), "blue": (1.5e4, 590.0, 30.0)}
CONC = {"red": 3.0e-5, "blue": 4.0e-5}  # mol/L: peaks ≈ 0.6 AU at 1 cm
LIB_WL = np.arange(380.0, 720.01, 0.5)
MEAS_WL = np.arange(400.0, 700.01, 1.0)


def eps_at(wl: np.ndarray) -> np.ndarray:
    """Absorptivities (component, wavelength) of the invented bands at ``wl`` (nm)."""
    return np.vstack([h * np.exp(-0.5 * ((wl - c) / w) ** 2) for h, c, w in BANDS.values()])


def write_spectra(path, rows: dict[str, np.ndarray], wl: np.ndarray = MEAS_WL):
    """Wide CSV: ``wavelength_nm`` then one absorbance column per sample."""
    frame = pd.DataFrame({"wavelength_nm": wl, **rows})
    frame.to_csv(path, index=False, float_format="%.7f")
    return path


@pytest.fixture(scope="module")
def demo_library(tmp_path_factory):
    """library.nc written by the demo (built from its synthetic standards)."""
    folder = tmp_path_factory.mktemp("demo")
    run_demo(folder)
    return folder / "library.nc"


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """An invented two-band library on a 0.5 nm grid and spectra files made from it."""
    folder = tmp_path_factory.mktemp("cli_trust")
    da = xr.DataArray(eps_at(LIB_WL), dims=("component", "wavelength"),
                      coords={"component": list(BANDS), "wavelength": LIB_WL})
    ms.write_library(ms.import_absorptivities(da, "L/(mol*cm)"), folder / "lib.nc")
    rng = np.random.default_rng(SEED)
    conc = np.array(list(CONC.values()))

    def spectrum(shift: float = 0.0, scale: float = 1.0, noise: float = 1e-3) -> np.ndarray:
        return scale * conc @ eps_at(MEAS_WL + shift) + noise * rng.standard_normal(
            MEAS_WL.size)

    paths = {
        "lib": folder / "lib.nc",
        "shifted": write_spectra(folder / "shifted.csv", {
            "plus": spectrum(1.0), "minus": spectrum(-1.5)}),
        "plain": write_spectra(folder / "plain.csv", {
            "mid": spectrum(), "strong": spectrum(scale=4.0), "weak": spectrum(scale=0.2)}),
        "noisy": write_spectra(folder / "noisy.csv", {
            "s1": spectrum(noise=0.02), "s2": spectrum(noise=0.02)}),
    }
    return paths


def read_csv(path) -> pd.DataFrame:
    """A results CSV with empty flags kept as empty strings."""
    return pd.read_csv(path, dtype={"sample_flags": str, "sample": str}, comment="#",
                       keep_default_na=False)


# --- wavelengths check ---------------------------------------------------------------------

def test_check_text_table(demo_library, cli):
    """The readable table: header facts, one row per component, overlap, notes."""
    out = cli.ok("wavelengths", "check", demo_library, "--wavelengths", "460,528,608")
    text = out.stdout
    assert text.startswith("Wavelength check\n")
    assert "wavelengths       460, 528, 608 nm" in text
    assert "condition number" in text and "verdict" in text
    for name in ("amber", "rose", "teal"):
        assert any(line.startswith(name) for line in text.splitlines())
    assert "shift %/nm" in text
    assert "Overlap" in text
    assert out.stderr == ""


def test_check_json_is_exactly_one_object_matching_the_api(demo_library, cli):
    """--json prints one JSON object with the documented keys, equal to the API's figures."""
    out = cli.ok("wavelengths", "check", demo_library, "--window", "420-680", "--noise", "0.002",
                 "--json")
    assert out.stdout.strip().count("\n") == 0
    data = json.loads(out.stdout)
    assert isinstance(data, dict)
    assert isinstance(data["condition_number"], float)
    assert set(data["components"]) == {"amber", "rose", "teal"}
    api = check_wavelengths(ms.read_library(demo_library), window=(420, 680), noise=0.002)
    assert data["condition_number"] == pytest.approx(api.attrs["condition_number"], rel=1e-12)
    for name, figures in data["components"].items():
        assert set(FIGURES) <= set(figures)
        for key in FIGURES:
            assert figures[key] == pytest.approx(float(api[key].sel(component=name)),
                                                 rel=1e-12)
        assert figures["lod"] == pytest.approx(3.3 * 0.002 / figures["sensitivity"], rel=1e-12)
        assert figures["loq"] == pytest.approx(10 * 0.002 / figures["sensitivity"], rel=1e-12)
    assert data["noise_au"] == 0.002


def test_check_components_and_baseline_options(demo_library, cli):
    """--components restricts the system; --baseline offset adds a column (κ grows)."""
    pair = json.loads(cli.ok("wavelengths", "check", demo_library, "--components", "amber, teal",
                             "--json").stdout)
    assert list(pair["components"]) == ["amber", "teal"]
    plain = json.loads(cli.ok("wavelengths", "check", demo_library, "--json").stdout)
    offset = json.loads(cli.ok("wavelengths", "check", demo_library, "--baseline", "offset",
                               "--json").stdout)
    assert offset["baseline"] == "offset"
    assert offset["condition_number"] > plain["condition_number"]


def test_acceptance_shoulders_are_more_shift_sensitive_than_band_maxima(demo_library, cli):
    """Issue acceptance: on the demo, shoulder wavelengths report a larger |shift
    sensitivity| than the band maxima (amber 460 nm, teal 608 nm), for a pair checked
    alone and for all three components at three wavelengths.
    """
    def shift(wavelengths: str, components: str | None = None) -> dict[str, float]:
        args = ["wavelengths", "check", demo_library, "--wavelengths", wavelengths, "--json"]
        if components:
            args += ["--components", components]
        data = json.loads(cli.ok(*args).stdout)
        return {c: abs(f["shift_sensitivity"]) for c, f in data["components"].items()}

    maxima = shift("460,608", "amber,teal")
    near_maxima = shift("452,612", "amber,teal")
    shoulders = shift("420,645", "amber,teal")
    for name in ("amber", "teal"):
        assert shoulders[name] > 5 * maxima[name]
        assert shoulders[name] > 5 * near_maxima[name]
    three_max = shift("460,528,608")
    three_shoulders = shift("430,500,640")
    for name in ("amber", "rose", "teal"):
        assert three_shoulders[name] > 3 * three_max[name]


@pytest.mark.parametrize(("args", "match"), [
    (("--wavelengths", "460,abc"), "--wavelengths: '460,abc' is not a comma-separated list"),
    (("--window", "abc"), "--window: 'abc' is not LOW-HIGH"),
    (("--window", "700-400"), "window: 700-400 nm is not an increasing pair"),
    (("--window", "400-500", "--wavelengths", "450"), "either a window or a list"),
    (("--wavelengths", "300,460"), "wavelengths: 300 nm is outside the library"),
    (("--components", "amber,navy"), "components: 'navy' is not in the library"),
    (("--noise", "-1"), "noise: -1 AU is not a positive number"),
    (("--noise", "abc"), "noise: unknown preset 'abc'; presets are benchtop_double_beam, "
                         "diode_array, microplate, field_photometer"),
])
def test_check_bad_options_exit_2_with_one_error_line(demo_library, args, match, cli):
    """User mistakes: exit code 2, one ``error:`` line, no traceback."""
    assert_cli_error(cli("wavelengths", "check", demo_library, *args), match, literal=True)


def test_check_and_choose_take_a_noise_preset_as_unmix_does(demo_library, cli):
    """--noise diode_array (a preset, as unmix takes it) gives the figures for that
    model's σ_A at A = 0, the same as that number given in AU."""
    sigma = float(PRESETS["diode_array"].sigma_absorbance(0.0))
    for command in (("check",), ("choose", "--count", "4")):
        preset = json.loads(cli.ok("wavelengths", *command, demo_library, "--noise",
                                   "diode_array", "--json").stdout)
        number = json.loads(cli.ok("wavelengths", *command, demo_library, "--noise",
                                   repr(sigma), "--json").stdout)
        assert preset == number
        merit = preset if command == ("check",) else preset["full_window"]
        assert merit["noise_au"] == sigma


def test_check_missing_library_file_is_a_clean_error(tmp_path, cli):
    """A library path that does not exist is a user error too."""
    result = cli("wavelengths", "check", tmp_path / "nope.nc")
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert "nope.nc" in result.stderr


def test_click_level_bad_choices_exit_2_without_traceback(demo_library, cli):
    """Values click itself refuses (a --baseline outside its choices) also exit 2 without a
    traceback; click's own message names the option.
    """
    for args in (("--baseline", "quadratic"),):
        result = cli("wavelengths", "check", demo_library, *args)
        assert result.exit_code == 2
        assert "Traceback" not in result.output
        assert "Invalid value" in result.stderr
        assert result.stdout == ""


# --- wavelengths choose --------------------------------------------------------------------

def test_acceptance_choose_four_is_within_the_documented_margin(demo_library, cli):
    """Issue acceptance: ``wavelengths choose --count 4`` on the demo gives a set whose
    predicted variance at equal measuring time is no worse than the full window's by more
    than EQUAL_TIME_MARGIN (mixsolve.wavelengths.choose, documented there).
    """
    data = json.loads(cli.ok("wavelengths", "choose", demo_library, "--count", "4",
                             "--json").stdout)
    assert len(data["wavelengths_nm"]) == 4
    assert data["criterion_equal_time"] <= EQUAL_TIME_MARGIN
    assert data["criterion_equal_time"] == pytest.approx(
        data["criterion"] * 4 / len(data["full_window"]["wavelengths_nm"]), rel=1e-12)
    assert set(data["chosen"]["components"]) == {"amber", "rose", "teal"}


def test_choose_text_and_json_agree(demo_library, cli):
    """The text names the same wavelengths as --json and states the margin."""
    data = json.loads(cli.ok("wavelengths", "choose", demo_library, "--count", "4",
                             "--json").stdout)
    text = cli.ok("wavelengths", "choose", demo_library, "--count", "4").stdout
    first = text.splitlines()[0]
    assert first == "Chosen wavelength set: " + ", ".join(
        f"{w:g}" for w in data["wavelengths_nm"]) + " nm"
    assert f"documented margin {EQUAL_TIME_MARGIN:g}" in text
    assert "full window" in text


def test_choose_contiguous_window_and_against(demo_library, cli):
    """--contiguous gives neighbouring grid points inside --window; --against is reported."""
    out = cli.ok("wavelengths", "choose", demo_library, "--count", "10", "--contiguous",
                 "--window", "420-680", "--against", "460,528,608", "--json")
    data = json.loads(out.stdout)
    wl = np.array(data["wavelengths_nm"])
    assert data["contiguous"] is True
    np.testing.assert_allclose(np.diff(wl), 2.0)  # the demo library grid step
    assert wl.min() >= 420 and wl.max() <= 680
    assert data["user_set"]["wavelengths_nm"] == [460.0, 528.0, 608.0]
    assert isinstance(data["user_criterion"], float)
    text = cli.ok("wavelengths", "choose", demo_library, "--count", "10", "--contiguous",
                  "--against", "460,528,608").stdout
    assert text.startswith("Chosen contiguous window: ")
    assert "your set: J = " in text


def test_choose_old_option_compare_works_hidden_with_a_warning(demo_library, cli):
    """--compare is the old name of --against: it still works for one release, says so on
    one ``warning:`` line, and is not listed in --help."""
    new = cli.ok("wavelengths", "choose", demo_library, "--count", "4",
                 "--against", "460,528,608", "--json")
    old = cli.ok("wavelengths", "choose", demo_library, "--count", "4",
                 "--compare", "460,528,608", "--json")
    assert json.loads(old.stdout) == json.loads(new.stdout)
    assert old.stderr == ("warning: --compare is now called --against; the old name works "
                          "until the next release\n")
    assert new.stderr == ""
    helped = cli.ok("wavelengths", "choose", "--help").stdout
    assert "--against" in helped
    assert "--compare" not in helped


@pytest.mark.parametrize(("args", "match"), [
    (("--count", "2"), "count: 2 is not a whole number ≥ 3; one wavelength per unknown (3: "
                       "components and baseline terms) at least"),
    (("--count", "3", "--baseline", "linear"), "count: 3 is not a whole number ≥ 5"),
    (("--count", "500"), "count: 500 is not a number ≤ 191; the window holds 191 candidate "
                         "wavelengths"),
    (("--count", "4", "--window", "400-300"), "window: 400-300 nm is not an increasing"),
    (("--count", "4", "--against", "460,x"), "--against: '460,x' is not a comma-separated list"),
    (("--count", "4", "--against", "460", "--compare", "528"),
     "--compare is the old name of --against; give --against only"),
])
def test_choose_bad_options_exit_2_with_one_error_line(demo_library, args, match, cli):
    """User mistakes: exit code 2, one ``error:`` line, no traceback."""
    assert_cli_error(cli("wavelengths", "choose", demo_library, *args), match, literal=True)


# --- unmix trust options -------------------------------------------------------------------

def test_unmix_fit_shift_through_the_cli_improves_shifted_samples(files, tmp_path, cli):
    """--fit-shift on spectra shifted by +1 and −1.5 nm: concentrations nearer the truth
    than without it (invented bands, noise 0.001 AU).
    """
    truth = np.array(list(CONC.values()))
    errors = {}
    for label, extra in (("plain", ()), ("shift", ("--fit-shift",))):
        out = tmp_path / f"{label}.csv"
        cli.ok("unmix", files["lib"], files["shifted"], "--window", "420-560", "--out", out,
               *extra)
        table = read_csv(out).pivot(index="sample", columns="component",
                                    values="concentration")[list(CONC)]
        errors[label] = np.abs(table.values - truth) / truth
    assert np.all(errors["shift"].max(axis=1) < errors["plain"].max(axis=1) / 3)
    assert errors["shift"].max() < 0.01


def test_unmix_fit_shift_window_outside_the_library_is_a_clean_error(files, cli):
    """λ ± --max-shift must stay inside the library (380-720 nm)."""
    assert_cli_error(cli("unmix", files["lib"], files["shifted"], "--window", "400-700",
                         "--fit-shift", "--max-shift", "25"),
                     "--fit-shift: the used wavelengths 400-700 nm ± 25 nm reach outside",
                     literal=True)
    assert_cli_error(cli("unmix", files["lib"], files["shifted"], "--fit-shift",
                         "--max-shift", "0"),
                     "--max-shift: 0 nm is not a positive number", literal=True)


def test_unmix_range_flags_through_the_cli(files, tmp_path, cli):
    """--range sets the reliable range: the 4× sample is above it, the 0.2× below it."""
    out = tmp_path / "range.csv"
    result = cli.ok("unmix", files["lib"], files["plain"], "--range", "0.3-1.5", "--out", out)
    flags = read_csv(out).groupby("sample")["sample_flags"].first()
    assert "above_range" in flags["strong"]
    assert "below_range" in flags["weak"]
    assert "range" not in flags["mid"]
    assert "dilute about" in result.stdout
    assert "(0.3-1.5 AU)" in result.stdout


def test_unmix_noise_model_flags_lack_of_fit_through_the_cli(files, tmp_path, cli):
    """--noise with a preset: spectra 20× noisier than a benchtop instrument are flagged
    ``lack_of_fit``; with σ_A = 0.02 AU (constant σ_T, so at least the real noise
    everywhere) they are not.
    """
    out = tmp_path / "lof.csv"
    cli.ok("unmix", files["lib"], files["noisy"], "--noise", "benchtop_double_beam", "--out", out)
    assert all("lack_of_fit" in f for f in read_csv(out)["sample_flags"])
    cli.ok("unmix", files["lib"], files["noisy"], "--noise", "0.02", "--out", out)
    assert not any("lack_of_fit" in f for f in read_csv(out)["sample_flags"])


def test_unmix_noise_weights_through_the_cli(files, tmp_path, cli):
    """--weights noise --noise σ runs and stays close to the unweighted answer on clean
    data (both within 2 % of the truth for the mid sample).
    """
    out_w = tmp_path / "w.csv"
    cli.ok("unmix", files["lib"], files["plain"], "--weights", "noise", "--noise",
           "diode_array", "--out", out_w)
    table = read_csv(out_w).set_index(["sample", "component"])["concentration"]
    for name, value in CONC.items():
        assert table[("mid", name)] == pytest.approx(value, rel=0.02)


@pytest.mark.parametrize(("args", "match"), [
    (("--weights", "noise"), "weights='noise' needs a noise model"),
    (("--noise", "bogus"), "noise: unknown preset 'bogus'; presets are benchtop_double_beam"),
    (("--noise", "-0.001"), "noise: -0.001 AU is not a positive number"),
    (("--range", "0-2"), "--range: 0 AU is not a positive number; give two increasing "
                         "absorbances above 0, e.g. 0.3-2"),
    (("--range", "2-0.3"), "--range: 0.3 AU is not a number > 2 AU; give two increasing "
                           "absorbances above 0, e.g. 0.3-2"),
    (("--range", "abc"), "--range: 'abc' is not LOW-HIGH"),
    (("--wavelength-tolerance", "-1"), "--wavelength-tolerance: -1 nm is not a number ≥ 0"),
])
def test_unmix_bad_trust_options_exit_2_with_one_error_line(files, args, match, cli):
    """User mistakes in the trust options: exit 2, one ``error:`` line, no traceback."""
    assert_cli_error(cli("unmix", files["lib"], files["plain"], *args), match, literal=True)


def test_unmix_bad_weights_choice_is_refused_by_click(files, cli):
    """--weights outside {none, noise}: click's usage error, exit 2, no traceback."""
    result = cli("unmix", files["lib"], files["plain"], "--weights", "sigma")
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert "Invalid value for '--weights'" in result.stderr


def test_unmix_on_the_demo_with_every_trust_option(demo_library, cli):
    """The demo batches with a noise model, a shift fit and a stated range: exit 0, a
    result row per batch (and one fitted shift per batch) and the flag notes printed.
    """
    batches = demo_file("batches_spectra.csv")
    out = cli.ok("unmix", demo_library, batches, "--window", "420-700", "--noise", "diode_array",
                 "--fit-shift", "--range", "0.2-1.5")
    rows = [line for line in out.stdout.splitlines() if line.startswith("batch_")]
    assert len(rows) == 8
    assert "Fitted wavelength shift" in out.stdout
    assert "Notes:" in out.stdout
