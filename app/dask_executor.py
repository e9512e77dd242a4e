"""Run tiles of pairs on an existing Dask cluster (``--cluster tcp://HOST:8786``).

How the work reaches the workers:

- The column data goes to the cluster once per analysis, inside a worker
  plugin. The scheduler keeps the plugin and hands it to every worker that is
  connected now and to every worker that joins later (a replacement started by
  a nanny after a crash, or a worker added mid-run), so a tile rescheduled
  after a worker died always finds the data where it lands.
- Each tile of pairs is one task with a stable key unique to the run. The
  task runs the engine's initializer in the worker process the first time a
  tile of that analysis arrives there, then the engine's tile function, which
  reads the engine's module-level worker state exactly as in a local worker
  process.
- Results come back as tiles finish, with the tile index, and the engine puts
  them back in order; per-pair seeds come from the analysis seed and the pair
  names, so the pair table is bit for bit the one a local run gives.

Several analyses may share a cluster (the web app runs up to two at once). The
engine's worker state is one global per process, so a worker process serves
one analysis at a time: a tile of another analysis waits until the tiles in
flight finish, then re-initialises the state for its own analysis.
"""

from __future__ import annotations

import collections
import hashlib
import threading
import uuid
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

from . import __version__, config
from .errors import SettingsError

try:  # dask is an optional extra: pip install "pairlens[cluster]"
    import distributed
    from distributed.diagnostics.plugin import WorkerPlugin as _PluginBase
except ImportError:  # pragma: no cover - exercised only without the extra
    distributed = None
    _PluginBase = object

__all__ = ["ClusterUnavailable", "DaskExecutor", "worker_tile_counts"]

# How often the result loop wakes to poll the cancel callback.
_CANCEL_POLL_SECONDS = 0.2
# Worker plugins carrying an analysis' data are named PREFIX + run id + "@" + client id.
_PLUGIN_PREFIX = "pairlens-data-"


class ClusterUnavailable(SettingsError):
    """The Dask cluster given with ``--cluster`` cannot be used; the message says why."""


# Worker side ----------------------------------------------------------------

class _WorkerRuns:
    """Analyses whose data reached this worker process, and which one owns the engine's state."""

    def __init__(self) -> None:
        self._cond = threading.Condition()
        self._data: dict[str, tuple[Callable[..., None], tuple]] = {}
        self._active: str | None = None
        self._busy = 0
        self._last_release: Callable[[], None] | None = None
        self.tiles_run: collections.Counter[str] = collections.Counter()

    def add(self, run_id: str, initializer: Callable[..., None], initargs: tuple) -> None:
        with self._cond:
            self._data[run_id] = (initializer, initargs)

    def remove(self, run_id: str) -> None:
        with self._cond:
            entry = self._data.pop(run_id, None)
            if entry is not None:
                self._last_release = getattr(entry[0], "release", None)
            if self._active == run_id and self._busy == 0:
                self._release()

    def enter(self, run_id: str) -> None:
        with self._cond:
            # A tile of another analysis is running on this process: its state must stay put.
            while self._active != run_id and self._busy > 0:
                self._cond.wait()
            if self._active != run_id:
                if run_id not in self._data:
                    # Raising lets Dask retry the tile, by then the plugin has arrived.
                    raise RuntimeError(f"the data of analysis {run_id} has not reached this worker yet")
                initializer, initargs = self._data[run_id]
                initializer(*initargs)
                self._active = run_id
            self._busy += 1

    def leave(self, run_id: str) -> None:
        with self._cond:
            self._busy -= 1
            self.tiles_run[run_id] += 1
            if self._busy == 0:
                if run_id not in self._data:  # the analysis ended while this tile ran
                    self._release()
                self._cond.notify_all()

    def _release(self) -> None:
        # The initializer's ``release`` (the executor protocol, app/executors.py) drops the
        # tiles' reference to the columns so a long-lived worker does not keep the last
        # analysis' data in memory; the executor needs no import of the engine for it.
        entry = self._data.get(self._active) if self._active is not None else None
        release = getattr(entry[0], "release", None) if entry is not None else self._last_release
        if release is not None:
            release()
        self._active = None


_RUNS = _WorkerRuns()


class _AnalysisData(_PluginBase):
    """Carries one analysis' initializer and column data to every current and future worker."""

    idempotent = False

    def __init__(self, run_id: str, initializer: Callable[..., None], initargs: tuple) -> None:
        self.run_id = run_id
        self.initializer = initializer
        self.initargs = initargs

    def setup(self, worker) -> None:
        _RUNS.add(self.run_id, self.initializer, self.initargs)

    def teardown(self, worker) -> None:
        _RUNS.remove(self.run_id)


def _run_tile_on_worker(run_id: str, fn: Callable[[Any], Any], tile: Any) -> Any:
    _RUNS.enter(run_id)
    try:
        return fn(tile)
    finally:
        _RUNS.leave(run_id)


def _source_fingerprint() -> str:
    # Equal version numbers do not mean equal code (editable installs, local patches); results
    # are only bit-for-bit equal when every process runs the same sources of the computation.
    root = Path(__file__).resolve().parent
    # every module whose code runs in a tile: the tiles' own, --ordered and --given rows, the matrix part's share
    files = [root / "__init__.py", root / "config.py", root / "engine.py", root / "tiles.py", root / "plan.py",
             root / "pairtable.py", root / "ordering.py", root / "given.py", root / "matrix_path.py",
             Path(__file__).resolve(),
             *(root / "core").rglob("*.py")]
    digest = hashlib.sha256()
    for path in sorted(set(files)):
        digest.update(path.relative_to(root).as_posix().encode() + b"\0" + path.read_bytes() + b"\0")
    return digest.hexdigest()[:16]


_SOURCE_FINGERPRINT = _source_fingerprint()  # at import, close to when the engine's code was loaded


def _worker_probe() -> dict:
    import os

    return {"version": __version__, "code": _SOURCE_FINGERPRINT, "pid": os.getpid()}


def _plugins_left_by_gone_clients(dask_scheduler) -> list[str]:
    # Runs on the scheduler. A pairlens process killed mid-run (SIGKILL, power loss) never
    # withdraws its data plugin; its name carries the client id, so the next run can.
    live = set(dask_scheduler.clients)
    return [name for name in dask_scheduler.worker_plugins
            if name.startswith(_PLUGIN_PREFIX) and name.partition("@")[2] not in live]


def worker_tile_counts() -> dict:
    """Tiles this worker process has run, per analysis (run on workers with ``client.run``)."""
    import os

    return {"pid": os.getpid(), "tiles": dict(_RUNS.tiles_run)}


# Client side ----------------------------------------------------------------

def _normalise_address(address: str) -> str:
    address = address.strip()
    if not address:
        raise ClusterUnavailable("--cluster needs a scheduler address such as tcp://127.0.0.1:8786")
    return address if "://" in address else f"tcp://{address}"


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


class DaskExecutor:
    """Tiles of pairs as tasks on the Dask cluster whose scheduler listens at ``address``.

    Parameters
    ----------
    address : str
        Scheduler address, e.g. ``tcp://10.0.0.5:8786`` (``tcp://`` is assumed
        when no protocol is given).
    timeout : float, optional
        Seconds to try reaching the scheduler, and then to wait for its first
        worker (default ``config.DASK_CONNECT_TIMEOUT_SECONDS`` and
        ``config.DASK_WORKER_WAIT_SECONDS``).
    retries : int, optional
        Retries of a tile whose task raised (default ``config.DASK_TASK_RETRIES``).
        A tile lost because its worker died is rescheduled by Dask itself.

    Raises
    ------
    ClusterUnavailable
        dask is not installed, the scheduler does not answer in time, it has no
        workers, or its workers cannot import this version of pairlens.
    """

    def __init__(self, address: str, *, timeout: float | None = None, retries: int | None = None) -> None:
        if distributed is None:
            raise ClusterUnavailable('--cluster needs dask.distributed: pip install "pairlens[cluster]"')
        self.address = _normalise_address(address)
        self.retries = config.DASK_TASK_RETRIES if retries is None else int(retries)
        connect_timeout = config.DASK_CONNECT_TIMEOUT_SECONDS if timeout is None else float(timeout)
        worker_timeout = config.DASK_WORKER_WAIT_SECONDS if timeout is None else float(timeout)
        self.last_run_id: str | None = None
        self._futures: list = []
        try:
            self.client = distributed.Client(self.address, timeout=connect_timeout, set_as_default=False)
        except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, bad address: all one message
            raise ClusterUnavailable(
                f"cannot reach the Dask scheduler at {self.address} within {connect_timeout:g} s "
                f"({type(exc).__name__}: {_one_line(exc)}); start one with 'dask scheduler' "
                "or check the address") from None
        try:
            self._check_workers(worker_timeout)
        except BaseException:
            self.client.close()
            raise

    def _check_workers(self, timeout: float) -> None:
        try:
            self.client.wait_for_workers(1, timeout=timeout)
        except Exception:  # noqa: BLE001 - dask raises its own TimeoutError
            raise ClusterUnavailable(
                f"the Dask scheduler at {self.address} has no workers after {timeout:g} s; "
                f"start some with 'dask worker {self.address}'") from None
        # The scheduler unpickles the task graph, so it needs pairlens as much as the workers do.
        try:
            answers = {"scheduler": self.client.run_on_scheduler(_worker_probe)}
            answers.update(self.client.run(_worker_probe))
        except Exception as exc:  # noqa: BLE001 - usually ModuleNotFoundError: No module named 'pairlens'
            raise ClusterUnavailable(
                f"the Dask cluster at {self.address} cannot run pairlens ({type(exc).__name__}: "
                f"{_one_line(exc)}); install pairlens on the scheduler and every worker: "
                'pip install "pairlens[cluster]"') from None
        versions = {a["version"] for a in answers.values()}
        if versions != {__version__}:
            raise ClusterUnavailable(
                f"the Dask cluster at {self.address} runs pairlens {', '.join(sorted(versions))}, "
                f"this machine runs {__version__}; install the same version everywhere")
        different = sorted(where for where, a in answers.items() if a["code"] != _SOURCE_FINGERPRINT)
        if different:
            raise ClusterUnavailable(
                f"pairlens {__version__} on {', '.join(different[:3])}{' ...' if len(different) > 3 else ''} "
                f"at {self.address} is not the same code as on this machine (its results would differ); "
                "install the same build everywhere and restart the workers")

    @property
    def parallelism(self) -> int:
        """Worker threads on the cluster now (at least 1)."""
        workers = self.client.scheduler_info(n_workers=-1).get("workers", {})
        return max(1, sum(int(w.get("nthreads", 1)) for w in workers.values()))

    def run(self, fn: Callable[[Any], Any], tasks: Sequence[Any], initializer: Callable[..., None],
            initargs: tuple, cancel: Callable[[], bool] | None = None) -> Iterator[tuple[int, Any]]:
        """Yield ``(tile_index, fn(tile))`` as tiles finish on the cluster."""
        if not tasks:
            return
        run_id = uuid.uuid4().hex[:16]
        self.last_run_id = run_id
        plugin_name = f"{_PLUGIN_PREFIX}{run_id}@{self.client.id}"
        self._withdraw_stale_plugins()
        futures: list = []
        try:
            try:
                self.client.register_plugin(_AnalysisData(run_id, initializer, initargs), name=plugin_name)
            except Exception as exc:  # noqa: BLE001 - a worker failed to unpack the data
                raise ClusterUnavailable(f"the Dask workers at {self.address} could not receive the data "
                                         f"({type(exc).__name__}: {_one_line(exc)})") from None
            keys = [f"pairlens-tile-{run_id}-{index}" for index in range(len(tasks))]
            futures = self.client.map(_run_tile_on_worker, [run_id] * len(tasks), [fn] * len(tasks),
                                      list(tasks), key=keys, retries=self.retries, pure=False)
            self._futures = futures
            index_of = {key: index for index, key in enumerate(keys)}
            finished = distributed.as_completed(futures, loop=self.client.loop, with_results=True,
                                                raise_errors=False)
            while not finished.is_empty():
                if cancel is not None and cancel():
                    return
                batch = finished.next_batch(block=False)
                if not batch:
                    with finished.thread_condition:
                        finished.thread_condition.wait(timeout=_CANCEL_POLL_SECONDS)
                    continue
                for future, result in batch:
                    if future.status == "error":
                        _, exc, tb = result
                        raise exc.with_traceback(tb)
                    if isinstance(result, BaseException):
                        if self.client.status != "running":
                            raise ClusterUnavailable(
                                f"lost the Dask scheduler at {self.address} during the analysis "
                                f"({type(result).__name__}); nothing was saved, run it again when "
                                "the cluster is back") from None
                        raise RuntimeError(f"tile {index_of[future.key]} was cancelled on the Dask cluster "
                                           f"at {self.address} by another client ({type(result).__name__})")
                    yield index_of[future.key], result
        finally:
            self._release(futures, plugin_name)

    def _withdraw_stale_plugins(self) -> None:
        try:
            for name in self.client.run_on_scheduler(_plugins_left_by_gone_clients):
                self.client.unregister_worker_plugin(name)
        except Exception:  # noqa: BLE001 - housekeeping; another client may have withdrawn it first
            pass

    def _release(self, futures: list, plugin_name: str) -> None:
        self._futures = []
        if self.client.status not in ("running", "connecting"):
            return
        try:
            if futures:
                self.client.cancel(futures)  # stops queued tiles; finished ones are just released
            self.client.unregister_worker_plugin(plugin_name)
        except Exception:  # noqa: BLE001 - cleanup after a lost scheduler must not hide the real error
            pass

    def close(self) -> None:
        if self._futures:
            try:
                self.client.cancel(self._futures)
            except Exception:  # noqa: BLE001
                pass
            self._futures = []
        self.client.close()

    def __enter__(self) -> "DaskExecutor":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
