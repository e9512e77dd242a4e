"""Rows in time order in a real Chromium: the invented weekly series of the vineyard demo shows the
serial-dependence warning when the rows are not declared ordered, the corrected q-values when they
are, and the pair view's series-over-time panel. Screenshots at 1400 px in tests/screenshots/."""

from __future__ import annotations

import math
import os

import httpx
import pytest

from browser_helpers import WAIT_SECONDS, chromium_available, goto_settled, screenshot
from pairlens import config

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not chromium_available() and not os.environ.get("CI"),
                                 reason="needs /usr/bin/chromium and playwright (never skipped in CI)")]

WEEKLY = config.SAMPLE_DATA_DIR / "vineyard_weekly.csv"
SPURIOUS = ("bird_visits", "cellar_temp_c")      # unrelated AR(1) series (sample_data/README.md)
PLANTED = ("rain_mm", "soil_water_index")


def _q(server, analysis_id, pair, measure="pearson"):
    rows = httpx.get(server.url(f"/api/analyses/{analysis_id}/pairs"), timeout=30).json()
    (row,) = [r for r in rows if (r["x"], r["y"]) == pair and r["measure"] == measure]
    return math.nan if row["q_value"] is None else row["q_value"]


def test_weekly_series_warning_ordered_run_and_series_panel(server, page):
    page.goto(server.url("/"))
    page.set_input_files('[data-testid="upload-input"]', str(WEEKLY))
    with page.expect_navigation():
        page.click('[data-testid="upload-submit"]')
    warning = page.locator('[data-testid="serial-warning"]')
    assert "serially dependent" in warning.inner_text() and "--ordered" in warning.inner_text()
    screenshot(page, "serial-dataset")
    dataset_id = page.url.rstrip("/").rsplit("/", 1)[-1]

    # rows taken as independent (the API, default options): the warning on the analysis page too
    plain = httpx.post(server.url(f"/api/datasets/{dataset_id}/analyses"), json={"measures": ["pearson"]},
                       timeout=30).json()["id"]
    assert server.wait_done(plain)["status"] == "done"
    goto_settled(page, server.url(f"/analyses/{plain}"))
    assert "serially dependent" in page.locator('[data-testid="serial-warning"]').inner_text()

    # the form: rows in time order, sorted by week
    page.goto(server.url(f"/datasets/{dataset_id}"))
    page.select_option('[data-testid="ordered-select"]', "week")
    for measure in ("kendall", "dcor"):  # two measures keep the run short on a busy machine
        page.uncheck(f'input[name="measures"][value="{measure}"]')
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    ordered = page.url.rstrip("/").rsplit("/", 1)[-1]
    assert server.wait_done(ordered)["status"] == "done"
    goto_settled(page, server.url(f"/analyses/{ordered}"))
    page.wait_for_selector('[data-testid="heatmap-pearson"][data-ready="1"]', timeout=WAIT_SECONDS * 1000)
    text = page.locator('[data-testid="serial-warning"]').inner_text()
    assert "trending" in text and "serially dependent" not in text
    assert "rows in time order by week" in page.locator(".headline .meta").first.inner_text()
    screenshot(page, "serial-analysis")
    # corrected q-values: the unrelated persistent pair is significant only when rows count as independent
    # (cellar_temp_c is so persistent that the ADF test names it trending: no p-value, so not significant)
    assert _q(server, plain, SPURIOUS) < 0.05 and not _q(server, ordered, SPURIOUS) < 0.05
    assert _q(server, ordered, PLANTED) < 0.05
    # the trending pair's verdict: not tested, never "no evidence of dependence" (README, the verdict table)
    page.fill("#filter-text", SPURIOUS[0])
    cell = page.locator(f'tr.pair-row[data-x="{SPURIOUS[0]}"][data-y="{SPURIOUS[1]}"] td.verdict')
    cell.wait_for(timeout=WAIT_SECONDS * 1000)
    assert cell.inner_text() == "not tested (trending)"
    page.goto(server.url(f"/analyses/{ordered}/pair?x={SPURIOUS[0]}&y={SPURIOUS[1]}"))
    page.wait_for_selector('#verdict[data-complete="yes"]', timeout=WAIT_SECONDS * 1000)
    assert page.inner_text("#verdict-label") == "not tested (trending)"
    assert "--difference" in page.inner_text("#verdict-reasons")
    screenshot(page, "serial-pair-trending")

    page.goto(server.url(f"/analyses/{ordered}/pair?x={PLANTED[0]}&y={PLANTED[1]}"))
    page.wait_for_selector('[data-testid="pair-series"][data-ready="1"]', timeout=WAIT_SECONDS * 1000)
    assert page.locator('[data-testid="pair-xcorr"] .bars, [data-testid="pair-xcorr"] .trace').count() >= 1
    assert "n*" in page.inner_text(".measures-card")
    screenshot(page, "serial-pair")
    assert not page.errors, page.errors
