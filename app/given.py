"""Association given other columns (--given COL,...): which columns are held fixed, how, and the rows.

The run adds, for each chosen measure whose registry entry names a conditional
variant (``Measure.partial``), that variant's rows to the pair table. A pair's
conditional rows are those where x, y and every given column are present (and,
under ``missing="complete"``, complete in the analysis). A given column with at
most ``config.GIVEN_INDICATOR_MAX_LEVELS`` distinct values is a class code and
enters the regressions as indicators of its levels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from . import config
from .core.registry import PairContext, get_measure, partial_of
from .core.results import undefined
from .core.testing import pair_seed
from .errors import SettingsError
from .pairtable import PairRow
from .plan import AnalysisSettings, Variable, observed, variable_values

__all__ = ["GivenColumns", "given_columns", "given_rows", "conditional_values", "describe_given"]


@dataclass(frozen=True)
class GivenColumns:
    """The columns held fixed: their names, positions in the data, and which are class codes."""

    names: tuple[str, ...]
    columns: tuple[int, ...]
    indicator: tuple[bool, ...]
    levels: tuple[int, ...]

    def describe(self) -> list[str]:
        """One phrase per column: how it enters the regressions."""
        return [f"{n}: indicators of its {lv} levels (class code)" if ind else f"{n}: numeric (linear term)"
                for n, ind, lv in zip(self.names, self.indicator, self.levels)]


def given_columns(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings) -> GivenColumns | None:
    """The given columns of ``settings`` on ``data``; None without --given. SettingsError for unknown names."""
    if not settings.given:
        return None
    position = {n: i for i, n in enumerate(names)}
    unknown = [c for c in settings.given if c not in position]
    if unknown:
        raise SettingsError(f"given: unknown column(s) {', '.join(map(repr, unknown))}; columns are: "
                            f"{', '.join(list(names)[:20])}{' ...' if len(names) > 20 else ''}")
    cols = tuple(position[c] for c in settings.given)
    indicator, levels = [], []
    for c in cols:
        v = data[:, c]
        distinct = np.unique(v[~np.isnan(v)]).size
        levels.append(int(distinct))
        indicator.append(distinct <= config.GIVEN_INDICATOR_MAX_LEVELS)
    return GivenColumns(tuple(settings.given), cols, tuple(indicator), tuple(levels))


def conditional_values(data: np.ndarray, xvar: Variable, yvar: Variable, given: GivenColumns,
                       row_mask: np.ndarray | None = None):
    """Rows where x, y and every given column are present: (rows, x, y, z)."""
    xv_all, yv_all = variable_values(data, xvar), variable_values(data, yvar)
    z_all = data[:, list(given.columns)]
    keep = observed(xv_all) & observed(yv_all) & ~np.isnan(z_all).any(axis=1)
    if row_mask is not None:
        keep &= row_mask
    return np.flatnonzero(keep), xv_all[keep], yv_all[keep], z_all[keep]


def given_rows(data: np.ndarray, xvar: Variable, yvar: Variable, settings: AnalysisSettings,
               row_mask: np.ndarray | None, given: GivenColumns) -> list[PairRow]:
    """The conditional variants of the chosen measures for one pair (symmetric: one row each)."""
    _, xv, yv, z = conditional_values(data, xvar, yvar, given, row_mask)
    n = xv.shape[0]
    out = []
    for name in partial_of(settings.measures):
        measure = get_measure(name)
        if not measure.applies_to(xvar.kind, yvar.kind):
            continue  # residuals of level codes mean nothing: a categorical side takes no partial measure
        if (xvar.is_group or yvar.is_group) and not measure.multivariate:
            res = undefined(n, f"{name} is not defined for column groups; use dcor for groups")
        elif n < config.MIN_ROWS:
            res = undefined(n, f"fewer than {config.MIN_ROWS} rows with both values and every given column "
                               f"present ({n})")
        else:
            ctx = PairContext(confidence=settings.confidence, permutations=settings.permutations,
                              seed=pair_seed(settings.seed, xvar.name, yvar.name, name),
                              given=z, given_indicator=given.indicator)
            try:
                res = measure.compute(xv, yv, ctx)
            except (ArithmeticError, ValueError, np.linalg.LinAlgError) as exc:
                res = undefined(n, f"{name} cannot be computed: {exc}")
        out.append(PairRow(xvar.name, yvar.name, name, res.estimate, res.ci_low, res.ci_high, res.p_value,
                           math.nan, res.n, res.note, res.method))
    return out


def describe_given(given: GivenColumns | None) -> str:
    """One sentence for the methods and the pages: what is held fixed and how."""
    if given is None:
        return ""
    return ("Given " + "; ".join(given.describe()) + ". Residuals by least squares on an intercept and these "
            "terms (partial Pearson and Spearman); distances of the given columns, numeric ones scaled to unit "
            "SD, for partial distance correlation. Conditional q-values are adjusted within each conditional "
            "measure, a family of their own.")


def conditioning_changes(table, alpha: float, limit: int = 25) -> dict | None:
    """The pairs whose dependence changes most when the given columns are held fixed.

    For the first chosen measure with a conditional variant, each pair's plain and
    conditional estimate and q-value; ``kind`` "vanishes" (plain q < alpha, conditional
    not), "appears" (the reverse) or "" (unchanged verdict). Vanishing and appearing pairs
    come first, each by the size of the change; then the largest changes. None without --given.
    """
    settings = table.settings
    if not settings.given:
        return None
    base = next((m for m in settings.measures if get_measure(m).partial), None)
    if base is None:
        return None
    cond = get_measure(base).partial
    plain: dict[tuple[str, str], PairRow] = {}
    given: dict[tuple[str, str], PairRow] = {}
    for r in table.rows:
        if r.measure == base:
            plain[(r.x, r.y)] = r
        elif r.measure == cond:
            given[(r.x, r.y)] = r
    rows = []
    for key, p in plain.items():
        g = given.get(key)
        if g is None:
            continue
        pe, ge = float(p.estimate), float(g.estimate)
        if not (math.isfinite(pe) and math.isfinite(ge)):
            continue
        p_sig = p.q_value == p.q_value and p.q_value < alpha
        g_sig = g.q_value == g.q_value and g.q_value < alpha
        kind = "vanishes" if p_sig and not g_sig else "appears" if g_sig and not p_sig else ""
        rows.append({"x": key[0], "y": key[1], "plain": pe, "plain_q": float(p.q_value), "given": ge,
                     "given_q": float(g.q_value), "change": ge - pe, "kind": kind})
    rows.sort(key=lambda r: (r["kind"] == "", -abs(r["change"])))
    counts = {k: sum(r["kind"] == k for r in rows) for k in ("vanishes", "appears")}
    return {"measure": base, "conditional": cond, "columns": list(settings.given), "rows": rows[:limit],
            "counts": counts, "pairs": len(rows)}
