"""Pearson's product-moment correlation."""

from __future__ import annotations

import numpy as np

from .results import TestResult

__all__ = ["pearson", "pearson_matrix"]


def pearson_matrix(data: np.ndarray, *, missing: str = "pairwise") -> tuple[np.ndarray, np.ndarray]:
    """All-pairs Pearson r and the number of rows used, by (masked) BLAS products.

    data: (n, p) float array, NaN for missing. Returns (r, n_used), both (p, p).
    """
    raise NotImplementedError


def pearson(x: np.ndarray, y: np.ndarray, *, confidence: float = 0.95) -> TestResult:
    """Pearson r of two complete 1-D arrays, t-test p-value, Fisher z interval."""
    raise NotImplementedError
