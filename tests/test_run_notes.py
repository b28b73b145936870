"""Run notes and flag severities (mixsolve.flags): the containers both kinds of doubt use.

The expected values are the definitions in docs/flags.md (two kinds of doubt), not
numbers from the code's constants. The unmix runs are synthetic (invented bands, seeded noise).
"""

import json
import re

import numpy as np
import pytest
import xarray as xr
from helpers_core import SEED

import mixsolve as ms
from mixsolve import flags


def test_run_notes_round_trip_through_json_text_and_replace_by_code():
    attrs: dict = {}
    flags.add_run_notes(attrs, [flags.RunNote("shift_risk", flags.LOOK, "0.5 nm moves 3 %",
                                              "check the scale")])
    flags.add_run_notes(attrs, [flags.RunNote("shift_risk", flags.DOUBTFUL, "6 %", "fix"),
                                flags.RunNote("bandwidth_mismatch", flags.LOOK, "b", "c")])
    assert isinstance(attrs[flags.RUN_NOTES_ATTR], str)  # storable in netCDF attrs
    notes = flags.run_notes_of(attrs)
    assert [n.code for n in notes] == ["shift_risk", "bandwidth_mismatch"]
    assert notes[0].severity == flags.DOUBTFUL and notes[0].text == "6 %"
    assert json.loads(attrs[flags.RUN_NOTES_ATTR])[1]["fix"] == "c"
    assert flags.run_notes_of({}) == []


def test_doubtful_codes_come_first_and_component_suffix_is_ignored():
    codes = ["at_zero:rose", "above_range", "missing_readings", "lack_of_fit"]
    assert flags.by_severity(codes) == ["above_range", "lack_of_fit", "at_zero:rose",
                                        "missing_readings"]
    assert flags.severity_of("at_zero:rose") == flags.LOOK
    assert flags.severity_of("above_range") == flags.DOUBTFUL


# --- run notes of unmix and their display (issue 15, item 1) -------------------------------

#: Invented bands (height L/(mol*cm), centre nm, width nm).
BANDS = {"amber": (1.2e4, 460.0, 25.0), "rose": (1.0e4, 530.0, 22.0)}
LIB_WL = np.arange(380.0, 720.01, 0.5)
FLANKS = (480.0, 500.0)  # between the bands: both on steep flanks


def _eps(wl):
    return np.vstack([h * np.exp(-0.5 * ((wl - c) / w) ** 2) for h, c, w in BANDS.values()])


@pytest.fixture(scope="module")
def flank_run():
    """Ten samples fitted on the steep flanks between two invented bands (synthetic)."""
    lib = ms.import_absorptivities(xr.DataArray(
        _eps(LIB_WL), dims=("component", "wavelength"),
        coords={"component": list(BANDS), "wavelength": LIB_WL}), "L/(mol*cm)")
    rng = np.random.default_rng(SEED)
    wl = np.arange(470.0, 510.01, 1.0)
    conc = rng.uniform(2e-5, 6e-5, (10, 2))
    values = conc @ _eps(wl) + 0.002 * rng.standard_normal((10, wl.size))
    spectra = ms.make_spectra(values, wl)
    return lib, spectra, ms.unmix(spectra, lib, window=FLANKS)


def test_shift_risk_is_said_once_with_its_size_and_not_on_rows(flank_run):
    """The relative move |S c|·tol/c, S = D⁺K′ (docs/diagnostics.md; the definition
    recomputed here with numpy.linalg.pinv and numpy.gradient), largest and median over
    the quantified results, said once; no row carries shift_sensitive."""
    lib, _, result = flank_run
    notes = flags.run_notes_of(result.attrs)
    assert [n.code for n in notes] == ["shift_risk"]
    wl = json.loads(result.attrs["wavelengths_nm"])
    design = ms.library.absorptivity_at(lib, np.asarray(wl))
    slope = np.stack([np.interp(wl, LIB_WL, np.gradient(row, LIB_WL))
                      for row in lib["absorptivity"].values], axis=1)
    s = np.linalg.pinv(design) @ slope
    conc = result["concentration"].values
    moves = np.abs(conc @ s.T) * 0.5 / conc
    said = [name for k, name in enumerate(BANDS) if moves[:, k].max() > 0.02]  # > 2 %
    assert said
    for k, name in enumerate(BANDS):
        size = (f"{name} by up to {100 * moves[:, k].max():.2g} % (typical "
                f"{100 * np.median(moves[:, k]):.2g} %)")
        assert (size in notes[0].text) == (name in said), (size, notes[0].text)
    assert not any("shift_sensitive" in f for f in result["flags"].values)
    assert not any("shift_sensitive" in f for f in ms.results_table(result)["sample_flags"])


def test_reports_show_each_run_note_once_in_their_header(flank_run):
    """Text report, HTML page and the large-run summary: each note once, before the
    results, with its fix; a note added by another part of mixsolve is shown the same way."""
    from mixsolve.report.text import format_results
    from mixsolve.report.unmix_page import unmix_report
    from mixsolve.report.unmix_text import format_cube_summary

    lib, _, result = flank_run
    result = result.copy()
    flags.add_run_notes(result.attrs, [flags.RunNote("bandwidth_mismatch", flags.LOOK,
                                                     "a 4 nm bandpass biases results by -1 %",
                                                     "state --bandwidth-nm")])
    text = format_results(result)
    for code in ("[shift_risk]", "[bandwidth_mismatch]"):
        assert text.count(code) == 1
        assert text.index(code) < text.index("\nsample ")
    assert "fix: state --bandwidth-nm." in text
    assert format_cube_summary(result).count("[shift_risk]") == 1
    page = unmix_report(result, lib)
    assert page.count("[shift_risk]") == 1 and page.count("[bandwidth_mismatch]") == 1
    assert page.index("Run notes") < page.index("<h2>Results</h2>")


def test_lazy_result_says_the_shift_risk_from_the_design(flank_run):
    """A dask-backed result is not computed for its note: the move of each component in a
    mixture of equal peak absorbances, |S c⁰|·tol/c⁰ with c⁰ₖ = 1/max Dₖ. Checked against
    the eager note of a noise-free spectrum of exactly that mixture (the eager note reads
    the fitted results), so the off-diagonal terms, which dominate on flanks, count."""
    lib, spectra, eager = flank_run
    lazy = ms.unmix(spectra.chunk({"sample": 5}), lib, window=FLANKS)
    assert lazy["concentration"].chunks is not None
    notes = flags.run_notes_of(lazy.attrs)
    assert [n.code for n in notes] == ["shift_risk"]
    assert "equal peak absorbances" in notes[0].text
    assert flags.run_notes_of(eager.attrs)[0].fix == notes[0].fix
    wl = np.asarray(json.loads(eager.attrs["wavelengths_nm"]))
    design = ms.library.absorptivity_at(lib, wl)
    typical = 1.0 / design.max(axis=0)
    mixture = ms.make_spectra((typical @ _eps(spectra["wavelength"].values))[None, :],
                              spectra["wavelength"].values)
    exact = flags.run_notes_of(ms.unmix(mixture, lib, window=FLANKS).attrs)[0].text
    lazy_pcts = re.findall(r"by ([\d.]+) %", notes[0].text)
    eager_pcts = re.findall(r"up to ([\d.]+) %", exact)
    assert lazy_pcts and lazy_pcts == eager_pcts, (notes[0].text, exact)


def test_flags_column_is_ordered_doubtful_first(flank_run):
    """results_table orders each sample's codes by severity (docs/flags.md, "Severity"):
    lack_of_fit (doubtful) before missing_readings (worth a look), whatever order the
    result holds them in."""
    lib, spectra, _ = flank_run
    values = spectra.values.copy()
    values[0, 15] = np.nan  # 485 nm, inside the window
    values[0] += 0.05 * np.exp(-0.5 * ((spectra.wavelength.values - 490) / 5) ** 2)
    result = ms.unmix(ms.make_spectra(values, spectra.wavelength.values), lib,
                      window=FLANKS, noise=0.002)
    assert result["flags"].values[0].split(";")[:2] == ["missing_readings", "lack_of_fit"]
    table = ms.results_table(result)
    assert table["sample_flags"].iloc[0].split(";")[:2] == ["lack_of_fit", "missing_readings"]


def test_old_result_with_shift_sensitive_rows_is_still_explained(flank_run):
    """Result files written before issue 15 carry shift_sensitive:<component> on rows: the
    text report still explains the code (docs/flags.md), worth a look, after doubtful ones."""
    from mixsolve.report.text import format_results

    _, _, result = flank_run
    old = result.copy()
    old["flags"] = old["flags"].copy(data=np.array(
        ["shift_sensitive:rose;lack_of_fit"] + [""] * (old.sizes["sample"] - 1), dtype=object))
    text = format_results(old)
    assert "lack_of_fit;shift_sensitive:rose" in text
    assert "run note shift_risk" in text and "[shift_sensitive:rose, look]" in text
