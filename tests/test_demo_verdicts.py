"""pairlens on the invented vineyard demo data finds what the generator planted.

The planted relationships and their intended verdicts are documented in
sample_data/README.md (the generator is sample_data/make_vineyard.py); this test
runs the whole pipeline -- ingest, engine, verdict -- through the public API and
the command line.
"""

import csv
import io
import subprocess
import sys

import pytest

from pairlens import config
from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.pairs import pair_detail
from pairlens.ingest import load_table

PLANTED = {
    ("soil_moisture_20cm", "soil_moisture_60cm"): "linear",
    ("canopy_temp_c", "sugar_brix"): "monotone but curved",
    ("leaf_wetness_h", "disease_score"): "linear",
    ("irrigation_min", "berry_weight_g"): "non-monotone",
    ("dew_point_anomaly_c", "canopy_humidity_anomaly_pct"): "non-monotone",
    ("acidity_g_l", "yan_mg_l"): "driven by a few points",
}
INDEPENDENT = ["week", "slope_aspect_deg", "sensor_drift_a", "sensor_drift_b", "trap_count_noise", "gust_noise_kmh"]
# Drawn once per vine block and repeated on its 24 weekly rows: a pair of two such columns has 40
# independent blocks, not 960 independent rows, and every row-level test (which assumes
# independent rows) overstates its evidence. Measured: row_orientation x slope_aspect_deg, drawn
# independently per block, gets dCor q = 1e-5. Such pairs are left out of the null checks.
BLOCK_LEVEL = {"slope_aspect_deg", "row_orientation"}


def _both_block_level(x: str, y: str) -> bool:
    return x in BLOCK_LEVEL and y in BLOCK_LEVEL


@pytest.fixture(scope="module")
def analysis():
    table = load_table(config.DEMO_FILE)
    settings = AnalysisSettings.from_options(measures="pearson,spearman,kendall,dcor,xi")
    return table, settings, run_analysis(table.data, table.columns, settings, workers=1)


@pytest.mark.parametrize("pair", list(PLANTED), ids=["-".join(p) for p in PLANTED])
def test_every_planted_relationship_gets_its_intended_verdict(analysis, pair):
    table, settings, result = analysis
    detail = pair_detail(table.data, table.columns, *pair, settings, table=result)
    assert detail["pattern"]["label"] == PLANTED[pair], detail["pattern"]["reasons"]
    assert detail["pattern"]["reasons"]


def test_cross_shaped_pair_is_explained_as_not_jointly_normal(analysis):
    table, settings, result = analysis
    detail = pair_detail(table.data, table.columns, "dew_point_anomaly_c", "canopy_humidity_anomaly_pct",
                         settings, table=result)
    text = " ".join(detail["pattern"]["reasons"]).lower()
    assert "zero correlation" in text and "independ" in text and "jointly normal" in text


def test_nothing_significant_among_the_independent_columns(analysis):
    _, _, result = analysis
    for row in result.rows:
        if (row.x in INDEPENDENT or row.y in INDEPENDENT) and not _both_block_level(row.x, row.y):
            assert row.q_value >= config.SIGNIFICANCE_LEVEL, (row.x, row.y, row.measure, row.q_value)


def test_every_unplanted_pair_is_called_no_evidence():
    # With the default measures. Adding xi (306 more tests) brings one chance discovery
    # between two columns drawn independently (canopy_temp_c -> canopy_humidity_anomaly_pct,
    # q = 0.021): Benjamini-Hochberg bounds the false discovery rate, not the chance of
    # any false discovery, so that is within what the method promises.
    table = load_table(config.DEMO_FILE)
    settings = AnalysisSettings.from_options()
    result = run_analysis(table.data, table.columns, settings, workers=1)
    # the confounded pair and the columns canopy temperature drives (sample_data/README.md)
    driven = {"evaporation_mm", "leaf_stress_index"}
    related = {"canopy_temp_c", "sugar_brix"} | driven
    planted = set(PLANTED) | {(b, a) for a, b in PLANTED}
    planted |= {(a, b) for a in related for b in related if a != b and {a, b} & driven}
    found = []
    for row in result.rows:
        if row.measure != "pearson" or (row.x, row.y) in planted or _both_block_level(row.x, row.y):
            continue
        if "grape_variety" in (row.x, row.y):  # drawn given sugar and acidity: related to them and their drivers
            continue
        detail = pair_detail(table.data, table.columns, row.x, row.y, settings, table=result)
        if detail["pattern"]["label"] != "no evidence of dependence":
            found.append((row.x, row.y, detail["pattern"]["label"]))
    # Benjamini-Hochberg bounds the false discovery rate, not the chance of any false discovery:
    # with the categorical columns' tests in the families, one chance discovery between columns
    # drawn independently appears (acidity_g_l x leaf_stress_index, dCor q just under 0.05;
    # dcor's own permutation test gives p = 0.005 on these rows). More than one would be a fault.
    print("unplanted pairs with a verdict other than no evidence:", found)
    assert len(found) <= 1, found


def test_command_line_pair_table_on_demo_data():
    out = subprocess.run([sys.executable, "-m", "pairlens.cli", "pairs", str(config.DEMO_FILE)],
                         capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    rows = list(csv.DictReader(io.StringIO(out.stdout)))
    # 20 numeric columns (18, and the confounded pair evaporation_mm, leaf_stress_index) and two
    # categorical ones (row_orientation, grape_variety); each pair takes the measures of the run
    # (the defaults, plus the categorical defaults) that apply to its kinds (registry ``kinds``)
    from pairlens.core.registry import MEASURES

    run = config.DEFAULT_MEASURES + tuple(m for m in config.DEFAULT_CATEGORICAL_MEASURES
                                          if m not in config.DEFAULT_MEASURES)
    kinds = ["numeric"] * 20 + ["categorical"] * 2
    expected = sum((1 if MEASURES[m].symmetric else 2)
                   for i in range(len(kinds)) for j in range(i + 1, len(kinds))
                   for m in run if MEASURES[m].applies_to(kinds[i], kinds[j]))
    assert len(rows) == expected
    sig = {(r["x"], r["y"]) for r in rows if r["q_value"] and float(r["q_value"]) < 0.05}
    for pair in PLANTED:
        assert pair in sig or pair[::-1] in sig
    # the variety was drawn given the rows' ripeness (sample_data/README.md)
    assert ("sugar_brix", "grape_variety") in sig or ("grape_variety", "sugar_brix") in sig
