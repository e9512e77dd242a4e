"""Pearson's default p-value: the exact permutation moments, the Pearson curves, and the t option.

References: full enumeration of the n! relabellings (the definition of the
permutation law), scipy.special (incomplete beta and gamma), scipy.integrate.quad
(the type IV tail), scipy.stats.pearsonr (the t-test) and
scipy.stats.permutation_test (the permutation p-value).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import integrate, special, stats

from pairlens.core import linear


@pytest.mark.parametrize("n", [4, 5, 6, 7])
@pytest.mark.parametrize("laws", [("exponential", "lognormal"), ("normal", "t3"), ("scores", "scores")])
def test_permutation_moments_equal_full_enumeration(n, laws):
    rng = np.random.default_rng([n, len(laws[0]), len(laws[1])])
    draw = {"exponential": lambda: rng.exponential(size=n), "lognormal": lambda: rng.lognormal(size=n),
            "normal": lambda: rng.normal(size=n), "t3": lambda: rng.standard_t(3, size=n),
            "scores": lambda: rng.integers(1, 6, size=n).astype(float)}
    x, y = draw[laws[0]](), draw[laws[1]]()
    x, y = x - x.mean(), y - y.mean()
    # Reference: the definition, every one of the n! relabellings equally likely.
    s = np.array([x @ y[list(p)] for p in itertools.permutations(range(n))])
    e2, e3, e4 = linear.permutation_moments(*(np.sum(x ** k) for k in (2, 3, 4)),
                                            *(np.sum(y ** k) for k in (2, 3, 4)), n)
    scale = float(np.mean(s ** 2))
    assert e2 == pytest.approx(scale, rel=1e-10)
    assert e3 == pytest.approx(np.mean(s ** 3), rel=1e-8, abs=1e-10 * scale ** 1.5)
    assert e4 == pytest.approx(np.mean(s ** 4), rel=1e-10)


def test_variance_of_r_under_relabelling_is_one_over_n_minus_1():
    # Pitman (1937): Var(r) = 1/(n-1) over relabellings, whatever the data.
    rng = np.random.default_rng(3)
    x, y = rng.lognormal(size=25), rng.exponential(size=25)
    x, y = x - x.mean(), y - y.mean()
    e2, _, _ = linear.permutation_moments(*(np.sum(x ** k) for k in (2, 3, 4)),
                                          *(np.sum(y ** k) for k in (2, 3, 4)), 25)
    assert e2 / (np.sum(x * x) * np.sum(y * y)) == pytest.approx(1 / 24, rel=1e-12)


def test_pearson_curve_type_i_matches_a_beta_with_the_same_moments():
    # Reference: scipy.stats.beta with loc/scale, standardised; its moments from scipy.
    for a, b in [(2.0, 5.0), (7.0, 3.0), (30.0, 30.0), (0.8, 1.5)]:
        law = stats.beta(a, b)
        mean, var, skew, exkurt = (float(v) for v in law.stats(moments="mvsk"))
        z = np.linspace(-2.5, 2.5, 11)
        ours = linear.pearson_curve_sf(z, skew, exkurt + 3.0)
        ref = law.sf(mean + z * math.sqrt(var))
        np.testing.assert_allclose(ours, ref, rtol=1e-8, atol=1e-12)


def test_pearson_curve_type_iii_and_normal_lines():
    # Reference: scipy.stats.pearson3 (a standardised gamma with the given skewness) and scipy.stats.norm.
    z = np.linspace(-3, 5, 17)
    for g in (0.5, -1.2, 2.0):
        np.testing.assert_allclose(linear.pearson_curve_sf(z, g, 3 + 1.5 * g * g), stats.pearson3.sf(z, g),
                                   rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(linear.pearson_curve_sf(z, 0.0, 3.0), stats.norm.sf(z), rtol=1e-8)


def test_pearson_curve_type_iv_tail_against_quadrature_and_student_t():
    # Symmetric type IV is a scaled Student t (type VII): reference scipy.stats.t.
    for df in (5.0, 9.0, 30.0):
        kurt = 3 + 6 / (df - 4)
        scale = math.sqrt((df - 2) / df)
        z = np.linspace(-4, 6, 11)
        np.testing.assert_allclose(linear.pearson_curve_sf(z, 0.0, kurt), stats.t.sf(z / scale, df),
                                   rtol=1e-7, atol=1e-13)
    # Skewed type IV: reference scipy.integrate.quad of the density in theta = atan((z - lam)/a).
    g, k = 0.8, 6.0
    b1 = g * g
    r = 6 * (k - b1 - 1) / (2 * k - 3 * b1 - 6)
    d = 16 * (r - 1) - b1 * (r - 2) ** 2
    m, nu, a = 1 + r / 2, -r * (r - 2) * g / math.sqrt(d), math.sqrt(d) / 4
    lam = a * nu / r

    def dens(t):
        return math.exp((2 * m - 2) * math.log(math.cos(t)) - nu * t)

    total = integrate.quad(dens, -math.pi / 2, math.pi / 2, epsrel=1e-12)[0]
    for z in (-3.0, -1.0, 0.0, 1.5, 4.0, 9.0):
        ref = integrate.quad(dens, math.atan((z - lam) / a), math.pi / 2, epsrel=1e-12)[0] / total
        assert float(linear.pearson_curve_sf(z, g, k)) == pytest.approx(ref, rel=1e-8)


def test_small_samples_are_enumerated_exactly():
    rng = np.random.default_rng(8)
    x, y = rng.lognormal(size=6), rng.exponential(size=6)
    res = linear.pearson(x, y)
    xc, yc = x - x.mean(), y - y.mean()
    s = abs(xc @ yc)
    # Reference: the definition, |S| over all 720 relabellings.
    every = np.array([abs(xc @ yc[list(p)]) for p in itertools.permutations(range(6))])
    assert res.method.startswith("exact")
    assert res.p_value == pytest.approx(np.mean(every >= s * (1 - 1e-12)), rel=1e-12)


def test_normal_margins_give_nearly_the_t_test():
    # With a normal margin the permutation law is close to the t-test's law of r (Pitman 1937);
    # reference scipy.stats.pearsonr.
    rng = np.random.default_rng(11)
    for n in (40, 400):
        for _ in range(5):
            x, y = rng.normal(size=n), rng.normal(size=n)
            y = y + 0.1 * x
            ref = stats.pearsonr(x, y).pvalue
            assert linear.pearson(x, y).p_value == pytest.approx(ref, rel=0.1, abs=0.005)


def test_t_option_equals_scipy_pearsonr():
    rng = np.random.default_rng(12)
    for n in (5, 30, 300):
        x, y = rng.lognormal(size=n), rng.exponential(size=n) + 0.05 * rng.lognormal(size=n)
        res = linear.pearson(x, y, test="t")
        ref = stats.pearsonr(x, y)   # reference: scipy.stats.pearsonr (t-test, n-2 df)
        assert res.method == "t, n-2 df"
        assert res.estimate == pytest.approx(ref.statistic, abs=1e-12)
        assert res.p_value == pytest.approx(ref.pvalue, abs=1e-6)


def test_unknown_test_name_is_refused():
    with pytest.raises(ValueError, match="choose from moments, t, permutation"):
        linear.pearson(np.arange(5.0), np.arange(5.0) ** 2, test="bootstrap")


def test_moment_pvalue_agrees_with_permutation_test_on_skewed_simulated_pairs():
    rng = np.random.default_rng(21)
    for n, law in ((15, "lognormal"), (45, "exponential"), (120, "lognormal")):
        x = getattr(rng, law)(size=n)
        y = 0.2 * x * x.std() / x.std() + getattr(rng, law)(size=n)
        xc = x - x.mean()
        scale = math.sqrt(xc @ xc * np.sum((y - y.mean()) ** 2))
        # Reference: scipy.stats.permutation_test, statistic |r|, upper tail, B = 9999.
        ref = stats.permutation_test((y - y.mean(),), lambda v, axis=-1: np.abs(v @ xc) / scale,
                                     permutation_type="pairings", vectorized=True, n_resamples=9999,
                                     alternative="greater", random_state=2).pvalue
        se = math.sqrt(ref * (1 - ref) / 9999)
        assert abs(linear.pearson(x, y).p_value - ref) <= 4 * se + 1e-4, (n, law)


def test_compiled_incomplete_beta_and_gamma_match_scipy():
    # Reference: scipy.special.betaincc and gammainc.
    for a, b, x in [(0.5, 4.0, 0.2), (3.0, 40.0, 0.01), (200.0, 150.0, 0.6), (2.0, 2.0, 0.999)]:
        assert linear._beta_sf(a, b, x) == pytest.approx(special.betaincc(a, b, x), rel=1e-10)
    for a, x in [(0.5, 0.1), (4.0, 9.0), (300.0, 250.0), (10.0, 40.0)]:
        assert linear._gamma_p(a, x) == pytest.approx(special.gammainc(a, x), rel=1e-10)


# -- the split laws: their parts against full enumeration, the grouped parts against all n --------

def _raw_moments_instead_of_tails(k):
    """A stand-in for linear._two_tails giving E[(shift + T)^k] of a part (T centred, raw moments e2..e4),
    so that a split p-value function returns the k-th raw moment of its mixture of parts."""
    def moment(s, e2, e3, e4, shift=0.0):
        c = np.broadcast_to(shift, np.broadcast_shapes(np.shape(s), np.shape(e2), np.shape(shift)))
        return {1: c, 2: c ** 2 + e2, 3: c ** 3 + 3 * c * e2 + e3,
                4: c ** 4 + 6 * c ** 2 * e2 + 4 * c * e3 + e4}[k]
    return moment


@pytest.mark.parametrize("case", ["one point", "two x points", "x and y points"])
def test_split_laws_parts_add_up_to_the_enumerated_law(case, monkeypatch):
    # Reference: the definition, S over all 8! = 40,320 relabellings. The parts' weights, shifts and
    # the rest's moments, mixed, must give the whole law's raw moments E[S^k], k = 1..4, exactly.
    rng = np.random.default_rng(30)
    n = 8
    x = rng.lognormal(size=n)
    y = np.where(rng.random(n) < 0.5, 0.0, rng.exponential(size=n) * 3)
    x, y = x - x.mean(), y - y.mean()
    y[0] += 1.0    # no tie between the partner values that could hide a wrong weight
    y -= y.mean()
    perms = np.array(list(itertools.permutations(range(n))))
    s_all = y[perms] @ x
    for k in (1, 2, 3, 4):
        monkeypatch.setattr(linear, "_two_tails", _raw_moments_instead_of_tails(k))
        s = np.array([0.5])
        if case == "one point":
            mixed = linear._split_law_pvalue(x[None], y[None], s, grouped=False)[0]
        else:
            q_in_x = case == "two x points"
            q = np.argsort(-np.abs(x))[1] if q_in_x else np.argmax(np.abs(y))
            mixed = linear._two_point_pvalue(x[None], y[None], s, np.array([q_in_x]), np.array([q]))[0]
        ref = np.mean(s_all ** k)
        assert mixed == pytest.approx(ref, rel=1e-9, abs=1e-9 * np.mean(s_all ** 2) ** (k / 2)), (case, k)


def test_grouped_partners_change_the_split_law_little():
    # The split law over bins of the partner's values against the same law over all n partners
    # (its definition, each partner its own part): lognormal pairs with p from about 1e-8 to 1.
    rng = np.random.default_rng(31)
    for n in (400, 1500):
        x, y = rng.lognormal(size=(40, n)), rng.lognormal(size=(40, n))
        y = y + np.linspace(0, 1.0, 40)[:, None] * x * math.sqrt(100 / n)
        xc, yc = x - x.mean(1, keepdims=True), y - y.mean(1, keepdims=True)
        xc, yc = xc / np.abs(xc).max(1, keepdims=True), yc / np.abs(yc).max(1, keepdims=True)
        s = np.abs((xc * yc).sum(1))
        full = linear._split_law_pvalue(xc, yc, s, grouped=False)
        grouped = linear._split_law_pvalue(xc, yc, s)
        assert full.min() < 1e-4 and full.max() > 0.5
        np.testing.assert_allclose(grouped, full, rtol=1e-3, atol=1e-6)


def test_two_dominant_values_against_permutation_test():
    # A column that is mostly zeros with two large values (two points over 25% of its sum of
    # squares each) beside a lognormal one, n = 250. Reference: scipy.stats.permutation_test, |r|,
    # B = 9,999, within 4 Monte Carlo standard errors.
    rng = np.random.default_rng(32)
    n = 250
    for trial in range(3):
        x = np.zeros(n)
        x[rng.choice(n, 25, replace=False)] = rng.exponential(size=25)
        x[:2] = (30.0, 24.0)
        y = rng.lognormal(size=n) + 0.02 * trial * x
        xc, yc = x - x.mean(), y - y.mean()
        shares = np.sort(xc * xc)[::-1] / (xc @ xc)
        assert shares[1] > 0.25
        scale = math.sqrt((xc @ xc) * (yc @ yc))
        ref = stats.permutation_test((yc,), lambda v, axis=-1: np.abs(v @ xc) / scale,
                                     permutation_type="pairings", vectorized=True, n_resamples=9999,
                                     alternative="greater", random_state=3).pvalue
        se = math.sqrt(ref * (1 - ref) / 9999)
        assert abs(linear.pearson(x, y).p_value - ref) <= 4 * se + 1e-4, (trial, ref)


# Found by the hypothesis test of the verdict (test_label_always_valid): a division by zero.
_RARE_CASE = ([0.3824370658829851, -1.2155853262448648, 1.3444772025761573, 0.2631808099566607,
               -0.8040474783808451, -0.7584153672052011, 0.16143838753246917, -0.9024250854019726],
              [0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0])


@pytest.mark.parametrize("case", ["found", 0, 1, 2, 3, 4])
def test_a_column_with_one_rare_value_gets_the_exact_law(case):
    """y is 0 but at one row. The split law takes the most extreme value of the side with the larger
    kurtosis (here y's rare value) out, and the rest of y is then constant: T is 0 and the law is
    exact. Its central sums come from raw power sums and are rounding residue, which once gave
    moments no law has and a division by zero. Reference: the definition, |S| over all 8!
    relabellings."""
    if case == "found":
        x, y = (np.array(v) for v in _RARE_CASE)
    else:
        rng = np.random.default_rng(case)
        x = rng.uniform(size=8)
        y = np.zeros(8)
        y[int(rng.integers(8))] = 1.0
    xc, yc = x - x.mean(), y - y.mean()
    assert (yc ** 4).sum() / (yc ** 2).sum() ** 2 > (xc ** 4).sum() / (xc ** 2).sum() ** 2  # y is taken apart
    every = np.abs(yc[np.array(list(itertools.permutations(range(8))))] @ xc)
    exact = np.mean(every >= abs(xc @ yc) * (1 - 1e-12))
    assert linear.pearson(x, y).p_value == pytest.approx(exact, rel=1e-9)
