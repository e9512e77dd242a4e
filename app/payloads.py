"""Page payloads built from a finished analysis: the analysis page's maps and the pair table's columns.

Below the web layer: the background job (:mod:`pairlens.jobs`) builds them once
when an analysis finishes (:func:`precompute_pages`) and the server
(:mod:`pairlens.web.workspace`) serves them or builds them on demand. Figures come
from :mod:`pairlens.figures`, the builders the report uses too.
"""

from __future__ import annotations

from .core.registry import MEASURES, get_measure
from .formatting import embed_json
from .pairtable import PairTable

__all__ = ["MAPS_FORMAT", "pair_key", "default_difference", "heatmap_payload", "pair_columns",
           "precompute_pages"]


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


def precompute_pages(table: PairTable) -> dict:
    """What the analysis page shows by default, built once by the background job and stored.

    JSON-serialisable: the embedded JSON text (already escaped for a page) and
    the small pieces the template renders itself.
    """
    diff = default_difference(table.measures)
    heat = heatmap_payload(table, list(range(len(table.variables))), diff)
    serial = getattr(table, "serial", None)
    return {"serial_note": serial.message(table.settings.ordered is not None) if serial is not None else None,
            "heatmaps": {"diff": list(diff) if diff else None, "order": heat["order"], "top": heat["top"],
                         "embedded": str(heat["embedded"]), "format": MAPS_FORMAT}}

