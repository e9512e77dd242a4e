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

import copy
from dataclasses import fields, replace
from typing import Callable

import numpy as np

from . import config
from .errors import SettingsError
from .core import linear
from .core.testing import adjust_pvalues
from .core.wide import WIDE_MEASURES, MeasureArrays, WidePairs, pair_matrix

__all__ = ["PATHS", "matrix_applies", "run_matrix", "TopPairTable", "WidePairTable", "MatrixPart",
           "part_measures", "run_part"]

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


def _triangle_position(i, j, p):
    """Position of the pair (i < j) in the row-major upper triangle of p columns (scalars or arrays)."""
    return i * p - i * (i + 1) // 2 + (j - i - 1)


def _matrix_inputs(data: np.ndarray, variables, settings, row_mask):
    """The columns of ``variables`` on the analysis's rows, and Pearson's test in its matrix form."""
    cols = [v.columns[0] for v in variables]
    sub = data[:, cols] if row_mask is None else data[row_mask][:, cols]
    test = linear.resolved_test(settings.test_for("pearson") or None, settings.permutations)
    return sub, test if test in ("moments", "t") else "moments"


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
        k = _triangle_position(i, j, p)
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


def _progress_adapter(progress, started, weight=1.0, offset=0.0):
    """``progress(fraction, seconds_left)`` from a fraction of one phase of the run."""
    import time

    def report(fraction: float) -> None:
        if progress is None:
            return
        done = offset + weight * fraction
        elapsed = time.perf_counter() - started
        progress(done, elapsed / done * (1.0 - done) if done > 0 else float("nan"))
    return report


def _cancelled():
    # the engine turns it into its AnalysisCancelled (this module does not import the engine)
    from .core.wide import WideCancelled

    return WideCancelled("analysis cancelled")


def _resolve(arr, ks, i, j, variables, per_pair, single, labels_n, labels_m, cancel=None):
    """The per-pair path's rows for the pairs ``ks`` of ``arr`` (those the matrix form hands back)."""
    for count, k in enumerate(ks.tolist()):
        if cancel is not None and count % 256 == 255 and cancel():
            raise _cancelled()
        (row,) = per_pair(variables[i[k]], variables[j[k]], single)
        arr.estimate[k], arr.p_value[k], arr.ci_low[k], arr.ci_high[k] = (
            row.estimate, row.p_value, row.ci_low, row.ci_high)
        arr.n[k] = row.n
        for text, table, lst, field in ((row.note, labels_n, arr.notes, arr.note),
                                        (row.method, labels_m, arr.methods, arr.method)):
            if text not in table:
                table[text] = len(lst)
                lst.append(text)
            field[k] = table[text]


def run_matrix(data: np.ndarray, variables, settings, row_mask, per_pair: Callable, *,
               progress=None, cancel=None, started: float = 0.0, threads: int = 1, top: int | None = None):
    """All pairs of ``variables`` by the matrix path; ``per_pair(xvar, yvar, measure_settings)`` gives the
    per-pair path's rows for the pairs the matrix form hands back.

    ``top``: keep only each measure's ``top`` rows of smallest q-value (:class:`TopPairTable`), the
    pairs taken in blocks so that no array spans all pairs; otherwise a :class:`WidePairTable` of
    every pair. ``progress(fraction, seconds_left)`` is called after each block, ``cancel()``
    polled before each (True stops the run with :class:`pairlens.core.wide.WideCancelled`)."""
    import time

    sub, test = _matrix_inputs(data, variables, settings, row_mask)
    if top is not None:
        return _run_top(sub, variables, settings, per_pair, test, top, progress, cancel, started, threads)
    # the pairs handed back to the per-pair path (Spearman's pairs with missing values and few
    # rows, or ties) can be most of the work: then the products count for half of the progress
    handed_back = "spearman" in settings.measures and not np.isfinite(sub).all()
    weight = 0.5 if handed_back else 1.0
    pairs = pair_matrix(sub, measures=settings.measures, pearson_test=test, confidence=settings.confidence,
                        threads=threads, progress=_progress_adapter(progress, started, weight),
                        cancel=cancel)
    todo = sum(int(pairs.measures[m].fallback.sum()) for m in settings.measures)
    done = 0
    for m in settings.measures:
        arr = pairs.measures[m]
        single = replace(settings, measures=(m,))
        labels_n = {t: k for k, t in enumerate(arr.notes)}
        labels_m = {t: k for k, t in enumerate(arr.methods)}
        ks = np.flatnonzero(arr.fallback)
        report = _progress_adapter(progress, started, 1.0 - weight, weight)
        for part in np.array_split(ks, max(1, ks.size // 2000)):
            _resolve(arr, part, pairs.i, pairs.j, variables, per_pair, single, labels_n, labels_m, cancel)
            done += part.size
            if todo:
                report(done / todo)
        arr.q_value = adjust_pvalues(arr.p_value, settings.adjust)
    if progress is not None:
        progress(1.0, 0.0)
    table = WidePairTable([v.name for v in variables], settings.measures, settings, pairs)
    table.seconds = time.perf_counter() - started
    return table


_HEAD_FIELDS = ("estimate", "p_value", "ci_low", "ci_high", "n", "method", "note", "resolved", "i", "j", "index")


def _merge_head(head, arr, i, j, start, resolved, top):
    """The ``top`` rows of smallest p-value so far (ties: larger |estimate|, then earlier pair),
    as in :func:`pairlens.export.select_rows`."""
    p = arr.p_value
    keep = ~np.isnan(p)
    if head is not None and head["p_value"].size >= top:
        keep &= p <= head["p_value"][-1]
    ks = np.flatnonzero(keep)
    if ks.size > top:
        # only rows at or below the block's top-th smallest p-value can enter (ties kept)
        bound = np.partition(p[ks], top - 1)[top - 1]
        ks = ks[p[ks] <= bound]
    new = {"estimate": arr.estimate[ks], "p_value": p[ks], "ci_low": arr.ci_low[ks], "ci_high": arr.ci_high[ks],
           "n": arr.n[ks], "method": arr.method[ks], "note": arr.note[ks], "resolved": resolved[ks],
           "i": i[ks], "j": j[ks], "index": start + ks}
    if head is not None:
        new = {f: np.concatenate([head[f], new[f]]) for f in _HEAD_FIELDS}
    order = np.lexsort((new["index"], -np.abs(np.nan_to_num(new["estimate"])), new["p_value"]))[:top]
    return {f: new[f][order] for f in _HEAD_FIELDS}


def _run_top(sub, variables, settings, per_pair, test, top, progress, cancel, started, threads):
    """Each measure's ``top`` rows of smallest p-value, blocks of pairs at a time. Every p-value goes
    to a temporary file (8 bytes a pair, not held in memory) and into a histogram, from which
    :func:`pairlens.core.wide.head_adjusted` gives the kept rows the q-values of the whole column."""
    import contextlib
    import tempfile
    import time
    from pathlib import Path

    from .core.wide import KEY_BINS, fisher_intervals, head_adjusted, key_histogram, pair_blocks

    measures = settings.measures
    heads = {m: None for m in measures}
    histograms = {m: np.zeros(KEY_BINS, np.int64) for m in measures}
    present = {m: 0 for m in measures}
    label_maps = {}
    labels = {}
    report = _progress_adapter(progress, started)
    total = 0
    with tempfile.TemporaryDirectory(prefix="pairlens_pvalues_") as tmp, contextlib.ExitStack() as open_files:
        paths = {m: Path(tmp) / f"{m}.f8" for m in measures}
        files = {m: open_files.enter_context(open(paths[m], "wb")) for m in measures}
        for start, stop, i, j, block, total in pair_blocks(sub, measures=measures, pearson_test=test,
                                                           confidence=settings.confidence, threads=threads,
                                                           intervals=False, cancel=cancel):
            for m in measures:
                arr = block[m]
                labels[m] = (arr.methods, arr.notes)
                if m not in label_maps:
                    label_maps[m] = ({}, {})
                labels_n, labels_m = label_maps[m]
                for t_map, lst in ((labels_n, arr.notes), (labels_m, arr.methods)):
                    t_map.update({t: k for k, t in enumerate(lst) if t not in t_map})
                ks = np.flatnonzero(arr.fallback)
                if ks.size:
                    _resolve(arr, ks, i, j, variables, per_pair, replace(settings, measures=(m,)),
                             labels_n, labels_m, cancel)
                values = arr.p_value[~np.isnan(arr.p_value)]
                values.tofile(files[m])
                histograms[m] += key_histogram(values)
                present[m] += values.size
                heads[m] = _merge_head(heads[m], arr, i, j, start, arr.fallback, top)
            report(0.97 * stop / max(total, 1))
        open_files.close()      # every p-value is on disk before the files are read back
        kept = {}
        for m in measures:
            head = heads[m] or _merge_head(None, _empty_arrays(), np.empty(0, np.int32), np.empty(0, np.int32), 0,
                                           np.empty(0, bool), top)

            def chunks(path=paths[m]):
                # read back in slices of 16M p-values (128 MB)
                with open(path, "rb") as fh:
                    while True:
                        part = np.fromfile(fh, dtype=np.float64, count=1 << 24)
                        if part.size == 0:
                            return
                        yield part

            head["q_value"] = head_adjusted(head["p_value"], present[m], chunks, settings.adjust, histograms[m])
            # the intervals the blocks skipped, for the kept rows (pairs from the per-pair path have theirs)
            fill = ~head["resolved"]
            low, high = fisher_intervals(m, head["estimate"][fill], head["n"][fill], settings.confidence)
            head["ci_low"][fill], head["ci_high"][fill] = low, high
            methods, notes = labels.get(m, ([""], [""]))
            head["methods"], head["notes"] = list(methods), list(notes)
            kept[m] = head
    if progress is not None:
        progress(1.0, 0.0)
    table = TopPairTable([v.name for v in variables], measures, settings, kept, total, present)
    table.seconds = time.perf_counter() - started
    return table


def _empty_arrays():
    from .core.wide import MeasureArrays

    return MeasureArrays.empty(0)


class TopPairTable:
    """Each measure's rows of smallest q-value (at most ``top``) from a matrix-path run over
    ``pairs`` pairs; q-values are those of the whole column of ``present[m]`` p-values.

    Offers what the writers of :mod:`pairlens.export` and ``pairlens pairs`` need: ``columns``
    with ``row_layout`` (rows differ by measure), ``rows`` and ``records``."""

    def __init__(self, variables, measures, settings, heads, pairs, present, seconds=0.0):
        from .core.wide import MeasureArrays

        self.variables = list(variables)
        self.measures = tuple(measures)
        self.settings = settings
        self.pairs_total = int(pairs)
        self.present = present
        self.seconds = seconds
        sizes = [heads[m]["p_value"].size for m in self.measures]
        size = sum(sizes)
        self._i = np.concatenate([heads[m]["i"] for m in self.measures]).astype(np.int64)
        self._j = np.concatenate([heads[m]["j"] for m in self.measures]).astype(np.int64)
        self._measure = np.repeat(np.arange(len(self.measures)), sizes)
        self._arrays = {}
        at = 0
        for m, k in zip(self.measures, sizes):
            arr = MeasureArrays.empty(size)
            sl = slice(at, at + k)
            for f in ("estimate", "p_value", "ci_low", "ci_high", "n", "method", "note"):
                getattr(arr, f)[sl] = heads[m][f]
            arr.q_value = np.full(size, np.nan)
            arr.q_value[sl] = heads[m]["q_value"]
            arr.methods, arr.notes = heads[m]["methods"], heads[m]["notes"]
            self._arrays[m] = arr
            at += k
        self.serial = None
        self._rows = None

    def __len__(self) -> int:
        return int(self._i.size)

    @property
    def counts(self) -> dict:
        return {m: {"pairs": self.pairs_total, "p_values": int(self.present[m])} for m in self.measures}

    def columns(self):
        return self._i, self._j, self.variables, self._arrays

    def row_layout(self):
        """(pair position, measure index) of each row."""
        return np.arange(self._i.size), self._measure

    @property
    def rows(self):
        if self._rows is None:
            from .pairtable import PairRow

            out = []
            for k, (i, j, mk) in enumerate(zip(self._i.tolist(), self._j.tolist(), self._measure.tolist())):
                m = self.measures[mk]
                a = self._arrays[m]
                out.append(PairRow(self.variables[i], self.variables[j], m, float(a.estimate[k]),
                                   float(a.ci_low[k]), float(a.ci_high[k]), float(a.p_value[k]),
                                   float(a.q_value[k]), int(a.n[k]), a.notes[a.note[k]], a.methods[a.method[k]]))
            self._rows = out
        return self._rows

    def records(self) -> list[dict]:
        return [r.record() for r in self.rows]


class MatrixPart:
    """Pearson and Spearman of every pair from the matrix form, beside the per-pair tiles.

    An analysis whose other measures (or verdicts) need each pair's rows still
    takes its Pearson and Spearman results from :func:`pairlens.core.wide.pair_matrix`:
    the tiles read them here (:meth:`rows`) instead of computing them, and compute
    a pair's measure themselves only where the matrix form handed it back
    (``fallback``). Pairs are the upper triangle of ``variables`` in
    :func:`pairlens.plan.pair_indices` order.
    """

    def __init__(self, variables, measures, pairs) -> None:
        self.names = [v.name for v in variables]
        self.measures = tuple(measures)
        self.pairs = pairs          # core.wide.WidePairs (q-values not filled: the engine adjusts all rows)
        self._keys = None           # a share's sorted triangle positions (:meth:`share`)

    def _positions(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        ks = _triangle_position(i, j, len(self.names))
        if self._keys is None:      # every pair of the run, in triangle order
            return ks
        # a share of the pairs (:meth:`share`): their triangle positions, kept sorted
        at = np.searchsorted(self._keys, ks)
        if at.size and (at.max() >= self._keys.size or not np.array_equal(self._keys[at], ks)):
            raise KeyError("pairs outside this share of the matrix part")
        return at

    def share(self, pairs) -> "MatrixPart":
        """The results of ``pairs`` (i < j) only: what a tile carries to a worker that does not share
        this process's memory (a Dask worker): about 60 bytes a pair and measure instead of the whole part."""
        ij = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
        ks = np.unique(self._positions(ij[:, 0], ij[:, 1]))
        gathered = {}
        for m in self.measures:
            a = self.pairs.measures[m]
            gathered[m] = MeasureArrays(**{f.name: (getattr(a, f.name)[ks] if f.name not in ("methods", "notes")
                                                    else getattr(a, f.name)) for f in fields(MeasureArrays)})
        out = copy.copy(self)
        out._keys = ks if self._keys is None else self._keys[ks]
        out.pairs = WidePairs(self.pairs.i[ks], self.pairs.j[ks], gathered)
        return out

    def rows(self, pairs) -> list[dict]:
        """For each pair (i < j) of ``pairs``, ``{measure: PairRow}`` of the measures the matrix form finished."""
        from .pairtable import PairRow

        ij = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
        i, j = ij[:, 0], ij[:, 1]
        ks = self._positions(i, j)
        out = [{} for _ in range(ks.size)]
        nan = float("nan")
        for m in self.measures:
            a = self.pairs.measures[m]
            # one gather per field and tile: Python floats without a NumPy scalar per value
            fields = zip(a.fallback[ks].tolist(), i.tolist(), j.tolist(), a.estimate[ks].tolist(),
                         a.ci_low[ks].tolist(), a.ci_high[ks].tolist(), a.p_value[ks].tolist(), a.n[ks].tolist(),
                         a.note[ks].tolist(), a.method[ks].tolist())
            for slot, (handed_back, ii, jj, est, low, high, pv, n, note, method) in zip(out, fields):
                if not handed_back:
                    slot[m] = PairRow(self.names[ii], self.names[jj], m, est, low, high, pv, nan, n,
                                      a.notes[note], a.methods[method])
        return out


def part_measures(path: str, settings, variables, n_pairs: int) -> tuple[str, ...]:
    """The chosen measures that the matrix form computes beside the per-pair tiles (``()``: none).

    A run that the whole matrix path cannot take (other measures, or verdicts,
    which need each pair's rows) still gets Pearson and Spearman by matrix
    products when ``path`` is "matrix", or "auto" with enough pairs, and the
    settings allow their matrix form (:func:`matrix_applies`). On every executor:
    the products run in this process, and tiles sent to Dask workers carry
    their pairs' share (:meth:`MatrixPart.share`)."""
    if path not in PATHS:
        raise SettingsError(f"path must be one of {', '.join(PATHS)}, not {path!r}")
    subset = tuple(m for m in settings.measures if m in WIDE_MEASURES)
    if path == "pairs" or not subset or matrix_applies(replace(settings, measures=subset), variables):
        return ()
    if path == "auto" and n_pairs < config.MATRIX_PATH_MIN_PAIRS:
        return ()
    return subset


def run_part(data: np.ndarray, variables, settings, row_mask, measures, *, threads: int = 1,
             progress=None, cancel=None) -> MatrixPart:
    """The :class:`MatrixPart` of ``measures`` (from :func:`part_measures`) for all pairs of ``variables``;
    ``progress(fraction)`` after each block, ``cancel()`` polled before each."""
    sub, test = _matrix_inputs(data, variables, settings, row_mask)
    pairs = pair_matrix(sub, measures=measures, pearson_test=test,
                        confidence=settings.confidence, threads=threads, progress=progress, cancel=cancel)
    return MatrixPart(variables, measures, pairs)


def choose_path(path: str, settings, variables, n_pairs: int, *, local: bool = True) -> bool:
    """True when the matrix path runs: asked for, or ``auto`` with enough pairs, a local run and
    settings it can take."""
    if path not in PATHS:
        raise SettingsError(f"path must be one of {', '.join(PATHS)}, not {path!r}")
    if path == "pairs":
        return False
    why_not = matrix_applies(settings, variables)
    if path == "matrix":
        if why_not and part_measures(path, settings, variables, n_pairs):
            return False    # Pearson/Spearman by matrix products, the other measures pair by pair
        if why_not:
            raise SettingsError(f"path matrix: {why_not}; use the auto or pairs path")
        return True
    return not why_not and local and n_pairs >= config.MATRIX_PATH_MIN_PAIRS


def check_matrix_plan(n_pairs: int, settings, n_rows: int, streamed: bool, top: int | None = None) -> None:
    """The row limit of a matrix-path run: ``MATRIX_MAX_PAIR_ROWS`` when streamed, else the stored table's;
    none with ``top`` (at most ``top`` rows a measure are kept, the pairs taken in blocks)."""
    from .budget import WorkEstimate, check_plan

    rows = n_pairs * len(settings.measures)
    if top is not None:
        return
    if not streamed:
        check_plan(WorkEstimate(n_pairs, len(settings.measures), n_rows, 0))
    elif rows > config.MATRIX_MAX_PAIR_ROWS:
        raise SettingsError(f"this analysis would give {rows:,} pair-table rows; the matrix path streams at most "
                            f"{config.MATRIX_MAX_PAIR_ROWS:,} (config.MATRIX_MAX_PAIR_ROWS, or "
                            "PAIRLENS_MATRIX_MAX_PAIR_ROWS): keep each measure's best rows (--top K, q-values still "
                            "over all pairs) or choose fewer columns (--columns)")
