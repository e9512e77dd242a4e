"""Association given other columns in a real Chromium: the invented vineyard demo analysed with
canopy_temp_c held fixed (chosen in the dashboard form), the conditional maps beside the plain ones,
the "what holding it fixed changes" view with the confounded pair (evaporation_mm, leaf_stress_index)
whose dependence vanishes, and the pair view's residual scatter. Screenshots at 1400 px in
tests/screenshots/."""

from __future__ import annotations

import os

import httpx
import numpy as np
import pandas as pd
import pytest

from browser_helpers import WAIT_SECONDS, chromium_available, goto_settled, screenshot
from pairlens import config

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not chromium_available() and not os.environ.get("CI"),
                                 reason="needs /usr/bin/chromium and playwright (never skipped in CI)")]

PAIR = ("evaporation_mm", "leaf_stress_index")   # driven by canopy temperature only (sample_data/README.md)
GIVEN = "canopy_temp_c"


def test_given_view_and_residual_scatter_on_the_demo(server, page):
    page.goto(server.url("/"))
    page.set_input_files('[data-testid="upload-input"]', str(config.DEMO_FILE))
    with page.expect_navigation():
        page.click('[data-testid="upload-submit"]')
    for measure in ("kendall", "dcor"):  # Pearson and Spearman keep the run short on a busy machine
        page.uncheck(f'input[name="measures"][value="{measure}"]')
    page.select_option('[data-testid="given-select"]', [GIVEN])
    screenshot(page, "given-form")
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    analysis = page.url.rstrip("/").rsplit("/", 1)[-1]
    assert server.wait_done(analysis)["status"] == "done"
    goto_settled(page, server.url(f"/analyses/{analysis}"))

    # the conditional maps beside the plain ones
    for m in ("pearson", "spearman", "partial_pearson", "partial_spearman"):
        page.wait_for_selector(f'[data-testid="heatmap-{m}"]', timeout=WAIT_SECONDS * 1000)
    boxes = [page.locator(f'[data-testid="heatmap-{m}"]').bounding_box() for m in ("pearson", "partial_pearson")]
    assert abs(boxes[0]["y"] - boxes[1]["y"]) < 5 and boxes[1]["x"] > boxes[0]["x"]

    # the view of what conditioning changes: the confounded pair vanishes, with partial r near 0
    view = page.locator('[data-testid="given-shift"]')
    assert GIVEN in view.locator("h2").inner_text()
    row = view.locator(f'tr[data-x="{PAIR[0]}"][data-y="{PAIR[1]}"]')
    assert row.get_attribute("data-kind") == "vanishes"
    plain = float(row.locator('[data-field="plain"]').inner_text())
    given = float(row.locator('[data-field="given"]').inner_text())
    # Reference: numpy least-squares residuals on [1, canopy_temp_c], then their Pearson r (the
    # partial correlation's definition), and numpy corrcoef for the plain r
    df = pd.read_csv(config.DEMO_FILE)[[*PAIR, GIVEN]].dropna()
    a = np.column_stack([np.ones(len(df)), df[GIVEN]])
    res = [df[c] - a @ np.linalg.lstsq(a, df[c], rcond=None)[0] for c in PAIR]
    assert given == pytest.approx(np.corrcoef(*res)[0, 1], abs=0.0006)   # shown to 3 decimals
    assert plain == pytest.approx(np.corrcoef(pd.read_csv(config.DEMO_FILE)[list(PAIR)].dropna().T)[0, 1], abs=0.0006)
    assert plain > 0.4 and abs(given) < 0.12
    # vanishing pairs come first
    kinds = view.locator("tbody tr").evaluate_all("rows => rows.map(r => r.dataset.kind)")
    assert kinds[0] == "vanishes" and kinds.index("vanishes") < (kinds.index("unchanged") if "unchanged" in kinds else 99)
    view.scroll_into_view_if_needed()
    screenshot(page, "given-analysis", doc=True)

    # the pair view: the residual scatter, one point per row with every value present
    # a click on a pair link pins it in the side panel (static/maps.js); its href is the pair view
    goto_settled(page, server.url(row.locator("a.pin-pair").get_attribute("href")))
    page.wait_for_selector('[data-testid="residual-scatter"][data-ready="1"]', timeout=WAIT_SECONDS * 1000)
    n_points = page.evaluate("document.getElementById('pair-residuals').data[0].x.length")
    assert n_points == len(df)
    assert page.locator('tr[data-measure="partial_pearson"]').count() == 1
    detail = httpx.get(server.url(f"/api/analyses/{analysis}/pair"), params={"x": PAIR[0], "y": PAIR[1]},
                       timeout=60).json()
    assert detail["given"]["columns"] == [GIVEN] and detail["given"]["n"] == len(df)
    page.locator('[data-testid="residual-card"]').scroll_into_view_if_needed()
    screenshot(page, "given-pair", doc=True)
    assert not page.errors, page.errors
