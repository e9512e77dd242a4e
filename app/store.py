"""The workspace on disk: SQLite (WAL) for datasets, analyses and results; uploads by content hash.

Layout of a data directory::

    pairlens.sqlite3        datasets, analyses, results (WAL journal)
    blobs/<sha256>          uploaded bytes, named by their SHA-256, never by the client's name

Every state change is one transaction. Finished results are written once, in
the same transaction that marks the analysis ``done``, and never change.
Several processes (the web server and analysis workers) open the same
database; each opens its own :class:`Store`.
"""

from __future__ import annotations

import hashlib
import json
import os
import secrets
import sqlite3
import tempfile
import threading
import time
import zlib

try:
    import fcntl
except ImportError:  # pragma: no cover - Windows: owners are checked by pid only
    fcntl = None
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, Iterator

__all__ = ["Store", "StoreError", "StoreBusy", "DatabaseDamaged", "process_start_time", "is_disk_full", "DatasetRow", "AnalysisRow", "STATUSES", "ACTIVE_STATUSES",
           "FINAL_STATUSES", "DB_NAME"]

DB_NAME = "pairlens.sqlite3"
STATUSES = ("queued", "running", "done", "failed", "cancelled", "interrupted")
ACTIVE_STATUSES = ("queued", "running")
FINAL_STATUSES = ("done", "failed", "cancelled", "interrupted")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS datasets (
    id          TEXT PRIMARY KEY,
    name        TEXT NOT NULL,
    sha256      TEXT NOT NULL,
    size        INTEGER NOT NULL,
    n_rows      INTEGER NOT NULL,
    n_columns   INTEGER NOT NULL,
    created     REAL NOT NULL,
    summary     TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS datasets_sha ON datasets(sha256);
CREATE TABLE IF NOT EXISTS analyses (
    id               TEXT PRIMARY KEY,
    dataset_id       TEXT NOT NULL REFERENCES datasets(id),
    settings         TEXT NOT NULL,
    status           TEXT NOT NULL,
    progress         REAL NOT NULL DEFAULT 0,
    phase            TEXT NOT NULL DEFAULT '',
    seconds_left     REAL,
    error            TEXT NOT NULL DEFAULT '',
    cancel_requested INTEGER NOT NULL DEFAULT 0,
    owner_pid        INTEGER,
    owner_token      TEXT NOT NULL DEFAULT '',
    worker_pid       INTEGER,
    worker_started   INTEGER,
    created          REAL NOT NULL,
    started          REAL,
    finished         REAL,
    updated          REAL NOT NULL
);
CREATE INDEX IF NOT EXISTS analyses_dataset ON analyses(dataset_id);
CREATE INDEX IF NOT EXISTS analyses_status ON analyses(status);
CREATE TABLE IF NOT EXISTS results (
    analysis_id TEXT PRIMARY KEY REFERENCES analyses(id),
    variables   TEXT NOT NULL,
    records     BLOB NOT NULL,
    verdicts    BLOB NOT NULL,
    pages       BLOB,
    grid        BLOB,
    seconds     REAL NOT NULL,
    created     REAL NOT NULL
);
"""

# Finished results never change: the database itself refuses to rewrite them or to
# move a done analysis to another state (only deleting the analysis removes them).
_IMMUTABLE_RESULTS = """
CREATE TRIGGER IF NOT EXISTS results_are_final BEFORE UPDATE OF analysis_id, variables, records, verdicts, seconds
ON results BEGIN SELECT RAISE(ABORT, 'finished results never change'); END;
CREATE TRIGGER IF NOT EXISTS done_is_final BEFORE UPDATE OF status ON analyses
WHEN OLD.status = 'done' AND NEW.status != 'done'
BEGIN SELECT RAISE(ABORT, 'a finished analysis stays done'); END;
"""


class StoreError(RuntimeError):
    """The store could not do what was asked (unknown id, wrong state)."""


@dataclass(frozen=True)
class DatasetRow:
    id: str
    name: str
    sha256: str
    size: int
    n_rows: int
    n_columns: int
    created: float
    summary: dict

    def public(self) -> dict:
        return {"id": self.id, "name": self.name, "sha256": self.sha256, "fingerprint": self.sha256[:12],
                "size": self.size, "n_rows": self.n_rows, "n_columns": self.n_columns,
                "created": self.created}


@dataclass(frozen=True)
class AnalysisRow:
    id: str
    dataset_id: str
    settings: dict
    status: str
    progress: float
    phase: str
    seconds_left: float | None
    error: str
    cancel_requested: bool
    owner_pid: int | None
    worker_pid: int | None
    created: float
    owner_token: str
    started: float | None
    finished: float | None
    updated: float
    worker_started: int | None = None

    def public(self) -> dict:
        return {"id": self.id, "dataset_id": self.dataset_id, "status": self.status,
                "progress": self.progress, "phase": self.phase, "seconds_left": self.seconds_left,
                "error": self.error or None, "cancel_requested": self.cancel_requested,
                "settings": self.settings, "created": self.created, "started": self.started,
                "finished": self.finished}


def _pack(obj) -> bytes:
    return zlib.compress(json.dumps(obj, ensure_ascii=False, allow_nan=False).encode("utf-8"), 6)


def _unpack(blob: bytes):
    return json.loads(zlib.decompress(blob).decode("utf-8"))


def _new_id() -> str:
    return secrets.token_hex(6)


class Store:
    """One process's handle on a data directory. Thread-safe (one connection per thread)."""

    def __init__(self, data_dir: str | os.PathLike, *, check: bool = False) -> None:
        self.data_dir = Path(data_dir)
        self.blob_dir = self.data_dir / "blobs"
        self.data_dir.mkdir(parents=True, exist_ok=True)
        self.blob_dir.mkdir(exist_ok=True)
        self.db_path = self.data_dir / DB_NAME
        self._local = threading.local()
        if check:
            self.check_database()
        # executescript manages its own transaction; the schema is idempotent.
        con = self._connection()
        con.executescript(_SCHEMA)
        con.executescript(_IMMUTABLE_RESULTS)
        if "pages" not in {r[1] for r in con.execute("PRAGMA table_info(results)")}:
            con.execute("ALTER TABLE results ADD COLUMN pages BLOB")
        if "grid" not in {r[1] for r in con.execute("PRAGMA table_info(results)")}:
            con.execute("ALTER TABLE results ADD COLUMN grid BLOB")
        if "worker_started" not in {r[1] for r in con.execute("PRAGMA table_info(analyses)")}:
            con.execute("ALTER TABLE analyses ADD COLUMN worker_started INTEGER")

    def check_database(self) -> None:
        """Refuse a damaged or foreign database file with one line naming it (SQLite's quick_check).

        ``PRAGMA quick_check`` reads every page and checks the b-trees (it skips only the
        index-content cross-check of ``integrity_check``): https://www.sqlite.org/pragma.html#pragma_quick_check
        """
        if not self.db_path.exists():
            return
        fix = (f"move it aside (the server then starts with an empty workspace) or restore it from a backup; "
               f"the uploaded files stay in {self.blob_dir}")
        try:
            con = sqlite3.connect(f"file:{self.db_path}?mode=ro", uri=True, timeout=30.0)
            try:
                rows = con.execute("PRAGMA quick_check").fetchall()
            finally:
                con.close()
        except sqlite3.DatabaseError as exc:
            raise DatabaseDamaged(f"{self.db_path} is not a usable pairlens database ({exc}); {fix}") from None
        if [tuple(r) for r in rows] != [("ok",)]:
            first = str(rows[0][0]) if rows else "no answer"
            raise DatabaseDamaged(f"{self.db_path} is damaged (SQLite quick_check: {' '.join(first.split())[:120]}); "
                                  f"{fix}")

    # Connections and transactions -------------------------------------------

    def _connection(self) -> sqlite3.Connection:
        con = getattr(self._local, "con", None)
        if con is None:
            con = sqlite3.connect(self.db_path, timeout=30.0, isolation_level=None, check_same_thread=True)
            con.row_factory = sqlite3.Row
            con.execute("PRAGMA journal_mode=WAL")
            con.execute("PRAGMA synchronous=NORMAL")
            con.execute("PRAGMA foreign_keys=ON")
            con.execute("PRAGMA busy_timeout=30000")
            self._local.con = con
        return con

    @contextmanager
    def _tx(self) -> Iterator[sqlite3.Connection]:
        """One write transaction; BEGIN IMMEDIATE so concurrent writers queue instead of failing late."""
        con = self._connection()
        con.execute("BEGIN IMMEDIATE")
        try:
            yield con
        except BaseException:
            con.execute("ROLLBACK")
            raise
        else:
            con.execute("COMMIT")

    def close(self) -> None:
        con = getattr(self._local, "con", None)
        if con is not None:
            con.close()
            self._local.con = None

    # Reserve ----------------------------------------------------------------
    # A few MB kept on the workspace's disk and given up when the disk fills, so the final
    # status of a running analysis and a cancel can still be written; refilled when space is back.

    RESERVE_NAME = "reserve.bin"
    RESERVE_BYTES = 4 << 20

    def ensure_reserve(self) -> bool:
        path = self.data_dir / self.RESERVE_NAME
        try:
            if path.exists() and path.stat().st_size >= self.RESERVE_BYTES:
                return True
            with open(path, "wb") as handle:
                handle.write(b"\0" * self.RESERVE_BYTES)
                handle.flush()
                os.fsync(handle.fileno())
            return True
        except OSError:
            path.unlink(missing_ok=True)
            return False

    def release_reserve(self) -> None:
        (self.data_dir / self.RESERVE_NAME).unlink(missing_ok=True)

    # Blobs ------------------------------------------------------------------

    def blob_path(self, sha256: str) -> Path:
        if len(sha256) != 64 or any(c not in "0123456789abcdef" for c in sha256):
            raise StoreError("not a SHA-256 hex digest")
        return self.blob_dir / sha256

    def spool_upload(self, stream: BinaryIO, limit_bytes: int | None = None,
                     chunk_size: int = 1 << 20) -> tuple[Path, str, int]:
        """Copy a stream to a temporary file in the blob directory, hashing as it goes.

        Returns ``(temp_path, sha256, size)``. Raises :class:`UploadTooLarge` past
        ``limit_bytes`` (the temporary file is removed). The caller either
        :meth:`commit_blob` s or unlinks the temporary file.
        """
        digest = hashlib.sha256()
        size = 0
        fd, tmp = tempfile.mkstemp(prefix=".upload-", dir=self.blob_dir)
        try:
            with os.fdopen(fd, "wb") as out:
                while True:
                    chunk = stream.read(chunk_size)
                    if not chunk:
                        break
                    size += len(chunk)
                    if limit_bytes is not None and size > limit_bytes:
                        raise UploadTooLarge(size)
                    digest.update(chunk)
                    out.write(chunk)
                out.flush()
                os.fsync(out.fileno())
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return Path(tmp), digest.hexdigest(), size

    def commit_blob(self, tmp_path: Path, sha256: str) -> Path:
        """Move a spooled file to ``blobs/<sha256>`` (atomic rename; an existing copy wins)."""
        target = self.blob_path(sha256)
        if target.exists():
            Path(tmp_path).unlink(missing_ok=True)
        else:
            os.replace(tmp_path, target)
        return target

    def put_blob(self, content: bytes) -> str:
        """Store bytes under their hash (temp file + rename); returns the hex digest."""
        sha = hashlib.sha256(content).hexdigest()
        target = self.blob_path(sha)
        if not target.exists():
            fd, tmp = tempfile.mkstemp(prefix=".blob-", dir=self.blob_dir)
            try:
                with os.fdopen(fd, "wb") as out:
                    out.write(content)
                    out.flush()
                    os.fsync(out.fileno())
                os.replace(tmp, target)
            except BaseException:
                Path(tmp).unlink(missing_ok=True)
                raise
        return sha

    def read_blob(self, sha256: str) -> bytes:
        return self.blob_path(sha256).read_bytes()

    # Datasets ---------------------------------------------------------------

    def add_dataset(self, *, name: str, sha256: str, size: int, n_rows: int, n_columns: int,
                    summary: dict) -> DatasetRow:
        row = DatasetRow(_new_id(), name, sha256, int(size), int(n_rows), int(n_columns), time.time(), summary)
        with self._tx() as con:
            # Checked under the write lock, so a delete removing the last copy cannot slip in between.
            if not self.blob_path(sha256).exists():
                raise StoreError("the dataset's bytes must be stored first")
            con.execute("INSERT INTO datasets (id, name, sha256, size, n_rows, n_columns, created, summary) "
                        "VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                        (row.id, row.name, row.sha256, row.size, row.n_rows, row.n_columns, row.created,
                         json.dumps(summary, ensure_ascii=False, allow_nan=False)))
        return row

    @staticmethod
    def _dataset(r: sqlite3.Row) -> DatasetRow:
        return DatasetRow(r["id"], r["name"], r["sha256"], r["size"], r["n_rows"], r["n_columns"], r["created"],
                          json.loads(r["summary"]))

    def get_dataset(self, dataset_id: str) -> DatasetRow | None:
        r = self._connection().execute("SELECT * FROM datasets WHERE id = ?", (dataset_id,)).fetchone()
        return self._dataset(r) if r else None

    def find_dataset_by_hash(self, sha256: str) -> DatasetRow | None:
        r = self._connection().execute("SELECT * FROM datasets WHERE sha256 = ? ORDER BY created LIMIT 1",
                                       (sha256,)).fetchone()
        return self._dataset(r) if r else None

    def list_datasets(self) -> list[DatasetRow]:
        rows = self._connection().execute("SELECT * FROM datasets ORDER BY created DESC").fetchall()
        return [self._dataset(r) for r in rows]

    # Analyses ---------------------------------------------------------------

    @staticmethod
    def _analysis(r: sqlite3.Row) -> AnalysisRow:
        return AnalysisRow(r["id"], r["dataset_id"], json.loads(r["settings"]), r["status"], float(r["progress"]),
                           r["phase"], r["seconds_left"], r["error"], bool(r["cancel_requested"]),
                           r["owner_pid"], r["worker_pid"], r["created"], r["owner_token"], r["started"],
                           r["finished"], r["updated"], r["worker_started"])

    def create_analysis(self, dataset_id: str, settings: dict, owner_pid: int | None = None,
                        owner_token: str = "") -> AnalysisRow:
        """A new ``queued`` analysis; ``owner_pid``/``owner_token`` name the process that will run it."""
        now = time.time()
        aid = _new_id()
        with self._tx() as con:
            if con.execute("SELECT 1 FROM datasets WHERE id = ?", (dataset_id,)).fetchone() is None:
                raise StoreError(f"no dataset {dataset_id!r}")
            con.execute("INSERT INTO analyses (id, dataset_id, settings, status, owner_pid, owner_token, "
                        "created, updated) VALUES (?, ?, ?, 'queued', ?, ?, ?, ?)",
                        (aid, dataset_id, json.dumps(settings, ensure_ascii=False, allow_nan=False),
                         owner_pid, owner_token, now, now))
        return self.get_analysis(aid)  # type: ignore[return-value]

    def get_analysis(self, analysis_id: str) -> AnalysisRow | None:
        r = self._connection().execute("SELECT * FROM analyses WHERE id = ?", (analysis_id,)).fetchone()
        return self._analysis(r) if r else None

    def list_analyses(self, dataset_id: str | None = None, status: tuple[str, ...] | None = None,
                      limit: int = 200) -> list[AnalysisRow]:
        sql, args = "SELECT * FROM analyses WHERE 1=1", []
        if dataset_id is not None:
            sql += " AND dataset_id = ?"
            args.append(dataset_id)
        if status:
            sql += f" AND status IN ({','.join('?' * len(status))})"
            args.extend(status)
        sql += " ORDER BY created DESC LIMIT ?"
        args.append(limit)
        return [self._analysis(r) for r in self._connection().execute(sql, args).fetchall()]

    def claim(self, analysis_id: str, worker_pid: int | None = None, worker_started: int | None = None) -> bool:
        """queued -> running; False when the analysis is no longer queued (e.g. cancelled).

        ``worker_started`` (the kernel's start time of ``worker_pid``, :func:`process_start_time`)
        lets a later server prove that a live pid is still this worker before stopping it.
        """
        now = time.time()
        with self._tx() as con:
            cur = con.execute("UPDATE analyses SET status = 'running', started = ?, updated = ?, worker_pid = ?, "
                              "worker_started = ?, phase = 'starting' "
                              "WHERE id = ? AND status = 'queued' AND cancel_requested = 0",
                              (now, now, worker_pid, worker_started, analysis_id))
            return cur.rowcount == 1

    def set_worker_pid(self, analysis_id: str, worker_pid: int) -> None:
        with self._tx() as con:
            con.execute("UPDATE analyses SET worker_pid = ?, updated = ? WHERE id = ?",
                        (worker_pid, time.time(), analysis_id))

    def update_progress(self, analysis_id: str, progress: float, seconds_left: float | None = None,
                        phase: str | None = None) -> None:
        progress = float(min(max(progress, 0.0), 1.0))
        if seconds_left is not None and not (seconds_left == seconds_left and seconds_left < 1e12):
            seconds_left = None
        with self._tx() as con:
            if phase is None:
                con.execute("UPDATE analyses SET progress = ?, seconds_left = ?, updated = ? "
                            "WHERE id = ? AND status = 'running'",
                            (progress, seconds_left, time.time(), analysis_id))
            else:
                con.execute("UPDATE analyses SET progress = ?, seconds_left = ?, phase = ?, updated = ? "
                            "WHERE id = ? AND status = 'running'",
                            (progress, seconds_left, phase, time.time(), analysis_id))

    def cancel_requested(self, analysis_id: str) -> bool:
        r = self._connection().execute("SELECT cancel_requested FROM analyses WHERE id = ?",
                                       (analysis_id,)).fetchone()
        return bool(r and r[0])

    def request_cancel(self, analysis_id: str) -> AnalysisRow:
        """Ask an analysis to stop: a queued one is cancelled at once, a running one is flagged."""
        now = time.time()
        with self._tx() as con:
            r = con.execute("SELECT status FROM analyses WHERE id = ?", (analysis_id,)).fetchone()
            if r is None:
                raise StoreError(f"no analysis {analysis_id!r}")
            if r[0] == "queued":
                con.execute("UPDATE analyses SET status = 'cancelled', cancel_requested = 1, finished = ?, "
                            "updated = ?, seconds_left = NULL WHERE id = ?", (now, now, analysis_id))
            elif r[0] == "running":
                con.execute("UPDATE analyses SET cancel_requested = 1, updated = ? WHERE id = ?",
                            (now, analysis_id))
        return self.get_analysis(analysis_id)  # type: ignore[return-value]

    def finish(self, analysis_id: str, status: str, error: str = "") -> bool:
        """running/queued -> a final status (not ``done``: use :meth:`save_results`)."""
        if status not in FINAL_STATUSES or status == "done":
            raise StoreError(f"cannot finish with status {status!r}")
        now = time.time()
        with self._tx() as con:
            cur = con.execute("UPDATE analyses SET status = ?, error = ?, finished = ?, updated = ?, "
                              "seconds_left = NULL WHERE id = ? AND status IN ('queued', 'running')",
                              (status, error, now, now, analysis_id))
            return cur.rowcount == 1

    def save_results(self, analysis_id: str, *, variables: list[str], records: list[dict] | bytes,
                     verdicts: dict, seconds: float, pages: dict | None = None,
                     grid: bytes | None = None) -> bool:
        """Write the results and mark the analysis ``done`` in one transaction.

        ``grid``: the pair table as arrays (:meth:`pairlens.pairgrid.PairGrid.to_bytes`), stored as given.
        ``records``: the pair rows, as JSON records or as :func:`pairlens.pairrecords.pack_rows` bytes
        (stored as given).

        Returns False (and writes nothing) when the analysis is no longer running,
        e.g. it was cancelled or marked interrupted meanwhile.
        """
        now = time.time()
        packed_records = records if isinstance(records, bytes) else _pack(records)
        packed_verdicts = _pack(verdicts)
        packed_pages = _pack(pages) if pages is not None else None
        with self._tx() as con:
            cur = con.execute("UPDATE analyses SET status = 'done', progress = 1, phase = 'done', finished = ?, "
                              "updated = ?, seconds_left = 0 WHERE id = ? AND status = 'running' "
                              "AND cancel_requested = 0", (now, now, analysis_id))
            if cur.rowcount != 1:
                return False
            con.execute("INSERT INTO results (analysis_id, variables, records, verdicts, pages, grid, seconds, "
                        "created) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                        (analysis_id, json.dumps(variables, ensure_ascii=False), packed_records,
                         packed_verdicts, packed_pages, grid, float(seconds), now))
        return True

    def get_results(self, analysis_id: str) -> dict | None:
        """``{"variables", "records", "rows", "verdicts", "pages", "grid", "seconds"}`` of a done analysis,
        else None: ``records`` the JSON records, or None and ``rows`` the packed rows
        (:func:`pairlens.pairrecords.unpack_rows` reads them) when they were stored so."""
        r = self._connection().execute("SELECT * FROM results WHERE analysis_id = ?", (analysis_id,)).fetchone()
        if r is None:
            return None
        from .pairrecords import is_packed_rows

        packed = is_packed_rows(r["records"])  # a zip archive (.npz), else zlib-compressed JSON
        return {"variables": json.loads(r["variables"]), "records": None if packed else _unpack(r["records"]),
                "rows": r["records"] if packed else None,
                "verdicts": _unpack(r["verdicts"]), "pages": _unpack(r["pages"]) if r["pages"] else None,
                "grid": r["grid"], "seconds": r["seconds"]}

    def mark_interrupted(self, owner_token: str, *, alive_pids: set[int] | None = None,
                         reason: str = "", workers: list | None = None) -> list[str]:
        """Analyses left queued or running by a process that is gone become ``interrupted``.

        An analysis is orphaned when its owner token is not ``owner_token`` (the
        caller's) and its owner is gone: the owner's lock (:meth:`hold_owner_lock`)
        is free, or, for owners without a lock file, its pid is not alive or is
        the caller's own pid (a reused pid: the old owner is gone). The lock
        cannot be fooled by a pid that another process took over. ``alive_pids``
        replaces the liveness check in tests. Returns the ids changed; the
        ``(worker_pid, worker_started)`` of each changed running analysis are
        appended to ``workers`` when given, so the caller can stop them.
        """
        def alive(pid, token=""):
            state = self.owner_state(token) if alive_pids is None else "unknown"
            if state != "unknown":
                return state == "alive"
            if pid is None:
                return False
            if pid == os.getpid():
                return False
            if alive_pids is not None:
                return pid in alive_pids
            try:
                os.kill(int(pid), 0)
            except ProcessLookupError:
                return False
            except PermissionError:
                return True
            return True

        now = time.time()
        changed: list[str] = []
        with self._tx() as con:
            for r in con.execute("SELECT id, owner_pid, owner_token, worker_pid, worker_started FROM analyses "
                                 "WHERE status IN ('queued', 'running')").fetchall():
                if r["owner_token"] == owner_token or alive(r["owner_pid"], r["owner_token"]):
                    continue
                if workers is not None and r["worker_pid"]:
                    workers.append((r["worker_pid"], r["worker_started"]))
                con.execute("UPDATE analyses SET status = 'interrupted', finished = ?, updated = ?, "
                            "seconds_left = NULL, error = ? WHERE id = ?",
                            (now, now, reason or "the server stopped before this analysis finished; "
                                                 "run it again", r["id"]))
                changed.append(r["id"])
        return changed

    # Owner locks -----------------------------------------------------------------
    # A server holds an exclusive flock on owners/<token>.lock while it lives; the
    # kernel drops it when the process dies, even by kill -9.

    def _owner_lock_path(self, token: str) -> Path | None:
        if not token or not all(c in "0123456789abcdef" for c in token):
            return None
        return self.data_dir / "owners" / f"{token}.lock"

    def hold_owner_lock(self, token: str):
        """Take the owner lock of ``token`` for this process's lifetime; returns the open file (or None)."""
        path = self._owner_lock_path(token)
        if path is None or fcntl is None:
            return None
        path.parent.mkdir(exist_ok=True)
        handle = open(path, "a+b")
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            handle.close()
            raise StoreError(f"owner token {token} is already in use")
        return handle

    def release_owner_lock(self, token: str, handle) -> None:
        if handle is None:
            return
        path = self._owner_lock_path(token)
        if path is not None:
            path.unlink(missing_ok=True)
        handle.close()

    def owner_state(self, token: str) -> str:
        """"alive" (its lock is held), "dead" (lock file left, nobody holds it) or "unknown" (no lock file)."""
        path = self._owner_lock_path(token)
        if path is None or fcntl is None or not path.exists():
            return "unknown"
        try:
            with open(path, "rb") as probe:
                try:
                    fcntl.flock(probe.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                except OSError:
                    return "alive"
                fcntl.flock(probe.fileno(), fcntl.LOCK_UN)
        except FileNotFoundError:  # its owner just shut down and removed it
            return "dead"
        return "dead"

    def remove_dead_owner_locks(self) -> None:
        directory = self.data_dir / "owners"
        if not directory.is_dir():
            return
        for p in directory.glob("*.lock"):
            if self.owner_state(p.stem) == "dead":
                p.unlink(missing_ok=True)

    # Deleting -----------------------------------------------------------------

    def _drop_analyses(self, con: sqlite3.Connection, where: str, args: tuple) -> list[str]:
        rows = con.execute(f"SELECT id, status FROM analyses WHERE {where}", args).fetchall()
        active = [r["id"] for r in rows if r["status"] in ACTIVE_STATUSES]
        if active:
            raise StoreBusy(f"analysis {active[0]} is still queued or running; cancel it first")
        ids = [r["id"] for r in rows]
        for aid in ids:
            con.execute("DELETE FROM results WHERE analysis_id = ?", (aid,))
            con.execute("DELETE FROM analyses WHERE id = ?", (aid,))
        return ids

    def delete_analysis(self, analysis_id: str) -> bool:
        """Remove an analysis and its results in one transaction; False when there is no such analysis.

        Raises :class:`StoreBusy` while it is queued or running.
        """
        with self._tx() as con:
            return bool(self._drop_analyses(con, "id = ?", (analysis_id,)))

    def delete_dataset(self, dataset_id: str) -> list[str] | None:
        """Remove a dataset, its analyses and results; its bytes too when no other dataset shares them.

        Returns the ids of the analyses removed, or None when there is no such
        dataset. Raises :class:`StoreBusy` while one of its analyses is queued
        or running. The blob is moved aside inside the transaction (so an
        upload of the same bytes waiting for the lock sees it gone and stores
        it again) and unlinked after the commit, or put back on rollback.
        """
        trash: Path | None = None
        blob: Path | None = None
        try:
            with self._tx() as con:
                r = con.execute("SELECT sha256 FROM datasets WHERE id = ?", (dataset_id,)).fetchone()
                if r is None:
                    return None
                removed = self._drop_analyses(con, "dataset_id = ?", (dataset_id,))
                con.execute("DELETE FROM datasets WHERE id = ?", (dataset_id,))
                sha = r["sha256"]
                if con.execute("SELECT 1 FROM datasets WHERE sha256 = ? LIMIT 1", (sha,)).fetchone() is None:
                    blob = self.blob_path(sha)
                    if blob.exists():
                        trash = self.blob_dir / f".deleted-{sha}-{secrets.token_hex(4)}"
                        os.replace(blob, trash)
        except BaseException:
            if trash is not None and blob is not None and not blob.exists():
                os.replace(trash, blob)  # the rows are still there, so are their bytes
            raise
        if trash is not None:
            trash.unlink(missing_ok=True)
        return removed

    def remove_leftovers(self, min_age_seconds: float = 600.0) -> int:
        """Delete temporary files a killed process left in the blob directory; returns how many.

        Only files older than ``min_age_seconds``, so an upload still being
        written by another process on the same directory is left alone.
        """
        count = 0
        cutoff = time.time() - min_age_seconds
        for p in self.blob_dir.iterdir():
            try:
                if p.name.startswith((".upload-", ".blob-", ".deleted-")) and p.stat().st_mtime < cutoff:
                    p.unlink(missing_ok=True)
                    count += 1
            except FileNotFoundError:
                continue
        return count


class DatabaseDamaged(StoreError):
    """The database file is damaged or not a pairlens database; the message is one line naming it."""


def process_start_time(pid: int | None) -> int | None:
    """The kernel's start time of ``pid`` (clock ticks since boot, /proc/PID/stat field 22), or None.

    A pid can be reused; the pair (pid, start time) names one process for the machine's uptime.
    """
    if not pid:
        return None
    try:
        with open(f"/proc/{int(pid)}/stat", "rb") as handle:
            stat = handle.read().decode("ascii", "replace")
    except (OSError, ValueError):
        return None
    # the command name (field 2) is in parentheses and may hold spaces; fields after it are plain
    fields = stat[stat.rfind(")") + 2:].split()
    try:
        return int(fields[19])
    except (IndexError, ValueError):
        return None


def is_disk_full(exc: BaseException) -> bool:
    """True for the errors a full disk gives: OSError ENOSPC/EDQUOT, SQLite's 'database or disk is full'."""
    import errno

    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return True
    if isinstance(exc, sqlite3.Error):
        code = getattr(exc, "sqlite_errorcode", None)
        return code == 13 or "disk is full" in str(exc)  # 13: SQLITE_FULL
    return False


class StoreBusy(StoreError):
    """The object cannot be changed now (an analysis is queued or running)."""


class UploadTooLarge(Exception):
    """An upload passed the size limit."""

    def __init__(self, size: int) -> None:
        super().__init__(f"upload larger than the limit (read {size} bytes so far)")
        self.size = size
