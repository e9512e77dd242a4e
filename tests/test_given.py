"""--given through the engine, the settings and the faces' helpers.

References: pingouin.partial_corr (partial correlations), scipy.stats.false_discovery_control
(Benjamini-Hochberg q-values of the conditional family).
"""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.errors import SettingsError
from pairlens.given import conditioning_changes, given_columns
from pairlens.pairs import pair_detail

pingouin = pytest.importorskip("pingouin")


def _frame(seed=0, n=150):
    rng = np.random.default_rng(seed)
    temp = rng.normal(size=n)
    site = rng.integers(0, 3, size=n).astype(float)
    return pd.DataFrame({
        "temp": temp,
        "evap": temp + rng.normal(size=n),
        "stress": 0.8 * temp + rng.normal(size=n),
        "noise": rng.normal(size=n),
        "by_site": site * 1.2 + rng.normal(size=n),
        "site": site,
    })


def _run(df, **options):
    settings = AnalysisSettings.from_options(**options)
    return run_analysis(df.to_numpy(float), list(df.columns), settings, workers=1)


def test_given_rows_beside_the_plain_ones_and_their_own_q_family():
    df = _frame()
    df.loc[3, "temp"] = np.nan       # a given value missing: that row leaves the conditional rows only
    table = _run(df, measures="pearson,spearman,kendall", given="temp")
    assert "temp" not in table.variables
    assert table.measures == ("pearson", "spearman", "kendall", "partial_pearson", "partial_spearman")
    rows = [r for r in table.rows if r.measure == "partial_pearson"]
    assert len(rows) == len([r for r in table.rows if r.measure == "pearson"]) == 10
    for r in rows:
        sub = df[[r.x, r.y, "temp"]].dropna()
        # Reference: pingouin.partial_corr on the pair's rows with every given column present
        ref = pingouin.partial_corr(sub, x=r.x, y=r.y, covar="temp").iloc[0]
        assert r.estimate == pytest.approx(ref["r"], abs=1e-10) and r.n == len(sub) == 149
        assert r.p_value == pytest.approx(ref["p_val"], rel=1e-8)
    # Reference: scipy.stats.false_discovery_control over the conditional measure's pairs alone
    q = stats.false_discovery_control([r.p_value for r in rows])
    np.testing.assert_allclose([r.q_value for r in rows], q, rtol=1e-12)
    evap_stress = table.lookup("evap", "stress")
    assert evap_stress["pearson"].q_value < 1e-6 and abs(evap_stress["partial_pearson"].estimate) < 0.2


def test_a_few_valued_given_column_enters_as_indicators():
    df = _frame(1)
    settings = AnalysisSettings.from_options(measures="pearson", given="site,temp")
    given = given_columns(df.to_numpy(float), list(df.columns), settings)
    assert given.indicator == (True, False) and given.levels == (3, 150)
    table = _run(df, measures="pearson", given=["site", "temp"])
    row = table.lookup("by_site", "evap")["partial_pearson"]
    dummies = df.assign(s1=(df.site == 1) * 1.0, s2=(df.site == 2) * 1.0)
    # Reference: pingouin.partial_corr with the indicator columns written out
    ref = pingouin.partial_corr(dummies, x="by_site", y="evap", covar=["s1", "s2", "temp"]).iloc[0]
    assert row.estimate == pytest.approx(ref["r"], abs=1e-10)


def test_settings_round_trip_and_reproduce_command():
    s = AnalysisSettings.from_options(measures="pearson", given="temp, site")
    assert s.given == ("temp", "site")
    assert AnalysisSettings.from_dict(s.to_dict()) == s
    assert "--given temp,site" in s.reproduce_command("data.csv")
    with pytest.raises(SettingsError, match="twice"):
        AnalysisSettings.from_options(given="temp,temp")
    with pytest.raises(SettingsError, match="unknown column"):
        _run(_frame(), measures="pearson", given="tmp")
    with pytest.raises(SettingsError, match="given"):
        AnalysisSettings.from_options(given=3)


def test_pair_detail_has_the_residuals_and_refuses_a_given_column():
    df = _frame(2)
    settings = AnalysisSettings.from_options(measures="pearson", given="temp")
    d = pair_detail(df.to_numpy(float), list(df.columns), "evap", "stress", settings, include_points=True)
    ex, ey = np.array(d["given"]["residuals"]["x"]), np.array(d["given"]["residuals"]["y"])
    # Reference: numpy least squares on [1, temp]; the residuals' correlation is the partial r (pingouin)
    a = np.column_stack([np.ones(len(df)), df.temp])
    np.testing.assert_allclose(ex, df.evap - a @ np.linalg.lstsq(a, df.evap, rcond=None)[0], atol=1e-10)
    ref = pingouin.partial_corr(df, x="evap", y="stress", covar="temp").iloc[0]["r"]
    assert np.corrcoef(ex, ey)[0, 1] == pytest.approx(ref, abs=1e-10)
    assert d["measures"]["partial_pearson"]["estimate"] == pytest.approx(ref, abs=1e-10)
    with pytest.raises(SettingsError, match="held fixed"):
        pair_detail(df.to_numpy(float), list(df.columns), "temp", "stress", settings)


def test_changes_view_puts_vanishing_pairs_first():
    table = _run(_frame(3), measures="pearson", given="temp")
    changes = conditioning_changes(table, 0.05)
    assert changes["measure"] == "pearson" and changes["conditional"] == "partial_pearson"
    first = changes["rows"][0]
    assert {first["x"], first["y"]} == {"evap", "stress"} and first["kind"] == "vanishes"
    assert changes["counts"] == {"vanishes": 1, "appears": 0}
    assert conditioning_changes(_run(_frame(3), measures="pearson"), 0.05) is None


def test_partial_dcor_row_beyond_its_row_limit_is_nan_with_a_note(monkeypatch):
    from pairlens import config

    monkeypatch.setattr(config, "PARTIAL_DCOR_MAX_N", 50)
    table = _run(_frame(4, n=60), measures="dcor", given="temp")
    row = table.lookup("evap", "stress")["partial_dcor"]
    assert math.isnan(row.estimate) and "limit of 50" in row.note


def test_a_categorical_side_takes_no_partial_measure():
    # Least-squares residuals of a categorical column's level codes mean nothing (the codes have no
    # order or spacing), so pairs with a categorical side carry their categorical measures only.
    import numpy as np
    import pandas as pd

    import pairlens

    rng = np.random.default_rng(18)
    n = 150
    z = rng.normal(size=n)
    frame = pd.DataFrame({"z": z, "a": z + rng.normal(size=n), "b": z + rng.normal(size=n),
                          "kind": rng.choice(["red", "green", "blue"], size=n)})
    pairs = pairlens.analyze(frame, given=["z"], workers=1, progress=False).pairs
    partial = pairs[pairs.measure.str.startswith("partial_")]
    assert set(partial.x) | set(partial.y) == {"a", "b"}            # the numeric pair only
    assert len(partial) == 3                                       # partial Pearson, Spearman, dCor
    assert set(pairs[(pairs.x == "kind") | (pairs.y == "kind")].measure) <= {"dcor", "eta", "kruskal"}
