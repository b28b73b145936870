"""The output guard: what a run may write, checked before any work, written all or nothing.

Every command (and every file-to-file workflow of the Python API) states its outputs and
inputs up front and calls :func:`guard_outputs` before reading or computing anything. An
output may not be, contain or lie inside an input (real paths are compared, so links and
``..`` do not get around it); it may not be a FIFO, a device or any other special file; a
folder that is replaced whole (a Zarr store) may hold nothing but a store; two outputs of
one run may not collide.

The run then writes inside :func:`all_or_nothing`: every file that
:func:`mixsolve.io.atomic.atomic_path` finishes is *staged* (complete, under a hidden
temporary name beside its target) and moved into place only when the whole run has
succeeded. Any failure (a later bad file, a full disk, Ctrl-C) removes what was staged
and the folders the run made, and leaves earlier files as they were.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
import signal
import stat
import tempfile
import threading
import unicodedata
from collections.abc import Iterable, Iterator, Sequence
from contextvars import ContextVar
from dataclasses import dataclass, field
from pathlib import Path

from mixsolve.errors import OutputError

PathLike = str | os.PathLike[str]
#: Entries a Zarr store (format 2 or 3) holds at its top; any other file there is not ours.
ZARR_ENTRIES = frozenset({"zarr.json", ".zgroup", ".zattrs", ".zmetadata", ".zarray"})
#: The record, in an output folder, of the files that mixsolve runs wrote there: only those
#: may be replaced by a later run that names just the folder (plate, demo).
RECORD = ".mixsolve-outputs.json"

_FILE_KINDS = ((stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a character device"),
               (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))


def guard_outputs(files: Iterable[PathLike | None] = (), *,
                  stores: Iterable[PathLike | None] = (),
                  folders: Iterable[PathLike | None] = (),
                  inputs: Iterable[PathLike | None] = ()) -> None:
    """Refuse, before any work, outputs that cannot or must not be written.

    Parameters
    ----------
    files : path-likes
        Output files (``None``: an output not asked for). Each is replaced when it exists.
    stores : path-likes
        Output folders replaced whole (a Zarr store). An existing one must be a Zarr
        store and nothing else.
    folders : path-likes
        Output folders the run writes files into (created when missing; other files in
        them are left alone). Their files must be listed in ``files``.
    inputs : path-likes
        Every file or folder the run reads.

    Raises
    ------
    OutputError
        Naming the output, what is wrong and what to do.
    """
    ins = [(Path(p), _real(p)) for p in inputs if p is not None and os.path.lexists(p)]
    made = [Path(p) for p in folders if p is not None]
    outs: list[tuple[Path, Path, str]] = []
    for folder in made:
        _check_folder(folder)
        outs.append((folder, _real(folder), "folder"))
    files = [p for p in files if p is not None]
    for p in files:
        if os.fspath(p).endswith(("/", os.sep)):
            raise OutputError(f"{p}: names a folder (it ends in '/'); give a file name to write")
    outs += [(Path(p), _real(p), "file") for p in files]
    outs += [(Path(p), _real(p), "store") for p in stores if p is not None]
    for path, real, kind in outs:
        for given, real_in in ins:
            _check_apart(path, real, kind, given, real_in)
        if kind == "file":
            _check_file(path, made)
        elif kind == "store":
            _check_store(path, made)
    for i, (path, real, kind) in enumerate(outs):
        for other, real_other, other_kind in outs[i + 1:]:
            if "folder" in (kind, other_kind):
                continue  # files inside a folder output are expected
            if real == real_other or _inside(real, real_other) or _inside(real_other, real):
                raise OutputError(f"{other}: collides with {path}, another output of this run; "
                                  "one would destroy the other, so give each its own name")


def _real(path: PathLike) -> Path:
    return Path(os.path.realpath(path))


def _identity(path: Path) -> tuple[int, int] | None:
    """(device, inode) of an existing path: the same file under any name (a bind mount, a
    hard link, another letter case on a case-insensitive file system)."""
    try:
        st = os.stat(path)
    except OSError:
        return None
    return st.st_dev, st.st_ino


def check_own_files(folder: PathLike, names: Iterable[str]) -> None:
    """Refuse to replace a file in ``folder`` that no earlier mixsolve run wrote there.

    For runs given only a folder (``plate --out``, ``demo --out``): the files they write
    inside it are implied, so one the user keeps there (their own ``samples.csv``) must
    not be replaced. Files listed in the folder's :data:`RECORD` were written by mixsolve
    and may be replaced.

    Raises
    ------
    OutputError
    """
    root = Path(folder)
    if not root.is_dir():
        return
    ours = set(recorded_files(root))
    for name in names:
        target = root / name
        if os.path.lexists(target) and name not in ours:
            raise OutputError(f"{target}: exists and was not written by mixsolve into {root} "
                              f"(not in its {RECORD}); move it, or choose a new or empty "
                              "output folder")


def recorded_files(folder: PathLike) -> list[str]:
    """The names (relative to ``folder``) that earlier mixsolve runs recorded as theirs."""
    try:
        data = json.loads((Path(folder) / RECORD).read_text(encoding="utf-8"))
        return [str(n) for n in data.get("files", [])]
    except (OSError, ValueError, AttributeError):
        return []


def _inside(path: Path, folder: Path) -> bool:
    return path != folder and path.is_relative_to(folder)


def _special(path: Path) -> str | None:
    """What a special file is ('a FIFO ...'), or None for a file, folder or nothing."""
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return None
    return next((name for test, name in _FILE_KINDS if test(mode)), None)


def _check_file(path: Path, made: Sequence[Path]) -> None:
    kind = _special(path)
    if kind is not None:
        raise OutputError(f"{path}: is {kind}, not a regular file; write to a file instead")
    if path.is_dir():
        raise OutputError(f"{path}: is a folder; give a file name to write")
    _check_parent(path, made)


def _check_parent(path: Path, made: Sequence[Path]) -> None:
    folder = path.parent
    if any(folder == m or folder.is_relative_to(m) for m in made):
        return  # made by the run; checked by _check_folder
    if not folder.is_dir():
        raise OutputError(f"{path}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise OutputError(f"{path}: cannot write in {folder} (permission denied)")


def _check_folder(folder: Path) -> None:
    kind = _special(folder)
    if kind is not None or (folder.exists() and not folder.is_dir()):
        raise OutputError(f"{folder}: exists and is not a folder; choose another output folder")
    if folder.is_dir() and not os.access(folder, os.W_OK):
        raise OutputError(f"{folder}: cannot write in the folder (permission denied)")
    probe = folder
    while not probe.exists():
        probe = probe.parent
    if not probe.is_dir() or not os.access(probe, os.W_OK):
        raise OutputError(f"{folder}: cannot be created in {probe} (not a writable folder)")


def _check_store(path: Path, made: Sequence[Path]) -> None:
    kind = _special(path)
    if kind is not None:
        raise OutputError(f"{path}: is {kind}, not a Zarr store; write to a new folder name")
    if path.exists() and not path.is_dir():
        raise OutputError(f"{path}: exists and is not a Zarr store (a folder); choose another "
                          "output name")
    if path.is_dir():
        foreign = [p.name for p in path.iterdir()
                   if not (p.name in ZARR_ENTRIES or (p.is_dir() and _is_zarr_node(p)))]
        if foreign or not any((path / e).exists() for e in ZARR_ENTRIES):
            what = f"holds {foreign[0]!r}, which" if foreign else "is a folder that"
            raise OutputError(f"{path}: {what} is not part of a Zarr store; mixsolve replaces "
                              "an output store whole, so choose a new output name")
    _check_parent(path, made)


def _is_zarr_node(folder: Path) -> bool:
    """A folder inside a store: an array or group (metadata file) or a chunk folder."""
    return any((folder / e).exists() for e in ZARR_ENTRIES) or folder.name in {"c"} \
        or folder.name.isdigit()


def _relation(real: Path, real_in: Path) -> str | None:
    """How an output stands to an input: ``same``, ``inside`` it, ``contains`` it, or None.

    By real path and by file identity, so a hard link, a bind mount or another letter case
    on a case-insensitive file system is caught as well as a link or ``..``.
    """
    own, other = _identity(real), _identity(real_in)
    if real == real_in or (own is not None and own == other):
        return "same"
    if _inside(real, real_in) or (other is not None and other in map(_identity, real.parents)):
        return "inside"
    if _inside(real_in, real) or (own is not None and own in map(_identity, real_in.parents)):
        return "contains"
    return None


def _check_apart(path: Path, real: Path, kind: str, given: Path, real_in: Path) -> None:
    relation = _relation(real, real_in)
    if kind == "folder":  # an input inside the output folder is fine; its files are checked
        if relation == "same":
            raise OutputError(f"{path}: is also an input of this run ({given}); choose "
                              "another output folder")
        return
    reason = {"same": f"is also an input of this run ({given})",
              "inside": f"lies inside {given}, an input of this run",
              "contains": f"would replace the folder holding {given}, an input of this run",
              }.get(relation or "")
    if reason is not None:
        raise OutputError(f"{path}: {reason}; writing it would destroy input data, so "
                          "choose another output name")


def safe_file_name(text: str, *, fallback: str) -> str:
    """A file or folder name made from user data that stays where it is put.

    Letters, digits, ``_``, ``-`` and ``.`` are kept (after Unicode NFKC), anything else
    becomes ``_``; leading dots are dropped, so the name is never ``.``, ``..`` or hidden.
    ``fallback`` is used when nothing is left.
    """
    name = re.sub(r"[^\w.-]+", "_", unicodedata.normalize("NFKC", text)).lstrip(".")
    return name[:120] or fallback


def unique_names(stems: Sequence[str], *, fallback: str,
                 taken: Iterable[str] = ()) -> list[str]:
    """:func:`safe_file_name` of each stem, made unique (``-2``, ``-3``...).

    Names are compared without case (file systems on Windows and macOS ignore it), and
    none equals a name in ``taken`` (other outputs in the same folder).
    """
    used = {t.casefold() for t in taken}
    names = []
    for stem in stems:
        base = safe_file_name(stem, fallback=fallback)
        name, k = base, 2
        while name.casefold() in used:
            name, k = f"{base}-{k}", k + 1
        used.add(name.casefold())
        names.append(name)
    return names


@dataclass
class _Run:
    #: (complete temporary file or folder, its target, a temporary folder to remove after)
    staged: list[tuple[Path, Path, Path | None]] = field(default_factory=list)
    made: list[Path] = field(default_factory=list)  # folders the run created


_RUN: ContextVar[_Run | None] = ContextVar("mixsolve_output_run", default=None)


@contextlib.contextmanager
def all_or_nothing() -> Iterator[None]:
    """Stage every output finished inside the block; commit them together at its end.

    Nested blocks join the outermost one. On any exception (``KeyboardInterrupt``
    included) the staged files and the folders made by the run are removed and the
    exception goes on; earlier files are untouched.

    Raises
    ------
    OutputError
        Moving the staged files into place failed; those already moved are put back.
    """
    if _RUN.get() is not None:
        yield
        return
    run = _Run()
    token = _RUN.set(run)
    try:
        yield
        _RUN.reset(token)
        token = None
        if _INTERRUPTED.is_set():  # a Ctrl-C that a callback swallowed
            raise KeyboardInterrupt
        with ctrl_c_ignored():
            _commit(run)
    except BaseException:
        with ctrl_c_ignored():
            _discard(run)
        raise
    finally:
        if token is not None:
            _RUN.reset(token)


_INTERRUPTED = threading.Event()


def note_interrupt() -> None:
    """Record a Ctrl-C (the command line's SIGINT handler calls this before raising).

    A ``KeyboardInterrupt`` raised inside a callback (a weakref finaliser, a ``__del__``)
    is printed and swallowed by Python; the record makes the run fail all the same:
    :func:`all_or_nothing` commits nothing once an interrupt was noted.
    """
    _INTERRUPTED.set()


def clear_interrupt() -> bool:
    """Forget a noted interrupt; say whether there was one."""
    was = _INTERRUPTED.is_set()
    _INTERRUPTED.clear()
    return was


@contextlib.contextmanager
def ctrl_c_ignored() -> Iterator[None]:
    """Ignore SIGINT inside the block (main thread only; elsewhere signals cannot be set).

    Used while staged outputs move into place, so the moves (or the putting back) always
    finish (an interrupt in that moment is dropped: the run has then completed), and while
    worker processes start, so that they inherit it and only mixsolve answers Ctrl-C.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def in_run() -> bool:
    """Whether outputs are being staged (inside :func:`all_or_nothing`)."""
    return _RUN.get() is not None


def stage(tmp: Path, target: Path, *, scratch: Path | None = None) -> bool:
    """Hand a complete temporary file or folder to the current run; False outside a run.

    ``scratch``: a temporary folder holding ``tmp``, removed once the run has ended.
    """
    run = _RUN.get()
    if run is None:
        return False
    run.staged.append((tmp, target, scratch))
    return True


def make_folder(path: PathLike) -> Path:
    """Create an output folder (and parents) if needed; inside a run, undone on failure."""
    folder = Path(path)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder}: exists and is not a folder")
    missing = []
    probe = folder
    while not probe.exists():
        missing.append(probe)
        probe = probe.parent
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create the folder ({exc.strerror})") from None
    run = _RUN.get()
    if run is not None:
        run.made += reversed(missing)
    return folder


def _commit(run: _Run) -> None:
    done: list[tuple[Path, Path | None]] = []  # (target, its previous version set aside)
    try:
        for tmp, target, _ in run.staged:
            old = None
            if os.path.lexists(target):
                old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old",
                                            dir=target.parent)) / "previous"
                os.replace(target, old)
            done.append((target, old))
            os.replace(tmp, target)
    except BaseException as exc:
        for target, old in reversed(done):  # put the previous versions back
            if os.path.lexists(target):
                _remove(target)
            if old is not None:
                os.replace(old, target)
                _remove(old.parent)
        _discard(run)
        if isinstance(exc, OSError):
            raise OutputError(f"{target}: cannot move the outputs into place "
                              f"({exc.strerror or exc}); nothing was changed") from exc
        raise
    for _, old in done:
        if old is not None:
            _remove(old.parent)
    run.made.clear()  # the folders stay
    _discard(run)  # only the scratch folders are left to remove


def _discard(run: _Run) -> None:
    for tmp, _, scratch in run.staged:
        _remove(tmp)
        if scratch is not None:
            _remove(scratch)
    run.staged.clear()
    for folder in reversed(run.made):
        with contextlib.suppress(OSError):
            folder.rmdir()  # only when empty: a user's file is never removed
    run.made.clear()


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path, ignore_errors=True)
    else:
        with contextlib.suppress(FileNotFoundError):
            path.unlink()
