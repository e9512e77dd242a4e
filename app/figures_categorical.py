"""Figures of pairs with a categorical side, as pure functions (web pair view and report alike).

* numeric x categorical: one box per level (quartiles, whiskers to 1.5 IQR) with every row as a
  jittered strip point and the level's mean as a diamond;
* categorical x categorical: the contingency table's cells shaded by their adjusted
  standardised residual (Haberman 1973), blue below independence, red above, saturated at |4|.
"""

from __future__ import annotations

import numpy as np

__all__ = ["group_figure", "contingency_figure", "residual_colour", "RESIDUAL_SATURATION"]

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
