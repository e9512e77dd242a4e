"""The wide pair table as arrays: one row per unordered pair, sorted, filtered and paged on the server.

Built once from a finished analysis (:meth:`PairGrid.from_table`) by the background
job, stored as bytes beside the results (:meth:`PairGrid.to_bytes`) and read back
by the server (:meth:`PairGrid.from_bytes`) without a Python object per pair: at
1,000 columns (499,500 pairs) parsing the same rows from JSON and building these
arrays from them took about 7 s on the page's first request for the table.
"""

from __future__ import annotations

import io
import json
import math

import numpy as np

from .payloads import pair_columns, pair_key
from .pairtable import PairTable

__all__ = ["PairGrid", "GRID_FORMAT"]

GRID_FORMAT = 1  # stored grids of another format are rebuilt from the pair table


def _none_if_missing(value: float):
    return value if math.isfinite(value) else None


def _dense_rank(keys: list[str]) -> np.ndarray:
    """Rank of each key in sorted order; equal keys share a rank."""
    ordered = sorted(set(keys))
    position = {k: i for i, k in enumerate(ordered)}
    return np.array([position[k] for k in keys], dtype=np.int64)


class PairGrid:
    """The pair table of one analysis for the analysis page and its API.

    Rows are the unordered pairs in variable order (x before y). Per row: the
    pair's positions in :attr:`names`, its n (the largest over the measures),
    every measure column's estimate and q (two columns for an asymmetric measure,
    one per direction; NaN where missing) and a verdict code into :attr:`labels`
    (-1: none).
    """

    SORTS = ("evidence", "x", "y", "n", "verdict")

    def __init__(self, columns: list[dict], names: list[str], lo: np.ndarray, hi: np.ndarray, n: np.ndarray,
                 est: np.ndarray, q: np.ndarray, verdict: np.ndarray, labels: list[str]) -> None:
        self.columns = columns
        self.names = names
        self.lo = np.asarray(lo, dtype=np.int64)
        self.hi = np.asarray(hi, dtype=np.int64)
        self.n = np.asarray(n, dtype=np.int64)
        c = len(columns)
        self.est = np.asarray(est, dtype=float).reshape(-1, c)
        self.q = np.asarray(q, dtype=float).reshape(-1, c)
        self.verdict = np.asarray(verdict, dtype=np.int32).copy()  # written by set_verdict
        self.labels = list(labels)
        self._slot = self.lo * len(names) + self.hi                # ascending: rows are in variable order
        with np.errstate(invalid="ignore"):
            qmin = np.where(np.isnan(self.q), np.inf, self.q).min(axis=1) if c else np.zeros(len(self))
            emax = np.nan_to_num(np.abs(self.est), nan=-1.0).max(axis=1) if c else np.zeros(len(self))
        # Strength of evidence: the smallest q over the measures, then the largest |estimate|.
        self._evidence = np.lexsort((-emax, qmin))

    def __len__(self) -> int:
        return int(self.lo.size)

    # -- building and storing ------------------------------------------------------------------------

    @classmethod
    def from_table(cls, table: PairTable, labels: dict) -> "PairGrid":
        """The grid of a pair table; ``labels`` maps :func:`pairlens.payloads.pair_key` to a verdict label."""
        position = {v: i for i, v in enumerate(table.variables)}
        columns = pair_columns(table.measures)
        col_index = {c["key"]: k for k, c in enumerate(columns)}
        # Arrays over all rows, then one fancy assignment: a Python loop per field and row took
        # seconds at 45,000 pairs, and this runs before an analysis is marked done.
        nvar, ncol = len(table.variables), len(columns)
        rows_ = table.rows
        count = len(rows_)
        xi = np.fromiter((position[r.x] for r in rows_), dtype=np.int64, count=count)
        yi = np.fromiter((position[r.y] for r in rows_), dtype=np.int64, count=count)
        forward_col = {m: col_index[m] if m in col_index else col_index[m + ">"] for m in table.measures}
        asymmetric = {m: m not in col_index for m in table.measures}
        base = np.fromiter((forward_col[r.measure] for r in rows_), dtype=np.int64, count=count)
        asym = np.fromiter((asymmetric[r.measure] for r in rows_), dtype=bool, count=count)
        col = np.where(asym & (xi > yi), base + 1, base)   # "<" sits right after ">"
        slot = np.minimum(xi, yi) * nvar + np.maximum(xi, yi)
        used, where = np.unique(slot, return_inverse=True)  # sorted: variable order of (x, y)
        est = np.full((used.size, ncol), np.nan)
        qv = np.full((used.size, ncol), np.nan)
        nn = np.zeros(used.size, dtype=np.int64)
        est[where, col] = np.fromiter((r.estimate for r in rows_), dtype=float, count=count)
        qv[where, col] = np.fromiter((r.q_value for r in rows_), dtype=float, count=count)
        np.maximum.at(nn, where, np.fromiter((int(r.n) for r in rows_), dtype=np.int64, count=count))
        lo, hi = used // nvar, used % nvar
        names = list(table.variables)
        codes: dict[str, int] = {}
        verdict = np.fromiter(
            (-1 if (lab := labels.get(pair_key(names[a], names[b]))) is None else codes.setdefault(lab, len(codes))
             for a, b in zip(lo.tolist(), hi.tolist())), dtype=np.int32, count=used.size)
        return cls(columns, names, lo, hi, nn, est, qv, verdict, list(codes))

    def to_bytes(self) -> bytes:
        """The grid as one ``.npz`` (no pickled objects): arrays, and names, columns and labels as JSON."""
        meta = json.dumps({"format": GRID_FORMAT, "columns": self.columns, "names": self.names,
                           "labels": self.labels}, ensure_ascii=False).encode("utf-8")
        buf = io.BytesIO()
        np.savez(buf, meta=np.frombuffer(meta, dtype=np.uint8), lo=self.lo.astype(np.int32),
                 hi=self.hi.astype(np.int32), n=self.n, est=self.est, q=self.q, verdict=self.verdict)
        return buf.getvalue()

    @classmethod
    def from_bytes(cls, blob: bytes) -> "PairGrid | None":
        """A grid from :meth:`to_bytes`; None when it was stored in another format."""
        with np.load(io.BytesIO(blob), allow_pickle=False) as z:
            meta = json.loads(z["meta"].tobytes().decode("utf-8"))
            if meta.get("format") != GRID_FORMAT:
                return None
            return cls(meta["columns"], meta["names"], z["lo"], z["hi"], z["n"], z["est"], z["q"], z["verdict"],
                       meta["labels"])

    # -- reading -------------------------------------------------------------------------------------

    def index_of(self, x: str, y: str) -> int | None:
        """The row of the pair ``(x, y)`` in either order, None if it has none."""
        try:
            a, b = self.names.index(x), self.names.index(y)
        except ValueError:
            return None
        key = min(a, b) * len(self.names) + max(a, b)
        i = int(np.searchsorted(self._slot, key))
        return i if i < len(self) and self._slot[i] == key else None

    def set_verdict(self, x: str, y: str, label: str) -> None:
        """Record a verdict learnt later (the pair view's full detail) for the pair ``(x, y)``."""
        i = self.index_of(x, y)
        if i is None:
            return
        if label not in self.labels:
            self.labels.append(label)  # before the code that points at it, for readers meanwhile
        self.verdict[i] = self.labels.index(label)

    def verdict_of(self, i: int) -> str | None:
        code = int(self.verdict[i])
        return self.labels[code] if code >= 0 else None

    def verdicts(self) -> list[str]:
        present = np.unique(self.verdict[self.verdict >= 0])
        return sorted(self.labels[int(c)] for c in present if self.labels[int(c)])

    def row(self, i: int) -> list:
        """One row as the page reads it: ``[x, y, n, [estimates], [q-values], verdict]`` (missing: None)."""
        i = int(i)
        return [self.names[int(self.lo[i])], self.names[int(self.hi[i])], int(self.n[i]),
                [_none_if_missing(v) for v in self.est[i].tolist()],
                [_none_if_missing(v) for v in self.q[i].tolist()], self.verdict_of(i)]

    def _sort_keys(self, kind: str) -> np.ndarray:
        if kind in ("x", "y"):
            rank = _dense_rank([v.lower() for v in self.names])
            return rank[self.lo if kind == "x" else self.hi]
        rank = _dense_rank([""] + [v.lower() for v in self.labels])  # no verdict sorts as ""
        return rank[self.verdict + 1]

    def query(self, *, sort: str = "evidence", descending: bool = False, text: str = "", column: int = -1,
              q_below: float | None = None, verdict: str = "") -> np.ndarray:
        """Indices of the rows that pass the filters, in the asked order.

        ``sort`` is one of :attr:`SORTS` or ``"est:K"`` / ``"q:K"`` for column K;
        an estimate sorts by its size |estimate|; ``descending`` reverses the
        order (rows with equal keys keep their variable order either way);
        missing values come last either way.
        """
        keep = np.ones(len(self), dtype=bool)
        text = (text or "").strip().lower()
        if text:
            match = np.array([text in v.lower() for v in self.names], dtype=bool)
            keep &= match[self.lo] | match[self.hi]
        if 0 <= column < len(self.columns) and q_below is not None:
            with np.errstate(invalid="ignore"):
                keep &= self.q[:, column] < q_below
        if verdict:
            codes = [k for k, lab in enumerate(self.labels) if lab == verdict]
            keep &= np.isin(self.verdict, codes)
        if sort == "evidence":
            order = self._evidence
            if descending:
                order = order[::-1]
        else:
            kind, _, col = sort.partition(":")
            if kind in ("est", "q"):
                k = int(col)
                if not 0 <= k < len(self.columns):
                    raise ValueError(f"no column {k}")
                values = np.abs(self.est[:, k]) if kind == "est" else self.q[:, k]
                order = np.argsort(-values if descending else values, kind="stable")
                missing = np.isnan(values[order])
                order = np.concatenate([order[~missing], order[missing]])  # missing last either way
            elif kind == "n":
                order = np.argsort(-self.n if descending else self.n, kind="stable")
            elif kind in ("x", "y", "verdict"):
                keys = self._sort_keys(kind)
                order = np.argsort(-keys if descending else keys, kind="stable")
            else:
                raise ValueError(f"sort by one of {', '.join(self.SORTS)}, est:K or q:K, not {sort!r}")
        return order[keep[order]]

    def records(self, index: np.ndarray) -> list[dict]:
        """Rows as JSON records: names, n, one ``{key, estimate, q_value}`` per column, verdict."""
        out = []
        for i in index:
            x, y, n, est, q, verdict = self.row(i)
            out.append({"x": x, "y": y, "n": n,
                        "values": [{"key": c["key"], "estimate": est[k], "q_value": q[k]}
                                   for k, c in enumerate(self.columns)],
                        "verdict": verdict})
        return out

    def csv(self, index: np.ndarray) -> str:
        """Rows as CSV in the asked order; names neutralised as in every CSV pairlens writes."""
        import csv

        from .export import neutralise_cell

        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        head = ["x", "y", "n"]
        for c in self.columns:
            name = c["measure"] + ("" if not c["direction"] else ("_xy" if c["key"].endswith(">") else "_yx"))
            head += [name, name + "_q"]
        w.writerow(head + ["verdict"])
        for i in index:
            x, y, n, est, q, verdict = self.row(i)
            cells = [neutralise_cell(x), neutralise_cell(y), n]
            for k in range(len(self.columns)):
                cells += ["" if est[k] is None else repr(est[k]), "" if q[k] is None else repr(q[k])]
            w.writerow(cells + [verdict or ""])
        return buf.getvalue()
