"""Plotly figure dicts for heatmaps and the pair view, as pure functions.

Nothing here touches HTTP, SQLite or files: a figure is built from a
:class:`pairlens.pairtable.PairTable` or from the dict of :func:`pairlens.pairs.pair_detail`
and returned as a plain ``{"data": [...], "layout": {...}}`` dict that
``Plotly.newPlot(div, fig.data, fig.layout)`` accepts. The web pages and the
HTML report both use these builders (this module sits below both), so the two
always look alike.

Colour scales (both published as perceptually uniform and colour-blind safe):

* signed measures: cmocean "balance", Thyng, K.M., Greene, C.A., Hetland, R.D.,
  Zimmerle, H.M. & DiMarco, S.F. (2016) True colors of oceanography.
  Oceanography 29(3):9-13, doi:10.5670/oceanog.2016.66 (the 12 stops shipped
  in ``plotly.colors.cmocean``), centred on zero;
* measures in [0, 1]: cividis, Nunez, J.R., Anderton, C.R. & Renslow, R.S.
  (2018) Optimizing colormaps with consideration for color vision deficiency.
  PLoS ONE 13(7):e0199239, doi:10.1371/journal.pone.0199239.
"""

from __future__ import annotations

import html
import math
from typing import Sequence

import numpy as np

from . import config
from .core.registry import MEASURES, get_measure

__all__ = [
    "SIGNED_SCALE",
    "UNSIGNED_SCALE",
    "plot_text",
    "colour_range",
    "cluster_order",
    "heatmap_figure",
    "difference_figure",
    "pair_figure",
    "rank_figure",
    "heatmap_svg",
    "difference_svg",
    "pair_svg",
]


def _stops(colours: Sequence[str]) -> list[list]:
    k = len(colours)
    return [[round(i / (k - 1), 4), c] for i, c in enumerate(colours)]


try:  # the stops ship with plotly; copied here so the module works without plotly's Python side
    from plotly.colors import cmocean as _cmocean

    SIGNED_SCALE: list[list] = _stops(_cmocean.balance)
except Exception:  # pragma: no cover - plotly is a dependency
    SIGNED_SCALE = _stops(["rgb(23, 28, 66)", "rgb(41, 58, 143)", "rgb(11, 102, 189)", "rgb(69, 144, 185)",
                           "rgb(142, 181, 194)", "rgb(210, 216, 219)", "rgb(230, 210, 204)",
                           "rgb(213, 157, 137)", "rgb(196, 101, 72)", "rgb(172, 43, 36)",
                           "rgb(120, 14, 40)", "rgb(60, 9, 17)"])
UNSIGNED_SCALE = "Cividis"

_FONT = "system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif"
_INK = "#1f2a30"
_POINT = "rgba(31, 78, 96, 0.55)"
_FIT = "#b4472b"
_BAND = "rgba(180, 71, 43, 0.14)"


def plot_text(text: str) -> str:
    """Text for a Plotly label: Plotly reads a small HTML subset, so escape it to show as typed.

    A column name goes into hover templates too, where ``%{...}`` would be
    replaced by a value; the brace becomes an entity, which Plotly shows as "{".
    """
    return html.escape(str(text), quote=False).replace("%{", "%&#123;")


def _fmt(v, digits: int = 3) -> str:
    if v is None:
        return "–"
    v = float(v)
    if not math.isfinite(v):
        return "–"
    if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e5):
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}g}" if abs(v) >= 1 else f"{v:.{digits}f}"


def _num(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _nan_to_none(a: np.ndarray) -> list:
    return [[(float(v) if math.isfinite(v) else None) for v in row] for row in np.asarray(a, dtype=float)]


def _round_significant(a: np.ndarray, digits: int) -> np.ndarray:
    """Round to ``digits`` significant digits with exact powers of ten, so repr() stays short."""
    with np.errstate(divide="ignore", invalid="ignore"):
        magnitude = np.floor(np.log10(np.abs(a)))
    magnitude = np.where(np.isfinite(magnitude), magnitude, 0.0)
    k = (digits - 1 - magnitude).astype(int)
    k = np.clip(k, -300, 300)
    up = k >= 0
    # 10.0**k is exact for 0 <= k <= 22; dividing an integer-valued float by it rounds once.
    scale_up = np.power(10.0, np.where(up, k, 0))
    scale_down = np.power(10.0, np.where(up, 0, -k))
    return np.where(up, np.round(a * scale_up) / scale_up, np.round(a / scale_down) * scale_down)


def _compact(a: np.ndarray, digits: int = 6) -> list:
    """Nested lists of ``a`` rounded to ``digits`` significant digits (short JSON), NaN as None."""
    a = np.asarray(a, dtype=float)
    rounded = _round_significant(a, digits)
    out = rounded.tolist()
    # Missing cells are few (the diagonal, undefined pairs): patch them one by one.
    for index in zip(*np.nonzero(~np.isfinite(rounded))):
        target = out
        for i in index[:-1]:
            target = target[i]
        target[index[-1]] = None
    return out


def colour_range(measure: str) -> tuple[object, float, float]:
    """Colour scale and (zmin, zmax) for a measure, from its registry range and sign."""
    m = get_measure(measure)
    if m.signed:
        bound = max(abs(m.lower), abs(m.upper))
        return SIGNED_SCALE, -bound, bound
    return UNSIGNED_SCALE, m.lower, m.upper


def cluster_order(table, measure: str, method: str = "average") -> list[int]:
    """Leaf order of a hierarchical clustering of the variables on 1 - |estimate| of ``measure``.

    Missing estimates count as no association (distance 1). Returns indices into
    ``table.variables``.
    """
    from scipy.cluster.hierarchy import leaves_list, linkage
    from scipy.spatial.distance import squareform

    k = len(table.variables)
    if k < 3:
        return list(range(k))
    est = table.matrix(measure)
    if not get_measure(measure).symmetric:  # xi: use the stronger direction of each pair
        est = np.fmax(est, est.T)
    dist = 1.0 - np.clip(np.abs(np.nan_to_num(est, nan=0.0)), 0.0, 1.0)
    dist = (dist + dist.T) / 2.0
    np.fill_diagonal(dist, 0.0)
    z = linkage(squareform(dist, checks=False), method=method, optimal_ordering=k <= 400)
    return [int(i) for i in leaves_list(z)]


def _axis_font_size(k: int) -> int:
    return int(max(6, min(12, 360 / max(k, 1))))


def _matrix_layout(labels: list[str], title: str) -> dict:
    k = len(labels)
    size = _axis_font_size(k)
    axis = dict(type="category", tickfont=dict(size=size), automargin=True, showgrid=False,
                ticks="", constrain="domain")
    return {
        "title": {"text": plot_text(title), "x": 0.02, "font": {"size": 14}},
        "font": {"family": _FONT, "color": _INK, "size": 11},
        "margin": {"l": 10, "r": 10, "t": 36, "b": 10},
        # Explicit ranges: the significance dots would otherwise pad the autorange.
        "xaxis": {**axis, "tickangle": -60 if k > 8 else -30, "side": "bottom", "range": [-0.5, k - 0.5]},
        "yaxis": {**axis, "range": [k - 0.5, -0.5], "scaleanchor": "x"},
        "paper_bgcolor": "rgba(0,0,0,0)",
        "plot_bgcolor": "#eef1f2",
        "hoverlabel": {"font": {"family": _FONT, "size": 12}},
        "showlegend": False,
        "dragmode": "zoom",
    }


def _significance_trace(qmat: np.ndarray, labels: list[str], alpha: float) -> dict:
    xs, ys = [], []
    k = len(labels)
    for i in range(k):
        for j in range(k):
            q = qmat[i, j]
            if math.isfinite(q) and q < alpha:
                xs.append(labels[j])
                ys.append(labels[i])
    return {
        "type": "scatter", "mode": "markers", "x": xs, "y": ys, "hoverinfo": "skip",
        "marker": {"symbol": "circle", "size": max(2, min(7, 240 // max(k, 1))), "color": "rgba(255,255,255,0.9)",
                   "line": {"color": "rgba(20,20,20,0.8)", "width": 0.6}},
        "name": f"q < {alpha:g}", "showlegend": False,
    }


def heatmap_figure(table, measure: str, *, order: Sequence[int] | None = None,
                   alpha: float = config.SIGNIFICANCE_LEVEL, title: str | None = None,
                   hover: str = "text") -> dict:
    """Heatmap of one measure over all pairs of ``table`` (a PairTable).

    Parameters
    ----------
    table : pairlens.engine.PairTable
    measure : str
        A measure in ``table.measures``.
    order : sequence of int, optional
        Order of the variables (indices into ``table.variables``); input order by default.
        Use the same order for every heatmap on a page.
    alpha : float
        Cells whose adjusted q-value is below ``alpha`` get a dot.
    title : str, optional
    hover : {"text", "template"}
        "text": one HTML string per cell (estimate, interval, p, q, n, note).
        "template": the numbers as ``customdata`` (6 significant digits) and a
        Plotly hovertemplate; a third of the size and much faster for 100 columns.

    Returns
    -------
    dict
        ``{"data", "layout"}``; ``layout["meta"]["variables"]`` lists the variable
        names in plotted order, so a click (``points[0].pointNumber = [row, col]``)
        maps back to ``(x = variables[col], y = variables[row])``.
    """
    if hover not in ("text", "template"):
        raise ValueError(f"hover must be 'text' or 'template', not {hover!r}")
    k = len(table.variables)
    order = list(range(k)) if order is None else [int(i) for i in order]
    names = [table.variables[i] for i in order]
    labels = [plot_text(n) for n in names]
    idx = np.asarray(order, dtype=int)
    fields = {f: table.matrix(measure, f)[np.ix_(idx, idx)] for f in
              ("estimate", "ci_low", "ci_high", "p_value", "q_value", "n")}
    if hover == "template":
        return _template_heatmap(table, measure, names, labels, fields, alpha, title)
    notes: dict[tuple[int, int], str] = {}
    if any(r.note for r in table.rows if r.measure == measure):
        pos = {v: p for p, v in enumerate(names)}
        sym = get_measure(measure).symmetric
        for r in table.rows:
            if r.measure == measure and r.note:
                i, j = pos.get(r.x), pos.get(r.y)
                if i is None or j is None:
                    continue
                notes[(i, j)] = r.note
                if sym:
                    notes[(j, i)] = r.note
    m = get_measure(measure)
    text = []
    for i in range(k):
        row = []
        for j in range(k):
            if i == j:
                row.append("")
                continue
            est = fields["estimate"][i, j]
            if m.symmetric:
                head = f"<b>{labels[j]}</b> × <b>{labels[i]}</b>"
            else:  # matrix rows hold x, columns y, for the x -> y direction
                head = f"<b>{labels[i]}</b> → <b>{labels[j]}</b>"
            body = f"{m.label} {_fmt(est)}"
            lo, hi = fields["ci_low"][i, j], fields["ci_high"][i, j]
            if math.isfinite(lo) and math.isfinite(hi):
                body += f" [{_fmt(lo)}, {_fmt(hi)}]"
            n = fields["n"][i, j]
            body += (f"<br>p {_fmt(fields['p_value'][i, j])}  q {_fmt(fields['q_value'][i, j])}"
                     f"  n {int(n) if math.isfinite(n) else '–'}")
            note = notes.get((i, j))
            if note:
                body += "<br>" + plot_text(note)
            row.append(head + "<br>" + body)
        text.append(row)
    hover = {"z": _nan_to_none(fields["estimate"]), "text": text, "hovertemplate": "%{text}<extra></extra>"}
    return _matrix_figure(measure, names, labels, hover, fields["q_value"], alpha, title)


def _matrix_figure(measure, names, labels, hover: dict, q_values, alpha, title) -> dict:
    """The heatmap of one measure with its significance dots; ``hover`` carries z and the hover data."""
    m = get_measure(measure)
    scale, zmin, zmax = colour_range(measure)
    k = len(names)
    heat = {
        "type": "heatmap", "x": labels, "y": labels, **hover,
        "colorscale": scale, "zmin": zmin, "zmax": zmax,
        "xgap": 1 if k <= 40 else 0, "ygap": 1 if k <= 40 else 0, "hoverongaps": False,
        "colorbar": {"thickness": 10, "len": 0.8, "outlinewidth": 0, "tickfont": {"size": 10}},
        "name": measure,
    }
    layout = _matrix_layout(labels, title or m.label)
    if not m.symmetric:
        layout["yaxis"]["title"] = {"text": "from (row)", "font": {"size": 10}}
        layout["xaxis"]["title"] = {"text": "to (column)", "font": {"size": 10}}
    layout["meta"] = {"variables": names, "measure": measure, "alpha": alpha}
    return {"data": [heat, _significance_trace(q_values, labels, alpha)], "layout": layout}


def _template_heatmap(table, measure, names, labels, fields, alpha, title) -> dict:
    m = get_measure(measure)
    has_interval = bool(m.interval)
    stack_fields = (("ci_low", "ci_high") if has_interval else ()) + ("p_value", "q_value", "n")
    custom = np.stack([fields[f] for f in stack_fields], axis=-1)
    head = "<b>%{x}</b> × <b>%{y}</b>" if m.symmetric else "<b>%{y}</b> → <b>%{x}</b>"
    body = f"{plot_text(m.label)} %{{z:.4g}}"
    k0 = 0
    if has_interval:
        body += " [%{customdata[0]:.4g}, %{customdata[1]:.4g}]"
        k0 = 2
    body += (f"<br>p %{{customdata[{k0}]:.3g}}  q %{{customdata[{k0 + 1}]:.3g}}"
             f"  n %{{customdata[{k0 + 2}]}}")
    hover = {"z": _compact(fields["estimate"]), "customdata": _compact(custom),
             "hovertemplate": head + "<br>" + body + "<extra></extra>"}
    return _matrix_figure(measure, names, labels, hover, fields["q_value"], alpha, title)


def difference_figure(table, measure_a: str, measure_b: str, *, order: Sequence[int] | None = None,
                      absolute: bool = True, top: int = 15, hover: str = "text") -> dict:
    """Heatmap of ``measure_a - |measure_b|`` (or without the absolute value) plus the top pairs.

    With ``measure_a = "dcor"`` and ``measure_b = "pearson"`` the bright cells are pairs
    whose dependence the linear coefficient misses (curved, U-shaped, mixtures).

    Returns
    -------
    dict
        A figure dict; ``layout["meta"]["top"]`` lists up to ``top`` pairs
        ``{"x", "y", "difference", "a", "b"}`` sorted by the difference, largest first.
    """
    k = len(table.variables)
    order = list(range(k)) if order is None else [int(i) for i in order]
    names = [table.variables[i] for i in order]
    labels = [plot_text(n) for n in names]
    idx = np.asarray(order, dtype=int)
    a = table.matrix(measure_a)
    b = table.matrix(measure_b)
    if not get_measure(measure_a).symmetric:
        a = np.fmax(a, a.T)
    if not get_measure(measure_b).symmetric:
        b = np.fmax(b, b.T)
    bb = np.abs(b) if absolute else b
    diff = (a - bb)[np.ix_(idx, idx)]
    a_o, b_o = a[np.ix_(idx, idx)], b[np.ix_(idx, idx)]
    la, lb = get_measure(measure_a).label, get_measure(measure_b).label
    if hover == "template":
        text = None
    else:
        text = [["" if i == j else
                 f"<b>{labels[j]}</b> × <b>{labels[i]}</b><br>{la} {_fmt(a_o[i, j])}  {lb} {_fmt(b_o[i, j])}"
                 f"<br>difference {_fmt(diff[i, j])}" for j in range(k)] for i in range(k)]
    finite = np.abs(diff[np.isfinite(diff)])
    bound = float(max(0.05, finite.max() if finite.size else 1.0))
    top_pairs = []
    for i in range(k):
        for j in range(i + 1, k):
            d = diff[i, j]
            if math.isfinite(d):
                top_pairs.append({"x": names[i], "y": names[j], "difference": float(d),
                                  "a": _num(a_o[i, j]), "b": _num(b_o[i, j])})
    top_pairs.sort(key=lambda t: -t["difference"])
    bar = "|" if absolute else ""
    title = f"{la} − {bar}{lb}{bar}"
    heat = {
        "type": "heatmap", "x": labels, "y": labels, "z": _compact(diff), "colorscale": SIGNED_SCALE,
        "zmin": -bound, "zmax": bound,
        "xgap": 1 if k <= 40 else 0, "ygap": 1 if k <= 40 else 0, "hoverongaps": False,
        "colorbar": {"thickness": 10, "len": 0.8, "outlinewidth": 0, "tickfont": {"size": 10}},
        "name": "difference",
    }
    if text is None:
        heat["customdata"] = _compact(np.stack([a_o, b_o], axis=-1))
        heat["hovertemplate"] = (f"<b>%{{x}}</b> × <b>%{{y}}</b><br>{plot_text(la)} %{{customdata[0]:.4g}}  "
                                 f"{plot_text(lb)} %{{customdata[1]:.4g}}<br>difference %{{z:.4g}}<extra></extra>")
    else:
        heat["text"] = text
        heat["hovertemplate"] = "%{text}<extra></extra>"
    layout = _matrix_layout(labels, title)
    layout["meta"] = {"variables": names, "measure": f"{measure_a}-{measure_b}", "top": top_pairs[:top]}
    return {"data": [heat], "layout": layout}


def _points(detail: dict) -> tuple[np.ndarray, np.ndarray]:
    pts = detail.get("points") or {}
    return np.asarray(pts.get("x", []), dtype=float), np.asarray(pts.get("y", []), dtype=float)


def pair_figure(detail: dict, *, density_threshold: int = config.SCATTER_DENSITY_THRESHOLD,
                band_z: float = 1.959963984540054) -> dict:
    """Scatter of one pair with the Gaussian picture and marginal histograms.

    Parameters
    ----------
    detail : dict
        :func:`pairlens.engine.pair_detail` output with ``include_points=True``.
    density_threshold : int
        Above this many points a 2-D density layer is shown and the points are
        hidden behind a legend toggle (still in trace 0).
    band_z : float
        Half-width of the conditional band in residual standard deviations
        (1.96: the central 95% of y given x under the fitted Gaussian).

    Returns
    -------
    dict
        Figure dict. Trace 0 is always the points (``customdata`` = row numbers
        in the file, 0-based, counting data rows only).
    """
    x, y = _points(detail)
    n = len(x)
    rows = (detail.get("points") or {}).get("rows", list(range(n)))
    xl, yl = plot_text(detail["x"]), plot_text(detail["y"])
    dense = n > density_threshold
    g = detail.get("gaussian") or {}
    traces: list[dict] = []
    traces.append({
        "type": "scattergl" if n > 5000 else "scatter", "mode": "markers", "x": x.tolist(), "y": y.tolist(),
        "customdata": list(rows), "name": f"rows (n = {n})",
        "marker": {"size": 4 if n > 2000 else 6, "color": _POINT, "line": {"width": 0}},
        "hovertemplate": f"row %{{customdata}}<br>{xl} %{{x}}<br>{yl} %{{y}}<extra></extra>",
        "visible": "legendonly" if dense else True,
    })
    if dense:
        traces.append({"type": "histogram2dcontour", "x": x.tolist(), "y": y.tolist(), "name": "density",
                       "colorscale": "Cividis", "reversescale": False, "showscale": False,
                       "contours": {"coloring": "heatmap", "showlines": False}, "ncontours": 20,
                       "hoverinfo": "skip"})
    # Gaussian ellipses.
    ellipses = g.get("ellipses") or {}
    for mass in sorted(ellipses, key=lambda s: float(s)):
        pts = np.asarray(ellipses[mass], dtype=float)
        if pts.ndim != 2 or len(pts) == 0:
            continue
        closed = np.vstack([pts, pts[:1]])
        traces.append({"type": "scatter", "mode": "lines", "x": closed[:, 0].tolist(), "y": closed[:, 1].tolist(),
                       "line": {"color": _FIT, "width": 1.2, "dash": "dot"}, "hoverinfo": "name",
                       "name": f"Gaussian {float(mass) * 100:g}% ellipse", "legendgroup": "ellipses"})
    cond = g.get("conditional") or {}
    slope, intercept, sd = cond.get("slope"), cond.get("intercept"), cond.get("residual_sd")
    if n >= 2 and slope is not None and intercept is not None:
        lo, hi = float(np.min(x)), float(np.max(x))
        pad = 0.02 * (hi - lo or 1.0)
        grid = np.linspace(lo - pad, hi + pad, 50)
        mean_line = intercept + slope * grid
        if sd is not None:
            upper = mean_line + band_z * sd
            lower = mean_line - band_z * sd
            traces.append({"type": "scatter", "mode": "lines", "x": np.concatenate([grid, grid[::-1]]).tolist(),
                           "y": np.concatenate([upper, lower[::-1]]).tolist(), "fill": "toself",
                           "fillcolor": _BAND, "line": {"width": 0}, "hoverinfo": "skip",
                           "name": "Gaussian 95% band of y given x"})
        traces.append({"type": "scatter", "mode": "lines", "x": grid.tolist(), "y": mean_line.tolist(),
                       "line": {"color": _FIT, "width": 2},
                       "name": "Gaussian conditional mean E[y | x]",
                       "hovertemplate": f"E[{yl} | {xl}=%{{x:.4g}}] = %{{y:.4g}}<extra></extra>"})
    bins = int(min(60, max(10, math.sqrt(max(n, 1)))))
    traces.append({"type": "histogram", "x": x.tolist(), "yaxis": "y2", "nbinsx": bins, "name": f"{xl} histogram",
                   "marker": {"color": "rgba(31, 78, 96, 0.6)"}, "showlegend": False, "hoverinfo": "y"})
    traces.append({"type": "histogram", "y": y.tolist(), "xaxis": "x2", "nbinsy": bins, "name": f"{yl} histogram",
                   "marker": {"color": "rgba(31, 78, 96, 0.6)"}, "showlegend": False, "hoverinfo": "x"})
    layout = {
        "font": {"family": _FONT, "color": _INK, "size": 11},
        "margin": {"l": 60, "r": 10, "t": 10, "b": 50},
        "xaxis": {"domain": [0, 0.8], "title": {"text": xl}, "zeroline": False, "showgrid": True,
                  "gridcolor": "#e3e7e9"},
        "yaxis": {"domain": [0, 0.8], "title": {"text": yl}, "zeroline": False, "showgrid": True,
                  "gridcolor": "#e3e7e9"},
        "xaxis2": {"domain": [0.83, 1], "showticklabels": False, "showgrid": False, "zeroline": False},
        "yaxis2": {"domain": [0.83, 1], "showticklabels": False, "showgrid": False, "zeroline": False},
        "bargap": 0.04,
        "legend": {"orientation": "h", "x": 0, "y": -0.16, "font": {"size": 10}},
        "paper_bgcolor": "rgba(0,0,0,0)", "plot_bgcolor": "#fbfcfc",
        "hovermode": "closest",
        "meta": {"x": detail["x"], "y": detail["y"], "n": n, "dense": dense},
    }
    return {"data": traces, "layout": layout}


def _midranks(v: np.ndarray) -> np.ndarray:
    from .core.rank import midranks

    return midranks(np.asarray(v, dtype=float)) if len(v) else v


def rank_figure(detail: dict) -> dict:
    """Rank-rank scatter (mid-ranks scaled to (0, 1]) of the pair's complete rows."""
    x, y = _points(detail)
    n = len(x)
    rx = _midranks(x) / max(n, 1)
    ry = _midranks(y) / max(n, 1)
    xl, yl = plot_text(detail["x"]), plot_text(detail["y"])
    trace = {"type": "scattergl" if n > 5000 else "scatter", "mode": "markers", "x": rx.tolist(),
             "y": ry.tolist(), "marker": {"size": 3 if n > 2000 else 5, "color": _POINT},
             "hovertemplate": f"rank {xl} %{{x:.3f}}<br>rank {yl} %{{y:.3f}}<extra></extra>",
             "name": "ranks"}
    layout = {
        "font": {"family": _FONT, "color": _INK, "size": 11},
        "margin": {"l": 50, "r": 10, "t": 10, "b": 45},
        "xaxis": {"title": {"text": f"rank of {xl} / n"}, "range": [0, 1.02], "zeroline": False,
                  "gridcolor": "#e3e7e9"},
        "yaxis": {"title": {"text": f"rank of {yl} / n"}, "range": [0, 1.02], "zeroline": False,
                  "gridcolor": "#e3e7e9"},
        "paper_bgcolor": "rgba(0,0,0,0)", "plot_bgcolor": "#fbfcfc", "showlegend": False,
    }
    return {"data": [trace], "layout": layout}


def _rounded_for_display(a: np.ndarray) -> np.ndarray:
    """What :func:`pairlens.formatting.fmt` would show, as numbers: 3 decimals, or 2 significant digits when small."""
    a = np.asarray(a, dtype=float)
    small = np.isfinite(a) & (np.abs(a) < 1e-3) & (a != 0)
    out = np.round(a, 3)
    if small.any():
        out[small] = _round_significant(a[small], 2)
    return out


def _flat(a: np.ndarray, symmetric: bool) -> list:
    """Row by row; only the upper triangle (i < j) when the matrix is symmetric."""
    v = a[np.triu_indices(a.shape[0], 1)] if symmetric else a.ravel()
    out = v.tolist()
    for i in np.flatnonzero(~np.isfinite(v)):
        out[int(i)] = None
    return out


def _scale_stops(measure: str) -> list:
    scale, lo, hi = colour_range(measure)
    if isinstance(scale, str):  # "Cividis": the named plotly scale, its stops written out
        try:
            from plotly.colors import sequential

            stops = _stops(sequential.Cividis)
        except Exception:  # pragma: no cover - plotly is a dependency
            stops = _stops(["rgb(0,32,76)", "rgb(65,77,107)", "rgb(124,123,120)", "rgb(188,175,111)",
                            "rgb(255,233,69)"])
        return stops
    return scale


def map_payload(table, order: Sequence[int] | None = None, diff: tuple[str, str] | None = None,
                alpha: float = config.SIGNIFICANCE_LEVEL) -> dict:
    """Everything the canvas maps of the analysis page and the report draw, in one order.

    Parameters
    ----------
    table : pairlens.engine.PairTable
    order : sequence of int, optional
        Order of the variables (indices into ``table.variables``).
    diff : (str, str), optional
        Measures ``a, b`` of the difference map ``a − |b|`` (stronger direction of an asymmetric one).
    alpha : float
        Cells with q below ``alpha`` are drawn at full colour, the others paler.

    Returns
    -------
    dict
        ``{"variables", "alpha", "maps": [{"key", "measure", "label", "signed", "symmetric", "lo",
        "hi", "stops", "est", "q"}]}``; ``est`` and ``q`` are the k x k matrices flattened row by
        row (row = x, column = y for an asymmetric measure; only the cells above the diagonal
        for a symmetric one), rounded as the pages print them, missing values None. A difference map has ``q`` None.
    """
    k = len(table.variables)
    order = list(range(k)) if order is None else [int(i) for i in order]
    idx = np.asarray(order, dtype=int)
    # One pass over the rows for every measure's estimate and q (PairTable.matrix walks all rows per call).
    position = {v: i for i, v in enumerate(table.variables)}
    full = {m: (np.full((k, k), np.nan), np.full((k, k), np.nan)) for m in table.measures}
    for r in table.rows:
        target = full.get(r.measure)
        if target is None:
            continue
        i, j = position[r.x], position[r.y]
        target[0][i, j], target[1][i, j] = r.estimate, r.q_value
        if get_measure(r.measure).symmetric:
            target[0][j, i], target[1][j, i] = r.estimate, r.q_value
    maps = []
    for m in table.measures:
        meas = get_measure(m)
        _, lo, hi = colour_range(m)
        est = full[m][0][np.ix_(idx, idx)]
        q = full[m][1][np.ix_(idx, idx)]
        maps.append({"key": m, "measure": m, "label": meas.label, "signed": bool(meas.signed),
                     "symmetric": bool(meas.symmetric), "lo": float(lo), "hi": float(hi),
                     "stops": _scale_stops(m), "est": _flat(_rounded_for_display(est), meas.symmetric),
                     "q": _flat(_rounded_for_display(q), meas.symmetric)})
    top: list[dict] = []
    if diff:
        a_name, b_name = diff
        a, b = full[a_name][0].copy(), full[b_name][0].copy()
        if not get_measure(a_name).symmetric:
            a = np.fmax(a, a.T)
        if not get_measure(b_name).symmetric:
            b = np.fmax(b, b.T)
        d = (a - np.abs(b))[np.ix_(idx, idx)]
        finite = np.abs(d[np.isfinite(d)])
        bound = float(max(0.05, finite.max() if finite.size else 1.0))
        la, lb = get_measure(a_name).label, get_measure(b_name).label
        maps.append({"key": "difference", "measure": None, "label": f"{la} − |{lb}|", "signed": True,
                     "symmetric": True, "lo": -bound, "hi": bound, "stops": SIGNED_SCALE,
                     "est": _flat(_rounded_for_display(d), True), "q": None})
        names = [table.variables[i] for i in order]
        iu = np.triu_indices(k, 1)
        vals = d[iu]
        good = np.flatnonzero(np.isfinite(vals))
        best = good[np.argsort(-vals[good], kind="stable")][:15]
        top = [{"x": names[iu[0][t]], "y": names[iu[1][t]], "difference": float(vals[t])} for t in best]
    return {"variables": [table.variables[i] for i in order], "alpha": alpha, "maps": maps, "top": top}


def series_figure(detail: dict) -> dict | None:
    """Both series of an ordered pair over time (rows in time order, stacked panels), and the
    cross-correlation at a few lags with the +-2/sqrt(n) band of white noise; None when the
    analysis did not declare the rows ordered."""
    ordered = detail.get("ordered")
    if not ordered:
        return None
    x, y = _points(detail)
    t = np.arange(1, len(x) + 1)
    xl, yl = plot_text(detail["x"]), plot_text(detail["y"])
    by = plot_text(ordered.get("by") or "row order in the file")
    kind = "scattergl" if len(x) > 5000 else "scatter"
    traces = [
        {"type": kind, "mode": "lines", "x": t.tolist(), "y": x.tolist(), "name": xl,
         "line": {"color": "#1f4e60", "width": 1.3}, "hovertemplate": f"t %{{x}}<br>{xl} %{{y:.4g}}<extra></extra>"},
        {"type": kind, "mode": "lines", "x": t.tolist(), "y": y.tolist(), "name": yl, "yaxis": "y2",
         "line": {"color": _FIT, "width": 1.3}, "hovertemplate": f"t %{{x}}<br>{yl} %{{y:.4g}}<extra></extra>"},
    ]
    layout = {
        "font": {"family": _FONT, "color": _INK, "size": 11},
        "margin": {"l": 55, "r": 10, "t": 10, "b": 40},
        "xaxis": {"title": {"text": f"position in time ({by})"}, "gridcolor": "#e3e7e9", "zeroline": False,
                  "anchor": "y2"},
        "yaxis": {"title": {"text": xl}, "domain": [0.54, 1.0], "gridcolor": "#e3e7e9", "zeroline": False},
        "yaxis2": {"title": {"text": yl}, "domain": [0.0, 0.46], "gridcolor": "#e3e7e9", "zeroline": False},
        "paper_bgcolor": "rgba(0,0,0,0)", "plot_bgcolor": "#fbfcfc", "showlegend": False,
    }
    cc = ordered["cross_correlation"]
    band = 2.0 / math.sqrt(max(len(x), 1))
    xcorr = {
        "data": [{"type": "bar", "x": cc["lags"], "y": cc["r"], "marker": {"color": "#1f4e60"}, "name": "r",
                  "hovertemplate": f"{xl}(t) with {yl}(t+%{{x}}): r = %{{y:.3f}}<extra></extra>"}],
        "layout": {
            "font": {"family": _FONT, "color": _INK, "size": 11},
            "margin": {"l": 50, "r": 10, "t": 10, "b": 40},
            "xaxis": {"title": {"text": f"lag k: {xl}(t) with {yl}(t+k)"}, "dtick": 1, "zeroline": False},
            "yaxis": {"title": {"text": "cross-correlation"}, "range": [-1, 1], "gridcolor": "#e3e7e9"},
            "shapes": [{"type": "line", "xref": "paper", "x0": 0, "x1": 1, "y0": v, "y1": v,
                        "line": {"color": "#8a969c", "dash": "dot", "width": 1}} for v in (-band, band)],
            "paper_bgcolor": "rgba(0,0,0,0)", "plot_bgcolor": "#fbfcfc", "showlegend": False,
        },
    }
    return {"series": {"data": traces, "layout": layout}, "xcorr": xcorr}


# Static SVG -------------------------------------------------------------------
# The saved report draws its figures as SVG written here: no plotting library in
# the file (Plotly alone is 3.5 MB), the figures show with scripts off, and a
# browser opens the page at once. The same colour scales and fitted lines as
# the Plotly figures above; hover and click come from the report's own script.

_SVG_NS = 'xmlns="http://www.w3.org/2000/svg"'


def _esc(text) -> str:
    return html.escape(str(text), quote=True)


def _parse_rgb(colour: str) -> tuple[float, float, float]:
    c = str(colour).strip()
    if c.startswith("#"):
        return tuple(int(c[i:i + 2], 16) for i in (1, 3, 5))  # type: ignore[return-value]
    parts = c[c.index("(") + 1:c.index(")")].split(",")
    return tuple(float(p) for p in parts[:3])  # type: ignore[return-value]


def _scale_lut(stops: list, levels: int) -> list[str]:
    """``levels`` hex colours evenly spaced along a colour scale's stops (linear in RGB between stops)."""
    pos = np.array([float(s[0]) for s in stops])
    rgb = np.array([_parse_rgb(s[1]) for s in stops])
    t = np.linspace(0.0, 1.0, levels)
    out = np.column_stack([np.interp(t, pos, rgb[:, c]) for c in range(3)])
    return ["#%02x%02x%02x" % tuple(int(round(v)) for v in row) for row in out]


def _text_width(text: str, size: float) -> float:
    # about 0.58 em per character for the sans-serif faces of _FONT (common practice)
    return 0.58 * size * len(str(text))


def _nice_ticks(lo: float, hi: float, count: int = 6) -> list[float]:
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(count, 1)
    step = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 5, 10):
        if raw <= step * m:
            step *= m
            break
    first = math.ceil(lo / step) * step
    ticks = []
    v = first
    while v <= hi + step * 1e-9:
        ticks.append(0.0 if abs(v) < step * 1e-9 else v)
        v += step
    return ticks


def _tick_text(v: float) -> str:
    a = abs(v)
    if a != 0 and (a >= 1e5 or a < 1e-3):
        return f"{v:.1e}"
    return f"{v:.6g}"


def _n(v: float) -> str:
    """A coordinate with one decimal (a tenth of a pixel is below what a screen shows)."""
    text = f"{v:.1f}"
    return text[:-2] if text.endswith(".0") else text


def _matrix_svg(names: list[str], z: np.ndarray, stops: list, zmin: float, zmax: float, title: str,
                dots: np.ndarray | None, testid: str) -> str:
    """One heatmap: row i, column j is ``z[i, j]``; a dot where ``dots`` is True.

    Cells are drawn as one path per colour level (48 levels), so a map costs a few
    bytes per cell; the exact numbers are in the hover text and the pair table.
    """
    k = len(names)
    levels = 48
    lut = _scale_lut(stops, levels)
    # the square grows with the columns, and the labels with the cells: at 18-40 columns a map
    # half a 1400 px page wide shows them at 10-12 px
    side = float(max(360, min(900, 16 * k)))        # the plot's square, in viewBox units
    cell = side / max(k, 1)
    font = float(max(6, min(13, 0.85 * cell)))
    gap = 1.0 if k <= 40 else 0.0
    label = max((_text_width(n, font) for n in names), default=0.0) + 6
    label = min(label, 260.0)
    left, top, bar = label, 30.0, 70.0
    bottom = label
    width, height = left + side + bar, top + side + bottom
    paths: dict[int, list[str]] = {}
    zz = np.asarray(z, dtype=float)
    span = (zmax - zmin) or 1.0
    for i in range(k):
        for j in range(k):
            v = zz[i, j]
            if i == j or not math.isfinite(v):
                continue
            level = int(round((min(max(v, zmin), zmax) - zmin) / span * (levels - 1)))
            paths.setdefault(level, []).append(
                f"M{_n(left + j * cell)} {_n(top + i * cell)}h{_n(cell - gap)}v{_n(cell - gap)}h-{_n(cell - gap)}z")
    parts = [f'<svg {_SVG_NS} class="svg-fig svg-map" viewBox="0 0 {_n(width)} {_n(height)}" '
             f'data-testid="{_esc(testid)}" data-map-left="{_n(left)}" data-map-top="{_n(top)}" '
             f'data-map-side="{_n(side)}" data-map-k="{k}" role="img" aria-label="{_esc(title)}" '
             f'font-family="{_esc(_FONT)}" fill="{_INK}">',
             f'<text x="{_n(left)}" y="18" font-size="14">{_esc(title)}</text>',
             f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(side)}" height="{_n(side)}" fill="#eef1f2"/>']
    # the diagonal: a variable against itself
    diag = "".join(f"M{_n(left + i * cell)} {_n(top + i * cell)}h{_n(cell - gap)}v{_n(cell - gap)}h-{_n(cell - gap)}z"
                   for i in range(k))
    parts.append(f'<path fill="#e9e6df" d="{diag}"/>')
    for level in sorted(paths):
        parts.append(f'<path fill="{lut[level]}" d="{"".join(paths[level])}"/>')
    if dots is not None and dots.any():
        r = max(1.0, min(3.5, cell * 0.16))
        d = "".join(f"M{_n(left + (j + 0.5) * cell - gap / 2)} {_n(top + (i + 0.5) * cell - gap / 2)}h0"
                    for i, j in zip(*np.nonzero(dots)))
        parts.append(f'<path class="sig-dots" stroke="rgba(20,20,20,0.8)" stroke-width="{_n(2 * r + 1.2)}" '
                     f'stroke-linecap="round" d="{d}"/>')
        parts.append(f'<path stroke="#ffffff" stroke-width="{_n(2 * r)}" stroke-linecap="round" d="{d}"/>')
    # labels: rows on the left, columns under the map (turned upright)
    rows = []
    for i, n in enumerate(names):
        y = top + (i + 0.5) * cell + font * 0.35
        rows.append(f'<text x="{_n(left - 4)}" y="{_n(y)}">{_esc(n)}</text>')
    parts.append(f'<g class="row-labels" font-size="{_n(font)}" text-anchor="end">{"".join(rows)}</g>')
    cols = []
    for j, n in enumerate(names):
        x = left + (j + 0.5) * cell + font * 0.35
        y = top + side + 4
        cols.append(f'<text transform="translate({_n(x)} {_n(y)}) rotate(-90)">{_esc(n)}</text>')
    parts.append(f'<g class="col-labels" font-size="{_n(font)}" text-anchor="end">{"".join(cols)}</g>')
    # colour bar
    bx, bh = left + side + 16, side * 0.8
    by = top + (side - bh) / 2
    steps = 24
    for s in range(steps):
        level = int(round((steps - 1 - s) / (steps - 1) * (levels - 1)))
        parts.append(f'<rect x="{_n(bx)}" y="{_n(by + s * bh / steps)}" width="10" height="{_n(bh / steps + 0.5)}" '
                     f'fill="{lut[level]}"/>')
    for v in _nice_ticks(zmin, zmax, 4):
        y = by + (zmax - v) / span * bh
        parts.append(f'<text x="{_n(bx + 14)}" y="{_n(y + 3.5)}" font-size="10">{_esc(_tick_text(v))}</text>')
    parts.append("</svg>")
    return "".join(parts)


def _order_names(table, order: Sequence[int] | None) -> tuple[list[int], list[str]]:
    k = len(table.variables)
    order = list(range(k)) if order is None else [int(i) for i in order]
    return order, [table.variables[i] for i in order]


def heatmap_svg(table, measure: str, *, order: Sequence[int] | None = None,
                alpha: float = config.SIGNIFICANCE_LEVEL) -> str:
    """The heatmap of one measure as a static SVG element (see :func:`heatmap_figure` for the content).

    Parameters
    ----------
    table : pairlens.pairtable.PairTable
    measure : str
        A measure in ``table.measures``.
    order : sequence of int, optional
        Order of the variables (indices into ``table.variables``).
    alpha : float
        Cells whose q-value is below ``alpha`` get a dot.

    Returns
    -------
    str
        ``<svg>`` markup with every name escaped; rows hold x and columns y (the
        x → y direction for an asymmetric measure). ``data-map-*`` attributes give
        the grid's place in the viewBox, for the report script's hover and click.
    """
    order, names = _order_names(table, order)
    idx = np.asarray(order, dtype=int)
    z = table.matrix(measure)[np.ix_(idx, idx)]
    q = table.matrix(measure, "q_value")[np.ix_(idx, idx)]
    scale, zmin, zmax = colour_range(measure)
    stops = _scale_stops(measure) if isinstance(scale, str) else scale
    with np.errstate(invalid="ignore"):
        dots = np.isfinite(q) & (q < alpha)
    np.fill_diagonal(dots, False)
    return _matrix_svg(names, z, stops, zmin, zmax, get_measure(measure).label, dots, f"heatmap-{measure}")


def difference_svg(table, measure_a: str, measure_b: str, *, order: Sequence[int] | None = None) -> str:
    """The map of ``measure_a − |measure_b|`` (as :func:`difference_figure`) as a static SVG element."""
    fig = difference_figure(table, measure_a, measure_b, order=order, top=0, hover="template")
    heat = fig["data"][0]
    z = np.array([[np.nan if v is None else v for v in row] for row in heat["z"]], dtype=float)
    la, lb = get_measure(measure_a).label, get_measure(measure_b).label
    return _matrix_svg(fig["layout"]["meta"]["variables"], z, SIGNED_SCALE, heat["zmin"], heat["zmax"],
                       f"{la} − |{lb}|", None, f"difference-{measure_a}-{measure_b}")


def _clean_xy(trace: dict) -> tuple[np.ndarray, np.ndarray]:
    x = np.array([np.nan if v is None else v for v in trace.get("x") or []], dtype=float)
    y = np.array([np.nan if v is None else v for v in trace.get("y") or []], dtype=float)
    return x, y


def pair_svg(fig: dict, *, width: float = 560.0, height: float = 470.0, testid: str = "report-scatter") -> str:
    """A :func:`pair_figure` dict as a static SVG: points, Gaussian ellipses, band and mean, marginals.

    Parameters
    ----------
    fig : dict
        Output of :func:`pair_figure` (trace 0 the points; the density layer is not drawn).
    width, height : float
        Size of the viewBox; the element scales to its container.

    Returns
    -------
    str
        ``<svg>`` markup. Lines are cut at the plot's edges in Python (a clip path
        would need a ``url()`` reference in the page). ``data-x-range`` and
        ``data-y-range`` give the axis ranges, ``data-points`` the drawn count.
    """
    data = fig.get("data") or []
    meta = (fig.get("layout") or {}).get("meta") or {}
    px, py = _clean_xy(data[0]) if data else (np.array([]), np.array([]))
    ok = np.isfinite(px) & np.isfinite(py)
    px, py = px[ok], py[ok]
    lines = [t for t in data[1:] if t.get("type") == "scatter" and t.get("mode") == "lines"]
    xs = [px] + [_clean_xy(t)[0] for t in lines if t.get("legendgroup") == "ellipses"]
    ys = [py] + [_clean_xy(t)[1] for t in lines if t.get("legendgroup") == "ellipses"]
    allx, ally = np.concatenate(xs), np.concatenate(ys)
    allx, ally = allx[np.isfinite(allx)], ally[np.isfinite(ally)]

    def rng(v):
        if v.size == 0:
            return 0.0, 1.0
        lo, hi = float(v.min()), float(v.max())
        pad = 0.05 * (hi - lo) if hi > lo else max(abs(lo) * 0.05, 0.5)
        return lo - pad, hi + pad

    (xlo, xhi), (ylo, yhi) = rng(allx), rng(ally)
    left, right, top, bottom = 64.0, 12.0, 12.0, 86.0
    marg = 0.17 * min(width, height)                 # marginal histograms above and to the right
    pw, ph = width - left - right - marg - 6, height - top - bottom - marg - 6
    ox, oy = left, top + marg + 6

    def X(v):
        return ox + (v - xlo) / (xhi - xlo) * pw

    def Y(v):
        return oy + ph - (v - ylo) / (yhi - ylo) * ph

    parts = [f'<svg {_SVG_NS} class="svg-fig svg-pair" viewBox="0 0 {_n(width)} {_n(height)}" '
             f'data-testid="{_esc(testid)}" data-points="{int(px.size)}" '
             f'data-x-range="{xlo!r} {xhi!r}" data-y-range="{ylo!r} {yhi!r}" '
             f'data-plot="{_n(ox)} {_n(oy)} {_n(pw)} {_n(ph)}" role="img" '
             f'aria-label="{_esc("Scatter of " + str(meta.get("y", "")) + " against " + str(meta.get("x", "")))}" '
             f'font-family="{_esc(_FONT)}" fill="{_INK}" font-size="11">',
             f'<rect x="{_n(ox)}" y="{_n(oy)}" width="{_n(pw)}" height="{_n(ph)}" fill="#fbfcfc" stroke="#d5dadd"/>']
    grid, ticks = [], []
    for v in _nice_ticks(xlo, xhi, 6):
        x = X(v)
        grid.append(f"M{_n(x)} {_n(oy)}v{_n(ph)}")
        ticks.append(f'<text x="{_n(x)}" y="{_n(oy + ph + 14)}" text-anchor="middle">{_esc(_tick_text(v))}</text>')
    for v in _nice_ticks(ylo, yhi, 6):
        y = Y(v)
        grid.append(f"M{_n(ox)} {_n(y)}h{_n(pw)}")
        ticks.append(f'<text x="{_n(ox - 5)}" y="{_n(y + 3.5)}" text-anchor="end">{_esc(_tick_text(v))}</text>')
    parts.append(f'<path stroke="#e3e7e9" d="{"".join(grid)}"/>')
    parts.append("".join(ticks))
    xl, yl = str(meta.get("x", "x")), str(meta.get("y", "y"))
    parts.append(f'<text x="{_n(ox + pw / 2)}" y="{_n(oy + ph + 32)}" text-anchor="middle" font-size="12">'
                 f'{_esc(xl)}</text>')
    parts.append(f'<text transform="translate({_n(16)} {_n(oy + ph / 2)}) rotate(-90)" text-anchor="middle" '
                 f'font-size="12">{_esc(yl)}</text>')
    legend = []
    for t in lines:
        tx, ty = _clean_xy(t)
        keep = np.isfinite(tx) & np.isfinite(ty)
        tx, ty = tx[keep], ty[keep]
        if tx.size < 2:
            continue
        if t.get("fill") == "toself":  # the band: clamp to the plot so it ends at its edges
            pts = " ".join(f"{_n(X(min(max(a, xlo), xhi)))},{_n(Y(min(max(b, ylo), yhi)))}" for a, b in zip(tx, ty))
            parts.append(f'<polygon points="{pts}" fill="{_BAND}" stroke="none"/>')
            legend.append(("band", t.get("name", "")))
            continue
        inside = (tx >= xlo) & (tx <= xhi) & (ty >= ylo) & (ty <= yhi)
        if t.get("legendgroup") != "ellipses":
            tx, ty = tx[inside], ty[inside]   # the straight mean line: its part inside the plot
        if tx.size < 2:
            continue
        line = t.get("line") or {}
        dash = ' stroke-dasharray="2 3"' if line.get("dash") == "dot" else ""
        d = "M" + "L".join(f"{_n(X(a))} {_n(Y(b))}" for a, b in zip(tx, ty))
        parts.append(f'<path d="{d}" fill="none" stroke="{line.get("color", _FIT)}" '
                     f'stroke-width="{line.get("width", 1.5)}"{dash}/>')
        if t.get("legendgroup") != "ellipses" or not any(k == "ellipse" for k, _ in legend):
            legend.append(("ellipse" if t.get("legendgroup") == "ellipses" else "mean", t.get("name", "")))
    # points: one path of zero-length segments with round caps, a few bytes each
    size = 4.0 if px.size > 2000 else 5.0
    d = "".join(f"M{_n(X(a))} {_n(Y(b))}h0" for a, b in zip(px, py))
    parts.append(f'<path class="points" d="{d}" stroke="#1f4e60" stroke-opacity="0.55" '
                 f'stroke-width="{_n(size)}" stroke-linecap="round"/>')
    # marginal histograms
    bins = int(min(60, max(10, math.sqrt(max(px.size, 1)))))
    for values, lo, hi, horizontal in ((px, xlo, xhi, False), (py, ylo, yhi, True)):
        if values.size == 0:
            continue
        counts, edges = np.histogram(values, bins=bins, range=(lo, hi))
        top_count = max(int(counts.max()), 1)
        bars = []
        for c, a, b in zip(counts, edges[:-1], edges[1:]):
            if c == 0:
                continue
            length = c / top_count * (marg - 4)
            if horizontal:
                y0, y1 = Y(b), Y(a)
                bars.append(f"M{_n(ox + pw + 6)} {_n(y0)}h{_n(length)}v{_n(max(y1 - y0 - 0.6, 0.4))}"
                            f"h-{_n(length)}z")
            else:
                x0, x1 = X(a), X(b)
                bars.append(f"M{_n(x0)} {_n(oy - 6)}v-{_n(length)}h{_n(max(x1 - x0 - 0.6, 0.4))}"
                            f"v{_n(length)}z")
        parts.append(f'<path fill="rgba(31, 78, 96, 0.6)" d="{"".join(bars)}"/>')
    # legend under the x-axis title
    ly = oy + ph + 52
    lx = ox
    entries = [("points", str(data[0].get("name", "rows")) if data else "rows")] + legend
    ellipse_names = ", ".join(t["name"].split()[1] for t in lines if t.get("legendgroup") == "ellipses")
    for kind, name in entries:
        if kind == "ellipse":
            name = f"Gaussian ellipses ({ellipse_names})"
        text = html.unescape(str(name))  # the figure's names are escaped for Plotly; _esc escapes again
        wide = 16 + 1.1 * _text_width(text, 10) + 12
        if lx > ox and lx + wide > width - 4:  # the next line when the entry would run off the figure
            lx, ly = ox, ly + 14
        if kind == "points":
            mark = f'<circle cx="{_n(lx + 5)}" cy="{_n(ly - 4)}" r="3" fill="#1f4e60" fill-opacity="0.55"/>'
        elif kind == "band":
            mark = f'<rect x="{_n(lx)}" y="{_n(ly - 9)}" width="12" height="10" fill="{_BAND}"/>'
        else:
            dash = ' stroke-dasharray="2 3"' if kind == "ellipse" else ""
            mark = (f'<path d="M{_n(lx)} {_n(ly - 4)}h12" stroke="{_FIT}" '
                    f'stroke-width="{1.2 if kind == "ellipse" else 2}"{dash}/>')
        parts.append(mark + f'<text x="{_n(lx + 16)}" y="{_n(ly)}" font-size="10">{_esc(text)}</text>')
        lx += wide
    parts.append("</svg>")
    return "".join(parts)
def residual_figure(detail: dict) -> dict | None:
    """--given: x given Z against y given Z (least-squares residuals on the given columns), with the
    least-squares line through them, whose slope's correlation is the partial Pearson r."""
    given = detail.get("given") or {}
    res = given.get("residuals")
    if not res:
        return None
    x, y = np.asarray(res["x"], dtype=float), np.asarray(res["y"], dtype=float)
    n = len(x)
    z = ", ".join(given.get("columns", []))
    xl, yl, zl = plot_text(detail["x"]), plot_text(detail["y"]), plot_text(z)
    trace = {"type": "scattergl" if n > 5000 else "scatter", "mode": "markers", "x": x.tolist(), "y": y.tolist(),
             "marker": {"size": 3 if n > 2000 else 5, "color": _POINT}, "name": "residuals",
             "hovertemplate": f"{xl} | {zl} %{{x:.3g}}<br>{yl} | {zl} %{{y:.3g}}<extra></extra>"}
    data = [trace]
    sxx = float(x @ x)
    if n >= 3 and sxx > 0:
        slope = float(x @ y) / sxx   # residuals have mean 0: the line passes through the origin
        ends = [float(x.min()), float(x.max())]
        data.append({"type": "scatter", "mode": "lines", "x": ends, "y": [slope * e for e in ends],
                     "line": {"color": _FIT, "width": 2}, "name": "least squares", "hoverinfo": "skip"})
    layout = {
        "meta": {"x": f"{detail['x']} given {z} (residual)", "y": f"{detail['y']} given {z} (residual)"},
        "font": {"family": _FONT, "color": _INK, "size": 11},
        "margin": {"l": 55, "r": 10, "t": 10, "b": 45},
        "xaxis": {"title": {"text": f"{xl} given {zl} (residual)"}, "zeroline": True, "gridcolor": "#e3e7e9"},
        "yaxis": {"title": {"text": f"{yl} given {zl} (residual)"}, "zeroline": True, "gridcolor": "#e3e7e9"},
        "paper_bgcolor": "rgba(0,0,0,0)", "plot_bgcolor": "#fbfcfc", "showlegend": False,
    }
    return {"data": data, "layout": layout}
