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
