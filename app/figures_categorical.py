"""Figures of pairs with a categorical side, as pure functions (web pair view and report alike).

* numeric x categorical: one box per level (quartiles, whiskers to 1.5 IQR) with every row as a
  jittered strip point and the level's mean as a diamond;
* categorical x categorical: the contingency table's cells shaded by their adjusted
  standardised residual (Haberman 1973), blue below independence, red above, saturated at |4|.
"""

from __future__ import annotations

import numpy as np

__all__ = ["group_figure", "contingency_figure", "group_svg", "contingency_svg", "residual_colour",
           "RESIDUAL_SATURATION"]

RESIDUAL_SATURATION = 4.0   # |adjusted residual| at full colour; 2 is about the two-sided 5 % point
_NEG = (43, 92, 138)
_POS = (180, 71, 43)


def residual_colour(r: float | None) -> str:
    """CSS background of a contingency cell with adjusted residual ``r`` (white at 0)."""
    if r is None or not np.isfinite(r):
        return "rgb(240,240,240)"
    t = min(abs(r) / RESIDUAL_SATURATION, 1.0)
    base = _POS if r > 0 else _NEG
    rgb = [round(255 + (c - 255) * t) for c in base]
    return f"rgb({rgb[0]},{rgb[1]},{rgb[2]})"


def group_figure(detail: dict) -> dict:
    """Boxes with strips and group means of the numeric side by the levels of the categorical side."""
    c = detail["categorical"]
    kinds = detail["kinds"]
    pts = detail.get("points") or {}
    values = np.asarray(pts.get("y" if kinds[0] == "categorical" else "x", []), dtype=float)
    codes = np.asarray(pts.get("x" if kinds[0] == "categorical" else "y", []), dtype=float)
    levels = [g["level"] for g in c["groups"]]
    present = np.unique(codes)
    traces = []
    for code, g in zip(present, c["groups"]):
        v = values[codes == code]
        traces.append({"type": "box", "y": v.tolist(), "name": g["level"], "boxpoints": "all", "jitter": 0.45,
                       "pointpos": 0, "marker": {"size": 3, "opacity": 0.45, "color": "#2b5c8a"},
                       "line": {"color": "#1f4e60"}, "fillcolor": "rgba(31,78,96,0.08)",
                       "hovertemplate": f"{g['level']}<br>%{{y}}<extra></extra>", "showlegend": False})
    traces.append({"type": "scatter", "mode": "markers", "x": levels, "y": [g["mean"] for g in c["groups"]],
                   "name": "group mean", "marker": {"symbol": "diamond", "size": 11, "color": "#b4472b",
                                                    "line": {"color": "white", "width": 1}},
                   "hovertemplate": "mean %{y:.4g}<extra>%{x}</extra>"})
    return {"data": traces,
            "layout": {"margin": {"l": 60, "r": 10, "t": 10, "b": 50}, "height": 420,
                       "xaxis": {"title": {"text": c["group"]}, "type": "category"},
                       "yaxis": {"title": {"text": c["value"]}, "zeroline": False},
                       "legend": {"orientation": "h", "y": 1.08}, "plot_bgcolor": "white"}}


def contingency_figure(detail: dict) -> dict:
    """The contingency table as a heatmap of adjusted residuals with the counts written in the cells."""
    c = detail["categorical"]
    z = [[(v if v is not None else None) for v in row] for row in c["residuals"]]
    text = [[f"{n}<br>({r:+.1f})" if r is not None else f"{n}" for n, r in zip(cn, rr)]
            for cn, rr in zip(c["counts"], c["residuals"])]
    scale = [[0.0, "rgb(43,92,138)"], [0.5, "rgb(255,255,255)"], [1.0, "rgb(180,71,43)"]]
    return {"data": [{"type": "heatmap", "z": z, "x": c["y_levels"], "y": c["x_levels"], "text": text,
                      "texttemplate": "%{text}", "colorscale": scale, "zmin": -RESIDUAL_SATURATION,
                      "zmax": RESIDUAL_SATURATION, "colorbar": {"title": {"text": "adjusted<br>residual"}},
                      "hovertemplate": "%{y} and %{x}: %{text}<extra></extra>"}],
            "layout": {"margin": {"l": 90, "r": 10, "t": 10, "b": 60}, "height": 360,
                       "xaxis": {"title": {"text": detail["y"]}, "type": "category"},
                       "yaxis": {"title": {"text": detail["x"]}, "type": "category", "autorange": "reversed"}}}


# Static SVG for the saved report (no plotting library in the file) ---------------------------

def _esc(text) -> str:
    import html

    return html.escape(str(text), quote=True)


def group_svg(detail: dict, *, width: float = 560.0, height: float = 420.0, seed: int = 0) -> str:
    """:func:`group_figure` as static SVG: per level a box (quartiles), a jittered strip of its rows
    (at most 400 drawn, seeded) and the level's mean as a diamond."""
    c = detail["categorical"]
    kinds = detail["kinds"]
    pts = detail.get("points") or {}
    values = np.asarray(pts.get("y" if kinds[0] == "categorical" else "x", []), dtype=float)
    codes = np.asarray(pts.get("x" if kinds[0] == "categorical" else "y", []), dtype=float)
    groups = c["groups"]
    present = np.unique(codes)
    ok = values[np.isfinite(values)]
    if not groups or ok.size == 0:
        return ""
    lo, hi = float(ok.min()), float(ok.max())
    pad = (hi - lo) * 0.05 or 1.0
    lo, hi = lo - pad, hi + pad
    left, right, top, bottom = 64.0, 12.0, 12.0, 56.0
    pw, ph = width - left - right, height - top - bottom
    slot = pw / len(groups)

    def ypos(v):
        return top + ph * (1.0 - (v - lo) / (hi - lo))

    rng = np.random.default_rng(seed)
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:.0f} {height:.0f}" '
             f'data-testid="report-groups" role="img">',
             f'<rect x="{left}" y="{top}" width="{pw:.1f}" height="{ph:.1f}" fill="white" stroke="#ccc"/>']
    for t in np.linspace(lo, hi, 5):
        parts.append(f'<text x="{left - 6}" y="{ypos(t) + 4:.1f}" font-size="11" text-anchor="end">{t:.3g}</text>')
    for k, (code, g) in enumerate(zip(present, groups)):
        v = values[codes == code]
        v = v[np.isfinite(v)]
        cx = left + slot * (k + 0.5)
        if v.size:
            q1, med, q3 = np.percentile(v, [25, 50, 75])
            bw = min(60.0, slot * 0.5)
            parts.append(f'<rect x="{cx - bw / 2:.1f}" y="{ypos(q3):.1f}" width="{bw:.1f}" '
                         f'height="{max(ypos(q1) - ypos(q3), 0.5):.1f}" fill="rgba(31,78,96,0.08)" stroke="#1f4e60"/>')
            parts.append(f'<line x1="{cx - bw / 2:.1f}" x2="{cx + bw / 2:.1f}" y1="{ypos(med):.1f}" '
                         f'y2="{ypos(med):.1f}" stroke="#1f4e60" stroke-width="2"/>')
            shown = v if v.size <= 400 else rng.choice(v, 400, replace=False)
            jitter = rng.uniform(-slot * 0.2, slot * 0.2, shown.size)
            # one path of zero-length round-capped segments: about 14 bytes a point instead of 80
            # for a circle element each (the demo report's five strip plots: 360 KB before)
            dots = "".join(f"M{cx + j:.1f} {ypos(s):.1f}h0" for s, j in zip(shown, jitter))
            parts.append(f'<path class="points" d="{dots}" stroke="#2b5c8a" stroke-opacity="0.45" '
                         f'stroke-width="3.6" stroke-linecap="round" fill="none"/>')
        if g.get("mean") is not None and np.isfinite(g["mean"]):
            my = ypos(g["mean"])
            parts.append(f'<path d="M{cx:.1f},{my - 7:.1f} L{cx + 7:.1f},{my:.1f} L{cx:.1f},{my + 7:.1f} '
                         f'L{cx - 7:.1f},{my:.1f} Z" fill="#b4472b" stroke="white"><title>mean '
                         f'{g["mean"]:.4g}</title></path>')
        parts.append(f'<text x="{cx:.1f}" y="{top + ph + 18:.1f}" font-size="12" text-anchor="middle">'
                     f'{_esc(str(g["level"])[:18])} (n = {g["n"]})</text>')
    parts.append(f'<text x="{left + pw / 2:.1f}" y="{height - 8:.1f}" font-size="12" text-anchor="middle">'
                 f'{_esc(c["group"])}</text>')
    parts.append(f'<text x="14" y="{top + ph / 2:.1f}" font-size="12" text-anchor="middle" '
                 f'transform="rotate(-90 14 {top + ph / 2:.1f})">{_esc(c["value"])}</text>')
    parts.append("</svg>")
    return "".join(parts)


def contingency_svg(detail: dict, *, cell: float = 78.0) -> str:
    """:func:`contingency_figure` as static SVG: counts, with the adjusted residual below, on cells
    shaded by :func:`residual_colour`."""
    c = detail["categorical"]
    rows, cols = c["x_levels"], c["y_levels"]
    left, top = 120.0, 40.0
    width, height = left + cell * len(cols) + 10, top + 44.0 * len(rows) + 30
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width:.0f} {height:.0f}" '
             f'data-testid="report-contingency" role="img">',
             f'<text x="{left + cell * len(cols) / 2:.1f}" y="14" font-size="12" text-anchor="middle">'
             f'{_esc(detail["y"])}</text>']
    for j, level in enumerate(cols):
        parts.append(f'<text x="{left + cell * (j + 0.5):.1f}" y="{top - 8}" font-size="11" '
                     f'text-anchor="middle">{_esc(str(level)[:12])}</text>')
    for i, (level, counts, res) in enumerate(zip(rows, c["counts"], c["residuals"])):
        y0 = top + 44.0 * i
        parts.append(f'<text x="{left - 8}" y="{y0 + 26:.1f}" font-size="11" text-anchor="end">'
                     f'{_esc(str(level)[:16])}</text>')
        for j, (n, r) in enumerate(zip(counts, res)):
            x0 = left + cell * j
            label = f"{r:+.1f}" if r is not None else ""
            parts.append(f'<rect x="{x0:.1f}" y="{y0:.1f}" width="{cell - 2:.1f}" height="42" '
                         f'fill="{residual_colour(r)}" stroke="white"/>'
                         f'<text x="{x0 + cell / 2:.1f}" y="{y0 + 19:.1f}" font-size="13" text-anchor="middle">{n}</text>'
                         f'<text x="{x0 + cell / 2:.1f}" y="{y0 + 35:.1f}" font-size="10" text-anchor="middle" '
                         f'fill="#333">{label}</text>')
    parts.append(f'<text x="10" y="{height - 8:.1f}" font-size="12">{_esc(detail["x"])} (rows)</text>')
    parts.append("</svg>")
    return "".join(parts)
