"""The matrix path of an analysis: all pairs of a wide table from :func:`pairlens.core.wide.pair_matrix`.

The engine hands an analysis here when every chosen measure has a matrix form
(:data:`pairlens.core.wide.WIDE_MEASURES`) and no column group is involved.
The pairs the matrix form cannot finish (their default test needs the rows)
are computed by the engine's per-pair path, which stays the reference. The
result is a :class:`WidePairTable`: the pair table held as arrays, whose rows
are built only when something asks for them, and which the writers in
:mod:`pairlens.export` stream to a file.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Callable

import numpy as np

from . import config
from .errors import SettingsError
from .core import linear
from .core.testing import adjust_pvalues
from .core.wide import WIDE_MEASURES, pair_matrix

__all__ = ["PATHS", "matrix_applies", "run_matrix", "WidePairTable"]

PATHS = ("auto", "matrix", "pairs")


def matrix_applies(settings, variables) -> str:
    """"" when the matrix path can run these settings, else why not (said when it is asked for)."""
    if any(m not in WIDE_MEASURES for m in settings.measures):
        return f"the matrix path computes {' and '.join(WIDE_MEASURES)} only"
    if any(v.is_group for v in variables):
        return "the matrix path does not take column groups"
    if any(v.kind != "numeric" for v in variables):
        return "the matrix path takes numeric columns only"
    if "pearson" in settings.measures:
        chosen = linear.resolved_test(settings.test_for("pearson") or None, settings.permutations)
        if chosen not in ("moments", "t"):
            return "the matrix path has no resampling test"
    return ""


class WidePairTable:
    """The pair table as arrays (one set per measure), in the per-pair table's row order.

    Offers what :class:`pairlens.engine.PairTable` offers; ``rows`` builds the
    :class:`pairlens.engine.PairRow` objects on first use (memory: about 0.5 kB a row).
    """

    def __init__(self, variables, measures, settings, pairs, seconds=0.0):
        self.variables = list(variables)
        self.measures = tuple(measures)
        self.settings = settings
        self.pairs = pairs          # core.wide.WidePairs, q-values filled in
        self.seconds = seconds
        self._rows = None

    def __len__(self) -> int:
        return int(self.pairs.i.size) * len(self.measures)

    @property
    def counts(self) -> dict:
        return self.pairs.counts

    @property
    def rows(self):
        if self._rows is None:
            from .pairtable import PairRow

            names = self.variables
            cols = {m: self._lists(m) for m in self.measures}
            out = []
            for k, (i, j) in enumerate(zip(self.pairs.i.tolist(), self.pairs.j.tolist())):
                for m in self.measures:
                    c = cols[m]
                    out.append(PairRow(names[i], names[j], m, c[0][k], c[1][k], c[2][k], c[3][k], c[4][k],
                                       c[5][k], c[6][k], c[7][k]))
            self._rows = out
        return self._rows

    @rows.setter
    def rows(self, value) -> None:
        self._rows = value

    def _lists(self, m):
        a = self.pairs.measures[m]
        notes = np.array(a.notes, dtype=object)[a.note].tolist()
        methods = np.array(a.methods, dtype=object)[a.method].tolist()
        return (a.estimate.tolist(), a.ci_low.tolist(), a.ci_high.tolist(), a.p_value.tolist(),
                a.q_value.tolist(), a.n.tolist(), notes, methods)

    def records(self) -> list[dict]:
        return [r.record() for r in self.rows]

    def lookup(self, x: str, y: str) -> dict:
        from .pairtable import PairRow

        index = {v: k for k, v in enumerate(self.variables)}
        i, j = sorted((index[x], index[y]))
        p = len(self.variables)
        k = i * p - i * (i + 1) // 2 + (j - i - 1)     # position of (i, j) in the upper triangle
        out = {}
        for m in self.measures:
            a = self.pairs.measures[m]
            out[m] = PairRow(self.variables[i], self.variables[j], m, float(a.estimate[k]), float(a.ci_low[k]),
                             float(a.ci_high[k]), float(a.p_value[k]), float(a.q_value[k]), int(a.n[k]),
                             a.notes[a.note[k]], a.methods[a.method[k]])
        return out

    def matrix(self, measure: str, value: str = "estimate") -> np.ndarray:
        k = len(self.variables)
        out = np.full((k, k), np.nan)
        a = self.pairs.measures[measure]
        v = getattr(a, value).astype(float)
        out[self.pairs.i, self.pairs.j] = v
        out[self.pairs.j, self.pairs.i] = v
        return out

    def columns(self):
        """(i, j, names, {measure: arrays}) for the streaming writers."""
        return self.pairs.i, self.pairs.j, self.variables, self.pairs.measures


def run_matrix(data: np.ndarray, variables, settings, row_mask, per_pair: Callable, *,
               progress=None, started: float = 0.0, threads: int = 1) -> WidePairTable:
    """All pairs of ``variables`` by the matrix path; ``per_pair(xvar, yvar, measure_settings)`` gives the
    per-pair path's rows for the pairs the matrix form hands back."""
    import time

    cols = [v.columns[0] for v in variables]
    sub = data[:, cols] if row_mask is None else data[row_mask][:, cols]
    test = linear.resolved_test(settings.test_for("pearson") or None, settings.permutations)
    pairs = pair_matrix(sub, measures=settings.measures, pearson_test=test if test in ("moments", "t") else "moments",
                        confidence=settings.confidence, threads=threads)
    for m in settings.measures:
        arr = pairs.measures[m]
        single = replace(settings, measures=(m,))
        labels_n = {t: k for k, t in enumerate(arr.notes)}
        labels_m = {t: k for k, t in enumerate(arr.methods)}
        for k in np.flatnonzero(arr.fallback):
            (row,) = per_pair(variables[pairs.i[k]], variables[pairs.j[k]], single)
            arr.estimate[k], arr.p_value[k], arr.ci_low[k], arr.ci_high[k] = (
                row.estimate, row.p_value, row.ci_low, row.ci_high)
            arr.n[k] = row.n
            for text, table, lst, field in ((row.note, labels_n, arr.notes, arr.note),
                                            (row.method, labels_m, arr.methods, arr.method)):
                if text not in table:
                    table[text] = len(lst)
                    lst.append(text)
                field[k] = table[text]
        arr.q_value = adjust_pvalues(arr.p_value, settings.adjust)
    if progress is not None:
        progress(1.0, 0.0)
    table = WidePairTable([v.name for v in variables], settings.measures, settings, pairs)
    table.seconds = time.perf_counter() - started
    return table


def choose_path(path: str, settings, variables, n_pairs: int, *, local: bool = True) -> bool:
    """True when the matrix path runs: asked for, or ``auto`` with enough pairs, a local run and
    settings it can take."""
    if path not in PATHS:
        raise SettingsError(f"path must be one of {', '.join(PATHS)}, not {path!r}")
    if path == "pairs":
        return False
    why_not = matrix_applies(settings, variables)
    if path == "matrix":
        if why_not:
            raise SettingsError(f"path matrix: {why_not}; use the auto or pairs path")
        return True
    return not why_not and local and n_pairs >= config.MATRIX_PATH_MIN_PAIRS


def check_matrix_plan(n_pairs: int, settings, n_rows: int, streamed: bool) -> None:
    """The row limit of a matrix-path run: ``MATRIX_MAX_PAIR_ROWS`` when streamed, else the stored table's."""
    from .budget import WorkEstimate, check_plan

    rows = n_pairs * len(settings.measures)
    if not streamed:
        check_plan(WorkEstimate(n_pairs, len(settings.measures), n_rows, 0))
    elif rows > config.MATRIX_MAX_PAIR_ROWS:
        raise SettingsError(f"this analysis would give {rows:,} pair-table rows; the matrix path streams at most "
                            f"{config.MATRIX_MAX_PAIR_ROWS:,} (config.MATRIX_MAX_PAIR_ROWS, or "
                            "PAIRLENS_MATRIX_MAX_PAIR_ROWS): choose fewer columns (--columns)")
