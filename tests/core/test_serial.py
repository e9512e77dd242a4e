"""Rows in time order: pairlens.core.serial against statsmodels and closed forms, the level of the
--ordered tests by simulation, and the --ordered / --difference contract through engine and CLI."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import signal, stats

from pairlens.core import serial
from pairlens.core.registry import MEASURES, PairContext
from pairlens.core.results import TestResult
from pairlens.engine import AnalysisSettings, run_analysis
from pairlens.pairs import pair_detail
from pairlens.errors import SettingsError

SEED = 20261202


def _ar1(rng, phi, shape, n):
    """Stationary AR(1) series along the last axis, all at once."""
    e = rng.normal(size=tuple(shape) + (n,))
    e[..., 0] /= math.sqrt(1.0 - phi * phi)
    return signal.lfilter([1.0], [1.0, -phi], e, axis=-1)


def _series():
    rng = np.random.default_rng(SEED)
    return {
        "ar05": _ar1(rng, 0.5, (), 400),
        "ar09": _ar1(rng, 0.9, (), 250),
        "walk": np.cumsum(rng.normal(size=300)),
        "noise": rng.normal(size=150),
        "trend": 0.05 * np.arange(200) + rng.normal(size=200),
    }


# Reference checks --------------------------------------------------------------

@pytest.mark.parametrize("name", list(_series()))
def test_autocorrelation_matches_statsmodels_acf(name):
    from statsmodels.tsa.stattools import acf

    x = _series()[name]
    # source: statsmodels.tsa.stattools.acf (divisor n, demeaned)
    np.testing.assert_allclose(serial.autocorrelation(x, 12), acf(x, nlags=12, fft=False), rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", list(_series()))
@pytest.mark.parametrize("lags", [1, 5, 10])
def test_ljung_box_matches_statsmodels(name, lags):
    from statsmodels.stats.diagnostic import acorr_ljungbox

    x = _series()[name]
    q, p = serial.ljung_box(x, lags)
    ref = acorr_ljungbox(x, lags=[lags])
    # source: statsmodels.stats.diagnostic.acorr_ljungbox (Ljung & Box 1978)
    assert q == pytest.approx(float(ref["lb_stat"].iloc[0]), rel=1e-10)
    assert p == pytest.approx(float(ref["lb_pvalue"].iloc[0]), rel=1e-8, abs=1e-300)


@pytest.mark.parametrize("name", list(_series()))
def test_adf_matches_statsmodels_adfuller(name):
    from statsmodels.tsa.stattools import adfuller

    x = _series()[name]
    ours = serial.adf(x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        stat, p, lags, nobs, crit, _ = adfuller(x, regression="c", autolag="AIC")
        fixed = adfuller(x, maxlag=3, regression="c", autolag=None)
    # source: statsmodels.tsa.stattools.adfuller (AIC lag choice, MacKinnon 1994 p-value, 2010 critical values)
    assert ours.lags == lags and ours.nobs == nobs
    assert ours.statistic == pytest.approx(stat, rel=1e-9)
    assert ours.p_value == pytest.approx(p, rel=1e-9, abs=1e-300)
    assert ours.critical_5 == pytest.approx(crit["5%"], rel=1e-12)
    assert serial.adf(x, max_lag=3, autolag=False).statistic == pytest.approx(fixed[0], rel=1e-9)
    assert ours.trending == (stat > crit["5%"])


def test_adf_names_the_trending_series():
    s = _series()
    # a random walk and a linear trend keep their unit root / trend at 5 % (Dickey & Fuller 1979)
    assert serial.adf(s["walk"]).trending and serial.adf(s["trend"]).trending
    assert not serial.adf(s["ar05"]).trending and not serial.adf(s["noise"]).trending
    assert serial.adf(np.arange(50.0)).trending  # a straight line: singular regression, trending by construction


def test_effective_n_matches_the_ar1_closed_form():
    # Two AR(1) series with coefficients a, b: sum over all lags of rho_x(k) rho_y(k) gives
    # n* = n (1 - ab) / (1 + ab) for large n: the published closed form of Quenouille (1948,
    # Biometrika 35:261-267, doi:10.2307/2332345, effective degrees of freedom of the correlation of two
    # serially correlated series, as stated in its abstract) and Bretherton et al. (1999, J. Climate
    # 12:1990-2009, section 5; as quoted in the public Q&A thread talkstats.com/threads/65489).
    # No worked numerical example of Bartlett (1935), Dutilleul (1993), Pyper & Peterman (1998) or
    # Afyouni et al. (2019) was found to check against (only their abstracts are reachable here).
    n, a, b = 100_000, 0.6, 0.8
    k = np.arange(200)
    assert serial.effective_n(a ** k, b ** k, n) == pytest.approx(n * (1 - a * b) / (1 + a * b), rel=2e-3)
    # the worked value of the docstring by hand: 1/n* = (1/100)(1 + 2 sum_{k<=20} (100-k)/100 0.25^k)
    hand = 100 / (1 + 2 * sum((100 - j) / 100 * 0.25 ** j for j in range(1, 21)))
    assert serial.effective_n(0.5 ** np.arange(21), 0.5 ** np.arange(21), 100) == pytest.approx(hand, rel=1e-12)
    assert serial.effective_n(np.r_[1.0, -0.5 * np.ones(5)], np.r_[1.0, 0.5 * np.ones(5)], 100) == 100  # capped


def test_block_length_approaches_the_politis_white_value_for_ar1():
    # With the true AR(1) autocovariances R(k) = phi^|k| / (1 - phi^2): G = 2 sum k R(k),
    # g = sum R(k), b = (2 G^2 / ((4/3) g^2))^(1/3) n^(1/3) (Politis & White 2004 with the
    # correction of Patton, Politis & White 2009; the AR(1) sums are geometric series).
    phi, n = 0.7, 40_000
    g = (1 + phi) / (1 - phi) / (1 - phi * phi)
    big_g = 2 * phi / (1 - phi) ** 2 / (1 - phi * phi)
    expected = (2 * big_g ** 2 / (4 / 3 * g ** 2)) ** (1 / 3) * n ** (1 / 3)
    x = _ar1(np.random.default_rng(SEED), phi, (), n)
    assert serial.block_length(x) == pytest.approx(expected, rel=0.25)
    assert serial.block_length(np.random.default_rng(1).normal(size=500)) <= 2


def test_cross_correlation_at_lag_zero_is_pearson_and_finds_a_delay():
    rng = np.random.default_rng(SEED)
    x = rng.normal(size=300)
    y = np.r_[rng.normal(size=2), x[:-2]] + 0.3 * rng.normal(size=300)
    lags, r = serial.cross_correlation(x, y, 4)
    # source: scipy.stats.pearsonr at lag 0 (same divisor cancels)
    assert r[lags == 0][0] == pytest.approx(stats.pearsonr(x, y).statistic, rel=1e-12)
    assert lags[np.argmax(r)] == 2


def test_ess_interval_is_wider_and_reduces_to_fisher_without_autocorrelation():
    rng = np.random.default_rng(SEED)
    x, y = _ar1(rng, 0.8, (2,), 300)
    base = MEASURES["pearson"].compute(x, y, PairContext())
    res = MEASURES["pearson"].serial(x, y, PairContext(), base)
    assert res.estimate == base.estimate
    assert res.ci_high - res.ci_low > base.ci_high - base.ci_low
    assert res.method.startswith("t, n*-2 df")
    # lag 0 only: n* = n, so the t-test of scipy.stats.pearsonr (source: scipy)
    same = serial.ess_test(x, y, "pearson", base, max_lag=0)
    assert same.p_value == pytest.approx(stats.pearsonr(x, y).pvalue, rel=1e-9)


def test_degenerate_input_gives_nan_with_a_reason():
    short = serial.ess_test(np.arange(6.0), np.arange(6.0)[::-1], "pearson", TestResult(-1.0, 0.0, "t", n=6))
    assert math.isnan(short.p_value) and "fewer than 10 rows" in short.note
    assert math.isnan(serial.adf(np.ones(40)).statistic)
    assert np.isnan(serial.autocorrelation(np.ones(20), 3)).all()
    stiff = np.cumsum(np.cumsum(np.random.default_rng(2).normal(size=(2, 60)), axis=1), axis=1)
    r = float(np.corrcoef(*stiff)[0, 1])
    res = serial.ess_test(stiff[0], stiff[1], "pearson", TestResult(r, 0.0, "t", n=60))
    assert math.isnan(res.p_value) or res.p_value > 0.0


# Level of the --ordered tests ---------------------------------------------------

def _interval(count, alpha):
    # central 99% binomial interval of the rejections of a test that holds its level (scipy.stats.binom)
    return stats.binom.ppf(0.005, count, alpha), stats.binom.ppf(0.995, count, alpha)


LEVEL_CELLS = [  # (measure, phi, n, pairs): sized to run in about 25 s together on an idle machine
    ("pearson", 0.5, 100, 600), ("pearson", 0.9, 500, 300),
    ("spearman", 0.5, 100, 600), ("kendall", 0.5, 100, 600),
    ("dcor", 0.5, 100, 200), ("dcor", 0.9, 100, 200), ("dcor", 0.5, 500, 200), ("xi", 0.9, 100, 200),
]


@pytest.mark.parametrize("measure,phi,n,pairs", LEVEL_CELLS)
def test_ordered_tests_hold_their_level_on_ar1_pairs(measure, phi, n, pairs):
    rng = np.random.default_rng([SEED, int(phi * 10), n])
    x, y = _ar1(rng, phi, (2, pairs), n)
    m = MEASURES[measure]
    seeds = np.random.SeedSequence(SEED).spawn(pairs)
    p = np.array([m.serial(x[k], y[k], PairContext(permutations=99, seed=seeds[k]),
                           m.compute(x[k], y[k], PairContext())).p_value for k in range(pairs)])
    for alpha in (0.05, 0.01):
        lo, hi = _interval(pairs, alpha)
        assert lo <= np.count_nonzero(p <= alpha) <= hi, (measure, phi, n, alpha, np.mean(p <= alpha))


@pytest.mark.parametrize("name", ["dcor", "dcor_bc"])
@pytest.mark.parametrize("n", [12, 60, 300])
def test_relabelled_statistics_equal_the_dcov_definition(name, n):
    # oracle: the dcor library's dCov^2 of x against y[p] (dcor.distance_covariance_sqr, the V-statistic of
    # Szekely, Rizzo & Bakirov 2007; dcor.u_distance_covariance_sqr, the U-centred one of Szekely & Rizzo
    # 2014) times the statistic's normalising constant, for block relabellings as the --ordered test draws them
    import dcor
    rng = np.random.default_rng([SEED, n])
    x, y = rng.normal(size=(2, n))
    y = y + 0.5 * x
    orders = serial._block_orders(n, 5, 7, rng)
    got = MEASURES[name].pairing_statistics(x, y, np.vstack([np.arange(n)[None, :], orders]))
    if name == "dcor":
        want = [n * n * dcor.distance_covariance_sqr(x, y[o]) for o in [np.arange(n), *orders]]
    else:
        want = [n * (n - 3) * dcor.u_distance_covariance_sqr(x, y[o]) for o in [np.arange(n), *orders]]
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-12 * n * n)


def test_the_default_tests_do_not_hold_their_level_on_the_same_pairs():
    # the reason for --ordered: the independent-rows test on AR(1) pairs with phi = 0.9 (Granger & Newbold 1974)
    rng = np.random.default_rng(SEED)
    x, y = _ar1(rng, 0.9, (2, 200), 300)
    p = np.array([MEASURES["pearson"].compute(x[k], y[k], PairContext()).p_value for k in range(200)])
    assert np.count_nonzero(p <= 0.05) > _interval(200, 0.05)[1]


# The contract through the engine and the CLI ----------------------------------

def _table():
    rng = np.random.default_rng(SEED)
    data = _ar1(rng, 0.9, (4,), 240).T
    data[:, 1] = 0.8 * data[:, 0] + 0.6 * _ar1(rng, 0.9, (), 240)
    data[:, 3] = np.cumsum(rng.normal(size=240))
    week = np.arange(240.0)[::-1]                    # the file lists the weeks backwards
    return np.column_stack([week, data[::-1]]), ["week", "a", "b", "c", "walk"]


def test_ordered_changes_the_methods_and_blocks_trending_pairs():
    data, names = _table()
    plain = run_analysis(data, names, AnalysisSettings.from_options(), workers=1)
    assert plain.serial.warn and "--ordered" in plain.serial.message(False)
    ordered = run_analysis(data, names, AnalysisSettings.from_options(ordered="week"), workers=1)
    assert "week" not in ordered.variables
    rows = ordered.lookup("a", "b")
    assert rows["pearson"].method.startswith("t, n*-2 df") and rows["dcor"].method.startswith("block permutation")
    assert rows["pearson"].q_value < 0.05          # truly related
    for r in ordered.rows:
        if "walk" in (r.x, r.y):
            assert math.isnan(r.p_value) and "--difference" in r.note
    # sorting by week reverses the file: the same pair in file order, read backwards, gives the same test
    again = run_analysis(data[::-1, 1:], names[1:], AnalysisSettings.from_options(ordered=True), workers=1)
    assert again.lookup("a", "b")["pearson"].p_value == pytest.approx(rows["pearson"].p_value, rel=1e-12)
    diffed = run_analysis(data, names, AnalysisSettings.from_options(ordered="week", difference=True), workers=1)
    assert not math.isnan(diffed.lookup("a", "walk")["pearson"].p_value)
    assert diffed.rows[0].n == 239


def test_ordered_settings_round_trip_and_refuse_unknown_columns():
    s = AnalysisSettings.from_options(ordered="week", difference=True)
    assert AnalysisSettings.from_dict(s.to_dict()) == s
    assert s.cli_arguments()[-3:] == ["--difference", "--ordered", "week"]
    data, names = _table()
    with pytest.raises(SettingsError, match="no numeric or date/time column"):
        run_analysis(data, names, AnalysisSettings.from_options(ordered="day"), workers=1)


def test_pair_detail_of_an_ordered_pair_has_the_time_series_part():
    data, names = _table()
    d = pair_detail(data, names, "a", "b", AnalysisSettings.from_options(measures=list(MEASURES), ordered="week"),
                    include_points=True)
    assert d["ordered"]["by"] == "week" and len(d["ordered"]["cross_correlation"]["lags"]) == 11
    assert d["points"]["x"][0] == pytest.approx(data[-1, 1])  # time order: the file's last row comes first
    assert d["measures"]["pearson"]["method"].startswith("t, n*-2 df")


def test_cli_says_so_on_stderr(tmp_path):
    from pairlens import cli

    data, names = _table()
    path = tmp_path / "weekly.csv"
    path.write_text(",".join(names) + "\n" + "\n".join(",".join(repr(float(v)) for v in row) for row in data) + "\n")
    out = tmp_path / "p.csv"
    import contextlib
    import io

    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        assert cli.main(["pairs", str(path), "-o", str(out), "--workers", "1", "--measures", "pearson"]) == 0
    assert "serially dependent" in err.getvalue() and "--ordered" in err.getvalue()
    import csv

    def p_of(pair):
        return {(r["x"], r["y"]): float(r["p_value"] or "nan") for r in csv.DictReader(out.open())}[pair]

    plain_p = p_of(("a", "c"))
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        assert cli.main(["pairs", str(path), "-o", str(out), "--workers", "1", "--measures", "pearson",
                         "--ordered", "week"]) == 0
    assert "serially dependent" not in err.getvalue() and "walk" in err.getvalue()
    assert p_of(("a", "c")) > plain_p and math.isnan(p_of(("a", "walk")))


def test_series_figure_of_an_ordered_pair():
    from pairlens import figures as plots

    data, names = _table()
    d = pair_detail(data, names, "a", "b", AnalysisSettings.from_options(measures="pearson", ordered="week"),
                    include_points=True)
    fig = plots.series_figure(d)
    assert [t["y"] for t in fig["series"]["data"]] == [d["points"]["x"], d["points"]["y"]]
    assert fig["xcorr"]["data"][0]["x"] == list(range(-5, 6))
    plain = pair_detail(data, names, "a", "b", AnalysisSettings.from_options(measures="pearson"), include_points=True)
    assert plots.series_figure(plain) is None


# A trending pair gets no verdict on levels, in every face ---------------------------
# Project contract (issue 21): levels of trending series correlate by chance (Yule 1926; Granger &
# Newbold 1974), so neither "dependent" nor "no evidence of dependence" may be said of them.

NOT_TESTED = "not tested (trending)"


def test_trending_pairs_are_labelled_not_tested_in_the_pair_table():
    data, names = _table()
    ordered = run_analysis(data, names, AnalysisSettings.from_options(ordered="week"), workers=1, verdicts=True)
    assert ordered.serial.trending == ["walk"]
    for (x, y), label in ordered.verdicts.items():
        assert (label == NOT_TESTED) == ("walk" in (x, y)), (x, y, label)
    assert ordered.verdicts[("a", "b")] == "linear"
    # on differences nothing trends and the pair is judged again
    diffed = run_analysis(data, names, AnalysisSettings.from_options(ordered="week", difference=True), workers=1,
                          verdicts=True)
    assert NOT_TESTED not in diffed.verdicts.values()


def test_trending_pair_view_cli_library_and_report_say_not_tested(tmp_path):
    import contextlib
    import io
    import json

    import pandas as pd

    from pairlens import analyze, cli

    data, names = _table()
    settings = AnalysisSettings.from_options(measures=list(MEASURES), ordered="week")
    # the pair view's detail (the web pair page and the report cards read the same function)
    d = pair_detail(data, names, "a", "walk", settings)
    assert d["pattern"]["label"] == NOT_TESTED and "--difference" in d["pattern"]["reasons"][0]
    assert pair_detail(data, names, "a", "b", settings)["pattern"]["label"] == "linear"
    # the same detail read through a computed table (q-values from the analysis)
    table = run_analysis(data, names, settings, workers=1)
    assert pair_detail(data, names, "walk", "c", settings, table)["pattern"]["label"] == NOT_TESTED
    # inspect --json and its text form
    path = tmp_path / "weekly.csv"
    pd.DataFrame(data, columns=names).to_csv(path, index=False)
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
        assert cli.main(["inspect", str(path), "--x", "a", "--y", "walk", "--ordered", "week", "--json"]) == 0
    assert json.loads(out.getvalue())["pattern"]["label"] == NOT_TESTED
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
        assert cli.main(["inspect", str(path), "--x", "a", "--y", "walk", "--ordered", "week"]) == 0
    assert f"Verdict: {NOT_TESTED}" in out.getvalue() and "no evidence" not in out.getvalue()
    # the library and its report (every pair of four columns is among the report's strongest)
    analysis = analyze(pd.DataFrame(data, columns=names), measures="pearson,dcor", ordered="week", workers=1,
                       progress=False)
    assert analysis.inspect("walk", "b").verdict == NOT_TESTED
    html = analysis.report(tmp_path / "r.html").read_text()
    assert html.count(f"<span class=\"muted\">Verdict</span> {NOT_TESTED}") >= 1
    verdicts = {}  # each pair card's title (its h3) and its verdict label
    for card in html.split('<header class="card-head">')[1:]:
        if "Verdict</span>" in card:
            title = card.split("<h3>", 1)[1].split("</h3>", 1)[0]
            verdicts[title] = card.split('<span class="muted">Verdict</span> ', 1)[1].split("<", 1)[0]
    assert {label == NOT_TESTED for label in verdicts.values()} == {True, False}, verdicts
    assert all((label == NOT_TESTED) == ("walk" in title) for title, label in verdicts.items()), verdicts


# Kendall's tau-b under --ordered with ties -----------------------------------------

def test_kendall_effective_rows_test_with_ties_matches_scipy_scaled_by_n_over_n_star():
    from statsmodels.tsa.stattools import acf

    rng = np.random.default_rng(SEED + 3)
    n = 240
    # AR(1) series rounded to few levels: many ties in both columns
    x, y = np.round(_ar1(rng, 0.6, (2,), n) * 1.5)
    base = MEASURES["kendall"].compute(x, y, PairContext())
    res = serial.ess_test(x, y, "kendall", base)
    # source: scipy.stats.kendalltau, tau-b with its tie-corrected asymptotic variance (Kendall 1970)
    ref = stats.kendalltau(x, y, method="asymptotic")
    z_indep = stats.norm.isf(ref.pvalue / 2)
    # n* from the mid-ranks' autocorrelations (source: scipy.stats.rankdata, statsmodels acf) and
    # the Bartlett (1935) sum to n/5 lags
    k = n // 5
    ax, ay = (acf(stats.rankdata(v), nlags=k, fft=False) for v in (x, y))
    lags = np.arange(1, k + 1)
    s = np.sum((n - lags) / n * ax[1:] * ay[1:])
    n_star = min(n, n / (1 + 2 * s))
    assert n_star < 0.8 * n                               # the correction does something here
    expected = 2 * stats.norm.sf(z_indep * math.sqrt(n_star / n))
    assert res.p_value == pytest.approx(expected, rel=1e-9)
    assert len(np.unique(x)) < 15 and len(np.unique(y)) < 15
