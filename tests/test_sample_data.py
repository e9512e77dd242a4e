"""The invented vineyard demo table: reproducible, and its planted relationships are there.

Every check compares against an outside library (scipy.stats, dcor, statsmodels, pingouin,
numpy) or against the specification in sample_data/README.md; the source is named beside it.
pairlens' own code is not used here.
"""

from __future__ import annotations

import itertools
import re
import subprocess
import sys
from pathlib import Path

import dcor
import numpy as np
import pandas as pd
import pingouin
import pytest
import scipy.stats as st
import statsmodels.api as sm

SAMPLE_DIR = Path(__file__).resolve().parents[1] / "sample_data"
GENERATOR = SAMPLE_DIR / "make_vineyard.py"
CSV = SAMPLE_DIR / "vineyard_blocks.csv"

TEXT_COLUMNS = ("block_id", "row_orientation")
# The planted pairs and their intended verdicts, as listed in sample_data/README.md.
PLANTED = {
    ("soil_moisture_20cm", "soil_moisture_60cm"): "linear",
    ("canopy_temp_c", "sugar_brix"): "monotone but curved",
    ("leaf_wetness_h", "disease_score"): "linear",
    ("irrigation_min", "berry_weight_g"): "non-monotone",
    ("dew_point_anomaly_c", "canopy_humidity_anomaly_pct"): "non-monotone",
    ("acidity_g_l", "yan_mg_l"): "driven by a few points",
}
# Drawn independently of every other column (README, "independent columns").
INDEPENDENT = ("week", "slope_aspect_deg", "sensor_drift_a", "sensor_drift_b",
               "trap_count_noise", "gust_noise_kmh")
MISSING_COLUMNS = ("soil_moisture_60cm", "canopy_temp_c")
# Related through canopy temperature, the planted confounder (sample_data/README.md): evaporation and
# leaf stress follow it, and sugar follows it too, so all five of these pairs are dependent.
CONFOUNDED = {("evaporation_mm", "leaf_stress_index"), ("canopy_temp_c", "evaporation_mm"),
              ("canopy_temp_c", "leaf_stress_index"), ("sugar_brix", "evaporation_mm"),
              ("sugar_brix", "leaf_stress_index")}
N_NUMERIC = 20
ALPHA = 0.05
PERMUTATIONS = 199       # smallest attainable permutation p-value is 1 / 200


@pytest.fixture(scope="module")
def table() -> pd.DataFrame:
    return pd.read_csv(CSV, dtype={"block_id": str, "row_orientation": str})


@pytest.fixture(scope="module")
def numeric(table) -> list[str]:
    return [c for c in table.columns if c not in TEXT_COLUMNS + ("grape_variety",)]   # issue 18's column is text


def _pair(table, a, b):
    both = table[[a, b]].dropna()
    return both[a].to_numpy(float), both[b].to_numpy(float)


@pytest.fixture(scope="module")
def all_pairs(table, numeric) -> pd.DataFrame:
    """Pearson and Spearman for every pair (pairwise complete), BH-adjusted over all pairs."""
    rows = []
    for a, b in itertools.combinations(numeric, 2):
        x, y = _pair(table, a, b)
        pearson = st.pearsonr(x, y)          # scipy.stats.pearsonr, t test with n-2 df
        spearman = st.spearmanr(x, y)        # scipy.stats.spearmanr, t approximation
        rows.append({"x": a, "y": b, "r": pearson.statistic, "p_r": pearson.pvalue,
                     "rho": spearman.statistic, "p_rho": spearman.pvalue,
                     # dcor.distance_correlation, O(n log n) univariate algorithm
                     "dcor": dcor.distance_correlation(x, y, method="mergesort")})
    frame = pd.DataFrame(rows)
    # scipy.stats.false_discovery_control: Benjamini-Hochberg over all pairs, per measure
    frame["q_r"] = st.false_discovery_control(frame["p_r"].to_numpy(), method="bh")
    frame["q_rho"] = st.false_discovery_control(frame["p_rho"].to_numpy(), method="bh")
    return frame.set_index(["x", "y"])


def _row(all_pairs, a, b):
    return all_pairs.loc[(a, b)] if (a, b) in all_pairs.index else all_pairs.loc[(b, a)]


def _quadratic_term_p(x, y) -> tuple[float, float]:
    """Coefficient and p-value of the squared term in y ~ 1 + z + z^2 (z = standardised x)."""
    z = (x - x.mean()) / x.std()
    fit = sm.OLS(y, sm.add_constant(np.column_stack([z, z**2]))).fit()   # statsmodels OLS
    return float(fit.params[2]), float(fit.pvalues[2])


def _permutation_dcov_p(x, y) -> float:
    result = dcor.independence.distance_covariance_test(   # dcor permutation test
        x, y, num_resamples=PERMUTATIONS, random_state=np.random.default_rng(7))
    return float(result.pvalue)


# Reproducibility ---------------------------------------------------------------------------

def test_generator_rewrites_the_committed_csv_byte_for_byte(tmp_path):
    out = tmp_path / "vineyard_blocks.csv"
    subprocess.run([sys.executable, str(GENERATOR), "--out", str(out)], check=True,
                   capture_output=True, timeout=60)
    assert out.read_bytes() == CSV.read_bytes()


# Layout (specification: sample_data/README.md) -------------------------------------------

def test_layout_matches_the_readme(table, numeric):
    assert table.shape == (960, 23)   # 20 numeric (with the confounded pair), block_id, row_orientation, grape_variety
    # the categorical column appended by issue 18 (sample_data/README.md)
    assert set(table["grape_variety"]) == {"Chardonnay", "Pinot noir", "Syrah"}
    assert list(table.columns)[-1] == "grape_variety"
    assert all(re.fullmatch(r"B\d\d", b) for b in table["block_id"])
    assert table["block_id"].nunique() == 40
    assert (table.groupby("block_id")["week"].apply(sorted)
            .map(lambda w: w == list(range(1, 25)))).all()
    assert set(table["row_orientation"]) <= {"N-S", "E-W", "NE-SW", "NW-SE"}
    per_block = table.groupby("block_id")[["row_orientation", "slope_aspect_deg"]].nunique()
    assert (per_block == 1).all().all()                 # block attributes do not vary by week
    assert table["slope_aspect_deg"].between(0, 359).all()
    for name in numeric:                                # pandas parses every value column as numbers
        assert pd.api.types.is_numeric_dtype(table[name]), name
    for name in ("week", "slope_aspect_deg", "irrigation_min", "disease_score",
                 "trap_count_noise"):
        assert (table[name].dropna() % 1 == 0).all(), name


def test_missing_cells_are_few_blank_and_at_random(table):
    fractions = table.isna().mean()
    assert set(fractions[fractions > 0].index) == set(MISSING_COLUMNS)
    for name in MISSING_COLUMNS:
        assert table[name].isna().sum() == 48, name     # README: 48 of 960 cells (5 %)
    # Blank cells in the file itself, not a sentinel such as NA or -999.
    cells = [line.split(",") for line in CSV.read_text().splitlines()[1:]]
    assert sum(cell == "" for line in cells for cell in line) == table.isna().sum().sum()
    first, second = (table[c].isna().to_numpy() for c in MISSING_COLUMNS)
    contingency = [[np.sum(first & second), np.sum(first & ~second)],
                   [np.sum(~first & second), np.sum(~first & ~second)]]
    assert st.fisher_exact(contingency).pvalue > 0.01   # scipy.stats.fisher_exact
    # Missingness must not depend on the partner column of the planted pair.
    for gone, partner in (("soil_moisture_60cm", "soil_moisture_20cm"),
                          ("canopy_temp_c", "sugar_brix")):
        mask = table[gone].isna()
        # scipy.stats.mannwhitneyu: partner values where the cell is blank vs present
        assert st.mannwhitneyu(table.loc[mask, partner], table.loc[~mask, partner]).pvalue > 0.01


# Planted relationships ---------------------------------------------------------------------

def test_linear_pair(table, all_pairs):
    x, y = _pair(table, "soil_moisture_20cm", "soil_moisture_60cm")
    row = _row(all_pairs, "soil_moisture_20cm", "soil_moisture_60cm")
    assert row["q_r"] < 1e-6                             # scipy pearsonr + BH
    assert 0.75 <= row["r"] <= 0.85
    # Gaussian pair with Pearson r has Spearman 6/pi asin(r/2) (Pearson 1907; Kruskal 1958,
    # from memory); scipy spearmanr matches what the Pearson r implies.
    assert abs(row["rho"] - 6 / np.pi * np.arcsin(row["r"] / 2)) < 0.03
    assert _quadratic_term_p(x, y)[1] > 0.01             # statsmodels OLS: no curvature
    # pingouin.multivariate_normality (Henze-Zirkler): jointly Gaussian pair
    assert pingouin.multivariate_normality(np.column_stack([x, y])).pval > 0.01


def test_monotone_curved_sugar_saturates_with_canopy_temperature(table, all_pairs):
    x, y = _pair(table, "canopy_temp_c", "sugar_brix")
    row = _row(all_pairs, "canopy_temp_c", "sugar_brix")
    assert row["q_rho"] < 1e-6                           # scipy spearmanr + BH
    assert row["rho"] >= 0.95                            # nearly perfectly monotone
    assert row["rho"] - row["r"] >= 0.1                  # scipy: ranks far more aligned than values
    # Gaussian pair with Pearson r has Spearman 6/pi asin(r/2) (Pearson 1907; Kruskal 1958,
    # from memory); the observed Spearman is well above what the Pearson r implies.
    assert row["rho"] - 6 / np.pi * np.arcsin(row["r"] / 2) >= 0.1
    coef, p = _quadratic_term_p(x, y)                    # statsmodels OLS
    assert coef < 0 and p < 1e-6                         # concave: saturating


def test_heavy_ties_disease_score_rises_steadily_with_leaf_wetness(table, all_pairs):
    score = table["disease_score"]
    counts = score.value_counts()
    assert set(counts.index) == {0, 1, 2, 3, 4, 5}
    assert len(counts) == 6 and counts.min() >= 50       # heavy ties: 960 rows on six levels
    x, y = _pair(table, "leaf_wetness_h", "disease_score")
    tau = st.kendalltau(x, y)                            # scipy.stats.kendalltau, tau-b (tie-adjusted)
    assert tau.statistic > 0.6 and tau.pvalue < 1e-6
    row = _row(all_pairs, "leaf_wetness_h", "disease_score")
    assert row["q_rho"] < 1e-6 and row["q_r"] < 1e-6    # scipy spearmanr and pearsonr
    assert abs(row["rho"] - row["r"]) < 0.05             # straight trend: ranks and values agree
    # Monotone: mean score rises across leaf-wetness sextiles (pandas qcut, common practice).
    means = table.groupby(pd.qcut(table["leaf_wetness_h"], 6), observed=True)["disease_score"].mean()
    assert np.all(np.diff(means.to_numpy()) > 0) and means.iloc[-1] - means.iloc[0] > 3


def test_non_monotone_berry_weight_peaks_at_moderate_irrigation(table, all_pairs):
    x, y = _pair(table, "irrigation_min", "berry_weight_g")
    row = _row(all_pairs, "irrigation_min", "berry_weight_g")
    assert abs(row["r"]) < 0.1 and row["p_r"] > 0.05     # scipy pearsonr sees nothing
    assert abs(row["rho"]) < 0.1                         # scipy spearmanr sees nothing
    assert row["dcor"] >= 0.3                            # dcor.distance_correlation
    assert _permutation_dcov_p(x, y) <= 1 / (PERMUTATIONS + 1)   # dcor permutation test
    a, b, _ = np.polyfit(x, y, 2)                        # numpy.polyfit quadratic
    vertex = -b / (2 * a)
    assert a < 0 and 0.4 <= (vertex - x.min()) / (x.max() - x.min()) <= 0.6
    assert _quadratic_term_p(x, y)[1] < 1e-6             # statsmodels OLS


def test_cross_has_normal_marginals_zero_correlation_and_strong_dependence(table, all_pairs):
    x, y = _pair(table, "dew_point_anomaly_c", "canopy_humidity_anomaly_pct")
    assert st.normaltest(x).pvalue > 0.01                # scipy.stats.normaltest (D'Agostino-Pearson)
    assert st.normaltest(y).pvalue > 0.01
    row = _row(all_pairs, "dew_point_anomaly_c", "canopy_humidity_anomaly_pct")
    assert abs(row["r"]) < 0.1 and abs(row["rho"]) < 0.1   # scipy pearsonr, spearmanr
    assert st.pearsonr(np.abs(x), np.abs(y)).statistic > 0.9   # scipy: |y| follows |x|
    # pingouin Henze-Zirkler: normal marginals, but the pair is not jointly normal.
    assert pingouin.multivariate_normality(np.column_stack([x, y])).pval < 1e-6
    assert _permutation_dcov_p(x, y) <= 1 / (PERMUTATIONS + 1)   # dcor permutation test
    null_dcor = [_row(all_pairs, a, b)["dcor"] for a, b in itertools.combinations(INDEPENDENT, 2)]
    assert row["dcor"] >= 2.5 * max(null_dcor)           # dcor.distance_correlation


def test_pair_driven_by_a_few_outlier_rows(table, all_pairs):
    a, b = table["acidity_g_l"], table["yan_mg_l"]
    row = _row(all_pairs, "acidity_g_l", "yan_mg_l")
    assert row["q_r"] < 1e-6 and row["r"] >= 0.25        # scipy pearsonr + BH
    assert abs(row["rho"]) < 0.1 and row["q_rho"] > ALPHA   # scipy spearmanr: ranks barely move
    # Robust z by scipy.stats.median_abs_deviation (normal-consistent scale).
    za = (a - a.median()) / st.median_abs_deviation(a, scale="normal")
    zb = (b - b.median()) / st.median_abs_deviation(b, scale="normal")
    extreme = (za > 6) & (zb > 6)
    assert 3 <= extreme.sum() <= 5
    assert table.loc[extreme, "week"].nunique() == 1     # one faulty lab batch
    assert (za[~extreme].abs() < 6).all() and (zb[~extreme].abs() < 6).all()
    rest = st.pearsonr(a[~extreme], b[~extreme])         # scipy pearsonr without those rows
    assert abs(rest.statistic) < 0.1 and rest.pvalue > 0.05


# Independence of everything else ------------------------------------------------------------

def test_independent_columns_show_nothing_after_bh(all_pairs):
    involved = [key for key in all_pairs.index if set(key) & set(INDEPENDENT)]
    assert len(involved) == len(INDEPENDENT) * (N_NUMERIC - 1) - len(INDEPENDENT) * (len(INDEPENDENT) - 1) // 2
    rows = all_pairs.loc[involved]
    # scipy pearsonr / spearmanr, BH over all 190 pairs by scipy.stats.false_discovery_control
    assert (rows["q_r"] > ALPHA).all(), rows[rows["q_r"] <= ALPHA]
    assert (rows["q_rho"] > ALPHA).all(), rows[rows["q_rho"] <= ALPHA]


def test_only_the_planted_pairs_are_related(all_pairs):
    planted = {tuple(sorted(k)) for k in PLANTED} | {tuple(sorted(k)) for k in CONFOUNDED}
    others = all_pairs[[tuple(sorted(k)) not in planted for k in all_pairs.index]]
    assert len(others) == len(all_pairs) - len(PLANTED) - len(CONFOUNDED)
    assert (others["q_r"] > ALPHA).all(), others[others["q_r"] <= ALPHA]
    assert (others["q_rho"] > ALPHA).all(), others[others["q_rho"] <= ALPHA]
    # dcor.distance_correlation: every unplanted pair sits far below the planted pairs whose
    # dependence involves all rows (the outlier pair's dCor is modest by design).
    strong = [_row(all_pairs, a, b)["dcor"] for (a, b), kind in PLANTED.items()
              if kind != "driven by a few points"]
    assert others["dcor"].max() * 2 < min(strong)


def test_confounded_pair_vanishes_given_canopy_temperature(table):
    pingouin = pytest.importorskip("pingouin")
    cols = ["evaporation_mm", "leaf_stress_index", "canopy_temp_c"]
    rows = table[cols].dropna()
    # scipy pearsonr: the pair is strongly correlated on its own ...
    plain = st.pearsonr(rows["evaporation_mm"], rows["leaf_stress_index"])
    assert plain.statistic > 0.4 and plain.pvalue < 1e-20
    # ... pingouin.partial_corr: and about 0 given canopy temperature (true value 0 by construction)
    given = pingouin.partial_corr(rows, x="evaporation_mm", y="leaf_stress_index", covar="canopy_temp_c").iloc[0]
    assert abs(given["r"]) < 0.12
