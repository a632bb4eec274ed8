"""Nested cross-validation and selection stability."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from engine import ArrayData, InputProblem, SchemeSpec, SweepSpec, analyse, default_penalties
from engine.trust import (
    moving_block_rows, nested_cv, outer_splits, selection_stability, subset,
)

NOISE_SD = 0.5


@pytest.fixture(scope="module")
def table_1000():
    """1,000 independent rows of a well-specified quadratic in two inputs."""
    rng = np.random.default_rng(7)
    n = 1000
    X = rng.uniform(-2, 2, size=(n, 2))
    y = 1 + 2 * X[:, 0] - 0.5 * X[:, 0] ** 2 + 0.8 * X[:, 1] + rng.normal(scale=NOISE_SD, size=n)
    return ArrayData(X, y, ("a", "b"), "y")


def _spec(kind="kfold", **kw):
    # a given penalty grid, so every pick can be checked against it
    return SweepSpec("y", ("a", "b"), max_order=4, scheme=SchemeSpec(kind, **kw),
                     penalties=default_penalties())


def _in_grid(spec, orders, penalties):
    grid_pen = np.asarray(spec.penalties)
    for q, a in zip(orders, penalties):
        assert int(q) in spec.order_list()
        assert np.isclose(grid_pen, a, rtol=1e-12, atol=0).any()


# ---------------------------------------------------------------------------
# nested cross-validation
# ---------------------------------------------------------------------------
def test_nested_cv_on_a_well_specified_model(table_1000):
    spec = _spec()
    res = nested_cv(table_1000, spec, outer_folds=5)
    pf = res.per_fold
    assert list(pf["fold"]) == [1, 2, 3, 4, 5]
    assert (pf["train_rows"] + pf["test_rows"] == 1000).all()
    assert pf["test_rows"].sum() == 1000
    _in_grid(spec, pf["order"], pf["penalty"])
    assert (pf["order"] >= 2).all()                       # the quadratic is needed
    assert res.outer_mse > 0 and res.outer_se > 0
    # the true noise variance is 0.25; both estimates should be near it
    assert res.outer_mse == pytest.approx(NOISE_SD ** 2, rel=0.15)
    assert res.outer_mse == pytest.approx(res.inner_mse, rel=0.1)
    assert res.inner_mse == pytest.approx(analyse(table_1000, spec).recommendation
                                          .recommended.validation_mse)
    assert res.per_fold["outer_mse"].mean() == pytest.approx(res.outer_mse)
    assert res.notes


def test_nested_cv_reuses_a_given_analysis(table_1000):
    spec = _spec("blocked", gap=10)
    an = analyse(table_1000, spec)
    res = nested_cv(table_1000, spec, outer_folds=4, analysis=an)
    assert res.inner_mse == an.recommendation.recommended.validation_mse
    assert len(res.per_fold) == 4
    # 10 rows dropped on each side of interior blocks, one side for the end blocks
    assert list(res.per_fold["train_rows"]) == [740, 730, 730, 740]


def test_outer_splits_follow_the_scheme_family(table_1000):
    n = 1000
    sp, desc = outer_splits(table_1000, _spec("kfold"), 5)
    assert "Shuffled" in desc
    allte = np.sort(np.concatenate([te for _, te in sp]))
    np.testing.assert_array_equal(allte, np.arange(n))
    for tr, te in sp:
        assert np.intersect1d(tr, te).size == 0
    # contiguous blocks with the gap removed from training
    sp, _ = outer_splits(table_1000, _spec("blocked", gap=7), 5)
    for tr, te in sp:
        assert np.all(np.diff(te) == 1)
        assert not np.any((tr >= te[0] - 7) & (tr <= te[-1] + 7))
    sp, _ = outer_splits(table_1000, _spec("holdout"), 4)
    assert [te[0] for _, te in sp] == [0, 250, 500, 750]
    # grouped: no group on both sides
    groups = np.repeat(np.arange(20), 50)
    gdata = replace(table_1000, groups=groups)
    sp, _ = outer_splits(gdata, _spec("grouped", group_column="g"), 5)
    for tr, te in sp:
        assert not set(groups[tr]) & set(groups[te])


@pytest.mark.parametrize("shuffle", [True, False])
def test_kfold_splits_equal_scikit_learns_kfold(shuffle):
    # reference: scikit-learn's KFold(k, shuffle, random_state=seed), folds in its order,
    # with its train and test rows sorted (as outer_splits returns them)
    from sklearn.model_selection import KFold

    from engine.trust import _kfold_splits

    for n in (4, 5, 9, 10, 11, 37, 100, 101, 1003):
        for k in (2, 3, 4, 5, 7, 10):
            if k > n:
                continue
            for seed in ((0, 1, 7, 42, 12345, 2**31 - 1) if shuffle else (None,)):
                ref = KFold(k, shuffle=shuffle, random_state=seed).split(np.arange(n))
                got = _kfold_splits(n, k, seed)
                assert len(got) == k
                for (tr, te), (rtr, rte) in zip(got, ref):
                    np.testing.assert_array_equal(tr, np.sort(rtr))
                    np.testing.assert_array_equal(te, np.sort(rte))
                    assert tr.dtype == rtr.dtype and te.dtype == rte.dtype


def test_outer_splits_of_shuffled_and_blocked_schemes_equal_scikit_learns(table_1000):
    # reference: scikit-learn's KFold (shuffled with the spec's seed; unshuffled for blocks)
    from sklearn.model_selection import KFold

    for seed in (0, 3):
        spec = replace(_spec("kfold"), seed=seed)
        sp, _ = outer_splits(table_1000, spec, 5)
        ref = list(KFold(5, shuffle=True, random_state=seed).split(np.arange(1000)))
        for (tr, te), (rtr, rte) in zip(sp, ref, strict=True):
            np.testing.assert_array_equal(tr, np.sort(rtr))
            np.testing.assert_array_equal(te, np.sort(rte))
    sp, _ = outer_splits(table_1000, _spec("blocked", gap=7), 3)
    ref = list(KFold(3).split(np.arange(1000)))
    for (_, te), (_, rte) in zip(sp, ref, strict=True):
        np.testing.assert_array_equal(te, rte)


def test_nested_cv_grouped_and_split_column(table_1000):
    groups = np.repeat(np.arange(20), 50)
    gdata = replace(table_1000, groups=groups)
    res = nested_cv(gdata, _spec("grouped", folds=4, group_column="g"), outer_folds=5)
    assert len(res.per_fold) == 5 and res.outer_mse > 0
    labels = np.repeat(["p", "q", "r", "s", "t"], 200)
    cdata = replace(table_1000, split=labels)
    res = nested_cv(cdata, _spec("column", split_column="fold"), outer_folds=5)
    assert len(res.per_fold) == 5
    tt = replace(table_1000, split=np.where(np.arange(1000) < 800, "train", "test"))
    with pytest.raises(InputProblem, match="single train/test split"):
        nested_cv(tt, _spec("column", split_column="fold"))


def test_nested_cv_names_the_outer_fold_when_an_inner_sweep_fails():
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 1, 12)
    data = ArrayData(x, x + rng.normal(scale=0.1, size=12), ("x",), "y")
    spec = SweepSpec("y", ("x",), max_order=2, scheme=SchemeSpec("kfold", folds=10))
    with pytest.raises(InputProblem, match="Outer fold 1 of"):
        nested_cv(data, spec, outer_folds=5)


# ---------------------------------------------------------------------------
# selection stability
# ---------------------------------------------------------------------------
def _check_stability(res, spec, resamples):
    t = res.table
    assert list(t.columns[:5]) == ["order", "penalty", "model", "count", "share"]
    assert t["share"].sum() == pytest.approx(1.0)
    assert t["count"].sum() == resamples
    assert t["count"].is_monotonic_decreasing
    assert len(res.chosen) == resamples
    _in_grid(spec, t["order"], t["penalty"])
    # the table is the tally of the per-resample choices
    tally = res.chosen.groupby(["order", "penalty"]).size()
    for _, row in t.iterrows():
        assert tally[(row["order"], row["penalty"])] == row["count"]


def test_stability_repeated_shuffles(table_1000):
    spec = _spec()
    res = selection_stability(table_1000, spec, resamples=12, method="repeated", seed=3)
    _check_stability(res, spec, 12)
    assert res.method == "repeated"
    again = selection_stability(table_1000, spec, resamples=12, method="repeated", seed=3)
    pd.testing.assert_frame_equal(res.chosen, again.chosen)
    # the first repetition with the spec's own seed is the sweep itself
    first = selection_stability(table_1000, spec, resamples=1, seed=spec.seed)
    rec = analyse(table_1000, spec).recommendation.recommended
    assert (first.chosen.iloc[0]["order"], first.chosen.iloc[0]["penalty"]) == (rec.order, rec.penalty)


def test_stability_bootstrap_kinds(table_1000):
    spec = _spec()
    res = selection_stability(table_1000, spec, resamples=10, method="bootstrap", seed=1)
    _check_stability(res, spec, 10)
    assert res.method == "bootstrap"
    assert (res.chosen["rows"] == 1000).all()
    ordered = replace(table_1000, order=np.arange(1000.0))
    bspec = _spec("blocked", gap=5)
    res = selection_stability(ordered, bspec, resamples=8, method="bootstrap", seed=1)
    _check_stability(res, bspec, 8)
    assert res.method == "block bootstrap"
    gspec = _spec("grouped", folds=4, group_column="g")
    gdata = replace(table_1000, groups=np.repeat(np.arange(20), 50))
    res = selection_stability(gdata, gspec, resamples=6, method="bootstrap", seed=1)
    _check_stability(res, gspec, 6)
    assert res.method == "group bootstrap"


def test_stability_repeated_on_a_scheme_without_shuffle_switches_to_bootstrap(table_1000):
    spec = _spec("holdout")
    res = selection_stability(table_1000, spec, resamples=5, method="repeated", seed=0)
    _check_stability(res, spec, 5)
    assert res.method == "block bootstrap"
    assert any("no random shuffle" in n for n in res.notes)


def test_stability_rejects_unknown_method(table_1000):
    with pytest.raises(InputProblem):
        selection_stability(table_1000, _spec(), resamples=2, method="jackknife")


def test_moving_block_rows():
    rng = np.random.default_rng(0)
    rows = moving_block_rows(103, 10, rng)
    assert rows.size == 103
    assert rows.min() >= 0 and rows.max() < 103
    # blocks of 10 consecutive rows, in order of their start
    blocks = rows[:100].reshape(10, 10)
    assert np.all(np.diff(blocks, axis=1) == 1)
    assert np.all(np.diff(blocks[:, 0]) >= 0)


def test_subset_keeps_labels(table_1000):
    d = replace(table_1000, groups=np.arange(1000) % 7, order=np.arange(1000.0))
    s = subset(d, np.array([5, 3, 3]))
    np.testing.assert_array_equal(s.groups, [5, 3, 3])
    np.testing.assert_array_equal(s.order, [5.0, 3.0, 3.0])
    np.testing.assert_array_equal(s.y, table_1000.y[[5, 3, 3]])
    assert s.inputs == ("a", "b")


def test_stability_with_a_data_fitted_range_keeps_one_starting_grid(table_1000):
    spec = SweepSpec("y", ("a", "b"), max_order=2, scheme=SchemeSpec("kfold"))
    res = selection_stability(table_1000, spec, resamples=3)
    from engine.analysis import data_grid
    grid = np.asarray(data_grid(table_1000, spec))
    # the picks come from the grid fitted to all rows (widening adds values beyond it)
    inside = res.chosen["penalty"].map(lambda a: np.isclose(grid, a, rtol=1e-12).any()
                                       or a > grid.max() or 0 < a < grid[grid > 0].min())
    assert inside.all()
