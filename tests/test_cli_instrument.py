"""``mixsolve instrument absorbance|wavelength|stray-light|repeatability`` through CliRunner,
and the check log (mixsolve.io.log_io).

All spectra are synthetic and invented (built from the CHECKS.md values, seeded noise).
"""

from __future__ import annotations

import csv

import numpy as np
import pytest
from helpers_cli import assert_cli_error
from helpers_instrument import UV, dichromate
from helpers_io import leftovers, write_text, write_wide

from mixsolve.instrument.wavelength_scale import HOLMIUM_BANDS_NM
from mixsolve.io.log_io import LOG_COLUMNS

HO = np.arange(230.0, 560.01, 0.5)
KCL = np.arange(190.0, 231.0, 1.0)


def holmium(shift: float, rng: np.random.Generator) -> np.ndarray:
    """Synthetic holmium bands (σ 1.5 nm) shifted by ``shift`` nm, seeded noise."""
    bands = sum(0.6 * np.exp(-0.5 * ((HO - (b + shift)) / 1.5) ** 2) for b in HOLMIUM_BANDS_NM)
    return 0.05 + bands + rng.normal(0, 0.0005, HO.size)


def read_log(path) -> list[dict[str, str]]:
    """Rows of a check log as dicts."""
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle))


def test_absorbance_pass_fail_and_log_grows(tmp_path, cli) -> None:
    """A good and a 3 % low solution: PASS then FAIL printed; the log gains 4 dated records
    per run, earlier rows kept unchanged."""
    good = write_wide(tmp_path / "good.csv", {"k": dichromate(60.0)}, UV)
    low = write_wide(tmp_path / "low.csv", {"k": dichromate(60.0, 0.97)}, UV)
    log = tmp_path / "checks.csv"
    first = cli("instrument", "absorbance", good, "--concentration", "60", "--bandwidth", "1",
                "--log", log)
    assert first.exit_code == 0, first.output
    assert first.stdout.rstrip().endswith("logged 4 record(s) to " + str(log))
    assert "result: PASS" in first.stdout
    before = log.read_text(encoding="utf-8")
    second = cli("instrument", "absorbance", low, "--concentration", "60", "--log", log)
    assert second.exit_code == 0 and "result: FAIL" in second.stdout
    rows = read_log(log)
    assert list(rows[0]) == list(LOG_COLUMNS)
    assert len(rows) == 8
    assert log.read_text(encoding="utf-8").startswith(before)
    assert [r["result"] for r in rows[4:]] == ["fail", "fail", "pass", "fail"]
    assert rows[0]["check"] == "absorbance" and rows[0]["source"] == "good.csv"
    assert rows[0]["timestamp"][:2] == "20" and "T" in rows[0]["timestamp"]
    assert leftovers(tmp_path) == []


def test_absorbance_linearity_series(tmp_path, cli) -> None:
    """Several concentrations, one per column: per-level items plus linearity items."""
    levels = [20.0, 40.0, 60.0, 80.0]
    spectra = write_wide(tmp_path / "series.csv",
                         {f"L{int(c)}": dichromate(c) for c in levels}, UV)
    run = cli("instrument", "absorbance", spectra, "--concentration", "20,40,60,80")
    assert run.exit_code == 0, run.output
    assert run.stdout.count("linearity at") == 4
    assert "result: PASS" in run.stdout


def test_wavelength_offset_printed_and_logged(tmp_path, rng, cli) -> None:
    """Holmium bands shifted by +0.4 nm: the offset line reads about +0.4 nm."""
    spectra = write_wide(tmp_path / "ho.csv", {"ho": holmium(0.4, rng)}, HO)
    log = tmp_path / "log.csv"
    run = cli("instrument", "wavelength", spectra, "--bandwidth", "1", "--log", log)
    assert run.exit_code == 0, run.output
    line = next(t for t in run.stdout.splitlines() if t.strip().startswith("offset nm"))
    assert float(line.split()[-1]) == pytest.approx(0.4, abs=0.02)
    rows = read_log(log)
    assert len(rows) == 4 and {r["check"] for r in rows} == {"wavelength"}
    logged = float(rows[0]["note"].split("offset_nm=")[1].split(";")[0])
    assert logged == pytest.approx(0.4, abs=0.02)


def test_stray_light_pass_and_fail(tmp_path, cli) -> None:
    """12 g/L KCl above 2 AU at 200 nm passes; 1.8 AU fails; the stray bound is shown."""
    good = write_wide(tmp_path / "kcl.csv", {"kcl": np.full(KCL.size, 2.4)}, KCL)
    bad = write_wide(tmp_path / "weak.csv", {"kcl": np.full(KCL.size, 1.8)}, KCL)
    assert "result: PASS" in cli("instrument", "stray-light", good).stdout
    run = cli("instrument", "stray-light", bad, "--limit", "2")
    assert run.exit_code == 0 and "result: FAIL" in run.stdout
    assert "stray fraction bound" in run.stdout


def test_repeatability_command(tmp_path, rng, cli) -> None:
    """Six scans with 0.001 AU noise and a drift of 0.002 AU per scan: the SD holds the
    drift too (√(0.001² + SD(0, 0.002, …, 0.010)²) = √(1e-6 + 0.00374²) ≈ 0.0039 AU), and
    the drift is reported as significant."""
    wl = np.arange(400.0, 601.0, 2.0)
    scans = {f"scan{j}": 0.5 + 0.002 * j + rng.normal(0, 0.001, wl.size) for j in range(6)}
    path = write_wide(tmp_path / "scans.csv", scans, wl)
    out = tmp_path / "rep.csv"
    run = cli("instrument", "repeatability", path, "--out", out)
    assert run.exit_code == 0, run.output
    pooled = next(t for t in run.stdout.splitlines() if "pooled SD" in t)
    assert float(pooled.split()[2]) == pytest.approx(0.0039, abs=0.0004)
    assert "drift is significant" in run.stdout
    header = out.read_text(encoding="utf-8").splitlines()[0]
    assert header.startswith("wavelength_nm,mean,sd,drift_per_scan")


@pytest.mark.parametrize(("args", "message"), [
    (["absorbance", "{good}", "--concentration", "sixty"],
     "--concentration: 'sixty' is not a comma-separated list of numbers"),
    (["absorbance", "{good}", "--concentration", "60,70"],
     "--concentration: 2 values for 1 spectra"),
    (["absorbance", "{good}", "--concentration", "-5"],
     "--concentration: -5 mg/L is not a positive number"),
    (["absorbance", "{kcl}", "--concentration", "60"],
     "no reading at or within 2 nm either side of 235 nm"),
    (["stray-light", "{good}"], "no reading at or within 2 nm either side of 200 nm"),
    (["wavelength", "{kcl}"], "holds none of the bands"),
    (["wavelength", "{good}", "--uv-tolerance", "0"], "--uv-tolerance: 0 nm is not a positive"),
    (["absorbance", "{good}", "--concentration", "60", "--log", "{notlog}"],
     "is not that of a mixsolve instrument log"),
    (["absorbance", "nothere.csv", "--concentration", "60"], "nothere.csv"),
])
def test_bad_input_is_one_error_line_and_exit_2(tmp_path, args, message, cli) -> None:
    """Bad input: exit code 2, exactly one ``error:`` line naming what and where; an
    existing file that is not a log is left untouched."""
    files = {
        "good": write_wide(tmp_path / "good.csv", {"k": dichromate(60.0)}, UV),
        "kcl": write_wide(tmp_path / "kcl.csv", {"kcl": np.full(KCL.size, 2.4)}, KCL),
        "notlog": write_text(tmp_path / "notes.csv", "a,b\n1,2\n"),
    }
    run = cli("instrument", *[a.format(**files) for a in args])
    assert_cli_error(run, message, literal=True)
    assert (tmp_path / "notes.csv").read_text() == "a,b\n1,2\n"
