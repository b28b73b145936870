"""Write matplotlib figures as PNG files, atomically (a failed write leaves no file)."""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

from mixsolve.io.atomic import atomic_path

if TYPE_CHECKING:
    from matplotlib.figure import Figure


def write_png(figure: Figure, path: str | os.PathLike[str], *, dpi: int = 110) -> Path:
    """Save ``figure`` as a PNG image at ``path``.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
        E.g. from :mod:`mixsolve.report.figures`.
    path : path-like
        The PNG file; replaced if it exists.
    dpi : int
        Resolution (dots per inch).

    Raises
    ------
    OutputError
        The folder does not exist or is not writable.
    """
    with atomic_path(path) as tmp:
        figure.savefig(tmp, format="png", dpi=dpi)
    return Path(path)
