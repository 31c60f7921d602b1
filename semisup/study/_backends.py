"""Where cells run: in this process, a local process pool, or a Dask distributed cluster.

Every backend takes the shared :class:`CellContext` once (process-pool initializer / Dask
scatter), runs :func:`run_cell` on each cell, and hands each finished row back to the
coordinator's ``on_result`` as it arrives; only the coordinator writes the store. The
feature matrices travel as the paths of their shared files (study/_shared.py) when they are
such files and the workers share this machine's disk (the local pool, ``local-cluster``),
and are opened memory-mapped there: one copy in memory whatever the number of workers.

Interrupting the coordinator (Ctrl-C) stops the workers and releases the pool's queues and
locks: the workers ignore SIGINT, and the coordinator cancels the cells not yet started and
ends the workers (:func:`stop_pool`).
"""

from __future__ import annotations

import contextlib
import dataclasses
import logging
import os
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from typing import Any

from .._errors import ConfigError
from ._cell import Cell, CellContext, run_cell
from ._shared import open_shared, shared_paths

__all__ = ["exit_with_parent", "ignore_interrupts", "run_cells", "stop_pool",
           "terminate_as_interrupt"]

log = logging.getLogger(__name__)

_WORKER_CTX: CellContext | None = None


def _one_thread() -> None:
    """One BLAS / torch thread per worker: parallelism comes from running cells side by side."""
    for var in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        os.environ[var] = "1"  # read by torch and BLAS when they load in this worker
    torch = sys.modules.get("torch")
    if torch is not None:
        torch.set_num_threads(1)


def _dumps(obj: Any) -> bytes:
    try:
        import cloudpickle

        return cloudpickle.dumps(obj)
    except ImportError:  # pragma: no cover
        import pickle

        return pickle.dumps(obj)


#: Seconds between a worker's checks that its coordinator is still alive.
PARENT_POLL_SECONDS = 1.0


def _exit_with_parent(parent_pid: int) -> None:
    """End this worker when the coordinator process ``parent_pid`` dies, even by ``kill -9``
    (which runs no clean-up in the coordinator, so nobody would stop the pool).

    On Linux the kernel sends SIGKILL on the parent's death (``prctl(PR_SET_PDEATHSIG)``);
    everywhere a daemon thread also watches the parent pid and exits once the worker has been
    handed to another parent.
    """
    if sys.platform.startswith("linux"):
        try:
            import ctypes
            import signal

            libc = ctypes.CDLL(None, use_errno=True)
            pr_set_pdeathsig = 1  # from <sys/prctl.h>
            libc.prctl(pr_set_pdeathsig, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # pragma: no cover - no prctl: the thread remains
            pass
    if os.getppid() != parent_pid:  # died before the line above took effect
        os._exit(1)

    def watch() -> None:
        while True:
            time.sleep(PARENT_POLL_SECONDS)
            if os.getppid() != parent_pid:
                os._exit(1)

    threading.Thread(target=watch, name="semisup-parent-watch", daemon=True).start()


exit_with_parent = _exit_with_parent


def ignore_interrupts() -> None:
    """A worker ignores Ctrl-C (SIGINT goes to the whole process group): its coordinator
    catches it and stops the pool, so no worker dies half-way through a queue operation."""
    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:  # pragma: no cover - not the main thread
        pass


@contextlib.contextmanager
def terminate_as_interrupt() -> Iterator[None]:
    """While a pool runs, SIGTERM (``kill``, ``timeout``, a job scheduler) stops the study as
    Ctrl-C does: the pool is stopped and its queues released, instead of the coordinator
    dying at once and leaving its workers and their semaphores behind ("leaked semaphore
    objects"). Only in the main thread and where SIGTERM still has its default action."""
    if threading.current_thread() is not threading.main_thread() or \
            signal.getsignal(signal.SIGTERM) is not signal.SIG_DFL:
        yield
        return

    def interrupt(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt(f"signal {signum}")

    signal.signal(signal.SIGTERM, interrupt)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)


def stop_pool(pool: Any, futures: Iterable[Any] = ()) -> None:
    """Stop a process pool at once: cancel what has not started, end the workers, close the
    pool's queues (an interrupted coordinator leaves no worker and no semaphore behind)."""
    for fut in futures:
        fut.cancel()
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for proc in processes:
        if proc.is_alive():
            proc.terminate()
    pool.shutdown(wait=True, cancel_futures=True)
    for proc in processes:
        proc.join(timeout=5)


def _with_shared_features(ctx: CellContext) -> tuple[CellContext, dict[str, str] | None]:
    """``ctx`` without its feature matrices and their files' paths, when every one is a
    shared file; else ``ctx`` itself and None."""
    paths = shared_paths(ctx.features)
    if paths is None:
        return ctx, None
    return dataclasses.replace(ctx, features={}), paths


def _attach_features(ctx: CellContext, paths: dict[str, str] | None) -> CellContext:
    if paths:
        ctx.features = {key: open_shared(path) for key, path in paths.items()}
    return ctx


def _init_worker(payload: bytes, parent_pid: int | None = None) -> None:
    import pickle

    global _WORKER_CTX
    if parent_pid is not None:
        _exit_with_parent(parent_pid)
    ignore_interrupts()
    _one_thread()
    loaded = pickle.loads(payload)
    _WORKER_CTX = _attach_features(*loaded) if isinstance(loaded, tuple) else loaded


def make_pool(jobs: int, payload: bytes):
    """A spawn-started process pool whose workers load ``payload`` (a pickled CellContext)
    once and exit when this process dies."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    # spawn: clean workers (no inherited OpenMP / torch thread state from the coordinator).
    return ProcessPoolExecutor(
        max_workers=jobs, mp_context=mp.get_context("spawn"),
        initializer=_init_worker, initargs=(payload, os.getpid()),
    )


#: The context a Dask worker opened from its shared files, by the files' paths.
_DASK_CTX: dict[Any, CellContext] = {}


def _run_shipped(shipped: tuple[CellContext, dict[str, str] | None], cell: Cell
                 ) -> dict[str, Any]:
    ctx, paths = shipped
    if paths:
        key = tuple(sorted(paths.items()))
        if key not in _DASK_CTX:
            _DASK_CTX.clear()
            _DASK_CTX[key] = _attach_features(dataclasses.replace(ctx), paths)
        ctx = _DASK_CTX[key]
    return run_cell(ctx, cell)


def _run_in_worker(cell: Cell) -> dict[str, Any]:
    assert _WORKER_CTX is not None, "worker started without its context"
    return run_cell(_WORKER_CTX, cell)


def _run_serial(ctx: CellContext, cells: list[Cell], on_result: Callable[[dict], None]) -> None:
    """In this process, with the same one-thread limits as a worker (same numbers, and tiny
    fits are faster without BLAS threads)."""
    torch = sys.modules.get("torch")
    before = torch.get_num_threads() if torch is not None else None
    if torch is not None:
        torch.set_num_threads(1)
    try:
        for cell in cells:
            on_result(run_cell(ctx, cell))
    finally:
        if torch is not None:
            torch.set_num_threads(before)


def _run_pool(
    ctx: CellContext, cells: list[Cell], jobs: int, on_result: Callable[[dict], None]
) -> None:
    from concurrent.futures import as_completed

    with terminate_as_interrupt():
        pool = make_pool(jobs, _dumps(_with_shared_features(ctx)))
        futures = []
        try:
            futures = [pool.submit(_run_in_worker, cell) for cell in cells]
            for fut in as_completed(futures):
                on_result(fut.result())
            pool.shutdown(wait=True)
        except BaseException:
            stop_pool(pool, futures)
            raise


def _run_dask(
    ctx: CellContext, cells: list[Cell], cluster: Any, jobs: int,
    on_result: Callable[[dict], None],
) -> None:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise ConfigError(
            "--cluster needs dask.distributed; install it with pip install 'semisup[cluster]'"
        ) from None
    own_cluster = own_client = None
    if isinstance(cluster, Client):
        client = cluster
    elif cluster == "local-cluster":
        own_cluster = LocalCluster(n_workers=jobs, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
        client = own_client = Client(own_cluster)
    elif isinstance(cluster, str):
        try:
            client = own_client = Client(cluster, timeout="20s")
        except OSError as exc:
            raise ConfigError(
                f"cannot reach the Dask scheduler at {cluster!r} ({exc}); check the address "
                "or use --cluster local-cluster"
            ) from None
    else:
        raise ConfigError(
            f"cluster must be an address, 'local-cluster' or a Client; got {cluster!r}"
        )
    try:
        client.run(_one_thread)
        # Workers on this machine open the shared feature files; a remote cluster gets the
        # matrices themselves, shipped once to every worker.
        shipped = _with_shared_features(ctx) if own_cluster is not None else (ctx, None)
        ctx_future = client.scatter(shipped, broadcast=True)
        futures = [client.submit(_run_shipped, ctx_future, cell, pure=False) for cell in cells]
        for fut in as_completed(futures):
            on_result(fut.result())
    finally:
        if own_client is not None:
            own_client.close()
        if own_cluster is not None:
            own_cluster.close()


def run_cells(
    ctx: CellContext,
    cells: Iterable[Cell],
    on_result: Callable[[dict], None],
    *,
    jobs: int = 1,
    cluster: Any = None,
) -> None:
    """Run ``cells`` and call ``on_result(row)`` in this process as each one finishes."""
    cells = list(cells)
    if not cells:
        return
    if cluster is not None:
        _run_dask(ctx, cells, cluster, jobs, on_result)
    elif jobs <= 1 or len(cells) == 1:
        _run_serial(ctx, cells, on_result)
    else:
        _run_pool(ctx, cells, min(jobs, len(cells)), on_result)
