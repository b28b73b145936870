"""Chunked spectra cubes and results on disk: Zarr stores (``.zarr``) and netCDF-4 (``.nc``).

A cube file holds one absorbance variable (AU) with a ``wavelength`` dimension whose
coordinate is in nm, plus any other dimensions: ``sample``, or ``y, x`` of an image cube,
or more. It is read lazily with dask, in chunks of whole spectra (the wavelength axis is
never split) of about ``CHUNK_BYTES`` of absorbance each (32 000 spectra of 250
wavelengths, 16 000 of 500), aligned to the chunks on disk.
Results are written lazily too, chunk by chunk, so a cube larger than memory streams
through; a failed write leaves nothing behind (see :func:`write_cube`: a ``.nc`` result of
up to ``NETCDF_IN_MEMORY_BYTES`` is built in memory first, as HDF5 streaming to disk
cannot recover from a failed write).
"""

from __future__ import annotations

import os
import shutil
import tempfile
import warnings
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import xarray as xr

from mixsolve.errors import FileFormatError, OutputError
from mixsolve.flags import VLEN_STR
from mixsolve.io import limits
from mixsolve.io.atomic import atomic_path
from mixsolve.io.outputs import stage
from mixsolve.spectra import (
    QUANTITIES,
    WAVELENGTH,
    Quantity,
    check_number,
    check_option,
    to_absorbance,
)

#: File name endings read and written as cubes (lower case).
CUBE_SUFFIXES = (".zarr", ".nc")
#: Bytes of absorbance per chunk when reading: a few tens of thousands of spectra. A chunk's
#: fit holds about 4 such arrays (spectra, fitted, residual, temporaries), and dask runs
#: one chunk per thread.
CHUNK_BYTES = 64_000_000
#: Name of the absorbance variable written by mixsolve and looked for first when reading.
ABSORBANCE = "absorbance"
NETCDF_ENGINE = "h5netcdf"
#: A ``.nc`` cube of up to this many bytes of arrays is computed and built in memory, then
#: written in one plain write (:func:`mixsolve.io.netcdf_store.netcdf_image`); a larger one
#: streams to disk chunk by chunk, where HDF5 cannot survive a write that fails midway.
NETCDF_IN_MEMORY_BYTES = limits.CAREFUL_MAX_BYTES
#: Room a streamed ``.nc`` cube needs beyond its arrays (bytes): HDF5's headers, about
#: 1 kB a variable, with a wide margin.
NETCDF_OVERHEAD_BYTES = 1_000_000


def is_cube_path(path: str | os.PathLike[str]) -> bool:
    """True if ``path`` ends in ``.zarr`` or ``.nc`` (any case)."""
    return Path(path).suffix.lower() in CUBE_SUFFIXES


def read_cube(path: str | os.PathLike[str], *, variable: str | None = None,
              chunk_spectra: int | None = None,
              quantity: Quantity | None = None) -> xr.DataArray:
    """Open a spectra cube lazily (dask-backed), chunked over spectra only.

    Parameters
    ----------
    path : path-like
        A Zarr store (``.zarr`` folder) or a netCDF-4 file (``.nc``).
    variable : str, optional
        The absorbance variable; default ``absorbance``, else the only data variable
        with a ``wavelength`` dimension.
    chunk_spectra : int, optional
        About how many spectra one chunk holds; default ``CHUNK_BYTES`` worth.
    quantity : {"absorbance", "transmittance", "percent_transmittance", "milliabsorbance"}, optional
        What the values are; converted to absorbance lazily, chunk by chunk
        (:func:`mixsolve.spectra.to_absorbance`). Omitted: absorbance, not checked (a
        lazy cube is not read to guess what it holds).

    Returns
    -------
    DataArray with dims (..., "wavelength")
        Absorbance (AU), dask-backed; wavelength (nm) in one chunk. ``attrs["source"]``
        is the file name.

    Raises
    ------
    FileFormatError
        Missing or unreadable file, no absorbance variable, or no wavelength coordinate.
    InputError
        ``chunk_spectra`` not a whole number ≥ 1.
    """
    if chunk_spectra is not None:
        chunk_spectra = int(check_number(chunk_spectra, "chunk_spectra", low=1, integer=True))
    if quantity is not None:
        check_option(quantity, QUANTITIES, "quantity")
    p = Path(path)
    if not p.exists():
        raise FileFormatError(f"{path}: file not found")
    ds = _open(p)
    name = _absorbance_name(ds, p, variable)
    da = ds[name]
    if WAVELENGTH not in da.coords:
        raise FileFormatError(f"{p.name}: variable {name!r} has a wavelength dimension but "
                              "no wavelength coordinate (nm)")
    disk = da.encoding.get("preferred_chunks") or {}
    if chunk_spectra is None:
        chunk_spectra = spectra_per_chunk(da.sizes[WAVELENGTH], da.dtype.itemsize)
    plan = chunk_plan(dict(da.sizes), chunk_spectra, disk)
    da = da.chunk(plan)
    da.attrs.setdefault("quantity", "absorbance")
    da.attrs["source"] = p.name
    return da if quantity is None else to_absorbance(da, quantity, p.name)


def _open(p: Path) -> xr.Dataset:
    _check_eager_size(p)
    try:
        if p.suffix.lower() == ".zarr":
            return xr.open_zarr(p, consolidated=None, chunks={})
        return xr.open_dataset(p, engine=NETCDF_ENGINE, chunks={})
    except (OSError, ValueError, KeyError, TypeError) as exc:
        kind = "Zarr store" if p.suffix.lower() == ".zarr" else "netCDF file"
        raise FileFormatError(f"{p.name}: not a readable {kind} ({exc.__class__.__name__}: "
                              f"{' '.join(str(exc).split())[:120]})") from None


def _check_eager_size(p: Path) -> None:
    """Refuse a cube whose dimension coordinates, which opening it reads whole (xarray
    indexes them), declare more than :data:`mixsolve.io.limits.CAREFUL_MAX_BYTES`.

    The absorbance itself is read lazily, chunk by chunk, so a large cube is fine; its
    coordinates are not. Only the header is read here; a file it cannot read is left to
    the opening, which says why.
    """
    from mixsolve.io.netcdf_store import declared_variables, refuse_oversized

    try:
        declared = _zarr_declared(p) if p.suffix.lower() == ".zarr" else declared_variables(p)
    except Exception:  # any failure here is reported by the opening, with its reason
        return
    refuse_oversized({n: d for n, d in declared.items() if d.dims == (n,)}, p.name,
                     "coordinates", "read into memory when a cube is opened (its absorbance "
                     "is read in chunks, its coordinates whole)", "keep only the wavelength "
                     "coordinate (a dimension needs none) or split the cube")


def _zarr_declared(p: Path) -> dict[str, Any]:
    """The arrays of a Zarr store's root group as its metadata declare them."""
    import math

    import zarr

    from mixsolve.io.netcdf_store import Declared

    out = {}
    for name, array in zarr.open_group(str(p), mode="r").arrays():
        dims = getattr(array.metadata, "dimension_names", None) \
            or array.attrs.get("_ARRAY_DIMENSIONS") or ()
        shape = tuple(map(int, array.shape))
        out[str(name)] = Declared(tuple(map(str, dims)), shape,
                                  math.prod(shape) * int(array.dtype.itemsize))
    return out


def _absorbance_name(ds: xr.Dataset, p: Path, variable: str | None) -> str:
    if variable is not None:
        if variable not in ds.data_vars:
            raise FileFormatError(f"{p.name}: no variable {variable!r} (has: "
                                  f"{', '.join(map(str, ds.data_vars)) or 'none'})")
        found = variable
    elif ABSORBANCE in ds.data_vars:
        found = ABSORBANCE
    else:
        spectral = [str(n) for n, v in ds.data_vars.items() if WAVELENGTH in v.dims]
        if len(spectral) != 1:
            raise FileFormatError(
                f"{p.name}: expected one variable with a 'wavelength' dimension, found "
                f"{len(spectral)} ({', '.join(spectral) or 'none'}); name it 'absorbance'")
        found = spectral[0]
    if WAVELENGTH not in ds[found].dims:
        raise FileFormatError(f"{p.name}: variable {found!r} has dims {ds[found].dims}, "
                              "no 'wavelength' dimension")
    return found


def spectra_per_chunk(n_wavelengths: int, itemsize: int = 8) -> int:
    """Spectra in ``CHUNK_BYTES`` of absorbance."""
    return max(1, CHUNK_BYTES // max(1, int(n_wavelengths) * int(itemsize)))


def chunk_plan(sizes: Mapping[str, int], chunk_spectra: int | None = None,
               disk_chunks: Mapping[str, int] | None = None) -> dict[str, int]:
    """Chunk sizes: wavelength whole, about ``chunk_spectra`` spectra per chunk (default
    :func:`spectra_per_chunk`).

    The last non-wavelength dimensions are kept whole first (an image row is contiguous
    on disk); a chunk size is rounded down to a multiple of the chunk on disk, if any.
    """
    disk_chunks = disk_chunks or {}
    if chunk_spectra is None:
        chunk_spectra = spectra_per_chunk(sizes.get(WAVELENGTH, 1))
    plan = {WAVELENGTH: -1}
    budget = max(int(chunk_spectra), 1)
    for dim in reversed([d for d in sizes if d != WAVELENGTH]):
        size = max(int(sizes[dim]), 1)
        take = min(size, max(budget, 1))
        on_disk = int(disk_chunks.get(dim) or 0)
        if 0 < on_disk < take:
            take = (take // on_disk) * on_disk
        plan[dim] = take
        budget = max(budget // take, 1)
    return plan


def write_cube(data: xr.Dataset | xr.DataArray, path: str | os.PathLike[str], *,
               compute: Callable[[Any], Any] | None = None) -> Path:
    """Write a Dataset (or a DataArray as ``absorbance``) to ``.zarr`` or ``.nc``, atomically.

    Parameters
    ----------
    data : Dataset or DataArray
        Numpy- or dask-backed. Dask-backed data are computed chunk by chunk as they are
        written, so memory holds a few chunks at a time.
    path : path-like
        Ends in ``.zarr`` (a Zarr store, a folder) or ``.nc`` (netCDF-4, h5netcdf).
    compute : callable, optional
        Runs the delayed write, e.g. with a progress bar or on a dask.distributed cluster
        (:func:`mixsolve.workflows.cluster.compute`); default ``dask.compute``.

    Returns
    -------
    Path

    Raises
    ------
    OutputError
        An unknown suffix, a missing folder, or a failed write. A Zarr store (with
        consolidated metadata, so that opening it reads one file) is written to
        a temporary folder beside the target and renamed into place (an existing store of
        that name is replaced only once the new one is complete); a netCDF file goes
        through :func:`mixsolve.io.atomic.atomic_path`. A netCDF cube of up to
        ``NETCDF_IN_MEMORY_BYTES`` is built in memory first, so a full disk or a file-size
        limit fails cleanly; a larger one streams to disk and is refused beforehand if it
        cannot fit (see :func:`_check_room`).
    """
    target = Path(path)
    ds = data.to_dataset(name=data.name or ABSORBANCE) if isinstance(data, xr.DataArray) \
        else data
    ds = _plain(ds)
    suffix = target.suffix.lower()
    if suffix == ".zarr":
        _write_zarr(ds, target, compute)
    elif suffix == ".nc":
        _write_netcdf(ds, target, compute)
    else:
        raise OutputError(f"{target}: a cube is written as .zarr or .nc, not "
                          f"{suffix or 'no suffix'!r}")
    return target


def _write_netcdf(ds: xr.Dataset, target: Path, compute: Callable[[Any], Any] | None) -> None:
    """Write a ``.nc`` cube through :func:`~mixsolve.io.atomic.atomic_path`.

    Up to ``NETCDF_IN_MEMORY_BYTES``: computed, built in memory, written in one go (a
    failed write is a plain :class:`OutputError`). Larger: streamed chunk by chunk, after
    :func:`_check_room`; a disk that fills during that write can still crash HDF5.
    """
    from mixsolve.io.netcdf_store import netcdf_image

    if ds.nbytes <= NETCDF_IN_MEMORY_BYTES:
        computed = ds.compute() if compute is None else compute(ds)
        image = netcdf_image(computed)
        with atomic_path(target) as tmp:
            tmp.write_bytes(image)
        return
    _check_room(target, ds.nbytes)
    with atomic_path(target) as tmp:
        _run(ds.to_netcdf(tmp, engine=NETCDF_ENGINE, compute=False), compute)


def _check_room(target: Path, nbytes: int) -> None:
    """Refuse a streamed ``.nc`` cube that cannot fit: free space or ``ulimit -f`` below
    its arrays' ``nbytes`` (the file holds them uncompressed) plus
    ``NETCDF_OVERHEAD_BYTES``.

    Raises
    ------
    OutputError
        ``"Y.nc: needs about 1.2 GB but only 300 MB are free in out; free some space
        or write to another disk"``, or the like for the file-size limit.
    """
    need = nbytes + NETCDF_OVERHEAD_BYTES
    folder = target.parent if str(target.parent) else Path(".")
    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return  # the write itself reports a folder it cannot use
    if need > free:
        raise OutputError(f"{target}: needs about {limits.size_text(need)} but only "
                          f"{limits.size_text(free)} are free in {folder}; free some space "
                          "or write to another disk")
    try:
        import resource  # POSIX only
    except ImportError:
        return
    soft = resource.getrlimit(resource.RLIMIT_FSIZE)[0]
    if soft != resource.RLIM_INFINITY and need > soft:
        raise OutputError(f"{target}: needs about {limits.size_text(need)} but the "
                          f"file-size limit (ulimit -f) is {limits.size_text(soft)}; raise "
                          "the limit or write a .zarr store (many smaller files)")


def _plain(ds: xr.Dataset) -> xr.Dataset:
    """Drop encodings inherited from an input file; store text as variable-length strings.

    Fixed-width unicode has no Zarr v3 data type; variable-length UTF-8 strings are
    portable to both formats.
    """
    text = {name: var.astype(VLEN_STR) for name, var in ds.variables.items()
            if var.dtype.kind == "U"}
    ds = ds.assign_coords({n: v for n, v in text.items() if n in ds.coords})
    ds = ds.assign({n: v for n, v in text.items() if n not in ds.coords})
    for var in ds.variables.values():
        var.encoding = {}
    return ds


def _run(delayed: Any, compute: Callable[[Any], Any] | None) -> None:
    if delayed is None:
        return
    if compute is None:
        import dask

        dask.compute(delayed)
    else:
        compute(delayed)


def _write_zarr(ds: xr.Dataset, target: Path, compute: Callable[[Any], Any] | None) -> None:
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{target}: folder {folder} does not exist")
    if target.exists() and not target.is_dir():
        raise OutputError(f"{target}: exists and is not a Zarr store (a folder)")
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=folder))
    except OSError as exc:
        raise OutputError(f"{target}: cannot write in {folder} ({exc.strerror})") from None
    store = tmp / "store.zarr"
    old = None
    staged = False
    try:
        with warnings.catch_warnings():
            # consolidated metadata is zarr-python's extension of the v3 format: one read
            # instead of one per array when a store is opened (a shared file system, a
            # cluster); readers without it open the store all the same
            warnings.filterwarnings("ignore", message="Consolidated metadata is currently "
                                    "not part in the Zarr format 3 specification")
            _run(ds.to_zarr(store, mode="w-", consolidated=True, compute=False), compute)
        staged = stage(store, target, scratch=tmp)  # moved in when the whole run succeeds
        if not staged:
            if target.exists():
                old = tmp / "replaced.zarr"
                os.replace(target, old)
            os.replace(store, target)
    except OSError as exc:
        if old is not None and not target.exists():
            os.replace(old, target)
        raise OutputError(f"{target}: cannot write the store ({exc.strerror or exc})") from exc
    finally:
        if not staged:
            shutil.rmtree(tmp, ignore_errors=True)

