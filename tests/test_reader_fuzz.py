"""Reader fuzzing: generated table text never raises anything but mixsolve's own errors.

Text is built from plausible pieces (headers, numbers with either decimal mark, any of the
three separators, junk lines, unicode, quotes, truncation) and also from arbitrary
characters; every reader must either return a result or raise MixsolveError.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import pandas as pd
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from mixsolve.errors import MixsolveError
from mixsolve.io.spectra_io import read_absorptivity_table, read_spectra
from mixsolve.io.standards_io import read_standards

SETTINGS = settings(max_examples=150, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])

numbers = st.one_of(
    st.floats(-5, 5, allow_nan=False).map(lambda v: f"{v:.4f}"),
    st.floats(-5, 5, allow_nan=False).map(lambda v: f"{v:.3f}".replace(".", ",")),
    st.integers(300, 900).map(str),
    st.sampled_from(["", "NaN", "inf", "-inf", "OVER", "1e400", "--", "0x10", "1_000", "nan"]),
)
words = st.one_of(
    st.sampled_from(["wavelength_nm", "wavelength", "sample", "absorbance", "component",
                     "concentration", "unit", "pathlength_cm", "mg/L", "µg/mL", "é", "𝛆"]),
    st.text(min_size=0, max_size=8),
)
cells = st.one_of(numbers, words)


@st.composite
def tables(draw: st.DrawFn) -> str:
    """Plausible-looking but possibly broken table text."""
    sep = draw(st.sampled_from([",", ";", "\t", " ", "|"]))
    width = draw(st.integers(1, 6))
    header = draw(st.lists(words, min_size=width, max_size=width))
    rows = draw(st.lists(st.lists(cells, min_size=0, max_size=width + 2), max_size=12))
    junk = draw(st.lists(st.text(max_size=20), max_size=3))
    lines = [sep.join(header), *(sep.join(r) for r in rows)]
    for j in junk:
        lines.insert(draw(st.integers(0, len(lines))), j)
    text = draw(st.sampled_from(["\n", "\r\n", "\r"])).join(lines)
    if draw(st.booleans()):
        text = text[: draw(st.integers(0, len(text)))]
    if draw(st.booleans()):
        text = "\ufeff" + text
    return text


def _check(reader, data: bytes, expected: type = xr.DataArray) -> None:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fuzz.csv"
        path.write_bytes(data)
        try:
            out = reader(path)
        except MixsolveError:
            return
        assert isinstance(out, expected)


@SETTINGS
@given(tables())
def test_read_spectra_on_generated_tables(text):
    """Plausible tables: a DataArray or a MixsolveError, nothing else."""
    _check(read_spectra, text.encode("utf-8"))


@SETTINGS
@given(tables())
def test_read_absorptivity_table_on_generated_tables(text):
    """Same for the absorptivity-table reader."""
    _check(read_absorptivity_table, text.encode("utf-8"))


@SETTINGS
@given(tables())
def test_read_standards_on_generated_tables(text):
    """Same for the standards-sheet reader."""
    _check(read_standards, text.encode("utf-8"), pd.DataFrame)


@settings(max_examples=150, deadline=None)
@given(st.binary(max_size=300))
def test_read_spectra_on_arbitrary_bytes(data):
    """Arbitrary bytes (binary, bad UTF-8, zip-like headers) never crash the reader."""
    _check(read_spectra, data)


@settings(max_examples=60, deadline=None)
@given(st.binary(max_size=200))
def test_read_spectra_on_fake_xlsx(data):
    """Bytes that start like a zip archive are refused as damaged workbooks, cleanly."""
    _check(read_spectra, b"PK\x03\x04" + data)


jcamp_data = st.text(alphabet="0123456789.,;+- ?@ABCDEFGHIabcdefghi%JKLMNOPQRjklmnopqrSTUVWXYZs$E",
                     max_size=30)
jcamp_records = st.sampled_from([
    "##TITLE=t", "##TITLE=", "##JCAMP-DX=4.24", "##DATA TYPE=LINK", "##XUNITS=NANOMETERS",
    "##XUNITS=1/CM", "##YUNITS=ABSORBANCE", "##YUNITS=TRANSMITTANCE", "##XFACTOR=1",
    "##YFACTOR=0.001", "##YFACTOR=0", "##FIRSTX=400", "##LASTX=410", "##LASTX=400",
    "##NPOINTS=2", "##NPOINTS=1", "##NPOINTS=0", "##NPOINTS=x", "##XYDATA=(X++(Y..Y))",
    "##XYPOINTS=(XY..XY)", "##END=", "$$ comment", "##=", "##"])


@SETTINGS
@given(st.lists(st.one_of(jcamp_records, jcamp_data), max_size=25))
def test_read_spectra_on_generated_jcamp(lines):
    """JCAMP-DX-like text (records and ASDF data lines): a DataArray or a MixsolveError."""
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fuzz.jdx"
        path.write_text("\n".join(lines), encoding="utf-8")
        try:
            out = read_spectra(path)
        except MixsolveError:
            return
        assert isinstance(out, xr.DataArray)


@SETTINGS
@given(st.lists(st.text(max_size=20), max_size=4), tables())
def test_read_spectra_after_generated_preamble(preamble, text):
    """Free-text preamble and '#' lines before a plausible table: same contract."""
    _check(read_spectra, ("\n".join(["# c", *preamble, text])).encode("utf-8"))
