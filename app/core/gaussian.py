"""The bivariate Gaussian fit of a pair and what it implies."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .results import TestResult

__all__ = ["GaussianFit", "implied_measures", "henze_zirkler", "fit_gaussian"]


@dataclass(frozen=True)
class GaussianFit:
    mean: tuple[float, float]
    cov: tuple[tuple[float, float], tuple[float, float]]  # ddof=1
    rho: float
    slope: float              # E[y | x] = intercept + slope * x
    intercept: float
    residual_sd: float        # sd of y given x
    implied: dict[str, float]                      # measure name -> value a Gaussian with rho implies
    normality: TestResult                          # Henze-Zirkler joint normality
    marginal_normality: dict[str, TestResult] = field(default_factory=dict)  # "x", "y"
    ellipses: dict[float, np.ndarray] = field(default_factory=dict)          # mass -> (k, 2) boundary
    n: int = 0
    note: str = ""


def implied_measures(rho: float) -> dict[str, float]:
    """Values of each measure under a bivariate normal with correlation rho."""
    raise NotImplementedError


def henze_zirkler(data: np.ndarray) -> TestResult:
    """Henze-Zirkler test of multivariate normality on (n, d) data."""
    raise NotImplementedError


def fit_gaussian(x: np.ndarray, y: np.ndarray, *, masses: tuple[float, ...] = (0.5, 0.9, 0.99)) -> GaussianFit:
    """Fit a bivariate normal to complete rows of (x, y)."""
    raise NotImplementedError
