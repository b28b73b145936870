"""The synthetic demo cube (reference_spectra_demo/make_demo_cube.py) and `mixsolve demo
--cube` (mixsolve.workflows.demo_cube).

The cube is invented; the checks are internal consistency: the same cube whatever the
chunking, the known concentration maps recovered by unmixing (Beer–Lambert, ASTM E169,
with the library written beside the cube), and clean refusals.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from helpers_cli import assert_cli_error
from mixsolve.reference_spectra_demo import make_demo_cube

from mixsolve.errors import InputError
from mixsolve.workflows.demo_cube import run_cube_demo

pytest.importorskip("dask")
pytest.importorskip("zarr")


def test_cube_does_not_depend_on_its_chunks() -> None:
    """Each image row has its own seed: 3- and 5-row chunks give one cube, reproducibly."""
    wl = make_demo_cube.wavelengths(30)
    a = make_demo_cube.synthetic_cube(11, wl, chunk_rows=3).values
    b = make_demo_cube.synthetic_cube(11, wl, chunk_rows=5).values
    assert a.shape == (11, 11, 30)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(make_demo_cube.synthetic_cube(11, wl, 3).values, a)


def test_concentration_maps() -> None:
    """Amber ramps left to right, rose is absent in the top quarter, teal outside its patch."""
    y, x = np.mgrid[0:100, 0:100]
    c = make_demo_cube.concentrations(y, x, 100)
    np.testing.assert_allclose(c[:, 0, 0], 0.0)
    np.testing.assert_allclose(c[:, -1, 0], make_demo_cube.PEAK_MG_L["amber"])
    assert np.all(c[:25, :, 1] == 0) and c[-1, 0, 1] == make_demo_cube.PEAK_MG_L["rose"]
    assert c[0, 0, 2] == 0 and c[40, 60, 2] > 7.9


def test_cli_cube_demo_recovers_the_maps(tmp_path: Path, cli) -> None:
    """mixsolve demo --cube 12: exit 0, files written, concentrations within 0.1 mg/L of
    the maps at every checked pixel; the text says the data are synthetic."""
    run = cli("demo", "--out", tmp_path, "--cube", "12", "--cube-wavelengths", "60")
    assert run.exit_code == 0, run.output
    assert "synthetic" in run.stdout and "Unmixed 12 × 12 spectra (y × x)" in run.stdout
    for name in ("library.nc", "cube.zarr", "result.zarr", "comparison.csv"):
        assert (tmp_path / "cube" / name).exists(), name
    table = np.genfromtxt(tmp_path / "cube" / "comparison.csv", delimiter=",", names=True,
                          dtype=None, encoding="utf-8")
    assert np.all(table["max_abs_error"] < 0.1)


def test_cube_demo_refusals(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cli) -> None:
    """Too small a cube, and a missing scale extra, are one-line errors (exit 2)."""
    assert_cli_error(cli("demo", "--out", tmp_path, "--cube", "1"),
                     r"^error: --cube: 1 is not a whole number ≥ 2; give the pixels per side, "
                     r"e\.g\. 1000$", must_not_exist=[tmp_path / "cube"])
    assert_cli_error(cli("demo", "--out", tmp_path, "--cube", "4", "--cube-wavelengths", "5"),
                     r"^error: --cube-wavelengths: 5 is not a whole number ≥ 10; e\.g\. 191$",
                     must_not_exist=[tmp_path / "cube"])
    with pytest.raises(InputError, match=r"^pixels: 2\.5 is not a whole number ≥ 2; give the "):
        run_cube_demo(tmp_path, 2.5)
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name == "zarr" else real(name, *a))
    with pytest.raises(InputError, match=r"the cube demo needs zarr, which is not installed; "
                                         r"install the scale extra"):
        run_cube_demo(tmp_path, 4)
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name in ("dask", "zarr") else real(name, *a))
    with pytest.raises(InputError, match=r"needs dask and zarr, which are not installed"):
        run_cube_demo(tmp_path, 4)
    assert not (tmp_path / "cube").exists()
