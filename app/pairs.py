"""The pair-detail service: one pair's rows, its full and quick detail, and its verdict.

Every face (the web pair view and its quick first answer, the verdict column,
the report's pair cards, ``pairlens inspect`` and the library) asks this
module about a pair, so they use the same rows (:func:`pairlens.plan.pair_rows`,
which honours ``missing``) and say the same thing. Results are typed
(:class:`PairDetail`); dicts appear only in :meth:`PairDetail.to_json`, the
JSON edge.
"""

from __future__ import annotations

import base64

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from . import config
from .core.registry import MEASURES
from .core import serial as serial_mod
from .core.results import TestResult
from .errors import SettingsError
from .ordering import mark_trending, serial_check, time_order, trending_sides
from .pairtable import PairRow, PairTable
from .plan import AnalysisSettings, PairRows, Variable, analysis_row_mask, pair_rows
from .tiles import compute_pair, ordered_rows

__all__ = ["PairDetail", "pair_rows", "full_detail", "quick_detail", "pair_detail", "pair_verdict",
           "verdict_of", "gaussian_json"]

_OVERFLOW_REASON = ("no verdict: the values are too large for double precision (overflow); rescale the columns")


def _num(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def _result_json(res: TestResult | PairRow) -> dict:
    return {"estimate": _num(res.estimate), "ci_low": _num(res.ci_low), "ci_high": _num(res.ci_high),
            "p_value": _num(res.p_value), "method": res.method, "n": int(res.n), "note": res.note}


def gaussian_json(fit, *, pending: bool = False) -> dict:
    """A :class:`pairlens.core.gaussian.GaussianFit` as the pair view's JSON (non-finite numbers null)."""
    out = {
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
    if pending:
        out["pending"] = True
    return out


@dataclass
class PairDetail:
    """One pair: its rows, its rows of the pair table, the Gaussian fit and (when complete) the verdict.

    ``complete`` is False for the quick detail: moments only, no normality
    tests and no verdict yet.
    """

    rows: PairRows
    measures: dict[str, PairRow]
    fit: object
    label: str | None
    reasons: tuple[str, ...]
    complete: bool
    ordered: dict | None = None     # rows in time order: how, each series' serial summary, cross-correlation
    serial_note: str = ""
    kinds: tuple[str, str] = ("numeric", "numeric")
    categorical: dict | None = None  # a pair with a categorical side: group summary or contingency table
    given: dict | None = None       # --given: the columns held fixed, how, and the residuals of x and y

    @property
    def x(self) -> str:
        return self.rows.x_name

    @property
    def y(self) -> str:
        return self.rows.y_name

    def to_json(self, include_points: bool = False) -> dict:
        """The ``inspect --json`` / API shape."""
        detail = {
            "x": self.x,
            "y": self.y,
            "n": self.rows.n,
            "measures": {m: _result_json(r) | {"q_value": _num(r.q_value)} for m, r in self.measures.items()},
            "gaussian": gaussian_json(self.fit, pending=not self.complete),
            "pattern": ({"label": self.label, "reasons": list(self.reasons)} if self.complete else None),
            "rows_used": self.rows.describe(),
        }
        detail["kinds"] = list(self.kinds)
        if self.categorical is not None:
            detail["categorical"] = self.categorical
        if self.ordered is not None:
            detail["ordered"] = self.ordered
            detail["serial_note"] = self.serial_note
        if self.given is not None:
            detail["given"] = {k: v for k, v in self.given.items() if include_points or k != "residuals"}
        if include_points == "packed":
            detail["points"] = pack_points(self.rows.x, self.rows.y, self.rows.rows)
        elif include_points:
            detail["points"] = {"x": self.rows.x.tolist(), "y": self.rows.y.tolist(),
                                "rows": self.rows.rows.tolist()}
        return detail


def pack_points(x, y, rows) -> dict:
    """A pair's points as base64 of little-endian float32 (x, y) and int32 (rows).

    About a sixth of the JSON text of the same numbers, and no float printing or
    parsing on either side: 10,000 points cost ~0.2 s as JSON under load. Float32
    keeps 7 significant digits, more than a scatter's pixels resolve.
    """
    def b64(values, dtype: str) -> str:
        return base64.b64encode(np.ascontiguousarray(values, dtype=dtype).tobytes()).decode("ascii")

    return {"encoding": "base64-le", "n": int(len(x)), "x": b64(x, "<f4"), "y": b64(y, "<f4"),
            "rows": b64(rows, "<i4")}


def _measures_of(data: np.ndarray, names: Sequence[str], rows: PairRows, settings: AnalysisSettings,
                 table: PairTable | None, row_mask: np.ndarray | None) -> dict[str, PairRow]:
    if table is not None:
        return dict(table.lookup(rows.x_name, rows.y_name))
    position = {n: i for i, n in enumerate(names)}
    xvar, yvar = (Variable(rows.x_name, (position[rows.x_name],), kind=_kind(settings, rows.x_name)),
                  Variable(rows.y_name, (position[rows.y_name],), kind=_kind(settings, rows.y_name)))
    single = AnalysisSettings(measures=tuple(MEASURES), confidence=settings.confidence,
                              permutations=settings.permutations, seed=settings.seed,
                              categorical=settings.categorical)
    out: dict[str, PairRow] = {}
    if row_mask is None:
        row_mask = analysis_row_mask(data, names, settings)
    computed = compute_pair(data, xvar, yvar, single, row_mask)
    if settings.ordered is not None:
        computed = ordered_rows(data, xvar, yvar, settings, row_mask, computed)
    for r in computed:
        if r.x == rows.x_name:
            r.q_value = r.p_value  # a single pair: nothing to adjust over
            out[r.measure] = r
    return out


def _analysis_order(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings,
                    row_mask: np.ndarray | None) -> tuple[np.ndarray, Sequence[str], np.ndarray | None]:
    """The rows as the analysis saw them: in time order (and differenced) under --ordered."""
    if settings.ordered is None:
        return data, names, row_mask
    data, names, _ = time_order(np.asarray(data, float), names, settings)
    return data, names, None


def _kind(settings: AnalysisSettings, name: str) -> str:
    return "categorical" if name in settings.categorical else "numeric"


def _categorical_part(rows: PairRows, kinds: tuple[str, str], levels: dict | None) -> dict:
    """The pair view's group summary (numeric x categorical) or contingency table (both categorical)."""
    from .core.verdict_categorical import contingency_summary, group_summary

    levels = levels or {}
    if kinds == ("categorical", "categorical"):
        return {"view": "contingency", **contingency_summary(rows.x, rows.y, list(levels.get(rows.x_name, ())),
                                                             list(levels.get(rows.y_name, ())))}
    if kinds[0] == "categorical":
        values, codes, group_name, value_name = rows.y, rows.x, rows.x_name, rows.y_name
    else:
        values, codes, group_name, value_name = rows.x, rows.y, rows.y_name, rows.x_name
    from .core.categorical import correlation_ratio

    cr = correlation_ratio(values, codes)
    return {"view": "groups", "group": group_name, "value": value_name,
            "groups": group_summary(values, codes, list(levels.get(group_name, ()))),
            "eta": _num(cr.eta), "omega2": _num(cr.omega2), "f": _num(cr.f),
            "df": [cr.df_between, cr.df_within]}


def verdict_of(rows: PairRows, measures: dict[str, PairRow], fit=None,
               kinds: tuple[str, str] = ("numeric", "numeric"),
               trending: tuple[str, ...] = ()) -> tuple[str, tuple[str, ...]]:
    """The verdict label and reasons of a pair from its rows and its rows of the pair table;
    ``trending``: its sides that trend in an ordered analysis (then "not tested (trending)")."""
    # Loaded here, not at import: the pair table does not need scipy.stats.
    from .core.verdict import classify_pair

    results = {m: TestResult(r.estimate, r.p_value, r.method, r.ci_low, r.ci_high, r.n, r.note)
               for m, r in measures.items()}
    q_values = {m: float(r.q_value) for m, r in measures.items()}
    if "categorical" in kinds and not trending:
        from .core.verdict_categorical import categorical_verdict
        return categorical_verdict(kinds, results, q_values, alpha=config.SIGNIFICANCE_LEVEL)
    try:
        pattern = classify_pair(rows.x, rows.y, results, q_values, alpha=config.SIGNIFICANCE_LEVEL, fit=fit,
                                trending=trending)
    except ArithmeticError:  # values near 1e300 overflow a measure's sums: no verdict, the view still shows
        return "", (_OVERFLOW_REASON,)
    return pattern.label, tuple(pattern.reasons)


def full_detail(data: np.ndarray, names: Sequence[str], x: str, y: str,
                settings: AnalysisSettings | None = None, table: PairTable | None = None,
                row_mask: np.ndarray | None = None, levels: dict | None = None) -> PairDetail:
    """Everything about one pair: measures, Gaussian fit with its normality tests, verdict.

    When ``table`` is given its rows (and q-values) are used; otherwise the
    measures are computed here and each q-value equals its p-value.
    """
    from .core.gaussian import fit_gaussian

    settings = settings or AnalysisSettings(measures=tuple(MEASURES))
    ordered = settings.ordered is not None
    if ordered:
        if settings.ordered in (x, y):
            raise SettingsError(f"{settings.ordered!r} gives the time order; choose two other columns")
        # a mask given for the file's row order is chosen again in time order
        data, names, row_mask = _analysis_order(data, names, settings, row_mask)
    rows = pair_rows(data, names, x, y, settings, row_mask)
    measures = _measures_of(data, names, rows, settings, table, row_mask)
    timeline, note, trending = None, "", ()
    if ordered:
        position = {n: i for i, n in enumerate(names)}
        check = serial_check(np.column_stack([data[:, position[x]], data[:, position[y]]]), [x, y])
        if table is None:
            mark_trending(list(measures.values()), check)
            for r in measures.values():
                r.q_value = r.p_value
        timeline, note = _ordered_json(rows.x, rows.y, check, settings), check.message(True)
        trending = trending_sides(x, y, check)
    kinds = (_kind(settings, x), _kind(settings, y))
    given = None
    if settings.given:
        given = _given_detail(data, names, x, y, settings, row_mask, measures, computed=table is None)
    fit = fit_gaussian(rows.x, rows.y, tests="categorical" not in kinds)
    base = {m: r for m, r in measures.items() if m in MEASURES}  # the verdict reads unconditional rows
    label, reasons = verdict_of(rows, base, fit, kinds, trending)
    part = _categorical_part(rows, kinds, levels) if "categorical" in kinds else None
    return PairDetail(rows, measures, fit, label, reasons, True, timeline, note, kinds, part, given)


def _given_detail(data: np.ndarray, names: Sequence[str], x: str, y: str, settings: AnalysisSettings,
                  row_mask: np.ndarray | None, measures: dict[str, PairRow], computed: bool) -> dict:
    """--given: the conditional measures (added to ``measures`` when no table holds them) and the
    residuals of x and y on the given columns, the pair view's residual scatter."""
    from .core.partial import design_matrix, residuals
    from .given import conditional_values, given_columns, given_rows

    given = given_columns(data, names, settings)
    if x in given.names or y in given.names:
        raise SettingsError(f"{x if x in given.names else y!r} is held fixed (given); choose two other columns")
    position = {n: i for i, n in enumerate(names)}
    xvar, yvar = Variable(x, (position[x],)), Variable(y, (position[y],))
    if computed:
        for r in given_rows(data, xvar, yvar, settings, row_mask, given):
            r.q_value = r.p_value  # a single pair: nothing to adjust over
            measures[r.measure] = r
    rows, xv, yv, z = conditional_values(data, xvar, yvar, given, row_mask)
    out = {"columns": list(given.names), "how": given.describe(), "n": int(rows.size)}
    if rows.size >= 3:
        design = design_matrix(z, given.indicator)
        ex, _ = residuals(xv, design)
        ey, _ = residuals(yv, design)
        out["residuals"] = {"x": ex.tolist(), "y": ey.tolist(), "rows": rows.tolist()}
    return out


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


def quick_detail(data: np.ndarray, names: Sequence[str], x: str, y: str, table: PairTable,
                 row_mask: np.ndarray | None = None) -> PairDetail:
    """The pair view's first answer: the same rows and measures, Gaussian moments without the tests.

    The Henze-Zirkler statistic needs all pairwise distances of up to
    ``config.HZ_MAX_ROWS`` rows and the verdict reuses it; the full detail
    (:func:`full_detail`) follows.
    """
    from .core.gaussian import fit_gaussian

    data, names, row_mask = _analysis_order(data, names, table.settings, row_mask)
    rows = pair_rows(data, names, x, y, table.settings, row_mask)
    fit = fit_gaussian(rows.x, rows.y, tests=False)
    kinds = (_kind(table.settings, x), _kind(table.settings, y))
    return PairDetail(rows, dict(table.lookup(x, y)), fit, None, (), False, kinds=kinds)


def pair_verdict(data: np.ndarray, names: Sequence[str], x: str, y: str, table: PairTable,
                 row_mask: np.ndarray | None = None) -> str:
    """The verdict label of one pair of an analysis, from the rows its measures used."""
    data, names, row_mask = _analysis_order(data, names, table.settings, row_mask)
    rows = pair_rows(data, names, x, y, table.settings, row_mask)
    kinds = (_kind(table.settings, x), _kind(table.settings, y))
    trending: tuple[str, ...] = ()
    if table.settings.ordered is not None:
        position = {n: i for i, n in enumerate(names)}
        trending = trending_sides(x, y, serial_check(np.column_stack([data[:, position[x]], data[:, position[y]]]),
                                                     [x, y]))
    return verdict_of(rows, dict(table.lookup(x, y)), kinds=kinds, trending=trending)[0]


def pair_detail(data: np.ndarray, names: Sequence[str], x: str, y: str,
                settings: AnalysisSettings | None = None,
                table: PairTable | None = None, include_points: bool = False, levels: dict | None = None) -> dict:
    """:func:`full_detail` as JSON (the ``inspect --json`` shape)."""
    return full_detail(data, names, x, y, settings, table, levels=levels).to_json(include_points)
