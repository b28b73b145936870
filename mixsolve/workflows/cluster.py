"""Run mixsolve's dask computations: on which scheduler, with what progress report.

mixsolve builds lazy dask graphs (``unmix`` on dask-backed spectra, :func:`write_cube`)
and leaves the running to dask: its threaded scheduler by default, a local
dask.distributed cluster of worker processes (``workers=N``), or an existing cluster
(``scheduler="tcp://host:8786"``). dask and distributed are imported only when used
(the optional ``scale`` extra). Nothing here prints unless handed a stream for the
progress bar.
"""

from __future__ import annotations

import contextlib
import importlib.util
import logging
from collections.abc import Iterator, Sequence
from typing import Any, TextIO

from mixsolve.errors import InputError
from mixsolve.io.outputs import ctrl_c_ignored
from mixsolve.spectra import check_number

#: Seconds a computation must run before its progress bar appears ("long runs").
PROGRESS_AFTER_S = 1.0


def require_scale(modules: Sequence[str], needed_by: str) -> None:
    """Refuse in one line when modules of the ``scale`` extra are not installed.

    ``needed_by`` starts the message: "cube files and dask runs need", "the cube demo
    needs"; checked without importing (dask and zarr load slowly).

    Raises
    ------
    InputError
        Naming the missing modules and the extra to install.
    """
    missing = [name for name in modules if importlib.util.find_spec(name) is None]
    if missing:
        raise InputError(f"{needed_by} {' and '.join(missing)}, which "
                         f"{'are' if len(missing) > 1 else 'is'} not installed; install the "
                         "scale extra: pip install 'mixsolve[scale]'")


def _require(module: str) -> Any:
    try:
        return __import__(module, fromlist=["_"])
    except ImportError:
        raise InputError(f"{module} is not installed; install mixsolve's scale extra: "
                         "pip install 'mixsolve[scale]'") from None


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, workers: int | None = None) -> Iterator[Any]:
    """Connect to a dask.distributed cluster, start a local one, or neither.

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``tcp://10.0.0.5:8786``); the cluster's workers
        must see the input and output paths (a shared file system or object store).
    workers : int, optional
        Start a local cluster of this many single-threaded worker processes on the
        loopback interface (127.0.0.1), for the length of the ``with`` block.

    Yields
    ------
    distributed.Client or None
        None without ``scheduler`` or ``workers``: dask's default threaded scheduler.

    Raises
    ------
    InputError
        Both given, a worker count below 1, an unreachable scheduler, or distributed not
        installed.
    """
    if scheduler is not None and workers is not None:
        raise InputError("give either a scheduler address or a number of workers, not both")
    if scheduler is None and workers is None:
        yield None
        return
    distributed = _require("distributed")
    if workers is not None:
        workers = int(check_number(workers, "workers", low=1, integer=True))
        # silence_logs: a failing task (e.g. an infinite reading) is raised here, where
        # the command line turns it into one line; the workers would also log it, with
        # a traceback, on the same terminal
        # workers inherit SIGINT ignored: Ctrl-C at the terminal reaches every process of
        # the group, and only this one answers it (one line, exit 130), closing the cluster
        with ctrl_c_ignored():
            cluster = distributed.LocalCluster(n_workers=int(workers), threads_per_worker=1,
                                               processes=True, host="127.0.0.1",
                                               dashboard_address=None,
                                               silence_logs=logging.CRITICAL)
        with cluster, distributed.Client(cluster) as client:
            yield client
        return
    try:
        client = distributed.Client(scheduler, timeout=10)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"scheduler {scheduler}: cannot connect ({exc.__class__.__name__}: "
                         f"{' '.join(str(exc).split())[:120]})") from None
    with client:
        yield client


def compute(obj: Any, *, client: Any = None, progress: TextIO | None = None) -> Any:
    """Compute a dask collection or delayed object, optionally drawing a progress bar.

    Parameters
    ----------
    obj : dask collection, delayed, or an xarray object holding dask arrays
    client : distributed.Client, optional
        Run on this cluster; default the current dask scheduler.
    progress : text stream, optional
        Where the progress bar goes (the CLI passes stderr); it appears only when the
        computation lasts more than ``PROGRESS_AFTER_S`` seconds (local scheduler) or at
        once (distributed). None: no bar.

    Returns
    -------
    The computed object (``dask.compute(obj)[0]``).
    """
    dask = _require("dask")
    from mixsolve.solve.block import one_blas_thread

    labelled = hasattr(obj, "compute") and hasattr(obj, "dims")  # an xarray object
    if client is None:
        bar: Any = contextlib.nullcontext()
        if progress is not None:
            from dask.diagnostics import ProgressBar

            bar = ProgressBar(minimum=PROGRESS_AFTER_S, dt=0.5, out=progress)
        # dask's threads run the chunks' BLAS-calling code side by side: BLAS on one thread
        # for the whole run (mixsolve.solve.block.one_blas_thread)
        with bar, one_blas_thread():
            # xarray objects compute through their own method: dask.compute() on a whole
            # Dataset can lose graph keys when one variable derives from another through
            # xarray arithmetic (xarray issue 11329); unmix results avoid that, objects a
            # caller derives from them may not
            return obj.compute() if labelled else dask.compute(obj)[0]
    running = obj.persist() if labelled else client.compute(obj)
    if progress is not None:
        from distributed import progress as draw

        # distributed's text bar writes to sys.stdout; send it where it was asked to go
        with contextlib.redirect_stdout(progress):
            draw(running)
            progress.write("\n")
    return running.compute() if labelled else running.result()
