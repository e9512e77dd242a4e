"""Distance correlation against the dcor library, closed forms and brute force."""

from __future__ import annotations

import itertools
import json
import math
import subprocess
import sys
import textwrap
from pathlib import Path

import dcor as dcor_lib
import numpy as np
import pytest
from scipy.stats import special_ortho_group

from pairlens import config
from pairlens.core import distance
from pairlens.core.results import TestResult

ROOT = Path(__file__).resolve().parents[2]
ATOL = 1e-9


def _tied_pair(rng, n):
    """Rounded / integer data so that ties occur in x and in y."""
    x = np.round(rng.normal(size=n), 1)
    y = np.round(x + rng.normal(size=n))
    return x, y


def _with_missing(rng, x, y, frac=0.15):
    x, y = x.copy(), y.copy()
    x[rng.random(x.size) < frac] = np.nan
    y[rng.random(y.size) < frac] = np.nan
    return x, y


def _library_bc_defined(x, y):
    # dcor returns 0 by convention when a U-centred variance vanishes; we report
    # undefined instead (never a silent zero), so compare only where it is defined.
    vx = dcor_lib.u_distance_covariance_sqr(x, x)
    vy = dcor_lib.u_distance_covariance_sqr(y, y)
    scale_x = np.abs(x[:, None] - x[None, :]).mean() ** 2
    scale_y = np.abs(y[:, None] - y[None, :]).mean() ** 2
    return vx > 1e-12 * scale_x and vy > 1e-12 * scale_y


SIZES = [3, 4, 5, 6, 7, 11, 25, 64, 150, 400]


@pytest.mark.parametrize("n", SIZES)
def test_matches_dcor_library_on_ties_and_missing(n):
    rng = np.random.default_rng([11, n])
    for _ in range(6):
        x, y = _with_missing(rng, *_tied_pair(rng, n + n // 5 + 2))
        keep = ~(np.isnan(x) | np.isnan(y))
        xk, yk = x[keep], y[keep]
        r = distance.dcor(x, y)
        if keep.sum() < 3 or np.ptp(xk) == 0 or np.ptp(yk) == 0:
            assert math.isnan(r.estimate) and r.note
            continue
        assert r.n == keep.sum()
        # reference: dcor.distance_correlation (V-statistic), same rows dropped
        assert r.estimate == pytest.approx(dcor_lib.distance_correlation(xk, yk), abs=ATOL)
        bc = distance.dcor_bc(x, y)
        if keep.sum() < 4:
            # reference: dcor.u_distance_correlation_sqr is NaN below 4 rows (n(n-3) = 0)
            assert math.isnan(bc.estimate) and bc.note
            assert not np.isfinite(dcor_lib.u_distance_correlation_sqr(xk, yk))
        elif _library_bc_defined(xk, yk):
            # reference: dcor.u_distance_correlation_sqr (U-centred, bias-corrected)
            assert bc.estimate == pytest.approx(dcor_lib.u_distance_correlation_sqr(xk, yk),
                                                abs=ATOL)
        else:
            assert math.isnan(bc.estimate) and "variance is zero" in bc.note


def test_matches_dcor_library_on_many_random_sizes():
    rng = np.random.default_rng(5)
    for n in rng.integers(4, 300, size=40):
        x = rng.integers(0, 6, size=n).astype(float)           # heavy ties
        y = x ** 2 * rng.integers(0, 2, size=n) + rng.integers(0, 4, size=n)
        if np.ptp(x) == 0 or np.ptp(y) == 0:
            continue
        # reference: dcor.distance_correlation / dcor.u_distance_correlation_sqr
        assert distance.dcor(x, y).estimate == pytest.approx(
            dcor_lib.distance_correlation(x, y), abs=ATOL)
        if _library_bc_defined(x, y):
            assert distance.dcor_bc(x, y).estimate == pytest.approx(
                dcor_lib.u_distance_correlation_sqr(x, y), abs=ATOL)


def test_large_offset_keeps_full_precision():
    rng = np.random.default_rng(8)
    x = rng.normal(size=1500)
    y = x ** 2 + rng.normal(size=1500)
    for offset in (1e6, -3e7):
        xo, yo = x + offset, y + offset
        # reference: dcor with method="naive" (explicit matrices). dcor's own
        # O(n log n) path is not usable as a reference here: on this data it is
        # off by about 5e-4 at offset 1e6 (seen when writing this test).
        ref = dcor_lib.distance_correlation(xo, yo, method="naive")
        assert distance.dcor(xo, yo).estimate == pytest.approx(ref, abs=ATOL)
        ref_bc = dcor_lib.u_distance_correlation_sqr(xo, yo, method="naive")
        assert distance.dcor_bc(xo, yo).estimate == pytest.approx(ref_bc, abs=ATOL)
        # distances are shift invariant (definition); xo - offset is exact in floating
        # point (Sterbenz), so undoing the offset must not change the estimate
        back = distance.dcor(xo - offset, yo - offset).estimate
        assert distance.dcor(xo, yo).estimate == pytest.approx(back, abs=1e-12)


@pytest.mark.parametrize("dx,dy", [(3, 2), (1, 4), (5, 1), (2, 2)])
def test_groups_match_dcor_library(dx, dy):
    rng = np.random.default_rng([dx, dy])
    n = 90
    x = rng.normal(size=(n, dx))
    y = np.column_stack([np.abs(x[:, :1]).repeat(dy, axis=1) + rng.normal(size=(n, dy))])
    y = np.round(y, 1)
    xs = x[:, 0] if dx == 1 else x
    ys = y[:, 0] if dy == 1 else y
    for method in ("auto", "blocked", "naive"):
        # reference: dcor.distance_correlation and dcor.u_distance_correlation_sqr
        # on (n, d) arrays (Euclidean distances)
        assert distance.dcor(xs, ys, method=method).estimate == pytest.approx(
            dcor_lib.distance_correlation(x, y), abs=ATOL)
        assert distance.dcor_bc(xs, ys, method=method).estimate == pytest.approx(
            dcor_lib.u_distance_correlation_sqr(x, y), abs=ATOL)


def test_group_with_missing_rows_matches_dcor_library():
    rng = np.random.default_rng(21)
    x = rng.normal(size=(70, 3))
    y = np.round(x[:, :2] ** 2 + rng.normal(size=(70, 2)), 1)
    x[[3, 9], 1] = np.nan
    y[[9, 40], 0] = np.nan
    keep = ~(np.isnan(x).any(axis=1) | np.isnan(y).any(axis=1))
    res = distance.dcor(x, y)
    assert res.n == keep.sum() == 67
    # reference: dcor.distance_correlation on the complete rows
    assert res.estimate == pytest.approx(dcor_lib.distance_correlation(x[keep], y[keep]), abs=ATOL)


def test_group_dcor_is_one_for_rotated_scaled_shifted_copy():
    # Szekely, Rizzo & Bakirov (2007), Theorem 3 (numbering from memory): R_n = 1 when Y = a + b X C
    # with C orthonormal and b > 0 (both the V and the U-centred statistics,
    # since the distance matrices are proportional).
    rng = np.random.default_rng(3)
    x = rng.standard_t(4, size=(120, 4))
    rot = special_ortho_group.rvs(4, random_state=7)
    y = 3.0 + 2.5 * x @ rot
    assert distance.dcor(x, y).estimate == pytest.approx(1.0, abs=1e-9)
    assert distance.dcor_bc(x, y).estimate == pytest.approx(1.0, abs=1e-9)


def test_fast_equals_blocked_and_naive_including_p_values():
    rng = np.random.default_rng(17)
    for n in (3, 4, 9, 40, 333):
        x, y = _tied_pair(rng, n)
        if np.ptp(x) == 0 or np.ptp(y) == 0:
            continue
        fast = distance.dcor(x, y, method="fast")
        for other in ("blocked", "naive"):
            res = distance.dcor(x, y, method=other)
            # oracle: explicit double-centred matrices (definition, Szekely et al. 2007)
            assert res.estimate == pytest.approx(fast.estimate, abs=1e-12)
            assert res.p_value == pytest.approx(fast.p_value, rel=1e-8, abs=1e-300)
        if n >= 4:
            a = distance.dcor_bc(x, y, method="fast")
            b = distance.dcor_bc(x, y, method="naive")
            assert (math.isnan(a.estimate) and math.isnan(b.estimate)) or \
                a.estimate == pytest.approx(b.estimate, abs=1e-12)


@pytest.mark.parametrize("kind", ["columns", "groups"])
def test_permutation_moments_match_full_enumeration(kind):
    # Reference: brute force over all 7! permutations of y (the definition of the
    # permutation distribution), for the closed-form mean, variance and third
    # moment that the default p-value uses, on every computation path.
    rng = np.random.default_rng(4)
    n = 7
    if kind == "columns":
        x, y = rng.lognormal(size=n), np.round(rng.exponential(size=n), 1)
        xm, ym = x[:, None], y[:, None]
    else:
        x, y = rng.lognormal(size=(n, 2)), rng.normal(size=(n, 3))
        xm, ym = x, y

    def centred(z):
        a = np.sqrt(((z[:, None, :] - z[None, :, :]) ** 2).sum(-1))
        return a - a.mean(0) - a.mean(1)[:, None] + a.mean()

    big_a, big_b = centred(xm), centred(ym)
    values = np.array([(big_a * big_b[np.ix_(p, p)]).sum() / n
                       for p in map(list, itertools.permutations(range(n)))])
    for method in ("auto", "blocked", "naive"):
        st = distance.distance_statistics(x, y, method=method)
        mean, var = distance._permutation_moments(st)
        assert mean == pytest.approx(values.mean(), rel=1e-10)
        assert var == pytest.approx(values.var(), rel=1e-10)
        assert distance._permutation_third_moment(st) == pytest.approx((values ** 3).mean(),
                                                                       rel=1e-10)
        # the mean is a_bar b_bar n / (n - 1) (same enumeration)
        assert mean == pytest.approx(st.mean_a * st.mean_b * n / (n - 1), rel=1e-12)


def test_exact_skewness_tends_to_the_limit_law():
    # Szekely, Rizzo & Bakirov (2007), Theorem 5: n dCov^2_n tends to
    # sum alpha_i beta_j Z_ij^2, whose skewness is 2^(3/2) sum a^3 sum b^3 /
    # (sum a^2 sum b^2)^(3/2); the exact permutation skewness must approach it.
    rng = np.random.default_rng(10)
    n = 20_000
    st = distance.distance_statistics(rng.lognormal(size=n), rng.normal(size=n))
    mean, var = distance._permutation_moments(st)
    third = distance._permutation_third_moment(st) - 3 * mean * var - mean ** 3
    k2 = 2 * st.dvar2_x * st.dvar2_y
    limit = 8 * st.cube_x * st.cube_y / k2 ** 1.5
    assert third / var ** 1.5 == pytest.approx(limit, rel=0.01)


def test_eigenvalue_moments_match_numpy_eigvalsh():
    # Reference: numpy.linalg.eigvalsh of -A/n for the O(n) trace formulas.
    rng = np.random.default_rng(6)
    for n in (3, 8, 50, 201):
        x = np.round(rng.standard_t(3, size=n), 1)
        a = np.abs(x[:, None] - x[None, :])
        big_a = a - a.mean(0) - a.mean(1)[:, None] + a.mean()
        ev = np.linalg.eigvalsh(-big_a / n)
        t1, t2, t3 = distance._gap_traces(np.sort(x))
        assert t1 == pytest.approx(ev.sum(), rel=1e-10)
        assert t2 == pytest.approx((ev ** 2).sum(), rel=1e-10)
        assert t3 == pytest.approx((ev ** 3).sum(), rel=1e-9)
        # and for a group: the matrix path against eigvalsh
        z = rng.normal(size=(n, 2))
        d = np.sqrt(((z[:, None, :] - z[None, :, :]) ** 2).sum(-1))
        dc = d - d.mean(0) - d.mean(1)[:, None] + d.mean()
        ev = np.linalg.eigvalsh(-dc / n)
        assert distance._group_cube(z, float((dc * dc).mean())) == pytest.approx(
            (ev ** 3).sum(), rel=1e-9)


def test_dependence_is_detected_by_both_tests():
    rng = np.random.default_rng(9)
    x = rng.normal(size=150)
    y = x ** 2 + 0.5 * rng.normal(size=150)       # Pearson r near 0, strong dependence
    g = distance.dcor(x, y)
    p = distance.dcor(x, y, permutations=499, seed=1)
    assert g.method == "gamma approximation" and g.p_value < 1e-6
    assert p.method == "permutation, B=499" and p.p_value == pytest.approx(1 / 500)
    assert distance.dcor_bc(x, y).p_value == g.p_value     # same test, documented


def test_degenerate_inputs_are_undefined():
    rng = np.random.default_rng(2)
    x = rng.normal(size=20)
    for res in (distance.dcor(np.ones(20), x), distance.dcor_bc(x, np.full(20, 2.5))):
        assert isinstance(res, TestResult)
        assert math.isnan(res.estimate) and math.isnan(res.p_value)
        assert "constant" in res.note and res.n == 20
    res = distance.dcor([1.0, 2.0], [3.0, 1.0])
    assert math.isnan(res.estimate) and "fewer than 3" in res.note and res.n == 2
    res = distance.dcor_bc([1.0, 2.0, 4.0], [3.0, 1.0, 2.0])
    assert math.isnan(res.estimate) and "fewer than 4" in res.note
    assert np.isfinite(distance.dcor([1.0, 2.0, 4.0], [3.0, 1.0, 2.0]).estimate)
    xm = x.copy()
    xm[2:] = np.nan
    assert "fewer than 3" in distance.dcor(xm, x).note
    group = np.tile(rng.normal(size=(1, 3)), (20, 1))        # every row identical
    assert "constant" in distance.dcor(group, x).note
    with pytest.raises(ValueError, match="rows"):
        distance.dcor(x, x[:10])
    with pytest.raises(ValueError, match="unknown method"):
        distance.dcor(x, x, method="quick")
    with pytest.raises(ValueError, match="1-D"):
        distance.dcor(rng.normal(size=(20, 2)), x, method="fast")


def test_group_row_limit_has_a_clear_message(monkeypatch):
    monkeypatch.setattr(config, "MAX_GROUP_ROWS", 50)
    rng = np.random.default_rng(1)
    with pytest.raises(ValueError) as err:
        distance.dcor(rng.normal(size=(60, 2)), rng.normal(size=60))
    msg = str(err.value)
    assert "column groups need pairwise distances; 60 rows is over the limit of 50" in msg
    assert "sample the rows or raise MAX_GROUP_ROWS" in msg
    # single columns never build distances, so the cap does not apply to them
    assert np.isfinite(distance.dcor(rng.normal(size=60), rng.normal(size=60)).estimate)


def test_gaussian_dcor_closed_form():
    # Szekely, Rizzo & Bakirov (2007), Theorem 7: R(0) = 0, R(+-1) = 1, even in rho,
    # increasing in |rho|, and R(rho) <= |rho| (stated with Theorem 7; from memory).
    assert distance.gaussian_dcor(0.0) == pytest.approx(0.0, abs=1e-12)
    assert distance.gaussian_dcor(1.0) == pytest.approx(1.0, abs=1e-12)
    assert distance.gaussian_dcor(-1.0) == pytest.approx(1.0, abs=1e-12)
    grid = np.linspace(0.01, 0.99, 99)
    vals = distance.gaussian_dcor(grid)
    assert np.all(np.diff(vals) > 0) and np.all(vals <= grid + 1e-12)
    assert np.allclose(distance.gaussian_dcor(-grid), vals)
    with pytest.raises(ValueError):
        distance.gaussian_dcor(1.5)


def test_gaussian_dcor_of_one_value_is_the_array_formula():
    grid = np.concatenate([np.linspace(-1.0, 1.0, 2001), [1.0 + 1e-13, -1.0 - 1e-13, 1e-300, np.nan]])
    whole = distance.gaussian_dcor(grid)
    one = np.array([distance.gaussian_dcor(float(r)) for r in grid])
    assert all(isinstance(distance.gaussian_dcor(float(r)), float) for r in grid[:3])
    # Not bit for bit: the scalar path calls libm's asin and sqrt, NumPy may call its own SIMD
    # versions (AVX-512 machines), a few ulp apart (NumPy's SIMD float64 functions are documented to
    # within 4 ulp: from memory); the numerator's cancellation amplifies that about tenfold.
    # Measured on an AVX-512 machine: 1.2e-15 at most (on AVX2 the two were within 4e-16).
    np.testing.assert_allclose(one, whole, rtol=0, atol=1e-13, equal_nan=True)
    assert np.array_equal(np.isnan(one), np.isnan(whole))
    assert isinstance(distance.gaussian_dcor(np.float64(0.3)), float)
    with pytest.raises(ValueError):
        distance.gaussian_dcor(-1.5)


def test_bivariate_normal_sample_matches_theorem_7():
    # Szekely, Rizzo & Bakirov (2007), Theorem 7: population dCor of a bivariate
    # normal with rho = 0.6. Monte Carlo error: the SD of R_n over 8 independent
    # samples of n = 20,000 (about 0.004 here) gives the SE of their mean,
    # SD / sqrt(8); the V-statistic bias is O(1/n) (E|X-X'| E|Y-Y'| / n ~ 6e-5 on
    # dCov^2, about 2e-4 on R), far inside the 4 SE band.
    rho, n, k = 0.6, 20_000, 8
    rng = np.random.default_rng(2007)
    cov = [[1.0, rho], [rho, 1.0]]
    est, est_bc = [], []
    for _ in range(k):
        xy = rng.multivariate_normal([0.0, 0.0], cov, size=n)
        est.append(distance.dcor(xy[:, 0], xy[:, 1]).estimate)
        est_bc.append(distance.dcor_bc(xy[:, 0], xy[:, 1]).estimate)
    est, est_bc = np.array(est), np.array(est_bc)
    target = distance.gaussian_dcor(rho)
    se = est.std(ddof=1) / math.sqrt(k)
    assert 0 < est.std(ddof=1) < 0.02
    assert abs(est.mean() - target) < 4 * se + 2e-4
    # the bias-corrected estimator targets R^2 (Szekely & Rizzo 2014)
    se_bc = est_bc.std(ddof=1) / math.sqrt(k)
    assert abs(est_bc.mean() - target ** 2) < 4 * se_bc + 1e-4


_PERF_SCRIPT = textwrap.dedent("""
    import json, time, tracemalloc
    import numpy as np
    from pairlens.core import distance

    def status_kb(key):
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key):
                    return int(line.split()[1])

    rng = np.random.default_rng(0)
    distance.dcor(rng.normal(size=200), rng.normal(size=200))      # compile / load cache
    x, y = rng.normal(size=100_000), rng.normal(size=100_000)
    # reset the resident-set high-water mark (Linux clear_refs "5"), so the peak
    # below belongs to this pair and includes numba's own allocations, which
    # tracemalloc does not see
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
    base = status_kb("VmRSS")
    tracemalloc.start()
    t0 = time.perf_counter()
    res = distance.dcor(x, y)
    res_bc = distance.dcor_bc(x, y)
    elapsed = (time.perf_counter() - t0) / 2
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    print(json.dumps({"seconds": elapsed, "traced_mb": peak / 2**20,
                      "rss_peak_growth_mb": (status_kb("VmHWM") - base) / 1024,
                      "estimate": res.estimate, "p": res.p_value}))
""")


def test_one_pair_of_100k_rows_needs_little_memory():
    # O(n) memory per univariate pair (DESIGN.md section 5): 200 MB is a generous bound for
    # n = 100,000 (an n x n matrix would be 80 GB). The time is printed for the record only;
    # per-pair and per-resample speed are measured by benchmarks/bench_engine.py (W2, W3).
    out = subprocess.run([sys.executable, "-c", _PERF_SCRIPT], cwd=ROOT, capture_output=True,
                         text=True, check=True, timeout=300)
    stats = json.loads(out.stdout.strip().splitlines()[-1])
    print(f"\nn=100000 one pair: {stats['seconds']:.3f} s, tracemalloc peak "
          f"{stats['traced_mb']:.1f} MB, resident peak growth {stats['rss_peak_growth_mb']:.1f} MB")
    assert stats["traced_mb"] < 200 and stats["rss_peak_growth_mb"] < 200
    assert 0 <= stats["estimate"] < 0.05 and 0 < stats["p"] <= 1
