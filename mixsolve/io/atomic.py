"""Write outputs atomically: to a temporary file beside the target, then rename."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from mixsolve.errors import OutputError


@contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path; on success it replaces ``path``, on failure it is removed.

    Raises
    ------
    OutputError
        The target's folder does not exist or is not writable, the target is a folder,
        or writing fails (disk full, permissions); the temporary file is removed.
    """
    target, folder = _target(path)
    try:
        handle, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part",
                                            dir=folder)
    except OSError as exc:
        raise OutputError(f"{target}: cannot write in {folder} ({exc.strerror})") from None
    os.close(handle)
    tmp = Path(tmp_name)
    try:
        yield tmp
        # mkstemp makes the file private (0600); give the output the mode a plain open()
        # would have: that of the file it replaces, else 0666 less the umask.
        os.chmod(tmp, target.stat().st_mode & 0o7777 if target.exists() else _new_file_mode())
        os.replace(tmp, target)
    except OSError as exc:  # disk full, quota, permissions: a user's problem, not a bug
        tmp.unlink(missing_ok=True)
        if isinstance(exc, OutputError):
            raise
        raise OutputError(f"{target}: cannot write the file ({exc.strerror or exc})") from exc
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def _target(path: str | os.PathLike[str]) -> tuple[Path, Path]:
    """The output path and its folder, refusing a folder target or a missing folder."""
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if target.is_dir():
        raise OutputError(f"{target}: is a folder; give a file name to write")
    if not folder.is_dir():
        raise OutputError(f"{target}: folder {folder} does not exist")
    return target, folder


def _new_file_mode() -> int:
    """Mode of a newly created file under the current umask (0666 & ~umask)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


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


def check_writable(*paths: str | os.PathLike[str] | None,
                   inputs: Sequence[str | os.PathLike[str] | None] = ()) -> None:
    """Refuse, before anything is written, outputs that cannot or must not be written.

    Jobs that write several files call this first, so that a bad second path cannot leave
    the first file behind. An output whose folder is missing or read-only is refused, and
    so is an output that is one of the job's ``inputs`` or another output of the same job
    (writing it would destroy data). ``None`` entries (outputs not asked for) are skipped.

    Raises
    ------
    OutputError
    """
    seen: dict[Path, str] = {}
    for raw in inputs:
        if raw is not None and Path(raw).exists():
            seen[Path(raw).resolve()] = "an input"
    for path in paths:
        if path is None:
            continue
        target, folder = _target(path)
        if not os.access(folder, os.W_OK):
            raise OutputError(f"{target}: cannot write in {folder} (permission denied)")
        key = target.resolve()
        if key in seen:
            raise OutputError(f"{target}: is also {seen[key]} of this run; writing it would "
                              "destroy that file, so choose another output name")
        seen[key] = "another output"


def check_folder_writable(path: str | os.PathLike[str]) -> None:
    """Refuse an output folder that cannot be created or written, before any work is done."""
    folder = Path(path)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: exists and is not a folder")
    probe = folder
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir() or not os.access(probe, os.W_OK):
        raise OutputError(f"{folder}: cannot be created in {probe} (not a writable folder)")
