"""Verdicts of pairs with a categorical side, and the pair view's group and contingency summaries.

Labels (beside :data:`pairlens.core.verdict.LABELS` for numeric pairs):

* numeric x categorical: "groups differ" when a location test (registry role "trend" or
  "rank": the ANOVA F of eta, Kruskal-Wallis) has q below alpha; "groups differ in spread or
  shape" when only a dependence test (role "dependence": dCor) does; else "no evidence of
  dependence".
* categorical x categorical: "levels associated" when any test has q below alpha; else
  "no evidence of dependence".

The rules read the registry's roles, never a measure's name.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .registry import MEASURES, pair_kind
from .results import TestResult

__all__ = ["CATEGORICAL_LABELS", "CategoricalEvidence", "categorical_verdict", "group_summary",
           "contingency_summary"]

CATEGORICAL_LABELS = ("groups differ", "groups differ in spread or shape", "levels associated",
                      "no evidence of dependence")


def _fmt_q(q: float) -> str:
    if not math.isfinite(q):
        return "q n/a"
    return "q < 0.001" if q < 0.001 else f"q = {q:.3f}"


def categorical_verdict(kinds: tuple[str, str], results: dict[str, TestResult], q_values: dict[str, float],
                        alpha: float = 0.05) -> tuple[str, tuple[str, ...]]:
    """Label and reasons of a pair with a categorical side from its measures and q-values.

    Examples
    --------
    >>> r = {"eta": TestResult(0.4, 1e-6, "F"), "dcor": TestResult(0.3, 1e-5, "gamma")}
    >>> categorical_verdict(("numeric", "categorical"), r, {"eta": 1e-5, "dcor": 1e-4})[0]
    'groups differ'
    """
    def significant(role_set):
        return [m for m in results if MEASURES[m].role in role_set and q_values.get(m, math.nan) < alpha]

    reasons = [f"{MEASURES[m].short_label or MEASURES[m].label} = {res.estimate:.2f} ({_fmt_q(q_values.get(m, math.nan))})"
               for m, res in results.items() if res.estimate == res.estimate]
    if pair_kind(*kinds) == "categorical x categorical":
        label = "levels associated" if significant(("trend", "rank", "dependence")) else "no evidence of dependence"
        if label == "levels associated":
            reasons.append("the contingency table's shaded cells show which level combinations are more or "
                           "less frequent than independence predicts")
    elif significant(("trend", "rank")):
        label = "groups differ"
        reasons.append("the group means (or mean ranks) differ beyond chance")
    elif significant(("dependence",)):
        label = "groups differ in spread or shape"
        reasons.append("no location test is significant, but distance correlation is: the groups' spread or "
                       "shape differs")
    else:
        label = "no evidence of dependence"
    return label, tuple(reasons)


@dataclass
class CategoricalEvidence:
    """What the engine keeps of a categorical pair until the q-values exist (see pairlens.tiles)."""

    kinds: tuple[str, str]
    results: dict

    def label(self, q_values: dict[str, float], alpha: float = 0.05) -> str:
        return categorical_verdict(self.kinds, self.results, q_values, alpha)[0]


def group_summary(values: np.ndarray, codes: np.ndarray, labels: list[str]) -> list[dict]:
    """Per level present: its name, rows, mean, standard deviation, median and quartiles."""
    out = []
    for code in np.unique(codes):
        v = values[codes == code]
        q1, med, q3 = np.percentile(v, [25, 50, 75])
        name = labels[int(code)] if 0 <= int(code) < len(labels) else f"{code:g}"
        out.append({"level": name, "n": int(v.size), "mean": float(v.mean()),
                    "sd": float(v.std(ddof=1)) if v.size > 1 else math.nan,
                    "median": float(med), "q1": float(q1), "q3": float(q3)})
    return out


def contingency_summary(x: np.ndarray, y: np.ndarray, x_labels: list[str], y_labels: list[str]) -> dict:
    """Counts, expected counts and adjusted standardised residuals of a contingency table.

    Notes
    -----
    Adjusted residual (Haberman 1973): (O - E) / sqrt(E (1 - r_i/n)(1 - c_j/n)), about
    standard normal under independence, so |value| > 2 marks a cell that departs from it.

    References
    ----------
    Haberman, S.J. (1973) Biometrics 29:205-220, doi:10.2307/2529686
    """
    xl, xc = np.unique(x, return_inverse=True)
    yl, yc = np.unique(y, return_inverse=True)
    r, k = xl.size, yl.size
    counts = np.bincount(xc.ravel() * k + yc.ravel(), minlength=r * k).reshape(r, k).astype(float)
    n = counts.sum()
    rows, cols = counts.sum(axis=1), counts.sum(axis=0)
    expected = np.outer(rows, cols) / n
    with np.errstate(divide="ignore", invalid="ignore"):
        adjusted = (counts - expected) / np.sqrt(expected * np.outer(1 - rows / n, 1 - cols / n))

    def name(labels, code):
        return labels[int(code)] if 0 <= int(code) < len(labels) else f"{code:g}"

    return {"x_levels": [name(x_labels, c) for c in xl], "y_levels": [name(y_labels, c) for c in yl],
            "counts": counts.astype(int).tolist(), "expected": np.round(expected, 3).tolist(),
            "residuals": [[float(v) if np.isfinite(v) else None for v in row] for row in adjusted]}
