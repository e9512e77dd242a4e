"""The one result type every measure returns."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

__all__ = ["TestResult", "undefined"]


@dataclass(frozen=True, slots=True)
class TestResult:
    """Estimate, p-value and interval of one measure on one pair.

    Attributes
    ----------
    estimate : float
        The statistic (NaN when undefined).
    p_value : float
        p-value of the default test of independence (NaN when undefined or
        not computed).
    method : str
        Short name of the method that produced the p-value, for example
        ``"t, n-2 df"`` or ``"permutation, B=999"``.
    ci_low, ci_high : float
        Confidence interval at the requested level, NaN where not defined.
    n : int
        Number of rows used.
    note : str
        Why a value is missing, empty otherwise.
    """

    __test__ = False  # keep pytest from collecting this class

    estimate: float
    p_value: float
    method: str
    ci_low: float = math.nan
    ci_high: float = math.nan
    n: int = 0
    note: str = ""

    def with_note(self, note: str) -> "TestResult":
        return replace(self, note=note)


def undefined(n: int, note: str, method: str = "") -> TestResult:
    """A result whose value cannot be computed, with the reason in ``note``."""
    return TestResult(math.nan, math.nan, method, math.nan, math.nan, int(n), note)
