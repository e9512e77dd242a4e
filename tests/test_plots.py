"""Plotly figure builders: user text never becomes template syntax (Plotly's hovertemplate
documentation: ``%{variable}`` is replaced by the point's value)."""

from __future__ import annotations

import json

import numpy as np

from pairlens.engine import AnalysisSettings
from pairlens.pairs import pair_detail
from pairlens import figures as plots


def _templates(fig: dict) -> list[str]:
    return [t["hovertemplate"] for t in fig["data"] if "hovertemplate" in t]


def test_column_names_with_template_syntax_stay_text():
    rng = np.random.default_rng(5)
    x = rng.normal(size=60)
    data = np.column_stack([x, 0.5 * x + rng.normal(size=60)])
    plain = pair_detail(data, ["a", "b"], "a", "b", AnalysisSettings(measures=("pearson",)), include_points=True)
    hostile_names = ["%{y}", "<b>%{customdata}</b>"]
    hostile = pair_detail(data, hostile_names, *hostile_names, AnalysisSettings(measures=("pearson",)),
                          include_points=True)
    for build in (plots.pair_figure, plots.rank_figure):
        plain_t, hostile_t = _templates(build(plain)), _templates(build(hostile))
        assert plain_t and len(plain_t) == len(hostile_t)
        for p, h in zip(plain_t, hostile_t):
            # the same placeholders as with plain names: the names added none
            for field in ("%{x", "%{y", "%{customdata", "%{text"):
                assert h.count(field) == p.count(field), (field, h)
            assert "%&#123;y}" in h and "&lt;b&gt;" in h
    json.dumps(plots.pair_figure(hostile))  # still plain JSON for the page


def test_map_payload_holds_the_pair_table_in_one_order():
    import scipy.stats

    from pairlens.engine import run_analysis

    rng = np.random.default_rng(8)
    n = 80
    a = rng.normal(size=n)
    data = np.column_stack([a, a + rng.normal(size=n), a ** 2 + 0.3 * rng.normal(size=n), rng.normal(size=n)])
    names = ["a", "b", "c", "d"]
    table = run_analysis(data, names, AnalysisSettings(measures=("pearson", "xi")))
    order = [2, 0, 3, 1]
    payload = plots.map_payload(table, order, ("xi", "pearson"))
    assert payload["variables"] == ["c", "a", "d", "b"]
    maps = {m["key"]: m for m in payload["maps"]}
    k = 4
    # Pearson: the upper triangle in the page's order, each value equal to scipy.stats.pearsonr to 3 decimals.
    upper = [(i, j) for i in range(k) for j in range(i + 1, k)]
    cols = {v: data[:, names.index(v)] for v in names}
    for (i, j), value in zip(upper, maps["pearson"]["est"]):
        x, y = payload["variables"][i], payload["variables"][j]
        assert value == round(scipy.stats.pearsonr(cols[x], cols[y]).statistic, 3)
    # xi is asymmetric: the whole matrix, row = x (predictor), column = y.
    xi = np.array(maps["xi"]["est"], dtype=float).reshape(k, k)
    records = {(r.x, r.y): r.estimate for r in table.rows if r.measure == "xi"}
    for i in range(k):
        for j in range(k):
            if i != j:
                assert xi[i, j] == round(records[(payload["variables"][i], payload["variables"][j])], 3)
    assert maps["xi"]["est"][0] is None                 # the diagonal is empty
    # The difference map and its top pairs: the stronger xi direction minus |r|, largest first.
    diffs = [t["difference"] for t in payload["top"]]
    assert diffs == sorted(diffs, reverse=True)
    best = payload["top"][0]
    expected = max(records[(best["x"], best["y"])], records[(best["y"], best["x"])]) - abs(
        scipy.stats.pearsonr(cols[best["x"]], cols[best["y"]]).statistic)
    assert abs(best["difference"] - expected) < 1e-9


def test_group_strip_plot_draws_every_row_up_to_400_per_level_inside_the_plot():
    # the report's strip plot (figures_categorical.group_svg): one round-capped mark per row of a level,
    # a seeded sample of 400 above that, every mark between the axis limits of the values
    import re
    from pairlens import figures_categorical

    rng = np.random.default_rng(12)
    sizes = {0: 30, 1: 250, 2: 900}
    codes = np.concatenate([np.full(n, code, float) for code, n in sizes.items()])
    values = rng.normal(size=codes.size) + codes
    groups = [{"level": f"level {code}", "n": n, "mean": float(values[codes == code].mean())}
              for code, n in sizes.items()]
    detail = {"kinds": ["categorical", "numeric"], "points": {"x": codes.tolist(), "y": values.tolist()},
              "categorical": {"groups": groups, "group": "batch", "value": "yield"}}
    svg = figures_categorical.group_svg(detail, seed=3)
    strips = re.findall(r'<path class="points" d="([^"]*)"', svg)
    marks = [re.findall(r"M([\d.]+) ([\d.]+)h0", d) for d in strips]
    assert [len(m) for m in marks] == [30, 250, 400]
    ys = np.array([float(y) for m in marks for _, y in m])
    assert ys.min() >= 12.0 and ys.max() <= 420.0 - 56.0  # inside the plot area (top 12, bottom margin 56)
    assert svg == figures_categorical.group_svg(detail, seed=3)  # seeded: the same report twice
