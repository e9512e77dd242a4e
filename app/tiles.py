"""Running tiles of pairs: the per-measure chain, the presorted fast path, worker state and BLAS threads.

A tile is a list of (i, j) variable indices; :func:`run_tile` computes every
chosen measure for each pair in it, in a worker process, on a Dask worker or in
the calling process. Nothing here knows about executors: the executor calls
:func:`init_worker` once, :func:`run_tile` per tile and :func:`release_worker`
when the run ends.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import math
from typing import Sequence

import numpy as np

from . import config
from .core import allpairs
from .core.registry import MEASURES, PairContext, get_measure, measures_for, presorted_floored
from .core.results import TestResult, undefined
from .core.testing import pair_seed
from .pairtable import PairRow
from .plan import AnalysisSettings, Variable, observed, variable_values

__all__ = ["compute_pair", "fast_pair_rows", "prepare_columns", "init_worker", "release_worker", "run_tile",
           "make_tiles", "warm_kernels", "one_blas_thread", "ordered_rows"]


# Per-pair work (runs in worker processes) ---------------------------------

def _compute_one(measure_name: str, xv: np.ndarray, yv: np.ndarray, x_name: str, y_name: str,
                 settings: AnalysisSettings, x_group: bool, y_group: bool,
                 kinds: tuple[str, str] = ("numeric", "numeric")) -> TestResult:
    measure = get_measure(measure_name)
    n = len(xv)
    if (x_group or y_group) and not measure.multivariate:
        return undefined(n, f"{measure.name} is not defined for column groups; use dcor or dcor_bc")
    if n < config.MIN_ROWS:
        return undefined(n, f"fewer than {config.MIN_ROWS} rows with both values present ({n})")
    ctx = PairContext(confidence=settings.confidence, permutations=settings.permutations,
                      seed=functools.partial(pair_seed, settings.seed, x_name, y_name, measure_name),
                      test=settings.test_for(measure_name), kinds=kinds)
    try:
        return measure.compute(xv, yv, ctx)
    except ArithmeticError:  # e.g. squares of values near 1e300 overflow: this pair and measure only
        return undefined(n, f"{measure.name} cannot be computed: the values are too large for double "
                            "precision (overflow); rescale the columns (e.g. divide by 1e100)")
    except ValueError as exc:  # limits such as the group size cap come back as a note
        return undefined(n, str(exc))


def _pair_row(a: Variable, b: Variable, measure: str, res: TestResult) -> PairRow:
    # The contract's note column is for why a value is missing (or a caveat on it);
    # the p-value's method travels in PairRow.method, shown by the API, pages and report.
    return PairRow(a.name, b.name, measure, res.estimate, res.ci_low, res.ci_high,
                   res.p_value, math.nan, res.n, res.note, res.method)


def _directions(measure: str, xvar: Variable, yvar: Variable) -> list[tuple[Variable, Variable, bool]]:
    out = [(xvar, yvar, False)]
    if not MEASURES[measure].symmetric:
        out.append((yvar, xvar, True))
    return out


def compute_pair(data: np.ndarray, xvar: Variable, yvar: Variable, settings: AnalysisSettings,
                 row_mask: np.ndarray | None = None) -> list[PairRow]:
    """Every chosen measure for one pair of variables (both directions for asymmetric ones).

    The per-pair path: each measure's own function on the pair's complete rows.
    It is the oracle of the presorted path (:func:`fast_pair_rows`) and runs
    column groups.
    """
    xv_all = variable_values(data, xvar)
    yv_all = variable_values(data, yvar)
    keep = observed(xv_all) & observed(yv_all)
    if row_mask is not None:
        keep &= row_mask
    xv, yv = xv_all[keep], yv_all[keep]
    rows: list[PairRow] = []
    # each pair takes the measures that apply to its kinds (registry ``kinds``)
    for m in measures_for(settings.run_measures, xvar.kind, yvar.kind):
        for a, b, swapped in _directions(m, xvar, yvar):
            av, bv = (yv, xv) if swapped else (xv, yv)
            rows.append(_pair_row(a, b, m, _compute_one(m, av, bv, a.name, b.name, settings,
                                                        a.is_group, b.is_group, (a.kind, b.kind))))
    return rows


def _presorted_measure(measure: str, pair: "allpairs.PresortedPair", a: Variable, b: Variable,
                       settings: AnalysisSettings) -> TestResult:
    """One measure of a regular pair (>= 3 rows, no constant side) by its entry's presorted hook,
    else by its own function on the pair's rows."""
    entry = MEASURES[measure]
    if entry.presorted is not None:
        ctx = PairContext(confidence=settings.confidence, permutations=settings.permutations,
                          seed=functools.partial(pair_seed, settings.seed, a.name, b.name, measure),
                          test=settings.test_for(measure))
        res = entry.presorted(pair, ctx)
        if res is not None:
            return res
    return _compute_one(measure, pair.x, pair.y, a.name, b.name, settings, False, False)


def fast_pair_rows(prep: "allpairs.PreparedColumns", xvar: Variable, yvar: Variable,
                    settings: AnalysisSettings) -> list[PairRow] | None:
    """The rows of a pair of single columns from the presorted columns; None: use compute_pair."""
    if xvar.is_group or yvar.is_group or xvar.kind != "numeric" or yvar.kind != "numeric":
        return None  # groups and categorical sides take the per-pair path
    i, j = prep.slot.get(xvar.columns[0]), prep.slot.get(yvar.columns[0])
    if i is None or j is None or not (prep.finite[i] and prep.finite[j]):
        return None
    measures = measures_for(settings.run_measures, xvar.kind, yvar.kind)  # those that apply to two numbers
    needs = frozenset().union(*(MEASURES[m].presorted_needs for m in measures))
    regular, view, sums, counts, dist_inputs = allpairs.pair_work(
        prep, i, j, config.MIN_ROWS, spearman="rank_sums" in needs, kendall="kendall_counts" in needs,
        distance="distance" in needs)
    if not regular:
        return None  # degenerate pairs: every measure's own note, from the per-pair path
    whole = (prep, i, j) if view.n == prep.counts[i] == prep.counts[j] else None
    pair = allpairs.PresortedPair(view, False, sums, counts, dist_inputs, whole_columns=whole)
    rows: list[PairRow] = []
    for m in measures:
        for a, b, swapped in _directions(m, xvar, yvar):
            seen = pair.direction(swapped)
            # the registry's floor, as on the per-pair path
            res = presorted_floored(MEASURES[m], seen, _presorted_measure(m, seen, a, b, settings))
            rows.append(_pair_row(a, b, m, res))
    return rows


def warm_kernels(settings: AnalysisSettings) -> None:
    """Load every compiled kernel the chosen measures use, on a tiny pair, before forking."""
    from .core import jit

    jit.compile_all()  # else the tiny pair would run as Python and each worker would load numba for itself
    rng = np.random.default_rng(0)
    tiny = np.column_stack([rng.normal(size=24), np.round(rng.normal(size=24))])
    tiny[3, 0] = np.nan
    variables = [Variable("a", (0,)), Variable("b", (1,))]
    light = AnalysisSettings(measures=settings.measures, confidence=settings.confidence,
                             permutations=min(settings.permutations, 3), seed=settings.seed)
    fast_pair_rows(prepare_columns(tiny, variables), variables[0], variables[1], light)
    with one_blas_thread():  # finds the BLAS library once, before the workers fork
        pass


def prepare_columns(data: np.ndarray, variables: Sequence[Variable],
                    row_mask: np.ndarray | None = None) -> "allpairs.PreparedColumns":
    """Sort every single-column variable once for the presorted path (O(n p) memory)."""
    columns = [v.columns[0] for v in variables if not v.is_group]
    return allpairs.prepare_columns(data, row_mask, columns=columns)


_WORKER_STATE: dict = {}


def init_worker(data, variables, settings, row_mask, prepared=None, verdicts=False, given=None,
                matrix_part=None) -> None:
    """Worker state for a run; ``prepared`` (the sorted columns) is built here when not given.

    ``verdicts`` True: each tile also gathers what every pair of single columns
    needs for its verdict label (:func:`pairlens.core.verdict.label_evidence`).
    ``matrix_part``: a :class:`pairlens.matrix_path.MatrixPart` whose results the
    tiles take instead of computing those measures pair by pair.
    """
    _WORKER_STATE.clear()
    # Each measure's q-values are adjusted over its rows: at most one per ordered pair of variables.
    # Not bounded here with --given (conditional rows) or --ordered (p-values replaced after the
    # evidence's measures); the verdict then gathers everything.
    tests_bound = len(variables) ** 2 if given is None and settings.ordered is None else None
    _WORKER_STATE.update(data=data, variables=variables, settings=settings, row_mask=row_mask,
                         prepared=prepared, verdicts=verdicts, given=given, matrix_part=matrix_part,
                         rest_settings={}, tests_bound=tests_bound)


def release_worker() -> None:
    """Drop the run's columns so a long-lived worker does not keep the last analysis' data in memory."""
    _WORKER_STATE.clear()


init_worker.release = release_worker  # the executor protocol's hook (app/executors.py)


def _worker_prepared() -> "allpairs.PreparedColumns":
    s = _WORKER_STATE
    if s.get("prepared") is None:
        s["prepared"] = prepare_columns(s["data"], s["variables"], s["row_mask"])
    return s["prepared"]


_BLAS_CONTROLLER: list = []


@contextlib.contextmanager
def one_blas_thread():
    """BLAS on one thread while tiles run.

    The kernels' vector products are short; a threaded BLAS gains nothing on
    them, and on a busy machine waking its helper threads costs milliseconds
    per product (measured: a 20,000-row dot product 1000x slower than
    single-threaded at load 5 on 2 cores), and worker processes would
    oversubscribe the cores anyway.
    """
    if not _BLAS_CONTROLLER:
        try:
            from threadpoolctl import ThreadpoolController

            _BLAS_CONTROLLER.append(ThreadpoolController())
        except Exception:  # noqa: BLE001 - without threadpoolctl the BLAS default stays
            _BLAS_CONTROLLER.append(None)
    controller = _BLAS_CONTROLLER[0]
    if controller is None:
        yield
        return
    with controller.limit(limits=1, user_api="blas"):
        yield


def _label_evidence(data: np.ndarray, prep: "allpairs.PreparedColumns", xvar: Variable, yvar: Variable,
                    rows: list[PairRow], row_mask: np.ndarray | None):
    """The q-independent part of the pair's verdict, on the rows its measures used; None for groups."""
    from .core.verdict import label_evidence

    if xvar.is_group or yvar.is_group:
        return None
    if xvar.kind != "numeric" or yvar.kind != "numeric":
        from .core.verdict_categorical import CategoricalEvidence
        return CategoricalEvidence((xvar.kind, yvar.kind), {
            r.measure: TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
            for r in rows if r.x == xvar.name})
    i, j = prep.slot.get(xvar.columns[0]), prep.slot.get(yvar.columns[0])
    if i is not None and j is not None:
        # the sorted columns' column-major copy, its presence mask folding in the row mask:
        # the same rows as below without strided reads of the row-major table
        xv, yv = prep.values[:, i], prep.values[:, j]
        keep = prep.present[:, i] & prep.present[:, j]
    else:
        xv, yv = data[:, xvar.columns[0]], data[:, yvar.columns[0]]
        keep = ~np.isnan(xv) & ~np.isnan(yv)
        if row_mask is not None:
            keep &= row_mask
    results = {r.measure: TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
               for r in rows if r.x == xvar.name}
    try:
        return label_evidence(xv[keep], yv[keep], results, alpha=config.SIGNIFICANCE_LEVEL,
                              tests=_WORKER_STATE.get("tests_bound"))
    except ArithmeticError:  # values near 1e300 overflow: no verdict, as in the pair view
        return None


def ordered_rows(data: np.ndarray, xvar: Variable, yvar: Variable, settings: AnalysisSettings,
                 row_mask: np.ndarray | None, rows: list[PairRow]) -> list[PairRow]:
    """Rows in time order: each result replaced by its measure's serial test (registry ``serial``)."""
    xv_all, yv_all = variable_values(data, xvar), variable_values(data, yvar)
    keep = observed(xv_all) & observed(yv_all)
    if row_mask is not None:
        keep &= row_mask
    values = {xvar.name: xv_all[keep], yvar.name: yv_all[keep]}
    out = []
    for r in rows:
        measure = MEASURES[r.measure]
        if measure.serial is None or not r.p_value == r.p_value:
            out.append(r)
            continue
        base = TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
        ctx = PairContext(confidence=settings.confidence, permutations=settings.permutations,
                          seed=pair_seed(settings.seed, r.x, r.y, r.measure + "/ordered"))
        out.append(_pair_row(Variable(r.x, ()), Variable(r.y, ()), r.measure,
                             measure.serial(values[r.x], values[r.y], ctx, base)))
    return out


def _rest_settings(ready: dict) -> AnalysisSettings | None:
    """The run's settings without the measures whose rows are ``ready``; None when none is left."""
    s = _WORKER_STATE
    key = frozenset(ready)
    if key not in s["rest_settings"]:
        rest = tuple(m for m in s["settings"].measures if m not in key)
        s["rest_settings"][key] = dataclasses.replace(s["settings"], measures=rest) if rest else None
    return s["rest_settings"][key]


def _merged(ready: dict, computed: list[PairRow], order: Sequence[str]) -> list[PairRow]:
    """A pair's rows in the per-pair path's order: the measures of the run, each row from ``ready`` or computed."""
    by_measure: dict[str, list[PairRow]] = {}
    for r in computed:
        by_measure.setdefault(r.measure, []).append(r)
    out: list[PairRow] = []
    for m in order:
        if m in ready:
            out.append(ready[m])
        else:
            out.extend(by_measure.get(m, ()))
    return out


def _computed_rows(prep, xvar: Variable, yvar: Variable, settings: AnalysisSettings) -> list[PairRow]:
    s = _WORKER_STATE
    try:
        rows = fast_pair_rows(prep, xvar, yvar, settings)
    except ArithmeticError:  # the per-pair path below turns it into a note per measure
        rows = None
    if rows is None:
        rows = compute_pair(s["data"], xvar, yvar, settings, s["row_mask"])
    return rows


class CarriedTile:
    """A tile's pairs with their share of the matrix part (:meth:`pairlens.matrix_path.MatrixPart.share`),
    for workers that do not share the engine's memory (Dask): each carries only its own pairs' results."""

    __slots__ = ("pairs", "part")

    def __init__(self, pairs: list[tuple[int, int]], part) -> None:
        self.pairs = pairs
        self.part = part

    def __len__(self) -> int:
        return len(self.pairs)


def run_tile(tile: "list[tuple[int, int]] | CarriedTile") -> tuple[list[PairRow], list]:
    """The rows of every pair in the tile, and (when asked) each pair's verdict ``((x, y), ev)``: its
    label when the q-values cannot change it (:func:`pairlens.core.verdict.settled_label`), else its evidence."""
    s = _WORKER_STATE
    prep = _worker_prepared()
    part = s.get("matrix_part")
    if isinstance(tile, CarriedTile):
        tile, part = tile.pairs, tile.part
    out: list[PairRow] = []
    evidence: list = []
    finished = part.rows(tile) if part is not None else [{}] * len(tile)
    if s.get("verdicts"):
        from .core.verdict import settled_label
    with one_blas_thread():
        for (i, j), ready in zip(tile, finished):
            xvar, yvar = s["variables"][i], s["variables"][j]
            if ready:
                rest = _rest_settings(ready)
                computed = [] if rest is None else _computed_rows(prep, xvar, yvar, rest)
                rows = _merged(ready, computed, s["settings"].run_measures)
            else:
                rows = _computed_rows(prep, xvar, yvar, s["settings"])
            if s["settings"].ordered is not None:
                rows = ordered_rows(s["data"], xvar, yvar, s["settings"], s["row_mask"], rows)
            out.extend(rows)
            if s.get("given") is not None:  # --given: the conditional variants, beside (not in) the verdict
                from .given import given_rows
                out.extend(given_rows(s["data"], xvar, yvar, s["settings"], s["row_mask"], s["given"]))
            if s.get("verdicts"):
                ev = _label_evidence(s["data"], prep, xvar, yvar, rows, s["row_mask"])
                if ev is not None:
                    # the label itself when the q-values to come cannot change it (most pairs):
                    # decided here in parallel, and a string travels to the parent instead of the evidence
                    evidence.append(((xvar.name, yvar.name), settled_label(ev, s.get("tests_bound")) or ev))
    return out, evidence


def make_tiles(pairs: list[tuple[int, int]], workers: int) -> list[list[tuple[int, int]]]:
    # Enough tiles for progress and balance, few enough that per-task overhead stays small.
    target = max(1, min(len(pairs), max(workers, 1) * 16))
    size = max(1, math.ceil(len(pairs) / target))
    return [pairs[k:k + size] for k in range(0, len(pairs), size)]

