"""The pair table as CSV or JSON records, shared by the CLI, the API and the report."""

from __future__ import annotations

import csv
import io
import json
import math
from typing import Iterable

__all__ = ["PAIR_FIELDS", "neutralise_cell", "pairs_to_csv", "pairs_to_json", "clean_number"]

PAIR_FIELDS = ("x", "y", "measure", "estimate", "ci_low", "ci_high", "p_value", "q_value", "n", "note")
_FORMULA_LEADS = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(text: str) -> str:
    """Prefix a quote to text a spreadsheet would run as a formula (OWASP CSV injection advice)."""
    return "'" + text if text.startswith(_FORMULA_LEADS) else text


def clean_number(value) -> float | None:
    """JSON has no NaN or infinity: missing numbers become null."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _csv_value(field: str, value) -> str:
    if field in ("x", "y", "measure", "note"):
        return neutralise_cell(str(value))
    if field == "n":
        return str(int(value))
    value = float(value)
    return repr(value) if math.isfinite(value) else ""


def pairs_to_csv(records: Iterable[dict]) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(PAIR_FIELDS)
    for rec in records:
        writer.writerow([_csv_value(f, rec[f]) for f in PAIR_FIELDS])
    return buf.getvalue()


def json_records(records: Iterable[dict]) -> list[dict]:
    out = []
    for rec in records:
        row = {}
        for f in PAIR_FIELDS:
            v = rec[f]
            if f in ("x", "y", "measure", "note"):
                row[f] = str(v)
            elif f == "n":
                row[f] = int(v)
            else:
                row[f] = clean_number(v)
        out.append(row)
    return out


def pairs_to_json(records: Iterable[dict]) -> str:
    return json.dumps(json_records(records), indent=1, ensure_ascii=False, allow_nan=False)


# Streaming -------------------------------------------------------------------------
# The pair table written in chunks of rows, never as one Python object per row of the
# whole table: a matrix-path table (pairlens.matrix_path.WidePairTable) holds arrays, and
# each chunk's rows exist only while it is written.

STREAM_FORMATS = {".csv": "csv", ".jsonl": "jsonl", ".parquet": "parquet"}
_CHUNK_ROWS = 100_000


class _LongTable:
    """A pair table as row-aligned arrays; ``take(idx)`` gives the fields of some rows as lists."""

    def __init__(self, table) -> None:
        import numpy as np

        self.measure_names = list(table.measures)
        if hasattr(table, "columns") and callable(getattr(table, "columns")):
            i, j, names, arrays = table.columns()
            m = len(self.measure_names)
            self.names = [str(v) for v in names]
            self._i, self._j, self._arrays = i, j, [arrays[name] for name in self.measure_names]
            layout = getattr(table, "row_layout", None)
            if layout is None:
                # every pair once per measure (pairlens.matrix_path.WidePairTable)
                # int32 while it fits: these two index every row (72 MB each at 9 million rows in int64)
                itype = np.int32 if i.size * m < 2 ** 31 else np.int64
                self._pair = np.repeat(np.arange(i.size, dtype=itype), m)
                self._measure = np.tile(np.arange(m, dtype=itype), i.size)
                self.q = np.empty(i.size * m)
                self.p = np.empty(i.size * m)
                self.estimate = np.empty(i.size * m)
                for k, a in enumerate(self._arrays):
                    self.q[k::m], self.p[k::m], self.estimate[k::m] = a.q_value, a.p_value, a.estimate
            else:
                # rows that differ by measure (pairlens.matrix_path.TopPairTable)
                self._pair, self._measure = layout()
                self.q = np.empty(self._pair.size)
                self.p = np.empty(self._pair.size)
                self.estimate = np.empty(self._pair.size)
                for k, a in enumerate(self._arrays):
                    sel = self._measure == k
                    at = self._pair[sel]
                    self.q[sel], self.p[sel], self.estimate[sel] = a.q_value[at], a.p_value[at], a.estimate[at]
        else:
            rows = table.rows
            self._rows = rows
            self.names = None
            index = {name: k for k, name in enumerate(self.measure_names)}
            self._measure = np.array([index[r.measure] for r in rows], dtype=np.int64)
            self.q = np.array([r.q_value for r in rows], dtype=float)
            self.p = np.array([r.p_value for r in rows], dtype=float)
            self.estimate = np.array([r.estimate for r in rows], dtype=float)
        self.size = int(self.q.size)

    def take_arrow(self, idx):
        """The rows ``idx`` of a matrix-path table as a pyarrow table (no Python object per row)."""
        import numpy as np
        import pyarrow as pa

        pair, meas = self._pair[idx], self._measure[idx]
        names = pa.array([neutralise_cell(v) for v in self.names], type=pa.string())
        measures = pa.array([neutralise_cell(v) for v in self.measure_names], type=pa.string())
        fields = ("estimate", "ci_low", "ci_high", "p_value", "q_value")
        cols = {f: np.empty(idx.size) for f in fields}
        n = np.empty(idx.size, dtype=np.int64)
        note_codes = np.empty(idx.size, dtype=np.int32)
        note_texts: list[str] = []
        for k, a in enumerate(self._arrays):
            sel = meas == k
            if not sel.any():
                continue
            at = pair[sel]
            for f in fields:
                cols[f][sel] = getattr(a, f)[at]
            n[sel] = a.n[at]
            note_codes[sel] = a.note[at] + len(note_texts)
            note_texts.extend(neutralise_cell(t) for t in a.notes)

        def text(codes, dictionary):
            return pa.DictionaryArray.from_arrays(pa.array(codes), dictionary).cast(pa.string())

        arrays = [text(self._i[pair], names), text(self._j[pair], names), text(meas, measures)]
        arrays += [pa.array(cols[f], from_pandas=True) for f in fields]   # NaN as an empty cell
        arrays += [pa.array(n), text(note_codes, pa.array(note_texts, type=pa.string()))]
        return pa.Table.from_arrays(arrays, names=list(PAIR_FIELDS))

    def take(self, idx) -> dict:
        import numpy as np

        if self.names is None:
            recs = [self._rows[k] for k in idx.tolist()]
            return {f: [getattr(r, f) for r in recs] for f in PAIR_FIELDS}
        pair, meas = self._pair[idx], self._measure[idx]
        out = {"x": np.asarray(self.names, dtype=object)[self._i[pair]].tolist(),
               "y": np.asarray(self.names, dtype=object)[self._j[pair]].tolist(),
               "measure": np.asarray(self.measure_names, dtype=object)[meas].tolist()}
        fields = ("estimate", "ci_low", "ci_high", "p_value", "q_value", "n")
        cols = {f: np.empty(idx.size, dtype=np.int64 if f == "n" else float) for f in fields}
        notes = np.empty(idx.size, dtype=object)
        for k, a in enumerate(self._arrays):
            sel = meas == k
            if not sel.any():
                continue
            at = pair[sel]
            for f in fields:
                cols[f][sel] = getattr(a, f)[at]
            notes[sel] = np.asarray(a.notes, dtype=object)[a.note[at]]
        out.update({f: cols[f].tolist() for f in fields})
        out["note"] = notes.tolist()
        return out


def select_rows(long: _LongTable, top: int | None = None, max_q: float | None = None):
    """Row indices to write: all; or q <= max_q; or each measure's ``top`` rows of smallest q
    (then smallest p, then largest |estimate|), in that order."""
    import numpy as np

    if max_q is None and top is None:
        return np.arange(long.size, dtype=np.int32 if long.size < 2 ** 31 else np.int64)
    keep = np.ones(long.size, dtype=bool)
    if max_q is not None:
        keep &= long.q <= max_q
    if top is None:
        return np.flatnonzero(keep)
    parts = []
    for k in range(len(long.measure_names)):
        sel = np.flatnonzero(keep & (long._measure == k) & ~np.isnan(long.q))
        order = np.lexsort((-np.abs(np.nan_to_num(long.estimate[sel])), long.p[sel], long.q[sel]))
        parts.append(sel[order[:top]])
    return np.concatenate(parts) if parts else np.empty(0, dtype=np.int64)


def _csv_lines(chunk: dict, count: int):
    cells = {f: ([neutralise_cell(str(v)) for v in chunk[f]] if f in ("x", "y", "measure", "note")
                 else chunk[f] if f == "n"
                 else [repr(v) if math.isfinite(v) else "" for v in chunk[f]]) for f in PAIR_FIELDS}
    return zip(*(cells[f] for f in PAIR_FIELDS))


def _json_lines(chunk: dict) -> str:
    def num(values):
        return [repr(v) if math.isfinite(v) else "null" for v in values]

    text = {f: [json.dumps(str(v), ensure_ascii=False) for v in chunk[f]] for f in ("x", "y", "measure", "note")}
    text.update({f: num(chunk[f]) for f in ("estimate", "ci_low", "ci_high", "p_value", "q_value")})
    text["n"] = [str(int(v)) for v in chunk["n"]]
    keys = [json.dumps(f) for f in PAIR_FIELDS]
    return "".join("{" + ", ".join(f"{k}: {v}" for k, v in zip(keys, row)) + "}\n"
                   for row in zip(*(text[f] for f in PAIR_FIELDS)))


def write_pairs_stream(table, out, fmt: str = "csv", *, top: int | None = None,
                       max_q: float | None = None) -> int:
    """Write ``table`` to the text or binary stream ``out`` in chunks; returns the rows written.

    ``fmt``: ``"csv"`` (the bytes :func:`pairs_to_csv` gives), ``"jsonl"`` (one JSON object a
    line, the fields of :func:`json_records`) or ``"parquet"`` (``out`` a path or binary file;
    needs pyarrow). ``max_q`` keeps rows with q-value at most Q; ``top`` keeps each measure's
    K rows of smallest q-value. q-values are those of the whole table, filtered or not.
    """
    import numpy as np

    long = _LongTable(table)
    idx = select_rows(long, top, max_q)
    if fmt == "parquet":
        return _write_parquet(long, idx, out)
    if fmt == "csv":
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow(PAIR_FIELDS)
        if long.names is not None:
            # a matrix-path table: formatted by Arrow's CSV writer, chunk by chunk (text cells
            # quoted; numbers in their shortest round-trip form, equal in value to the Python writer's)
            import pyarrow.csv as pa_csv

            from collections import deque
            from concurrent.futures import ThreadPoolExecutor

            options = pa_csv.WriteOptions(include_header=False, quoting_style="needed")

            def formatted(start: int) -> str:
                buf = io.BytesIO()
                pa_csv.write_csv(long.take_arrow(np.asarray(idx[start:start + _CHUNK_ROWS])), buf, options)
                return buf.getvalue().decode("utf-8")

            # Arrow formats without the GIL: two chunks at a time, written in order, at most
            # four formatted chunks held at once
            with ThreadPoolExecutor(max_workers=2) as pool:
                pending: deque = deque()
                for start in range(0, idx.size, _CHUNK_ROWS):
                    pending.append(pool.submit(formatted, start))
                    if len(pending) >= 4:
                        out.write(pending.popleft().result())
                while pending:
                    out.write(pending.popleft().result())
            return int(idx.size)
    for start in range(0, idx.size, _CHUNK_ROWS):
        part = idx[start:start + _CHUNK_ROWS]
        chunk = long.take(np.asarray(part))
        if fmt == "csv":
            writer.writerows(_csv_lines(chunk, part.size))
        else:
            out.write(_json_lines(chunk))
    return int(idx.size)


def _write_parquet(long: _LongTable, idx, out) -> int:
    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.schema([("x", pa.string()), ("y", pa.string()), ("measure", pa.string()),
                        ("estimate", pa.float64()), ("ci_low", pa.float64()), ("ci_high", pa.float64()),
                        ("p_value", pa.float64()), ("q_value", pa.float64()), ("n", pa.int64()),
                        ("note", pa.string())])
    with pq.ParquetWriter(out, schema) as writer:
        for start in range(0, max(idx.size, 1), _CHUNK_ROWS):
            part = np.asarray(idx[start:start + _CHUNK_ROWS])
            chunk = long.take(part)
            # missing numbers as nulls, as in the JSON forms
            arrays = [pa.array(chunk[f], type=schema.field(f).type,
                               from_pandas=f not in ("x", "y", "measure", "note", "n")) for f in PAIR_FIELDS]
            writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
    return int(idx.size)
