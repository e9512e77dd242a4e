"""The self-contained HTML report: fingerprint, numbers, safety, size, offline rendering, CLI.

Data here are invented (seeded), vineyard-style columns with known shapes.
"""

from __future__ import annotations

import csv
import os
import hashlib
import html
import json
import math
import re
import shlex
import shutil
import subprocess
import sys
import time
from datetime import datetime, timezone
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
import scipy.stats as ss

from browser_helpers import chromium_available
from pairlens import __version__
from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.ingest import ColumnInfo, Table, load_table
from pairlens.formatting import embed_json as script_json  # the one JSON embedder of every face
from pairlens.core.registry import MEASURES
from pairlens.report import build_report, extreme_indices, round_floats, shared_rows, simplify_polyline

ROOT = Path(__file__).resolve().parent.parent
SCREENSHOTS = Path(__file__).resolve().parent / "screenshots"
STAMP = datetime(2026, 12, 1, 21, 30, tzinfo=timezone.utc)
PAYLOADS = [
    "</script><script>window.__pwned=1</script>",
    '<img src=x onerror="window.__pwned=2">',
    "<!--<script>window.__pwned=3</script>",
    "line\u2028sep",
    "%{x} & \"q\" 'a'",
]


# Data -----------------------------------------------------------------------

def _vineyard_frame(n: int, seed: int) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    moisture = rng.normal(25, 5, n)
    canopy = 30 - 0.4 * moisture + rng.normal(0, 1, n)            # linear
    sugar = 20 + 6 * np.tanh((canopy - 20) / 3) + rng.normal(0, 0.4, n)  # monotone, curved
    disease = ((moisture - 25) / 5) ** 2 + rng.normal(0, 0.3, n)   # U-shaped
    noise = rng.normal(size=n)
    return {"soil_moisture": moisture, "canopy_temp": canopy, "sugar_brix": sugar,
            "disease_score": disease, "gust_noise": noise}


def _write_csv(path: Path, cols: dict[str, np.ndarray], *, missing_in: str | None = None,
               missing_every: int = 9, category: bool = True) -> Path:
    names = list(cols)
    n = len(next(iter(cols.values())))
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(names + (["block"] if category else []))
        for i in range(n):
            row = []
            for name in names:
                blank = missing_in == name and i % missing_every == 3
                row.append("" if blank else f"{cols[name][i]:.6g}")
            if category:
                row.append(f"B{i % 4}")
            w.writerow(row)
    return path


class _Report:
    """The report of one small analysis, built once for the module."""

    def __init__(self, path: Path, settings: AnalysisSettings, top_k: int = 3):
        self.path = path
        self.table = load_table(path)
        self.settings = settings
        self.pairs = run_analysis(self.table.data, self.table.columns, settings, workers=1)
        started = time.perf_counter()
        self.html = build_report(self.table, self.pairs, command=f"pairlens report {path.name} -o r.html",
                                 generated_at=STAMP, top_k=top_k)
        self.seconds = time.perf_counter() - started
        self.file = path.with_suffix(".html")
        self.file.write_text(self.html, encoding="utf-8")


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> _Report:
    folder = tmp_path_factory.mktemp("report")
    path = _write_csv(folder / "blocks.csv", _vineyard_frame(400, 11), missing_in="canopy_temp")
    settings = AnalysisSettings.from_options(measures="pearson,spearman,kendall,dcor,xi", seed=7)
    return _Report(path, settings)


# HTML parsing ---------------------------------------------------------------

class _Collector(HTMLParser):
    """Tags with their attributes, the pair table's cells, and text by data-testid."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.script_texts: list[tuple[dict, str]] = []
        self._script: dict | None = None
        self._buf: list[str] = []
        self.pair_rows: list[list[tuple[dict, str]]] = []
        self._in_pairs = False
        self._in_body = False
        self._cell: dict | None = None
        self._cell_text: list[str] = []
        self.testid_text: dict[str, str] = {}
        self._carry: list | None = None
        self._testid_stack: list[tuple[str, str, list[str]]] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if tag == "script":
            self._script, self._buf = a, []
        if tag == "table" and a.get("id") == "pairs":
            self._in_pairs = True
        if self._in_pairs and tag == "tbody":
            self._in_body = True
        # the pair table leaves out the optional </td> and </tr> end tags
        if self._in_body and tag in ("tr", "td"):
            self._close_cell()
        if self._in_body and tag == "tr":
            self.pair_rows.append([])
            if self._carry and self._carry[0] > 0:  # cells shared with the row above (rowspan)
                self.pair_rows[-1].extend(self._carry[1])
                self._carry[0] -= 1
        if self._in_body and tag == "td":
            self._cell, self._cell_text = a, []
        if "data-testid" in a:
            self._testid_stack.append((tag, a["data-testid"], []))

    def _close_cell(self):
        if self._cell is not None:
            cell = (self._cell, "".join(self._cell_text))
            self.pair_rows[-1].append(cell)
            span = int(self._cell.get("rowspan", "1"))
            if span > 1:
                if len(self.pair_rows[-1]) == 1:
                    self._carry = [span - 1, [cell]]
                else:
                    self._carry[1].append(cell)
            self._cell = None

    def handle_endtag(self, tag):
        if tag == "script" and self._script is not None:
            self.script_texts.append((self._script, "".join(self._buf)))
            self._script = None
        if tag in ("td", "tr") and self._in_body:
            self._close_cell()
        if tag == "tbody" and self._in_body:
            self._close_cell()
            self._in_body = self._in_pairs = False
        if self._testid_stack and self._testid_stack[-1][0] == tag:
            _, tid, parts = self._testid_stack.pop()
            self.testid_text.setdefault(tid, "".join(parts))

    def handle_data(self, data):
        if self._script is not None:
            self._buf.append(data)
        if self._cell is not None:
            self._cell_text.append(data)
        for _, _, parts in self._testid_stack:
            parts.append(data)


def _parse(text: str) -> _Collector:
    c = _Collector()
    c.feed(text)
    c.close()
    return c


def _hover(text: str) -> dict:
    m = re.search(r'<script type="application/json" id="pl-hover">(.*?)</script>', text, re.S)
    assert m, "hover data block missing"
    return json.loads(m.group(1))


def _svgs(text: str, kind: str) -> list[tuple[dict, str]]:
    """(attributes, inner markup) of every figure SVG of one kind ("map" or "pair")."""
    out = []
    for m in re.finditer(r'<svg ([^>]*class="svg-fig svg-%s"[^>]*)>(.*?)</svg>' % kind, text, re.S):
        attrs = dict(re.findall(r'([\w:-]+)="([^"]*)"', m.group(1)))
        out.append(({k: html.unescape(v) for k, v in attrs.items()}, m.group(2)))
    return out


def _moves(d: str) -> list[tuple[float, float]]:
    """The start points of a path's "M x y" commands."""
    return [(float(a), float(b)) for a, b in re.findall(r"M(-?[\d.]+) (-?[\d.]+)", d)]


# Fingerprint, settings, numbers ---------------------------------------------

def test_fingerprint_is_sha256_of_the_file_and_counts_match(report):
    page = _parse(report.html)
    # reference: hashlib (Python standard library) over the file's bytes
    assert page.testid_text["sha256"] == hashlib.sha256(report.path.read_bytes()).hexdigest()
    with report.path.open(newline="", encoding="utf-8") as fh:  # reference: the csv module
        rows = list(csv.reader(fh))
    header, body = rows[0], rows[1:]
    assert page.testid_text["n-rows"] == str(len(body))
    # missing counts per column, counted independently from the raw cells
    blanks = {name: sum(1 for r in body if r[k] == "") for k, name in enumerate(header)}
    assert blanks["canopy_temp"] > 0
    column_rows = re.findall(r'<tr class="(used|left-out)">\s*<th scope="row">(.*?)</th>.*?'
                             r'<td class="r">(\d+)', report.html, re.S)
    shown = {html.unescape(name.split(" <span")[0]): int(miss) for _, name, miss in column_rows}
    assert shown == blanks
    # the text column with few levels is analysed as categorical, and listed so
    assert re.search(r'<tr class="used">\s*<th scope="row">block</th>\s*<td>categorical</td>', report.html, re.S)


def test_demo_data_are_labelled_invented(report):
    from pairlens import config

    assert "invented vineyard demo data" not in report.html
    table = load_table(config.DEMO_FILE)
    settings = AnalysisSettings.from_options(measures="pearson", columns=",".join(table.columns[:3]))
    pairs = run_analysis(table.data, table.columns, settings, workers=1)
    assert "invented vineyard demo data" in build_report(table, pairs, command="x", top_k=1)


def test_title_version_settings_and_command(report):
    text = report.html
    assert f"<h1>{report.path.name}</h1>" in text
    assert f"pairlens {__version__}" in text
    assert "2026-12-01 21:30 UTC" in text
    page = _parse(text)
    assert page.testid_text["command"] == f"pairlens report {report.path.name} -o r.html"
    for word in ("pairwise", "bh", "0.95", ">7<"):
        assert word in text
    for name in report.settings.measures:
        assert f"<code>{name}</code>" in text


def test_pair_table_equals_the_analysis_records(report):
    page = _parse(report.html)
    records = report.pairs.records()
    assert len(page.pair_rows) == len(records) and records
    numeric = ("estimate", "ci_low", "ci_high", "p_value", "q_value")
    for cells, rec in zip(page.pair_rows, records):
        texts = [html.unescape(t) for _, t in cells]
        assert texts[0] == rec["x"] and texts[1] == rec["y"] and texts[2] == rec["measure"]
        for k, name in enumerate(numeric, start=3):
            attrs, shown = cells[k]
            value = rec[name]
            if value is None or not math.isfinite(value):
                assert attrs["data-v"] == "" and shown == "–"
                continue
            # machine-readable value: 6 significant digits of the record
            assert float(attrs["data-v"]) == pytest.approx(value, rel=5e-6, abs=1e-300)
            if shown == "< 10⁻³⁰⁰":
                assert value == 0.0
                continue
            # displayed value (pairlens.formatting's rule, "4.3×10⁻¹⁸" or "0.822"): rounded, so within
            # half a unit of its last digit
            digits, _, power = shown.partition("×10")
            decimals = len(digits.split(".")[1]) if "." in digits else 0
            scale = 10.0 ** int(power.translate(str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789"))) if power else 1
            assert float(digits) * scale == pytest.approx(value, abs=0.5 * 10 ** -decimals * scale + 1e-15)
        assert int(texts[8]) == rec["n"]
        assert texts[9].strip() == rec["note"]


def test_report_numbers_agree_with_reference_libraries(report):
    page = _parse(report.html)
    by_key = {(html.unescape(c[0][1]), html.unescape(c[1][1]), c[2][1]): c for c in page.pair_rows}
    cols = report.table.columns
    x_name, y_name = "soil_moisture", "canopy_temp"
    x = report.table.data[:, cols.index(x_name)]
    y = report.table.data[:, cols.index(y_name)]
    keep = ~np.isnan(x) & ~np.isnan(y)
    x, y = x[keep], y[keep]
    import dcor

    references = {  # reference: scipy.stats and the dcor package
        "pearson": ss.pearsonr(x, y).statistic,
        "spearman": ss.spearmanr(x, y).statistic,
        "kendall": ss.kendalltau(x, y).statistic,
        "dcor": dcor.distance_correlation(x, y),
        "xi": ss.chatterjeexi(x, y).statistic,
    }
    for measure, expected in references.items():
        cells = by_key[(x_name, y_name, measure)]
        assert float(cells[3][0]["data-v"]) == pytest.approx(expected, rel=5e-6), measure
        assert int(cells[8][1]) == int(keep.sum())
    p_cells = by_key[(x_name, y_name, "pearson")]
    from pairlens.core import linear

    # Pearson's default p-value is the permutation-moment one (scipy.stats.pearsonr is the t-test, which
    # `--test pearson=t` gives); the report shows it as computed, and both are far below any alpha.
    shown_p = float(p_cells[6][0]["data-v"])
    assert shown_p == pytest.approx(linear.pearson(x, y).p_value, rel=5e-6, abs=1e-300)
    assert shown_p < 1e-100 and ss.pearsonr(x, y).pvalue < 1e-100   # reference: scipy.stats.pearsonr


def test_methods_and_cautions_are_complete(report):
    from pairlens.core.registry import MEASURES

    text = html.unescape(report.html)
    for name in report.settings.measures:
        m = MEASURES[name]
        for part in (m.formula, m.reference, m.default_test):
            assert part in text, (name, part)
    assert "Benjamini, Y. & Hochberg, Y. (1995)" in text
    for phrase in ("not causation", "Many tests", "Outliers and missing data", "health or safety",
                   "qualified"):
        assert phrase in text
    assert "@media print" in report.html


def test_top_pairs_find_the_planted_shapes(report):
    text = html.unescape(report.html)
    # the U-shaped pair (disease_score vs soil_moisture) leads the dcor - |pearson| ranking
    block = text[text.index("Disagreement: Distance correlation"):]
    first = re.search(r'<td class="place">1</td><td><a href="#(pair-\d+)">(.*?)</a>', block, re.S)
    assert first and "soil_moisture" in first.group(2) and "disease_score" in first.group(2)
    card = text[text.index(f'id="{first.group(1)}"'):]
    assert "Verdict" in card[:card.index("</article>")]


def test_methods_content_follows_settings_and_registry(report):
    from pairlens.core.registry import MEASURES
    from pairlens.methods import methods_content

    content = methods_content(settings=report.settings, pair_table=report.pairs)
    assert [m["name"] for m in content["measures"]] == list(report.settings.measures)
    for m in content["measures"]:
        defined = sum(1 for r in report.pairs.rows if r.measure == m["name"] and math.isfinite(r.p_value))
        assert sum(u["pairs"] for u in m["methods_used"]) == defined
        assert m["formula"] == MEASURES[m["name"]].formula
    everything = methods_content()
    assert [m["name"] for m in everything["measures"]] == list(MEASURES)
    holm = AnalysisSettings.from_options(adjust="holm", permutations=99, missing="complete")
    text = json.dumps(methods_content(settings=holm))
    assert "Holm" in text and "(m - j + 1)" in text and "B = 99" in text and "(1 + k) / (B + 1)" in text
    assert "complete" in text and "Benjamini" not in text
    # the t-test caution (levels measured in tests/core/test_levels_classic.py) where it applies
    caution = "The t-test (--test pearson=t, as scipy.stats.pearsonr) is exact when at least one of the two variables is normal"
    assert caution in json.dumps(methods_content(settings=AnalysisSettings.from_options(measures="pearson")))
    assert caution not in text  # permutations were requested
    assert caution not in json.dumps(methods_content(settings=AnalysisSettings.from_options(measures="kendall")))
    json.dumps(content)  # plain data, ready for an API or a template


def test_groups_and_complete_rows_are_reported_honestly(tmp_path):
    path = _write_csv(tmp_path / "g.csv", _vineyard_frame(160, 8), missing_in="sugar_brix", missing_every=5)
    table = load_table(path)
    settings = AnalysisSettings.from_options(measures="dcor,pearson", missing="complete",
                                             groups=["soil=soil_moisture,canopy_temp"])
    pairs = run_analysis(table.data, table.columns, settings, workers=1)
    text = html.unescape(build_report(table, pairs, command="pairlens report g.csv -o g.html", top_k=3))
    assert "Group soil" in text
    assert "A column group: the report draws scatters for single columns only." in text
    # with complete rows the scatter, the fit and the verdict use the measures' rows, and the card says so
    complete = int(np.sum(~np.isnan(table.data).any(axis=1)))
    assert (f"The measures, the Gaussian fit and the verdict use the {complete} rows complete in every "
            "analysed variable") in text
    assert "every row where both of these values are present" not in text
    page = _parse(text)
    assert {int(c[8][1]) for c in page.pair_rows} == {complete}


# Figures --------------------------------------------------------------------

def test_maps_draw_every_defined_cell_and_dot_the_significant_ones(report):
    maps = {attrs["data-testid"]: (attrs, body) for attrs, body in _svgs(report.html, "map")}
    hover = _hover(report.html)
    names = hover["variables"]
    assert sorted(names) == sorted(report.pairs.variables)
    k = len(names)
    alpha = 0.05  # the default significance level (pairlens.config)
    for m in report.settings.measures:
        attrs, body = maps[f"heatmap-{m}"]
        assert int(attrs["data-map-k"]) == k
        left, top, side = (float(attrs[f"data-map-{a}"]) for a in ("left", "top", "side"))
        cell = side / k
        # every filled cell, in the grid, off the diagonal: reference is the pair table's own records
        fills = re.findall(r'<path fill="(#[0-9a-f]{6})" d="([^"]*)"', body)
        drawn = {(round((y - top) / cell), round((x - left) / cell)) for colour, d in fills
                 if colour != "#e9e6df" for x, y in _moves(d)}
        expected = set()
        dotted = set()
        for r in report.pairs.rows:
            if r.measure != m or not math.isfinite(r.estimate):
                continue
            i, j = names.index(r.x), names.index(r.y)
            cells = {(i, j)} if not MEASURES[m].symmetric else {(i, j), (j, i)}
            expected |= cells
            if math.isfinite(r.q_value) and r.q_value < alpha:
                dotted |= cells
        assert drawn == expected
        dots = re.search(r'<path class="sig-dots"[^>]* d="([^"]*)"', body)
        got = {(int((y - top) // cell), int((x - left) // cell)) for x, y in _moves(dots.group(1))} if dots else set()
        assert got == dotted
        # hover numbers are the pair table's, written by the one formatter
        row = next(r for r in report.pairs.rows if r.measure == m and math.isfinite(r.estimate))
        i, j = names.index(row.x), names.index(row.y)
        if MEASURES[m].symmetric:  # the upper triangle, row by row
            a, b = min(i, j), max(i, j)
            at = a * k - a * (a + 1) // 2 + (b - a - 1)
        else:
            at = i * k + j
        assert hover["maps"][f"heatmap-{m}"]["cells"][at][0] == f"{row.estimate:.3f}".replace("-0.000", "0.000")
        assert hover["maps"][f"heatmap-{m}"]["cells"][at][3] == row.n


def test_scatters_draw_the_files_values_and_cap_the_points(report):
    scatters = _svgs(report.html, "pair")
    assert scatters
    page_cards = re.findall(r'<article class="card" id="[^"]+" data-x="([^"]*)" data-y="([^"]*)">', report.html)
    assert len(scatters) == len(page_cards)
    data = report.table.data
    for (attrs, body), (x_name, y_name) in zip(scatters, page_cards):
        x_name, y_name = html.unescape(x_name), html.unescape(y_name)
        xlo, xhi = map(float, attrs["data-x-range"].split())
        ylo, yhi = map(float, attrs["data-y-range"].split())
        ox, oy, pw, ph = map(float, attrs["data-plot"].split())
        d = re.search(r'<path class="points" d="([^"]*)"', body).group(1)
        pts = np.array(_moves(d))
        assert len(pts) == int(attrs["data-points"]) <= 2000 + 50
        # each drawn point is a row of the file: invert the axes (coordinates carry one decimal)
        vx = xlo + (pts[:, 0] - ox) / pw * (xhi - xlo)
        vy = ylo + (oy + ph - pts[:, 1]) / ph * (yhi - ylo)
        fx = data[:, report.table.columns.index(x_name)]
        fy = data[:, report.table.columns.index(y_name)]
        ok = np.isfinite(fx) & np.isfinite(fy)
        fx, fy = fx[ok], fy[ok]
        tol_x, tol_y = 0.06 / pw * (xhi - xlo), 0.06 / ph * (yhi - ylo)
        near = (np.abs(vx[:, None] - fx[None, :]) <= tol_x) & (np.abs(vy[:, None] - fy[None, :]) <= tol_y)
        assert near.any(axis=1).all()
        # every point of a pair with fewer rows than the cap is drawn
        if ok.sum() <= 300:
            assert len(pts) == ok.sum()


def test_far_points_and_shared_rows():
    rng = np.random.default_rng(3)
    x = rng.normal(size=10_000)
    y = x + rng.normal(size=10_000)
    x[123], y[123] = 3.0, -3.0  # unremarkable alone, far off the x = y trend together
    far = extreme_indices(x, y, 50)
    assert len(far) == 50 and 123 in far and np.all(np.diff(far) > 0)
    # reference: Mahalanobis distance written out with numpy's covariance
    d = np.column_stack([x, y]) - [x.mean(), y.mean()]
    m = np.einsum("ij,jk,ik->i", d, np.linalg.inv(np.cov(d.T)), d)
    assert set(far.tolist()) == set(np.argsort(-m)[:50].tolist())
    rows = shared_rows(10_000, 2000, seed=5)
    assert len(rows) == len(set(rows.tolist())) == 2000 and np.all(np.diff(rows) > 0)
    assert np.array_equal(rows, shared_rows(10_000, 2000, seed=5))
    assert not np.array_equal(rows, shared_rows(10_000, 2000, seed=6))
    assert np.array_equal(shared_rows(500, 2000, seed=5), np.arange(500))


def test_simplify_polyline_keeps_corners_only():
    xs = np.linspace(0, 1, 50).tolist() + np.linspace(1, 0, 50).tolist()
    ys = [2 * v for v in xs[:50]] + [2 * v + 1 for v in xs[50:]]
    sx, sy = simplify_polyline(xs, ys)
    assert sx == [0.0, 1.0, 1.0, 0.0] and sy == pytest.approx([0.0, 2.0, 3.0, 1.0])
    cx = np.cos(np.linspace(0, 2 * np.pi, 40)).tolist()
    assert len(simplify_polyline(cx, np.sin(np.linspace(0, 2 * np.pi, 40)).tolist())[0]) == 40


def test_round_floats_six_significant_digits():
    out = round_floats({"a": [1.23456789, np.float64(-0.000123456789), float("nan")], "b": np.array([2.5e10 + 1.5])})
    assert out == {"a": [1.23457, -0.000123457, None], "b": [25000000000.0]}


# Safety ---------------------------------------------------------------------

def test_script_json_cannot_break_out_of_its_element():
    value = {"name": "</script><!--<script>\u2028\u2029&amp;", "n": [1.5, None]}
    text = str(script_json(value))
    for bad in ("<", ">", "&", "\u2028", "\u2029"):
        assert bad not in text
    assert json.loads(text) == value  # reference: RFC 8259 \u escapes decode to the same string


def test_report_has_no_external_resources(report):
    page = _parse(report.html)
    for tag, attrs in page.tags:
        assert tag not in ("link", "iframe", "object", "embed", "img", "base"), tag
        for key in ("src", "href", "action", "srcset", "poster", "data"):
            if key in attrs:
                assert key == "href" and attrs[key].startswith("#"), (tag, key, attrs[key])
    assert "url(" not in report.html.split("<script")[0]  # no CSS fetches
    meta = [a for t, a in page.tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy"]
    assert meta and "default-src 'none'" in meta[0]["content"] and "connect-src 'none'" in meta[0]["content"]
    # every executable script is allowed by hash, nothing else (hashes recomputed with hashlib)
    import base64

    executable = [txt for attrs, txt in page.script_texts if attrs.get("type") != "application/json"]
    assert len(executable) == 1  # the report's own script; the figures are SVG, no plotting library
    for txt in executable:
        digest = base64.b64encode(hashlib.sha256(txt.encode("utf-8")).digest()).decode()
        assert f"'sha256-{digest}'" in meta[0]["content"]
    assert "'unsafe-inline'" not in meta[0]["content"].split("script-src")[1].split(";")[0]


def _payload_table(n: int = 120) -> Table:
    rng = np.random.default_rng(5)
    base = rng.normal(size=n)
    data = np.column_stack([base + rng.normal(scale=s, size=n) for s in (0.3, 0.6, 1.0, 2.0, 4.0)])
    info = [ColumnInfo(name, name, "numeric", True, "", 0, 0, n) for name in PAYLOADS]
    info.append(ColumnInfo("<b>bold</b> label", "<b>bold</b> label", "text", False, "<i>text</i> column", 0, 0, 3))
    return Table(name="<script>alert(1)</script>.csv", sha256="0" * 64, n_rows=n, columns=list(PAYLOADS),
                 data=data, info=info, notes=["renamed <u>x</u>"])


@pytest.fixture(scope="module")
def payload_report(tmp_path_factory):
    table = _payload_table()
    settings = AnalysisSettings.from_options(measures="pearson,dcor")
    pairs = run_analysis(table.data, table.columns, settings, workers=1)
    text = build_report(table, pairs, command="pairlens report '<x>.csv' -o r.html", generated_at=STAMP)
    path = tmp_path_factory.mktemp("payload") / "payload.html"
    path.write_text(text, encoding="utf-8")
    return table, pairs, text, path


def test_payload_column_names_are_escaped(payload_report):
    _, _, text, _ = payload_report
    for raw in ("<script>window.__pwned", "<img src=x", "<b>bold</b>", "<i>text</i>", "<u>x</u>",
                "<script>alert(1)</script>", "<x>.csv"):
        assert raw not in text, raw
    assert "&lt;img src=x onerror=" in text
    assert "&lt;/script&gt;&lt;script&gt;window.__pwned=1&lt;/script&gt;" in text
    page = _parse(text)
    assert len([1 for attrs, _ in page.script_texts if attrs.get("type") != "application/json"]) == 1
    # the hover data still decodes to the exact names
    assert sorted(_hover(text)["variables"]) == sorted(PAYLOADS)


# Size -----------------------------------------------------------------------

def test_demo_report_is_at_most_one_and_a_half_megabytes():
    # The size goal of a saved report (issue 16): the demo with the default measures in at most 1.5 MB.
    from pairlens import config

    table = load_table(config.DEMO_FILE)
    settings = AnalysisSettings.from_options()
    pairs = run_analysis(table.data, table.columns, settings, workers=2)
    text = build_report(table, pairs, command="pairlens report vineyard_blocks.csv -o demo.html")
    size = len(text.encode("utf-8"))
    print(f"demo report: {size / 1e6:.2f} MB")
    assert len(_svgs(text, "map")) == len(settings.measures) + 1  # and the dCor - |r| map
    assert _svgs(text, "pair")
    assert size <= 1_500_000


def test_thirty_column_report_stays_small(tmp_path):
    rng = np.random.default_rng(30)
    n, p = 3000, 30
    latent = rng.normal(size=(n, 3))
    cols = {}
    for j in range(p):
        w = rng.normal(size=3) * (j % 3 != 0)
        v = latent @ w + rng.normal(size=n)
        if j % 5 == 1:
            v = v ** 2  # some curved pairs, so disagreement rankings differ from the rest
        cols[f"vineyard_block_soil_moisture_probe_{j:02d}_cm"] = v  # long names: they repeat in the page
    path = _write_csv(tmp_path / "wide.csv", cols, missing_in="vineyard_block_soil_moisture_probe_04_cm",
                      category=False)
    table = load_table(path)
    settings = AnalysisSettings.from_options()
    started = time.perf_counter()
    pairs = run_analysis(table.data, table.columns, settings, workers=2)
    analysed = time.perf_counter()
    text = build_report(table, pairs, command="pairlens report wide.csv -o wide.html")
    built = time.perf_counter()
    size = len(text.encode("utf-8"))
    print(f"30 columns x {n} rows: analysis {analysed - started:.1f} s, report {built - analysed:.1f} s, "
          f"{size / 1e6:.2f} MB")
    assert len(_parse(text).pair_rows) == 435 * 4
    # most of the file is now the 1740-row pair table; the figures are SVG (Plotly alone was 3.5 MB)
    assert size < 2_000_000


# Command line ---------------------------------------------------------------

def _pairlens() -> list[str]:
    exe = shutil.which("pairlens")
    return [exe] if exe else [sys.executable, "-m", "pairlens.cli"]


def test_cli_report_end_to_end_and_its_command_reproduces_it(tmp_path):
    data = _write_csv(tmp_path / "small blocks.csv", _vineyard_frame(150, 4))
    out = tmp_path / "out.html"
    run = subprocess.run([*_pairlens(), "report", str(data), "-o", str(out), "--measures", "pearson,kendall",
                          "--adjust", "holm", "--seed", "99", "--workers", "1"],
                         capture_output=True, text=True, timeout=180, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    first = out.read_text(encoding="utf-8")
    page = _parse(first)
    assert page.testid_text["sha256"] == hashlib.sha256(data.read_bytes()).hexdigest()
    command = html.unescape(page.testid_text["command"])
    argv = shlex.split(command)
    assert argv[:2] == ["pairlens", "report"] and argv[2] == str(data)
    assert "--adjust" in argv and argv[argv.index("--adjust") + 1] == "holm"
    again = tmp_path / "again.html"
    argv[argv.index("-o") + 1] = str(again)
    rerun = subprocess.run([*_pairlens(), *argv[1:], "--workers", "1"], capture_output=True, text=True,
                           timeout=180, cwd=ROOT)
    assert rerun.returncode == 0, rerun.stderr
    second = _parse(again.read_text(encoding="utf-8"))
    assert [[a.get("data-v"), t] for row in second.pair_rows for a, t in row] == \
           [[a.get("data-v"), t] for row in page.pair_rows for a, t in row]


def test_cli_report_rejects_a_wrong_suffix(tmp_path):
    data = _write_csv(tmp_path / "d.csv", _vineyard_frame(30, 1))
    run = subprocess.run([*_pairlens(), "report", str(data), "-o", str(tmp_path / "r.txt")],
                         capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert run.returncode == 2 and len(run.stderr.strip().splitlines()) == 1


# Browser --------------------------------------------------------------------

def _offline_page(context, requests: list[str], allowed: str):
    page = context.new_page()

    def route(r):
        requests.append(r.request.url)
        if r.request.url == allowed:
            r.continue_()
        else:
            r.abort()

    page.route("**/*", route)
    return page


needs_browser = pytest.mark.skipif(not chromium_available() and not os.environ.get("CI"),
                                   reason="Debian chromium not installed (never skipped in CI)")


@pytest.mark.browser
@needs_browser
def test_report_renders_offline_in_chromium(report, browser):
    hover = _hover(report.html)
    n_svg = len(_svgs(report.html, "map")) + len(_svgs(report.html, "pair"))
    url = report.file.resolve().as_uri()
    requests: list[str] = []
    errors: list[str] = []
    SCREENSHOTS.mkdir(exist_ok=True)
    try:
        context = browser.new_context(viewport={"width": 1300, "height": 900})
        page = _offline_page(context, requests, url)
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.goto(url)
        page.wait_for_function("document.body.getAttribute('data-figures') !== null", timeout=60_000)
        assert page.get_attribute("body", "data-figures") == str(n_svg)
        # every figure is laid out at a visible size
        sizes = page.evaluate("""() => Array.from(document.querySelectorAll('svg.svg-fig')).map(s => {
            const b = s.getBoundingClientRect(); return [b.width, b.height]; })""")
        assert len(sizes) == n_svg and all(w > 300 and h > 250 for w, h in sizes), sizes
        for m in report.settings.measures:
            assert page.locator(f'[data-testid="heatmap-{m}"]').count() == 1
        # sorting by a numeric column: ascending, missing values last
        header = page.locator("#pairs thead th", has_text="q_value")
        header.locator("button").click()
        values = page.evaluate("""() => Array.from(document.querySelectorAll('#pairs tbody tr'))
            .map(r => r.cells[7].getAttribute('data-v'))""")
        present = [float(v) for v in values if v]
        assert present == sorted(present) and all(v for v in values[:len(present)])
        header.locator("button").click()
        values = page.evaluate("""() => Array.from(document.querySelectorAll('#pairs tbody tr'))
            .map(r => r.cells[7].getAttribute('data-v'))""")
        present = [float(v) for v in values if v]
        assert present == sorted(present, reverse=True)
        # rows moved on their own keep their own name cells (the pair's rowspan was split)
        cells = page.evaluate("""() => Array.from(document.querySelectorAll('#pairs tbody tr'))
            .map(r => [r.cells.length, r.cells[0].textContent, r.cells[1].textContent, r.cells[2].textContent])""")
        assert {c[0] for c in cells} == {10}
        assert sorted(tuple(c[1:]) for c in cells) == sorted(
            (r["x"], r["y"], r["measure"]) for r in report.pairs.records())
        # hover text of a heatmap cell carries the pair table's numbers
        names = hover["variables"]
        k = len(names)
        row = next(r for r in report.pairs.rows if r.measure == "pearson" and math.isfinite(r.estimate))
        svg = page.locator('[data-testid="heatmap-pearson"]')
        geo = {a: float(svg.get_attribute(f"data-map-{a}")) for a in ("left", "top", "side")}

        def cell_point(i, j):
            svg.scroll_into_view_if_needed()
            box = svg.bounding_box()
            view = page.evaluate("""() => { const v = document.querySelector('[data-testid="heatmap-pearson"]')
                .viewBox.baseVal; return [v.width, v.height]; }""")
            sx, sy = box["width"] / view[0], box["height"] / view[1]
            return (box["x"] + (geo["left"] + (j + 0.5) * geo["side"] / k) * sx,
                    box["y"] + (geo["top"] + (i + 0.5) * geo["side"] / k) * sy)

        page.mouse.move(*cell_point(names.index(row.x), names.index(row.y)))
        page.wait_for_function("() => !document.getElementById('map-tip').hidden")
        tip = page.locator("#map-tip").text_content().replace("\u2212", "-")
        assert f"{row.estimate:.3f}" in tip and f"n {row.n}" in tip, tip
        assert row.x in tip and row.y in tip
        # a click on a heatmap cell: the pair's card, or the pair's rows in the table
        carded = {frozenset(p) for p in page.evaluate(
            "Array.from(document.querySelectorAll('article.card')).map(c => [c.dataset.x, c.dataset.y])")}
        variables = report.pairs.variables
        pairs = [(a, b) for n, a in enumerate(variables) for b in variables[n + 1:]]
        with_card = next(p for p in pairs if frozenset(p) in carded)
        without = next((p for p in pairs if frozenset(p) not in carded), None)

        def click_cell(a, b):
            page.mouse.click(*cell_point(names.index(b), names.index(a)))

        card_top = """([a, b]) => Array.from(document.querySelectorAll('article.card'))
            .find(c => (c.dataset.x === a && c.dataset.y === b) || (c.dataset.x === b && c.dataset.y === a))
            .getBoundingClientRect().top"""
        click_cell(*with_card)
        # the smooth scroll ends with the card at the top of the window; wait for that state
        page.wait_for_function(f"(pair) => Math.abs(({card_top})(pair)) < 40", arg=list(with_card))
        top = page.evaluate(card_top, list(with_card))
        assert abs(top) < 40, top
        if without is not None:
            click_cell(*without)
            page.wait_for_function("() => !document.getElementById('pair-chosen').hidden")
            shown = page.evaluate("""() => Array.from(document.querySelectorAll('#pairs tbody tr'))
                .filter(r => !r.hidden).map(r => [r.cells[0].textContent, r.cells[1].textContent])""")
            expected = [[r["x"], r["y"]] for r in report.pairs.records()
                        if frozenset((r["x"], r["y"])) == frozenset(without)]
            assert sorted(shown) == sorted(expected) and shown
            page.locator("#pair-chosen button").click()
        page.fill("#pair-filter", "gust")
        shown = page.evaluate("""() => Array.from(document.querySelectorAll('#pairs tbody tr'))
            .filter(r => !r.hidden).length""")
        assert shown == sum(1 for r in report.pairs.records() if "gust" in r["x"] + r["y"])
        page.fill("#pair-filter", "")
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(SCREENSHOTS / "report.png"), full_page=True)
        page.emulate_media(media="print")
        assert page.evaluate("getComputedStyle(document.querySelector('.toc')).display") == "none"
        # figures scale to their printed width (SVG with a viewBox, no redraw needed)
        widths = page.evaluate("""() => { const d = document.querySelector('[data-map="heatmap-pearson"]');
            return [d.clientWidth, d.querySelector('svg').getBoundingClientRect().width]; }""")
        assert abs(widths[0] - widths[1]) <= 2, widths
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(SCREENSHOTS / "report-print.png"), full_page=False)
    finally:
        for context in browser.contexts:
            context.close()
    assert requests == [url], requests
    assert errors == []


@pytest.mark.browser
@needs_browser
def test_report_table_reads_with_javascript_disabled(report, browser):
    url = report.file.resolve().as_uri()
    requests: list[str] = []
    records = report.pairs.records()
    try:
        context = browser.new_context(java_script_enabled=False, viewport={"width": 1300, "height": 900})
        page = _offline_page(context, requests, url)
        page.goto(url)
        rows = page.locator("#pairs tbody tr")
        assert rows.count() == len(records)
        assert rows.first.is_visible()
        first = rows.first.locator("td").all_inner_texts()
        assert first[:3] == [records[0]["x"], records[0]["y"], records[0]["measure"]]
        assert page.locator("noscript").count() == 1
        assert page.evaluate("document.body.hasAttribute('data-figures')") is False
        page.locator("#pair-table").screenshot(path=str(SCREENSHOTS / "report-no-js-table.png"))
    finally:
        for context in browser.contexts:
            context.close()
    assert requests == [url]


@pytest.mark.browser
@needs_browser
def test_payload_names_run_no_script_in_chromium(payload_report, browser):
    table, _, text, path = payload_report
    url = path.resolve().as_uri()
    requests: list[str] = []
    dialogs: list[str] = []
    try:
        page = _offline_page(browser.new_context(), requests, url)
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.goto(url)
        page.wait_for_function("document.body.getAttribute('data-figures') !== null", timeout=60_000)
        assert page.evaluate("typeof window.__pwned") == "undefined"
        assert page.locator("img").count() == 0
        assert page.locator("b", has_text="bold").count() == 0
        shown = page.locator("#column-table tbody th").all_inner_texts()
        for name in PAYLOADS:
            assert any(name.replace("\u2028", "") in s.replace("\u2028", "").replace("\n", "")
                       for s in shown), name
        assert page.title() == "pairlens report · <script>alert(1)</script>.csv"
        # the maps draw the names as SVG text, escaped
        ticks = page.evaluate("""() => Array.from(document.querySelectorAll(
            '[data-testid="heatmap-pearson"] .col-labels text')).map(t => t.textContent)""")
        assert PAYLOADS[1] in ticks
    finally:
        for context in browser.contexts:
            context.close()
    assert dialogs == []
    assert requests == [url]
