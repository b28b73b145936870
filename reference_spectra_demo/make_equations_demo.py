"""Write the synthetic equations file of the demo (an invented "published" set).

Scenario (invented, as in make_demo_data.py): the "Hedgerow Colour Works" lab was handed a
fixed three-wavelength equation set for its pigments amber, rose and teal, as a
reference method might print it: coefficients rounded to four significant figures, the
750 nm reading subtracted first. The set is made here from the pigments' true (invented)
absorptivities at 452, 522 and 612 nm, so it is exact up to that rounding. Nothing in it is
a real method: every file this script writes is synthetic.

Run: ``python reference_spectra_demo/make_equations_demo.py``; it rewrites
``equations_demo.csv`` beside itself. Use it with ``batches_spectra.csv``:
``mixsolve equations apply reference_spectra_demo/equations_demo.csv
reference_spectra_demo/batches_spectra.csv``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

try:  # imported as mixsolve.reference_spectra_demo.make_equations_demo
    from .make_demo_data import BANDS, absorptivity
except ImportError:  # run as a script
    from make_demo_data import BANDS, absorptivity  # type: ignore[no-redef]

HERE = Path(__file__).resolve().parent
#: The set's wavelengths (nm), on the demo spectra's 2 nm grid: one band maximum each.
READ_NM = (452.0, 522.0, 612.0)
REFERENCE_NM = 750.0

HEADER = ("""# name: hedgerow_demo
# citation: synthetic demo set written by reference_spectra_demo/make_equations_demo.py """
          """(invented; not a published method)
# status: seen
# unit: mg/L
# pathlength_cm: 1
# reference_nm: 750
# solvent: invented aqueous extract (synthetic)
# bandwidth_class: synthetic, no bandwidth
# note: SYNTHETIC - coefficients are the inverse of the invented pigments' """
          """absorptivities at 452, 522 and 612 nm, rounded to 4 significant figures
""")


def coefficients() -> tuple[list[str], np.ndarray]:
    """Components and the rounded coefficient matrix (mg/L per AU, rows components)."""
    names = list(BANDS)
    wl = np.array(READ_NM)
    k = np.stack([absorptivity(n, wl) for n in names], axis=1) / 1000.0  # AU per mg/L
    g = np.linalg.inv(k)
    return names, np.vectorize(lambda v: float(f"{v:.4g}"))(g)


def write_equations_demo(folder: Path = HERE) -> Path:
    """Write ``equations_demo.csv`` into ``folder``; returns its path."""
    names, g = coefficients()
    rows = ["component,coefficient,wavelength_nm"]
    for i, name in enumerate(names):
        rows += [f"{name},{g[i, j]:.4g},{nm:g}" for j, nm in enumerate(READ_NM)]
    path = folder / "equations_demo.csv"
    path.write_text(HEADER + "\n".join(rows) + "\n", encoding="utf-8")
    return path


if __name__ == "__main__":
    print(write_equations_demo())
