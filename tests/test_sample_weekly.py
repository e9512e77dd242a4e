"""The invented weekly series of the vineyard demo (sample_data/make_vineyard_weekly.py): reproduction,
the serial structure it is meant to have (checked with statsmodels), and what --ordered makes of it."""

from __future__ import annotations

import importlib.util
import math
import warnings

import pandas as pd
import pytest

from pairlens import config
from pairlens.engine import AnalysisSettings, run_analysis

CSV = config.SAMPLE_DATA_DIR / "vineyard_weekly.csv"
PLANTED = {("rain_mm", "soil_water_index"), ("humidity_anomaly_pct", "mildew_pressure")}


def _generator():
    spec = importlib.util.spec_from_file_location("make_vineyard_weekly",
                                                  config.SAMPLE_DATA_DIR / "make_vineyard_weekly.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def frame():
    return pd.read_csv(CSV)


def test_generator_rewrites_the_committed_csv_byte_for_byte(tmp_path):
    out = _generator().write(tmp_path / "weekly.csv")
    assert out.read_bytes() == CSV.read_bytes()


def test_every_series_is_autocorrelated_and_the_walks_have_a_unit_root(frame):
    from statsmodels.stats.diagnostic import acorr_ljungbox
    from statsmodels.tsa.stattools import adfuller

    for col in frame.columns:
        # source: statsmodels.stats.diagnostic.acorr_ljungbox, 10 lags
        assert float(acorr_ljungbox(frame[col], lags=[10])["lb_pvalue"].iloc[0]) < 1e-6, col
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        for col in ("reservoir_level_m", "fuel_use_l"):
            # source: statsmodels.tsa.stattools.adfuller with a constant: unit root not rejected at 5 %
            assert adfuller(frame[col], regression="c", autolag="AIC")[1] > 0.05, col


@pytest.fixture(scope="module")
def runs(frame):
    data, names = frame.to_numpy(float), list(frame.columns)
    plain = run_analysis(data, names, AnalysisSettings.from_options(measures="pearson,spearman"), workers=1)
    ordered = run_analysis(data, names, AnalysisSettings.from_options(measures="pearson,spearman", ordered="week"),
                           workers=1)
    return plain, ordered


def _significant(table):
    return {(r.x, r.y) for r in table.rows if r.q_value == r.q_value and r.q_value < 0.05}


def test_rows_as_independent_call_unrelated_series_related(runs):
    plain, _ = runs
    assert plain.serial.warn
    spurious = _significant(plain) - PLANTED - {p for p in _significant(plain) if "week" in p}
    assert len(spurious) >= 5  # the trap the weekly block demonstrates (measured: 11 pairs by Pearson)


def test_ordered_finds_exactly_the_planted_pairs(runs):
    _, ordered = runs
    assert _significant(ordered) == PLANTED
    for r in ordered.rows:
        if {"reservoir_level_m", "fuel_use_l"} & {r.x, r.y}:
            assert math.isnan(r.p_value)  # trending: no p-value on levels
