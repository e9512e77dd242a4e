"""Page payloads built from a finished analysis: the analysis page's maps and wide pair table.

Below the web layer: the background job (:mod:`pairlens.jobs`) builds them once
when an analysis finishes (:func:`precompute_pages`) and the server
(:mod:`pairlens.web.workspace`) serves them or builds them on demand. Figures come
from :mod:`pairlens.figures`, the builders the report uses too.
"""

from __future__ import annotations

import numpy as np

from . import config
from .core.registry import MEASURES, get_measure
from .formatting import embed_json
from .pairtable import PairTable

__all__ = ["MAPS_FORMAT", "pair_key", "default_difference", "heatmap_payload", "pair_columns",
           "pair_rows_payload", "precompute_pages"]


def pair_key(x: str, y: str) -> str:
    """The key of an unordered pair in the verdict labels (x before y in variable order)."""
    return f"{x}\u0000{y}"


def default_difference(measures: tuple[str, ...]) -> tuple[str, str] | None:
    """The difference view shown first: a distance measure against the linear one, if chosen."""
    measures = tuple(measures)
    if len(measures) < 2:
        return None
    linear = [m for m in measures if get_measure(m).family == "linear"]
    base = linear[0] if linear else measures[0]
    others = [m for m in measures if m != base]
    distance = [m for m in others if get_measure(m).family == "distance" and not get_measure(m).signed]
    return (distance or others)[0], base


MAPS_FORMAT = 2  # pages stored by older versions held Plotly figures; those are rebuilt


def heatmap_payload(table: PairTable, order: list[int], diff: tuple[str, str] | None) -> dict:
    """The canvas maps of every measure (and the difference map) in one order, embedded for a page."""
    from . import figures

    payload = figures.map_payload(table, order, diff)
    return {"order": payload["variables"], "top": payload["top"], "embedded": embed_json(payload)}


def pair_columns(measures) -> list[dict]:
    """Columns of the wide pair table: one per measure, one per direction of an asymmetric one."""
    columns: list[dict] = []
    for m in measures:
        meas = get_measure(m)
        if meas.symmetric:
            columns.append({"key": m, "measure": m, "label": meas.label, "direction": ""})
        else:
            columns.append({"key": m + ">", "measure": m, "label": meas.label, "direction": "x→y"})
            columns.append({"key": m + "<", "measure": m, "label": meas.label, "direction": "y→x"})
    return columns


def pair_rows_payload(table: PairTable, labels: dict) -> dict:
    """The wide pair table: one row per unordered pair, every measure's estimate and q, the verdict."""
    position = {v: i for i, v in enumerate(table.variables)}
    columns = pair_columns(table.measures)
    col_index = {c["key"]: k for k, c in enumerate(columns)}
    # Arrays over all rows, then one fancy assignment: a Python loop per field and row took
    # seconds at 45,000 pairs, and this runs before an analysis is marked done.
    nvar, ncol = len(table.variables), len(columns)
    rows_ = table.rows
    xi = np.fromiter((position[r.x] for r in rows_), dtype=np.int64, count=len(rows_))
    yi = np.fromiter((position[r.y] for r in rows_), dtype=np.int64, count=len(rows_))
    sym_key = {m: (col_index[m] if get_measure(m).symmetric else -1) for m in table.measures}
    base = np.fromiter((sym_key[r.measure] if sym_key[r.measure] >= 0 else col_index[r.measure + ">"]
                        for r in rows_), dtype=np.int64, count=len(rows_))
    forward = xi < yi
    asym = np.fromiter((sym_key[r.measure] < 0 for r in rows_), dtype=bool, count=len(rows_))
    col = np.where(asym & ~forward, base + 1, base)   # "<" sits right after ">"
    lo, hi = np.minimum(xi, yi), np.maximum(xi, yi)
    slot = lo * nvar + hi                              # one slot per unordered pair
    est = np.full((nvar * nvar, ncol), np.nan)
    qv = np.full((nvar * nvar, ncol), np.nan)
    nn = np.zeros(nvar * nvar, dtype=np.int64)
    est[slot, col] = np.fromiter((r.estimate for r in rows_), dtype=float, count=len(rows_))
    qv[slot, col] = np.fromiter((r.q_value for r in rows_), dtype=float, count=len(rows_))
    np.maximum.at(nn, slot, np.fromiter((int(r.n) for r in rows_), dtype=np.int64, count=len(rows_)))
    used = np.unique(slot)                             # sorted: input order of (x, y)
    names = table.variables
    # NaN and infinities become None (JSON null) in one masked pass per array, not per value
    values = []
    for arr in (est[used], qv[used]):
        obj = arr.astype(object)
        obj[~np.isfinite(arr)] = None
        values.append(obj.tolist())
    rows = [[names[a], names[b], n, e, q, labels.get(pair_key(names[a], names[b]))]
            for a, b, n, e, q in zip((used // nvar).tolist(), (used % nvar).tolist(), nn[used].tolist(), *values)]
    body = {"columns": columns, "rows": rows, "alpha": config.SIGNIFICANCE_LEVEL}
    return {"columns": columns, "n_rows": len(rows), "embedded": embed_json(body)}



def precompute_pages(table: PairTable, verdicts: dict) -> dict:
    """What the analysis page shows by default, built once by the background job and stored.

    JSON-serialisable: the embedded JSON text (already escaped for a page) and
    the small pieces the template renders itself.
    """
    diff = default_difference(table.measures)
    heat = heatmap_payload(table, list(range(len(table.variables))), diff)
    rows = pair_rows_payload(table, verdicts.get("labels", {}))
    serial = getattr(table, "serial", None)
    return {"serial_note": serial.message(table.settings.ordered is not None) if serial is not None else None,
            "heatmaps": {"diff": list(diff) if diff else None, "order": heat["order"], "top": heat["top"],
                         "embedded": str(heat["embedded"]), "format": MAPS_FORMAT},
            "pairrows": {"columns": rows["columns"], "n_rows": rows["n_rows"], "embedded": str(rows["embedded"])}}

