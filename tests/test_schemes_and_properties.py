"""Validation schemes, exact statistics and invariants of the sweep."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import example, HealthCheck, given, settings
from hypothesis import strategies as st
from sklearn.model_selection import GroupKFold, KFold, RepeatedKFold

from engine import ArrayData, InputProblem, SchemeSpec, SweepSpec, analyse, make_plan
from engine.design import PolynomialBasis, polynomial_terms
from engine.moments import accumulate, combine, combine_batch, design_moments


# ---------------------------------------------------------------- schemes
def test_shuffled_folds_are_sklearn_kfold():
    # scikit-learn KFold(shuffle=True, random_state=seed): same validation rows per fold
    for n, k, seed in [(103, 5, 0), (40, 10, 7), (12, 3, 123)]:
        plan = make_plan(SchemeSpec("kfold", folds=k), n, seed=seed)
        ref = list(KFold(k, shuffle=True, random_state=seed).split(np.arange(n)))
        for (tr, va), t, v in zip(ref, plan.train_sets, plan.valid_sets):
            np.testing.assert_array_equal(np.sort(va), v)
            np.testing.assert_array_equal(np.sort(tr), t)


def test_repeated_folds_are_sklearn_repeated_kfold():
    # scikit-learn RepeatedKFold(random_state=seed)
    plan = make_plan(SchemeSpec("repeated", folds=4, repeats=3), 50, seed=5)
    ref = list(RepeatedKFold(n_splits=4, n_repeats=3, random_state=5).split(np.arange(50)))
    assert plan.n_splits == 12
    for (tr, va), v in zip(ref, plan.valid_sets):
        np.testing.assert_array_equal(np.sort(va), v)


def test_blocked_folds_drop_the_gap_on_both_sides():
    plan = make_plan(SchemeSpec("blocked", folds=4, gap=5), 100)
    for tr, va in zip(plan.train_sets, plan.valid_sets):
        assert np.all(np.diff(va) == 1)                       # contiguous block
        dist = np.min(np.abs(tr[:, None] - va[None, :]), axis=1)
        assert dist.min() == 6                                # 5 rows dropped, the 6th is used
        assert len(tr) + len(va) + np.sum((np.arange(100) >= va[0] - 5) & (np.arange(100) < va[0])
                                          | (np.arange(100) > va[-1]) & (np.arange(100) <= va[-1] + 5)) == 100


def test_grouped_folds_keep_groups_whole():
    rng = np.random.default_rng(0)
    groups = rng.choice(list("abcdefgh"), 80)
    plan = make_plan(SchemeSpec("grouped", folds=4, group_column="g"), 80, groups=groups)
    for tr, va in zip(plan.train_sets, plan.valid_sets):
        assert not set(groups[tr]) & set(groups[va])
    # the same partition as scikit-learn's GroupKFold
    ref = {tuple(np.sort(v)) for _, v in GroupKFold(4).split(np.arange(80), groups=groups)}
    assert {tuple(v) for v in plan.valid_sets} == ref


def test_holdout_trains_on_the_first_part():
    plan = make_plan(SchemeSpec("holdout", holdout_fraction=0.25), 40)
    np.testing.assert_array_equal(plan.train_sets[0], np.arange(30))
    np.testing.assert_array_equal(plan.valid_sets[0], np.arange(30, 40))


def test_user_split_column_labels_and_train_test_words():
    lab = np.array(["A", "B", "C"] * 10)
    plan = make_plan(SchemeSpec("column", split_column="s"), 30, split_labels=lab)
    assert plan.n_splits == 3
    words = np.array(["Train"] * 20 + ["test"] * 10)
    plan = make_plan(SchemeSpec("column", split_column="s"), 30, split_labels=words)
    assert plan.n_splits == 1 and len(plan.valid_sets[0]) == 10


@pytest.mark.parametrize("scheme,n,kw,code", [
    (SchemeSpec("kfold", folds=10), 6, {}, "too_few_rows"),
    (SchemeSpec("blocked", folds=3, gap=20), 30, {}, "too_few_rows"),
    (SchemeSpec("grouped", folds=5, group_column="g"), 30, {"groups": np.arange(30) % 3},
     "too_few_groups"),
    (SchemeSpec("column", split_column="s"), 30, {"split_labels": np.zeros(30)},
     "bad_split_column"),
    (SchemeSpec("nonsense"), 30, {}, "bad_scheme"),
    (SchemeSpec("kfold", folds=1), 30, {}, "bad_scheme"),
    (SchemeSpec("holdout", holdout_fraction=1.5), 30, {}, "bad_scheme"),
    (SchemeSpec("grouped"), 30, {}, "bad_scheme"),
])
def test_schemes_refuse_what_they_cannot_do(scheme, n, kw, code):
    with pytest.raises(InputProblem) as e:
        make_plan(scheme, n, **kw)
    assert e.value.code == code
    assert len(str(e.value)) > 20


def test_bad_requests_name_the_problem():
    data = ArrayData(np.arange(20.0), np.arange(20.0) ** 2)
    for spec, code in [
        (SweepSpec("y", ("x",), penalties=(-1.0,)), "bad_penalty"),
        (SweepSpec("y", ("x",), max_order=40), "bad_order"),
        (SweepSpec("y", (),), "no_inputs"),
        (SweepSpec("y", ("y",)), "target_is_input"),
        (SweepSpec("y", ("x",), learning_sizes=(0.0,)), "bad_learning_sizes"),
    ]:
        with pytest.raises(InputProblem) as e:
            analyse(data, spec)
        assert e.value.code == code
    with pytest.raises(InputProblem) as e:
        analyse(ArrayData(np.arange(20.0), np.ones(20)), SweepSpec("y", ("x",)))
    assert e.value.code == "constant_target" and "'y'" in str(e.value)
    bad = np.arange(20.0)
    bad[4] = np.inf
    with pytest.raises(InputProblem) as e:
        analyse(ArrayData(bad, np.arange(20.0)), SweepSpec("y", ("x",)))
    assert e.value.code == "infinite" and e.value.row == 5
    with pytest.raises(InputProblem) as e:
        analyse(ArrayData(np.random.default_rng(0).normal(size=(30, 60)), np.arange(30.0)),
                SweepSpec("y", tuple(f"x{j + 1}" for j in range(60)), max_order=3,
                          interactions=True))
    assert e.value.code == "too_many_terms"


# ---------------------------------------------------------------- statistics
arrays = st.integers(min_value=2, max_value=60).flatmap(
    lambda n: st.tuples(st.just(n), st.integers(0, 2 ** 31 - 1), st.integers(1, 4)))


@settings(max_examples=40, deadline=None)
@given(arrays)
def test_piece_summaries_combine_to_the_direct_ones(args):
    # numpy: mean and centred cross-products computed directly on the union
    n, seed, L = args
    rng = np.random.default_rng(seed)
    R = rng.normal(size=(n, 3)) * [1.0, 1e3, 1e-3] + [5.0, -2e4, 0.0]
    labels = rng.integers(0, L, n)
    parts = accumulate([(R[: n // 2], labels[: n // 2]), (R[n // 2:], labels[n // 2:])], L, 3)
    n_all, m_all, M_all = combine(parts, np.ones(L))
    C = R - R.mean(0)
    assert n_all == n
    np.testing.assert_allclose(m_all, R.mean(0), rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(M_all, C.T @ C, rtol=1e-9, atol=1e-6)
    nb, mb, Mb = combine_batch(parts, np.eye(L))
    for l in range(L):
        sel = labels == l
        assert nb[l] == sel.sum()
        if sel.sum():
            Cl = R[sel] - R[sel].mean(0)
            np.testing.assert_allclose(Mb[l], Cl.T @ Cl, rtol=1e-9, atol=1e-6)


@settings(max_examples=25, deadline=None)
@given(st.integers(5, 3000), st.integers(0, 1000), st.sampled_from([1, 2, 3]),
       st.booleans(), st.sampled_from([64, 8192]))
@example(205, 0, 1, False, 64)   # a chunk length below the 256-row floor, more rows than it
def test_design_summaries_equal_direct_computation(n, seed, d, inter, chunk):
    # numpy: co-moments of the explicitly built design, any chunk size
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, d)) * 10 + 100
    y = rng.normal(size=n)
    b = PolynomialBasis.fit(X, [f"x{j}" for j in range(d)], 3, inter)
    labels = rng.integers(-1, 3, n)
    U = b.scale(X)
    mom = design_moments(U, y, labels, 3, lambda Uc, out: b.expand_scaled(Uc, out=out),
                         b.n_terms, chunk_rows=chunk)
    R = np.column_stack([b.expand(X), y])
    for l in range(3):
        sel = labels == l
        if sel.sum() == 0:
            continue
        C = R[sel] - R[sel].mean(0)
        np.testing.assert_allclose(mom.comoment[l], C.T @ C, rtol=1e-9, atol=1e-9 * sel.sum())


def test_raw_map_reproduces_raw_powers():
    # numpy: raw powers and products computed directly
    rng = np.random.default_rng(3)
    X = rng.uniform([-3, 10], [5, 12], size=(50, 2))
    for inter in (False, True):
        b = PolynomialBasis.fit(X, ["a", "b"], 4, inter)
        A, a0 = b.raw_map()
        raw = np.column_stack([np.prod(X ** e, axis=1) for e in b.terms])
        # relative to each column's size (values near zero come from cancellation)
        err = np.abs(b.expand(X) @ A.T + a0 - raw) / np.abs(raw).max(axis=0)
        assert err.max() < 1e-12
    assert [list(t) for t in polynomial_terms(2, 2, True)] == [[1, 0], [0, 1], [2, 0], [1, 1], [0, 2]]
    assert PolynomialBasis.fit(X, ["a", "b"], 3, True).names(2) == ["a", "b", "a^2", "a*b", "b^2"]


# ---------------------------------------------------------------- invariants
@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.integers(0, 10_000), st.floats(0.01, 100.0), st.floats(-1e3, 1e3))
def test_scaling_and_shifting_the_target(seed, scale, shift):
    # Invariant: validation MSE scales with the square of the target's scale and ignores
    # a shift (the intercept is not penalised); the recommended cell does not change.
    rng = np.random.default_rng(seed)
    x = rng.uniform(-2, 2, 80)
    y = x - 0.4 * x ** 2 + 0.3 * rng.normal(size=80)
    spec = SweepSpec("y", ("x",), max_order=4, penalties=(0.0, 0.1, 10.0), seed=seed % 7)
    a = analyse(ArrayData(x, y), spec)
    b = analyse(ArrayData(x, y * scale + shift), spec)
    np.testing.assert_allclose(b.sweep.valid_mse, a.sweep.valid_mse * scale ** 2, rtol=1e-6,
                               atol=1e-9 * scale ** 2)
    ra, rb = a.recommendation.recommended, b.recommendation.recommended
    assert (ra.order, ra.penalty) == (rb.order, rb.penalty)


@settings(max_examples=20, deadline=None)
@given(st.integers(0, 10_000))
def test_errors_are_nonnegative_and_penalty_shrinks_effective_df(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(12, 120))
    x = rng.normal(size=n)
    y = rng.normal(size=n) + np.sin(x)
    spec = SweepSpec("y", ("x",), max_order=5, seed=1)
    a = analyse(ArrayData(x, y), spec)
    assert np.all(a.sweep.valid_mse >= 0) and np.all(a.sweep.train_mse >= 0)
    t = a.validation
    for q, g in t.groupby("order"):
        edf = g.sort_values("penalty")["effective_df"].to_numpy()
        assert np.all(np.diff(edf) <= 1e-9)
        assert edf[0] <= q + 1 + 1e-9
    rec = a.recommendation
    assert rec.recommended.validation_mse <= rec.threshold * (1 + 1e-12)
    assert rec.recommended.effective_df <= rec.best.effective_df + 1e-9


@settings(max_examples=30, deadline=None)
@given(st.lists(st.floats(allow_nan=True, allow_infinity=True, width=32), min_size=0,
                max_size=30),
       st.integers(0, 6), st.sampled_from(["kfold", "loo", "blocked", "holdout"]))
def test_any_numbers_give_a_result_or_an_input_problem(values, order, kind):
    # Bad input: the engine answers with InputProblem, never another exception.
    y = np.asarray(values, dtype=float)
    x = np.arange(y.size, dtype=float)
    try:
        analyse(ArrayData(x, y), SweepSpec("y", ("x",), max_order=order,
                                           scheme=SchemeSpec(kind, folds=3)))
    except InputProblem as e:
        assert str(e)
