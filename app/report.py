"""One self-contained HTML report of an analysis.

The file holds everything it shows: our stylesheet and script, every figure as
static SVG (written by :mod:`pairlens.figures`; no plotting library in the file,
so it stays small and opens at once) and the maps' hover numbers as escaped JSON. It makes no network request; a Content-Security-Policy
in the page forbids any, and only the page's own scripts (by hash) may run.
The pair table is rendered on the server, so it reads with scripts disabled.
"""

from __future__ import annotations

import base64
import hashlib
import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import datetime, timezone
from functools import lru_cache
from typing import Iterable

import numpy as np
from jinja2 import Environment, FileSystemLoader, StrictUndefined
from markupsafe import Markup

from . import __version__, config, formatting
from . import figures as plots
from .core.registry import MEASURES, get_measure, map_order_measure
from .formatting import embed_json
from .ordering import serial_note
from .methods import methods_content
from .pairs import full_detail
from .pairtable import PairRow, PairTable
from .plan import analysis_row_mask

__all__ = ["MAX_SCATTER_POINTS", "EXTREME_POINTS", "round_floats", "extreme_indices",
           "shared_rows", "simplify_polyline", "rank_pairs", "disagreement_contrasts",
           "map_hover", "difference_hover", "build_report"]

# A scatter of more points than this adds file size without showing more.
MAX_SCATTER_POINTS = 2000
# A random sample can drop the very rows that drive a pair, so the farthest
# points from the centre are always kept.
EXTREME_POINTS = 50
# Points drawn over all scatters together (each scatter draws the same sampled
# rows); with many columns in the cards each gets fewer rows.
POINT_VALUES_BUDGET = 24000
MIN_SCATTER_POINTS = 300
ELLIPSE_POINTS = 61
FIGURE_DIGITS = 6
HOVER_DIGITS = 4           # numbers only shown in hover text need fewer digits
TABLE_DIGITS = 6           # machine-readable values in the pair table (data-v)
TEMPLATE_NAME = "report.html"

# JSON and number helpers ----------------------------------------------------

def _round_number(v: float, digits: int):
    if not math.isfinite(v):
        return None
    return float(f"{v:.{digits}g}")


def round_floats(value, digits: int = FIGURE_DIGITS):
    """Copy of a JSON-like value with floats rounded to ``digits`` significant digits.

    NaN and infinities become ``None`` (JSON has neither); NumPy arrays and
    scalars become lists and Python numbers.
    """
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, (float, np.floating)):
        return _round_number(float(value), digits)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, np.ndarray):
        return round_floats(value.tolist(), digits)
    if isinstance(value, dict):
        return {str(k): round_floats(v, digits) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [round_floats(v, digits) for v in value]
    return value


def _finite(v) -> bool:
    return v is not None and isinstance(v, (int, float, np.floating)) and math.isfinite(float(v))


# Numbers are written by the one rule of :mod:`pairlens.formatting`, as on the web pages.
fmt_estimate = formatting.fmt_est
fmt_p = formatting.fmt_p
fmt_num = formatting.fmt


def _sort_value(v) -> str:
    """Value to 6 significant digits for the sort script and machine reading ('' when missing)."""
    if not _finite(v):
        return ""
    return f"{float(v):.{TABLE_DIGITS}g}"


# Points ---------------------------------------------------------------------

def _mahalanobis(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    pts = np.column_stack([x, y]).astype(float)
    centred = pts - pts.mean(axis=0)
    try:
        dist = np.einsum("ij,jk,ik->i", centred, np.linalg.inv(np.cov(centred, rowvar=False)), centred)
    except np.linalg.LinAlgError:
        sd = centred.std(axis=0)
        sd[sd == 0] = 1.0
        dist = ((centred / sd) ** 2).sum(axis=1)
    return np.nan_to_num(dist, nan=0.0)


def extreme_indices(x: np.ndarray, y: np.ndarray, k: int = EXTREME_POINTS) -> np.ndarray:
    """Positions of the ``k`` points farthest from the centre (Mahalanobis distance)."""
    if len(x) <= k or len(x) < 3:
        return np.arange(len(x))
    return np.sort(np.argsort(-_mahalanobis(x, y), kind="stable")[:k])


def shared_rows(n_rows: int, limit: int, seed: int) -> np.ndarray:
    """Sorted row numbers every scatter of a report draws from (all rows when few)."""
    if n_rows <= limit:
        return np.arange(n_rows)
    rng = np.random.default_rng([int(seed) & 0xFFFFFFFF, 0x5CA77E4])
    return np.sort(rng.choice(n_rows, size=limit, replace=False))


def simplify_polyline(xs: list, ys: list, rel_tol: float = 1e-9) -> tuple[list, list]:
    """Drop interior points that lie on the straight segment through their neighbours."""
    if len(xs) < 3:
        return list(xs), list(ys)
    x = np.asarray(xs, dtype=float)
    y = np.asarray(ys, dtype=float)
    scale = max(float(np.ptp(x)) * float(np.ptp(y)), 1e-300)
    keep = [0]
    for i in range(1, len(x) - 1):
        a = keep[-1]
        cross = (x[i] - x[a]) * (y[i + 1] - y[a]) - (y[i] - y[a]) * (x[i + 1] - x[a])
        if abs(cross) > rel_tol * scale:
            keep.append(i)
    keep.append(len(x) - 1)
    return x[keep].tolist(), y[keep].tolist()


# Rankings -------------------------------------------------------------------

@dataclass
class RankedPair:
    x: str
    y: str
    score: float
    rows: dict[str, PairRow]           # measure -> row of this pair
    card: str = ""                      # anchor of the pair's card


@dataclass
class Ranking:
    key: str
    title: str
    explanation: str
    score_label: str
    pairs: list[RankedPair] = field(default_factory=list)


def _row_index(pt: PairTable) -> dict[tuple[str, str], dict[str, PairRow]]:
    """(x, y) in variable order -> measure -> row; asymmetric measures keep the stronger direction."""
    order = {v: i for i, v in enumerate(pt.variables)}
    index: dict[tuple[str, str], dict[str, PairRow]] = {}
    for r in pt.rows:
        a, b = (r.x, r.y) if order[r.x] < order[r.y] else (r.y, r.x)
        slot = index.setdefault((a, b), {})
        held = slot.get(r.measure)
        if held is None or (_finite(r.estimate) and (not _finite(held.estimate) or r.estimate > held.estimate)):
            slot[r.measure] = r
    return index


def _strength(measure: str, value: float) -> float:
    return abs(value) if get_measure(measure).signed else value


def rank_pairs(pt: PairTable, measure: str, top_k: int) -> list[PairRow]:
    """The ``top_k`` rows of ``measure`` by strength (|estimate| for signed measures), then p-value."""
    rows = [r for r in pt.rows if r.measure == measure and _finite(r.estimate)]
    rows.sort(key=lambda r: (-_strength(measure, r.estimate), r.p_value if _finite(r.p_value) else 2.0))
    return rows[:top_k]


def disagreement_contrasts(measures: Iterable[str]) -> list[tuple[str, str, str, str]]:
    """The contrasts available for the chosen measures (registry ``contrast``): (a, b, kind, explanation)."""
    chosen = set(measures)
    found = [name for name in MEASURES if name in chosen and get_measure(name).contrast
             and get_measure(name).contrast[0] in chosen]
    # dependence a line misses entirely (a dependence measure's map) comes before rank-vs-linear gaps
    found.sort(key=lambda name: get_measure(name).role != "dependence")
    return [(name, *get_measure(name).contrast) for name in found]


def _contrast_score(a_row: PairRow, b_row: PairRow, kind: str) -> float:
    a, b = a_row.estimate, b_row.estimate
    if not (_finite(a) and _finite(b)):
        return math.nan
    if kind == "signed":  # a is unsigned (dcor), b signed
        return float(a - abs(b))
    return float(abs(a) - abs(b))


def _rankings(pt: PairTable, top_k: int) -> list[Ranking]:
    index = _row_index(pt)
    out: list[Ranking] = []
    for m in pt.measures:
        meas = get_measure(m)
        ranking = Ranking(key=m, title=f"Strongest by {meas.label}",
                          explanation=("largest |estimate|" if meas.signed else "largest estimate")
                          + ("; each direction x → y ranked separately" if not meas.symmetric else ""),
                          score_label=meas.label)
        for r in rank_pairs(pt, m, top_k):
            order = {v: i for i, v in enumerate(pt.variables)}
            key = (r.x, r.y) if order[r.x] < order[r.y] else (r.y, r.x)
            rows = dict(index.get(key, {}))
            rows[m] = r
            ranking.pairs.append(RankedPair(r.x, r.y, float(r.estimate), rows))
        out.append(ranking)
    for a, b, kind, explanation in disagreement_contrasts(pt.measures):
        la, lb = get_measure(a).label, get_measure(b).label
        label = f"{la} − |{lb}|" if kind == "signed" else f"|{la}| − |{lb}|"
        ranking = Ranking(key=f"{a}-{b}", title=f"Disagreement: {label}", explanation=explanation,
                          score_label=label)
        scored = []
        for (x, y), rows in index.items():
            if a in rows and b in rows:
                s = _contrast_score(rows[a], rows[b], kind)
                if math.isfinite(s):
                    scored.append((s, x, y, rows))
        # signed contrasts rank the largest excess; absolute ones the largest gap either way
        scored.sort(key=lambda t: -(t[0] if kind == "signed" else abs(t[0])))
        for s, x, y, rows in scored[:top_k]:
            ranking.pairs.append(RankedPair(x, y, s, dict(rows)))
        out.append(ranking)
    return out


# Hover data of the maps -------------------------------------------------------

def map_hover(pt: PairTable, measure: str, order: list[int]) -> dict:
    """The numbers a heatmap cell shows on hover, already written by the one formatter.

    Cells run row by row in plotted order: the upper triangle (i < j) of a symmetric
    measure, else every cell off the diagonal (None on it); rows hold x and columns y,
    as in :func:`pairlens.figures.heatmap_svg`.
    """
    idx = np.asarray(order, dtype=int)
    fields = {f: pt.matrix(measure, f)[np.ix_(idx, idx)] for f in ("estimate", "p_value", "q_value", "n")}
    k = len(idx)
    symmetric = get_measure(measure).symmetric
    cells = []
    for i in range(k):
        for j in range(i + 1 if symmetric else 0, k):
            if i == j:
                cells.append(None)
                continue
            n = fields["n"][i, j]
            cells.append([fmt_estimate(fields["estimate"][i, j]), fmt_p(fields["p_value"][i, j]),
                          fmt_p(fields["q_value"][i, j]), int(n) if math.isfinite(n) else "–"])
    meas = get_measure(measure)
    return {"label": meas.label, "symmetric": meas.symmetric, "cells": cells}


def difference_hover(pt: PairTable, a: str, b: str, order: list[int]) -> dict:
    """Hover numbers of the difference map: both estimates and their difference per cell."""
    idx = np.asarray(order, dtype=int)
    ma, mb = pt.matrix(a), pt.matrix(b)
    if not get_measure(a).symmetric:
        ma = np.fmax(ma, ma.T)
    if not get_measure(b).symmetric:
        mb = np.fmax(mb, mb.T)
    ma, mb = ma[np.ix_(idx, idx)], mb[np.ix_(idx, idx)]
    k = len(idx)
    cells = [[fmt_estimate(ma[i, j]), fmt_estimate(mb[i, j]), fmt_estimate(ma[i, j] - abs(mb[i, j]))]
             for i in range(k) for j in range(i + 1, k)]  # the upper triangle, as map_hover
    return {"label": f"{get_measure(a).label} − |{get_measure(b).label}|", "difference": True,
            "labels": [get_measure(a).label, get_measure(b).label], "symmetric": True, "cells": cells}


# Pair cards -----------------------------------------------------------------

@dataclass
class PairCard:
    anchor: str
    x: str
    y: str
    badges: list[str]
    rows: list[dict]                    # measure rows for the card's table
    detail: dict | None = None          # pair_detail output without the points
    figure_id: str = ""
    svg: str = ""                       # the scatter as static SVG markup
    points_note: str = ""
    note: str = ""
    gaussian: dict | None = None        # display-ready summary of the Gaussian fit
    residual_svg: str = ""              # --given: the residual scatter as static SVG
    residual_note: str = ""


def _card_rows(pt: PairTable, rows: dict[str, PairRow]) -> list[dict]:
    out = []
    for m in pt.measures:
        r = rows.get(m)
        if r is None:
            continue
        meas = get_measure(m)
        out.append({
            "measure": m,
            "label": meas.label if meas.symmetric else f"{meas.label} ({r.x} → {r.y})",
            "estimate": fmt_estimate(r.estimate),
            "interval": (f"[{fmt_estimate(r.ci_low)}, {fmt_estimate(r.ci_high)}]"
                         if _finite(r.ci_low) and _finite(r.ci_high) else "–"),
            "p": fmt_p(r.p_value), "q": fmt_p(r.q_value), "n": int(r.n), "method": r.method,
            "note": r.note,
            "significant": _finite(r.q_value) and r.q_value < config.SIGNIFICANCE_LEVEL,
        })
    return out


def _gaussian_summary(detail: dict) -> dict:
    g = detail.get("gaussian") or {}
    observed = {m: v.get("estimate") for m, v in (detail.get("measures") or {}).items()}
    implied = []
    all_implied = g.get("implied") or {}
    for name, value in all_implied.items():
        if name not in observed:  # only measures this analysis computed have an observed value
            continue
        obs = observed.get(name)
        implied.append({"name": get_measure(name).label if name in MEASURES else name,
                        "implied": fmt_estimate(value), "observed": fmt_estimate(obs),
                        "gap": fmt_estimate(obs - value) if _finite(obs) and _finite(value) else "–"})
    cond = g.get("conditional") or {}
    normality = g.get("normality") or {}
    marg = g.get("marginal_normality") or {}
    return {
        "rho": fmt_estimate(g.get("rho")),
        "mean": [fmt_num(v) for v in (g.get("mean") or [None, None])],
        "slope": fmt_num(cond.get("slope")), "intercept": fmt_num(cond.get("intercept")),
        "residual_sd": fmt_num(cond.get("residual_sd")),
        "normality_stat": fmt_num(normality.get("statistic")), "normality_p": fmt_p(normality.get("p_value")),
        "normality_rejected": _finite(normality.get("p_value")) and normality["p_value"] < config.SIGNIFICANCE_LEVEL,
        "marginal": [{"axis": detail["x"] if k == "x" else detail["y"] if k == "y" else k,
                      "test": v.get("test", ""), "p": fmt_p(v.get("p_value"))} for k, v in marg.items()],
        "implied": implied,
        "mi": fmt_num(all_implied["mi"]) if _finite(all_implied.get("mi")) else "",
        "note": g.get("note", ""),
    }


def _residual_card(card: "PairCard", typed, seed: int) -> None:
    """--given: the card's residual scatter (x given Z against y given Z), at most MAX_SCATTER_POINTS points."""
    if typed.given is None or not typed.given.get("residuals"):
        return
    res = typed.given["residuals"]
    n = len(res["x"])
    keep = np.arange(n)
    if n > MAX_SCATTER_POINTS:
        keep = np.sort(np.random.default_rng(seed).choice(n, MAX_SCATTER_POINTS, replace=False))
    shown = {"x": np.asarray(res["x"])[keep].tolist(), "y": np.asarray(res["y"])[keep].tolist()}
    fig = plots.residual_figure({"x": card.x, "y": card.y, "given": {**typed.given, "residuals": shown}})
    if fig is None:
        return
    card.residual_svg = Markup(plots.pair_svg(fig, testid="report-residual-scatter"))
    card.residual_note = (f"Residuals of {card.x} and {card.y} given {', '.join(typed.given['columns'])} "
                          f"(least squares; {'; '.join(typed.given['how'])}), {len(keep)} of {n} rows drawn.")


def _pair_cards(table, pt: PairTable, rankings: list[Ranking],
                workers: int = 1) -> tuple[list[PairCard], int]:
    order = {v: i for i, v in enumerate(pt.variables)}
    columns = set(table.columns)
    cards: dict[tuple[str, str], PairCard] = {}
    for ranking in rankings:
        for place, rp in enumerate(ranking.pairs, start=1):
            # symmetric pairs share a card whichever way round they were ranked
            key = (rp.x, rp.y) if order[rp.x] < order[rp.y] else (rp.y, rp.x)
            card = cards.get(key)
            if card is None:
                card = PairCard(anchor=f"pair-{len(cards) + 1}", x=key[0], y=key[1], badges=[],
                                rows=_card_rows(pt, rp.rows))
                cards[key] = card
            card.badges.append(f"#{place} {ranking.score_label}")
            rp.card = card.anchor
    drawable = [(x, y) for (x, y) in cards if x in columns and y in columns]
    n_columns = len({c for pair in drawable for c in pair})
    limit = max(MIN_SCATTER_POINTS, min(MAX_SCATTER_POINTS, POINT_VALUES_BUDGET // max(n_columns, 1)))
    sample = shared_rows(table.data.shape[0], limit, pt.settings.seed)
    row_mask = analysis_row_mask(table.data, table.columns, pt.settings)

    def detail_of(pair):
        # the pair-detail service: the rows, measures, fit and verdict the pair view shows
        from .kinds import levels_of

        return full_detail(table.data, table.columns, pair[0], pair[1], pt.settings, pt, row_mask,
                           levels=levels_of(table, pt.settings))

    # The Gaussian fit's normality test is O(n^2) and NumPy releases the GIL in it,
    # so a few threads shorten the wait; results keep the card order.
    with ThreadPoolExecutor(max_workers=max(1, min(workers, len(drawable) or 1))) as pool:
        details = dict(zip(drawable, pool.map(detail_of, drawable)))
    for (x, y), card in cards.items():
        if x not in columns or y not in columns:
            card.note = "A column group: the report draws scatters for single columns only."
            continue
        typed = details[(x, y)]
        detail = typed.to_json()
        if detail.get("categorical"):  # a categorical side: boxes with means, or the shaded contingency table
            from . import figures_categorical as fc

            card.figure_id = f"fig-{card.anchor}"
            shown = {"x": typed.rows.x.tolist(), "y": typed.rows.y.tolist()}
            card.svg = Markup(fc.group_svg({**detail, "points": shown}, seed=pt.settings.seed)
                              if detail["categorical"]["view"] == "groups" else fc.contingency_svg(detail))
            card.points_note = f"All {typed.rows.n} rows. " + typed.rows.describe()
            card.detail = detail
            continue
        prow, px, py = typed.rows.rows, typed.rows.x, typed.rows.y  # the rows the measures and the fit use
        total = len(px)
        in_sample = np.isin(prow, sample)
        far = extreme_indices(px, py)
        shown_pos = np.union1d(np.flatnonzero(in_sample), far)
        shown = {"x": px[shown_pos].tolist(), "y": py[shown_pos].tolist(), "rows": prow[shown_pos].tolist()}
        if len(shown_pos) < total:
            card.points_note = (f"Showing {len(shown_pos)} of {total} points: the rows of a random sample of "
                                f"{len(sample)} shared by every scatter in this report (seed "
                                f"{pt.settings.seed}), plus the {len(far)} points of this pair farthest from "
                                f"its centre.")
        else:
            card.points_note = f"All {total} points are drawn."
        card.points_note += " " + typed.rows.describe()
        card.figure_id = f"fig-{card.anchor}"
        fig = plots.pair_figure({**detail, "points": shown}, density_threshold=total + 1)
        if len(shown_pos) < total:
            fig["data"][0]["name"] = f"rows ({len(shown_pos)} of {total} shown)"
        card.svg = Markup(plots.pair_svg(fig))
        card.detail = detail
        _residual_card(card, typed, pt.settings.seed)
    return list(cards.values()), len(sample)


# Fingerprint and table -----------------------------------------------------

def _fingerprint(table, pt: PairTable) -> dict:
    used = [c for c in table.info if c.used]
    left_out = [c for c in table.info if not c.used]
    return {
        "name": table.name, "sha256": table.sha256, "n_rows": table.n_rows,
        "n_columns": len(table.info), "used": used, "left_out": left_out,
        "variables": pt.variables, "notes": list(table.notes),
        "missing_total": sum(c.missing for c in table.info),
    }


def _is_demo(table) -> bool:
    """True when the data are the invented vineyard demo file shipped with pairlens."""
    try:
        return table.sha256 == hashlib.sha256(config.DEMO_FILE.read_bytes()).hexdigest()
    except OSError:
        return False


def _table_rows(pt: PairTable) -> list[dict]:
    out = []
    for r in pt.rows:
        out.append({
            "x": r.x, "y": r.y, "measure": r.measure,
            "cells": [(_sort_value(v), text) for v, text in (
                (r.estimate, fmt_estimate(r.estimate)), (r.ci_low, fmt_estimate(r.ci_low)),
                (r.ci_high, fmt_estimate(r.ci_high)), (r.p_value, fmt_p(r.p_value)),
                (r.q_value, fmt_p(r.q_value)))],
            "n": int(r.n), "note": r.note,
            "significant": _finite(r.q_value) and r.q_value < config.SIGNIFICANCE_LEVEL,
            "span": 1,
        })
    # Consecutive rows of one (x, y) share their name cells (rowspan): the static
    # table reads grouped by pair, and long names are not repeated per measure.
    # The report script splits the spans again before it sorts.
    start = 0
    for k in range(1, len(out) + 1):
        if k == len(out) or (out[k]["x"], out[k]["y"]) != (out[start]["x"], out[start]["y"]):
            out[start]["span"] = k - start
            for j in range(start + 1, k):
                out[j]["span"] = 0
            start = k
    return out


def _summary(pt: PairTable) -> list[dict]:
    out = []
    for m in pt.measures:
        rows = [r for r in pt.rows if r.measure == m]
        defined = [r for r in rows if _finite(r.p_value)]
        sig = [r for r in defined if _finite(r.q_value) and r.q_value < config.SIGNIFICANCE_LEVEL]
        out.append({"measure": m, "label": get_measure(m).label, "rows": len(rows), "defined": len(defined),
                    "significant": len(sig)})
    return out


# Assets ---------------------------------------------------------------------

def _asset(name: str) -> str:
    path = config.STATIC_DIR / name
    return _inline_safe(path.read_text(encoding="utf-8"), "style" if name.endswith(".css") else "script", name)


def _inline_safe(text: str, element: str, name: str) -> str:
    # The HTML parser turns CR LF into LF before a CSP hash is checked.
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    if f"</{element}" in text.lower() or "<!--" in text:
        raise ValueError(f"{name} contains '</{element}' or '<!--' and cannot be inlined")
    return text


def _csp_hash(text: str) -> str:
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode("ascii") + "'"


@lru_cache(maxsize=1)
def _environment() -> Environment:
    env = Environment(loader=FileSystemLoader(str(config.TEMPLATES_DIR)), autoescape=True,
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    return env


# Public ---------------------------------------------------------------------

def build_report(table, pair_table: PairTable, *, command: str, generated_at: datetime | None = None,
                 top_k: int = 5, workers: int | None = None) -> str:
    """The report as one HTML string.

    Parameters
    ----------
    table : pairlens.ingest.Table
        The data the analysis ran on (fingerprint, columns, values for scatters).
    pair_table : pairlens.engine.PairTable
        Result of :func:`pairlens.engine.run_analysis` on ``table``.
    command : str
        The ``pairlens report ...`` command line that reproduces the file.
    generated_at : datetime, optional
        Time stamp printed in the report (default: now, UTC).
    top_k : int
        Pairs listed per ranking.
    workers : int, optional
        Threads for the per-pair Gaussian fits (default: up to 4, one per core).
    """
    generated_at = generated_at or datetime.now(timezone.utc)
    if generated_at.tzinfo is None:
        generated_at = generated_at.replace(tzinfo=timezone.utc)
    settings = pair_table.settings

    order_measure = map_order_measure(pair_table.measures)
    order = plots.cluster_order(pair_table, order_measure)
    # what the report script needs for hover and click on a map; the maps themselves are SVG
    hover: dict = {"variables": [pair_table.variables[i] for i in order], "maps": {}}
    heatmaps = []
    for m in pair_table.measures:
        fid = f"heatmap-{m}"
        meas = get_measure(m)
        hover["maps"][fid] = map_hover(pair_table, m, order)
        heatmaps.append({"id": fid, "measure": m, "label": meas.label, "symmetric": meas.symmetric,
                         "range": f"[{meas.lower:g}, {meas.upper:g}]",
                         "svg": Markup(plots.heatmap_svg(pair_table, m, order=order))})
    contrasts = []
    for a, b, kind, explanation in disagreement_contrasts(pair_table.measures):
        if kind != "signed":
            continue
        fid = f"difference-{a}-{b}"
        hover["maps"][fid] = difference_hover(pair_table, a, b, order)
        contrasts.append({"id": fid, "label": f"{get_measure(a).label} − |{get_measure(b).label}|",
                          "explanation": explanation,
                          "svg": Markup(plots.difference_svg(pair_table, a, b, order=order))})

    rankings = _rankings(pair_table, top_k)
    if workers is None:
        workers = min(4, os.cpu_count() or 1)
    cards, scatter_limit = _pair_cards(table, pair_table, rankings, workers)
    cards_by_anchor = {c.anchor: c for c in cards}
    for c in cards:
        if c.detail is not None:
            c.gaussian = _gaussian_summary(c.detail)

    sort_js = _asset("report.js")
    csp = ("default-src 'none'; "
           f"script-src {_csp_hash(sort_js)}; "
           "style-src 'unsafe-inline'; img-src data: blob:; font-src data:; connect-src 'none'; "
           "form-action 'none'; base-uri 'none'")
    stamp = generated_at.astimezone(timezone.utc)
    context = {
        "version": __version__,
        "title_name": table.name,
        "generated_iso": stamp.isoformat(timespec="seconds"),
        "generated_text": stamp.strftime("%Y-%m-%d %H:%M UTC"),
        "csp": csp,
        "css": Markup(_asset("report.css")),
        "sort_js": Markup(sort_js),
        "hover_json": embed_json(hover),
        "fingerprint": _fingerprint(table, pair_table),
        "serial_note": serial_note(table.data, table.columns, settings),
        "is_demo": _is_demo(table),
        "settings": settings,
        "measure_labels": [(m, get_measure(m).label) for m in settings.table_measures()],
        "command": command,
        "seconds": pair_table.seconds,
        "summary": _summary(pair_table),
        "n_pairs": len(pair_table.variables) * (len(pair_table.variables) - 1) // 2,
        "order_measure": get_measure(order_measure).label,
        "heatmaps": heatmaps,
        "contrasts": contrasts,
        "rankings": rankings,
        "cards": cards,
        "cards_by_anchor": cards_by_anchor,
        "rows": _table_rows(pair_table),
        "methods": methods_content(settings=settings, pair_table=pair_table),
        "alpha": config.SIGNIFICANCE_LEVEL,
        "max_points": scatter_limit,
        "top_k": top_k,
        "fmt_estimate": fmt_estimate,
        "fmt_p": fmt_p,
        "fmt_num": fmt_num,
    }
    return _environment().get_template(TEMPLATE_NAME).render(**context)
