"""Where tiles of pairs run: in this process, in local worker processes, or on a Dask cluster.

Every executor yields ``(tile_index, result)`` as tiles finish; the engine puts
results back in tile order, so the answer never depends on the executor.
"""

from __future__ import annotations

import gc
import multiprocessing
import os
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from typing import Any, Callable, Iterator, Protocol, Sequence

__all__ = ["Executor", "SerialExecutor", "ProcessExecutor", "make_executor"]

# Below this much work (pairs x rows) worker start-up costs more than it saves.
_PARALLEL_MIN_WORK = 2_000_000


class Executor(Protocol):
    """Runs ``fn`` on every task after ``initializer(*initargs)`` in each worker.

    An initializer may carry a ``release`` attribute (a callable without
    arguments) that frees the worker state it set up; an executor whose workers
    outlive the run calls it when the run ends. Executors never import the
    engine: what runs in a worker arrives as these callables.
    """

    parallelism: int

    def run(self, fn: Callable[[Any], Any], tasks: Sequence[Any], initializer: Callable[..., None],
            initargs: tuple, cancel: Callable[[], bool] | None = None) -> Iterator[tuple[int, Any]]: ...

    def close(self) -> None: ...


class SerialExecutor:
    """Runs every tile in the calling process, in order."""

    parallelism = 1

    def run(self, fn, tasks, initializer, initargs, cancel=None):
        initializer(*initargs)
        for index, task in enumerate(tasks):
            if cancel is not None and cancel():
                return
            yield index, fn(task)

    def close(self) -> None:
        pass


def _collecting_worker(initializer, *initargs) -> None:
    """A worker's start: its garbage collector on (a forked worker inherits the parent's
    setting, and the engine pauses the parent's collector while results arrive)."""
    gc.enable()
    initializer(*initargs)


class ProcessExecutor:
    """Local worker processes; the column data reaches each worker once, at start-up."""

    def __init__(self, workers: int) -> None:
        self.parallelism = max(1, int(workers))

    def run(self, fn, tasks, initializer, initargs, cancel=None):
        # fork shares the column data copy-on-write; elsewhere it is pickled once per worker.
        methods = multiprocessing.get_all_start_methods()
        ctx = multiprocessing.get_context("fork" if "fork" in methods else "spawn")
        pool = ProcessPoolExecutor(max_workers=self.parallelism, mp_context=ctx,
                                   initializer=_collecting_worker, initargs=(initializer, *initargs))
        pending: dict[Future, int] = {}
        next_task = 0
        try:
            # Keep a bounded queue so cancellation takes effect within a tile or two.
            while next_task < len(tasks) or pending:
                while next_task < len(tasks) and len(pending) < 2 * self.parallelism:
                    pending[pool.submit(fn, tasks[next_task])] = next_task
                    next_task += 1
                done, _ = wait(pending, timeout=0.5, return_when=FIRST_COMPLETED)
                if cancel is not None and cancel():
                    return
                for fut in done:
                    index = pending.pop(fut)
                    yield index, fut.result()
        finally:
            for fut in pending:
                fut.cancel()
            pool.shutdown(wait=True, cancel_futures=True)

    def close(self) -> None:
        pass


def make_executor(*, workers: int | None = None, cluster: str | None = None, n_tasks: int = 0,
                  n_rows: int = 0, resamples: int = 0) -> Executor:
    """The executor for a run: Dask when a cluster address is given, else local."""
    if cluster:
        from .dask_executor import DaskExecutor

        return DaskExecutor(cluster)
    workers = workers or os.cpu_count() or 1
    # each permutation resample costs about as much as the pair's statistic itself
    work = n_tasks * max(n_rows, 1) * (1 + max(resamples, 0))
    if workers <= 1 or work < _PARALLEL_MIN_WORK or n_tasks < 2:
        return SerialExecutor()
    return ProcessExecutor(min(workers, n_tasks))
