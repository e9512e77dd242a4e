"""Readability of the analysis page's maps at 31, 100, 300 and 1,000 columns, in a real Chromium at 1400 px.

Generated tables (seeded normal blocks, names of varied length) are analysed
through the API; the page is then measured: every drawn label inside the page,
at least 10 px high, no two labels overlapping; past 60 columns the labels
left out are reached by zooming in. A click on a cell shows that pair's
scatter while the maps are still on screen. The pair table at 6 measures keeps
every name on one line. Screenshots of the analysis page at 18 (the invented
demo), 31 and 300 columns go to docs/screenshots/ with PAIRLENS_UPDATE_SCREENSHOTS=1.
"""

from __future__ import annotations

import os

import httpx
import numpy as np
import pytest

from browser_helpers import Server, chromium_available, screenshot

pytestmark = [pytest.mark.browser,
              pytest.mark.skipif(not chromium_available() and not os.environ.get("CI"),
                                 reason="needs /usr/bin/chromium and playwright (never skipped in CI)")]

WIDTH, HEIGHT = 1400, 900



def _next_frame(page) -> None:
    """Wait for the browser to paint the next animation frame (a state, not a time)."""
    page.evaluate("() => new Promise(done => requestAnimationFrame(() => requestAnimationFrame(done)))")

def _names(k: int) -> list[str]:
    stems = ["soil_moisture", "ph", "canopy_temp_c", "leaf_wetness_h", "brix", "yield_kg_per_vine", "n"]
    return [f"{stems[i % len(stems)]}_{i:03d}" for i in range(k)]


def _csv(k: int, n: int, seed: int) -> bytes:
    rng = np.random.default_rng(seed)
    blocks = rng.normal(size=(n, k // 5 + 1))
    data = np.repeat(blocks, 5, axis=1)[:, :k] + rng.normal(scale=1.2, size=(n, k))
    lines = [",".join(_names(k))] + [",".join(f"{v:.4f}" for v in row) for row in data]
    return ("\n".join(lines) + "\n").encode()


def _submit(srv: Server, content: bytes, name: str, measures: list[str], tests: dict | None = None) -> str:
    with httpx.Client(timeout=120) as c:
        ds = c.post(srv.url("/api/datasets"), files={"file": (name, content, "text/csv")}).json()
        body = {"measures": measures} | ({"tests": tests} if tests else {})
        return c.post(srv.url(f"/api/datasets/{ds['id']}/analyses"), json=body).json()["id"]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    data_dir = tmp_path_factory.mktemp("maps") / "data"
    data_dir.mkdir()
    srv = Server(data_dir, demo=True)
    # All four are submitted before any is awaited: the server runs two at once, so their
    # start-up and saving overlap instead of adding up. These tests read the maps' layout, not
    # p-values, so the wide tables use Pearson's t-test, the cheapest test per pair.
    analyses = {
        31: _submit(srv, _csv(31, 150, 31), "wide31.csv", ["pearson", "spearman", "kendall", "dcor"]),
        100: _submit(srv, _csv(100, 80, 100), "wide100.csv", ["pearson", "spearman"], {"pearson": "t"}),
        300: _submit(srv, _csv(300, 40, 300), "wide300.csv", ["pearson"], {"pearson": "t"}),
        "six": _submit(srv, _csv(8, 120, 6), "six.csv", ["pearson", "spearman", "kendall", "dcor", "dcor_bc", "xi"]),
        # 499,500 pairs with their verdicts: Pearson from the matrix products, the evidence pair by pair
        1000: _submit(srv, _csv(1000, 30, 1000), "wide1000.csv", ["pearson"], {"pearson": "t"}),
    }
    for aid in analyses.values():
        status = srv.wait_done(aid, timeout=900)
        assert status["status"] == "done", status
    srv.analyses = analyses
    yield srv
    srv.stop()


@pytest.fixture()
def page(browser):
    context = browser.new_context(viewport={"width": WIDTH, "height": HEIGHT})
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda exc: errors.append(str(exc)))
    pg.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    pg.errors = errors
    yield pg
    context.close()


_LABELS = """() => {
  const doc = document.documentElement;
  return Array.from(document.querySelectorAll('#focus-map .map-label')).map(e => {
    const r = e.getBoundingClientRect();
    return {text: e.textContent, title: e.title, kind: e.classList.contains('row') ? 'row' : 'col',
            left: r.left + window.scrollX, right: r.right + window.scrollX, top: r.top + window.scrollY,
            bottom: r.bottom + window.scrollY, font: parseFloat(getComputedStyle(e).fontSize),
            clipped: e.scrollWidth > e.clientWidth + 0.5 || e.scrollHeight > e.clientHeight + 0.5,
            pageWidth: doc.scrollWidth};
  });
}"""


def _check_labels(labels: list[dict]) -> None:
    assert labels
    for lab in labels:
        assert lab["font"] >= 10, lab
        assert lab["left"] >= 0 and lab["right"] <= lab["pageWidth"] and lab["top"] >= 0, lab
    for kind, start, end in (("row", "top", "bottom"), ("col", "left", "right")):
        boxes = sorted((b for b in labels if b["kind"] == kind), key=lambda b: b[start])
        for a, b in zip(boxes, boxes[1:]):
            assert b[start] >= a[end] - 0.01, (a, b)   # no two labels of one axis overlap


def _open(page, srv: Server, key) -> None:
    page.goto(srv.url(f"/analyses/{srv.analyses[key]}"))
    page.wait_for_selector('#focus-map[data-ready="1"]')


def _in_viewport(page, selector: str) -> bool:
    return page.evaluate("""(sel) => { const r = document.querySelector(sel).getBoundingClientRect();
        return r.bottom > 0 && r.right > 0 && r.top < window.innerHeight && r.left < window.innerWidth; }""", selector)


def _click_cell(page, i: int, j: int) -> dict:
    x, y = page.evaluate("([i, j]) => window.pairlensMaps.cellCentre(i, j)", [i, j])
    page.mouse.click(x, y)
    page.wait_for_selector('[data-testid="pair-scatter"][data-ready="1"]')
    return page.evaluate("""() => { const s = document.querySelector('[data-testid="pair-scatter"]');
                                    return {x: s.dataset.x, y: s.dataset.y, n: Number(s.dataset.n)}; }""")


def test_31_columns_every_label_readable_and_a_click_shows_the_scatter(server, page):
    _open(page, server, 31)
    labels = page.evaluate(_LABELS)
    _check_labels(labels)
    names = _names(31)
    # Every column is named on both axes, in full.
    assert sorted(b["text"] for b in labels if b["kind"] == "row") == sorted(names)
    assert sorted(b["text"] for b in labels if b["kind"] == "col") == sorted(names)
    assert not any(b["clipped"] for b in labels)
    # One map per measure, side by side in one row.
    tops = [page.locator(f'[data-testid="heatmap-{m}"]').bounding_box()["y"]
            for m in ("pearson", "spearman", "kendall", "dcor")]
    assert max(tops) - min(tops) < 2
    # A click on the cell at row 5, column 2 pins that pair's scatter beside the map.
    page.locator("#focus-map").scroll_into_view_if_needed()
    shown = _click_cell(page, 5, 2)
    order = page.evaluate("window.pairlensMaps.variables")
    assert {shown["x"], shown["y"]} == {order[5], order[2]}
    assert shown["n"] == 150
    assert _in_viewport(page, "#focus-canvas") and _in_viewport(page, "#scatter-canvas")
    # The panel's numbers are those of the contract's pair table.
    records = httpx.get(server.url(f"/api/analyses/{server.analyses[31]}/pairs"), timeout=30).json()
    rec = next(r for r in records if r["measure"] == "pearson" and {r["x"], r["y"]} == {order[5], order[2]})
    cell = page.locator('#panel-measures tr[data-measure="pearson"] td').nth(1).inner_text()
    assert cell == f"{rec['estimate']:.3f}"  # the formatter's rule: three decimals in this range
    # Arrow keys move between cells; the scatter follows.
    page.locator("#focus-map").focus()
    page.keyboard.press("ArrowRight")
    page.wait_for_function("""(want) => { const s = document.querySelector('[data-testid="pair-scatter"]');
        return s.dataset.ready === '1' && s.dataset.x === want; }""", arg=order[3])
    assert page.evaluate("window.pairlensMaps.state.pin") == {"i": 5, "j": 3}
    assert page.errors == []
    page.mouse.move(5, 5)
    page.locator("#column-search").focus()   # no focus ring on the map in the picture
    screenshot(page, "analysis-31", doc=True, full_page=False)


@pytest.mark.parametrize("key", [100, 300])
def test_wide_maps_label_what_fits_and_zoom_reaches_the_rest(server, page, key):
    _open(page, server, key)
    labels = page.evaluate(_LABELS)
    _check_labels(labels)
    step = int(page.get_attribute("#focus-map", "data-label-step"))
    assert step > 1   # past 60 columns not every name fits at 10 px and more
    names = page.evaluate("window.pairlensMaps.variables")
    assert [b["text"] for b in labels if b["kind"] == "row"] == names[::step]
    # the hint says which names are shown, in English ordinals ("every 3rd", "every 12th"; common practice)
    suffix = "th" if step % 100 in (11, 12, 13) else {1: "st", 2: "nd", 3: "rd"}.get(step % 10, "th")
    assert f"every {step}{suffix} name shown" in page.inner_text("#focus-hint")
    # Zoom in until every row in view is named; the labels still keep apart and inside the page.
    for _ in range(8):
        if page.get_attribute("#focus-map", "data-label-step") == "1":
            break
        page.click("#zoom-in")
        page.wait_for_function("document.getElementById('focus-map').dataset.ready === '1'")
        _next_frame(page)  # the redraw happens on the next animation frame
    assert page.get_attribute("#focus-map", "data-label-step") == "1"
    view = page.evaluate("window.pairlensMaps.state")
    zoomed = page.evaluate(_LABELS)
    _check_labels(zoomed)
    assert [b["text"] for b in zoomed if b["kind"] == "row"] == names[view["r0"]:view["r0"] + view["n"]]
    # The search box jumps to a column outside the view.
    target = names[-2]
    page.fill("#column-search", target)
    page.press("#column-search", "Enter")
    page.wait_for_function("(want) => Array.from(document.querySelectorAll('#row-labels .found'))"
                           ".some(e => e.textContent === want)", arg=target)
    # Hover names any cell, zoomed or not.
    page.click("#zoom-fit")
    page.wait_for_function("document.getElementById('focus-map').dataset.ready === '1'")
    _next_frame(page)
    x, y = page.evaluate("window.pairlensMaps.cellCentre(7, 3)")
    page.mouse.move(x, y)
    tip = page.locator("#map-tip")
    tip.wait_for(state="visible")
    assert names[7] in tip.inner_text() and names[3] in tip.inner_text()
    assert page.errors == []
    if key == 300:
        shown = _click_cell(page, 120, 40)
        assert {shown["x"], shown["y"]} == {names[120], names[40]}
        assert _in_viewport(page, "#focus-canvas")
        page.mouse.move(5, 5)
        screenshot(page, "analysis-300", doc=True, full_page=False)
        # counts grouped in threes with a thin space, as the page header writes them (pairlens.js fmtCount)
        page.wait_for_selector('#pair-table[data-ready="1"]')
        assert "(44\u2009850 in all)" in page.inner_text("#pair-count")
        for shown_from in range(101, 1002, 100):   # ten pages on, past the first thousand rows
            page.click("#pair-more")
            want = f"rows {shown_from:,}–".replace(",", "\u2009")
            page.wait_for_function("(want) => document.getElementById('pair-count').textContent.startsWith(want)",
                                   arg=want)
        assert page.inner_text("#pair-count").startswith("rows 1\u2009001–1\u2009100 of 44\u2009850")


def test_a_thousand_columns_overview_zoom_into_a_block_and_click(server, page):
    _open(page, server, 1000)
    names = page.evaluate("window.pairlensMaps.variables")
    assert len(names) == 1000
    overview = page.evaluate("window.pairlensMaps.state")
    assert overview["n"] == 1000            # the overview draws every column
    assert int(page.get_attribute("#focus-map", "data-label-step")) > 1
    _check_labels(page.evaluate(_LABELS))
    for _ in range(3):                      # into a block
        page.click("#zoom-in")
        page.wait_for_function("document.getElementById('focus-map').dataset.ready === '1'")
        _next_frame(page)
    view = page.evaluate("window.pairlensMaps.state")
    assert view["n"] < 200 and 0 <= view["r0"] <= 1000 - view["n"]
    zoomed = page.evaluate(_LABELS)
    _check_labels(zoomed)
    step = int(page.get_attribute("#focus-map", "data-label-step"))
    assert [b["text"] for b in zoomed if b["kind"] == "row"] == names[view["r0"]:view["r0"] + view["n"]:step]
    i, j = view["r0"] + view["n"] // 2, view["r0"] + view["n"] // 2 - 3
    shown = _click_cell(page, i, j)
    assert {shown["x"], shown["y"]} == {names[i], names[j]} and shown["n"] == 30
    assert _in_viewport(page, "#focus-canvas")
    assert page.errors == []


def test_pair_table_at_six_measures_keeps_names_on_one_line(server, page):
    _open(page, server, "six")
    page.wait_for_selector('#pair-table[data-ready="1"]')
    page.locator("#pair-table").scroll_into_view_if_needed()
    cells = page.evaluate("""() => Array.from(document.querySelectorAll('#pair-body td.name')).map(td => {
        const r = td.getBoundingClientRect(), lh = parseFloat(getComputedStyle(td).fontSize) * 1.6;
        return {h: r.height, line: lh, text: td.textContent, title: td.title,
                white: getComputedStyle(td).whiteSpace}; })""")
    assert len(cells) == 2 * 28
    for c in cells:
        assert c["white"] == "nowrap" and c["title"] == c["text"]
        assert c["h"] < 2 * c["line"], c      # one line of text plus padding, never a letter per line
    heads = page.locator("#pair-head th").all_inner_texts()
    assert heads[:3] == ["x", "y", "n"] and len(heads) == 3 + 2 * 7 + 1   # xi has a column per direction
    assert sum("→" in h for h in heads) == 2 and not any("->" in h for h in heads)
    # The table scrolls sideways instead of crushing its columns.
    widths = page.evaluate("""() => { const box = document.querySelector('#pair-table').parentElement;
        return [box.scrollWidth, box.clientWidth, getComputedStyle(box).overflowX]; }""")
    assert widths[2] == "auto"
    assert page.errors == []


def test_demo_page_screenshot(server, page):
    page.goto(server.url("/"))
    with page.expect_navigation():
        page.click('[data-testid="open-demo"]')
    with page.expect_navigation():
        page.click('[data-testid="run-analysis"]')
    page.wait_for_selector('#focus-map[data-ready="1"]', timeout=120_000)
    labels = page.evaluate(_LABELS)
    _check_labels(labels)
    page.locator("#workbench").scroll_into_view_if_needed()
    _click_cell(page, 2, 1)
    page.mouse.move(5, 5)
    screenshot(page, "analysis-18", doc=True, full_page=False)
    assert page.errors == []
