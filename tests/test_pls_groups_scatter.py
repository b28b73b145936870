"""Grouped cross-validation, scatter corrections and fraction units of PLS calibrations
(issue 16 items 5-7), on the invented mixtures of helpers_pls (synthetic, seeded).

Checks against outside implementations (scikit-learn's GroupKFold, numpy SNV and MSC, the
shipped fermentation data) are in tests/external/test_fermentation_pls.py.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from helpers_pls import as_inputs, simulate

import mixsolve as ms
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.reference_io import read_reference
from mixsolve.pls.preprocessing import correct_scatter
from mixsolve.pls.reference import reference_matrix
from mixsolve.report.calibration_text import describe_preprocessing, format_calibration


@pytest.fixture
def grouped() -> tuple[xr.DataArray, pd.DataFrame]:
    """24 invented mixtures in 8 groups of 3 (replicates of one mixture)."""
    rng = np.random.default_rng(1616)
    conc = np.repeat(rng.uniform([1.0, 0.5, 0.5], [10.0, 10.0, 10.0], (8, 3)), 3, axis=0)
    spectra, ref = as_inputs(*simulate(rng, 24, conc=conc))
    ref["group"] = [f"mix{(int(s[-2:]) - 1) // 3}" for s in ref["sample"]]
    return spectra, ref


def test_groups_are_never_split_and_the_report_says_so(grouped) -> None:
    spectra, ref = grouped
    model = ms.calibrate(spectra, ref, folds=4, max_latent=6)
    groups = model["group"].values
    for g in np.unique(groups):
        assert np.unique(model["fold"].values[groups == g]).size == 1
    cvs = json.loads(model.attrs["cross_validation"])
    assert cvs["groups"] == 8 and cvs["folds"] == 4
    assert "4 folds of whole groups (8 groups, never split), balanced by size" in \
        format_calibration(model)
    every = ms.calibrate(spectra, ref, folds=8, max_latent=6, split="random", seed=3)
    assert "8 folds of whole groups (8 groups, never split), leave one group out" in \
        format_calibration(every)
    shuffled = ms.calibrate(spectra, ref, folds=4, max_latent=6, split="random", seed=3)
    assert "groups shuffled (seed 3)" in format_calibration(shuffled)


def test_default_folds_follow_the_groups(grouped) -> None:
    spectra, ref = grouped
    model = ms.calibrate(spectra, ref, max_latent=4)
    assert json.loads(model.attrs["cross_validation"])["folds"] == 8  # min(10, 8 groups)


@pytest.mark.parametrize(("change", "message"), [
    (lambda r: r.assign(group="one"), r"all 24 samples are in one group; cross-validation "
                                      r"needs at least 2 groups"),
    (lambda r: r.assign(group=r["group"].where(r.index != 5, "")),
     r"row 6: sample 'cal_02' has an empty group"),
    (lambda r: r.assign(group=r["group"].where(r.index != 1, "other")),
     r"row 2: sample 'cal_01' is in group 'other' but in 'mix0' at row 1; a sample belongs "
     r"to one group"),
])
def test_group_refusals(grouped, change, message) -> None:
    spectra, ref = grouped
    with pytest.raises(InputError, match=message):
        ms.calibrate(spectra, change(ref), max_latent=4)


def test_more_folds_than_groups_refused(grouped) -> None:
    spectra, ref = grouped
    with pytest.raises(InputError, match=r"folds: 9 is not a whole number from 2 to 8; at "
                                         r"most one fold per group of samples \(8 groups; a "
                                         r"group is never split\)"):
        ms.calibrate(spectra, ref, folds=9, max_latent=4)


def test_group_column_read_from_a_file_and_a_data_array(tmp_path, grouped) -> None:
    _, ref = grouped
    path = tmp_path / "ref.csv"
    ref.to_csv(path, index=False)
    table = read_reference(path)
    assert table["group"].tolist() == ref["group"].tolist()
    matrix = reference_matrix(table)
    assert matrix["group"].values.tolist() == ref["group"].tolist()[::3]
    again = reference_matrix(matrix)
    assert again["group"].values.tolist() == matrix["group"].values.tolist()
    with pytest.raises(InputError, match=r"sample 'cal_01' has no group"):
        reference_matrix(matrix.assign_coords(group=("sample", ["", *matrix["group"].values[1:]])))


# ----------------------------------------------------------------------------- fractions


def test_fraction_references_calibrate_and_convert_at_prediction() -> None:
    rng = np.random.default_rng(55)
    spectra, ref = as_inputs(*simulate(rng, 20))
    ref["unit"] = "% v/v"
    model = ms.calibrate(spectra, ref, folds=5, max_latent=6)
    assert model.attrs["unit"] == "% v/v"
    pred = ms.predict(spectra.isel(sample=[0, 1]), model)
    as_fraction = ms.predict(spectra.isel(sample=[0, 1]), model, unit="mL/L")
    np.testing.assert_allclose(as_fraction["concentration"].values,
                               pred["concentration"].values * 10.0)  # 1 % = 10 mL/L
    with pytest.raises(InputError, match=r"unit: 'g/g' is a mass fraction but the model "
                                         r"predicts % v/v \(a volume fraction\)"):
        ms.predict(spectra, model, unit="g/g")
    ref.loc[3, "unit"] = "g/g"
    with pytest.raises(InputError, match=r"row 4: unit 'g/g' is a mass fraction but row 1 uses "
                                         r"'% v/v' \(a volume fraction\)"):
        ms.calibrate(spectra, ref)
    ref.loc[3, "unit"] = "ppm"
    with pytest.raises(InputError, match=r"row 4: unit: 'ppm' does not say per what"):
        ms.calibrate(spectra, ref)


# ----------------------------------------------------------------------------- scatter


@pytest.mark.parametrize("scatter", ["offset", "snv", "msc"])
def test_scatter_correction_travels_with_the_model(tmp_path, scatter: str) -> None:
    """The correction is stored and repeated at prediction: a file round trip predicts the
    same; an offset (offset, SNV, MSC) and a scale (SNV, MSC) added to a spectrum change
    nothing."""
    rng = np.random.default_rng(7)
    spectra, ref = as_inputs(*simulate(rng, 20))
    model = ms.calibrate(spectra, ref, folds=5, max_latent=6, scatter=scatter)
    assert json.loads(model.attrs["preprocessing"])["scatter"] == scatter
    assert ("msc_reference" in model) == (scatter == "msc")
    again = ms.read_model(ms.write_model(model, tmp_path / "m.nc"))
    base = ms.predict(spectra, model)["concentration"].values
    np.testing.assert_allclose(ms.predict(spectra, again)["concentration"].values, base)
    moved = spectra * (1.0 if scatter == "offset" else 1.4) + 0.05
    np.testing.assert_allclose(ms.predict(moved, model)["concentration"].values, base,
                               rtol=1e-9, atol=1e-9)
    assert describe_preprocessing(model.attrs["preprocessing"]).startswith(
        {"offset": "offset removed", "snv": "standard normal variate",
         "msc": "multiplicative scatter correction"}[scatter])


def test_scatter_refusals(tmp_path) -> None:
    rng = np.random.default_rng(8)
    spectra, ref = as_inputs(*simulate(rng, 20))
    with pytest.raises(InputError, match=r"scatter: 'emsc' is not one of"):
        ms.calibrate(spectra, ref, scatter="emsc")  # type: ignore[arg-type]
    model = ms.calibrate(spectra, ref, folds=5, max_latent=4, scatter="snv")
    flat = spectra.isel(sample=[0, 1]).copy()
    flat[1] = 0.3
    with pytest.raises(InputError, match=r"sample 'cal_02' has the same reading at every "
                                         r"wavelength: SNV cannot scale it"):
        ms.predict(flat, model)
    with pytest.raises(InputError, match=r"MSC slope ≤ 0"):
        correct_scatter(-spectra.values[:2], "msc", spectra.values.mean(axis=0))
    msc = ms.calibrate(spectra, ref, folds=5, max_latent=4, scatter="msc")
    broken = msc.drop_vars("msc_reference")
    path = tmp_path / "broken.nc"
    broken.to_netcdf(path, engine="h5netcdf")
    with pytest.raises(FileFormatError, match=r"scatter correction msc needs the variable "
                                              r"'msc_reference'"):
        ms.read_model(path)
    odd = msc.assign_attrs(preprocessing=json.dumps({"scale": "none", "derivative": None,
                                                     "scatter": "emsc"}))
    odd.to_netcdf(tmp_path / "odd.nc", engine="h5netcdf")
    with pytest.raises(FileFormatError, match=r"preprocessing holds scatter 'emsc'"):
        ms.read_model(tmp_path / "odd.nc")
