"""Run many independent tasks (a study's campaigns) here, in a process pool or on a dask cluster.

:func:`map_tasks` calls ``func(item)`` for every item and returns the results in the items'
order. Whatever goes wrong with one item -- an exception in ``func``, a worker process that
dies, a dask worker lost -- becomes ``fail(item, reason)`` for that item alone; the others go
on, and nothing waits forever:

* ``engine="local"``, ``workers=1``: a loop in this process.
* ``engine="local"``, ``workers=N``: a ``concurrent.futures.ProcessPoolExecutor`` of N spawned
  processes (one BLAS thread each). A worker that dies breaks the pool; the items it left
  unfinished are run again one at a time, each in a fresh process, and an item that kills its
  process again is reported as failed.
* ``engine="dask"``: one task per item on the scheduler at ``scheduler`` (an address) or named
  by ``scheduler_file``. A worker imports fringe and compiles (or loads from its cache,
  :mod:`fringe.demodulate.kernel_cache`) the numba kernel once, at its first task; later tasks
  on it reuse the compiled code. Results come back as they finish.

dask is imported only for ``engine="dask"``; its types never leave this module.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import uuid
from collections.abc import Callable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool

from fringe.errors import ConfigError, InputFileError

__all__ = ["SCHEDULER_TIMEOUT_S", "connect", "map_tasks"]

#: Seconds to wait for a dask scheduler before giving up.
SCHEDULER_TIMEOUT_S = 10.0
#: seconds to wait for each ended worker process and for the pool's thread after an interrupt
STOP_JOIN_S = 10.0

#: What a worker process that ended abruptly is reported as.
WORKER_LOST = ("the worker process ended abruptly (killed, out of memory or crashed) while "
               "running this campaign, twice")

_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def map_tasks(func: Callable, items: Sequence, fail: Callable, *, engine: str = "local",
              workers: int = 1, scheduler=None, scheduler_file=None, progress=None,
              timeout_s: float = SCHEDULER_TIMEOUT_S) -> list:
    """``[func(item) for item in items]``, on the chosen engine (module docstring).

    Parameters
    ----------
    func : callable
        A module-level function (picklable), item -> result.
    items : sequence
        Picklable inputs.
    fail : callable
        ``fail(item, reason)`` -> the result to keep for an item that failed; ``reason`` is the
        exception, or a string when the worker itself was lost.
    engine : {"local", "dask"}
    workers : int
        Local engine: processes (1: this process).
    scheduler : str, optional
        dask scheduler address.
    scheduler_file : str, optional
        dask scheduler file (instead of ``scheduler``).
    progress : callable, optional
        ``progress(done, total)`` after each item.
    timeout_s : float
        Seconds to wait for the dask scheduler.

    Returns
    -------
    list
        One result per item, in the items' order.
    """
    items = list(items)
    tick = _ticker(progress, len(items))
    if engine == "dask":
        return _dask(func, items, fail, scheduler, scheduler_file, tick, timeout_s)
    if workers <= 1 or len(items) <= 1:
        out = []
        for item in items:
            try:
                out.append(func(item))
            except Exception as exc:  # noqa: BLE001 -- one item's failure is its result
                out.append(fail(item, exc))
            tick()
        return out
    return _pool(func, items, fail, workers, tick)


def _ticker(progress, total):
    done = [0]

    def tick():
        done[0] += 1
        if progress is not None:
            progress(done[0], total)
    return tick


@contextlib.contextmanager
def _one_thread_per_process():
    """Set the BLAS thread variables to 1 (unless set) for the processes started meanwhile."""
    old = {k: os.environ.get(k) for k in _THREAD_VARS}
    for k in _THREAD_VARS:
        os.environ.setdefault(k, "1")
    try:
        yield
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _pool_round(func, items, indices, fail, workers, out, tick) -> list[int]:
    """Run ``items[i]`` for i in ``indices`` in one pool; return the indices a broken pool lost."""
    lost = []
    ctx = multiprocessing.get_context("spawn")
    pool = ProcessPoolExecutor(workers, mp_context=ctx)
    try:
        with _one_thread_per_process():          # the workers start at the submissions
            futures = {pool.submit(func, items[i]): i for i in indices}
        for fut in as_completed(futures):
            i = futures[fut]
            exc = fut.exception()
            if isinstance(exc, BrokenProcessPool):
                lost.append(i)
                continue
            out[i] = fail(items[i], exc) if exc is not None else fut.result()
            tick()
    except BaseException:             # an interrupt: drop the queue, end the workers now
        _stop(pool)
        raise
    pool.shutdown(wait=True)
    return sorted(lost)


def _stop(pool: ProcessPoolExecutor) -> None:
    """Cancel what is queued and terminate the worker processes (no waiting for campaigns).

    The processes and the pool's management thread are taken before ``shutdown``, which
    forgets them; after the workers are ended the thread sees the broken pool and is joined, so
    no thread of the pool outlives the call (it would keep the interpreter from exiting).
    """
    processes = list((getattr(pool, "_processes", None) or {}).values())
    manager = getattr(pool, "_executor_manager_thread", None)
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        with contextlib.suppress(OSError, AttributeError, ValueError):
            proc.terminate()
    for proc in processes:
        with contextlib.suppress(OSError, AttributeError, ValueError, AssertionError):
            proc.join(STOP_JOIN_S)
    if manager is not None:
        manager.join(STOP_JOIN_S)


def _pool(func, items, fail, workers, tick) -> list:
    out: list = [None] * len(items)
    lost = _pool_round(func, items, range(len(items)), fail, min(workers, len(items)), out,
                       tick)
    for i in lost:                    # each alone: an item that kills its process is found
        if _pool_round(func, items, [i], fail, 1, out, tick):
            out[i] = fail(items[i], WORKER_LOST)
            tick()
    return out


def connect(scheduler=None, scheduler_file=None, timeout_s: float = SCHEDULER_TIMEOUT_S):
    """A ``distributed.Client`` of the scheduler, or a one-line error within ``timeout_s``.

    Raises
    ------
    ConfigError
        dask is not installed, or the scheduler cannot be reached in time.
    InputFileError
        ``scheduler_file`` does not exist.
    """
    try:
        from distributed import Client
    except ImportError:
        raise ConfigError("engine='dask': needs the 'dask' extra (pip install "
                          "'fringe[dask]')") from None
    if scheduler_file is not None:
        if not os.path.isfile(scheduler_file):
            raise InputFileError(scheduler_file, "file", "expected an existing dask scheduler "
                                 "file (written by the dask scheduler)")
        where, kw = f"the scheduler of {scheduler_file}", {"scheduler_file": scheduler_file}
    else:
        where, kw = f"a dask scheduler at {scheduler!r}", {"address": scheduler}
    try:
        return Client(timeout=timeout_s, **kw)
    except (OSError, TimeoutError, ValueError) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        if len(reason) > 160:
            reason = reason[:157] + "..."
        raise ConfigError(f"scheduler=ADDRESS: cannot reach {where} within {timeout_s:g} s "
                          f"({reason}); check the address and that the scheduler is "
                          "running") from None


def _dask(func, items, fail, scheduler, scheduler_file, tick, timeout_s) -> list:
    from distributed import Client
    from distributed import as_completed as dask_completed

    own = not isinstance(scheduler, Client)
    client = connect(scheduler, scheduler_file, timeout_s) if own else scheduler
    out: list = [None] * len(items)
    token = uuid.uuid4().hex[:12]
    try:
        futures = {client.submit(func, item, pure=False, key=f"fringe-study-{token}-{i}"): i
                   for i, item in enumerate(items)}
        for fut in dask_completed(list(futures)):
            i = futures[fut]
            try:
                out[i] = fut.result()
            except Exception as exc:  # noqa: BLE001 -- a lost worker or a task's error
                out[i] = fail(items[i], exc)
            fut.release()
            tick()
    finally:
        if own:
            client.close()
    return out
