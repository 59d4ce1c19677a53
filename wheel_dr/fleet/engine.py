"""The Dask engine: a LocalCluster of worker processes or a running scheduler, tasks with progress and retries.

``open_client('local', n)`` starts a ``distributed.LocalCluster`` of ``n`` single-threaded worker
processes on 127.0.0.1 (no dashboard); ``open_client('tcp://HOST:PORT')`` connects to a scheduler
started with ``dask scheduler`` (workers with ``dask worker tcp://HOST:PORT``; they must see the
same paths). ``run_tasks`` submits one task per item and yields results as they complete: a worker
that dies has its tasks rescheduled by Dask (up to its ``allowed-failures``), an exception of a
task is retried ``retries`` times and then handed back, Ctrl-C cancels every future.
"""
from __future__ import annotations

import contextlib
import logging
import warnings
from typing import Any, Callable, Iterator, Sequence

from ..core.errors import InputError, WheelDrError

__all__ = ["open_client", "run_tasks", "map_ordered", "check_scheduler", "TaskFailure", "LOCAL"]

LOCAL = "local"
CONNECT_TIMEOUT_S = 20


class TaskFailure:
    """A task that failed for good (after Dask's retries): its index and the exception's text."""

    def __init__(self, index: int, error: str, exc: BaseException | None = None) -> None:
        self.index = index
        self.error = error
        self.exc = exc

    def __repr__(self) -> str:
        return f"TaskFailure({self.index}, {self.error!r})"


def check_scheduler(scheduler: str | None) -> str:
    """'local' or a scheduler address ('tcp://HOST:PORT', also tls:// and inproc://); anything else is a
    usage error with the fix."""
    s = LOCAL if scheduler in (None, "") else str(scheduler)
    if s == LOCAL or "://" in s:
        return s
    raise InputError(f"--scheduler '{s}' is neither 'local' nor a scheduler address; give 'local' or "
                     "tcp://HOST:PORT of a running 'dask scheduler'.")


@contextlib.contextmanager
def open_client(scheduler: str | None = LOCAL, workers: int | None = None) -> Iterator[Any]:
    """A connected ``distributed.Client`` (see the module docstring); the cluster it started, if any,
    is closed on exit."""
    from distributed import Client, LocalCluster
    address = check_scheduler(scheduler)
    # the workers' own logs are noise on a terminal; errors still come back with the futures
    for name in ("distributed", "distributed.worker", "distributed.nanny", "distributed.scheduler"):
        logging.getLogger(name).setLevel(logging.ERROR)
    if address == LOCAL:
        from ..runs import default_jobs
        n = default_jobs() if workers is None else int(workers)
        if n < 1:
            raise InputError(f"--workers {n} is below 1; give the number of worker processes (default: the CPUs).")
        with warnings.catch_warnings():   # "port 8787 in use, another one taken": harmless, not for the user
            warnings.filterwarnings("ignore", message=".*already in use", category=UserWarning)
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1",
                                   dashboard_address=None, silence_logs=logging.ERROR)
        try:
            with Client(cluster) as client:
                yield client
        finally:
            cluster.close()
        return
    try:
        client = Client(address, timeout=CONNECT_TIMEOUT_S)
    except (OSError, TimeoutError) as exc:
        raise InputError(f"no Dask scheduler answers at {address} ({type(exc).__name__}); start one with "
                         f"'dask scheduler' and its workers with 'dask worker {address}', or use --scheduler "
                         "local.") from None
    try:
        if workers:
            client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
        yield client
    finally:
        client.close()


def run_tasks(client: Any, fn: Callable, items: Sequence[Any], *, retries: int = 2,
              on_done: Callable[[int, Any], None] | None = None) -> Iterator[tuple[int, Any]]:
    """Submit ``fn(item)`` for every item and yield (index, result) in completion order; a task whose
    exception survives ``retries`` yields (index, TaskFailure). ``on_done`` is called likewise. On any
    exit before the end (Ctrl-C, an error in the caller) the remaining futures are cancelled."""
    from distributed import as_completed
    futures = [client.submit(fn, item, pure=False, retries=retries) for item in items]
    index = {f.key: i for i, f in enumerate(futures)}
    finished = False
    try:
        for fut in as_completed(futures):
            i = index[fut.key]
            try:
                result = fut.result()
            except Exception as exc:      # the task's own error after its retries, or KilledWorker
                result = TaskFailure(i, f"{type(exc).__name__}: {str(exc).strip()[:200]}", exc)
            fut.release()
            if on_done is not None:
                on_done(i, result)
            yield i, result
        finished = True
    finally:
        if not finished:
            with contextlib.suppress(Exception):
                client.cancel(futures, force=True)


def map_ordered(fn: Callable, items: Sequence[Any], scheduler: str | None = LOCAL, workers: int | None = None,
                progress: str | None = None) -> list[Any]:
    """``[fn(item) for item in items]`` on the cluster named by ``scheduler``, in item order; a failed
    task raises its exception's text as an InputError (for the compare / calibrate commands)."""
    from ..runs import Progress
    out: list[Any] = [None] * len(items)
    bar = Progress(len(items), progress) if progress else None
    try:
        with open_client(scheduler, workers) as client:
            for i, res in run_tasks(client, fn, items, retries=0):
                if isinstance(res, TaskFailure):
                    if isinstance(res.exc, WheelDrError):
                        raise res.exc
                    raise InputError(f"a task failed on the cluster ({res.error}).")
                out[i] = res
                if bar:
                    bar.step(str(i))
    finally:
        if bar:
            bar.close()
    return out

