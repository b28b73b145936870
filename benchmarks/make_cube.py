"""Write a synthetic image cube (Zarr) and its library, chunk by chunk, in bounded memory.

The five components are invented Gaussian bands (no real compound); each pixel is a
random mixture with about 30 % of the components absent, plus a small offset and noise.
Every chunk of image rows is generated from its own seed, so the cube is the same
whatever the chunking and never has to fit in memory.

Run: ``python benchmarks/make_cube.py OUT_FOLDER [--pixels 1000] [--wavelengths 300]``;
writes ``OUT_FOLDER/lib.nc`` and ``OUT_FOLDER/cube.zarr`` (float64 absorbance, dims
``y, x, wavelength``). Used by ``bench_memory.py``.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import xarray as xr

import mixsolve as ms

#: Invented bands: (centre nm, width nm, peak specific absorptivity L g⁻¹ cm⁻¹).
BANDS = {"ochre": (440.0, 30.0, 50.0), "rose": (500.0, 28.0, 45.0),
         "plum": (560.0, 35.0, 40.0), "jade": (620.0, 28.0, 60.0),
         "slate": (670.0, 40.0, 35.0)}


def absorptivity(wavelengths_nm: np.ndarray) -> np.ndarray:
    """The invented bands (component × wavelength), L g⁻¹ cm⁻¹."""
    return np.vstack([h * np.exp(-0.5 * ((wavelengths_nm - c) / w) ** 2)
                      for c, w, h in BANDS.values()])


def library(wavelengths_nm: np.ndarray) -> xr.Dataset:
    """A mixsolve library of the invented bands."""
    da = xr.DataArray(absorptivity(wavelengths_nm), dims=("component", "wavelength"),
                      coords={"component": list(BANDS), "wavelength": wavelengths_nm})
    return ms.import_absorptivities(da, "L/(g*cm)", source="invented benchmark bands")


def mixtures(n: int, eps: np.ndarray, rng: np.random.Generator,
             noise_au: float = 0.003) -> np.ndarray:
    """n random mixture spectra (n × wavelengths, AU) at 1 cm, ~30 % components absent."""
    conc = rng.uniform(0.0, 0.02, (n, eps.shape[0]))  # g/L
    conc[rng.random(conc.shape) < 0.3] = 0.0
    out = conc @ eps
    out += 0.01 + noise_au * rng.standard_normal(out.shape)
    return out


def synthetic_cube(pixels: int, wavelengths_nm: np.ndarray, chunk_rows: int,
                   seed: int = 2024) -> xr.DataArray:
    """A lazy (dask) pixels × pixels cube; each block of rows comes from its own seed."""
    import dask.array as da

    eps = absorptivity(wavelengths_nm)
    n_wl = wavelengths_nm.size

    def block(block_info: dict | None = None) -> np.ndarray:
        (y0, y1), (x0, x1), _ = block_info[None]["array-location"]
        rng = np.random.default_rng([seed, y0, x0])
        return mixtures((y1 - y0) * (x1 - x0), eps, rng).reshape(y1 - y0, x1 - x0, n_wl)

    data = da.map_blocks(block, chunks=((chunk_rows,) * (pixels // chunk_rows)
                                        + ((pixels % chunk_rows,) if pixels % chunk_rows
                                           else ()), (pixels,), (n_wl,)), dtype=float)
    return xr.DataArray(data, dims=("y", "x", "wavelength"),
                        coords={"wavelength": wavelengths_nm}, name="absorbance",
                        attrs={"quantity": "absorbance", "pathlength_cm": 1.0,
                               "source": "invented synthetic cube (benchmarks/make_cube.py)"})


def write(folder: Path, pixels: int, n_wavelengths: int, chunk_rows: int) -> tuple[Path, Path]:
    """Write lib.nc and cube.zarr into ``folder``; return their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    wl = np.linspace(400.0, 700.0, n_wavelengths)
    ms.write_library(library(wl), folder / "lib.nc")
    ms.write_cube(synthetic_cube(pixels, wl, chunk_rows), folder / "cube.zarr")
    return folder / "lib.nc", folder / "cube.zarr"


def folder_bytes(path: Path) -> int:
    """Bytes on disk of a file or a folder tree."""
    if path.is_file():
        return path.stat().st_size
    return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path)
    parser.add_argument("--pixels", type=int, default=1000, help="cube is PIXELS × PIXELS")
    parser.add_argument("--wavelengths", type=int, default=300)
    parser.add_argument("--chunk-rows", type=int, default=32, help="image rows per chunk")
    args = parser.parse_args()
    start = time.perf_counter()
    _, cube = write(args.out, args.pixels, args.wavelengths, args.chunk_rows)
    print(f"wrote {cube}: {args.pixels} x {args.pixels} x {args.wavelengths}, "
          f"{folder_bytes(cube) / 1e9:.2f} GB on disk, {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
