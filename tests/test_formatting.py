"""The one number rule (app/formatting.py) in Python and in the browser's script.

Expected strings are worked examples of the rule as the methods page states
it (pairlens.formatting.RULE); the browser check runs static/pairlens.js in
Chromium and asks for the same strings, so the faces cannot drift apart.
"""

from __future__ import annotations

import math
import os

import pytest

from pairlens.formatting import fmt, fmt_count, fmt_est, fmt_interval, fmt_p, fmt_share

CASES = [  # value, fmt, fmt_est, fmt_p -- worked examples of the stated rule
    (0.8224, "0.822", "0.822", "0.822"),
    (-0.04, "-0.040", "-0.040", "-0.040"),
    (4.31e-18, "4.3×10⁻¹⁸", "0.000", "4.3×10⁻¹⁸"),
    (7.0e-4, "7.0×10⁻⁴", "0.001", "7.0×10⁻⁴"),
    (-0.0004, "-4.0×10⁻⁴", "0.000", "-4.0×10⁻⁴"),
    (0.0, "0.000", "0.000", "< 10⁻³⁰⁰"),
    (12.5, "12.500", "12.500", "12.500"),
    (123456.0, "1.2×10⁵", "1.2×10⁵", "1.2×10⁵"),
    (None, "–", "–", "–"),
    (math.nan, "–", "–", "–"),
]


@pytest.mark.parametrize("value,general,estimate,p", CASES)
def test_rule_in_python(value, general, estimate, p):
    assert fmt(value) == general
    assert fmt_est(value) == estimate
    assert fmt_p(value) == p


def test_counts_intervals_and_shares():
    assert fmt_count(44850) == "44\u2009850"
    assert fmt_interval(0.822, 0.8976) == "[0.822, 0.898]"  # both ends three decimals, never 0.8975
    assert fmt_interval(0.822, None) == "–"
    assert fmt_share(689, 930) == "689 of 930"


@pytest.mark.browser
@pytest.mark.skipif(not os.path.exists("/usr/bin/chromium") and not os.environ.get("CI"),
                    reason="needs /usr/bin/chromium and playwright")
def test_browser_script_follows_the_same_rule(browser):
    from pathlib import Path

    script = (Path(__file__).resolve().parents[1] / "static" / "pairlens.js").read_text(encoding="utf-8")
    values = [c[0] if c[0] is None or not math.isnan(c[0]) else None for c in CASES]
    page = browser.new_page()
    try:
        page.set_content("<!doctype html><html><body></body></html>")
        page.add_script_tag(content=script)
        got = page.evaluate("""(vals) => vals.map(v => [window.pairlens.fmt(v), window.pairlens.fmtEst(v),
                                                       window.pairlens.fmtP(v)])""", values)
        counts = page.evaluate("window.pairlens.fmtCount(44850)")
    finally:
        page.close()
    assert got == [[fmt(v), fmt_est(v), fmt_p(v)] for v in values]
    assert counts == fmt_count(44850)
