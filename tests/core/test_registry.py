"""Common tests run over every registered measure (scikit-learn style common checks).

Invariances are standard properties of these measures (common practice); the
bounds come from each measure's definition as listed in the registry.
"""

import math

import numpy as np
import pytest

from pairlens.core.registry import MEASURES, PairContext
from pairlens.core.results import TestResult

# The common checks below feed numeric pairs; the categorical measures have theirs in
# tests/core/test_categorical.py (their data are level codes).
EVERY = list(MEASURES.values())
ALL = [m for m in EVERY if m.applies_to("numeric", "numeric")]
IDS = [m.name for m in ALL]
REQUIRED_TEXT = ("label", "family", "default_test", "formula", "reference", "reflection")


def _data(seed=0, n=120):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = 0.6 * x + 0.8 * rng.normal(size=n)
    return x, y


def _ctx():
    return PairContext(confidence=0.95, permutations=0, seed=np.random.SeedSequence(7))


@pytest.mark.parametrize("measure", EVERY, ids=[m.name for m in EVERY])
def test_every_measure_is_classified(measure):
    for attr in REQUIRED_TEXT:
        assert isinstance(getattr(measure, attr), str) and getattr(measure, attr), attr
    assert isinstance(measure.symmetric, bool) and isinstance(measure.signed, bool)
    assert measure.lower < measure.upper
    assert measure.reflection in ("flips sign", "unchanged")
    assert measure.signed or measure.lower >= 0
    assert "doi" in measure.reference.lower() or "(19" in measure.reference or "(20" in measure.reference


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_returns_result_within_bounds(measure):
    x, y = _data()
    res = measure.compute(x, y, _ctx())
    assert isinstance(res, TestResult)
    assert measure.lower - 1e-12 <= res.estimate <= measure.upper + 1e-12
    assert 0.0 <= res.p_value <= 1.0
    assert res.n == len(x)
    assert res.method


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_symmetry_as_declared(measure):
    x, y = _data(1)
    a = measure.compute(x, y, _ctx()).estimate
    b = measure.compute(y, x, _ctx()).estimate
    if measure.symmetric:
        assert a == pytest.approx(b, rel=1e-12, abs=1e-14)
    else:
        # an asymmetric measure must actually differ on an asymmetric relation
        rng = np.random.default_rng(3)
        u = rng.uniform(-1, 1, 400)
        v = u ** 2 + 0.01 * rng.normal(size=400)
        assert abs(measure.compute(u, v, _ctx()).estimate - measure.compute(v, u, _ctx()).estimate) > 0.1


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_invariant_under_positive_affine_maps(measure):
    x, y = _data(2)
    base = measure.compute(x, y, _ctx()).estimate
    moved = measure.compute(3.5 * x - 40.0, 0.25 * y + 7.0, _ctx()).estimate
    assert moved == pytest.approx(base, rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_reflection_as_declared(measure):
    x, y = _data(4)
    base = measure.compute(x, y, _ctx()).estimate
    flipped = measure.compute(-x, y, _ctx()).estimate
    expected = -base if measure.reflection == "flips sign" else base
    assert flipped == pytest.approx(expected, rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_constant_column_gives_nan_with_reason(measure):
    x, _ = _data(5)
    res = measure.compute(x, np.full_like(x, 2.5), _ctx())
    assert math.isnan(res.estimate) and math.isnan(res.p_value)
    assert "constant" in res.note.lower()


@pytest.mark.parametrize("measure", ALL, ids=IDS)
def test_too_few_rows_gives_nan_with_reason(measure):
    res = measure.compute(np.array([1.0, 2.0]), np.array([2.0, 1.0]), _ctx())
    assert math.isnan(res.estimate)
    assert res.note


@pytest.mark.parametrize("measure", [m for m in ALL if m.multivariate], ids=[m.name for m in ALL if m.multivariate])
def test_multivariate_measures_accept_groups(measure):
    rng = np.random.default_rng(6)
    x = rng.normal(size=(80, 3))
    y = np.column_stack([x[:, 0] + 0.1 * rng.normal(size=80), rng.normal(size=80)])
    res = measure.compute(x, y, _ctx())
    assert measure.lower - 1e-12 <= res.estimate <= measure.upper + 1e-12
    assert res.p_value < 0.01


@pytest.mark.parametrize("measure", ALL, ids=IDS)
@pytest.mark.parametrize("permutations", [0, 99])
def test_a_seed_given_as_a_callable_is_made_only_when_read(measure, permutations):
    # The tiles hand each pair's seed as a callable; a measure must give the same result as with the
    # sequence itself, and the callable must run only if the seed is read (at most once).
    x, y = _data(seed=4, n=40)
    calls = []

    def make():
        calls.append(1)
        return np.random.SeedSequence(11)

    lazy = PairContext(permutations=permutations, seed=make)
    eager = PairContext(permutations=permutations, seed=np.random.SeedSequence(11))
    a, b = measure.compute(x, y, lazy), measure.compute(x, y, eager)
    assert (a.estimate, a.p_value, a.method) == (b.estimate, b.p_value, b.method)
    assert len(calls) <= 1
    assert (lazy.seed.entropy, len(calls)) == (11, 1)


@pytest.mark.parametrize("permutations", [0, 19])
def test_presorted_pairs_make_a_seed_only_for_tests_that_draw(permutations, monkeypatch):
    from pairlens import tiles
    from pairlens.plan import AnalysisSettings, Variable

    made = []
    real = tiles.pair_seed
    monkeypatch.setattr(tiles, "pair_seed", lambda *a: made.append(a[-1]) or real(*a))
    x, y = _data(seed=5)
    variables = [Variable("x", (0,)), Variable("y", (1,))]
    settings = AnalysisSettings(measures=("pearson", "spearman", "kendall", "dcor"), permutations=permutations)
    prep = tiles.prepare_columns(np.column_stack([x, y]), variables)
    rows = tiles.fast_pair_rows(prep, variables[0], variables[1], settings)
    assert len(rows) == 4 and all(r.p_value == r.p_value for r in rows)
    # the default tests of these four draw nothing; with permutations Pearson's and dCor's do
    assert sorted(made) == ([] if permutations == 0 else ["dcor", "pearson"])
