"""The dashboard in a real Chromium (Debian's /usr/bin/chromium driven by Playwright's sync API).

A pairlens server runs in a subprocess on a free loopback port with its own
data directory. Point sets on the page are compared with the CSV file read by
Python's csv module; numbers on the page with the API's pair table. Screenshots
go to tests/screenshots/ (git-ignored); with PAIRLENS_UPDATE_SCREENSHOTS=1 the main ones also to docs/screenshots/.
"""

from __future__ import annotations

import csv
import os
import math
from pathlib import Path

import httpx
import numpy as np
import pytest

from browser_helpers import Server, chromium_available, screenshot

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not chromium_available() and not os.environ.get("CI"),
                                 reason="needs /usr/bin/chromium and playwright (never skipped in CI)")]

MEASURES = ["pearson", "spearman", "kendall", "dcor"]   # the dashboard's default selection
FLOW_COLUMNS = ["moisture", "sugar", "acidity", "wetness", "noise"]
HOSTILE = ["<script>window.__pwned=1</script>", "<img src=x onerror=window.__pwned=1>",
           "say \"hi\" & 'bye'", "Höhe_µm_湿度"]


def _transitions_done(page) -> None:
    """Wait until no CSS transition or animation runs (the state a screenshot should show)."""
    page.wait_for_function("document.getAnimations().every(a => a.playState !== 'running' || "
                           "(a.effect && a.effect.getTiming().iterations === Infinity))")


def _write_csv(path: Path, header: list[str], rows: np.ndarray) -> None:
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(header)
        for row in rows:
            w.writerow(["" if math.isnan(v) else f"{v:.5f}" for v in row])


def _read_columns(path: Path) -> dict[str, list[float]]:
    with path.open(newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    return {k: [float(r[k]) if r[k] != "" else math.nan for r in rows] for k in rows[0]}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("files")
    rng = np.random.default_rng(2026)
    n = 240
    m = rng.normal(25, 4, n)
    sugar = 18 + 0.25 * m + rng.normal(0, 0.6, n)
    acid = 9 - 0.02 * (m - 25) ** 2 + rng.normal(0, 0.3, n)
    wet = rng.gamma(2.0, 10.0, n)
    noise = rng.normal(size=n)
    data = np.column_stack([m, sugar, acid, wet, noise])
    data[rng.choice(n, 25, replace=False), 1] = np.nan    # sugar has gaps
    flow = d / "blocks.csv"
    _write_csv(flow, FLOW_COLUMNS, data)
    slow = d / "slow.csv"
    _write_csv(slow, [f"s{i}" for i in range(6)], rng.normal(size=(3000, 6)))
    hostile = d / "hostile.csv"
    _write_csv(hostile, HOSTILE, rng.normal(size=(60, len(HOSTILE))))
    bad = d / "photo.csv"
    bad.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 8)
    return {"flow": flow, "slow": slow, "hostile": hostile, "bad": bad}


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    root = tmp_path_factory.mktemp("server")
    data_dir = root / "data"
    data_dir.mkdir()
    srv = Server(data_dir, demo=True)
    yield srv
    srv.stop()


def _not_pwned(page) -> None:
    assert page.evaluate("typeof window.__pwned") == "undefined", page.url


def _upload(page, server, path: Path) -> None:
    page.goto(server.url("/"))
    page.set_input_files('[data-testid="upload-input"]', str(path))
    with page.expect_navigation():
        page.click('[data-testid="upload-submit"]')


def _wait_heatmaps(page, measures, timeout=120_000) -> None:
    for m in measures:
        page.wait_for_selector(f'[data-testid="heatmap-{m}"][data-ready="1"]', timeout=timeout)


def test_full_flow(server, page, files):
    # Home, upload.
    page.goto(server.url("/"))
    screenshot(page, "home", doc=True)
    _not_pwned(page)
    _upload(page, server, files["flow"])
    assert "/datasets/" in page.url
    page.wait_for_selector("#columns")
    for name in FLOW_COLUMNS:
        assert page.locator("#columns").get_by_text(name, exact=True).count() == 1
    screenshot(page, "dataset", doc=True)

    # Run with the default measures.
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    assert "/analyses/" in page.url
    analysis_id = page.url.rstrip("/").split("/")[-1].split("?")[0]
    _wait_heatmaps(page, MEASURES)
    _not_pwned(page)

    # One map per measure, side by side in one row, left to right.
    boxes = [page.locator(f'[data-testid="heatmap-{m}"]').bounding_box() for m in MEASURES]
    assert all(b is not None and b["width"] > 80 for b in boxes)
    tops = [b["y"] for b in boxes]
    assert max(tops) - min(tops) < 2
    lefts = [b["x"] for b in boxes]
    assert lefts == sorted(lefts) and len(set(round(v) for v in lefts)) == len(MEASURES)
    # The same column order on every map (one order for the page).
    assert page.evaluate("window.pairlensMaps.variables") == FLOW_COLUMNS
    page.wait_for_selector('#pair-table[data-ready="1"]')
    _transitions_done(page)
    screenshot(page, "analysis", doc=True)

    # Click the cell at row "sugar" (1), column "moisture" (0): the pair's scatter appears beside the map.
    x, y = page.evaluate("window.pairlensMaps.cellCentre(1, 0)")
    page.mouse.click(x, y)
    page.wait_for_selector('[data-testid="pair-scatter"][data-ready="1"]')
    assert "/analyses/" in page.url and "/pair?" not in page.url
    panel = page.evaluate("""() => { const s = document.querySelector('[data-testid="pair-scatter"]');
                                     return [s.dataset.x, s.dataset.y, Number(s.dataset.n)]; }""")
    assert panel == ["moisture", "sugar", 240 - 25]
    # Another measure's map: the same pair at the same cell.
    page.click('[data-testid="heatmap-dcor"]')
    page.wait_for_function("document.getElementById('focus-map').dataset.map === 'dcor'")
    # The full pair view is one click further.
    with page.expect_navigation():
        page.click("#panel-open")
    assert "/pair?" in page.url
    page.wait_for_selector('[data-testid="pair-scatter"][data-ready="1"]')
    _not_pwned(page)
    px = page.locator("#pair-x").inner_text()
    py = page.locator("#pair-y").inner_text()
    assert {px, py} == {"moisture", "sugar"}

    # The scatter holds exactly the pair's complete rows of the file.
    pts = page.evaluate("""() => { const gd = document.querySelector('[data-testid="pair-scatter"]');
                                   return {x: gd.data[0].x, y: gd.data[0].y, rows: gd.data[0].customdata}; }""")
    cols = _read_columns(files["flow"])
    xs, ys = np.array(cols[px]), np.array(cols[py])
    keep = ~np.isnan(xs) & ~np.isnan(ys)
    assert len(pts["x"]) == int(keep.sum()) == 240 - 25
    assert pts["x"] == list(xs[keep]) and pts["y"] == list(ys[keep])
    assert pts["rows"] == list(np.flatnonzero(keep))

    # Its numbers equal the pair table of the API.
    records = httpx.get(server.url(f"/api/analyses/{analysis_id}/pairs"), timeout=30).json()
    mine = {r["measure"]: r for r in records if {r["x"], r["y"]} == {px, py}}
    assert set(mine) == set(MEASURES)
    for m, rec in mine.items():
        row = page.locator(f'#pair-measures tr[data-measure="{m}"]')
        for field in ("estimate", "p_value", "q_value"):
            shown = row.locator(f'td[data-field="{field}"]').get_attribute("data-value")
            assert (shown == "" and rec[field] is None) or float(shown) == rec[field], (m, field)
        assert int(row.locator('td[data-field="n"]').get_attribute("data-value")) == rec["n"]
        interval = row.locator('td[data-field="interval"]')
        low = interval.get_attribute("data-low")
        assert (low == "" and rec["ci_low"] is None) or float(low) == rec["ci_low"]
    # The verdict arrives from the API and is shown with its reasons.
    page.wait_for_selector('#verdict[data-complete="yes"]', timeout=60_000)
    assert page.locator("#verdict-label").inner_text() not in ("", "being worked out…")
    assert page.locator("#verdict-reasons li").count() >= 1
    assert page.get_by_text("Association is not causation.").count() == 1
    page.locator("#slice-range").fill("700")
    page.wait_for_function("document.getElementById('slice-summary').innerText.includes('rows with')")
    screenshot(page, "pair", doc=True)

    # A row of the pair table opens its pair view too.
    page.go_back()
    _wait_heatmaps(page, MEASURES)
    page.wait_for_selector('#pair-table[data-ready="1"]')
    page.locator("#pair-body tr").first.click()
    page.wait_for_url("**/pair?**")
    page.wait_for_selector('[data-testid="pair-scatter"][data-ready="1"]')
    page.go_back()
    _wait_heatmaps(page, MEASURES)

    # Save the report.
    probe = httpx.get(server.url(f"/api/analyses/{analysis_id}/report.html"), timeout=120)
    assert probe.status_code == 200
    with page.expect_download(timeout=120_000) as info:
        page.click('[data-testid="save-report"]')
    target = Path(server.data_dir.parent) / "saved-report.html"
    info.value.save_as(str(target))
    text = target.read_text(encoding="utf-8")
    assert text.lstrip().lower().startswith("<!doctype html")
    assert "moisture" in text and "sugar" in text
    assert page.errors == []


def test_drag_and_drop_fills_the_file_input(server, page):
    page.goto(server.url("/"))
    dropped = page.evaluate("""() => {
        const dt = new DataTransfer();
        dt.items.add(new File(["a,b\\n1,2\\n2,4\\n3,7\\n"], "dropped.csv", {type: "text/csv"}));
        const zone = document.getElementById("dropzone");
        zone.dispatchEvent(new DragEvent("dragover", {dataTransfer: dt, bubbles: true, cancelable: true}));
        zone.dispatchEvent(new DragEvent("drop", {dataTransfer: dt, bubbles: true, cancelable: true}));
        const input = document.querySelector('[data-testid="upload-input"]');
        return [input.files.length, input.files[0] && input.files[0].name,
                document.getElementById("drop-file").textContent];
    }""")
    assert dropped == [1, "dropped.csv", "dropped.csv"]
    with page.expect_navigation():
        page.click('[data-testid="upload-submit"]')
    assert "/datasets/" in page.url and page.locator("h1").inner_text() == "dropped.csv"


def test_bad_file_shows_a_readable_message(server, page, files):
    _upload(page, server, files["bad"])
    message = page.locator('[data-testid="upload-error"]')
    assert message.is_visible()
    text = message.inner_text()
    assert "photo.csv" in text and len(text) < 400 and "Traceback" not in text
    screenshot(page, "upload-error", doc=True)
    _not_pwned(page)


def test_cancel_stops_a_run(server, page, files):
    _upload(page, server, files["slow"])
    for box in page.locator('input[name="measures"]').all():
        if box.get_attribute("value") != "dcor":
            box.uncheck()
        else:
            box.check()
    # Tiles of a few seconds: progress moves, and the run would last about a minute.
    page.fill('input[name="permutations"]', "12000")
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    analysis_id = page.url.rstrip("/").split("/")[-1]
    page.wait_for_selector('[data-testid="progress"]')
    page.wait_for_function("document.getElementById('progress').dataset.status === 'running' && "
                           "Number(document.getElementById('progress').getAttribute('aria-valuenow')) > 0",
                           timeout=90_000)
    assert "left" in page.locator("#progress-left").inner_text()
    _transitions_done(page)  # the bar's width transition
    screenshot(page, "running", doc=True)
    # a hang guard, not a latency check: cancel ends the run and the page moves on
    with page.expect_navigation(timeout=120_000):
        page.click('[data-testid="cancel-analysis"]')
    page.wait_for_selector("#final-status")
    assert page.locator("#final-status").inner_text() == "cancelled"
    status = httpx.get(server.url(f"/api/analyses/{analysis_id}"), timeout=10).json()
    assert status["status"] == "cancelled" and status["progress"] < 1
    screenshot(page, "cancelled")


def test_hostile_column_names_render_as_text(server, page, files):
    _upload(page, server, files["hostile"])
    _not_pwned(page)
    body = page.locator("#columns").inner_text()
    for name in HOSTILE:
        assert name in body
    screenshot(page, "hostile-dataset")
    for box in page.locator('input[name="measures"]').all():
        if box.get_attribute("value") in ("pearson", "spearman"):
            box.check()
        else:
            box.uncheck()
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    _wait_heatmaps(page, ["pearson", "spearman"])
    _not_pwned(page)
    page.wait_for_selector('#pair-table[data-ready="1"]')
    table_text = page.locator("#pair-table").inner_text()
    for name in HOSTILE:
        assert name in table_text
    ticks = page.locator("#col-labels .map-label").all_text_contents()
    assert sorted(ticks) == sorted(HOSTILE)
    page.wait_for_selector('#pair-table[data-ready="1"]')
    screenshot(page, "hostile-analysis")
    rows = page.locator("#pair-body tr")
    first_pair = next(i for i in range(rows.count())   # rows come by strength of evidence, not file order
                      if {rows.nth(i).get_attribute("data-x"), rows.nth(i).get_attribute("data-y")} == set(HOSTILE[:2]))
    rows.nth(first_pair).click()
    page.wait_for_url("**/pair?**")
    page.wait_for_selector('[data-testid="pair-scatter"][data-ready="1"]')
    page.wait_for_selector('#verdict:not([data-complete="no"])', timeout=60_000)
    _not_pwned(page)
    heading = page.locator("h1").inner_text()
    assert HOSTILE[0] in heading and HOSTILE[1] in heading
    screenshot(page, "hostile-pair")
    assert page.errors == []


def test_demo_dataset_is_loaded(server, page):
    page.goto(server.url("/"))
    assert page.get_by_text("vineyard_blocks.csv").count() >= 1
    with page.expect_navigation():
        page.click('[data-testid="open-demo"]')
    assert page.locator("h1").inner_text() == "vineyard_blocks.csv"
    assert page.locator("#left-out").inner_text().count("categorical") >= 1
    screenshot(page, "demo-dataset", doc=True)
