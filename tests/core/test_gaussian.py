"""The Gaussian fit against numpy, pingouin, scipy, published closed forms and simulation."""

from __future__ import annotations

import math

import dcor as dcor_lib
import numpy as np
import pingouin
import pytest
from scipy import stats

from pairlens import config
from pairlens.core.gaussian import (fit_gaussian, gaussian_xi, henze_zirkler, implied_measures, observed_slice,
                               slice_conditional)


def _bivariate(rng, n, rho, mean=(1.5, -2.0), sd=(2.0, 0.5)):
    z1, z2 = rng.normal(size=n), rng.normal(size=n)
    x = mean[0] + sd[0] * z1
    y = mean[1] + sd[1] * (rho * z1 + math.sqrt(1 - rho**2) * z2)
    return x, y


# -- fit_gaussian -------------------------------------------------------------

@pytest.mark.parametrize("seed", range(5))
def test_fit_moments_equal_numpy(seed):
    rng = np.random.default_rng(seed)
    x, y = _bivariate(rng, 50 + 100 * seed, 0.2 * seed - 0.3)
    fit = fit_gaussian(x, y)
    # reference: numpy mean and np.cov (ddof=1)
    assert fit.mean == pytest.approx((x.mean(), y.mean()), abs=1e-12)
    assert np.array(fit.cov) == pytest.approx(np.cov(x, y, ddof=1), abs=1e-12)
    assert fit.rho == pytest.approx(np.corrcoef(x, y)[0, 1], abs=1e-12)   # reference: np.corrcoef
    slope, intercept = np.polyfit(x, y, 1)                                # reference: numpy least squares
    assert fit.slope == pytest.approx(slope, abs=1e-10)
    assert fit.intercept == pytest.approx(intercept, abs=1e-10)
    # residual_sd is the conditional sd of the fitted Gaussian, sqrt(var_y (1 - rho^2)) with ddof=1;
    # it equals the OLS residual sum of squares over n - 1 (numpy residuals as the reference).
    resid = y - (intercept + slope * x)
    assert fit.residual_sd == pytest.approx(math.sqrt(resid @ resid / (x.size - 1)), rel=1e-10)
    assert fit.n == x.size and fit.note == ""


def test_fit_drops_incomplete_rows():
    rng = np.random.default_rng(4)
    x, y = _bivariate(rng, 200, 0.5)
    x[3], y[10], x[20] = np.nan, np.nan, np.inf
    keep = np.isfinite(x) & np.isfinite(y)
    fit = fit_gaussian(x, y)
    assert fit.n == 197
    assert np.array(fit.cov) == pytest.approx(np.cov(x[keep], y[keep]), abs=1e-12)  # reference: numpy


@pytest.mark.parametrize("mass", [0.5, 0.9, 0.99])
def test_ellipse_boundary_and_coverage(mass):
    rng = np.random.default_rng(31)
    x, y = _bivariate(rng, 40_000, 0.7)
    fit = fit_gaussian(x, y, masses=(mass,))
    pts = fit.ellipses[mass]
    assert pts.shape == (121, 2)
    assert pts[0] == pytest.approx(pts[-1])
    cov_inv = np.linalg.inv(np.array(fit.cov))
    d = pts - np.array(fit.mean)
    # reference: the chi-square quantile with 2 df, scipy.stats.chi2.ppf
    assert np.einsum("ij,jk,ik->i", d, cov_inv, d) == pytest.approx(np.full(121, stats.chi2.ppf(mass, 2)),
                                                                     rel=1e-9)
    # Monte Carlo: share of points inside the ellipse, 5 binomial SE
    dd = np.column_stack([x, y]) - np.array(fit.mean)
    inside = np.mean(np.einsum("ij,jk,ik->i", dd, cov_inv, dd) <= stats.chi2.ppf(mass, 2))
    assert abs(inside - mass) < 5 * math.sqrt(mass * (1 - mass) / x.size)


def test_marginal_normality_uses_shapiro_then_dagostino():
    rng = np.random.default_rng(2)
    x, y = _bivariate(rng, 800, 0.4)
    y = np.exp(y)
    fit = fit_gaussian(x, y)
    assert fit.marginal_normality["x"].method == "shapiro-wilk"
    assert fit.marginal_normality["x"].p_value == pytest.approx(stats.shapiro(x).pvalue, abs=1e-12)  # scipy
    assert fit.marginal_normality["y"].p_value == pytest.approx(stats.shapiro(y).pvalue, abs=1e-12)  # scipy
    x, y = _bivariate(rng, config.SHAPIRO_MAX_ROWS + 1, 0.4)
    fit = fit_gaussian(x, y)
    assert fit.marginal_normality["y"].method == "dagostino-pearson"
    assert fit.marginal_normality["y"].p_value == pytest.approx(stats.normaltest(y).pvalue, abs=1e-12)  # scipy


def test_degenerate_fits_do_not_crash():
    fit = fit_gaussian([1.0, 2.0], [3.0, 5.0])
    assert fit.n == 2 and "fewer than 3" in fit.note
    assert math.isnan(fit.rho) and math.isnan(fit.cov[0][0]) and math.isnan(fit.normality.p_value)
    assert all(math.isnan(v) for v in fit.implied.values())
    fit = fit_gaussian(np.ones(50), np.arange(50.0))
    assert "x is constant" in fit.note
    assert math.isnan(fit.rho) and math.isnan(fit.slope) and math.isnan(fit.normality.estimate)
    assert math.isnan(fit.marginal_normality["x"].p_value)
    assert fit.cov[0][0] == 0.0 and fit.cov[1][1] == pytest.approx(np.var(np.arange(50.0), ddof=1))
    fit = fit_gaussian(np.arange(50.0), np.full(50, 2.0))
    assert "y is constant" in fit.note and math.isnan(fit.rho) and fit.slope == 0.0
    fit = fit_gaussian(np.arange(50.0), 3 * np.arange(50.0) + 1)
    assert fit.rho == pytest.approx(1.0) and "line" in fit.note
    assert math.isnan(fit.normality.p_value) and "singular" in fit.normality.note
    fit = fit_gaussian([np.nan] * 5, [1.0] * 5)
    assert fit.n == 0 and math.isnan(fit.mean[0])


# -- Henze-Zirkler ------------------------------------------------------------

@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("d", [2, 3])
@pytest.mark.parametrize("shape", ["normal", "skewed", "mixture"])
def test_henze_zirkler_equals_pingouin(seed, d, shape):
    rng = np.random.default_rng([seed, d, len(shape)])
    n = 60 + 97 * seed
    data = rng.normal(size=(n, d)) @ rng.normal(size=(d, d))
    if shape == "skewed":
        data[:, 0] = np.exp(data[:, 0] / 2)
    elif shape == "mixture":
        data[: n // 3] += 3.0
    ours = henze_zirkler(data)
    ref = pingouin.multivariate_normality(data)  # reference: pingouin.multivariate_normality
    assert ours.estimate == pytest.approx(ref.hz, abs=1e-6, rel=1e-9)
    assert ours.p_value == pytest.approx(ref.pval, abs=1e-6)
    assert ours.n == n


def test_henze_zirkler_level_and_power():
    # Simulation: under bivariate normality the test should reject about 5%;
    # 400 replicates, SE 0.011, so 0.01..0.10 is 4 SE.
    rng = np.random.default_rng(5)
    rej = np.mean([henze_zirkler(rng.normal(size=(100, 2))).p_value < 0.05 for _ in range(400)])
    assert 0.01 <= rej <= 0.10
    x = rng.normal(size=300)
    cross = np.column_stack([x, x * rng.choice([-1, 1], 300)])
    assert henze_zirkler(cross).p_value < 1e-6


def test_henze_zirkler_subsample_above_cap():
    rng = np.random.default_rng(6)
    data = rng.normal(size=(900, 2))
    full = henze_zirkler(data, max_rows=1000)
    sub = henze_zirkler(data, max_rows=400, seed=3)
    assert full.note == "" and "subsample of 400 of 900" in sub.note
    assert sub == henze_zirkler(data, max_rows=400, seed=3)
    assert sub.n == 900
    assert henze_zirkler(data[:2]).note.startswith("fewer than")


# -- implied measures ---------------------------------------------------------

def test_implied_closed_forms_at_known_points():
    # Published closed forms: tau = 2/pi asin rho, rho_s = 6/pi asin(rho/2) (Kendall 1948),
    # Szekely et al. (2007) Theorem 7: R(0) = 0, R(1) = 1, R(rho) <= |rho|.
    m0 = implied_measures(0.0)
    assert all(m0[k] == pytest.approx(0.0, abs=1e-12) for k in ("pearson", "spearman", "kendall", "dcor", "xi", "mi"))
    m1 = implied_measures(1.0)
    assert m1["kendall"] == pytest.approx(1.0) and m1["spearman"] == pytest.approx(1.0)
    assert m1["dcor"] == pytest.approx(1.0) and m1["xi"] == pytest.approx(1.0) and math.isinf(m1["mi"])
    m = implied_measures(-0.5)
    assert m["kendall"] == pytest.approx(-1 / 3, abs=1e-12)       # 2/pi asin(-1/2) = -1/3
    assert m["dcor"] == implied_measures(0.5)["dcor"] <= 0.5
    assert m["dcor_bc"] == pytest.approx(m["dcor"] ** 2)
    assert all(math.isnan(v) for v in implied_measures(math.nan).values())


def test_implied_mutual_information_equals_entropy_identity():
    # reference: scipy.stats.multivariate_normal / norm entropies, I = H(X) + H(Y) - H(X, Y)
    for rho in (0.1, 0.6, -0.95):
        cov = [[1.0, rho], [rho, 1.0]]
        mi = 2 * stats.norm.entropy() - stats.multivariate_normal(cov=cov).entropy()
        assert implied_measures(rho)["mi"] == pytest.approx(mi, abs=1e-12)


def test_gaussian_dcor_matches_dcor_library_on_large_sample():
    # reference: dcor.distance_correlation (AVL O(n log n) method) on 4 samples of n = 20,000;
    # 5 SE of the replicate mean plus the O(1/n) bias of the V-statistic.
    rng = np.random.default_rng(41)
    rho = 0.6
    vals = []
    for _ in range(4):
        x, y = _bivariate(rng, 20_000, rho)
        vals.append(dcor_lib.distance_correlation(x, y, method="avl"))
    vals = np.array(vals)
    se = max(vals.std(ddof=1), 0.003) / 2
    assert abs(vals.mean() - implied_measures(rho)["dcor"]) < 5 * se + 1e-3


def test_rank_measures_near_implied_on_large_gaussian_sample():
    # Bivariate normal rho = 0.6, n = 20,000. Monte Carlo error from the
    # asymptotic SEs on Fisher's z scale (Fieller, Hartley & Pearson 1957):
    # Var(atanh tau) ~ 0.437/(n - 4), Var(atanh rho_s) ~ 1.06/(n - 3); 4 SE.
    rng = np.random.default_rng(2024)
    n, rho = 20_000, 0.6
    x, y = _bivariate(rng, n, rho)
    implied = implied_measures(np.corrcoef(x, y)[0, 1])
    truth = implied_measures(rho)
    tau = stats.kendalltau(x, y).statistic          # reference: scipy.stats.kendalltau
    rho_s = stats.spearmanr(x, y).statistic         # reference: scipy.stats.spearmanr
    assert abs(math.atanh(tau) - math.atanh(truth["kendall"])) < 4 * math.sqrt(0.437 / (n - 4))
    assert abs(math.atanh(rho_s) - math.atanh(truth["spearman"])) < 4 * math.sqrt(1.06 / (n - 3))
    # implied from the sample r agrees at least as closely (r itself has SE ~ (1 - rho^2)/sqrt(n))
    assert abs(tau - implied["kendall"]) < 0.02
    assert abs(rho_s - implied["spearman"]) < 0.02


def test_gaussian_xi_closed_form_by_simulation():
    # The xi closed form is derived in gaussian_xi's Notes; here simulation checks it:
    # xi_n on 5 samples of n = 40,000 per rho, scipy.stats.chatterjeexi as the estimator
    # (reference), 5 replicate SEs plus 0.002 for the known negative O(n^-1/2) bias of xi_n.
    rng = np.random.default_rng(77)
    for rho in (0.3, 0.6, 0.9):
        vals = np.array([stats.chatterjeexi(*_bivariate(rng, 40_000, rho)).statistic for _ in range(5)])
        se = vals.std(ddof=1) / math.sqrt(5)
        assert abs(vals.mean() - gaussian_xi(rho)) < 5 * se + 0.002
    assert gaussian_xi(0.6) == pytest.approx(3 / math.pi * math.asin(0.68) - 0.5)


# -- slices -------------------------------------------------------------------

def test_slice_conditional_formulas_and_simulation():
    rng = np.random.default_rng(13)
    x, y = _bivariate(rng, 400_000, 0.8)
    fit = fit_gaussian(x, y)
    at = slice_conditional(fit, 2.0)
    assert at.mean_at_x0 == pytest.approx(fit.intercept + 2.0 * fit.slope)
    assert at.sd_at_x0 == fit.residual_sd and at.width == 0.0
    for x0, width in ((2.0, 0.4), (5.0, 1.0), (-1.0, 2.0)):
        s = slice_conditional(fit, x0, width)
        n_in, m, sd = observed_slice(x, y, x0, width)
        # Monte Carlo over the simulated points in the slice: 5 SE for the mean,
        # 5 SE (sd/sqrt(2n)) for the sd, 5 binomial SE for the mass
        assert abs(m - s.mean) < 5 * s.sd / math.sqrt(n_in)
        assert abs(sd - s.sd) < 5 * s.sd / math.sqrt(2 * n_in)
        assert abs(n_in / x.size - s.mass) < 5 * math.sqrt(s.mass * (1 - s.mass) / x.size)
        assert s.sd >= s.sd_at_x0


def test_slice_of_degenerate_fit_is_nan():
    s = slice_conditional(fit_gaussian(np.ones(10), np.arange(10.0)), 1.0, 0.5)
    assert math.isnan(s.mean) and math.isnan(s.sd)
    assert observed_slice(np.arange(5.0), np.arange(5.0), 100.0, 1.0)[0] == 0


@pytest.mark.parametrize("kind", ["normal", "exponential", "t3", "rounded"])
def test_dagostino_pearson_equals_scipy_normaltest(kind):
    # reference: scipy.stats.normaltest (D'Agostino & Pearson 1973); our copy avoids importing
    # scipy.stats in commands that fit a Gaussian on more than SHAPIRO_MAX_ROWS rows
    from scipy import stats

    from pairlens.core.gaussian import _dagostino_pearson

    rng = np.random.default_rng(["normal", "exponential", "t3", "rounded"].index(kind))
    n = 6000
    v = {"normal": rng.normal(size=n), "exponential": rng.exponential(size=n),
         "t3": rng.standard_t(3, size=n), "rounded": np.round(rng.normal(size=n) * 3)}[kind] * 7.5 + 40.0
    ref = stats.normaltest(v)
    statistic, p = _dagostino_pearson(v)
    assert statistic == pytest.approx(float(ref.statistic), rel=1e-12)
    assert p == pytest.approx(float(ref.pvalue), rel=1e-12, abs=1e-300)
