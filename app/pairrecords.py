"""A finished analysis's pair rows as columns: how the workspace stores them.

One ``.npz`` (no pickled objects): the names, measures, notes and methods once each
as JSON, and per row their codes, the five numbers and n. At 2 million rows the
JSON list of records it replaces took about 30 s to write and 15 s to read back
into rows; these columns take a few seconds each way. Numbers that are not finite
are stored as NaN, as the JSON records stored them as null.
"""

from __future__ import annotations

import gc
import io
import json

import numpy as np

from .pairtable import PairRow

__all__ = ["ROWS_FORMAT", "pack_rows", "unpack_rows", "is_packed_rows"]

ROWS_FORMAT = 1
_NUMBERS = ("estimate", "ci_low", "ci_high", "p_value", "q_value")


def _codes(values, book: dict) -> np.ndarray:
    return np.fromiter((book.setdefault(v, len(book)) for v in values), dtype=np.int32)


def pack_rows(rows: list[PairRow]) -> bytes:
    """The rows as one ``.npz``; :func:`unpack_rows` gives them back."""
    names: dict[str, int] = {}
    measures: dict[str, int] = {}
    notes: dict[str, int] = {}
    methods: dict[str, int] = {}
    arrays = {"x": _codes((r.x for r in rows), names), "y": _codes((r.y for r in rows), names),
              "measure": _codes((r.measure for r in rows), measures),
              "note": _codes((r.note for r in rows), notes), "method": _codes((r.method for r in rows), methods),
              "n": np.fromiter((int(r.n) for r in rows), dtype=np.int64, count=len(rows))}
    for field in _NUMBERS:
        values = np.fromiter((getattr(r, field) for r in rows), dtype=np.float64, count=len(rows))
        values[~np.isfinite(values)] = np.nan
        arrays[field] = values
    meta = {"format": ROWS_FORMAT, "names": list(names), "measures": list(measures), "notes": list(notes),
            "methods": list(methods)}
    buf = io.BytesIO()
    np.savez(buf, meta=np.frombuffer(json.dumps(meta, ensure_ascii=False).encode("utf-8"), dtype=np.uint8),
             **arrays)
    return buf.getvalue()


def is_packed_rows(blob: bytes) -> bool:
    """Whether a stored blob is :func:`pack_rows` output (a zip archive) rather than compressed JSON."""
    return bytes(blob[:2]) == b"PK"


def unpack_rows(blob: bytes) -> list[PairRow]:
    """The rows :func:`pack_rows` stored, in their order."""
    with np.load(io.BytesIO(blob), allow_pickle=False) as z:
        meta = json.loads(z["meta"].tobytes().decode("utf-8"))
        if meta.get("format") != ROWS_FORMAT:
            raise ValueError(f"stored rows of format {meta.get('format')!r}; this version reads {ROWS_FORMAT}")
        def decoded(key: str, book: str) -> list:
            table = np.empty(len(meta[book]), dtype=object)
            table[:] = meta[book]
            return table[z[key]].tolist()

        columns = [decoded("x", "names"), decoded("y", "names"), decoded("measure", "measures")]
        columns += [z[f].tolist() for f in _NUMBERS]
        columns += [z["n"].tolist(), decoded("note", "notes"), decoded("method", "methods")]
    # millions of new objects and nothing to collect: the collector's passes over them are pure cost
    enabled = gc.isenabled()
    gc.disable()
    try:
        return list(map(PairRow, *columns))
    finally:
        if enabled:
            gc.enable()
