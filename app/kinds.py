"""Column kinds: which columns of a table are numeric and which categorical, and why.

Detection (``detect``):

* a text or true/false column kept by :mod:`pairlens.ingest` (at most
  ``config.CATEGORICAL_MAX_LEVELS`` levels) is categorical: "text with k levels";
* a numeric column that looks like a class code (the one rule of
  :func:`pairlens.core.verdict.class_code_levels`: whole numbers, at most
  ``config.CLASS_CODE_MAX_LEVELS`` values, two values or at least
  ``config.CLASS_CODE_MIN_ROWS`` rows) is categorical: "k whole-number codes";
* every other numeric column is numeric.

Overrides (``--categorical COL,...`` and ``--numeric COL,...`` on the command line, the same
names in the API, the dashboard form and :func:`pairlens.analyze`): a numeric column with at
most ``config.CATEGORICAL_OVERRIDE_MAX_LEVELS`` distinct values may be made categorical, a
class code may be kept numeric; a text column cannot become a number.

:func:`settle` writes the outcome into the settings (``categorical`` then lists every
categorical column of the run), so everything downstream of the entry points (engine, tiles,
pair views, report) reads the kinds from the settings alone.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from . import config
from .core.verdict import class_code_levels
from .errors import SettingsError

__all__ = ["ColumnKind", "detect", "resolve", "settle", "level_names", "levels_of"]


@dataclass(frozen=True)
class ColumnKind:
    name: str
    kind: str                 # "numeric" | "categorical"
    reason: str               # why, in a few words
    levels: int = 0           # distinct values (categorical columns)
    overridden: bool = False  # set by --categorical / --numeric


def _number_label(v: float) -> str:
    return str(int(v)) if float(v).is_integer() else f"{v:g}"


def level_names(table, name: str) -> list[str]:
    """Display names of the levels of column ``name`` in code order (text levels, or the numbers)."""
    labels = table.levels(name)
    if labels:
        return list(labels)
    j = table.columns.index(name)
    v = table.data[:, j]
    return [_number_label(x) for x in np.unique(v[~np.isnan(v)])]


def detect(table) -> dict[str, ColumnKind]:
    """Every used column's detected kind with its reason, in table order."""
    info = {c.name: c for c in table.info}
    out: dict[str, ColumnKind] = {}
    for j, name in enumerate(table.columns):
        c = info.get(name)
        if c is not None and c.kind == "categorical":
            out[name] = ColumnKind(name, "categorical", f"text with {c.distinct} levels", c.distinct)
            continue
        v = table.data[:, j]
        k = class_code_levels(v[~np.isnan(v)])
        if k:
            out[name] = ColumnKind(name, "categorical", f"{k} whole-number codes (a class code)", k)
        else:
            out[name] = ColumnKind(name, "numeric", "numbers")
    return out


def resolve(table, categorical=(), numeric=()) -> dict[str, ColumnKind]:
    """Detected kinds with the user's overrides applied; SettingsError with the fix on a bad name."""
    kinds = detect(table)
    for option, names in (("--categorical", categorical), ("--numeric", numeric)):
        unknown = [n for n in names if n not in kinds]
        if unknown:
            shown = ", ".join(list(kinds)[:20]) + (" ..." if len(kinds) > 20 else "")
            raise SettingsError(f"{option}: unknown column(s) {', '.join(map(repr, unknown))}; columns are: {shown}")
    both = sorted(set(categorical) & set(numeric))
    if both:
        raise SettingsError(f"column(s) {', '.join(map(repr, both))} named both categorical and numeric; "
                            "keep each in one list")
    for name in numeric:
        k = kinds[name]
        if k.kind == "categorical" and "text" in k.reason:
            raise SettingsError(f"--numeric: column {name!r} holds text ({k.levels} levels) and cannot be analysed "
                                "as a number; recode it as numbers in the file, or leave it categorical")
        kinds[name] = ColumnKind(name, "numeric", "numbers (--numeric)", overridden=k.kind != "numeric")
    for name in categorical:
        k = kinds[name]
        if k.kind == "categorical":
            continue
        j = table.columns.index(name)
        v = table.data[:, j]
        distinct = int(np.unique(v[~np.isnan(v)]).size)
        if distinct > config.CATEGORICAL_OVERRIDE_MAX_LEVELS:
            raise SettingsError(f"--categorical: column {name!r} has {distinct} distinct values; a categorical "
                                f"column may have at most {config.CATEGORICAL_OVERRIDE_MAX_LEVELS} levels "
                                "(bin it first, or raise PAIRLENS_CATEGORICAL_MAX_LEVELS)")
        kinds[name] = ColumnKind(name, "categorical", f"{distinct} values (--categorical)", distinct, overridden=True)
    return kinds


def _check_named_columns_are_analysed(table, settings) -> None:
    """A column the settings name but the reader left out (dates, free text, empty, too many levels)
    fails with the reader's reason, not as an unknown column."""
    left_out = {c.name: c for c in getattr(table, "info", ()) if not c.used}
    named = [*(settings.columns or ()), *settings.given, *(m for _, members in settings.groups for m in members),
             *settings.categorical, *settings.numeric]
    bad = [n for n in dict.fromkeys(named) if n in left_out]
    if not bad:
        return
    listed = ", ".join(f"{n!r} ({left_out[n].reason})" for n in bad[:5]) + (" ..." if len(bad) > 5 else "")
    fix = "leave it out of the options" if len(bad) == 1 else "leave them out of the options"
    dated = [n for n in bad if left_out[n].kind == "datetime"]
    if dated:
        fix += (f"; to put the rows in time order by a date column, use --ordered {dated[0]} "
                "(command line; ordered= in the library)")
    raise SettingsError(f"{listed} {'was' if len(bad) == 1 else 'were'} left out when the file was read "
                        f"and cannot be analysed: {fix}")


def settle(table, settings):
    """``settings`` with ``categorical`` listing every categorical column of the run (idempotent)."""
    _check_named_columns_are_analysed(table, settings)
    kinds = resolve(table, settings.categorical, settings.numeric)
    grouped = {m for _, members in settings.groups for m in members}
    selected = set(kinds) if settings.columns is None else set(settings.columns) | grouped
    # a detected class code inside a column group stays a number (groups are numeric); asked for, it errs
    categorical = tuple(n for n, k in kinds.items() if k.kind == "categorical" and n in selected
                        and (n not in grouped or n in settings.categorical))
    return replace(settings, categorical=categorical)


def levels_of(table, settings) -> dict[str, list[str]]:
    """Level names of every categorical column of the (settled) run, for pair views and reports."""
    return {name: level_names(table, name) for name in settings.categorical if name in table.columns}
