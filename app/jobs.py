"""Background analyses: a queue in the server, one child process per running analysis.

The web server never computes a pair table itself. :class:`JobManager` keeps a
queue (at most ``config.MAX_CONCURRENT_ANALYSES`` run at once) and starts a
child process per analysis: a fresh interpreter running ``python -m pairlens.jobs``
(never a fork of the threaded server, and independent of the server's main
module). The child (:func:`run_job`) reads the
dataset's bytes from the store, calls :func:`pairlens.engine.run_analysis` with a
progress callback that writes to SQLite and a cancel callback that reads the
analysis's cancel flag, then computes per-pair verdicts within a time budget
and writes the results and the ``done`` status in one transaction.

States: ``queued -> running -> done | failed | cancelled``; ``interrupted``
for analyses whose server died (set at the next start-up) or that were still
running when the server shut down.

A cancel request sets a flag; the child stops at its next check (between
tiles). If it has not stopped after ``config.CANCEL_GRACE_SECONDS`` the
manager terminates it and records ``cancelled``.
"""

from __future__ import annotations

import math
import argparse
import os
import secrets
import select
import signal
import sqlite3
import subprocess
import sys
import threading
import time
import traceback

from typing import Callable


from . import config
from .store import Store, is_disk_full, process_start_time

__all__ = ["JobManager", "run_job", "verdict_labels"]

_CANCEL_GRACE = config.CANCEL_GRACE_SECONDS


def verdict_labels(table) -> dict:
    """The stored verdicts of an analysis: every pair's label from the engine (``run_analysis(verdicts=True)``).

    Returns ``{"labels": {"x\\0y": label}, "complete": True}``; keys are :func:`pairlens.payloads.pair_key`.
    """
    from .payloads import pair_key

    return {"labels": {pair_key(x, y): label for (x, y), label in table.verdicts.items()}, "complete": True}


def _page_cache(pair_table, verdicts: dict) -> tuple[dict | None, bytes | None]:
    """The analysis page's default figures and its pair table's arrays, built here so the server's
    first views are fast (without them the server builds both itself)."""
    pages = grid = None
    try:
        from .payloads import precompute_pages

        pages = precompute_pages(pair_table)
    except Exception:  # noqa: BLE001 - without the cache the server builds the figures itself
        traceback.print_exc()
    try:
        from .pairgrid import PairGrid

        grid = PairGrid.from_table(pair_table, verdicts.get("labels", {})).to_bytes()
    except Exception:  # noqa: BLE001 - the server builds the grid from the stored rows instead
        traceback.print_exc()
    return pages, grid


class _Throttle:
    """Calls through at most every ``interval`` seconds (the last value wins)."""

    def __init__(self, interval: float) -> None:
        self.interval = interval
        self.last = 0.0

    def ready(self) -> bool:
        now = time.monotonic()
        if now - self.last >= self.interval:
            self.last = now
            return True
        return False


def _retry_write(store: Store, write: Callable[[], object], *, attempts: int = 8, first_wait: float = 0.1):
    """Run a status write, retrying while the database is locked or the disk is full.

    On a full disk the workspace's reserve file is given up first, so the final status of an
    analysis can still be written (:meth:`Store.release_reserve`). Raises the last error.
    """
    wait = first_wait
    for attempt in range(attempts):
        try:
            return write()
        except (sqlite3.OperationalError, OSError) as exc:
            if is_disk_full(exc):
                store.release_reserve()
            if attempt == attempts - 1:
                raise
            time.sleep(wait)
            wait = min(wait * 2, 2.0)
    return None


def _kill_group(pid: int, sig: int = signal.SIGKILL) -> None:
    """Signal a process and the pool workers it forked (its own process group when it leads one)."""
    try:
        if os.getpgid(pid) == pid:
            os.killpg(pid, sig)
        else:
            os.kill(pid, sig)
    except (ProcessLookupError, PermissionError):
        pass


def stop_proven_worker(pid: int | None, started: int | None) -> bool:
    """SIGKILL an analysis process of a dead server, only when its pid still names the same process.

    ``started`` is the start time recorded when it claimed the analysis; a pid the kernel has
    given to another process since has another start time and is left alone.
    """
    if not pid or started is None or pid == os.getpid():
        return False
    if process_start_time(pid) != started:
        return False
    _kill_group(pid)
    return True


def _watch_parent(data_dir: str, analysis_id: str, parent: int, interval: float) -> None:
    """Child-side watchdog: when the server that started this process dies, record it and stop at once.

    Polled every ``interval`` seconds on a thread of its own, so a long tile cannot delay it.
    """
    def watch() -> None:
        while True:
            time.sleep(interval)
            if os.getppid() == parent:
                continue
            store = Store(data_dir)
            try:
                _retry_write(store, lambda: store.finish(
                    analysis_id, "interrupted", "the server stopped before this analysis finished; run it again"),
                    attempts=3)
            except Exception:  # noqa: BLE001 - the next server marks it; stopping matters more
                pass
            finally:
                store.close()
            _kill_group(os.getpid())
            os._exit(3)

    threading.Thread(target=watch, name="pairlens-parent-watch", daemon=True).start()


def run_job(data_dir: str, analysis_id: str, *, workers: int | None = None, cluster: str | None = None) -> str:
    """Run one queued analysis to its end in this process; returns the final status.

    Used as the child-process entry point, and directly by tests.
    """
    from .engine import AnalysisCancelled, AnalysisSettings, SettingsError, run_analysis
    from .ingest import IngestError, load_bytes

    store = Store(data_dir)
    try:
        if not store.claim(analysis_id, os.getpid(), process_start_time(os.getpid())):
            row = store.get_analysis(analysis_id)
            return row.status if row else "failed"
        row = store.get_analysis(analysis_id)
        assert row is not None
        def note_progress(*args, **kwargs) -> None:
            # progress is best effort: a full disk (or a busy database) must not fail the analysis;
            # only the final status write has to land, and it is retried (_retry_write)
            try:
                store.update_progress(*args, **kwargs)
            except sqlite3.OperationalError:
                pass

        cancel_throttle = _Throttle(0.2)
        cancel_state = {"flag": False, "orphaned": False}
        parent = os.getppid()

        def cancel() -> bool:
            if not cancel_state["flag"] and cancel_throttle.ready():
                # A server that died (kill -9) leaves us reparented: stop rather than compute for nobody.
                cancel_state["orphaned"] = os.getppid() != parent
                cancel_state["flag"] = cancel_state["orphaned"] or store.cancel_requested(analysis_id)
            return cancel_state["flag"]

        progress_throttle = _Throttle(0.25)

        def progress(fraction: float, seconds_left: float) -> None:
            if progress_throttle.ready() or fraction >= 1.0:
                left = seconds_left if math.isfinite(seconds_left) else None
                note_progress(analysis_id, fraction, left)

        try:
            dataset = store.get_dataset(row.dataset_id)
            if dataset is None:
                raise SettingsError("the dataset of this analysis is gone")
            note_progress(analysis_id, 0.0, None, phase="reading data")
            table = load_bytes(store.read_blob(dataset.sha256), dataset.name)
            from .kinds import settle
            from .ordering import check_served_order

            settings = settle(table, AnalysisSettings.from_dict(row.settings))  # column kinds (issue 18)
            check_served_order(table, settings)  # also checked at submit; kept for analyses queued before
            # time left from the up-front estimate until the first tile reports a measured one
            from .budget import estimate_work
            from .plan import plan_variables

            estimate = estimate_work(len(plan_variables(table.columns, settings)), len(settings.run_measures),
                                     table.n_rows, settings.permutations)
            note_progress(analysis_id, 0.0, estimate.seconds / max(1, workers or 1), phase="pairs")
            # every pair's verdict label is computed in the tiles, with the pair table
            pair_table = run_analysis(table.data, table.columns, settings, workers=workers, cluster=cluster,
                                      progress=progress, cancel=cancel, verdicts=True)
            verdicts = verdict_labels(pair_table)
            if cancel():
                raise AnalysisCancelled("analysis cancelled")
            from .pairrecords import pack_rows

            note_progress(analysis_id, 1.0, 0.0, phase="figures")
            pages, grid = _page_cache(pair_table, verdicts)
            records = pack_rows(pair_table.rows)
            saved = _retry_write(store, lambda: store.save_results(
                analysis_id, variables=list(pair_table.variables), records=records, verdicts=verdicts,
                seconds=pair_table.seconds, pages=pages, grid=grid))
            if not saved:
                _retry_write(store, lambda: store.finish(analysis_id, "cancelled"))
                return store.get_analysis(analysis_id).status  # type: ignore[union-attr]
            return "done"
        except AnalysisCancelled:
            if cancel_state["orphaned"]:
                _retry_write(store, lambda: store.finish(
                    analysis_id, "interrupted", "the server stopped before this analysis finished; run it again"))
                return "interrupted"
            _retry_write(store, lambda: store.finish(analysis_id, "cancelled"))
            return "cancelled"
        except (SettingsError, IngestError) as exc:
            _retry_write(store, lambda: store.finish(analysis_id, "failed", " ".join(str(exc).split())))
            return "failed"
        except Exception as exc:  # noqa: BLE001 - the user sees one line; the log keeps the traceback
            traceback.print_exc()
            if is_disk_full(exc):
                message = "the disk is full: free some space and run the analysis again"
            else:
                message = f"internal error: {type(exc).__name__}: {exc}"
            _retry_write(store, lambda: store.finish(analysis_id, "failed", message))
            return "failed"
    finally:
        store.close()


STANDBY = "-"
READY = "ready"


def _prepare() -> None:
    """What a standby process loads before it is given an analysis: the modules and compiled kernels."""
    from . import engine, export, ingest, payloads  # noqa: F401 - imported for their start-up cost
    from .budget import estimate_work  # noqa: F401
    from .plan import AnalysisSettings, plan_variables  # noqa: F401
    from .tiles import warm_kernels

    try:
        # the first read of a table pays for the parser's lazy set-up (1.8 s measured under load)
        ingest.load_bytes(b"a,b,c,d\n1,x,2024-01-01,0.5\n2,y,2024-01-02,\n3,z,2024-01-03,1.5\n", "warm.csv")
        warm_kernels(AnalysisSettings.from_options())  # the default measures; others compile when asked
    except Exception:  # noqa: BLE001 - the analysis compiles what it needs itself
        traceback.print_exc()


def is_disk_full_exit(returncode: int | None) -> bool:
    return returncode == _DISK_FULL_EXIT


_DISK_FULL_EXIT = 28  # ENOSPC's number: the child could not even write its final status


def _child_command(data_dir: str, analysis_id: str, workers: int | None, cluster: str | None) -> list[str]:
    cmd = [sys.executable, "-m", "pairlens.jobs", str(data_dir), analysis_id]
    if workers:
        cmd += ["--workers", str(int(workers))]
    if cluster:
        cmd += ["--cluster", cluster]
    return cmd


def _child_env() -> dict:
    # The child must import this very package, installed or run from a checkout.
    env = dict(os.environ)
    root = str(config.PROJECT_DIR)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


def _reap(proc: subprocess.Popen, timeout: float) -> None:
    try:
        proc.wait(timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        try:
            proc.wait(2.0)
        except subprocess.TimeoutExpired:
            pass


class JobManager:
    """The analysis queue of one server process.

    Parameters
    ----------
    store : Store
    max_concurrent : int
        Analyses running at once; the rest wait in ``queued``.
    workers : int, optional
        Worker processes each analysis may use (default: cores / max_concurrent).
    cluster : str, optional
        Dask scheduler address passed to the engine.
    standby : bool, optional
        Default ``config.STANDBY_CHILD``. Keep one child process started ahead (imports done, kernels loaded)
        whenever another analysis could start, and give it the next analysis.
    """

    def __init__(self, store: Store, *, max_concurrent: int = config.MAX_CONCURRENT_ANALYSES,
                 workers: int | None = None, cluster: str | None = None, poll_interval: float = 0.2,
                 on_done: Callable[[str], None] | None = None, standby: bool | None = None) -> None:
        self.store = store
        self.max_concurrent = max(1, int(max_concurrent))
        self.workers = workers or max(1, (os.cpu_count() or 1) // self.max_concurrent)
        self.cluster = cluster
        self.poll_interval = poll_interval
        self.on_done = on_done
        self.token = secrets.token_hex(8)
        self.interrupted_at_start: list[str] = []
        self._procs: dict[str, subprocess.Popen] = {}
        self._cancel_seen: dict[str, float] = {}
        self._wake = threading.Event()
        self._stop = threading.Event()
        self._lock = threading.Lock()
        self._thread: threading.Thread | None = None
        self._last_sweep = time.monotonic()
        # A child started ahead with the engine loaded, waiting for an analysis id on stdin:
        # an analysis then starts without the interpreter's and the libraries' start-up.
        self.standby = config.STANDBY_CHILD if standby is None else standby
        self._spare: subprocess.Popen | None = None
        self._spare_ready = False

    # Life cycle ---------------------------------------------------------------

    def start(self) -> None:
        self._owner_lock = self.store.hold_owner_lock(self.token)
        self.interrupted_at_start = self.sweep()
        self.store.remove_dead_owner_locks()
        self.store.remove_leftovers()
        self.store.ensure_reserve()
        self._thread = threading.Thread(target=self._loop, name="pairlens-jobs", daemon=True)
        self._thread.start()

    def shutdown(self, timeout: float = 5.0) -> None:
        """Stop the dispatcher; running analyses are terminated and marked ``interrupted``."""
        self._stop.set()
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout)
        self._stop_spare()
        with self._lock:
            procs = dict(self._procs)
            self._procs.clear()
        for aid, proc in procs.items():
            if proc.poll() is None:
                _kill_group(proc.pid, signal.SIGTERM)
        for aid, proc in procs.items():
            _reap(proc, timeout)
            try:
                _retry_write(self.store, lambda: self.store.finish(
                    aid, "interrupted", "the server stopped before this analysis finished; run it again"), attempts=3)
            except Exception:  # noqa: BLE001 - the next server marks it at start-up
                traceback.print_exc()
        for row in self.store.list_analyses(status=("queued",)):
            if row.owner_pid == os.getpid():
                self.store.finish(row.id, "interrupted", "the server stopped before this analysis started")
        self.store.release_owner_lock(self.token, getattr(self, "_owner_lock", None))
        self._owner_lock = None

    # Requests -----------------------------------------------------------------

    def submit(self, dataset_id: str, settings: dict):
        """Queue an analysis (``settings`` as from ``AnalysisSettings.to_dict``); returns its row."""
        row = self.store.create_analysis(dataset_id, settings, owner_pid=os.getpid(), owner_token=self.token)
        self._wake.set()
        return row

    def cancel(self, analysis_id: str):
        """Flag an analysis to stop; one that no live process runs any more is cancelled at once."""
        row = _retry_write(self.store, lambda: self.store.request_cancel(analysis_id))
        if row is not None and row.status == "running" and not self._has_live_process(row):
            _retry_write(self.store, lambda: self.store.finish(analysis_id, "cancelled"))
            row = self.store.get_analysis(analysis_id)
        self._wake.set()
        return row

    def _has_live_process(self, row) -> bool:
        with self._lock:
            if row.id in self._procs:
                return True
        if row.owner_token == self.token:
            return False  # ours, but not among our processes: it ended without a final write
        if self.store.owner_state(row.owner_token) == "alive":
            return True  # another live server runs it and will see the flag
        return process_start_time(row.worker_pid) is not None and \
            process_start_time(row.worker_pid) == row.worker_started

    def sweep(self) -> list[str]:
        """Analyses of servers that are gone become ``interrupted``; their proven workers are stopped.

        Every server on a workspace runs this every ``config.OWNER_SWEEP_SECONDS``, so the death of
        one is seen by the others without a restart (an owner is alive while it holds its lock).
        """
        workers: list = []
        changed = self.store.mark_interrupted(self.token, workers=workers)
        for pid, started in workers:
            stop_proven_worker(pid, started)
        return changed

    def running_ids(self) -> list[str]:
        with self._lock:
            return list(self._procs)

    # Dispatcher ---------------------------------------------------------------

    def _start_spare(self) -> None:
        try:
            self._spare = subprocess.Popen(
                _child_command(str(self.store.data_dir), STANDBY, self.workers, self.cluster),
                env=_child_env(), stdin=subprocess.PIPE, stdout=subprocess.PIPE, process_group=0)
            self._spare_ready = False
        except OSError:
            traceback.print_exc()
            self._spare = None

    def _spare_is_ready(self) -> bool:
        """True once the standby child has printed its ready line (read without blocking)."""
        spare = self._spare
        if spare is None or spare.poll() is not None:
            return False
        if not self._spare_ready and select.select([spare.stdout], [], [], 0)[0]:
            self._spare_ready = spare.stdout.readline().decode(errors="replace").strip() == READY  # type: ignore[union-attr]
        return self._spare_ready

    def _take_spare(self, analysis_id: str, measures) -> subprocess.Popen | None:
        """The standby child, now running ``analysis_id``; None when there is none to take.

        A child still loading is given the analysis when it loads exactly what the
        analysis needs (the default measures' kernels): it started before any fresh
        child could. For other measures it is stopped, since a fresh child loads only
        what they need (a cold kernel cache can take a minute under load).
        """
        ready = self._spare_is_ready()
        if not ready and tuple(measures or ()) != tuple(config.DEFAULT_MEASURES):
            self._stop_spare()
            return None
        spare, self._spare = self._spare, None
        if spare is None or spare.poll() is not None:
            return None
        try:
            spare.stdin.write(f"{analysis_id}\n".encode())  # type: ignore[union-attr]
            spare.stdin.close()  # type: ignore[union-attr]
            spare.stdout.close()  # type: ignore[union-attr]
        except OSError:
            _kill_group(spare.pid)
            _reap(spare, 2.0)
            return None
        return spare

    def _stop_spare(self) -> None:
        spare, self._spare = self._spare, None
        if spare is None:
            return
        try:
            spare.stdin.close()  # type: ignore[union-attr] - end of input: a ready child exits without work
        except OSError:
            pass
        if self._spare_ready:
            try:
                spare.wait(2.0)
            except subprocess.TimeoutExpired:
                pass
        if spare.poll() is None:  # still loading: it would only read its end of input later
            _kill_group(spare.pid)
            _reap(spare, 2.0)
        if spare.stdout is not None:
            spare.stdout.close()

    def _notify_done(self, analysis_id: str) -> None:
        try:
            self.on_done(analysis_id)  # type: ignore[misc]
        except Exception:  # noqa: BLE001 - a warm-up failure only costs speed
            traceback.print_exc()

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                self._tick()
            except Exception:  # noqa: BLE001 - keep dispatching; a broken tick is logged
                traceback.print_exc()
            self._wake.wait(self.poll_interval)
            self._wake.clear()

    def _finalize(self, aid: str, proc: subprocess.Popen) -> None:
        """The final status of an analysis whose process ended; kept for the next tick if it cannot be written."""
        row = self.store.get_analysis(aid)
        if row is not None and row.status in ("queued", "running"):
            if row.cancel_requested:
                self.store.finish(aid, "cancelled")
            elif is_disk_full_exit(proc.returncode):
                self.store.finish(aid, "failed", "the disk is full: free some space and run the analysis again")
            else:
                self.store.finish(aid, "failed", f"the analysis process ended unexpectedly "
                                                 f"(exit code {proc.returncode})")
        with self._lock:
            self._procs.pop(aid, None)
        self._cancel_seen.pop(aid, None)
        if row is not None and row.status == "done" and self.on_done is not None:
            threading.Thread(target=self._notify_done, args=(aid,), daemon=True).start()

    def _tick(self) -> None:
        now = time.monotonic()
        if now - self._last_sweep >= config.OWNER_SWEEP_SECONDS:
            self._last_sweep = now
            self.sweep()
            self.store.ensure_reserve()
        with self._lock:
            procs = dict(self._procs)
        for aid, proc in procs.items():
            if proc.poll() is not None:
                try:
                    self._finalize(aid, proc)
                except (sqlite3.OperationalError, OSError) as exc:
                    if is_disk_full(exc):
                        self.store.release_reserve()
                    traceback.print_exc()  # retried at the next tick
                continue
            if self.store.cancel_requested(aid):
                first = self._cancel_seen.setdefault(aid, now)
                if now - first > _CANCEL_GRACE:
                    _kill_group(proc.pid, signal.SIGKILL)
                    _reap(proc, 2.0)
                    try:
                        self._finalize(aid, proc)
                    except (sqlite3.OperationalError, OSError):
                        traceback.print_exc()
        with self._lock:
            free = self.max_concurrent - len(self._procs)
            active = set(self._procs)
        if free <= 0:
            return
        if self._spare is not None and self._spare.poll() is not None:
            self._spare = None  # it ended on its own (e.g. killed); a new one follows when idle
        queued = [r for r in self.store.list_analyses(status=("queued",), limit=1000)
                  if r.owner_token == self.token or r.owner_pid == os.getpid()]
        queued.sort(key=lambda r: r.created)
        for row in queued:
            if free <= 0:
                break
            if row.id in active:
                continue
            # its own process group, so the pool workers it forks are stopped with it
            proc = self._take_spare(row.id, (row.settings or {}).get("measures"))
            if proc is None:
                proc = subprocess.Popen(_child_command(str(self.store.data_dir), row.id, self.workers,
                                                       self.cluster),
                                        env=_child_env(), stdin=subprocess.DEVNULL, process_group=0)
            with self._lock:
                self._procs[row.id] = proc
            free -= 1
        with self._lock:
            room = len(self._procs) < self.max_concurrent
        # Started as soon as one is taken, while that analysis runs: an analysis started
        # seconds after the previous one then finds it loaded (started only once nothing ran,
        # it left that analysis 7.7 s in "queued" at load 9). Its loading costs the running
        # analysis about a second of one core, once.
        if self.standby and room and self._spare is None and not self._stop.is_set():
            self._start_spare()


def main(argv: list[str] | None = None) -> int:
    """Child-process entry point: ``python -m pairlens.jobs DATA_DIR ANALYSIS_ID``."""
    parser = argparse.ArgumentParser(prog="python -m pairlens.jobs", description="run one queued pairlens analysis")
    parser.add_argument("data_dir")
    parser.add_argument("analysis_id", help="the analysis to run; '-' waits for its id on stdin (standby)")
    parser.add_argument("--workers", type=int, default=None)
    parser.add_argument("--cluster", default=None)
    args = parser.parse_args(argv)
    try:
        os.nice(5)  # keep the web server responsive on small machines
    except (OSError, AttributeError):
        pass
    if args.analysis_id == STANDBY:
        _prepare()
        try:
            print(READY, flush=True)  # the server may hand over an analysis before it reads this line
        except OSError:  # it has closed the pipe: it gave us an analysis without waiting
            pass
        # nobody reads the pipe from now on: later output must not fill it and block
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)
        line = sys.stdin.readline().strip()  # "" when the server closed the pipe or died: nothing to run
        if not line:
            return 0
        args.analysis_id = line
    _watch_parent(args.data_dir, args.analysis_id, os.getppid(), config.PARENT_POLL_SECONDS)
    if os.environ.get(config.PLUGINS_ENV):
        # the server that started this child offered the plugins' measures: the same modules here
        from .plugins import load_plugins
        load_plugins()
    try:
        status = run_job(args.data_dir, args.analysis_id, workers=args.workers, cluster=args.cluster)
    except (sqlite3.OperationalError, OSError) as exc:
        if is_disk_full(exc):  # the server records the final status from this exit code
            traceback.print_exc()
            return _DISK_FULL_EXIT
        raise
    return 0 if status in ("done", "cancelled") else 1


if __name__ == "__main__":
    sys.exit(main())
