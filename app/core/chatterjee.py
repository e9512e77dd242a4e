"""Chatterjee's rank correlation xi_n(x -> y)."""

from __future__ import annotations

import numpy as np

from .results import TestResult

__all__ = ["xi"]


def xi(x: np.ndarray, y: np.ndarray, *, permutations: int = 0,
       seed: np.random.SeedSequence | int | None = None) -> TestResult:
    """xi_n(x -> y); ties in x broken at random from ``seed``; asymptotic normal p-value."""
    raise NotImplementedError
