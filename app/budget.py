"""Up-front estimate of an analysis's work, and its refusal beyond the budget in :mod:`pairlens.config`.

The estimate is made before anything runs, from the plan alone (pairs, measures, rows,
permutations), so a request that would compute for hours, or produce a pair table
too large to store and show, is refused at once with the numbers and what to change.
"""

from __future__ import annotations

from . import config
from .errors import SettingsError

__all__ = ["WorkEstimate", "estimate_work", "check_work", "check_plan"]


class WorkEstimate:
    """Pairs, measures, rows and permutations of a plan, and the seconds of one core they cost."""

    def __init__(self, pairs: int, measures: int, rows: int, permutations: int) -> None:
        self.pairs, self.measures, self.rows, self.permutations = int(pairs), int(measures), int(rows), int(permutations)

    @property
    def pair_rows(self) -> int:
        return self.pairs * self.measures

    @property
    def seconds(self) -> float:
        per_pair = config.PAIR_OVERHEAD_ROWS + self.rows * (1 + self.permutations)
        return self.pair_rows * per_pair / config.WORK_UNITS_PER_SECOND

    def describe(self) -> str:
        return (f"{self.pairs:,} pairs x {self.measures} measure{'s' if self.measures != 1 else ''} over "
                f"{self.rows:,} rows with {self.permutations:,} permutations")


def _duration(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.0f} s"
    if seconds < 7200:
        return f"{seconds / 60:.0f} minutes"
    if seconds < 172_800:
        return f"{seconds / 3600:.1f} hours"
    return f"{seconds / 86_400:.0f} days"


def estimate_work(n_variables: int, n_measures: int, n_rows: int, permutations: int) -> WorkEstimate:
    return WorkEstimate(n_variables * (n_variables - 1) // 2, n_measures, n_rows, permutations)


_SHRINK = ("choose fewer columns (the 'columns' option, --columns), fewer measures or permutations, "
           "or load a sample of the rows")


def check_plan(estimate: WorkEstimate) -> WorkEstimate:
    """Raise :class:`SettingsError` when the plan passes ``MAX_PAIR_ROWS`` or ``WORK_BUDGET_SECONDS``."""
    if estimate.pair_rows > config.MAX_PAIR_ROWS:
        raise SettingsError(f"this analysis would give {estimate.pair_rows:,} pair-table rows "
                            f"({estimate.describe()}); pairlens keeps at most {config.MAX_PAIR_ROWS:,} "
                            f"(config.MAX_PAIR_ROWS): {_SHRINK}")
    budget = config.WORK_BUDGET_SECONDS
    if estimate.seconds > budget:
        raise SettingsError(f"this analysis is estimated at about {_duration(estimate.seconds)} of one core "
                            f"({estimate.describe()}), over the budget of {_duration(budget)} "
                            f"(config.WORK_BUDGET_SECONDS, or PAIRLENS_WORK_BUDGET_SECONDS): {_SHRINK}")
    return estimate


def check_work(n_rows: int, numeric: list[str], options: dict) -> WorkEstimate | None:
    """:func:`check_plan` for a request's raw options; None when they are invalid (the caller explains)."""
    from .plan import AnalysisSettings, plan_variables

    allowed = ("measures", "columns", "groups", "missing", "adjust", "confidence", "permutations", "seed")
    try:
        settings = AnalysisSettings.from_options(**{k: options.get(k) for k in allowed})
        variables = plan_variables(list(numeric), settings)
    except Exception:  # noqa: BLE001 - the workspace turns bad options into their own message
        return None
    return check_plan(estimate_work(len(variables), len(settings.run_measures), n_rows, settings.permutations))
