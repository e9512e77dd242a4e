"""Shared pieces of inference: multiplicity adjustment, Fisher-z intervals, per-pair seeds."""

from __future__ import annotations

import zlib

import numpy as np

__all__ = ["adjust_pvalues", "fisher_z_interval", "pair_seed"]


def adjust_pvalues(p_values, method: str = "bh") -> np.ndarray:
    """Adjust p-values for multiple testing; NaN entries stay NaN and do not count.

    method: "bh" (Benjamini-Hochberg step-up), "holm" (Holm step-down) or "none".
    """
    raise NotImplementedError


def fisher_z_interval(estimate: float, se_z: float, confidence: float) -> tuple[float, float]:
    """Interval tanh(atanh(estimate) -/+ z_{(1+c)/2} * se_z)."""
    raise NotImplementedError


def pair_seed(seed: int, x_name: str, y_name: str, measure: str) -> np.random.SeedSequence:
    """Seed sequence for one pair and measure, independent of tiling and executor."""
    key = f"{x_name}\x1f{y_name}\x1f{measure}".encode("utf-8")
    return np.random.SeedSequence([int(seed) & 0xFFFFFFFF, zlib.crc32(key), len(key)])
