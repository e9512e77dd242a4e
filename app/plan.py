"""Analysis settings and planning: validated options, the variables of a run, and which rows a pair uses.

Everything here is plain data and NumPy. The engine (:mod:`pairlens.engine`),
the tiles (:mod:`pairlens.tiles`) and the pair-detail service
(:mod:`pairlens.pairs`) all take a pair's rows from :func:`pair_rows`, so a
pair uses the same rows on every face.
"""

from __future__ import annotations

import math
import shlex
from dataclasses import asdict, dataclass
from typing import Sequence

import numpy as np

from . import config
from .core.registry import MEASURES, parse_tests
from .errors import SettingsError

__all__ = ["AnalysisSettings", "Variable", "plan_variables", "pair_indices", "variable_values", "observed",
           "complete_rows", "PairRows", "pair_rows", "reproduce_command"]


def _parse_tests(tests) -> tuple[tuple[str, str], ...]:
    try:
        return parse_tests(tests)
    except (ValueError, TypeError) as exc:
        raise SettingsError(str(exc)) from None


def _name_list(value, option: str) -> tuple[str, ...]:
    """Column names from "a,b", a list, or None; each once, in the order given."""
    if not value:
        return ()
    if isinstance(value, str):
        value = value.split(",")
    if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
        raise SettingsError(f"{option} must be a list of column names, e.g. [\"variety\", \"site\"]")
    return tuple(dict.fromkeys(v.strip() for v in value if v.strip()))
def _parse_given(given) -> tuple[str, ...]:
    """--given COL[,COL...]: the columns held fixed, as a tuple of names."""
    if not given:
        return ()
    if isinstance(given, str):
        given = given.split(",")
    if not isinstance(given, (list, tuple)) or not all(isinstance(c, str) for c in given):
        raise SettingsError("given must be a list of column names (or one comma-separated string)")
    return tuple(c.strip() for c in given if c.strip())


def _parse_ordered(ordered, difference) -> str | None:
    """--ordered [COL]: None (not ordered), "" (file order) or a column name; --difference implies it."""
    if ordered is None or ordered is False:
        return "" if difference else None
    if ordered is True:
        return ""
    if not isinstance(ordered, str):
        raise SettingsError("ordered must be true (rows in file order) or the name of the column to sort by")
    return ordered.strip()


@dataclass(frozen=True)
class AnalysisSettings:
    measures: tuple[str, ...] = config.DEFAULT_MEASURES
    columns: tuple[str, ...] | None = None
    groups: tuple[tuple[str, tuple[str, ...]], ...] = ()
    missing: str = config.DEFAULT_MISSING
    adjust: str = config.DEFAULT_ADJUST
    confidence: float = config.DEFAULT_CONFIDENCE
    permutations: int = 0
    seed: int = config.DEFAULT_SEED
    tests: tuple[tuple[str, str], ...] = ()     # (measure, method) chosen with --test MEASURE=METHOD
    ordered: str | None = None  # rows in time order: None = no, "" = file order, else the column to sort by
    difference: bool = False    # analyse first differences (in time order; implies ordered)
    # Column kinds (pairlens.kinds): the categorical columns of the run and the columns kept
    # numeric on request. Before pairlens.kinds.settle they hold the user's overrides; after it
    # ``categorical`` is every categorical column of the run (detected or asked for).
    categorical: tuple[str, ...] = ()
    numeric: tuple[str, ...] = ()

    @property
    def run_measures(self) -> tuple[str, ...]:
        """The measures of the run: ``measures``, plus config.DEFAULT_CATEGORICAL_MEASURES that are not
        listed when the run has categorical columns (each pair then takes those that apply to its kinds)."""
        if not self.categorical:
            return self.measures
        return self.measures + tuple(m for m in config.DEFAULT_CATEGORICAL_MEASURES if m not in self.measures)
    given: tuple[str, ...] = ()  # --given: columns held fixed; the partial variants of the measures are added

    @classmethod
    def from_options(cls, *, measures=None, columns=None, groups=None, missing=None, adjust=None,
                     confidence=None, permutations=None, seed=None, tests=None, ordered=None,
                     difference=None, categorical=None, numeric=None, given=None) -> "AnalysisSettings":
        """Build validated settings from loosely typed options (CLI strings, JSON values)."""
        if isinstance(measures, str):
            measures = [m for m in measures.split(",") if m.strip()]
        measures = tuple(m.strip().lower() for m in (measures or config.DEFAULT_MEASURES))
        if isinstance(columns, str):
            columns = [c for c in columns.split(",") if c.strip()]
        columns = tuple(c.strip() for c in columns) if columns else None
        group_items: list[tuple[str, tuple[str, ...]]] = []
        if isinstance(groups, dict):
            groups = list(groups.items())
        for item in groups or ():
            if isinstance(item, str):
                name, sep, members = item.partition("=")
                if not sep:
                    raise SettingsError(f"group {item!r} must look like NAME=COL,COL")
                item = (name, [m for m in members.split(",") if m.strip()])
            name, members = item
            if isinstance(members, str):
                members = [m for m in members.split(",") if m.strip()]
            group_items.append((str(name).strip(), tuple(str(m).strip() for m in members)))
        settings = cls(
            measures=measures,
            columns=columns,
            groups=tuple(group_items),
            missing=(missing or config.DEFAULT_MISSING).lower(),
            adjust=(adjust or config.DEFAULT_ADJUST).lower(),
            confidence=float(config.DEFAULT_CONFIDENCE if confidence is None else confidence),
            permutations=int(permutations or 0),
            seed=int(config.DEFAULT_SEED if seed is None else seed),
            tests=_parse_tests(tests),
            ordered=_parse_ordered(ordered, difference),
            difference=bool(difference),
            categorical=_name_list(categorical, "categorical"),
            numeric=_name_list(numeric, "numeric"),
            given=_parse_given(given),
        )
        settings.check()
        return settings

    def check(self) -> None:
        if not self.measures:
            raise SettingsError("choose at least one measure")
        for m in self.measures:
            if m not in MEASURES:
                raise SettingsError(f"unknown measure {m!r}; choose from {', '.join(MEASURES)}")
        if len(set(self.measures)) != len(self.measures):
            raise SettingsError("a measure is listed twice")
        if self.missing not in config.MISSING_POLICIES:
            raise SettingsError(f"missing must be one of {', '.join(config.MISSING_POLICIES)}, not {self.missing!r}")
        if self.adjust not in config.ADJUST_METHODS:
            raise SettingsError(f"adjust must be one of {', '.join(config.ADJUST_METHODS)}, not {self.adjust!r}")
        if not (0.5 <= self.confidence < 1.0) or not math.isfinite(self.confidence):
            raise SettingsError(f"confidence must be at least 0.5 and below 1, e.g. 0.95; got {self.confidence}")
        if not (0 <= self.permutations <= config.MAX_PERMUTATIONS):
            raise SettingsError(f"permutations must be between 0 and {config.MAX_PERMUTATIONS}; got {self.permutations}")
        if not (0 <= self.seed < 2**63):
            raise SettingsError(f"seed must be a non-negative integer; got {self.seed}")
        both = sorted(set(self.categorical) & set(self.numeric))
        if both:
            raise SettingsError(f"column(s) {', '.join(map(repr, both))} named both categorical and numeric; "
                                "keep each in one list")
        if len(self.given) > config.GIVEN_MAX_COLUMNS:
            raise SettingsError(f"given lists {len(self.given)} columns; at most {config.GIVEN_MAX_COLUMNS}")
        if len(set(self.given)) != len(self.given):
            raise SettingsError("given lists a column twice")
        for name, members in self.groups:
            if not name:
                raise SettingsError("a group needs a name: NAME=COL,COL")
            if not members:
                raise SettingsError(f"group {name!r} lists no columns")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["measures"] = list(self.measures)
        d["columns"] = list(self.columns) if self.columns is not None else None
        d["groups"] = {name: list(members) for name, members in self.groups}
        d["tests"] = dict(self.tests)
        d["categorical"] = list(self.categorical)
        d["numeric"] = list(self.numeric)
        d["given"] = list(self.given)
        return d

    def table_measures(self) -> tuple[str, ...]:
        """The measures of the pair table: those of the run (``run_measures``), then (with --given) the
        conditional variants of the chosen ones."""
        from .core.registry import partial_of

        return self.run_measures + partial_of(self.measures) if self.given else self.run_measures

    def test_for(self, measure: str) -> str:
        """The method chosen for ``measure`` with --test, or "" (its default rule)."""
        return dict(self.tests).get(measure, "")

    def budget_permutations(self) -> int:
        """Resamples per pair for the work estimate: --permutations, or under --ordered the block
        relabellings when a measure uses a block permutation test."""
        if self.ordered is not None and any(MEASURES[m].serial_resamples for m in self.measures):
            return self.permutations or config.SERIAL_PERMUTATIONS
        return self.permutations

    def permutations_for(self, measure: str) -> int:
        """Resamples ``measure`` runs with: --permutations, or the default B under --test MEASURE=permutation,
        or none when another method was chosen for it."""
        test = self.test_for(measure)
        if test == "permutation":
            return self.permutations or config.DEFAULT_TEST_PERMUTATIONS
        return 0 if test else self.permutations

    @classmethod
    def from_dict(cls, d: dict) -> "AnalysisSettings":
        return cls.from_options(**{k: d.get(k) for k in (
            "measures", "columns", "groups", "missing", "adjust", "confidence", "permutations", "seed",
            "tests", "ordered", "difference", "categorical", "numeric", "given")})

    def cli_arguments(self) -> list[str]:
        """The options that reproduce these settings on the command line."""
        args = ["--measures", ",".join(self.measures)]
        if self.columns is not None:
            args += ["--columns", ",".join(self.columns)]
        for name, members in self.groups:
            args += ["--group", f"{name}={','.join(members)}"]
        args += ["--missing", self.missing, "--adjust", self.adjust,
                 "--confidence", repr(self.confidence), "--permutations", str(self.permutations),
                 "--seed", str(self.seed)]
        for measure, method in self.tests:
            args += ["--test", f"{measure}={method}"]
        if self.categorical:
            args += ["--categorical", ",".join(self.categorical)]
        if self.numeric:
            args += ["--numeric", ",".join(self.numeric)]
        if self.given:
            args += ["--given", ",".join(self.given)]
        if self.difference:
            args += ["--difference"]
        if self.ordered:
            args += ["--ordered", self.ordered]
        elif self.ordered is not None and not self.difference:
            args += ["--ordered"]
        return args

    def reproduce_command(self, data: str, output: str = "report.html") -> str:
        """The ``pairlens report`` command line that reproduces a report of these settings on ``data``."""
        return reproduce_command(data, output, self)


def reproduce_command(data: str, output: str, settings: AnalysisSettings) -> str:
    """The one way every face writes the command that reproduces a report (shell-quoted)."""
    return "pairlens report " + " ".join(shlex.quote(a) for a in [data, "-o", output, *settings.cli_arguments()])


@dataclass(frozen=True)
class Variable:
    """A single column or a group of columns, analysed as one variable."""

    name: str
    columns: tuple[int, ...]
    is_group: bool = False
    kind: str = "numeric"       # "numeric" or "categorical" (pairlens.kinds)



# Planning -----------------------------------------------------------------

def plan_variables(names: Sequence[str], settings: AnalysisSettings) -> list[Variable]:
    """Variables in input column order; a group takes the place of its first column."""
    position = {n: i for i, n in enumerate(names)}
    selected = set(names) if settings.columns is None else set(settings.columns)
    # the columns held fixed are not analysed as pairs
    selected -= set(settings.given)
    unknown = [c for c in (settings.columns or ()) + settings.given if c not in position]
    if unknown:
        raise SettingsError(f"unknown column(s) {', '.join(map(repr, unknown))}; columns are: "
                            f"{', '.join(names[:20])}{' ...' if len(names) > 20 else ''}")
    group_of: dict[str, str] = {}
    members_of: dict[str, tuple[int, ...]] = {}
    for gname, members in settings.groups:
        if gname in position:
            raise SettingsError(f"group name {gname!r} is already a column name; pick another")
        if gname in members_of:
            raise SettingsError(f"group {gname!r} is defined twice")
        bad = [m for m in members if m not in position]
        if bad:
            raise SettingsError(f"group {gname!r}: unknown column(s) {', '.join(map(repr, bad))}")
        if len(set(members)) != len(members):
            raise SettingsError(f"group {gname!r} lists a column twice")
        cat = [m for m in members if m in settings.categorical]
        if cat:
            raise SettingsError(f"group {gname!r}: column(s) {', '.join(map(repr, cat))} are categorical; "
                                "groups take numeric columns only")
        for m in members:
            if m in settings.given:
                raise SettingsError(f"column {m!r} is both given (held fixed) and in group {gname!r}")
            if m in group_of:
                raise SettingsError(f"column {m!r} is in both group {group_of[m]!r} and {gname!r}")
            group_of[m] = gname
        members_of[gname] = tuple(sorted(position[m] for m in members))
    variables: list[Variable] = []
    emitted: set[str] = set()
    for name in names:
        if name in group_of:
            g = group_of[name]
            if g not in emitted:
                emitted.add(g)
                cols = members_of[g]
                variables.append(Variable(g, cols, is_group=True))
        elif name in selected:
            kind = "categorical" if name in settings.categorical else "numeric"
            variables.append(Variable(name, (position[name],), kind=kind))
    if len(variables) < 2:
        raise SettingsError("an analysis needs at least 2 variables (columns or groups); "
                            f"got {len(variables)}")
    return variables


def pair_indices(variables: Sequence[Variable]) -> list[tuple[int, int]]:
    return [(i, j) for i in range(len(variables)) for j in range(i + 1, len(variables))]


def variable_values(data: np.ndarray, var: Variable) -> np.ndarray:
    if var.is_group:
        return data[:, list(var.columns)]
    return data[:, var.columns[0]]


def observed(values: np.ndarray) -> np.ndarray:
    return ~np.isnan(values) if values.ndim == 1 else ~np.isnan(values).any(axis=1)



def complete_rows(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings) -> np.ndarray:
    """Rows observed in every variable of the analysis: the rows a complete-case run used."""
    mask = np.ones(data.shape[0], dtype=bool)
    for var in plan_variables(list(names), settings):
        mask &= observed(variable_values(data, var))
    return mask


def analysis_row_mask(data: np.ndarray, names: Sequence[str], settings: AnalysisSettings) -> np.ndarray | None:
    """The rows every pair is restricted to: complete cases under ``missing="complete"``, else None."""
    return complete_rows(data, names, settings) if settings.missing == "complete" else None


@dataclass(frozen=True)
class PairRows:
    """The rows one pair of single columns uses, and their values.

    ``rows`` are row numbers of the table; ``x`` and ``y`` the values there.
    Under ``missing="pairwise"`` they are the rows where both values are
    present; under ``missing="complete"`` only those also complete in every
    other variable of the analysis.
    """

    x_name: str
    y_name: str
    rows: np.ndarray
    x: np.ndarray
    y: np.ndarray
    missing: str

    @property
    def n(self) -> int:
        return int(self.rows.size)

    def describe(self) -> str:
        """One sentence on which rows these are, the same on every face."""
        if self.missing == "complete":
            return (f"The measures, the Gaussian fit and the verdict use the {self.n} rows complete in every "
                    "analysed variable (missing = complete).")
        return (f"The measures, the Gaussian fit and the verdict use the {self.n} rows where both values "
                "are present.")


def pair_rows(data: np.ndarray, names: Sequence[str], x: str, y: str, settings: AnalysisSettings,
              row_mask: np.ndarray | None = None) -> PairRows:
    """The rows the pair (x, y) of single columns uses under ``settings.missing``.

    ``row_mask`` is the analysis's complete-case mask when the caller already has
    it (:func:`analysis_row_mask`); it is computed here otherwise.
    """
    position = {n: i for i, n in enumerate(names)}
    for col in (x, y):
        if col not in position:
            raise SettingsError(f"unknown column {col!r}; columns are: {', '.join(list(names)[:20])}")
    if x == y:
        raise SettingsError("x and y must be different columns")
    xv_all, yv_all = data[:, position[x]], data[:, position[y]]
    keep = ~np.isnan(xv_all) & ~np.isnan(yv_all)
    if row_mask is None:
        row_mask = analysis_row_mask(data, names, settings)
    if row_mask is not None:
        keep &= row_mask
    return PairRows(x, y, np.flatnonzero(keep), xv_all[keep], yv_all[keep], settings.missing)
