"""Wavenumber axes end to end (issue 16, item 4): reading, libraries, unmix, calibrate with
a derivative on the native even cm⁻¹ grid, predict; nm and cm⁻¹ never mixed silently.

The spectra are synthetic: three invented Gaussian near-infrared bands on an even
wavenumber grid, mixed in seeded random amounts with seeded noise. Outside references:
the conversion λ = 10⁷/ν̃ against pint's spectroscopy context; the CLS concentrations
against ``numpy.linalg.lstsq``; the derivative against ``scipy.signal.savgol_filter``
applied to the spectra in wavenumber order.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pint
import pytest
from helpers_cli import assert_cli_error
from helpers_jcamp import quantized, write_jcamp
from scipy.signal import savgol_filter

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.pls.preprocessing import check_derivative, preprocess

#: Even wavenumber grid, 6000 to 4000 cm⁻¹ in 8 cm⁻¹ steps (uneven in nm: 1667-2500 nm).
NU = np.arange(6000.0, 3999.0, -8.0)
#: Invented bands: centre (cm⁻¹), width (cm⁻¹), absorptivity (L/(g*cm)).
BANDS = {"ethanol": (5800.0, 120.0, 0.50), "glucose": (4900.0, 160.0, 0.40),
         "water": (4400.0, 110.0, 0.60)}
COMPONENTS = list(BANDS)


def _eps(nu: np.ndarray) -> np.ndarray:
    return np.stack([h * np.exp(-0.5 * ((nu - c) / w) ** 2) for c, w, h in BANDS.values()])


def _mixtures(n: int, seed: int, nu: np.ndarray = NU, noise: float = 5e-4
              ) -> tuple[np.ndarray, np.ndarray, list[str]]:
    rng = np.random.default_rng(seed)
    conc = rng.uniform(0.5, 2.0, (n, len(BANDS)))
    absorbance = conc @ _eps(nu) + noise * rng.standard_normal((n, nu.size))
    return conc, absorbance, [f"mix_{seed}_{i + 1:02d}" for i in range(n)]


def _write_wide(path, axis_values: np.ndarray, header: str, columns: np.ndarray,
                names: list[str]):
    frame = pd.DataFrame(columns.T, columns=names)
    frame.insert(0, header, axis_values)
    frame.to_csv(path, index=False, float_format="%.17g")
    return path


def _reference(conc: np.ndarray, names: list[str], path):
    rows = [(s, c, conc[i, k], "g/L") for i, s in enumerate(names)
            for k, c in enumerate(COMPONENTS)]
    pd.DataFrame(rows, columns=["sample", "component", "concentration", "unit"]).to_csv(
        path, index=False, float_format="%.17g")
    return path


@pytest.mark.parametrize("header", ["wavenumber_cm-1", "Wavenumber (cm-1)", "cm-1", "1/cm",
                                    "Wavenumber [cm⁻¹]"])
def test_headers_read_as_wavelength_per_pint(tmp_path, header):
    """λ = 10⁷/ν̃ nm, checked against pint's spectroscopy context (pint.UnitRegistry,
    ``.to("nm", "sp")``, seen); the values are the ones written, in wavelength order."""
    _, absorbance, names = _mixtures(2, 1)
    da = ms.read_spectra(_write_wide(tmp_path / "ir.csv", NU, header, absorbance, names))
    ureg = pint.UnitRegistry()
    expected = ureg.Quantity(NU, "1/cm").to("nm", "sp").magnitude
    assert da.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(da["wavelength"].values, expected, rtol=1e-14)
    np.testing.assert_array_equal(da.values, absorbance)  # NU falls: λ rises


def test_long_table_and_jcamp_read_alike(tmp_path):
    """A long table in cm⁻¹ and JCAMP-DX ##XUNITS=1/CM give the wide table's numbers."""
    _, absorbance, names = _mixtures(2, 2)
    wide = ms.read_spectra(_write_wide(tmp_path / "w.csv", NU, "wavenumber_cm-1", absorbance,
                                       names))
    rows = [(s, nu, absorbance[i, j]) for i, s in enumerate(names) for j, nu in enumerate(NU)]
    pd.DataFrame(rows, columns=["sample", "wavenumber_cm-1", "absorbance"]).to_csv(
        tmp_path / "l.csv", index=False, float_format="%.17g")
    long = ms.read_spectra(tmp_path / "l.csv")
    assert long.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_array_equal(long.values, wide.values)
    np.testing.assert_array_equal(long["wavelength"].values, wide["wavelength"].values)
    jdx = ms.read_spectra(write_jcamp(tmp_path / "j.jdx", dict(zip(names, absorbance,
                                                                  strict=True)),
                                      NU, xunits="1/CM"))
    assert jdx.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(jdx["wavelength"].values, wide["wavelength"].values, rtol=1e-15)
    np.testing.assert_allclose(jdx.values, quantized(absorbance), atol=1e-12)


def test_nonpositive_wavenumber_named(tmp_path):
    path = tmp_path / "z.csv"
    path.write_text("wavenumber_cm-1,a\n4000,0.1\n0,0.2\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"^z\.csv, line 3, column 1 \('wavenumber_cm-1'\): "
                                         r"wavenumber 0 cm-1 is not positive$"):
        ms.read_spectra(path)


def test_files_on_both_axes_refused(tmp_path, cli):
    _, absorbance, names = _mixtures(1, 3)
    _write_wide(tmp_path / "a.csv", NU, "wavenumber_cm-1", absorbance, names)
    _write_wide(tmp_path / "b.csv", 1e7 / NU, "wavelength_nm", absorbance, ["other"])
    with pytest.raises(InputError, match=r"^b\.csv: its axis is wavelength in nm, but a\.csv "
                                         r"gives wavenumber in cm⁻¹; files read together "
                                         r"share one axis"):
        ms.read_spectra([tmp_path / "a.csv", tmp_path / "b.csv"])


def _library_table(tmp_path, axis_values, header, name):
    return _write_wide(tmp_path / name, axis_values, header, _eps(NU), COMPONENTS)


def test_unmix_same_in_nm_and_cm1_and_per_numpy(tmp_path):
    """The same spectra and library written once with an nm axis (λ = 10⁷/ν̃, 17 digits) and
    once in cm⁻¹ give the same concentrations to rounding, and those are the least-squares
    solution of numpy.linalg.lstsq (seen) on the written numbers."""
    _, absorbance, names = _mixtures(5, 4)
    results = {}
    for axis, values, s_head in (("nm", 1e7 / NU, "wavelength_nm"),
                                 ("cm", NU, "wavenumber_cm-1")):
        table = ms.io.spectra_io.read_absorptivity_table(
            _library_table(tmp_path, values, s_head, f"lib_{axis}.csv"))
        library = ms.import_absorptivities(table, "L/(g*cm)")
        spectra = ms.read_spectra(_write_wide(tmp_path / f"s_{axis}.csv", values, s_head,
                                              absorbance, names))
        results[axis] = ms.unmix(spectra, library, unit="g/L")
    assert results["cm"].attrs["axis"] == "wavenumber_cm-1"
    c_nm = results["nm"]["concentration"].transpose("sample", "component").values
    c_cm = results["cm"]["concentration"].transpose("sample", "component").values
    np.testing.assert_allclose(c_cm, c_nm, rtol=1e-10)
    u_nm = results["nm"]["std_uncertainty"].transpose("sample", "component").values
    np.testing.assert_allclose(results["cm"]["std_uncertainty"].transpose(
        "sample", "component").values, u_nm, rtol=1e-9)
    lstsq = np.linalg.lstsq(_eps(NU).T, absorbance.T, rcond=None)[0].T
    np.testing.assert_allclose(c_cm, lstsq, rtol=1e-9)


def test_library_built_in_cm1_keeps_axis_and_refuses_nm_spectra(tmp_path):
    """A library built from standards in cm⁻¹ records the axis; spectra in nm with it are
    refused (one line naming both and the fix); the file round trip keeps the axis."""
    levels = [0.5, 1.0, 2.0]
    absorbance = np.vstack([lv * _eps(NU)[k] for k in range(3) for lv in levels])
    names = [f"{c}_{i}" for c in COMPONENTS for i in range(3)]
    spectra = ms.read_spectra(_write_wide(tmp_path / "std.csv", NU, "wavenumber_cm-1",
                                          absorbance, names))
    sheet = pd.DataFrame([(f"{c}_{i}", c, lv, "g/L") for c in COMPONENTS
                          for i, lv in enumerate(levels)],
                         columns=["sample", "component", "concentration", "unit"])
    library = ms.build_library(spectra, sheet)
    assert library.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(library["absorptivity"].values, _eps(NU), rtol=1e-9,
                               atol=1e-12)
    ms.write_library(library, tmp_path / "lib.nc")
    again = ms.read_library(tmp_path / "lib.nc")
    assert again.attrs["axis"] == "wavenumber_cm-1"
    nm_spectra = ms.make_spectra(absorbance[:1], 1e7 / NU, ["x"])
    with pytest.raises(InputError, match=r"^spectra: given as wavelength in nm, but library "
                                         r"as wavenumber in cm⁻¹; the two are not mixed "
                                         r"silently: give both on one axis"):
        ms.unmix(nm_spectra, again)
    with pytest.raises(InputError, match=r"^bandwidth_nm: the spectra are on a wavenumber "
                                         r"axis"):
        ms.unmix(spectra, again, bandwidth_nm=2.0)


def test_resampling_is_linear_in_wavenumber():
    """A library on a coarse cm⁻¹ grid resampled onto a finer one: a straight line in ν̃
    stays straight (numpy.interp in ν̃ as the reference, seen)."""
    coarse = np.arange(6000.0, 3999.0, -40.0)
    table = ms.make_spectra((2.0 + 1e-3 * coarse)[None, :], 1e7 / coarse, ["line"])
    table = table.rename(sample="component").assign_attrs(axis="wavenumber_cm-1")
    library = ms.import_absorptivities(table, "L/(g*cm)")
    fine_nm = np.sort(1e7 / NU)
    resampled, outside = ms.library.resample_library(library, fine_nm)
    assert outside.size == 0
    np.testing.assert_allclose(resampled["absorptivity"].values[0], 2.0 + 1e-3 * 1e7 / fine_nm,
                               rtol=1e-12)


def test_derivative_on_native_grid_per_scipy():
    """On a cm⁻¹ axis the derivative is scipy's savgol_filter (seen) along the wavenumbers
    as measured, delta the cm⁻¹ step; the nm grid, uneven, is refused with the hint."""
    _, absorbance, _ = _mixtures(3, 5)
    wl = np.sort(1e7 / NU)
    deriv = check_derivative(11, 2, wl, "wavenumber_cm-1")
    assert deriv == {"order": 1, "window_points": 11, "polyorder": 2,
                     "axis": "wavenumber_cm-1", "step_cm-1": pytest.approx(8.0, rel=1e-12)}
    # columns along rising λ, falling ν̃: scipy's reference runs along rising ν̃
    expected = savgol_filter(absorbance[:, ::-1], 11, 2, deriv=1, delta=8.0,
                             mode="interp")[:, ::-1]
    np.testing.assert_allclose(preprocess(absorbance, deriv), expected, rtol=1e-9, atol=1e-15)
    with pytest.raises(InputError, match=r"not evenly spaced \(steps 2\.22\d+-4\.99\d+ nm\); a "
                                         r"Savitzky–Golay derivative needs an even grid; they "
                                         r"are even in wavenumber: give the axis in cm-1"):
        check_derivative(11, 2, wl, "nm")


def test_calibrate_derivative_and_predict_in_cm1(tmp_path, cli):
    """cm⁻¹ data calibrate with a derivative and predict without renaming columns (the
    acceptance), through the command line; the model records the axis; predictions of new
    synthetic mixtures on a finer cm⁻¹ grid lie within 4 u of the truth; nm spectra are
    refused with the model (one line, exit 2)."""
    conc, absorbance, names = _mixtures(30, 6)
    spectra = _write_wide(tmp_path / "cal.csv", NU, "Wavenumber (cm-1)", absorbance, names)
    ref = _reference(conc, names, tmp_path / "ref.csv")
    cli.ok("calibrate", spectra, "--reference", ref, "--out", tmp_path / "m.nc",
           "--derivative", "11")
    model = ms.read_model(tmp_path / "m.nc")
    assert model.attrs["axis"] == "wavenumber_cm-1"
    assert '"axis": "wavenumber_cm-1", "step_cm-1": 8.0' in model.attrs["preprocessing"]
    fine = np.arange(6000.0, 3999.0, -4.0)
    truth, new, new_names = _mixtures(6, 7, fine)
    result = ms.predict(ms.read_spectra(_write_wide(tmp_path / "new.csv", fine, "1/cm", new,
                                                    new_names)), model)
    assert result.attrs["axis"] == "wavenumber_cm-1"
    assert result["rms_residual"].attrs["units"] == "AU·cm"
    err = result["concentration"].values - truth
    assert np.all(np.abs(err) < 4 * result["std_uncertainty"].values)
    cli.ok("unmix", tmp_path / "m.nc", tmp_path / "new.csv", "--out", tmp_path / "r.csv")
    nm_file = _write_wide(tmp_path / "nm.csv", 1e7 / fine, "wavelength_nm", new, new_names)
    assert_cli_error(cli("unmix", tmp_path / "m.nc", nm_file, "--out", tmp_path / "r2.csv"),
                     "spectra: given as wavelength in nm, but model as wavenumber in cm⁻¹",
                     literal=True, must_not_exist=[tmp_path / "r2.csv"])


def test_same_model_from_nm_and_cm1_without_derivative(tmp_path):
    """Without a derivative the axis changes nothing but the record: the same predictions
    to rounding from the data written in nm and in cm⁻¹."""
    conc, absorbance, names = _mixtures(20, 8)
    ref = pd.read_csv(_reference(conc, names, tmp_path / "ref.csv"))
    out = {}
    for axis, values, head in (("nm", 1e7 / NU, "wavelength_nm"), ("cm", NU, "cm-1")):
        spectra = ms.read_spectra(_write_wide(tmp_path / f"{axis}.csv", values, head,
                                              absorbance, names))
        model = ms.calibrate(spectra, ref, latent=3)
        out[axis] = ms.predict(spectra, model)["concentration"].values
    np.testing.assert_allclose(out["cm"], out["nm"], rtol=1e-9)


def test_cli_library_import_and_unmix_in_cm1(tmp_path, cli):
    """`library import` of a cm⁻¹ table and `unmix` of cm⁻¹ spectra through the command
    line: concentrations are numpy.linalg.lstsq's (seen); nm spectra with that library are
    refused with one line naming both axes, nothing written."""
    conc, absorbance, names = _mixtures(3, 9, noise=0.0)
    table = _library_table(tmp_path, NU, "Wavenumber (cm-1)", "lib.csv")
    cli.ok("library", "import", table, "--unit", "L/(g*cm)", "--out", tmp_path / "lib.nc")
    spectra = _write_wide(tmp_path / "s.csv", NU, "cm-1", absorbance, names)
    cli.ok("unmix", tmp_path / "lib.nc", spectra, "--unit", "g/L", "--out", tmp_path / "r.csv")
    rows = ms.read_results(tmp_path / "r.csv").table  # after its '#' provenance lines
    got = rows.pivot(index="sample", columns="component", values="concentration")
    # noise-free data: lstsq returns conc; the results CSV holds every digit
    lstsq = np.linalg.lstsq(_eps(NU).T, absorbance.T, rcond=None)[0].T
    np.testing.assert_allclose(lstsq, conc, rtol=1e-9)
    np.testing.assert_allclose(got.loc[names, COMPONENTS].values, lstsq, rtol=5e-6)
    nm_file = _write_wide(tmp_path / "nm.csv", 1e7 / NU, "wavelength_nm", absorbance, names)
    assert_cli_error(cli("unmix", tmp_path / "lib.nc", nm_file, "--out", tmp_path / "r2.csv"),
                     "spectra: given as wavelength in nm, but library as wavenumber in cm⁻¹",
                     literal=True, must_not_exist=[tmp_path / "r2.csv"])


def test_big_file_fast_path_reads_cm1(tmp_path):
    """A wide cm⁻¹ file above the fast reader's size threshold reads to the same numbers
    and axis as written (synthetic values)."""
    from mixsolve.io import fast_read

    nu = np.arange(12000.0, 4000.0, -4.0)
    values = np.random.default_rng(10).uniform(0.0, 1.0, (30, nu.size))
    path = _write_wide(tmp_path / "big.csv", nu, "wavenumber_cm-1", values,
                       [f"s{i}" for i in range(30)])
    assert path.stat().st_size > fast_read.FAST_PATH_MIN_BYTES
    da = ms.read_spectra(path)
    assert da.attrs["axis"] == "wavenumber_cm-1"
    np.testing.assert_allclose(da["wavelength"].values, 1e7 / nu, rtol=1e-15)
    np.testing.assert_array_equal(da.values, values)
