"""Plotly figure builders: user text never becomes template syntax (Plotly's hovertemplate
documentation: ``%{variable}`` is replaced by the point's value)."""

from __future__ import annotations

import json

import numpy as np

from app.engine import AnalysisSettings, pair_detail
from app.web import plots


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
