"""The analysis engine: plans the pairs, runs the tiles on an executor, adjusts p-values.

The engine works on plain NumPy data and column names; it knows nothing of
files or HTTP. The web app, the CLI and the report all call :func:`run_analysis`;
the pair detail lives in :mod:`pairlens.pairs`.

Where the parts live: settings, planning and row selection in
:mod:`pairlens.plan`; the pair table's types in :mod:`pairlens.pairtable`; the
per-measure chain, the presorted path and worker state in :mod:`pairlens.tiles`.
"""

from __future__ import annotations

import gc
import math
import os
import time
from typing import Callable, Sequence

import numpy as np

from .budget import WorkEstimate, check_plan
from .core.registry import MEASURES, get_measure
from .core.testing import adjust_pvalues
from .errors import SettingsError
from .executors import Executor, ProcessExecutor, SerialExecutor, make_executor
from .ordering import mark_trending, serial_check, serial_note, time_order, trending_sides  # noqa: F401 - serial_note re-exported
from .pairtable import PairRow, PairTable
from .plan import AnalysisSettings, Variable, analysis_row_mask, pair_indices, plan_variables
from .tiles import (CarriedTile, compute_pair, init_worker, make_tiles, one_blas_thread, prepare_columns,
                    release_worker, run_tile, warm_kernels)

# Names kept importable from here for callers written before the split.
_pairs = pair_indices
_tiles = make_tiles
_init_worker = init_worker
from .tiles import fast_pair_rows as _fast_pair_rows  # noqa: E402

__all__ = [
    "SettingsError",
    "AnalysisCancelled",
    "AnalysisSettings",
    "Variable",
    "PairRow",
    "PairTable",
    "plan_variables",
    "run_analysis",
    "compute_pair",
]


class AnalysisCancelled(RuntimeError):
    """Raised by :func:`run_analysis` when the cancel callback asked to stop."""



# Public API ----------------------------------------------------------------

ProgressCallback = Callable[[float, float], None]


def run_analysis(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings, *,
                 workers: int | None = None, cluster: str | None = None,
                 executor: Executor | None = None,
                 progress: ProgressCallback | None = None,
                 cancel: Callable[[], bool] | None = None, verdicts: bool = False, path: str = "auto",
                 streamed: bool = False, top: int | None = None) -> PairTable:
    """Compute the pair table for ``settings`` on ``data`` (n, p) with column ``names``.

    Parameters
    ----------
    data : ndarray
        Float array, NaN for missing values, one column per name.
    names : sequence of str
        Unique column names, in input order.
    settings : AnalysisSettings
    workers : int, optional
        Local worker processes (default: all cores). 1 runs in this process.
    cluster : str, optional
        Address of a Dask scheduler; the work runs there instead.
    progress : callable, optional
        Called as ``progress(fraction_done, seconds_left)`` after each tile.
    cancel : callable, optional
        Polled between tiles; when it returns True the run stops with
        :class:`AnalysisCancelled`.
    verdicts : bool
        Also give every pair of single columns its verdict label
        (``PairTable.verdicts``): the tiles gather each pair's evidence on the
        rows its measures used, and the label is decided here once the
        q-values exist. No time budget; the cost is measured in
        benchmarks/bench_engine.py (``verdicts_add``).
    path : {"auto", "matrix", "pairs"}
        ``"matrix"``: Pearson and Spearman of all pairs by matrix products
        (:mod:`pairlens.matrix_path`), the pairs that need their rows by the
        per-pair path; ``"pairs"``: every pair by the per-pair path;
        ``"auto"``: the matrix path for ``config.MATRIX_PATH_MIN_PAIRS`` pairs
        or more when the settings allow it and no executor or cluster is
        given. When other measures are chosen or verdicts are asked for (their
        evidence is gathered pair by pair), the tiles compute those and take
        Pearson and Spearman from the matrix products
        (:class:`pairlens.matrix_path.MatrixPart`), on any executor: the
        products run here, a tile sent to Dask carries its pairs' share.
    streamed : bool
        The caller streams the table to a file: a matrix-path run may then give
        up to ``config.MATRIX_MAX_PAIR_ROWS`` rows instead of ``MAX_PAIR_ROWS``.
    top : int, optional
        A matrix-path run keeps only each measure's ``top`` rows of smallest
        q-value (q-values over all pairs), taking the pairs in blocks: any
        number of pairs (:func:`pairlens.matrix_path.run_matrix`).
    """
    started = time.perf_counter()
    data = np.asarray(data, dtype=np.float64)
    if data.ndim != 2 or data.shape[1] != len(names):
        raise SettingsError("data must be a 2-D array with one column per name")
    settings.check()
    order_note = ""
    if settings.ordered is not None:
        data, names, order_note = time_order(data, names, settings)
    variables = plan_variables(list(names), settings)
    row_mask = analysis_row_mask(data, names, settings)
    from .given import given_columns  # --given: the columns held fixed (None without)
    given = given_columns(data, names, settings)
    n_pairs = len(variables) * (len(variables) - 1) // 2
    from . import matrix_path  # the matrix path: all its wiring is this block
    if (not verdicts and settings.ordered is None and given is None
            and matrix_path.choose_path(path, settings, variables, n_pairs,
                                        local=executor is None and cluster is None)):
        matrix_path.check_matrix_plan(n_pairs, settings, data.shape[0], streamed, top)
        from .core.wide import WideCancelled
        try:
            with one_blas_thread():  # a threaded BLAS loses to one thread on a busy machine (bench_wide.py)
                wide = matrix_path.run_matrix(data, variables, settings, row_mask,
                                              lambda a, b, s: compute_pair(data, a, b, s, row_mask),
                                              progress=progress, cancel=cancel, started=started, top=top,
                                              threads=workers or os.cpu_count() or 1)
        except WideCancelled:
            raise AnalysisCancelled("analysis cancelled") from None
        wide.serial = serial_check(data, names)
        return wide
    pairs = pair_indices(variables)
    # refused before any work: too many pair-table rows, or beyond the work budget (app/budget.py)
    check_plan(WorkEstimate(len(pairs), len(settings.run_measures), data.shape[0], settings.budget_permutations()))
    workers = workers or os.cpu_count() or 1
    part, part_share = None, 0.0
    part_measures = () if settings.ordered is not None or given is not None else matrix_path.part_measures(
        path, settings, variables, n_pairs)
    if part_measures:
        # Pearson and Spearman of every pair by matrix products, the rest by the tiles. The products
        # are a few percent of such a run (1,000 x 1,000, default measures: 4 s of about 2 minutes).
        part_share = 0.05
        from .core.wide import WideCancelled
        try:
            with one_blas_thread():
                part = matrix_path.run_part(
                    data, variables, settings, row_mask, part_measures, threads=workers, cancel=cancel,
                    progress=None if progress is None else (lambda f: progress(part_share * f, math.nan)))
        except WideCancelled:
            raise AnalysisCancelled("analysis cancelled") from None
    owned = executor is None
    if executor is None:
        executor = make_executor(workers=workers, cluster=cluster, n_tasks=len(pairs), n_rows=data.shape[0],
                                 resamples=max((settings.permutations_for(m) for m in settings.measures), default=0))
    collecting = gc.isenabled()
    if collecting:
        # A wide run brings millions of result objects here (1,000 columns: 2 million rows and
        # 500,000 verdict evidences) and every full collection walks all of them; they hold no
        # reference cycles, so the collector waits until the table is built (measured at 1,000 x
        # 600: 14 s of a 60 s run went to collections).
        gc.disable()
    try:
        table = _run_tiles(data, names, settings, variables, row_mask, given, pairs, executor, owned, workers,
                           part, part_share, verdicts, progress, cancel, started, order_note)
    finally:
        if collecting:
            gc.enable()
    table.seconds = time.perf_counter() - started
    return table


def _run_tiles(data, names, settings, variables, row_mask, given, pairs, executor, owned, workers, part,
               part_share, verdicts, progress, cancel, started, order_note) -> PairTable:
    """The per-pair part of :func:`run_analysis`: tiles on ``executor``, q-values, verdict labels."""
    tiles = make_tiles(pairs, getattr(executor, "parallelism", workers))
    results: list[tuple[list[PairRow], list] | None] = [None] * len(tiles)
    done_pairs = 0
    prepared = None
    shares_memory = isinstance(executor, (SerialExecutor, ProcessExecutor))
    if part is not None and not shares_memory:
        # Remote workers (Dask) get each tile's own share of the matrix part with the tile, not the whole part.
        tiles = [CarriedTile(tile, part.share(tile)) for tile in tiles]
        part = None
    if shares_memory:
        # Sorted once here; forked workers share the orders copy-on-write, and the
        # kernels they call are already loaded. Remote workers sort for themselves.
        prepared = prepare_columns(data, variables, row_mask)
        if isinstance(executor, ProcessExecutor):
            # in this process each kernel loads on first use: a small job loads only those it calls
            warm_kernels(settings)
    frozen = isinstance(executor, ProcessExecutor)
    if frozen:
        # Objects that exist before the fork are never collected in the workers, so
        # their collector does not walk (and copy on write) the parent's whole heap.
        gc.freeze()
    try:
        for index, rows in executor.run(run_tile, tiles, init_worker,
                                        (data, variables, settings, row_mask, prepared, verdicts, given, part),
                                        cancel=cancel):
            results[index] = rows
            done_pairs += len(tiles[index])
            if progress is not None:
                elapsed = time.perf_counter() - started
                # 1.0 exactly when every tile is in (the pages read it as done)
                frac = 1.0 - (1.0 - part_share) * (1.0 - done_pairs / max(len(pairs), 1))
                progress(frac, elapsed / frac * (1 - frac) if frac > 0 else math.nan)
            if cancel is not None and cancel():
                raise AnalysisCancelled("analysis cancelled")
    finally:
        if frozen:
            gc.unfreeze()
        if owned:
            executor.close()
    if any(r is None for r in results):
        raise AnalysisCancelled("analysis cancelled")
    rows = [r for tile_rows, _ in results for r in tile_rows]
    check = serial_check(data, names)
    if settings.ordered is not None:
        mark_trending(rows, check)
    _fill_q_values(rows, settings.adjust)
    table = PairTable([v.name for v in variables], settings.table_measures(), settings, rows)
    table.given = given
    table.serial = check._replace(order_note=order_note)
    if verdicts:
        table.verdicts = _labels(table, [e for _, tile_evidence in results for e in tile_evidence],
                                 check if settings.ordered is not None else None)
    return table


def _symmetric(measure: str) -> bool:
    return get_measure(measure).symmetric


def _labels(table: PairTable, evidence: list, check=None) -> dict[tuple[str, str], str]:
    """Each pair's verdict label from its tile's evidence and the analysis's q-values; ``check``, the
    serial check of an ordered analysis, names the trending columns whose pairs are not tested.
    A tile sends the label itself where the q-values could not change it."""
    from .core.verdict import label_from_evidence

    out: dict[tuple[str, str], str] = {}
    pending = []
    for pair, ev in evidence:
        out[pair] = ev if isinstance(ev, str) else ""  # "": filled below, in the same order
        if not isinstance(ev, str):
            pending.append((pair, ev))
    if not pending:
        return out
    wanted = {pair for pair, _ in pending}
    wanted |= {(y, x) for x, y in wanted}
    # q-values of the pending pairs in one pass (PairTable.lookup scans every row: per pair that is
    # quadratic in the number of pairs); the x -> y row for an asymmetric measure, as lookup
    q_of: dict[tuple[str, str], dict[str, float]] = {}
    for r in table.rows:
        if (r.x, r.y) in wanted:
            q_of.setdefault((r.x, r.y), {})[r.measure] = float(r.q_value)
    for (x, y), ev in pending:
        q_values = dict(q_of.get((y, x), {}))
        q_values = {m: q for m, q in q_values.items() if _symmetric(m)}
        q_values.update(q_of.get((x, y), {}))
        out[(x, y)] = label_from_evidence(ev, q_values, trending_sides(x, y, check))
    return out


def _fill_q_values(rows: list[PairRow], adjust: str) -> None:
    by_measure: dict[str, list[int]] = {}
    for k, r in enumerate(rows):
        by_measure.setdefault(r.measure, []).append(k)
    for idx in by_measure.values():
        q = adjust_pvalues(np.array([rows[k].p_value for k in idx], dtype=float), adjust)
        for k, qv in zip(idx, q):
            rows[k].q_value = float(qv)

