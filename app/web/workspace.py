"""The workspace service both routers share: the store, the job queue and the page caches.

The routers in :mod:`pairlens.web.pages` and :mod:`pairlens.web.api` only translate
HTTP to calls on the workspace and back; they receive it through
:data:`pairlens.web.deps.WorkspaceDep`. Nothing here knows HTTP. Everything here raises plain Python
errors (:class:`NotFound`, :class:`Conflict`, ``IngestError``,
``SettingsError``, ``UploadTooLarge``) that the app maps to status codes.
"""

from __future__ import annotations

import json
import math
import threading
import time
from collections import OrderedDict
from pathlib import Path
from typing import BinaryIO

import numpy as np
from markupsafe import Markup

from .. import config
from ..budget import check_plan, estimate_work
from ..core.registry import MEASURES
from ..errors import SettingsError
from ..formatting import embed_json, finite
from ..pairs import full_detail, pack_points, quick_detail
from ..pairtable import PairRow, PairTable
from ..pairgrid import PairGrid
from ..pairrecords import unpack_rows
from ..payloads import MAPS_FORMAT, default_difference, heatmap_payload, pair_key
from ..plan import AnalysisSettings, plan_variables
from ..ordering import check_served_order, serial_note
from ..store import AnalysisRow, DatasetRow, Store, UploadTooLarge
from .models import AnalysisRequest

__all__ = ["Workspace", "NotFound", "Conflict", "embed_json", "UploadTooLarge",
           "SPARK_BINS", "PairGrid"]

SPARK_BINS = 16
_PREVIEW_CELL_CHARS = 80


class NotFound(LookupError):
    """No such dataset, analysis or column."""


class Conflict(RuntimeError):
    """The request does not fit the object's state (e.g. results of a running analysis)."""




class _LRU:
    """At most ``size`` entries, and at most ``max_bytes`` by ``sizeof`` when both are given."""

    def __init__(self, size: int, *, max_bytes: int | None = None, sizeof=None) -> None:
        self.size = size
        self.max_bytes = max_bytes
        self.sizeof = sizeof
        self._sizes: dict = {}
        self._items: OrderedDict = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key):
        with self._lock:
            if key in self._items:
                self._items.move_to_end(key)
                return self._items[key]
        return None

    def pop(self, key):
        with self._lock:
            self._sizes.pop(key, None)
            return self._items.pop(key, None)

    def put(self, key, value):
        size = self.sizeof(value) if self.sizeof is not None else 0
        with self._lock:
            self._items[key] = value
            self._sizes[key] = size
            self._items.move_to_end(key)
            while len(self._items) > self.size or (
                    self.max_bytes is not None and len(self._items) > 1 and sum(self._sizes.values()) > self.max_bytes):
                dropped, _ = self._items.popitem(last=False)
                self._sizes.pop(dropped, None)
        return value


def _approx_bytes(value, depth: int = 0) -> int:
    """Rough memory of a JSON-like value (arrays by their buffer): enough to bound a cache."""
    if isinstance(value, np.ndarray):
        return int(value.nbytes) + 112
    if isinstance(value, dict):
        return 64 + sum(_approx_bytes(k, depth + 1) + _approx_bytes(v, depth + 1) for k, v in value.items())
    if isinstance(value, (list, tuple)):
        if len(value) > 64 or depth > 6:  # a long list: its first items stand for the rest
            sample = value[:16]
            per = sum(_approx_bytes(v, depth + 1) for v in sample) / max(len(sample), 1)
            return 56 + int(8 * len(value) + per * len(value))
        return 56 + 8 * len(value) + sum(_approx_bytes(v, depth + 1) for v in value)
    if isinstance(value, str):
        return 49 + len(value)
    return 32


class _PairCache:
    """The pair-view cache, bounded by bytes; points are kept as NumPy arrays (8 bytes a value).

    Python lists of floats cost about 32 bytes a value, and a 1M-row pair is three such lists:
    kept per pair, they took the server's memory pair by pair. Entries are evicted least
    recently used first once ``max_bytes`` is passed; an entry larger than the whole cache is
    not kept. ``get`` returns a copy whose points are lists again, as the callers expect.
    """

    def __init__(self, max_bytes: int) -> None:
        self.max_bytes = int(max_bytes)
        self.bytes = 0
        self._items: OrderedDict = OrderedDict()
        self._lock = threading.Lock()

    @staticmethod
    def _pack(detail: dict) -> dict:
        packed = dict(detail)
        points = detail.get("points")
        if isinstance(points, dict):
            packed["points"] = {k: (np.asarray(v, dtype=np.int64 if k == "rows" else np.float64)
                                    if isinstance(v, list) else v) for k, v in points.items()}
        return packed

    @staticmethod
    def _unpack(packed: dict) -> dict:
        detail = dict(packed)
        points = packed.get("points")
        if isinstance(points, dict):
            detail["points"] = {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in points.items()}
        return detail

    def get(self, key):
        with self._lock:
            entry = self._items.get(key)
            if entry is None:
                return None
            self._items.move_to_end(key)
        return self._unpack(entry[0])

    def pop(self, key):
        with self._lock:
            entry = self._items.pop(key, None)
            if entry is not None:
                self.bytes -= entry[1]
        return None if entry is None else self._unpack(entry[0])

    def put(self, key, value):
        packed = self._pack(value)
        size = _approx_bytes(packed)
        with self._lock:
            old = self._items.pop(key, None)
            if old is not None:
                self.bytes -= old[1]
            if size <= self.max_bytes:
                self._items[key] = (packed, size)
                self.bytes += size
            while self.bytes > self.max_bytes and self._items:
                _, (_, dropped) = self._items.popitem(last=False)
                self.bytes -= dropped
        return value

    def __len__(self) -> int:
        return len(self._items)


def _spark(values: np.ndarray, bins: int = SPARK_BINS) -> list[int]:
    v = values[np.isfinite(values)]
    if v.size == 0:
        return []
    lo, hi = float(v.min()), float(v.max())
    if lo == hi:
        return [int(v.size)]
    counts, _ = np.histogram(v, bins=bins, range=(lo, hi))
    return [int(c) for c in counts]


def dataset_summary(table) -> dict:
    """What the dataset page shows, computed once at upload and stored with the dataset."""
    from ..kinds import detect

    position = {n: i for i, n in enumerate(table.columns)}
    kinds = detect(table)  # each used column's detected kind and why (issue 18)
    columns = []
    for c in table.info:
        entry = {
            "name": c.name, "original": c.original, "kind": c.kind, "used": bool(c.used), "reason": c.reason,
            "missing": int(c.missing), "infinite": int(c.infinite), "distinct": int(c.distinct),
            "missing_share": (c.missing / table.n_rows) if table.n_rows else None,
            "min": finite(c.minimum), "median": finite(c.median), "max": finite(c.maximum),
            "spark": _spark(table.data[:, position[c.name]]) if c.name in position else [],
        }
        if c.name in kinds:
            entry["detected"] = kinds[c.name].kind
            entry["kind_reason"] = kinds[c.name].reason
            entry["levels"] = list(c.levels[:8])
        columns.append(entry)
    preview = [[str(cell)[:_PREVIEW_CELL_CHARS] for cell in row] for row in table.preview[:10]]
    return {
        "columns": columns,
        "numeric": list(table.columns),
        "notes": list(table.notes),
        "serial_note": serial_note(table.data, table.columns),
        "preview_header": list(table.preview_header),
        "preview": preview,
        "format": getattr(table, "format", ""),
        "encoding": getattr(table, "encoding", ""),
        "delimiter": getattr(table, "delimiter", ""),
    }


class Workspace:
    """The server's view of one data directory."""

    def __init__(self, store: Store, jobs, *, max_upload_mb: int = config.MAX_UPLOAD_MB,
                 cluster: str | None = None) -> None:
        self.store = store
        self.jobs = jobs
        self.max_upload_bytes = int(max_upload_mb) * 1024 * 1024
        self.cluster = cluster
        self._tables = _LRU(4, max_bytes=config.TABLE_CACHE_MB << 20,
                            sizeof=lambda t: int(getattr(getattr(t, "data", None), "nbytes", 0)))
        self._pair_tables = _LRU(8)
        self._figures = _LRU(16)
        self._details = _PairCache(config.PAIR_CACHE_MB << 20)
        self._locks: dict = {}
        self._locks_guard = threading.Lock()

    # Datasets -----------------------------------------------------------------

    def upload(self, stream: BinaryIO, filename: str) -> DatasetRow:
        """Store an upload: spool + hash, parse, then keep the bytes under their hash."""
        from ..ingest import load_file_isolated

        from .security import display_name

        name = display_name(filename)
        tmp, sha, size = self.store.spool_upload(stream, self.max_upload_bytes)
        try:
            table = load_file_isolated(tmp, name)  # a child process with memory and time limits
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
        self.store.commit_blob(tmp, sha)
        self._tables.put(sha, table)
        return self.store.add_dataset(name=name, sha256=sha, size=size, n_rows=table.n_rows,
                                      n_columns=len(table.columns), summary=dataset_summary(table))

    def ensure_demo(self) -> DatasetRow:
        """The invented vineyard dataset, added once."""
        from ..ingest import load_bytes

        content = Path(config.DEMO_FILE).read_bytes()
        sha = self.store.put_blob(content)
        existing = self.store.find_dataset_by_hash(sha)
        if existing is not None:
            return existing
        table = load_bytes(content, Path(config.DEMO_FILE).name)
        self._tables.put(sha, table)
        return self.store.add_dataset(name=Path(config.DEMO_FILE).name, sha256=sha, size=len(content),
                                      n_rows=table.n_rows, n_columns=len(table.columns),
                                      summary=dataset_summary(table))

    def datasets(self) -> list[DatasetRow]:
        return self.store.list_datasets()

    def dataset(self, dataset_id: str) -> DatasetRow:
        row = self.store.get_dataset(dataset_id)
        if row is None:
            raise NotFound(f"no dataset {dataset_id!r}")
        return row

    def table(self, dataset: DatasetRow):
        """The parsed table of a dataset (parsed once, then kept in memory)."""
        from ..ingest import load_file_isolated

        table = self._tables.get(dataset.sha256)
        if table is None:
            with self._key_lock(("table", dataset.sha256)):  # a click during the warm-up waits for its parse
                table = self._tables.get(dataset.sha256)
                if table is None:
                    table = self._tables.put(dataset.sha256, load_file_isolated(
                        self.store.blob_path(dataset.sha256), dataset.name))
        return table

    def dataset_json(self, dataset: DatasetRow) -> dict:
        s = dataset.summary
        return dataset.public() | {
            "columns": [{k: c[k] for k in ("name", "original", "kind", "used", "reason", "missing", "distinct",
                                            "min", "median", "max")} for c in s["columns"]],
            "numeric_columns": s["numeric"], "notes": s["notes"],
            "excluded": [{"name": c["name"], "reason": c["reason"]} for c in s["columns"] if not c["used"]],
            "analyses": [a.public() for a in self.store.list_analyses(dataset.id)],
        }

    # Analyses -----------------------------------------------------------------

    def start_analysis(self, dataset_id: str, request: AnalysisRequest) -> AnalysisRow:
        """Check the options against the dataset and queue the analysis (refused at once when it cannot run)."""
        dataset = self.dataset(dataset_id)
        try:
            settings = AnalysisSettings.from_options(**request.options())
        except (TypeError, ValueError) as exc:
            raise SettingsError(str(exc)) from None
        from ..kinds import settle

        table = self.table(dataset)
        settings = settle(table, settings)  # column kinds; a bad --categorical fails now
        check_served_order(table, settings)  # ordered by a date column: refused now, not in the job
        variables = plan_variables(dataset.summary["numeric"], settings)  # unknown columns fail now, not in the job
        # beyond the work budget or the pair-table limit: refused now, with the estimate (app/budget.py)
        check_plan(estimate_work(len(variables), len(settings.run_measures), dataset.n_rows,
                                 settings.budget_permutations()))
        self._check_group_rows(dataset, settings)
        return self.jobs.submit(dataset.id, settings.to_dict())

    def _check_group_rows(self, dataset: DatasetRow, settings: AnalysisSettings) -> None:
        """Refuse at once what the job would fail on later: distances of a group over too many rows."""
        if not settings.groups or not any(MEASURES[m].family == "distance" for m in settings.measures):
            return
        if dataset.n_rows <= config.MAX_GROUP_ROWS:
            return
        table = self.table(dataset)
        for name, members in settings.groups:
            idx = [table.columns.index(m) for m in members]
            complete = int(np.isfinite(table.data[:, idx]).all(axis=1).sum())
            if complete > config.MAX_GROUP_ROWS:
                raise SettingsError(f"group {name!r} has {complete} complete rows; distance measures on column "
                                    f"groups handle at most {config.MAX_GROUP_ROWS} (they need all pairwise "
                                    "distances): sample the rows, or leave the group out of the distance measures")

    def analysis(self, analysis_id: str) -> AnalysisRow:
        row = self.store.get_analysis(analysis_id)
        if row is None:
            raise NotFound(f"no analysis {analysis_id!r}")
        return row

    def analysis_json(self, row: AnalysisRow) -> dict:
        out = row.public()
        if row.status == "done":
            res = self._results(row)
            out["variables"] = res["variables"]
            out["seconds"] = res["seconds"]
            out["verdicts_complete"] = res["verdicts"].get("complete", False)
        return out

    def cancel(self, analysis_id: str) -> AnalysisRow:
        row = self.analysis(analysis_id)
        if row.status not in ("queued", "running"):
            raise Conflict(f"analysis {analysis_id} is already {row.status}")
        return self.jobs.cancel(analysis_id)

    def rerun(self, analysis_id: str) -> AnalysisRow:
        """A new queued analysis with the same dataset and settings (after an interruption, say)."""
        row = self.analysis(analysis_id)
        self.dataset(row.dataset_id)
        return self.jobs.submit(row.dataset_id, row.settings)

    def delete_analysis(self, analysis_id: str) -> None:
        from ..store import StoreBusy

        try:
            if not self.store.delete_analysis(analysis_id):
                raise NotFound(f"no analysis {analysis_id!r}")
        except StoreBusy as exc:
            raise Conflict(str(exc)) from None
        self._pair_tables.pop(analysis_id)

    def delete_dataset(self, dataset_id: str) -> list[str]:
        """Remove a dataset with its analyses (its bytes too when no other dataset shares them)."""
        from ..store import StoreBusy

        dataset = self.dataset(dataset_id)
        try:
            removed = self.store.delete_dataset(dataset_id)
        except StoreBusy as exc:
            raise Conflict(str(exc)) from None
        if removed is None:
            raise NotFound(f"no dataset {dataset_id!r}")
        for aid in removed:
            self._pair_tables.pop(aid)
        if self.store.find_dataset_by_hash(dataset.sha256) is None:
            self._tables.pop(dataset.sha256)
        return removed

    def _results(self, row: AnalysisRow) -> dict:
        cached = self._pair_tables.get(row.id)
        if cached is not None:
            return cached
        with self._key_lock(("results", row.id)):
            cached = self._pair_tables.get(row.id)
            if cached is not None:
                return cached
            return self._load_results(row)

    def _load_results(self, row: AnalysisRow) -> dict:
        if row.status != "done":
            raise Conflict(f"analysis {row.id} is {row.status}, not done")
        res = self.store.get_results(row.id)
        if res is None:
            raise Conflict(f"analysis {row.id} has no stored results")
        settings = AnalysisSettings.from_dict(row.settings)
        if res["records"] is None:
            rows = unpack_rows(res.pop("rows"))
        else:  # stored as JSON records by an earlier version
            rows = [PairRow(r["x"], r["y"], r["measure"], *(math.nan if r[f] is None else r[f] for f in
                                                              ("estimate", "ci_low", "ci_high", "p_value", "q_value")),
                            int(r["n"]), r["note"], r.get("method", "")) for r in res.pop("records")]
        res["table"] = PairTable(res["variables"], settings.table_measures(), settings, rows, res["seconds"])
        return self._pair_tables.put(row.id, res)

    def pair_table(self, row: AnalysisRow) -> PairTable:
        return self._results(row)["table"]

    def serial_note(self, row: AnalysisRow) -> str:
        """The serial-dependence sentence of an analysis (warning when not ordered, trending columns when
        ordered), computed once per analysis from its dataset."""
        key = ("serial-note", row.id)
        cached = self._figures.get(key)
        if cached is None:
            # the job stores the sentence of the check it ran with the analysis (payloads.precompute_pages)
            stored = (self._results(row).get("pages") or {}).get("serial_note")
            if stored is not None:
                return self._figures.put(key, stored)
            data = self.table(self.dataset(row.dataset_id))
            cached = self._figures.put(key, serial_note(data.data, data.columns, self.pair_table(row).settings))
        return cached

    def pair_records(self, row: AnalysisRow) -> list[dict]:
        from ..export import json_records

        return json_records(r.record() for r in self.pair_table(row).rows)

    def pair_records_json(self, row: AnalysisRow) -> bytes:
        """:meth:`pair_records` serialised once (results never change), as the API sends it."""
        key = ("pairs-json", row.id)
        cached = self._figures.get(key)
        if cached is None:
            body = json.dumps(self.pair_records(row), ensure_ascii=False, allow_nan=False, separators=(",", ":"))
            cached = self._figures.put(key, body.encode("utf-8"))
        return cached

    def verdicts(self, row: AnalysisRow) -> dict:
        return self._results(row)["verdicts"]

    def order(self, row: AnalysisRow, cluster_on: str | None) -> list[int]:
        table = self.pair_table(row)
        if not cluster_on:
            return list(range(len(table.variables)))
        if cluster_on not in table.measures:
            raise SettingsError(f"cannot order by {cluster_on!r}: choose one of {', '.join(table.measures)}")
        key = ("order", row.id, cluster_on)
        cached = self._figures.get(key)
        if cached is None:
            from .. import figures

            cached = self._figures.put(key, figures.cluster_order(table, cluster_on))
        return cached

    @staticmethod
    def default_difference(measures: tuple[str, ...]) -> tuple[str, str] | None:
        return default_difference(measures)

    def warm(self, analysis_id: str) -> None:
        """Build the default figures of a finished analysis so its first page view is fast."""
        row = self.store.get_analysis(analysis_id)
        if row is None or row.status != "done":
            return
        table = self.pair_table(row)
        self.heatmaps(row, None, self.default_difference(table.measures))
        self.significance_counts(row)
        self.table(self.dataset(row.dataset_id))  # the first click's points come from the parsed table
        self.pair_grid(row)  # read from the job's stored arrays: about 0.1 s at 499,500 pairs

    def _key_lock(self, key) -> threading.Lock:
        with self._locks_guard:
            return self._locks.setdefault(key, threading.Lock())

    def heatmaps(self, row: AnalysisRow, cluster_on: str | None, diff: tuple[str, str] | None) -> dict:
        """Figures for the analysis page (cached: finished results never change)."""
        key = ("heatmaps", row.id, cluster_on, diff)
        cached = self._figures.get(key)
        if cached is not None:
            return cached
        with self._key_lock(key):  # a page request during warm-up waits instead of building twice
            cached = self._figures.get(key)
            if cached is not None:
                return cached
            return self._build_heatmaps(row, cluster_on, diff, key)

    def _build_heatmaps(self, row: AnalysisRow, cluster_on, diff, key) -> dict:
        table = self.pair_table(row)
        stored = (self._results(row).get("pages") or {}).get("heatmaps")
        if (stored and stored.get("format") == MAPS_FORMAT and cluster_on is None and diff is not None
                and list(diff) == stored["diff"]):
            out = {"order": stored["order"], "top": stored["top"], "embedded": Markup(stored["embedded"])}
        else:
            out = heatmap_payload(table, self.order(row, cluster_on), diff)
        return self._figures.put(key, out)

    def significance_counts(self, row: AnalysisRow) -> tuple[dict, dict]:
        """Per measure: pairs with q below the significance level, and pairs with a q at all (cached)."""
        key = ("significance", row.id)
        cached = self._figures.get(key)
        if cached is None:
            table = self.pair_table(row)
            significant = {m: 0 for m in table.measures}
            tested = {m: 0 for m in table.measures}
            alpha = config.SIGNIFICANCE_LEVEL
            for r in table.rows:
                if r.q_value == r.q_value:  # a defined q: the pair was tested
                    tested[r.measure] += 1
                    if r.q_value < alpha:
                        significant[r.measure] += 1
            cached = self._figures.put(key, (significant, tested))
        return cached

    def pair_grid(self, row: AnalysisRow) -> PairGrid:
        """The pair table as arrays for the paged endpoint: the job's stored grid, else built from the
        stored rows (analyses saved before grids were stored); verdicts learnt since are written in."""
        key = ("pairgrid", row.id)
        cached = self._figures.get(key)
        if cached is not None:
            return cached
        with self._key_lock(key):
            cached = self._figures.get(key)  # built by another request (or the warm-up) while this one waited
            if cached is not None:
                return cached
            res = self._results(row)
            grid = PairGrid.from_bytes(res["grid"]) if res.get("grid") else None
            if grid is None:
                grid = PairGrid.from_table(self.pair_table(row), self.verdicts(row).get("labels", {}))
            for (x, y), label in res.get("learnt", {}).items():
                grid.set_verdict(x, y, label)
            return self._figures.put(key, grid)

    def pair(self, row: AnalysisRow, x: str, y: str) -> dict:
        """The full pair detail (:func:`pairlens.pairs.full_detail`) with points and the analysis's q-values,
        cached per pair."""
        key = (row.id, x, y)
        cached = self._details.get(key)
        if cached is not None:
            return cached
        table = self.pair_table(row)
        if x not in table.variables or y not in table.variables:
            missing = x if x not in table.variables else y
            raise NotFound(f"{missing!r} is not a variable of analysis {row.id}")
        dataset = self.dataset(row.dataset_id)
        data = self.table(dataset)
        if x not in data.columns or y not in data.columns:
            raise SettingsError("the pair view shows single columns; groups appear in the table only")
        started = time.perf_counter()
        from ..kinds import levels_of

        detail = full_detail(data.data, data.columns, x, y, table.settings, table,
                             levels=levels_of(data, table.settings)).to_json(include_points=True)
        detail["seconds"] = time.perf_counter() - started
        detail["analysis_id"] = row.id
        labels = self.verdicts(row).setdefault("labels", {})
        pattern = detail.get("pattern") or {}
        if pattern.get("label") and labels.get(pair_key(x, y)) != pattern["label"] and x in table.variables:
            a, b = sorted((x, y), key=table.variables.index)
            labels[pair_key(a, b)] = pattern["label"]
            with self._key_lock(("pairgrid", row.id)):  # not between a grid's build and its learnt labels
                self._results(row).setdefault("learnt", {})[(a, b)] = pattern["label"]
                grid = self._figures.get(("pairgrid", row.id))
                if grid is not None:
                    grid.set_verdict(a, b, pattern["label"])
        return self._details.put(key, detail)

    def pair_view(self, row: AnalysisRow, x: str, y: str, packed: bool = False) -> tuple[dict, bool]:
        """What the pair page needs at once: ``(detail, complete)``.

        The full :meth:`pair` when it is cached; otherwise a quick detail with
        the points, the analysis's measures and the Gaussian moments, without
        the Henze-Zirkler test and the verdict (``complete`` False), which the
        page then fetches from the API. The Henze-Zirkler statistic needs all
        pairwise distances of up to ``config.HZ_MAX_ROWS`` rows (about 0.5 s
        at 5000 rows) and the verdict reuses it. ``packed``: the points as
        :func:`pairlens.pairs.pack_points` (base64 arrays) instead of JSON lists.
        """
        cached = self._details.get((row.id, x, y))
        if cached is not None:
            if packed and isinstance((cached.get("points") or {}).get("x"), list):
                pts = cached["points"]
                return cached | {"points": pack_points(pts["x"], pts["y"], pts["rows"])}, True
            return cached, True
        table = self.pair_table(row)
        if table.settings.ordered is not None:  # points in time order and the series panel: the full detail
            return self.pair(row, x, y), True
        if x in table.settings.categorical or y in table.settings.categorical:  # groups or contingency: cheap
            return self.pair(row, x, y), True
        if table.settings.given:  # the residuals on the given columns come with the full detail
            return self.pair(row, x, y), True
        if x not in table.variables or y not in table.variables:
            missing = x if x not in table.variables else y
            raise NotFound(f"{missing!r} is not a variable of analysis {row.id}")
        if x == y:
            raise SettingsError("x and y must be different columns")
        data = self.table(self.dataset(row.dataset_id))
        if x not in data.columns or y not in data.columns:
            raise SettingsError("the pair view shows single columns; groups appear in the table only")
        detail = quick_detail(data.data, data.columns, x, y, table).to_json(
            include_points="packed" if packed else True)
        return detail, False

    def report_html(self, row: AnalysisRow) -> str:
        from ..report import build_report

        table = self.pair_table(row)
        dataset = self.dataset(row.dataset_id)
        data = self.table(dataset)
        return build_report(data, table, command=table.settings.reproduce_command(dataset.name, "report.html"))
