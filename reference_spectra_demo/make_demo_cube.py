"""Write a synthetic hyperspectral image cube of the demo scenario (invented), chunk by chunk.

Scenario (invented, continuing ``make_demo_data.py``): "Hedgerow Colour Works" checks how
evenly its three invented pigments ``amber``, ``rose`` and ``teal`` take on a test card. It
paints the card in overlapping patterns and images it with a hyperspectral camera: amber
rises from the left edge to the right, rose fades in from a quarter of the way down, and
teal sits in a round patch; the card itself adds a small, slightly uneven offset. Nothing
here was measured: every pixel's spectrum is Beer–Lambert of the pigment bands of
``make_demo_data.py`` (1 cm equivalent) plus that offset and the same photometric noise.

The concentration maps are smooth functions of the pixel position (:func:`concentrations`),
so the truth at any pixel is known without storing it. Every image row is drawn from its
own seed, so the cube is the same whatever the chunking and never has to fit in memory:
a 1000 × 1000-pixel cube of 500 wavelengths (4 GB of float64) is written in bounded
memory.

Run: ``python reference_spectra_demo/make_demo_cube.py OUT [--pixels 1000]
[--wavelengths 191]`` writes ``OUT/library.nc`` (the pigments' absorptivities) and
``OUT/cube.zarr`` (absorbance, dims ``y, x, wavelength``); then unmix it with
``mixsolve unmix OUT/library.nc OUT/cube.zarr --baseline offset --out OUT/result.zarr``,
or run it all with ``mixsolve demo --cube 1000``. Needs the ``scale`` extra (dask, zarr).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import xarray as xr

try:  # imported as mixsolve.reference_spectra_demo.make_demo_cube
    from .make_demo_data import BANDS, MOLAR_MASS, absorptivity, noisy
except ImportError:  # run as a script: python reference_spectra_demo/make_demo_cube.py
    from make_demo_data import BANDS, MOLAR_MASS, absorptivity, noisy  # type: ignore[no-redef]

SEED = 20261202
PIGMENTS = tuple(BANDS)
#: Wavelength span of the cube (nm), as the other demo spectra.
SPAN_NM = (380.0, 760.0)
#: Highest concentration of each pattern (mg/L): amber ramp, rose fade, teal patch.
PEAK_MG_L = {"amber": 12.0, "rose": 10.0, "teal": 8.0}
#: The card's offset (AU): a constant plus a gentle slope across the image.
CARD_AU = 0.012
CARD_SLOPE_AU = 0.006
#: Image rows per chunk when writing (a few tens of MB of absorbance per chunk).
CHUNK_ROWS = 16


def wavelengths(n: int) -> np.ndarray:
    """``n`` wavelengths (nm) spanning ``SPAN_NM`` evenly."""
    return np.linspace(*SPAN_NM, int(n))


def concentrations(y: np.ndarray, x: np.ndarray, pixels: int) -> np.ndarray:
    """True pigment concentrations (mg/L) at pixel rows ``y`` and columns ``x``.

    Parameters
    ----------
    y, x : arrays of int, broadcastable
        Pixel positions, 0 … pixels − 1.
    pixels : int
        Side of the square image.

    Returns
    -------
    ndarray, shape (*broadcast shape, 3)
        amber, rose, teal (mg/L). Rose is 0 in the top quarter and teal outside its patch,
        so the demo shows components held at zero.
    """
    u = np.asarray(y, dtype=float) / max(pixels - 1, 1)
    v = np.asarray(x, dtype=float) / max(pixels - 1, 1)
    u, v = np.broadcast_arrays(u, v)
    amber = PEAK_MG_L["amber"] * v
    rose = PEAK_MG_L["rose"] * np.clip((u - 0.25) / 0.75, 0.0, 1.0)
    r2 = ((u - 0.4) ** 2 + (v - 0.6) ** 2) / 0.3**2
    teal = PEAK_MG_L["teal"] * np.clip(1.0 - r2, 0.0, 1.0)
    return np.stack([amber, rose, teal], axis=-1)


def card_offset(y: np.ndarray, x: np.ndarray, pixels: int) -> np.ndarray:
    """The card's own absorbance (AU) at pixel rows ``y`` and columns ``x``."""
    u = np.asarray(y, dtype=float) / max(pixels - 1, 1)
    v = np.asarray(x, dtype=float) / max(pixels - 1, 1)
    return CARD_AU + CARD_SLOPE_AU * (u + v) / 2


def library(wavelengths_nm: np.ndarray) -> xr.Dataset:
    """A mixsolve library of the invented pigments (L g⁻¹ cm⁻¹) on ``wavelengths_nm``."""
    from mixsolve.library import import_absorptivities

    eps = np.vstack([absorptivity(name, wavelengths_nm) for name in PIGMENTS])
    da = xr.DataArray(eps, dims=("component", "wavelength"),
                      coords={"component": list(PIGMENTS), "wavelength": wavelengths_nm})
    return import_absorptivities(da, "L/(g*cm)", molar_mass_g_per_mol=MOLAR_MASS,
                                    source="invented pigments of the synthetic demo "
                                           "(reference_spectra_demo/make_demo_cube.py)")


def synthetic_cube(pixels: int, wavelengths_nm: np.ndarray, chunk_rows: int = CHUNK_ROWS,
                   seed: int = SEED) -> xr.DataArray:
    """The card as a lazy (dask) pixels × pixels × wavelengths absorbance cube (AU).

    Each image row is drawn from its own seed when its block is needed, so the cube does
    not depend on ``chunk_rows``.
    """
    import dask.array as da

    eps = np.vstack([absorptivity(name, wavelengths_nm) for name in PIGMENTS]) / 1000.0
    n_wl = wavelengths_nm.size

    def block(block_info: dict | None = None) -> np.ndarray:
        (y0, y1), (x0, x1), _ = block_info[None]["array-location"]
        y, x = np.mgrid[y0:y1, x0:x1]
        clean = concentrations(y, x, pixels) @ eps + card_offset(y, x, pixels)[..., None]
        # one seed per image row: the same cube whatever the chunks
        return np.stack([noisy(row, np.random.default_rng([seed, y0 + i]))
                         for i, row in enumerate(clean)])

    rows = (chunk_rows,) * (pixels // chunk_rows) + ((pixels % chunk_rows,)
                                                      if pixels % chunk_rows else ())
    data = da.map_blocks(block, chunks=(rows, (pixels,), (n_wl,)), dtype=float)
    return xr.DataArray(
        data, dims=("y", "x", "wavelength"), coords={"wavelength": wavelengths_nm},
        name="absorbance",
        attrs={"quantity": "absorbance", "pathlength_cm": 1.0,
               "source": "synthetic demo card (reference_spectra_demo/make_demo_cube.py); "
                         "invented, not measured"})


def write_demo_cube(folder: str | Path, pixels: int = 1000, n_wavelengths: int = 191,
                    chunk_rows: int = CHUNK_ROWS) -> tuple[Path, Path]:
    """Write ``folder/library.nc`` and ``folder/cube.zarr``; return their paths."""
    from mixsolve.io.cubes import write_cube
    from mixsolve.io.library_store import write_library

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    wl = wavelengths(n_wavelengths)
    write_library(library(wl), folder / "library.nc")
    write_cube(synthetic_cube(pixels, wl, chunk_rows), folder / "cube.zarr")
    return folder / "library.nc", folder / "cube.zarr"


def main() -> None:
    """Command line: write the library and the cube into a folder."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path, help="folder to write library.nc and cube.zarr")
    parser.add_argument("--pixels", type=int, default=1000, help="cube is PIXELS × PIXELS")
    parser.add_argument("--wavelengths", type=int, default=191,
                        help="wavelengths from 380 to 760 nm (191: every 2 nm)")
    parser.add_argument("--chunk-rows", type=int, default=CHUNK_ROWS,
                        help="image rows per chunk")
    args = parser.parse_args()
    start = time.perf_counter()
    _, cube = write_demo_cube(args.out, args.pixels, args.wavelengths, args.chunk_rows)
    size = sum(p.stat().st_size for p in cube.rglob("*") if p.is_file())
    print(f"wrote {cube}: {args.pixels} x {args.pixels} x {args.wavelengths} (synthetic), "
          f"{size / 1e9:.2f} GB on disk, {time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
