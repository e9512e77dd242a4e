"""A plain-words verdict on the kind of dependence in a pair."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .results import TestResult

__all__ = ["Pattern", "LABELS", "classify_pair"]

LABELS = ("linear", "monotone but curved", "non-monotone", "driven by a few points",
          "no evidence of dependence")


@dataclass(frozen=True)
class Pattern:
    label: str
    reasons: tuple[str, ...]


def classify_pair(x: np.ndarray, y: np.ndarray, results: dict[str, TestResult],
                  q_values: dict[str, float], *, alpha: float = 0.05) -> Pattern:
    """Combine adjusted significance, estimates, Gaussian gaps and influence into a label."""
    raise NotImplementedError
