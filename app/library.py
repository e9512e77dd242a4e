"""The library face of pairlens for pandas and notebook users.

``import pairlens`` gives :func:`read`, :func:`analyze` and the two result
types: :class:`Analysis` (the pair table of a whole table) and :class:`PairView`
(everything about one pair). Both draw themselves inline in a notebook with
plain HTML and SVG, so the output works offline and in saved notebooks.

The option names are those of the command line and the JSON API
(docs/contracts.md): ``measures``, ``columns``, ``groups``, ``missing``,
``adjust``, ``confidence``, ``permutations``, ``seed``, ``workers``, ``cluster``.
"""

from __future__ import annotations

import html
import json
import math
import os
from collections import OrderedDict
from pathlib import Path
from typing import TYPE_CHECKING, Any

from . import config

if TYPE_CHECKING:  # pragma: no cover - typing only
    import pandas as pd

    from .pairtable import PairTable
    from .ingest import Table

__all__ = ["read", "analyze", "Analysis", "PairView"]

# Tables read by read(), by fingerprint, so analyze() on an unchanged DataFrame keeps the
# file's identity (name, SHA-256, columns left out) in reports. Bounded: a notebook may
# read many files.
_READ_TABLES: "OrderedDict[str, Table]" = OrderedDict()
_READ_TABLES_KEPT = 4
_ATTRS_KEY = "pairlens"
_TOP_PAIRS_SHOWN = 10
_SCATTER_POINTS = 2000
_MAP_NUMBERS_UP_TO = 8
_CAUTION = ("Association is not causation; check outliers and missing data before relying on a result. "
            "q-values below {alpha} are marked significant.")


def _remember(table: "Table") -> None:
    _READ_TABLES[table.sha256] = table
    _READ_TABLES.move_to_end(table.sha256)
    while len(_READ_TABLES) > _READ_TABLES_KEPT:
        _READ_TABLES.popitem(last=False)


def _frame(table: "Table") -> "pd.DataFrame":
    import numpy as np
    import pandas as pd

    df = pd.DataFrame(table.data, columns=list(table.columns), copy=False)
    for name in table.columns:
        labels = table.levels(name)
        if labels:  # a categorical text column: its level names, not the codes (analyze() reads them back)
            df[name] = pd.Categorical.from_codes(
                np.nan_to_num(df[name].to_numpy(), nan=-1).astype(int), categories=list(labels))
    df.attrs[_ATTRS_KEY] = {"name": table.name, "sha256": table.sha256,
                            "left_out": [list(item) for item in table.excluded], "notes": list(table.notes)}
    return df


def _codes_frame(df: "pd.DataFrame") -> "pd.DataFrame":
    """``df`` with each categorical (pandas) column as its float level codes, NaN for missing: as read() made it."""
    import numpy as np
    import pandas as pd

    out = df.copy(deep=False)
    for name in df.columns:
        if isinstance(df[name].dtype, pd.CategoricalDtype):
            codes = df[name].cat.codes.to_numpy().astype(np.float64)
            codes[codes < 0] = np.nan
            out[name] = codes
        elif not pd.api.types.is_numeric_dtype(df[name].dtype):
            out[name] = np.nan  # text: never equal to a read() table's numbers, so the file reader decides
    return out


def _table_from_frame(df: "pd.DataFrame", name: str | None) -> "Table":
    """The :class:`~pairlens.ingest.Table` behind ``df``: the one read() made when unchanged, else a new one."""
    import numpy as np
    import pandas as pd

    from .errors import SettingsError
    from .ingest import load_bytes

    if not isinstance(df, pd.DataFrame):
        raise SettingsError(f"analyze() takes a pandas DataFrame, not {type(df).__name__}")
    meta = df.attrs.get(_ATTRS_KEY) or {}
    known = _READ_TABLES.get(meta.get("sha256", ""))
    if known is not None and [str(c) for c in df.columns] == list(known.columns):
        values = _codes_frame(df).to_numpy(dtype=np.float64, na_value=np.nan)
        if values.shape == known.data.shape and np.array_equal(values, known.data, equal_nan=True):
            return known
    # Anything else goes through the file reader (as Parquet, which keeps the dtypes), so a
    # DataFrame is typed by the same rules as an upload: text columns of numbers, categories
    # and columns left out with a reason.
    frame = df.copy(deep=False)
    frame.columns = [str(c) for c in frame.columns]
    if len(set(frame.columns)) != len(frame.columns):
        raise SettingsError("the DataFrame has two columns with the same name; rename one")
    stem = name or meta.get("name") or "DataFrame"
    content = frame.to_parquet(index=False)
    return load_bytes(content, f"{Path(stem).stem}.parquet")


def _progress_bar(enabled: bool):
    """A tqdm bar (the notebook widget where ipywidgets is installed) fed by the engine's callback."""
    if not enabled:
        return None, lambda: None
    from tqdm.auto import tqdm

    steps = 1000
    # delay: analyses that finish within a second show no bar at all.
    bar = tqdm(total=steps, desc="pairlens", unit="‰", delay=1.0, leave=False,
               bar_format="{desc}: {percentage:3.0f}%|{bar}| {elapsed} elapsed, {remaining} left")

    def update(fraction: float, seconds_left: float) -> None:
        target = min(steps, max(0, int(round(fraction * steps))))
        if target > bar.n:
            bar.update(target - bar.n)

    return update, bar.close


def read(path: str | os.PathLike, *, sheet: str | None = None) -> "pd.DataFrame":
    """Read a table file the way every face of pairlens reads it.

    Parameters
    ----------
    path : str or path-like
        A .csv, .tsv, .txt (delimiter and encoding sniffed), .csv.gz, .xlsx or .parquet file.
    sheet : str, optional
        Worksheet of an .xlsx file (default: the first).

    Returns
    -------
    pandas.DataFrame
        The numeric columns pairlens analyses, as float64 with NaN for missing cells, in file
        order. ``df.attrs["pairlens"]`` holds the file name, its SHA-256, the columns left out
        with the reason and the reader's notes.

    Raises
    ------
    pairlens.ingest.IngestError
        The file cannot be used; the message names the file, the problem and a fix.

    Notes
    -----
    Missing-value markers (``NA``, ``n/a``, empty cells, ...) become NaN; infinite values are
    counted as missing. A column counts as numeric when at least 95% of its non-missing cells
    are numbers (``app/config.py``).

    Examples
    --------
    The bundled demo is an invented vineyard scenario made by a seeded script:

    >>> import pairlens
    >>> df = pairlens.read(pairlens.demo_path())
    >>> df.shape
    (960, 22)
    >>> df.attrs["pairlens"]["left_out"][0][0]   # 40 block labels: too many levels to compare
    'block_id'
    """
    from .ingest import load_table

    table = load_table(path, sheet=sheet)
    _remember(table)
    return _frame(table)


def demo_path() -> Path:
    """Path of the bundled demo file: an invented vineyard scenario made by a seeded script.

    Examples
    --------
    >>> import pairlens
    >>> pairlens.demo_path().name
    'vineyard_blocks.csv'
    """
    return Path(config.DEMO_FILE)


def analyze(df: "pd.DataFrame", *, measures=None, columns=None, groups=None, missing=None, adjust=None,
            confidence=None, permutations=None, tests=None, seed=None, ordered=None, difference=None,
            given=None, workers: int | None = None,
            cluster: str | None = None, progress: bool = True, name: str | None = None,
            path: str = "auto", **options: Any) -> "Analysis":
    """Every measure for every pair of columns of ``df``.

    Parameters
    ----------
    df : pandas.DataFrame
        The table. Columns that are not numeric are left out with a reason, as in a file.
    measures : str or list of str, optional
        Measures from the registry (``pearson``, ``spearman``, ``kendall``, ``dcor``,
        ``dcor_bc``, ``xi``); default ``pearson, spearman, kendall, dcor``.
    columns : str or list of str, optional
        Columns to use (default: every numeric column).
    groups : dict or list, optional
        Several columns analysed as one variable, e.g. ``{"soil": ["moisture_10cm", "moisture_40cm"]}``.
    missing : {"pairwise", "complete"}, optional
        Rows each pair uses (default ``pairwise``).
    adjust : {"bh", "holm", "none"}, optional
        Multiple-testing adjustment into q-values within each measure (default ``bh``).
    confidence : float, optional
        Level of the intervals (default 0.95).
    permutations : int, optional
        Permutation resamples for the tests that use them (default 0: the default tests).
    tests : dict or list of str, optional
        A measure's p-value method, e.g. ``{"pearson": "t"}`` or ``["pearson=t"]`` (default: each
        measure's default test; the names each measure allows are in its registry entry).
    seed : int, optional
        Random seed; results do not depend on ``workers`` or ``cluster``.
    ordered : bool or str, optional
        The rows are in time order: ``True`` as in ``df``, or the name of a numeric or date/time
        column to sort by (then not analysed; rows without a time left out, with a note). Tests
        then allow for serial dependence (``--ordered`` of the command line);
        ``analysis.serial_note`` says what the serial-dependence check found.
    difference : bool, optional
        Analyse first differences in time order (implies ``ordered``).
    given : str or list of str, optional
        Columns held fixed (``--given`` of the command line): the pair table gains
        ``partial_pearson``, ``partial_spearman`` and ``partial_dcor`` rows (for the chosen
        ``pearson``, ``spearman`` and ``dcor``/``dcor_bc``) given these columns, with q-values
        adjusted within each of them; the given columns are not paired.
    workers : int, optional
        Local worker processes (default: all cores); 1 runs in this process.
    cluster : str, optional
        Address of a Dask scheduler to run on.
    progress : bool
        Show a progress bar (tqdm) when the analysis runs longer than a second.
    name : str, optional
        Name of the data in reports (default: the file name from :func:`read`, else
        ``DataFrame``).
    path : {"auto", "matrix", "pairs"}
        ``"matrix"``: Pearson and Spearman of all pairs by matrix products; ``"pairs"``: one
        pair at a time; ``"auto"`` (default): the matrix path for wide tables when the chosen
        measures allow it (as ``pairlens pairs --path``). Both give the same numbers.
    **options
        Further analysis options of the command line and the JSON API, under the same names.

    Returns
    -------
    Analysis

    Raises
    ------
    pairlens.errors.SettingsError
        An option is not valid; the message says which and what is allowed.

    Notes
    -----
    The numbers are those of ``pairlens pairs`` on the same data and options: the same engine,
    the same per-pair seeds. p-values are adjusted within each measure over all its pairs.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> import pairlens
    >>> rng = np.random.default_rng(7)
    >>> x = rng.normal(size=300)
    >>> df = pd.DataFrame({"x": x, "y": 2 * x + rng.normal(size=300), "noise": rng.normal(size=300)})
    >>> result = pairlens.analyze(df, measures="pearson,spearman", workers=1, progress=False)
    >>> result.pairs[["x", "y", "measure"]].head(3).values.tolist()
    [['x', 'y', 'pearson'], ['x', 'y', 'spearman'], ['x', 'noise', 'pearson']]
    >>> import scipy.stats  # the estimate is scipy's Pearson r on the same columns
    >>> r = result.matrix("pearson").loc["x", "y"]
    >>> bool(abs(r - scipy.stats.pearsonr(df["x"], df["y"]).statistic) < 1e-12)
    True
    """
    from .engine import AnalysisSettings, run_analysis

    table = _table_from_frame(df, name)
    if ordered:
        from .ordering import with_time_column

        table = with_time_column(table, ordered)  # a date/time column: its times become the sort key
    settings = AnalysisSettings.from_options(measures=measures, columns=columns, groups=groups, missing=missing,
                                             adjust=adjust, confidence=confidence, permutations=permutations, tests=tests,
                                             seed=seed, ordered=ordered, difference=difference, given=given,
                                             **options)
    from .kinds import settle

    settings = settle(table, settings)  # column kinds: detected, or categorical=/numeric= (as --categorical)
    update, close = _progress_bar(progress)
    try:
        pair_table = run_analysis(table.data, table.columns, settings, workers=workers, cluster=cluster,
                                  progress=update if progress else None, path=path)
    finally:
        close()
    return Analysis(table, pair_table)


# ---------------------------------------------------------------------------
# inline HTML (no JavaScript, no network: it renders offline and in saved notebooks)
# ---------------------------------------------------------------------------

_SIGNED_LOW = (43, 92, 138)
_SIGNED_HIGH = (180, 71, 43)
_UNSIGNED_HIGH = (31, 78, 96)
_WHITE = (255, 255, 255)


def _blend(a: tuple, b: tuple, t: float) -> tuple[int, int, int]:
    return tuple(int(round(a[i] + (b[i] - a[i]) * t)) for i in range(3))


def _cell_colour(value: float, lower: float, upper: float, signed: bool) -> tuple[str, str]:
    """Background and text colour of a map cell, from the measure's range in the registry."""
    if value is None or not math.isfinite(value):
        return "#eeeeee", "#666666"
    if signed:
        bound = max(abs(lower), abs(upper)) or 1.0
        t = max(-1.0, min(1.0, value / bound))
        rgb = _blend(_WHITE, _SIGNED_HIGH if t > 0 else _SIGNED_LOW, abs(t))
        strength = abs(t)
    else:
        span = (upper - lower) or 1.0
        strength = max(0.0, min(1.0, (value - lower) / span))
        rgb = _blend(_WHITE, _UNSIGNED_HIGH, strength)
    return f"rgb{rgb}", "#ffffff" if strength > 0.55 else "#1f2a30"


def _num_text(value, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    return f"{value:.{digits}f}"


def _p_text(value) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    return "<0.001" if value < 0.001 else f"{value:.3f}"


_STYLE = ("<style>.pairlens-out table{border-collapse:collapse;font:12px system-ui,sans-serif;margin:0 18px 12px 0}"
          ".pairlens-out td,.pairlens-out th{padding:3px 6px;border:1px solid #ddd;text-align:right}"
          ".pairlens-out th{background:#f4f6f7;font-weight:600}"
          ".pairlens-out .maps{display:flex;flex-wrap:wrap;align-items:flex-start}"
          ".pairlens-out table.compact td{width:11px;height:11px;padding:0;font-size:9px;text-align:center}"
          ".pairlens-out table.compact th{padding:0 3px;font-size:10px;font-weight:400}"
          ".pairlens-out caption{font-weight:600;text-align:left;padding:2px 0}"
          ".pairlens-out p.note{font:12px system-ui,sans-serif;color:#555}</style>")


class Analysis:
    """The pair table of one table and the way to look into it.

    Made by :func:`analyze`. In a notebook it shows one map per measure and the top pairs.

    Attributes
    ----------
    pairs : pandas.DataFrame
        One row per pair per measure with the columns ``x, y, measure, estimate, ci_low,
        ci_high, p_value, q_value, n, note`` (docs/contracts.md), pairs in input column order.
    measures : tuple of str
    variables : list of str
        Columns and groups analysed, in input order.
    """

    def __init__(self, table: "Table", pair_table: "PairTable") -> None:
        import pandas as pd

        from .export import PAIR_FIELDS

        self._table = table
        self._pair_table = pair_table
        self.measures: tuple[str, ...] = tuple(pair_table.measures)
        self.variables: list[str] = list(pair_table.variables)
        self.pairs = pd.DataFrame(pair_table.records(), columns=list(PAIR_FIELDS))

    @property
    def serial_note(self) -> str:
        """What the serial-dependence check found ("" when nothing): many serially dependent columns
        without ``ordered``, trending columns with it."""
        check = self._pair_table.serial
        return check.message(self._pair_table.settings.ordered is not None) if check is not None else ""

    @property
    def settings(self) -> dict:
        """The analysis options, under the names of the command line and the API."""
        return self._pair_table.settings.to_dict()

    def matrix(self, measure: str, value: str = "estimate") -> "pd.DataFrame":
        """One measure as a labelled square DataFrame.

        Parameters
        ----------
        measure : str
            A measure of this analysis.
        value : {"estimate", "p_value", "q_value", "ci_low", "ci_high", "n"}
            The field shown.

        Returns
        -------
        pandas.DataFrame
            Rows and columns are the variables; the diagonal is NaN. Symmetric measures are
            mirrored; for the asymmetric ``xi`` the row variable predicts the column variable.

        Examples
        --------
        >>> import numpy as np, pandas as pd
        >>> import pairlens
        >>> rng = np.random.default_rng(3)
        >>> df = pd.DataFrame(rng.normal(size=(50, 3)), columns=["a", "b", "c"])
        >>> m = pairlens.analyze(df, measures="kendall", workers=1, progress=False).matrix("kendall")
        >>> list(m.index), bool(np.isnan(m.loc["a", "a"])), bool(m.loc["a", "b"] == m.loc["b", "a"])
        (['a', 'b', 'c'], True, True)
        """
        import pandas as pd

        from .errors import SettingsError

        if measure not in self.measures:
            raise SettingsError(f"measure {measure!r} is not in this analysis; it has {', '.join(self.measures)}")
        fields = ("estimate", "p_value", "q_value", "ci_low", "ci_high", "n")
        if value not in fields:
            raise SettingsError(f"value must be one of {', '.join(fields)}, not {value!r}")
        grid = self._pair_table.matrix(measure, value)
        return pd.DataFrame(grid, index=list(self.variables), columns=list(self.variables))

    def inspect(self, x: str, y: str) -> "PairView":
        """Everything about one pair: every measure, the Gaussian fit, the verdict.

        The measures and q-values are those of this analysis; the shape is that of
        ``pairlens inspect --json`` (docs/contracts.md).
        """
        from .pairs import pair_detail

        from .kinds import levels_of

        detail = pair_detail(self._table.data, self._table.columns, x, y, self._pair_table.settings,
                             table=self._pair_table, include_points=True,
                             levels=levels_of(self._table, self._pair_table.settings))
        return PairView(detail)

    def to_json(self) -> str:
        """The pair table as JSON records (the ``pairlens pairs -o OUT.json`` shape; NaN as null)."""
        from .export import pairs_to_json

        return pairs_to_json(self._pair_table.records())

    def command(self, output: str = "REPORT.html") -> str:
        """The ``pairlens report`` command line that reproduces this analysis from the file."""
        return self._pair_table.settings.reproduce_command(self._table.name, output)

    def report(self, path: str | os.PathLike) -> Path:
        """Write the self-contained HTML report (the one of ``pairlens report``) to ``path``.

        Returns
        -------
        pathlib.Path
            The file written (whole or not at all: it is written beside and renamed).
        """
        from .report import build_report

        target = Path(path)
        html_text = build_report(self._table, self._pair_table, command=self.command(target.name))
        partial = target.with_name(target.name + ".partial")
        partial.write_text(html_text, encoding="utf-8")
        os.replace(partial, target)
        return target

    def top_pairs(self, measure: str | None = None, k: int = _TOP_PAIRS_SHOWN) -> "pd.DataFrame":
        """The ``k`` pairs with the smallest q-value of ``measure`` (default: dcor if run, else the first;
        :func:`pairlens.core.registry.map_order_measure`),
        one row per pair with every measure's estimate beside its q-value."""
        from .core.registry import map_order_measure

        measure = measure or map_order_measure(self.measures)
        rows = self.pairs[self.pairs["measure"] == measure].copy()
        rows["_strength"] = rows["estimate"].abs()
        ranked = rows.sort_values(["q_value", "_strength"], ascending=[True, False], na_position="last").head(k)
        wide = self.pairs.pivot_table(index=["x", "y"], columns="measure", values="estimate", sort=False)
        out = ranked[["x", "y", "q_value", "n"]].rename(columns={"q_value": f"q ({measure})"})
        out = out.join(wide[[m for m in self.measures if m in wide.columns]], on=["x", "y"])
        return out.reset_index(drop=True)

    def _map_html(self, measure: str) -> str:
        from .core.registry import get_measure

        entry = get_measure(measure)
        est = self._pair_table.matrix(measure, "estimate")
        q = self._pair_table.matrix(measure, "q_value")
        names = [html.escape(v) for v in self.variables]
        # Beyond a handful of variables the numbers would not fit side by side: the cells
        # become plain colour squares, the value and q-value in their tooltip.
        numbers = len(names) <= _MAP_NUMBERS_UP_TO
        head = "".join(f"<th title='{n}'>{n[:12] if numbers else i + 1}</th>" for i, n in enumerate(names))
        body = []
        for i, row_name in enumerate(names):
            cells = []
            for j in range(len(names)):
                value, q_value = float(est[i, j]), float(q[i, j])
                bg, ink = _cell_colour(value, entry.lower, entry.upper, entry.signed)
                mark = "•" if math.isfinite(q_value) and q_value < config.SIGNIFICANCE_LEVEL else ""
                shown = f"{value:.2f}" if math.isfinite(value) else "–"
                text = "" if i == j else (f"{shown}{mark}" if numbers else mark)
                tip = f"{row_name} / {names[j]}: {shown}, q {_p_text(q_value)}"
                cells.append(f"<td style='background:{bg};color:{ink}' title='{tip}'>{text}</td>")
            label = row_name[:20] if numbers else f"{i + 1} {row_name[:20]}"
            body.append(f"<tr><th title='{row_name}' style='text-align:left'>{label}</th>{''.join(cells)}</tr>")
        caption = html.escape(entry.label or measure)
        return (f"<table class='map{'' if numbers else ' compact'}' data-measure='{html.escape(measure)}'>"
                f"<caption>{caption}</caption><tr><th></th>{head}</tr>{''.join(body)}</table>")

    def _repr_html_(self) -> str:
        top = self.top_pairs()
        rows = []
        for _, r in top.iterrows():
            cells = "".join(f"<td>{_num_text(r[m])}</td>" for m in self.measures if m in top.columns)
            rows.append(f"<tr><td style='text-align:left'>{html.escape(str(r['x']))}</td>"
                        f"<td style='text-align:left'>{html.escape(str(r['y']))}</td>"
                        f"<td>{_p_text(r.iloc[2])}</td><td>{int(r['n'])}</td>{cells}</tr>")
        head = "".join(f"<th>{html.escape(m)}</th>" for m in self.measures)
        top_table = (f"<table class='top-pairs'><caption>Top pairs by {html.escape(top.columns[2])}</caption>"
                     f"<tr><th>x</th><th>y</th><th>{html.escape(top.columns[2])}</th><th>n</th>{head}</tr>"
                     f"{''.join(rows)}</table>")
        maps = "".join(self._map_html(m) for m in self.measures)
        summary = (f"<p class='note'>{html.escape(self._table.name)}: {self._table.n_rows} rows, "
                   f"{len(self.variables)} variables, {len(self.pairs)} results. • marks q &lt; "
                   f"{config.SIGNIFICANCE_LEVEL}. {html.escape(_CAUTION.format(alpha=config.SIGNIFICANCE_LEVEL))}</p>")
        return f"<div class='pairlens-out'>{_STYLE}{summary}<div class='maps'>{maps}</div>{top_table}</div>"

    def __repr__(self) -> str:
        return (f"<pairlens.Analysis of {self._table.name!r}: {len(self.variables)} variables, "
                f"measures {', '.join(self.measures)}, {len(self.pairs)} rows in .pairs>")


class PairView:
    """Everything about one pair, made by :meth:`Analysis.inspect`.

    Attributes
    ----------
    detail : dict
        The ``pairlens inspect --json`` shape (docs/contracts.md): ``x, y, n, measures,
        gaussian, pattern``.
    """

    def __init__(self, detail: dict) -> None:
        points = detail.get("points") or {}
        self._points = (points.get("x", []), points.get("y", []))
        self.detail = {k: v for k, v in detail.items() if k != "points"}

    @property
    def verdict(self) -> str:
        """The pattern label of the pair (linear, monotone, non-monotone, ...)."""
        return self.detail["pattern"]["label"]

    def to_json(self) -> str:
        """The ``pairlens inspect --json`` text."""
        return json.dumps(self.detail, ensure_ascii=False, allow_nan=False)

    def _scatter_svg(self) -> str:
        import numpy as np

        x = np.asarray(self._points[0], dtype=float)
        y = np.asarray(self._points[1], dtype=float)
        if len(x) == 0:
            return "<p class='note'>no rows with both values</p>"
        if len(x) > _SCATTER_POINTS:  # a seeded sample keeps the picture the same on every run
            keep = np.sort(np.random.default_rng(0).choice(len(x), _SCATTER_POINTS, replace=False))
            x, y = x[keep], y[keep]
        w, h, pad = 360, 280, 36

        def scale(v, lo, hi, size, flip=False):
            span = (hi - lo) or 1.0
            pos = (v - lo) / span * (size - 2 * pad) + pad
            return size - pos if flip else pos

        x_lo, x_hi, y_lo, y_hi = float(x.min()), float(x.max()), float(y.min()), float(y.max())
        dots = "".join(f"<circle cx='{scale(a, x_lo, x_hi, w):.1f}' cy='{scale(b, y_lo, y_hi, h, True):.1f}' r='2'/>"
                       for a, b in zip(x, y))
        line = ""
        c = self.detail["gaussian"]["conditional"]
        if c["slope"] is not None and c["intercept"] is not None:
            ya, yb = c["intercept"] + c["slope"] * x_lo, c["intercept"] + c["slope"] * x_hi
            line = (f"<line x1='{scale(x_lo, x_lo, x_hi, w):.1f}' y1='{scale(ya, y_lo, y_hi, h, True):.1f}' "
                    f"x2='{scale(x_hi, x_lo, x_hi, w):.1f}' y2='{scale(yb, y_lo, y_hi, h, True):.1f}' "
                    "stroke='#b4472b' stroke-width='2'/>")
        xn, yn = html.escape(self.detail["x"]), html.escape(self.detail["y"])
        return (f"<svg xmlns='http://www.w3.org/2000/svg' width='{w}' height='{h}' role='img' "
                f"aria-label='scatter of {yn} against {xn}' style='font:11px system-ui,sans-serif'>"
                f"<rect x='{pad}' y='{pad}' width='{w - 2 * pad}' height='{h - 2 * pad}' fill='none' stroke='#ccc'/>"
                f"<g fill='rgba(31,78,96,0.5)'>{dots}</g>{line}"
                f"<text x='{w / 2}' y='{h - 6}' text-anchor='middle'>{xn}</text>"
                f"<text x='12' y='{h / 2}' transform='rotate(-90 12 {h / 2})' text-anchor='middle'>{yn}</text>"
                f"<text x='{pad}' y='{h - pad + 14}'>{x_lo:.4g}</text>"
                f"<text x='{w - pad}' y='{h - pad + 14}' text-anchor='end'>{x_hi:.4g}</text>"
                f"<text x='{pad - 4}' y='{h - pad}' text-anchor='end'>{y_lo:.4g}</text>"
                f"<text x='{pad - 4}' y='{pad + 8}' text-anchor='end'>{y_hi:.4g}</text></svg>")

    def _repr_html_(self) -> str:
        d = self.detail
        rows = []
        for name, m in d["measures"].items():
            interval = "" if m["ci_low"] is None else f"[{_num_text(m['ci_low'])}, {_num_text(m['ci_high'])}]"
            rows.append(f"<tr><td style='text-align:left'>{html.escape(name)}</td><td>{_num_text(m['estimate'])}</td>"
                        f"<td>{interval}</td><td>{_p_text(m['p_value'])}</td><td>{_p_text(m.get('q_value'))}</td>"
                        f"<td style='text-align:left'>{html.escape(m.get('note') or m.get('method') or '')}</td></tr>")
        rows = "".join(rows)
        table = ("<table class='measures'><caption>Measures</caption><tr><th>measure</th><th>estimate</th>"
                 f"<th>interval</th><th>p</th><th>q</th><th>method / note</th></tr>{rows}</table>")
        g = d["gaussian"]
        normality = g["normality"]
        reasons = "".join(f"<li>{html.escape(r)}</li>" for r in d["pattern"]["reasons"])
        verdict = (f"<p class='note'><b>Verdict: {html.escape(d['pattern']['label'])}</b></p><ul class='note'>"
                   f"{reasons}</ul><p class='note'>Bivariate Gaussian fit: rho = {_num_text(g['rho'])}; "
                   f"Henze-Zirkler joint normality p = {_p_text(normality['p_value'])}. The red line is the "
                   f"Gaussian conditional mean of {html.escape(d['y'])} given {html.escape(d['x'])}.</p>")
        title = (f"<p class='note'><b>{html.escape(d['x'])} vs {html.escape(d['y'])}</b>: "
                 f"{d['n']} rows with both values. "
                 f"{html.escape(_CAUTION.format(alpha=config.SIGNIFICANCE_LEVEL))}</p>")
        return (f"<div class='pairlens-out pairlens-pair'>{_STYLE}{title}<div class='maps'>{self._scatter_svg()}"
                f"{table}</div>{verdict}</div>")

    def __repr__(self) -> str:
        d = self.detail
        return f"<pairlens.PairView {d['x']!r} vs {d['y']!r}: n = {d['n']}, verdict {self.verdict!r}>"
