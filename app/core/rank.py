"""Rank correlations: Spearman's rho (mid-ranks) and Kendall's tau-b."""

from __future__ import annotations

import numpy as np

from .results import TestResult

__all__ = ["midranks", "spearman", "kendall"]


def midranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n with ties given the mean of the ranks they span."""
    raise NotImplementedError


def spearman(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95) -> TestResult:
    """Spearman rho, t approximation p-value, Fisher z interval with Bonett & Wright SE."""
    raise NotImplementedError


def kendall(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95, method: str = "auto") -> TestResult:
    """Kendall tau-b; method "auto" | "knight" (O(n log n)) | "naive" (O(n^2) oracle)."""
    raise NotImplementedError
