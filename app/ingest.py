"""Bytes or a path in, a typed table out; one error type whose message a user can act on."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["IngestError", "ColumnInfo", "Table", "load_table", "load_bytes"]


class IngestError(ValueError):
    """A file pairlens cannot use. ``str(err)`` is one line naming the file, the problem and a fix."""


@dataclass(frozen=True)
class ColumnInfo:
    name: str            # unique name used everywhere in pairlens
    original: str        # name as written in the file
    kind: str            # "numeric" | "categorical" | "text" | "datetime" | "empty"
    used: bool           # feeds the measures
    reason: str          # why it was left out ("" when used)
    missing: int         # missing cells (inf counted as missing for numeric)
    infinite: int        # +/-inf cells turned into missing
    distinct: int
    minimum: float = float("nan")
    median: float = float("nan")
    maximum: float = float("nan")


@dataclass
class Table:
    name: str                     # file name as given (display only, never a path)
    sha256: str                   # of the file's bytes
    n_rows: int
    columns: list[str]            # numeric columns used, unique names, file order
    data: np.ndarray              # (n_rows, len(columns)) float64, NaN = missing
    info: list[ColumnInfo]        # every column of the file, in file order
    notes: list[str] = field(default_factory=list)   # e.g. renamed duplicates, inf counted missing
    preview: list[list[str]] = field(default_factory=list)  # first rows, all columns, as text
    preview_header: list[str] = field(default_factory=list)

    @property
    def excluded(self) -> list[tuple[str, str]]:
        return [(c.name, c.reason) for c in self.info if not c.used]


def load_bytes(content: bytes, name: str, *, sheet: str | None = None) -> Table:
    """Parse an uploaded file's bytes; ``name`` only picks the format and labels messages."""
    raise NotImplementedError


def load_table(path: str | Path, *, sheet: str | None = None) -> Table:
    """Read a file from disk (.csv .tsv .txt .csv.gz .xlsx .parquet)."""
    raise NotImplementedError
