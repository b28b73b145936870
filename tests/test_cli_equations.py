"""`mixsolve equations check|apply` end to end on the synthetic demo (invented data)."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
from helpers_cli import assert_cli_error

DEMO = Path(__file__).resolve().parents[1] / "reference_spectra_demo"


def test_check_shipped_set_by_name(cli) -> None:
    out = cli.ok("equations", "check", "porra1989").output
    assert "status: from memory — verify against the paper before relying on it" in out
    assert "Porra, R.J." in out and "85.96" in out and "caution:" in out


def test_check_json(cli) -> None:
    import json

    data = json.loads(cli.ok("equations", "check", "lichtenthaler1987", "--json").output)
    assert data["primary"] == ["chl_a", "chl_b", "carotenoids"]
    assert data["shift_bias"] is None


def test_check_and_apply_demo_with_library(cli, tmp_path: Path) -> None:
    """The demo: library from the demo standards, check, apply with --out (synthetic)."""
    lib = tmp_path / "lib.nc"
    cli.ok("library", "build", DEMO / "standards_spectra.csv", "--standards",
           DEMO / "standards.csv", "--out", lib)
    check = cli.ok("equations", "check", DEMO / "equations_demo.csv", "--library", lib)
    assert "your library's absorptivities" in check.output
    assert "a 0.5 nm wavelength error moves each result" in check.output
    out = tmp_path / "res.csv"
    run = cli.ok("equations", "apply", DEMO / "equations_demo.csv",
                 DEMO / "batches_spectra.csv", "--library", lib, "--noise", "0.0015",
                 "--out", out)
    assert "full spectrum" in run.output and "status: seen" in run.output
    table = pd.read_csv(out)
    assert set(table["method"]) == {"equations", "full_spectrum"}
    truth = pd.read_csv(DEMO / "batches_truth.csv")
    merged = table[table["method"] == "equations"].merge(truth, on=["sample", "component"])
    assert (merged["concentration_x"] - merged["concentration_y"]).abs().max() < 0.3


def test_apply_refuses_missing_wavelength(cli, tmp_path: Path) -> None:
    spectra = tmp_path / "short.csv"
    spectra.write_text("wavelength_nm,s1\n620,0.1\n650,0.4\n670,0.6\n700,0.1\n",
                       encoding="utf-8")
    out = tmp_path / "res.csv"
    result = cli("equations", "apply", "jeffrey_humphrey1975", spectra, "--out", out)
    assert_cli_error(result, r"the equations read 750 nm, outside the spectra's 620-700 nm",
                     must_not_exist=[out])


def test_bad_equations_file(cli, tmp_path: Path) -> None:
    bad = tmp_path / "eq.csv"
    bad.write_text("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
                   "component,coefficient,wavelength_nm\na,one,500\n", encoding="utf-8")
    assert_cli_error(cli("equations", "check", bad), r"eq.csv, line 6.*'one' is not a number")
