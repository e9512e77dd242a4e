"""Level of the distance-correlation tests under independence, by simulation.

Rejection rates are binomial: with R replicates the Monte Carlo SE at level
alpha is sqrt(alpha (1 - alpha) / R). With R = 4000 per cell that is 0.0034 at
0.05 and 0.0016 at 0.01, so the bands [0.035, 0.065] and <= 0.017 sit about
4.4 SE from the nominal level: a test that holds its level passes, one that
rejects 1.5x too often at 1% fails. Seeds are fixed, so the outcome is
reproducible.
"""

from __future__ import annotations


import numpy as np
import pytest

from pairlens.core import distance

MARGINALS = {
    "normal": lambda rng, n: rng.normal(size=n),
    "exponential": lambda rng, n: rng.exponential(size=n),
    "t3": lambda rng, n: rng.standard_t(3, size=n),
    "lognormal": lambda rng, n: rng.lognormal(size=n),
}
REPLICATES = 4000


@pytest.mark.slow
@pytest.mark.parametrize("n", [30, 100, 500])
@pytest.mark.parametrize("marginal", list(MARGINALS))
def test_gamma_approximation_holds_its_level(marginal, n):
    draw = MARGINALS[marginal]
    rng = np.random.default_rng([2026, n, list(MARGINALS).index(marginal)])
    p = np.empty(REPLICATES)
    for r in range(REPLICATES):
        res = distance.dcor(draw(rng, n), draw(rng, n))
        assert res.method == "gamma approximation"
        p[r] = res.p_value
    rej05, rej01 = np.mean(p <= 0.05), np.mean(p <= 0.01)
    print(f"\n{marginal} n={n}: rejections {rej05:.4f} at 0.05, {rej01:.4f} at 0.01")
    # common practice: a test of independence holds its level when its
    # rejection rate under independence stays at or below alpha (MC band above)
    assert 0.035 <= rej05 <= 0.065
    assert rej01 <= 0.017
    assert np.all((p >= 0) & (p <= 1))


@pytest.mark.slow
@pytest.mark.parametrize("n", [30, 120])
def test_gamma_approximation_level_for_column_groups(n):
    # groups of different dimension: 2-D t(3) against 3-D lognormal
    rng = np.random.default_rng([7, n])
    reps = 1500               # SE 0.0056 at 0.05, 0.0026 at 0.01
    p = np.array([distance.dcor(rng.standard_t(3, size=(n, 2)),
                                rng.lognormal(size=(n, 3))).p_value for _ in range(reps)])
    rej05, rej01 = np.mean(p <= 0.05), np.mean(p <= 0.01)
    print(f"\ngroups n={n}: rejections {rej05:.4f} at 0.05, {rej01:.4f} at 0.01")
    assert 0.03 <= rej05 <= 0.07
    assert rej01 <= 0.02


@pytest.mark.slow
@pytest.mark.parametrize("marginal", ["normal", "lognormal"])
def test_permutation_test_holds_its_level(marginal):
    # With B = 199 and continuous data, P(p <= 0.05) = 10/200 = 0.05 exactly
    # (Besag & Clifford 1991: Monte Carlo tests are exact). 1000 replicates: SE 0.0069.
    draw = MARGINALS[marginal]
    rng = np.random.default_rng([99, len(marginal)])
    reps, n = 1000, 40
    p = np.array([distance.dcor(draw(rng, n), draw(rng, n), permutations=199,
                                seed=rng.integers(2**32)).p_value for _ in range(reps)])
    rej = np.mean(p <= 0.05)
    print(f"\npermutation {marginal} n={n}: rejections {rej:.4f} at 0.05")
    assert 0.03 <= rej <= 0.07
    assert p.min() >= 1 / 200


def test_permutation_p_value_is_reproducible():
    rng = np.random.default_rng(31)
    x = rng.normal(size=80)
    y = 0.25 * x + rng.normal(size=80)
    first = distance.dcor(x, y, permutations=999, seed=123)
    again = distance.dcor(x, y, permutations=999, seed=123)
    assert first.p_value == again.p_value and first.method == "permutation, B=999"
    # a SeedSequence gives the same stream as default_rng would from it
    ss = np.random.SeedSequence(77)
    assert (distance.dcor(x, y, permutations=499, seed=ss).p_value
            == distance.dcor(x, y, permutations=499, seed=np.random.SeedSequence(77)).p_value)
    # different seeds generally give different Monte Carlo p-values
    others = {distance.dcor(x, y, permutations=999, seed=s).p_value for s in range(6)}
    assert len(others) > 1
    # same seed, same p whatever the computation path (fast, blocked, naive) ...
    for method in ("blocked", "naive"):
        assert distance.dcor(x, y, permutations=999, seed=123, method=method).p_value \
            == first.p_value
    # ... and the bias-corrected measure reports the same test
    assert distance.dcor_bc(x, y, permutations=999, seed=123).p_value == first.p_value


def test_permutation_p_value_does_not_depend_on_chunking(monkeypatch):
    rng = np.random.default_rng(32)
    x, y = rng.exponential(size=60), rng.exponential(size=60)
    ref = distance.dcor(x, y, permutations=300, seed=5).p_value
    monkeypatch.setattr(distance, "_UNIFORMS_PER_CHUNK", 7 * 59)   # 7 resamples per chunk
    assert distance.dcor(x, y, permutations=300, seed=5).p_value == ref
    gx, gy = rng.normal(size=(60, 2)), rng.normal(size=(60, 3))
    ref_g = distance.dcor(gx, gy, permutations=120, seed=5).p_value
    monkeypatch.setattr(distance, "_UNIFORMS_PER_CHUNK", 1)
    assert distance.dcor(gx, gy, permutations=120, seed=5).p_value == ref_g


def test_permutation_ties_count_against_the_data():
    # Binary y: many permutations reproduce the observed statistic exactly in
    # exact arithmetic but not in floating point, and each path sums in its own
    # order. Ties within rounding count as >= (conservative), so every path
    # must report the same p for the same seed.
    x = np.round(np.linspace(0, 3, 14) ** 2, 1)
    y = np.array([0, 1, 1, 0] * 3 + [0, 1], dtype=float)
    p = {m: distance.dcor(x, y, permutations=399, seed=4, method=m).p_value
         for m in ("fast", "blocked", "naive")}
    assert p["fast"] == p["blocked"] == p["naive"]
    # y a function of x in two blocks of 4: only the 2 x 4! x 4! of 8! orderings
    # that keep the blocks (2/70) reach the observed statistic; they must be counted
    res = distance.dcor(np.array([0.0, 0, 0, 0, 1, 1, 1, 1]),
                        np.array([5.0, 5, 5, 5, 6, 6, 6, 6]), permutations=2000, seed=2)
    assert res.estimate == pytest.approx(1.0, abs=1e-12)
    # expected p about 2/70 = 0.0286; binomial SE at B = 2000 is 0.0037
    assert abs(res.p_value - 2 / 70) < 0.012
