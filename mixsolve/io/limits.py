"""Size limits of inputs read into memory, and how sizes are written in messages.

docs/errors.md, "Size limits", states them for users.
"""

from __future__ import annotations

#: Largest input read whole into memory (bytes): the careful text reader, an XLSX
#: workbook's XML, a library or model file's arrays, a cube's coordinates.
CAREFUL_MAX_BYTES = 200_000_000
#: Largest text table read at all (bytes), by the fast reader; bigger inputs belong in
#: netCDF or Zarr.
MAX_TEXT_BYTES = 2_000_000_000


def size_text(size: float) -> str:
    """A number of bytes as short text in decimal units: ``"1.4 GB"``, ``"200 MB"``."""
    for unit, scale in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if size >= scale:
            return f"{size / scale:.3g} {unit}"
    return f"{size:.0f} bytes"
