"""Write outputs atomically: to a temporary file beside the target, then rename."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from mixsolve.errors import OutputError


@contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path; on success it replaces ``path``, on failure it is removed.

    Raises
    ------
    OutputError
        The target's folder does not exist or is not writable, or the target is a folder.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if target.is_dir():
        raise OutputError(f"{target}: is a folder; give a file name to write")
    if not folder.is_dir():
        raise OutputError(f"{target}: folder {folder} does not exist")
    try:
        handle, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part",
                                            dir=folder)
    except OSError as exc:
        raise OutputError(f"{target}: cannot write in {folder} ({exc.strerror})") from None
    os.close(handle)
    tmp = Path(tmp_name)
    try:
        yield tmp
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def ensure_folder(path: str | os.PathLike[str]) -> Path:
    """Create an output folder (and parents) if needed; refuse a path that is a file."""
    folder = Path(path)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: exists and is not a folder")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create the folder ({exc.strerror})") from None
    return folder
