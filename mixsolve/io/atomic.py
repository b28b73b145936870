"""Write outputs atomically: to a temporary file beside the target, then rename.

Inside :func:`mixsolve.io.outputs.all_or_nothing` the rename waits until the whole run has
succeeded (the file is staged); outside it, it happens when the file is complete.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from mixsolve.errors import OutputError
from mixsolve.io.outputs import guard_outputs, make_folder, stage


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
        if not stage(tmp, target):
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
    """Create an output folder (and parents) if needed; refuse a path that is a file.

    Inside a run (:func:`mixsolve.io.outputs.all_or_nothing`) a folder it made is removed
    again when the run fails.
    """
    return make_folder(path)


def check_writable(*paths: str | os.PathLike[str] | None,
                   inputs: Sequence[str | os.PathLike[str] | None] = ()) -> None:
    """Refuse, before anything is written, output files that cannot or must not be written.

    The file-only form of :func:`mixsolve.io.outputs.guard_outputs`: an output whose
    folder is missing or read-only, a special file, an input (or inside one), or another
    output of the same job is refused. ``None`` entries (outputs not asked for) are skipped.

    Raises
    ------
    OutputError
    """
    guard_outputs(paths, inputs=inputs)


def check_folder_writable(path: str | os.PathLike[str]) -> None:
    """Refuse an output folder that cannot be created or written, before any work is done."""
    guard_outputs(folders=[path])
