"""Published fixed-wavelength equations: reading, checking and applying them.

Simulations are synthetic and seeded: spectra made from the absorptivities a set implies
(or from the invented demo pigments of reference_spectra_demo/make_demo_data.py) must give
back the concentrations through apply_equations, with the stated u.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from mixsolve.reference_spectra_demo.make_demo_data import BANDS, absorptivity

import mixsolve as ms
from mixsolve.equations.model import FROM_MEMORY, EquationSet, Term, implied_absorptivity
from mixsolve.errors import InputError
from mixsolve.flags import run_notes_of
from mixsolve.io.equations_io import SHIPPED

DEMO = Path(__file__).resolve().parents[1] / "reference_spectra_demo"
SINGLE_READ = ["porra1989", "lichtenthaler1987", "jeffrey_humphrey1975"]


def _spectra_from(eq: EquationSet, conc: np.ndarray, *, baseline: float = 0.0,
                  path: float = 1.0) -> xr.DataArray:
    """Spectra holding, at each reading of ``eq``, the absorbance K·c·b (synthetic)."""
    k = implied_absorptivity(eq)
    wl = sorted({nm for _, nm in eq.readings} | ({eq.reference_nm} if eq.reference_nm else set()))
    a = np.full((conc.shape[0], len(wl)), baseline)
    for j, (_, nm) in enumerate(eq.readings):
        a[:, wl.index(nm)] += conc[:, : k.shape[1]] @ k[j] * path
    return ms.make_spectra(a, wl)


@pytest.mark.parametrize("name", list(SHIPPED))
def test_shipped_sets_state_source_and_status(name: str) -> None:
    """Every shipped set has a full citation and the from-memory status (CHECKS.md)."""
    eq = ms.read_equations(name)
    assert eq.source == f"shipped:{name}"
    assert eq.status == FROM_MEMORY
    assert len(eq.citation) > 40 and eq.citation in eq.status_text


@pytest.mark.parametrize("name", SINGLE_READ)
def test_apply_gives_back_concentrations(name: str, rng: np.random.Generator) -> None:
    """Seeded simulation: noise-free spectra from the implied absorptivities (with a
    flat baseline where the set subtracts a reference) give the concentrations back."""
    eq = ms.read_equations(name)
    conc = rng.uniform(0.5, 8.0, size=(12, len(eq.primary)))
    base = 0.02 if eq.reference_nm else 0.0
    result = ms.apply_equations(_spectra_from(eq, conc, baseline=base), eq)
    got = result["concentration"].sel(component=eq.primary).values
    np.testing.assert_allclose(got, conc, rtol=1e-9, atol=1e-9)
    assert result.attrs["equations_status"] == FROM_MEMORY


def test_pathlength_scales_results(rng: np.random.Generator) -> None:
    """A 0.5 cm cell: the same concentrations absorb half; results scale by 1/0.5."""
    eq = ms.read_equations("porra1989")
    conc = rng.uniform(1.0, 5.0, size=(5, 2))
    spectra = _spectra_from(eq, conc, path=0.5)
    result = ms.apply_equations(spectra, eq, pathlength_cm=0.5)
    np.testing.assert_allclose(result["concentration"].sel(component=["chl_a", "chl_b"]),
                               conc, rtol=1e-9)
    total = result["concentration"].sel(component="chl_a_plus_b").values
    np.testing.assert_allclose(total, conc.sum(axis=1), rtol=1e-9)


def test_stated_u_matches_the_scatter_of_repeats(rng: np.random.Generator) -> None:
    """Seeded Monte Carlo: the SD of results over 4000 noisy repeats matches the reported
    u within 5 % (the noise drawn from the noise model at each reading)."""
    eq = ms.read_equations("jeffrey_humphrey1975")
    model = ms.NoiseModel(k0=2e-4, k1=5e-4, k2=3e-4)
    clean = _spectra_from(eq, np.array([[6.0, 3.0, 2.0]]), baseline=0.01)
    a = clean.values[0]
    noisy = a + rng.normal(size=(4000, a.size)) * model.sigma_absorbance(a)
    spectra = ms.make_spectra(noisy, clean["wavelength"].values)
    result = ms.apply_equations(spectra, eq, noise=model)
    sd = result["concentration"].std("sample", ddof=1).values
    u = result["std_uncertainty"].isel(sample=0).values  # at the clean readings: near each
    np.testing.assert_allclose(sd, u, rtol=0.05)


def test_coefficient_u_propagates_like_finite_differences() -> None:
    """u from a stated coefficient u equals |∂c/∂m|·u(m), ∂c/∂m by central differences
    of the results (numpy arithmetic, independent of the closed form used)."""
    def make(m: float, u: float = 0.0) -> EquationSet:
        return EquationSet(name="t", unit="mg/L", terms=(
            Term("x", 10.0, 500.0), Term("x", -2.0, 600.0),
            Term("y", m, 600.0, u_coefficient=u), Term("total", 1.0, uses="x"),
            Term("total", 1.0, uses="y")))
    spectra = ms.make_spectra(np.array([[0.4, 0.7]]), [500.0, 600.0])
    base = ms.apply_equations(spectra, make(20.0, 0.3), noise=1e-9)
    h = 1e-4
    up = ms.apply_equations(spectra, make(20.0 + h), noise=1e-9)["concentration"]
    down = ms.apply_equations(spectra, make(20.0 - h), noise=1e-9)["concentration"]
    slope = ((up - down) / (2 * h)).values[0]
    np.testing.assert_allclose(base["u_coefficients"].values[0], np.abs(slope) * 0.3,
                               rtol=1e-6, atol=1e-12)


def test_range_and_negative_flags() -> None:
    """Peak reading above the range, all readings below it, a negative result."""
    eq = ms.read_equations("porra1989")
    spectra = ms.make_spectra(np.array([[2.5, 0.3], [0.05, 0.02], [0.1, 0.6]]),
                              [646.6, 663.6])
    flags = ms.apply_equations(spectra, eq)["flags"].values
    assert "above_range" in flags[0].split(";")
    assert "below_range" in flags[1].split(";")
    assert "negative:chl_b" in flags[2].split(";")  # 20.31·0.1 − 4.91·0.6 < 0


def test_saturated_reading_flagged() -> None:
    """A reading at the noise model's ceiling −log10(s/(1+s)) is a saturated reading."""
    eq = ms.read_equations("porra1989")
    model = ms.NoiseModel(k0=1e-4, stray=1e-3)
    top = model.saturation_absorbance()
    spectra = ms.make_spectra(np.array([[top, 0.5]]), [646.6, 663.6])
    flags = ms.apply_equations(spectra, eq, noise=model)["flags"].values[0]
    assert "saturated_reading" in flags.split(";")


def _demo_library(step: float = 1.0) -> xr.Dataset:
    """A library of the invented demo pigments' true absorptivities (synthetic)."""
    wl = np.arange(380.0, 761.0, step)
    table = pd.DataFrame({n: absorptivity(n, wl) for n in BANDS}, index=wl)
    return ms.import_absorptivities(table, "L/(g*cm)", bandwidth_nm=0.5)


def test_check_against_the_true_library() -> None:
    """The demo set is the rounded inverse of the invented pigments' absorptivities: its
    implied absorptivities agree with a library of those to the rounding (4 significant
    figures, well under 1 % where a value is not near zero), and so does the bias."""
    check = ms.check_equations(ms.read_equations(DEMO / "equations_demo.csv"),
                               library=_demo_library())
    implied, measured = np.array(check.implied), np.array(check.measured)
    big = measured > 1.0
    np.testing.assert_allclose(implied[big], measured[big], rtol=0.01)
    assert np.max(np.abs(check.library_bias)) < 0.01
    assert check.shift_bias is not None and check.bandwidth_bias is not None


def test_shift_sensitivity_matches_a_shifted_library() -> None:
    """The predicted change per 0.5 nm agrees with applying the set to spectra made from
    the library shifted by 0.5 nm (first order: within 5 % of the largest entry)."""
    eq = ms.read_equations(DEMO / "equations_demo.csv")
    lib = _demo_library(step=0.1)
    check = ms.check_equations(eq, library=lib, shift_nm=0.5)
    comps = list(BANDS)
    wl = np.array([452.0, 522.0, 612.0, 750.0])
    rows = []
    for j in range(3):  # one unit (mg/L) of each component, read 0.5 nm high
        c = np.zeros(3)
        c[j] = 1.0
        rows.append(sum(c[i] * absorptivity(n, wl + 0.5) for i, n in enumerate(comps)) / 1000)
        rows.append(sum(c[i] * absorptivity(n, wl) for i, n in enumerate(comps)) / 1000)
    out = ms.apply_equations(ms.make_spectra(np.array(rows), wl), eq)["concentration"].values
    moved = (out[0::2] - out[1::2]).T  # rows results, columns the unit component
    predicted = np.array(check.shift_bias)
    assert np.max(np.abs(moved - predicted)) < 0.05 * np.max(np.abs(predicted))


def test_apply_beside_library_agrees_on_clean_spectra() -> None:
    """Noise-free spectra from the library: the full-spectrum fit returns the truth and the
    rounded equations nearly so; no disagreement note at a realistic noise."""
    lib = _demo_library(step=2.0)
    truth = np.array([[6.0, 4.0, 3.0], [1.0, 9.0, 5.0]])
    wl = lib["wavelength"].values
    eps = lib["absorptivity"].transpose("component", "wavelength").values / 1000
    spectra = ms.make_spectra(truth @ eps + 0.001, wl)
    eq = ms.read_equations(DEMO / "equations_demo.csv")
    result = ms.apply_equations(spectra, eq, library=lib, noise=0.002)
    np.testing.assert_allclose(result["full_concentration"].values, truth, atol=0.02)
    np.testing.assert_allclose(result["concentration"].values, truth, rtol=0.01)
    assert "equations_disagree" not in [n.code for n in run_notes_of(result.attrs)]


def test_disagreement_note_when_an_absorber_is_missing(rng: np.random.Generator) -> None:
    """An absorber the equations do not know (teal left out of a two-pigment set) biases
    the published results; the full-spectrum fit with the whole library does not, and a
    run note says they disagree."""
    lib = _demo_library(step=2.0)
    wl = lib["wavelength"].values
    eps = lib["absorptivity"].transpose("component", "wavelength").values / 1000
    k = eps[:2][:, np.isin(wl, [452.0, 522.0])].T  # amber, rose at 452, 522 (AU per mg/L)
    g = np.linalg.inv(k)
    eq = EquationSet(name="two", unit="mg/L", terms=tuple(
        Term(c, float(g[i, j]), nm) for i, c in enumerate(["amber", "rose"])
        for j, nm in enumerate([452.0, 522.0])))
    truth = np.array([[5.0, 4.0, 6.0]] * 4)
    noisy = truth @ eps + rng.normal(scale=0.002, size=(4, wl.size))
    result = ms.apply_equations(ms.make_spectra(noisy, wl), eq, library=lib, noise=0.002)
    assert "equations_disagree" in [n.code for n in run_notes_of(result.attrs)]


def test_acidification_set_refused_by_apply() -> None:
    """lorenzen1967 needs two reads of each extract: apply says so."""
    eq = ms.read_equations("lorenzen1967")
    spectra = ms.make_spectra(np.array([[0.5, 0.5, 0.0]]), [664.0, 665.0, 750.0])
    with pytest.raises(InputError, match="acidification set needs two reads"):
        ms.apply_equations(spectra, eq)


def test_check_without_library_says_what_is_missing() -> None:
    """Without a library, the check states that shift and bandwidth need spectra."""
    check = ms.check_equations(ms.read_equations("porra1989"))
    assert check.shift_bias is None and check.bandwidth_bias is None
    assert any("no library given" in n for n in check.notes)
    assert check.to_dict()["library_bias"] is None


def test_spectra_must_cover_the_wavelengths() -> None:
    eq = ms.read_equations("jeffrey_humphrey1975")
    spectra = ms.make_spectra(np.ones((1, 3)) * 0.5, [630.0, 647.0, 664.0])
    with pytest.raises(InputError, match="750 nm, outside the spectra's 630-664 nm"):
        ms.apply_equations(spectra, eq)


BAD_FILES = [
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n# colour: red\n"
     "component,coefficient,wavelength_nm\na,1,500\n", r"line 5: unknown key 'colour'"),
    ("# name: x\n# citation: c\n# unit: mg/L\ncomponent,coefficient,wavelength_nm\na,1,500\n",
     r"missing status; give each as a line '# status: \.\.\.'"),
    ("# name: x\n# citation: c\n# status: guessed\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm\na,1,500\n", r"status 'guessed' is neither"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm,uses\na,1,500,b\nb,1,600,\n",
     r"line 6: give either wavelength_nm or uses, not both"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm\na,one,500\n",
     r"line 6, column 2 \('coefficient'\): 'one' is not a number"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm,uses\na,1,,b\nb,1,,a\n", r"in a cycle"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm,uses\na,1,,zz\n", r"uses 'zz', which has no"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: metres\n"
     "component,coefficient,wavelength_nm\na,1,500\n", r"is not a concentration"),
    ("# name: x\n# citation: c\n# status: seen\n# unit: mg/L\n"
     "component,coefficient,wavelength_nm\na,1,5\n", r"wavelength_nm 5 is outside 100-3000"),
]


@pytest.mark.parametrize(("text", "message"), BAD_FILES)
def test_bad_equations_files(tmp_path: Path, text: str, message: str) -> None:
    """One-line errors naming the file, the line, the value and the fix."""
    path = tmp_path / "eq.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=message) as info:
        ms.read_equations(path)
    assert "eq.csv" in str(info.value) and "\n" not in str(info.value)


def test_unknown_name_lists_shipped_sets() -> None:
    with pytest.raises(InputError, match="no such file, nor a shipped set; shipped sets are "
                       "porra1989, lichtenthaler1987"):
        ms.read_equations("porra1988")
