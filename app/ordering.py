"""Rows in time order (``--ordered [COL]``, ``--difference``): the order, the serial check, trending pairs.

The statistics live in :mod:`pairlens.core.serial`; this module puts a table's
rows in time order, runs the per-column serial-dependence check and applies its
consequences to the pair table's rows.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from . import config
from .core import serial as serial_mod
from .errors import SettingsError
from .pairtable import PairRow
from .plan import AnalysisSettings

__all__ = ["time_order", "serial_check", "serial_note", "mark_trending", "trending_sides", "with_time_column",
           "check_served_order"]


def with_time_column(table, ordered: str | None):
    """The loaded ``table`` (pairlens.ingest.Table) ready for ``--ordered COL`` when COL is a date/time
    column: its times (seconds since 1970-01-01 UTC) appended as a numeric column that
    :func:`time_order` sorts by and leaves out. Any other table is returned as it is.

    Rows without a time (missing, or a cell that is not a date the reader can read) are left out
    by :func:`time_order`, which says how many; rows that share a time keep their file order and
    the note says how many. A date column with no readable time at all is refused.
    """
    import dataclasses

    times = getattr(table, "times", {}) or {}
    if not ordered or ordered not in times or ordered in table.columns:
        return table
    seconds = np.asarray(times[ordered], dtype=float)
    if not np.isfinite(seconds).any():
        raise SettingsError(f"--ordered {ordered!r}: none of its cells could be read as a date or time; "
                            "write them as 2024-05-31 or 2024-05-31 12:00, or give a numeric time column")
    notes = list(table.notes)
    missing = next((c.missing for c in table.info if c.name == ordered), 0)
    unreadable = int(np.isnan(seconds).sum()) - int(missing)
    if unreadable > 0:
        notes.append(f"--ordered {ordered}: {unreadable} cell{'s' if unreadable != 1 else ''} could not be read "
                     "as dates or times; their rows are left out")
    return dataclasses.replace(table, columns=[*table.columns, ordered],
                               data=np.column_stack([table.data, seconds]), notes=notes)


def check_served_order(table, settings: AnalysisSettings) -> None:
    """Refuse ``ordered`` by a date column where the dashboard and the API run the analysis: they
    sort by a numeric column only (the command line and the library sort by dates)."""
    if settings.ordered and settings.ordered in (getattr(table, "times", {}) or {}):
        raise SettingsError(f"ordered: {settings.ordered!r} holds dates; the dashboard and the API sort by a "
                            "numeric column only (the command line and the library sort by dates): add a "
                            "numeric time column, or use rows in file order")


def time_order(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings
               ) -> tuple[np.ndarray, list[str], str]:
    """The data in time order (sorted by the ordering column, which is then left out; differenced
    under --difference), the remaining names and a note for the table."""
    names = list(names)
    note = ""
    if settings.ordered:
        if settings.ordered not in names:
            raise SettingsError(f"--ordered {settings.ordered!r}: no numeric or date/time column of that name; "
                                f"numeric columns are: {', '.join(names[:20])}{' ...' if len(names) > 20 else ''}")
        k = names.index(settings.ordered)
        key = data[:, k]
        known = ~np.isnan(key)
        order = np.flatnonzero(known)[np.argsort(key[known], kind="stable")]
        repeated = int(np.count_nonzero(np.diff(key[order]) == 0))
        if repeated:
            rows = f"{repeated} row{'s share' if repeated != 1 else ' shares'}"
            note = (f"{settings.ordered} has repeated values ({rows} a value with an earlier one); rows with equal "
                    "values keep their file order")
        if not known.all():
            left = int((~known).sum())
            note = "; ".join(filter(None, [note, f"{left} row{'s' if left != 1 else ''} without a value of "
                                                 f"{settings.ordered} left out"]))
        data = np.delete(data[order], k, axis=1)
        names = names[:k] + names[k + 1:]
    if settings.difference:
        data = np.diff(data, axis=0)
    return data, names, note


def serial_check(data: np.ndarray, names: Sequence[str]) -> "serial_mod.SerialCheck":
    """Per-column serial dependence of ``data`` in its row order (at most config.SERIAL_CHECK_MAX_ROWS
    rows, the first ones), and whether enough columns show it to warn."""
    from .tiles import one_blas_thread

    # The unit-root regressions are a few hundred small QR factorisations: a threaded BLAS makes
    # each about 100x slower on a busy 2-core machine (measured: 243 ms against 2.3 ms for
    # 940 x 25 at load 8), which was 10-35 s of the demo's analysis and of its first page view.
    with one_blas_thread():
        return serial_mod.serial_check(np.asarray(data, float)[: config.SERIAL_CHECK_MAX_ROWS], list(names),
                                       level=config.SERIAL_LJUNG_BOX_LEVEL, share=config.SERIAL_WARN_SHARE)


def serial_note(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings | None = None) -> str:
    """The serial-dependence check's sentence for the rows as ``settings`` order them (file order when
    not ordered): the warning without --ordered, the trending columns with it; "" when nothing to say."""
    settings = settings or AnalysisSettings()
    data = np.asarray(data, dtype=float)
    note = ""
    if settings.ordered is not None:
        data, names, note = time_order(data, names, settings)
    return serial_check(data, names)._replace(order_note=note).message(settings.ordered is not None)


def mark_trending(rows: list[PairRow], check: "serial_mod.SerialCheck") -> None:
    """A pair with a trending side is never called dependent on levels alone: no p-value, the reason."""
    trending = set(check.trending)
    for r in rows:
        sides = [v for v in (r.x, r.y) if v in trending]
        if sides and r.p_value == r.p_value:
            r.p_value = math.nan
            r.note = "; ".join(filter(None, [r.note, serial_mod.trending_reason(sides)]))


def trending_sides(x: str, y: str, check: "serial_mod.SerialCheck | None") -> tuple[str, ...]:
    """The sides of the pair (x, y) that the serial check of an ordered analysis found trending; the
    verdict calls such a pair "not tested (trending)"."""
    trending = set(check.trending) if check is not None else set()
    return tuple(v for v in (x, y) if v in trending)
