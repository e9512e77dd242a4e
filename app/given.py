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
        raise SettingsError(f"given: unknown column(s) {', '.join(map(repr, unknown))}; numeric columns are: "
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
