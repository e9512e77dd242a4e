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

__all__ = ["time_order", "serial_check", "serial_note", "mark_trending", "trending_sides"]


def time_order(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings
               ) -> tuple[np.ndarray, list[str], str]:
    """The data in time order (sorted by the ordering column, which is then left out; differenced
    under --difference), the remaining names and a note for the table."""
    names = list(names)
    note = ""
    if settings.ordered:
        if settings.ordered not in names:
            raise SettingsError(f"--ordered {settings.ordered!r}: no numeric column of that name; numeric columns "
                                f"are: {', '.join(names[:20])}{' ...' if len(names) > 20 else ''}")
        k = names.index(settings.ordered)
        key = data[:, k]
        known = ~np.isnan(key)
        order = np.flatnonzero(known)[np.argsort(key[known], kind="stable")]
        if np.any(np.diff(key[order]) == 0):
            note = f"{settings.ordered} has repeated values; rows with equal values keep their file order"
        if not known.all():
            note = "; ".join(filter(None, [note, f"{int((~known).sum())} rows without a value of "
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
