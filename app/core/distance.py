"""Distance correlation: R_n (V-statistic) and the bias-corrected squared version."""

from __future__ import annotations

import numpy as np

from .results import TestResult

__all__ = ["dcor", "dcor_bc"]


def dcor(x: np.ndarray, y: np.ndarray, *, method: str = "auto", permutations: int = 0,
         seed: np.random.SeedSequence | int | None = None) -> TestResult:
    """Distance correlation R_n of x and y (1-D, or 2-D (n, d) for column groups)."""
    raise NotImplementedError


def dcor_bc(x: np.ndarray, y: np.ndarray, *, method: str = "auto", permutations: int = 0,
            seed: np.random.SeedSequence | int | None = None) -> TestResult:
    """Bias-corrected squared distance correlation (U-centred)."""
    raise NotImplementedError
