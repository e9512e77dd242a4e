"""The pair table: one row per pair, measure and direction, as the engine returns it."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .core.registry import get_measure
from .export import PAIR_FIELDS
from .plan import AnalysisSettings

__all__ = ["PairRow", "PairTable"]


@dataclass
class PairRow:
    x: str
    y: str
    measure: str
    estimate: float
    ci_low: float
    ci_high: float
    p_value: float
    q_value: float
    n: int
    note: str
    method: str = ""

    def record(self) -> dict:
        return {f: getattr(self, f) for f in PAIR_FIELDS}


@dataclass
class PairTable:
    variables: list[str]
    measures: tuple[str, ...]
    settings: AnalysisSettings
    rows: list[PairRow] = field(default_factory=list)
    seconds: float = 0.0
    # (x, y) in variable order -> verdict label, for pairs of single columns (run_analysis(verdicts=True))
    verdicts: dict[tuple[str, str], str] = field(default_factory=dict)
    # per-column serial dependence (pairlens.core.serial.SerialCheck), rows in analysis order
    serial: object = None
    # --given: pairlens.given.GivenColumns (the columns held fixed), None otherwise
    given: object = None

    def records(self) -> list[dict]:
        return [r.record() for r in self.rows]

    def lookup(self, x: str, y: str) -> dict[str, PairRow]:
        """Rows of one pair keyed by measure; for asymmetric measures the x -> y row."""
        out: dict[str, PairRow] = {}
        for r in self.rows:
            if r.x == x and r.y == y:
                out[r.measure] = r
            elif r.x == y and r.y == x and get_measure(r.measure).symmetric and r.measure not in out:
                out[r.measure] = r
        return out

    def matrix(self, measure: str, value: str = "estimate") -> np.ndarray:
        """p x p array of one field; symmetric measures mirrored, diagonal NaN."""
        index = {v: i for i, v in enumerate(self.variables)}
        k = len(self.variables)
        out = np.full((k, k), np.nan)
        symmetric = get_measure(measure).symmetric
        for r in self.rows:
            if r.measure != measure:
                continue
            i, j = index[r.x], index[r.y]
            out[i, j] = getattr(r, value)
            if symmetric:
                out[j, i] = out[i, j]
        return out

