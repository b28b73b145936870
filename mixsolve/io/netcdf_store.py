"""netCDF-4 files of mixsolve (h5netcdf engine): written atomically, read with a clear error.

Libraries and PLS models are both Datasets marked by a ``mixsolve_kind`` attribute; this
module holds what they share, and ``library_store``/``model_store`` add their checks.
Both are small and read whole into memory, so a file whose header declares more than
:data:`mixsolve.io.limits.CAREFUL_MAX_BYTES` of arrays is refused before anything is
read (:func:`declared_variables`).
"""

from __future__ import annotations

import math
import os
import sys
import warnings
from collections.abc import Iterator
from contextlib import contextmanager, nullcontext
from pathlib import Path
from typing import Any, NamedTuple

import xarray as xr

from mixsolve.errors import FileFormatError
from mixsolve.io import limits
from mixsolve.io.atomic import atomic_path
from mixsolve.io.limits import size_text

ENGINE = "h5netcdf"
#: ``mixsolve_kind`` of the files mixsolve writes, and what each is called in messages.
KINDS = {"mixsolve-library": ("a library", "`mixsolve library import` or `library build`"),
         "mixsolve-pls-model": ("a PLS model", "`mixsolve calibrate`")}
_UNREADABLE = (OSError, ValueError, KeyError, TypeError)


class Declared(NamedTuple):
    """One array of a file as its header declares it, before any value is read."""

    dims: tuple[str, ...]
    shape: tuple[int, ...]
    nbytes: int

    def describe(self, name: str) -> str:
        """``"absorptivity: component 2 × wavelength 2000000000"``, or for a coordinate
        ``"wavelength: 2000000000 values"``."""
        if self.dims == (name,):
            return f"{name}: {self.shape[0]} values"
        return f"{name}: " + " × ".join(f"{d} {n}" for d, n in zip(self.dims, self.shape,
                                                                     strict=False))


def write_netcdf(ds: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Write ``ds`` to ``path`` (netCDF-4). A failed write leaves no file behind.

    The file is built in memory (:func:`netcdf_image`) and only then written, so a full
    disk or a file-size limit is a plain failed write.

    Raises
    ------
    OutputError
        The folder is missing or not writable, or writing fails (disk full, file-size
        limit, permissions); nothing is left and an earlier file of that name is unchanged.
    """
    image = netcdf_image(ds)
    with atomic_path(path) as tmp:
        tmp.write_bytes(image)
    return Path(path)


def netcdf_image(ds: xr.Dataset) -> memoryview:
    """The bytes of ``ds`` as a netCDF-4 file, built in memory in this thread.

    HDF5 writing straight to disk cannot be stopped cleanly when a write fails (a full
    disk, ``ulimit -f``): it reports errors while freeing its objects and then crashes
    the process. Building the file in memory first leaves the disk to one plain write,
    whose failure is an ordinary :class:`OSError`. Meant for numpy-backed data of up to
    about :data:`~mixsolve.io.limits.CAREFUL_MAX_BYTES`: the image is held whole.
    """
    dask = sys.modules.get("dask")
    # With a dask.distributed Client active, xarray takes a cluster-wide write lock named
    # after the target, which an in-memory file cannot have (distributed refuses the
    # lock); this file is built here, in one thread, so dask's local scheduler is right.
    local = dask.config.set(scheduler="synchronous") if dask is not None else nullcontext()
    with local:
        return ds.to_netcdf(engine=ENGINE, invalid_netcdf=False)  # no path: the bytes


@contextmanager
def _quiet() -> Iterator[None]:
    with warnings.catch_warnings():  # h5netcdf warns about foreign HDF5 layouts
        warnings.simplefilter("ignore")
        yield


def declared_variables(path: str | os.PathLike[str]) -> dict[str, Declared]:
    """The arrays of a netCDF-4 file's root group as its header declares them.

    Only metadata are read: a variable's declared shape is what reading it would allocate
    (``nbytes`` = number of values × item size in bytes), however small the file is.

    Raises
    ------
    OSError, ValueError
        Not a netCDF-4 (HDF5) file.
    """
    import h5netcdf

    with _quiet(), h5netcdf.File(path, "r") as f:
        return {str(name): Declared(tuple(map(str, v.dimensions)), tuple(map(int, v.shape)),
                                    math.prod(map(int, v.shape)) * int(v.dtype.itemsize))
                for name, v in f.variables.items()}


def refuse_oversized(declared: dict[str, Declared], file: str, what: str, limit_text: str,
                     fix: str) -> None:
    """Refuse arrays that together declare more than ``CAREFUL_MAX_BYTES``, biggest named.

    Raises
    ------
    FileFormatError
        ``"<file>: its <what> declare 32 GB (<biggest>), more than the 200 MB <limit_text>;
        <fix>"``.
    """
    total = sum(d.nbytes for d in declared.values())
    limit = limits.CAREFUL_MAX_BYTES
    if total > limit:
        name, biggest = max(declared.items(), key=lambda item: item[1].nbytes)
        raise FileFormatError(
            f"{file}: its {what} declare {size_text(total)} ({biggest.describe(name)}), more "
            f"than the {size_text(limit)} {limit_text}; {fix}")


def _open(p: Path) -> xr.Dataset:
    with _quiet(), xr.open_dataset(p, engine=ENGINE) as ds:
        return ds.load()


def open_netcdf(path: str | os.PathLike[str], *,
                made_by: str = "`mixsolve library import` or `library build`",
                noun: str = "a library") -> xr.Dataset:
    """Load a whole netCDF file into memory and close it, or say why it cannot be read.

    ``noun`` and ``made_by`` complete the message for a file that is not netCDF
    ("...; a library is written by `mixsolve library import` or `library build`").

    Raises
    ------
    FileFormatError
        Missing, a folder, not netCDF-4, or declaring more than
        :data:`~mixsolve.io.limits.CAREFUL_MAX_BYTES` of arrays (checked on the header,
        before anything is allocated).
    """
    p = Path(path)
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    if p.is_dir():
        raise FileFormatError(f"{path}: is a folder, not a netCDF file")
    unreadable = (f"{p.name}: not a readable netCDF file ({{}}); {noun} is written by "
                  f"{made_by}")
    try:
        declared = declared_variables(p)
    except _UNREADABLE as exc:
        raise FileFormatError(unreadable.format(exc.__class__.__name__)) from None
    refuse_oversized(declared, p.name, "arrays", f"{noun} file may hold",
                     f"{noun} is written by {made_by}")
    try:
        return _open(p)
    except _UNREADABLE as exc:
        raise FileFormatError(unreadable.format(exc.__class__.__name__)) from None


def open_kind(path: str | os.PathLike[str], kind: str, *, noun: str, made_by: str,
              label: str) -> xr.Dataset:
    """Open a mixsolve netCDF file and check its ``mixsolve_kind`` is ``kind``.

    ``label`` names the kind in the error ("not a mixsolve <label> (...)"); a file of
    another kind mixsolve writes gets the fix as well ("...; <noun> is written by ...").
    """
    found = file_kind(path)  # attributes only: another kind is refused before loading
    if found is not None and found != kind:
        raise FileFormatError(_wrong_kind(Path(path).name, found, label, noun, made_by))
    ds = open_netcdf(path, made_by=made_by, noun=noun)
    found = _text(ds.attrs.get("mixsolve_kind"))
    if found != kind:
        raise FileFormatError(_wrong_kind(Path(path).name, found, label, noun, made_by))
    return ds


def _wrong_kind(name: str, found: str | None, label: str, noun: str, made_by: str) -> str:
    if found is None:
        return f"{name}: not a mixsolve {label} (not written by mixsolve)"
    text = f"{name}: not a mixsolve {label} (a {found!r} file)"
    if found in KINDS:
        text += f"; {noun} is written by {made_by}"
    return text


def _text(value: Any) -> str | None:
    return None if value is None else str(value)


def file_kind(path: str | os.PathLike[str]) -> str | None:
    """The ``mixsolve_kind`` attribute of a netCDF file, or None if it has none or is unreadable.

    Reads the file's attributes only, not its arrays.
    """
    import h5netcdf

    try:
        with _quiet(), h5netcdf.File(path, "r") as f:
            return _text(f.attrs.get("mixsolve_kind"))
    except _UNREADABLE:
        return None
