"""Big spectra files are read on the fast path within bounded memory (issue: big inputs).

The fast path (mixsolve.io.fast_read) takes files of ``FAST_PATH_MIN_BYTES`` (1 MB) or
more; the ``fast_path`` fixture lowers that threshold so that files of some ten kB take the
same path, and records the files it parsed, so each test shows the path was taken. Only
the memory test runs at the real threshold, on a 1.6 MB file.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.io import fast_read, spectra_io

#: The lowered threshold (bytes) of the fast path in these tests.
SMALL_FAST_PATH_BYTES = 10_000


def _write_wide(path, n_samples: int, n_wl: int, rng: np.random.Generator) -> np.ndarray:
    values = rng.random((n_wl, n_samples)).round(4)
    wl = np.arange(400.0, 400.0 + n_wl)
    with open(path, "w") as fh:
        fh.write("wavelength_nm," + ",".join(f"s{i}" for i in range(n_samples)) + "\n")
        for w, row in zip(wl, values, strict=True):
            fh.write(f"{w:g}," + ",".join(f"{v:.4f}" for v in row) + "\n")
    return values


def _write_long(path, n_samples: int, n_wl: int, rng: np.random.Generator) -> np.ndarray:
    values = rng.random((n_samples, n_wl)).round(5)
    wl = np.arange(400.0, 400.0 + n_wl)
    with open(path, "w") as fh:
        fh.write("sample,wavelength_nm,absorbance\n")
        fh.writelines(f"s{i},{w:g},{values[i, j]:.5f}\n"
                      for i in range(n_samples) for j, w in enumerate(wl))
    return values


@pytest.fixture
def fast_path(monkeypatch: pytest.MonkeyPatch) -> list[Path]:
    """Files of ``SMALL_FAST_PATH_BYTES`` or more take the fast path; returns the list of
    files it parsed (filled as the test runs)."""
    monkeypatch.setattr(fast_read, "FAST_PATH_MIN_BYTES", SMALL_FAST_PATH_BYTES)
    parsed: list[Path] = []
    read_numeric = fast_read.read_numeric

    def recording(path: Path, *args: object, **kwargs: object) -> object:
        parsed.append(path)
        return read_numeric(path, *args, **kwargs)

    monkeypatch.setattr(fast_read, "read_numeric", recording)
    return parsed


def test_wide_file_with_2000_columns_reads_on_the_fast_path(tmp_path, rng, fast_path,
                                                           monkeypatch):
    """2000 sample columns: values round-trip exactly and the fast path is taken (the
    careful reader is never called)."""
    path = tmp_path / "wide.csv"
    values = _write_wide(path, 2_000, 12, rng)
    assert path.stat().st_size > fast_read.FAST_PATH_MIN_BYTES

    def careful(*args: object, **kwargs: object) -> None:
        raise AssertionError("the careful reader was called")

    monkeypatch.setattr(spectra_io, "read_table", careful)
    da = ms.read_spectra(path)
    assert fast_path == [path]
    assert da.shape == (2_000, 12)
    np.testing.assert_array_equal(da.values, values.T)
    assert da.attrs["layout"] == "wide"


def test_long_file_with_1e5_rows_reads_within_bounded_memory(tmp_path):
    """10⁵ long rows (1.6 MB) read in a subprocess whose peak resident memory grows by
    less than 20 times the file's size while reading it (about 7 times on the fast path;
    the careful reader needs over 40)."""
    path = tmp_path / "long.csv"
    _write_long(path, 200, 500, np.random.default_rng(7))
    assert path.stat().st_size > fast_read.FAST_PATH_MIN_BYTES
    warm_up = tmp_path / "warm_up.csv"
    warm_up.write_text("sample,wavelength_nm,absorbance\ns1,400,0.1\ns1,410,0.2\n")
    script = textwrap.dedent(f"""
        import resource, mixsolve as ms
        from mixsolve.io import fast_read
        threshold, fast_read.FAST_PATH_MIN_BYTES = fast_read.FAST_PATH_MIN_BYTES, 0
        ms.read_spectra({str(warm_up)!r})  # imports everything the fast path uses
        fast_read.FAST_PATH_MIN_BYTES = threshold
        before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        da = ms.read_spectra({str(path)!r})
        assert da.shape == (200, 500), da.shape
        print(before, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
    """)
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         check=True)
    before_kb, peak_kb = map(int, out.stdout.split()[-2:])
    growth = (peak_kb - before_kb) * 1024 / path.stat().st_size
    assert growth < 20, f"peak RSS grew by {growth:.1f} times the file's size"


def test_big_file_with_a_bad_cell_names_its_line(tmp_path, rng, fast_path):
    """A problem in a big file is still reported with its line and value."""
    path = tmp_path / "long.csv"
    _write_long(path, 30, 500, rng)
    lines = path.read_text().splitlines()
    lines[12345] = "s24,1000,oops"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"long\.csv, line 12346, column 3 .*'oops' is not a"):
        ms.read_spectra(path)
    assert fast_path == [path]


def test_big_file_with_duplicate_wavelength_is_refused(tmp_path, rng, fast_path):
    """Duplicates fall back to the careful reader, which names both lines."""
    path = tmp_path / "wide.csv"
    _write_wide(path, 500, 6, rng)
    lines = path.read_text().splitlines()
    lines[3] = "400" + lines[3][lines[3].index(","):]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"wavelength 400 nm appears twice"):
        ms.read_spectra(path)
    assert fast_path == [path]


def test_big_file_with_short_row_is_refused_not_padded(tmp_path, rng, fast_path):
    """pandas would pad a short row with NaN; the fast path must not accept that."""
    path = tmp_path / "wide.csv"
    _write_wide(path, 500, 6, rng)
    lines = path.read_text().splitlines()
    lines[2] = lines[2].rsplit(",", 1)[0]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"line 3: 500 cells, but the header has 501"):
        ms.read_spectra(path)
    assert fast_path == [path]
