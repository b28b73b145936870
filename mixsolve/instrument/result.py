"""The common result of an instrument check, and reading a spectrum at a set wavelength."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from mixsolve.errors import InputError
from mixsolve.spectra import SAMPLE, WAVELENGTH, check_spectra

#: Columns of :attr:`CheckResult.items`.
ITEM_COLUMNS = ("item", "measured", "expected", "low", "high", "unit", "passed", "note")
#: Largest gap (nm) between a check wavelength and the nearest measured one.
MAX_GAP_NM = 2.0


@dataclass
class CheckResult:
    """What an instrument check found.

    Attributes
    ----------
    check : str
        ``absorbance``, ``wavelength`` or ``stray_light``.
    items : DataFrame
        One row per checked figure: ``item`` (what), ``measured``, ``expected``, ``low``
        and ``high`` (the acceptance limits, NaN for none), ``unit``, ``passed`` (bool),
        ``note``.
    summary : dict
        Figures of the whole check (e.g. ``offset_nm`` and ``u_offset_nm``).
    settings : dict
        Tolerances and conditions used (JSON-safe), recorded in the log.
    notes : list of str
        Anything a reader should know (conditions outside those of the reference values).
    """

    check: str
    items: pd.DataFrame
    summary: dict[str, Any] = field(default_factory=dict)
    settings: dict[str, Any] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        """True when every item passed."""
        return bool(len(self.items)) and bool(self.items["passed"].all())


def items_frame(rows: list[dict[str, Any]]) -> pd.DataFrame:
    """Rows (dicts with the :data:`ITEM_COLUMNS` keys) as a DataFrame in column order."""
    table = pd.DataFrame(rows, columns=list(ITEM_COLUMNS))
    table["passed"] = table["passed"].astype(bool)
    return table


def scans_of(spectra: xr.DataArray, name: str) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Labels, wavelengths (nm) and values (scan, wavelength) of a (sample, wavelength) array."""
    spectra = check_spectra(spectra, name)
    if spectra.ndim == 1:
        spectra = spectra.expand_dims({SAMPLE: [name]})
    others = [d for d in spectra.dims if d != WAVELENGTH]
    if len(others) != 1:
        raise InputError(f"{name}: expected dims (sample, wavelength), got {spectra.dims}")
    labels = [str(v) for v in spectra[others[0]].values] if others[0] in spectra.coords \
        else [f"scan_{i + 1}" for i in range(spectra.sizes[others[0]])]
    return labels, spectra[WAVELENGTH].values, spectra.transpose(others[0], WAVELENGTH).values


def reading_at(wl: np.ndarray, values: np.ndarray, target_nm: float, name: str,
               max_gap_nm: float = MAX_GAP_NM) -> float:
    """Absorbance at ``target_nm``, interpolated linearly between the measured neighbours.

    Raises
    ------
    InputError
        No reading within ``max_gap_nm`` on both sides (or exactly at) the target, or a
        missing reading there.
    """
    ok = np.isfinite(values)
    w, v = wl[ok], values[ok]
    exact = np.flatnonzero(np.abs(w - target_nm) <= 1e-6)
    if exact.size:
        return float(v[exact[0]])
    below, above = w[w < target_nm], w[w > target_nm]
    if not below.size or not above.size or target_nm - below[-1] > max_gap_nm \
            or above[0] - target_nm > max_gap_nm:
        raise InputError(f"{name}: no reading at or within {max_gap_nm:g} nm either side of "
                         f"{target_nm:g} nm (measured {wl[0]:g}-{wl[-1]:g} nm)")
    return float(np.interp(target_nm, w, v))
