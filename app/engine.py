"""The analysis engine: plans the pairs, runs the core kernels on an executor, adjusts p-values.

The engine works on plain NumPy data and column names; it knows nothing of
files or HTTP. The web app, the CLI and the report all call :func:`run_analysis`
and :func:`pair_detail`.
"""

from __future__ import annotations

import contextlib
import gc
import math
import os
import time
from dataclasses import asdict, dataclass, field
from typing import Callable, Iterable, Sequence

import numpy as np

from . import config
from .core import allpairs, chatterjee, distance, linear, rank
from .core import serial as serial_mod
from .core.registry import MEASURES, PairContext, get_measure, parse_tests, pvalue_floor
from .core.results import TestResult, undefined
from .core.testing import adjust_pvalues, floor_pvalue, pair_seed
from .budget import WorkEstimate, check_plan
from .errors import SettingsError
from .executors import Executor, ProcessExecutor, SerialExecutor, make_executor
from .export import PAIR_FIELDS

__all__ = [
    "SettingsError",
    "AnalysisCancelled",
    "AnalysisSettings",
    "Variable",
    "PairRow",
    "PairTable",
    "plan_variables",
    "run_analysis",
    "pair_detail",
]



def _parse_tests(tests) -> tuple[tuple[str, str], ...]:
    try:
        return parse_tests(tests)
    except (ValueError, TypeError) as exc:
        raise SettingsError(str(exc)) from None


def _parse_ordered(ordered, difference) -> str | None:
    """--ordered [COL]: None (not ordered), "" (file order) or a column name; --difference implies it."""
    if ordered is None or ordered is False:
        return "" if difference else None
    if ordered is True:
        return ""
    if not isinstance(ordered, str):
        raise SettingsError("ordered must be true (rows in file order) or the name of the column to sort by")
    return ordered.strip()


class AnalysisCancelled(RuntimeError):
    """Raised by :func:`run_analysis` when the cancel callback asked to stop."""


@dataclass(frozen=True)
class AnalysisSettings:
    measures: tuple[str, ...] = config.DEFAULT_MEASURES
    columns: tuple[str, ...] | None = None
    groups: tuple[tuple[str, tuple[str, ...]], ...] = ()
    missing: str = config.DEFAULT_MISSING
    adjust: str = config.DEFAULT_ADJUST
    confidence: float = config.DEFAULT_CONFIDENCE
    permutations: int = 0
    seed: int = config.DEFAULT_SEED
    tests: tuple[tuple[str, str], ...] = ()     # (measure, method) chosen with --test MEASURE=METHOD
    ordered: str | None = None  # rows in time order: None = no, "" = file order, else the column to sort by
    difference: bool = False    # analyse first differences (in time order; implies ordered)

    @classmethod
    def from_options(cls, *, measures=None, columns=None, groups=None, missing=None, adjust=None,
                     confidence=None, permutations=None, seed=None, tests=None, ordered=None,
                     difference=None) -> "AnalysisSettings":
        """Build validated settings from loosely typed options (CLI strings, JSON values)."""
        if isinstance(measures, str):
            measures = [m for m in measures.split(",") if m.strip()]
        measures = tuple(m.strip().lower() for m in (measures or config.DEFAULT_MEASURES))
        if isinstance(columns, str):
            columns = [c for c in columns.split(",") if c.strip()]
        columns = tuple(c.strip() for c in columns) if columns else None
        group_items: list[tuple[str, tuple[str, ...]]] = []
        if isinstance(groups, dict):
            groups = list(groups.items())
        for item in groups or ():
            if isinstance(item, str):
                name, sep, members = item.partition("=")
                if not sep:
                    raise SettingsError(f"group {item!r} must look like NAME=COL,COL")
                item = (name, [m for m in members.split(",") if m.strip()])
            name, members = item
            if isinstance(members, str):
                members = [m for m in members.split(",") if m.strip()]
            group_items.append((str(name).strip(), tuple(str(m).strip() for m in members)))
        settings = cls(
            measures=measures,
            columns=columns,
            groups=tuple(group_items),
            missing=(missing or config.DEFAULT_MISSING).lower(),
            adjust=(adjust or config.DEFAULT_ADJUST).lower(),
            confidence=float(config.DEFAULT_CONFIDENCE if confidence is None else confidence),
            permutations=int(permutations or 0),
            seed=int(config.DEFAULT_SEED if seed is None else seed),
            tests=_parse_tests(tests),
            ordered=_parse_ordered(ordered, difference),
            difference=bool(difference),
        )
        settings.check()
        return settings

    def check(self) -> None:
        if not self.measures:
            raise SettingsError("choose at least one measure")
        for m in self.measures:
            if m not in MEASURES:
                raise SettingsError(f"unknown measure {m!r}; choose from {', '.join(MEASURES)}")
        if len(set(self.measures)) != len(self.measures):
            raise SettingsError("a measure is listed twice")
        if self.missing not in config.MISSING_POLICIES:
            raise SettingsError(f"missing must be one of {', '.join(config.MISSING_POLICIES)}, not {self.missing!r}")
        if self.adjust not in config.ADJUST_METHODS:
            raise SettingsError(f"adjust must be one of {', '.join(config.ADJUST_METHODS)}, not {self.adjust!r}")
        if not (0.5 <= self.confidence < 1.0) or not math.isfinite(self.confidence):
            raise SettingsError(f"confidence must be at least 0.5 and below 1, e.g. 0.95; got {self.confidence}")
        if not (0 <= self.permutations <= config.MAX_PERMUTATIONS):
            raise SettingsError(f"permutations must be between 0 and {config.MAX_PERMUTATIONS}; got {self.permutations}")
        if not (0 <= self.seed < 2**63):
            raise SettingsError(f"seed must be a non-negative integer; got {self.seed}")
        for name, members in self.groups:
            if not name:
                raise SettingsError("a group needs a name: NAME=COL,COL")
            if not members:
                raise SettingsError(f"group {name!r} lists no columns")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["measures"] = list(self.measures)
        d["columns"] = list(self.columns) if self.columns is not None else None
        d["groups"] = {name: list(members) for name, members in self.groups}
        d["tests"] = dict(self.tests)
        return d

    def test_for(self, measure: str) -> str:
        """The method chosen for ``measure`` with --test, or "" (its default rule)."""
        return dict(self.tests).get(measure, "")

    def budget_permutations(self) -> int:
        """Resamples per pair for the work estimate: --permutations, or under --ordered the block
        relabellings when a measure uses a block permutation test."""
        if self.ordered is not None and any(MEASURES[m].serial_resamples for m in self.measures):
            return self.permutations or config.SERIAL_PERMUTATIONS
        return self.permutations

    def permutations_for(self, measure: str) -> int:
        """Resamples ``measure`` runs with: --permutations, or the default B under --test MEASURE=permutation,
        or none when another method was chosen for it."""
        test = self.test_for(measure)
        if test == "permutation":
            return self.permutations or config.DEFAULT_TEST_PERMUTATIONS
        return 0 if test else self.permutations

    @classmethod
    def from_dict(cls, d: dict) -> "AnalysisSettings":
        return cls.from_options(**{k: d.get(k) for k in (
            "measures", "columns", "groups", "missing", "adjust", "confidence", "permutations", "seed",
            "tests", "ordered", "difference")})

    def cli_arguments(self) -> list[str]:
        """The options that reproduce these settings on the command line."""
        args = ["--measures", ",".join(self.measures)]
        if self.columns is not None:
            args += ["--columns", ",".join(self.columns)]
        for name, members in self.groups:
            args += ["--group", f"{name}={','.join(members)}"]
        args += ["--missing", self.missing, "--adjust", self.adjust,
                 "--confidence", repr(self.confidence), "--permutations", str(self.permutations),
                 "--seed", str(self.seed)]
        for measure, method in self.tests:
            args += ["--test", f"{measure}={method}"]
        if self.difference:
            args += ["--difference"]
        if self.ordered:
            args += ["--ordered", self.ordered]
        elif self.ordered is not None and not self.difference:
            args += ["--ordered"]
        return args


@dataclass(frozen=True)
class Variable:
    """A single column or a group of columns, analysed as one variable."""

    name: str
    columns: tuple[int, ...]
    is_group: bool = False


@dataclass
class PairRow:
    x: str
    y: str
    measure: str
    estimate: float
    ci_low: float
    ci_high: float
    p_value: float
    q_value: float
    n: int
    note: str
    method: str = ""

    def record(self) -> dict:
        return {f: getattr(self, f) for f in PAIR_FIELDS}


@dataclass
class PairTable:
    variables: list[str]
    measures: tuple[str, ...]
    settings: AnalysisSettings
    rows: list[PairRow] = field(default_factory=list)
    seconds: float = 0.0
    serial: "serial_mod.SerialCheck | None" = None   # per-column serial dependence, rows in analysis order

    def records(self) -> list[dict]:
        return [r.record() for r in self.rows]

    def lookup(self, x: str, y: str) -> dict[str, PairRow]:
        """Rows of one pair keyed by measure; for asymmetric measures the x -> y row."""
        out: dict[str, PairRow] = {}
        for r in self.rows:
            if r.x == x and r.y == y:
                out[r.measure] = r
            elif r.x == y and r.y == x and MEASURES[r.measure].symmetric and r.measure not in out:
                out[r.measure] = r
        return out

    def matrix(self, measure: str, value: str = "estimate") -> np.ndarray:
        """p x p array of one field; symmetric measures mirrored, diagonal NaN."""
        index = {v: i for i, v in enumerate(self.variables)}
        k = len(self.variables)
        out = np.full((k, k), np.nan)
        symmetric = MEASURES[measure].symmetric
        for r in self.rows:
            if r.measure != measure:
                continue
            i, j = index[r.x], index[r.y]
            out[i, j] = getattr(r, value)
            if symmetric:
                out[j, i] = out[i, j]
        return out


# Planning -----------------------------------------------------------------

def plan_variables(names: Sequence[str], settings: AnalysisSettings) -> list[Variable]:
    """Variables in input column order; a group takes the place of its first column."""
    position = {n: i for i, n in enumerate(names)}
    selected = set(names) if settings.columns is None else set(settings.columns)
    unknown = [c for c in (settings.columns or ()) if c not in position]
    if unknown:
        raise SettingsError(f"unknown column(s) {', '.join(map(repr, unknown))}; numeric columns are: "
                            f"{', '.join(names[:20])}{' ...' if len(names) > 20 else ''}")
    group_of: dict[str, str] = {}
    members_of: dict[str, tuple[int, ...]] = {}
    for gname, members in settings.groups:
        if gname in position:
            raise SettingsError(f"group name {gname!r} is already a column name; pick another")
        if gname in members_of:
            raise SettingsError(f"group {gname!r} is defined twice")
        bad = [m for m in members if m not in position]
        if bad:
            raise SettingsError(f"group {gname!r}: unknown column(s) {', '.join(map(repr, bad))}")
        if len(set(members)) != len(members):
            raise SettingsError(f"group {gname!r} lists a column twice")
        for m in members:
            if m in group_of:
                raise SettingsError(f"column {m!r} is in both group {group_of[m]!r} and {gname!r}")
            group_of[m] = gname
        members_of[gname] = tuple(sorted(position[m] for m in members))
    variables: list[Variable] = []
    emitted: set[str] = set()
    for name in names:
        if name in group_of:
            g = group_of[name]
            if g not in emitted:
                emitted.add(g)
                cols = members_of[g]
                variables.append(Variable(g, cols, is_group=True))
        elif name in selected:
            variables.append(Variable(name, (position[name],)))
    if len(variables) < 2:
        raise SettingsError("an analysis needs at least 2 variables (columns or groups); "
                            f"got {len(variables)}")
    return variables


def _pairs(variables: Sequence[Variable]) -> list[tuple[int, int]]:
    return [(i, j) for i in range(len(variables)) for j in range(i + 1, len(variables))]


def _variable_values(data: np.ndarray, var: Variable) -> np.ndarray:
    if var.is_group:
        return data[:, list(var.columns)]
    return data[:, var.columns[0]]


def _observed(values: np.ndarray) -> np.ndarray:
    return ~np.isnan(values) if values.ndim == 1 else ~np.isnan(values).any(axis=1)


# Per-pair work (runs in worker processes) ---------------------------------

def _compute_one(measure_name: str, xv: np.ndarray, yv: np.ndarray, x_name: str, y_name: str,
                 settings: AnalysisSettings, x_group: bool, y_group: bool) -> TestResult:
    measure = get_measure(measure_name)
    n = len(xv)
    if (x_group or y_group) and not measure.multivariate:
        return undefined(n, f"{measure.name} is not defined for column groups; use dcor or dcor_bc")
    if n < config.MIN_ROWS:
        return undefined(n, f"fewer than {config.MIN_ROWS} rows with both values present ({n})")
    ctx = PairContext(confidence=settings.confidence, permutations=settings.permutations,
                      seed=pair_seed(settings.seed, x_name, y_name, measure_name),
                      test=settings.test_for(measure_name))
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
    It is the oracle of the presorted path (:func:`_fast_pair_rows`) and runs
    column groups.
    """
    xv_all = _variable_values(data, xvar)
    yv_all = _variable_values(data, yvar)
    keep = _observed(xv_all) & _observed(yv_all)
    if row_mask is not None:
        keep &= row_mask
    xv, yv = xv_all[keep], yv_all[keep]
    rows: list[PairRow] = []
    for m in settings.measures:
        for a, b, swapped in _directions(m, xvar, yvar):
            av, bv = (yv, xv) if swapped else (xv, yv)
            rows.append(_pair_row(a, b, m, _compute_one(m, av, bv, a.name, b.name, settings,
                                                        a.is_group, b.is_group)))
    return rows


def _distance_statistics(cache: dict, dist_inputs: tuple) -> "distance.DistanceStatistics":
    """The pair's distance statistics, computed once for dCor, its bias-corrected form and Kendall."""
    st = cache.get("distance")
    if st is None:
        st = cache["distance"] = distance.centred_statistics_presorted(*dist_inputs)
    return st


def _fast_measure(measure: str, work: tuple, swapped: bool, a: Variable, b: Variable,
                  settings: AnalysisSettings, cache: dict) -> TestResult:
    """One measure of a regular pair (>= 3 rows, no constant side) from the presorted orders.

    Every branch finishes with the function the per-pair measure itself ends
    with, on the same numbers, so the result is the per-pair result.
    """
    _, view, sums, counts, dist_inputs = work
    n = view.n
    av, bv = (view.y, view.x) if swapped else (view.x, view.y)
    if measure == "spearman" and not rank.spearman_needs_rows(sums[1], sums[2], n):
        # a small tied pair (SPEARMAN_TIED_PERMUTATION_MAX_N) takes the per-pair path: its permutation test needs the rows
        return rank.spearman_from_sums(sums[0], sums[1], sums[2], n, confidence=settings.confidence)
    if measure == "kendall":
        d, tx, ty, txy, x3, x5, y3, y5 = counts
        if d < 0:  # counted with the distance cross sum
            d = _distance_statistics(cache, dist_inputs).discordant
        kc = rank.KendallCounts(n, int(d), int(tx), int(ty), int(txy), float(x3), float(x5),
                                float(y3), float(y5))
        return rank.kendall_from_counts(kc, confidence=settings.confidence)
    if measure in ("dcor", "dcor_bc") and n >= 4:
        st = _distance_statistics(cache, dist_inputs)
        # the seed only drives resamples; without them it is not drawn from
        resamples = settings.permutations_for(measure)
        seed = pair_seed(settings.seed, a.name, b.name, measure) if resamples else None
        finish = distance.dcor_from_statistics if measure == "dcor" else distance.dcor_bc_from_statistics
        return finish(st, permutations=resamples, seed=seed)
    if measure == "xi":
        seed = pair_seed(settings.seed, a.name, b.name, measure)
        a_order, b_order = (view.y_order, view.x_order) if swapped else (view.x_order, view.y_order)
        order = allpairs.xi_order(av, a_order, lambda: chatterjee.xi_tie_keys(seed, n))
        r, l = allpairs.rank_counts(bv, b_order)
        return chatterjee.xi_from_order(order, r, l, permutations=settings.permutations_for(measure), seed=seed)
    if measure == "pearson" and linear.resolved_test(settings.test_for(measure), settings.permutations) != "permutation":
        # the registry's call without the (unused) seed, past the screening this pair has passed
        return linear.pearson_screened(av, bv, confidence=settings.confidence, test=settings.test_for(measure) or None)
    # anything without a presorted form
    return _compute_one(measure, av, bv, a.name, b.name, settings, False, False)


def _fast_pair_rows(prep: "allpairs.PreparedColumns", xvar: Variable, yvar: Variable,
                    settings: AnalysisSettings) -> list[PairRow] | None:
    """The rows of a pair of single columns from the presorted columns; None: use compute_pair."""
    if xvar.is_group or yvar.is_group:
        return None
    i, j = prep.slot.get(xvar.columns[0]), prep.slot.get(yvar.columns[0])
    if i is None or j is None or not (prep.finite[i] and prep.finite[j]):
        return None
    measures = settings.measures
    work = allpairs.pair_work(prep, i, j, config.MIN_ROWS,
                              spearman="spearman" in measures,
                              kendall="kendall" in measures,
                              distance="dcor" in measures or "dcor_bc" in measures)
    if not work[0]:
        return None  # degenerate pairs: every measure's own note, from the per-pair path
    cache: dict = {}
    rows: list[PairRow] = []
    for m in measures:
        for a, b, swapped in _directions(m, xvar, yvar):
            res = _fast_measure(m, work, swapped, a, b, settings, cache)
            if res.p_value == res.p_value:  # the registry's floor, as on the per-pair path
                av, bv = (work[1].y, work[1].x) if swapped else (work[1].x, work[1].y)
                res = floor_pvalue(res, pvalue_floor(MEASURES[m], av, bv))
            rows.append(_pair_row(a, b, m, res))
    return rows


def _ordered_rows(data: np.ndarray, xvar: Variable, yvar: Variable, settings: AnalysisSettings,
                  row_mask: np.ndarray | None, rows: list[PairRow]) -> list[PairRow]:
    """Rows in time order: each result replaced by its measure's serial test (registry ``serial``)."""
    xv_all, yv_all = _variable_values(data, xvar), _variable_values(data, yvar)
    keep = _observed(xv_all) & _observed(yv_all)
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


def _time_order(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings
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
    return serial_mod.serial_check(np.asarray(data, float)[: config.SERIAL_CHECK_MAX_ROWS], list(names),
                                   level=config.SERIAL_LJUNG_BOX_LEVEL, share=config.SERIAL_WARN_SHARE)


def serial_note(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings | None = None) -> str:
    """The serial-dependence check's sentence for the rows as ``settings`` order them (file order when
    not ordered): the warning without --ordered, the trending columns with it; "" when nothing to say."""
    settings = settings or AnalysisSettings()
    data = np.asarray(data, dtype=float)
    note = ""
    if settings.ordered is not None:
        data, names, note = _time_order(data, names, settings)
    return serial_check(data, names)._replace(order_note=note).message(settings.ordered is not None)


def _mark_trending(rows: list[PairRow], check: "serial_mod.SerialCheck") -> None:
    """A pair with a trending side is never called dependent on levels alone: no p-value, the reason."""
    trending = set(check.trending)
    for r in rows:
        sides = [v for v in (r.x, r.y) if v in trending]
        if sides and r.p_value == r.p_value:
            r.p_value = math.nan
            r.note = "; ".join(filter(None, [r.note, f"{' and '.join(sides)} trend{'s' if len(sides) == 1 else ''} "
                                                     "(augmented Dickey-Fuller): levels of trending series "
                                                     "correlate by chance; analyse differences (--difference)"]))


def _warm(settings: AnalysisSettings) -> None:
    """Load every compiled kernel the chosen measures use, on a tiny pair, before forking."""
    rng = np.random.default_rng(0)
    tiny = np.column_stack([rng.normal(size=24), np.round(rng.normal(size=24))])
    tiny[3, 0] = np.nan
    variables = [Variable("a", (0,)), Variable("b", (1,))]
    light = AnalysisSettings(measures=settings.measures, confidence=settings.confidence,
                             permutations=min(settings.permutations, 3), seed=settings.seed)
    _fast_pair_rows(prepare_columns(tiny, variables), variables[0], variables[1], light)
    with _one_blas_thread():  # finds the BLAS library once, before the workers fork
        pass


def prepare_columns(data: np.ndarray, variables: Sequence[Variable],
                    row_mask: np.ndarray | None = None) -> "allpairs.PreparedColumns":
    """Sort every single-column variable once for the presorted path (O(n p) memory)."""
    columns = [v.columns[0] for v in variables if not v.is_group]
    return allpairs.prepare_columns(data, row_mask, columns=columns)


_WORKER_STATE: dict = {}


def _init_worker(data, variables, settings, row_mask, prepared=None) -> None:
    """Worker state for a run; ``prepared`` (the sorted columns) is built here when not given."""
    _WORKER_STATE.clear()
    _WORKER_STATE.update(data=data, variables=variables, settings=settings, row_mask=row_mask,
                         prepared=prepared)


def _worker_prepared() -> "allpairs.PreparedColumns":
    s = _WORKER_STATE
    if s.get("prepared") is None:
        s["prepared"] = prepare_columns(s["data"], s["variables"], s["row_mask"])
    return s["prepared"]


_BLAS_CONTROLLER: list = []


@contextlib.contextmanager
def _one_blas_thread():
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


def _run_tile(tile: list[tuple[int, int]]) -> list[PairRow]:
    s = _WORKER_STATE
    prep = _worker_prepared()
    out: list[PairRow] = []
    with _one_blas_thread():
        for i, j in tile:
            xvar, yvar = s["variables"][i], s["variables"][j]
            try:
                rows = _fast_pair_rows(prep, xvar, yvar, s["settings"])
            except ArithmeticError:  # the per-pair path below turns it into a note per measure
                rows = None
            if rows is None:
                rows = compute_pair(s["data"], xvar, yvar, s["settings"], s["row_mask"])
            if s["settings"].ordered is not None:
                rows = _ordered_rows(s["data"], xvar, yvar, s["settings"], s["row_mask"], rows)
            out.extend(rows)
    return out


def _tiles(pairs: list[tuple[int, int]], workers: int) -> list[list[tuple[int, int]]]:
    # Enough tiles for progress and balance, few enough that per-task overhead stays small.
    target = max(1, min(len(pairs), max(workers, 1) * 16))
    size = max(1, math.ceil(len(pairs) / target))
    return [pairs[k:k + size] for k in range(0, len(pairs), size)]


# Public API ----------------------------------------------------------------

ProgressCallback = Callable[[float, float], None]


def run_analysis(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings, *,
                 workers: int | None = None, cluster: str | None = None,
                 executor: Executor | None = None,
                 progress: ProgressCallback | None = None,
                 cancel: Callable[[], bool] | None = None) -> PairTable:
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
    """
    started = time.perf_counter()
    data = np.asarray(data, dtype=np.float64)
    if data.ndim != 2 or data.shape[1] != len(names):
        raise SettingsError("data must be a 2-D array with one column per name")
    settings.check()
    order_note = ""
    if settings.ordered is not None:
        data, names, order_note = _time_order(data, names, settings)
    variables = plan_variables(list(names), settings)
    row_mask = _complete_rows(data, names, settings) if settings.missing == "complete" else None
    pairs = _pairs(variables)
    # refused before any work: too many pair-table rows, or beyond the work budget (app/budget.py)
    check_plan(WorkEstimate(len(pairs), len(settings.measures), data.shape[0], settings.budget_permutations()))
    workers = workers or os.cpu_count() or 1
    owned = executor is None
    if executor is None:
        executor = make_executor(workers=workers, cluster=cluster, n_tasks=len(pairs), n_rows=data.shape[0],
                                 resamples=max((settings.permutations_for(m) for m in settings.measures), default=0))
    tiles = _tiles(pairs, getattr(executor, "parallelism", workers))
    results: list[list[PairRow] | None] = [None] * len(tiles)
    done_pairs = 0
    prepared = None
    if isinstance(executor, (SerialExecutor, ProcessExecutor)):
        # Sorted once here; forked workers share the orders copy-on-write, and the
        # kernels they call are already loaded. Remote workers sort for themselves.
        prepared = prepare_columns(data, variables, row_mask)
        _warm(settings)
    frozen = isinstance(executor, ProcessExecutor) and gc.isenabled()
    if frozen:
        # Objects that exist before the fork are never collected in the workers, so
        # their collector does not walk (and copy on write) the parent's whole heap.
        gc.freeze()
    try:
        for index, rows in executor.run(_run_tile, tiles, _init_worker,
                                        (data, variables, settings, row_mask, prepared),
                                        cancel=cancel):
            results[index] = rows
            done_pairs += len(tiles[index])
            if progress is not None:
                elapsed = time.perf_counter() - started
                frac = done_pairs / max(len(pairs), 1)
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
    rows = [r for tile_rows in results for r in (tile_rows or [])]
    check = serial_check(data, names)
    if settings.ordered is not None:
        _mark_trending(rows, check)
    _fill_q_values(rows, settings.adjust)
    table = PairTable([v.name for v in variables], settings.measures, settings, rows)
    table.serial = check._replace(order_note=order_note)
    table.seconds = time.perf_counter() - started
    return table


def _fill_q_values(rows: list[PairRow], adjust: str) -> None:
    by_measure: dict[str, list[int]] = {}
    for k, r in enumerate(rows):
        by_measure.setdefault(r.measure, []).append(k)
    for idx in by_measure.values():
        q = adjust_pvalues(np.array([rows[k].p_value for k in idx], dtype=float), adjust)
        for k, qv in zip(idx, q):
            rows[k].q_value = float(qv)


def _result_json(res: TestResult | PairRow) -> dict:
    return {"estimate": _num(res.estimate), "ci_low": _num(res.ci_low), "ci_high": _num(res.ci_high),
            "p_value": _num(res.p_value), "method": res.method, "n": int(res.n), "note": res.note}


def _num(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def _complete_rows(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings) -> np.ndarray:
    """Rows observed in every variable of the analysis: the rows a complete-case run used."""
    mask = np.ones(data.shape[0], dtype=bool)
    for var in plan_variables(list(names), settings):
        mask &= _observed(_variable_values(data, var))
    return mask


def pair_detail(data: np.ndarray, names: Sequence[str], x: str, y: str,
                settings: AnalysisSettings | None = None,
                table: PairTable | None = None, include_points: bool = False) -> dict:
    """Everything about one pair: measures, Gaussian fit, verdict (the ``inspect --json`` shape).

    When ``table`` is given its rows (and q-values) are used; otherwise the
    measures are computed here and each q-value equals its p-value.
    """
    settings = settings or AnalysisSettings(measures=tuple(MEASURES))
    position = {n: i for i, n in enumerate(names)}
    for col in (x, y):
        if col not in position:
            raise SettingsError(f"unknown column {col!r}; numeric columns are: {', '.join(list(names)[:20])}")
    if x == y:
        raise SettingsError("x and y must be different columns")
    ordered = settings.ordered is not None
    if ordered:
        if settings.ordered in (x, y):
            raise SettingsError(f"{settings.ordered!r} gives the time order; choose two other columns")
        data, names, _ = _time_order(np.asarray(data, float), names, settings)
        position = {n: i for i, n in enumerate(names)}
    xvar, yvar = Variable(x, (position[x],)), Variable(y, (position[y],))
    xv_all, yv_all = data[:, position[x]], data[:, position[y]]
    keep = ~np.isnan(xv_all) & ~np.isnan(yv_all)
    row_mask = _complete_rows(data, names, settings) if settings.missing == "complete" else None
    if row_mask is not None:
        keep &= row_mask
    xv, yv = xv_all[keep], yv_all[keep]
    if table is not None:
        looked = table.lookup(x, y)
        rows = {m: r for m, r in looked.items()}
    else:
        rows = {}
        single = AnalysisSettings(measures=tuple(MEASURES), confidence=settings.confidence,
                                  permutations=settings.permutations, seed=settings.seed)
        computed = compute_pair(data, xvar, yvar, single, row_mask)
        if ordered:
            computed = _ordered_rows(data, xvar, yvar, settings, row_mask, computed)
        for r in computed:
            if r.x == x:
                r.q_value = r.p_value
                rows[r.measure] = r
    check = None
    if ordered:
        check = serial_check(np.column_stack([xv_all, yv_all]), [x, y])
        if table is None:
            _mark_trending(list(rows.values()), check)
            for r in rows.values():
                r.q_value = r.p_value
    measures = {m: _result_json(r) | {"q_value": _num(r.q_value)} for m, r in rows.items()}
    results = {m: TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
               for m, r in rows.items()}
    q_values = {m: float(r.q_value) for m, r in rows.items()}
    # Loaded here, not at import: the pair table does not need scipy.stats.
    from .core import gaussian as gaussian_mod
    from .core import verdict as verdict_mod

    fit = gaussian_mod.fit_gaussian(xv, yv)
    try:
        pattern = verdict_mod.classify_pair(xv, yv, results, q_values, alpha=config.SIGNIFICANCE_LEVEL, fit=fit)
        pattern_json = {"label": pattern.label, "reasons": list(pattern.reasons)}
    except ArithmeticError:  # values near 1e300 overflow a measure's sums: no verdict, the view still shows
        pattern_json = {"label": "", "reasons": ["no verdict: the values are too large for double precision "
                                                 "(overflow); rescale the columns"]}
    detail = {
        "x": x,
        "y": y,
        "n": int(len(xv)),
        "measures": measures,
        "gaussian": _gaussian_json(fit),
        "pattern": pattern_json,
    }
    if ordered:
        detail["ordered"] = _ordered_json(xv, yv, check, settings)
        detail["serial_note"] = check.message(True)
    if include_points:
        detail["points"] = {"x": xv.tolist(), "y": yv.tolist(), "rows": np.flatnonzero(keep).tolist()}
    return detail


def _ordered_json(xv: np.ndarray, yv: np.ndarray, check, settings: AnalysisSettings) -> dict:
    """The pair view's time-series part: how the rows were ordered, each series' serial summary and
    the cross-correlation at a few lags."""
    lags, xcorr = serial_mod.cross_correlation(xv, yv, config.SERIAL_XCORR_LAGS)
    return {
        "by": settings.ordered or "", "difference": settings.difference,
        "cross_correlation": {"lags": lags.tolist(), "r": [_num(v) for v in xcorr]},
        "series": {name: {"lag1": _num(c.lag1), "ljung_box_p": _num(c.ljung_box_p),
                          "adf_p": _num(c.adf_p), "trending": bool(c.trending)}
                   for name, c in zip(check.names, check.columns)},
    }


def _gaussian_json(fit) -> dict:
    return {
        "mean": [_num(fit.mean[0]), _num(fit.mean[1])],
        "cov": [[_num(fit.cov[0][0]), _num(fit.cov[0][1])], [_num(fit.cov[1][0]), _num(fit.cov[1][1])]],
        "rho": _num(fit.rho),
        "conditional": {"slope": _num(fit.slope), "intercept": _num(fit.intercept),
                        "residual_sd": _num(fit.residual_sd)},
        "implied": {k: _num(v) for k, v in fit.implied.items()},
        "normality": {"test": "henze-zirkler", "statistic": _num(fit.normality.estimate),
                      "p_value": _num(fit.normality.p_value)},
        "marginal_normality": {k: {"test": v.method, "statistic": _num(v.estimate), "p_value": _num(v.p_value)}
                               for k, v in fit.marginal_normality.items()},
        "ellipses": {repr(float(m)): np.asarray(b).tolist() for m, b in fit.ellipses.items()},
        "note": fit.note,
    }


def iter_pairs(variables: Iterable[Variable]) -> list[tuple[int, int]]:
    return _pairs(list(variables))
