"""Browser test of a mixed table (issue 18): categorical columns detected, their pairs in the maps and
the pair table, and the two categorical pair views, in a real Chromium.

The expected numbers are checked against scipy.stats (f_oneway, chi2_contingency) on the same rows.
"""

from contextlib import nullcontext
from pathlib import Path

import httpx
import numpy as np
import pytest
import scipy.stats

from browser_helpers import chromium_available, screenshot

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not chromium_available(), reason="needs Debian chromium and playwright")]

N = 240


def _columns():
    rng = np.random.default_rng(18)
    site = rng.choice(["north", "south", "east"], N)
    soil = np.where(rng.random(N) < 0.7, np.where(site == "north", "clay", "sand"), rng.choice(["clay", "sand", "loam"], N))
    shift = {"north": 0.0, "south": 1.0, "east": 2.0}
    # rounded as the file writes them (6 decimals), so the references see the same numbers
    growth = np.round(np.array([shift[s] for s in site]) + rng.normal(size=N), 6)
    height = np.round(rng.normal(size=N), 6)
    return {"site": site, "soil": soil, "growth": growth, "height": height}


@pytest.fixture(scope="module")
def mixed_file(tmp_path_factory) -> Path:
    cols = _columns()
    path = tmp_path_factory.mktemp("mixed") / "mixed.csv"
    lines = ["site,soil,growth,height"] + [f"{cols['site'][i]},{cols['soil'][i]},{cols['growth'][i]:.6f},"
                                             f"{cols['height'][i]:.6f}" for i in range(N)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_mixed_table_flow(server, mixed_file, browser):
    cols = _columns()
    with nullcontext(browser) as browser:  # the worker's one Chromium (tests/conftest.py)
        page = browser.new_page(viewport={"width": 1400, "height": 900})
        page.set_default_timeout(120_000)
        page.goto(server.url("/"))
        page.set_input_files('[data-testid="upload-input"]', str(mixed_file))
        with page.expect_navigation():
            page.click('[data-testid="upload-submit"]')
        page.wait_for_selector("#columns")
        # the text columns are detected as categorical, with the reason beside them
        assert page.get_attribute('[data-testid="kind-site"]', "data-detected") == "categorical"
        assert page.get_attribute('[data-testid="kind-soil"]', "data-detected") == "categorical"
        assert page.get_attribute('[data-testid="kind-growth"]', "data-detected") == "numeric"
        assert "text with 3 levels" in page.locator("#columns").inner_text()
        screenshot(page, "categorical-dataset")
        with page.expect_navigation():
            page.click('[data-testid="run-analysis"]')
        analysis_id = page.url.rstrip("/").split("/")[-1].split("?")[0]
        status = server.wait_done(analysis_id)
        assert status["status"] == "done", status
        page.goto(server.url(f"/analyses/{analysis_id}"))
        # one map per measure of the run: the numeric defaults and the categorical ones added for these pairs
        for m in ("pearson", "dcor", "eta", "kruskal", "cramer_v"):
            page.wait_for_selector(f'[data-testid="heatmap-{m}"][data-ready="1"]')
        page.wait_for_selector('#pair-table[data-ready="1"]')
        table_text = page.locator("#pair-table").inner_text()
        assert "site" in table_text and "soil" in table_text
        screenshot(page, "categorical-analysis")

        records = httpx.get(server.url(f"/api/analyses/{analysis_id}/pairs"), timeout=60).json()
        by_pair = {}
        for r in records:
            by_pair.setdefault(frozenset((r["x"], r["y"])), {})[r["measure"]] = r
        assert set(by_pair[frozenset(("site", "growth"))]) == {"eta", "kruskal", "dcor"}
        assert set(by_pair[frozenset(("site", "soil"))]) == {"cramer_v", "dcor"}
        assert set(by_pair[frozenset(("growth", "height"))]) == {"pearson", "spearman", "kendall", "dcor"}
        # eta's p-value is the one-way ANOVA of growth by site (scipy.stats.f_oneway)
        groups = [cols["growth"][cols["site"] == s] for s in ("east", "north", "south")]
        eta = by_pair[frozenset(("site", "growth"))]["eta"]
        assert eta["p_value"] == pytest.approx(scipy.stats.f_oneway(*groups).pvalue, rel=1e-6)

        # numeric x categorical: boxes with strips and group means
        page.goto(server.url(f"/analyses/{analysis_id}/pair?x=site&y=growth"))
        page.wait_for_selector('#pair-groups[data-ready="1"]')
        assert page.locator("#verdict-label").inner_text() == "groups differ"
        traces = page.evaluate("() => document.getElementById('pair-groups').data.map(t => [t.type, t.name])")
        assert [t for t in traces if t[0] == "box"] == [["box", "east"], ["box", "north"], ["box", "south"]]
        means = page.evaluate("() => document.getElementById('pair-groups').data.at(-1).y")
        assert means == pytest.approx([g.mean() for g in groups], rel=1e-9)
        screenshot(page, "categorical-pair-groups")

        # categorical x categorical: the contingency table shaded by adjusted residuals
        page.goto(server.url(f"/analyses/{analysis_id}/pair?x=site&y=soil"))
        page.wait_for_selector('[data-testid="contingency"]')
        cells = page.locator('[data-testid="contingency"] td.cell')
        counts = [int(c.split("\n")[0]) for c in cells.all_inner_texts()]
        observed = scipy.stats.contingency.crosstab(cols["site"], cols["soil"]).count  # scipy's cross table
        assert counts == observed.ravel().tolist()
        assert page.locator("#verdict-label").inner_text() == "levels associated"
        residuals = [float(c.get_attribute("data-residual")) for c in cells.all()]
        # Reference: adjusted residual (Haberman 1973) from scipy's expected counts
        expected = scipy.stats.chi2_contingency(observed, correction=False).expected_freq
        n = observed.sum()
        rows, colsum = observed.sum(axis=1, keepdims=True) / n, observed.sum(axis=0, keepdims=True) / n
        ref = (observed - expected) / np.sqrt(expected * (1 - rows) * (1 - colsum))
        assert residuals == pytest.approx(ref.ravel().tolist(), rel=1e-9)
        screenshot(page, "categorical-pair-contingency")
