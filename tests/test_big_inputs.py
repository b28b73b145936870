"""Big spectra files are read on the fast path within bounded memory (issue: big inputs)."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import numpy as np
import pytest

import mixsolve as ms
from mixsolve.errors import InputError
from mixsolve.io import fast_read


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


def test_wide_file_with_1e5_columns_reads_on_the_fast_path(tmp_path, rng):
    """10⁵ sample columns: values round-trip exactly and the fast path is taken."""
    path = tmp_path / "wide.csv"
    values = _write_wide(path, 100_000, 12, rng)
    assert path.stat().st_size > fast_read.FAST_PATH_MIN_BYTES
    da = ms.read_spectra(path)
    assert da.shape == (100_000, 12)
    np.testing.assert_array_equal(da.values, values.T)
    assert da.attrs["layout"] == "wide"


def test_long_file_with_1e6_rows_reads_within_bounded_memory(tmp_path):
    """10⁶ long rows read in a subprocess whose peak resident memory stays under 1 GB."""
    path = tmp_path / "long.csv"
    _write_long(path, 2000, 500, np.random.default_rng(7))
    script = textwrap.dedent(f"""
        import resource, mixsolve as ms
        da = ms.read_spectra({str(path)!r})
        assert da.shape == (2000, 500), da.shape
        print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
    """)
    out = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                         check=True)
    peak_kb = int(out.stdout.split()[-1])
    assert peak_kb < 1_000_000, f"peak RSS {peak_kb / 1024:.0f} MB"


def test_big_file_with_a_bad_cell_names_its_line(tmp_path, rng):
    """A problem in a big file is still reported with its line and value."""
    path = tmp_path / "long.csv"
    _write_long(path, 300, 500, rng)
    lines = path.read_text().splitlines()
    lines[12345] = "s24,1000,oops"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"long\.csv, line 12346, column 3 .*'oops' is not a"):
        ms.read_spectra(path)


def test_big_file_with_duplicate_wavelength_is_refused(tmp_path, rng):
    """Duplicates fall back to the careful reader, which names both lines."""
    path = tmp_path / "wide.csv"
    _write_wide(path, 20_000, 6, rng)
    lines = path.read_text().splitlines()
    lines[3] = "400" + lines[3][lines[3].index(","):]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"wavelength 400 nm appears twice"):
        ms.read_spectra(path)


def test_big_file_with_short_row_is_refused_not_padded(tmp_path, rng):
    """pandas would pad a short row with NaN; the fast path must not accept that."""
    path = tmp_path / "wide.csv"
    _write_wide(path, 20_000, 6, rng)
    lines = path.read_text().splitlines()
    lines[2] = lines[2].rsplit(",", 1)[0]
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match=r"line 3: 20000 cells, but the header has 20001"):
        ms.read_spectra(path)
