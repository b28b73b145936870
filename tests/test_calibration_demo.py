"""The synthetic PLS calibration data of the demo scenario (reference_spectra_demo/).

The files are invented (make_calibration_data.py): 30 calibration blends of the demo's
pigments, in which teal's bands move with rose, and four new lots, ``lot_D`` of which
also holds a contaminant the calibration never saw. docs/calibration.md works through
them with the command line; these tests pin what it shows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from mixsolve.reference_spectra_demo import make_calibration_data

import mixsolve as ms
from mixsolve.io.reference_io import read_reference
from mixsolve.workflows.demo import demo_file

FILES = ("calibration_spectra.csv", "calibration_reference.csv",
         "calibration_test_spectra.csv", "calibration_test_truth.csv")


@pytest.fixture(scope="module")
def prediction() -> xr.Dataset:
    """The lots predicted by a model of the calibration blends, as in docs/calibration.md."""
    model = ms.calibrate(ms.read_spectra(demo_file("calibration_spectra.csv")),
                         read_reference(demo_file("calibration_reference.csv")),
                         window=(400, 700), compare=True)
    return ms.predict(ms.read_spectra(demo_file("calibration_test_spectra.csv")), model)


def test_the_files_are_what_the_script_writes(tmp_path) -> None:
    """The bundled CSVs are reproducible from the seeded script beside them."""
    written = make_calibration_data.write_calibration_data(tmp_path)
    assert [p.name for p in written] == list(FILES)
    for name in FILES:
        assert (tmp_path / name).read_bytes() == demo_file(name).read_bytes(), name


def test_the_lot_with_an_absent_absorber_is_flagged_and_the_others_are_not(prediction) -> None:
    """Acceptance of issue 5: lot_D's contaminant leaves a Q residual far above the 99 %
    limit; the three ordinary lots carry no flag at all."""
    flags = dict(zip(prediction["sample"].values.tolist(),
                     prediction["flags"].values.tolist(), strict=True))
    assert make_calibration_data.CONTAMINATED_LOT == "lot_D"
    assert "q_above_99" in flags.pop("lot_D").split(";")
    assert flags == {"lot_A": "", "lot_B": "", "lot_C": ""}
    q_ratio = (prediction["q_residual"] / prediction["q_limit_99"]).max("component")
    assert float(q_ratio.sel(sample="lot_D")) > 5.0
    assert float(q_ratio.drop_sel(sample="lot_D").max()) < 1.0


def test_the_ordinary_lots_are_recovered_within_their_uncertainty(prediction) -> None:
    truth = pd.read_csv(demo_file("calibration_test_truth.csv")).pivot(
        index="sample", columns="component", values="concentration")
    ordinary = prediction.drop_sel(sample="lot_D")
    known = truth.loc[ordinary["sample"].values, ordinary["component"].values].to_numpy()
    error = ordinary["concentration"].transpose("sample", "component").values - known
    assert np.all(np.abs(error) < 4 * ordinary["std_uncertainty"].values)
