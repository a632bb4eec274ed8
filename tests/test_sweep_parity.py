"""The sweep against scikit-learn, fitted fold by fold on the same splits.

Reference library: scikit-learn (PolynomialFeatures -> StandardScaler -> Ridge,
or LinearRegression at penalty 0; ``learning_curve``).
"""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.linear_model import LinearRegression, Ridge
from sklearn.model_selection import learning_curve as sk_learning_curve
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from engine import ArrayData, SchemeSpec, SweepSpec, analyse, learning_curve

PENALTIES = (0.0, 1e-4, 1e-3, 1e-2, 0.1, 1.0, 3.0, 10.0, 100.0, 1000.0)


def _pipeline(order: int, alpha: float, interaction_powers=None):
    est = LinearRegression() if alpha == 0 else Ridge(alpha=alpha)
    if interaction_powers is None:
        return make_pipeline(PolynomialFeatures(order, include_bias=False), StandardScaler(), est)
    return make_pipeline(_PerInputPowers(order), StandardScaler(), est)


class _PerInputPowers(BaseEstimator, TransformerMixin):
    """x_j^k for every input j and power k <= order, ordered by power then input."""

    def __init__(self, order=1):
        self.order = order

    def fit(self, X, y=None):
        return self

    def transform(self, X):
        return np.hstack([X ** k for k in range(1, self.order + 1)])


@pytest.fixture(scope="module")
def one_input():
    # well-conditioned: x spread over a few units around 0.5
    rng = np.random.default_rng(11)
    n = 240
    x = rng.uniform(-1.0, 2.0, n)
    y = np.sin(2 * x) + 0.25 * rng.normal(size=n)
    return ArrayData(x, y, ("x",), "y")


def test_every_fold_matches_sklearn_orders_1_to_8(one_input):
    # scikit-learn: PolynomialFeatures -> StandardScaler -> Ridge / LinearRegression
    spec = SweepSpec("y", ("x",), orders=tuple(range(1, 9)), penalties=PENALTIES,
                     scheme=SchemeSpec("kfold", folds=5), seed=4)
    a = analyse(one_input, spec)
    X, y = one_input.X, one_input.y
    worst = 0.0
    for i, q in enumerate(range(1, 9)):
        for k, alpha in enumerate(PENALTIES):
            for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
                m = _pipeline(q, alpha).fit(X[tr], y[tr])
                ref = np.mean((m.predict(X[va]) - y[va]) ** 2)
                ref_tr = np.mean((m.predict(X[tr]) - y[tr]) ** 2)
                worst = max(worst, abs(a.sweep.valid_mse[i, k, s] - ref) / ref)
                assert a.sweep.valid_mse[i, k, s] == pytest.approx(ref, rel=1e-8)
                assert a.sweep.train_mse[i, k, s] == pytest.approx(ref_tr, rel=1e-8)
    assert worst < 1e-8


def test_coefficients_match_sklearn(one_input):
    # scikit-learn Ridge coef_ on standardised terms, and in raw units
    spec = SweepSpec("y", ("x",), orders=(3,), penalties=(0.0, 0.5), seed=1,
                     scheme=SchemeSpec("kfold", folds=4))
    a = analyse(one_input, spec)
    tr = a.plan.train_sets[2]
    X, y = one_input.X, one_input.y
    for k, alpha in enumerate((0.0, 0.5)):
        m = _pipeline(3, alpha).fit(X[tr], y[tr])
        est, sc = m[-1], m[1]
        np.testing.assert_allclose(a.sweep.coef_std[0][k, 2], est.coef_, rtol=1e-8)
        np.testing.assert_allclose(a.sweep.coef_raw[0][k, 2], est.coef_ / sc.scale_, rtol=1e-8)
        b0 = est.intercept_ - np.sum(est.coef_ * sc.mean_ / sc.scale_)
        assert a.sweep.intercept_raw[0, k, 2] == pytest.approx(b0, rel=1e-8, abs=1e-10)


def test_validation_r2_matches_sklearn_r2_score(one_input):
    # scikit-learn r2_score on each validation fold
    from sklearn.metrics import r2_score
    spec = SweepSpec("y", ("x",), orders=(2, 5), penalties=(0.0, 1.0),
                     scheme=SchemeSpec("kfold", folds=3))
    a = analyse(one_input, spec)
    X, y = one_input.X, one_input.y
    for i, q in enumerate((2, 5)):
        for k, alpha in enumerate((0.0, 1.0)):
            for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
                m = _pipeline(q, alpha).fit(X[tr], y[tr])
                assert a.sweep.valid_r2[i, k, s] == pytest.approx(r2_score(y[va], m.predict(X[va])),
                                                                  rel=1e-8)


@pytest.mark.parametrize("interactions", [False, True])
def test_several_inputs_match_sklearn(interactions):
    # scikit-learn pipelines; with interactions PolynomialFeatures gives the same terms
    rng = np.random.default_rng(5)
    n = 300
    X = rng.normal(size=(n, 3))
    y = X[:, 0] - 0.5 * X[:, 1] ** 2 + 0.3 * X[:, 0] * X[:, 2] + 0.2 * rng.normal(size=n)
    data = ArrayData(X, y, ("a", "b", "c"), "y")
    pens = (0.0, 0.01, 1.0, 50.0)
    spec = SweepSpec("y", ("a", "b", "c"), orders=(1, 2, 3), interactions=interactions,
                     penalties=pens, scheme=SchemeSpec("kfold", folds=4), seed=9)
    a = analyse(data, spec)
    for i, q in enumerate((1, 2, 3)):
        for k, alpha in enumerate(pens):
            for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
                m = _pipeline(q, alpha, None if interactions else True).fit(X[tr], y[tr])
                ref = np.mean((m.predict(X[va]) - y[va]) ** 2)
                assert a.sweep.valid_mse[i, k, s] == pytest.approx(ref, rel=1e-8)


@pytest.mark.parametrize("kind,extra", [
    ("repeated", dict(folds=3, repeats=2)),
    ("blocked", dict(folds=4, gap=7)),
    ("holdout", dict(holdout_fraction=0.3)),
])
def test_other_schemes_match_sklearn_on_their_splits(one_input, kind, extra):
    # scikit-learn pipelines refitted on the scheme's own train/validation rows
    spec = SweepSpec("y", ("x",), orders=(1, 4), penalties=(0.0, 0.1),
                     scheme=SchemeSpec(kind, **extra), seed=2)
    a = analyse(one_input, spec)
    X, y = one_input.X, one_input.y
    for i, q in enumerate((1, 4)):
        for k, alpha in enumerate((0.0, 0.1)):
            for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
                m = _pipeline(q, alpha).fit(X[tr], y[tr])
                ref = np.mean((m.predict(X[va]) - y[va]) ** 2)
                assert a.sweep.valid_mse[i, k, s] == pytest.approx(ref, rel=1e-8)


def test_grouped_and_column_schemes_match_sklearn():
    # scikit-learn pipelines on GroupKFold splits / user split labels
    rng = np.random.default_rng(8)
    n = 180
    x = rng.uniform(0, 3, n)
    y = 1 + x - 0.3 * x ** 2 + 0.2 * rng.normal(size=n)
    groups = rng.integers(0, 9, n)
    data = ArrayData(x, y, ("x",), "y", groups=groups, split=np.where(x > 2.4, "test", "train"))
    for scheme in (SchemeSpec("grouped", folds=3, group_column="g"),
                   SchemeSpec("column", split_column="s")):
        spec = SweepSpec("y", ("x",), orders=(2,), penalties=(0.0, 2.0), scheme=scheme)
        a = analyse(data, spec)
        for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
            if scheme.kind == "grouped":
                assert not set(groups[tr]) & set(groups[va])
            for k, alpha in enumerate((0.0, 2.0)):
                m = _pipeline(2, alpha).fit(data.X[tr], y[tr])
                ref = np.mean((m.predict(data.X[va]) - y[va]) ** 2)
                assert a.sweep.valid_mse[0, k, s] == pytest.approx(ref, rel=1e-8)


def test_leave_one_out_matches_refits_without_penalty(one_input):
    # numpy/scikit-learn: n explicit refits with LinearRegression
    X, y = one_input.X[:60], one_input.y[:60]
    data = ArrayData(X, y)
    spec = SweepSpec("y", ("x",), orders=(1, 3, 6), penalties=(0.0,), scheme=SchemeSpec("loo"))
    a = analyse(data, spec)
    for i, q in enumerate((1, 3, 6)):
        errs = []
        for r in range(len(y)):
            keep = np.arange(len(y)) != r
            m = _pipeline(q, 0.0).fit(X[keep], y[keep])
            errs.append((m.predict(X[r:r + 1])[0] - y[r]) ** 2)
        assert a.sweep.valid_mse[i, 0, 0] == pytest.approx(np.mean(errs), rel=1e-8)


def test_leave_one_out_with_penalty_matches_ridgecv():
    # scikit-learn RidgeCV (efficient LOO, squared errors) on features standardised on all rows
    from sklearn.linear_model import RidgeCV
    rng = np.random.default_rng(2)
    x = rng.uniform(-1, 1, 80)
    y = np.cos(3 * x) + 0.1 * rng.normal(size=80)
    data = ArrayData(x, y)
    alphas = (0.01, 0.3, 4.0)
    spec = SweepSpec("y", ("x",), orders=(4,), penalties=alphas, scheme=SchemeSpec("loo"))
    a = analyse(data, spec)
    Z = StandardScaler().fit_transform(PolynomialFeatures(4, include_bias=False).fit_transform(x[:, None]))
    r = RidgeCV(alphas=alphas, store_cv_results=True, scoring=None).fit(Z, y)
    ref = r.cv_results_.mean(axis=0)   # mean squared LOO error per alpha
    np.testing.assert_allclose(a.sweep.valid_mse[0, :, 0], ref, rtol=1e-8)


def test_learning_curve_matches_sklearn(one_input):
    # scikit-learn learning_curve on the same splits and sizes
    pens = (0.0, 0.1, 10.0)
    spec = SweepSpec("y", ("x",), orders=(1, 3, 5), penalties=pens,
                     scheme=SchemeSpec("kfold", folds=5), seed=3)
    a = analyse(one_input, spec)
    lc = learning_curve(one_input, spec, plan=a.plan)
    cv = list(zip(a.plan.train_sets, a.plan.valid_sets))
    for q in (1, 3, 5):
        for alpha in pens:
            sizes, tr, va = sk_learning_curve(_pipeline(q, alpha), one_input.X, one_input.y, cv=cv,
                                              train_sizes=spec.learning_sizes,
                                              scoring="neg_mean_squared_error")
            f = lc.folds[(lc.folds.order == q) & (lc.folds.penalty == alpha)]
            f = f.sort_values(["train_size", "fold"])
            np.testing.assert_array_equal(np.unique(f.train_size), sizes)
            np.testing.assert_allclose(f.validation_mse.to_numpy(), -va.ravel(), rtol=1e-8)
            np.testing.assert_allclose(f.train_mse.to_numpy(), -tr.ravel(), rtol=1e-8, atol=1e-14)


def test_learning_curve_table_is_the_mean_and_standard_error_of_its_splits(one_input):
    # pandas: per (order, penalty, size) the mean of the per-split errors and their standard
    # error, std (ddof=1) over the square root of the number of splits
    for scheme, folds in (("kfold", 5), ("holdout", 5)):
        spec = SweepSpec("y", ("x",), orders=(1, 3), penalties=(0.0, 0.1, 10.0),
                         scheme=SchemeSpec(scheme, folds=folds), seed=3)
        lc = learning_curve(one_input, spec)
        g = lc.folds.groupby(["order", "penalty", "train_size"])
        for col in ("train_mse", "validation_mse"):
            np.testing.assert_allclose(lc.table[col], g[col].mean().to_numpy(), rtol=1e-12)
            want = (g[col].std(ddof=1) / np.sqrt(g[col].count())).to_numpy()
            if scheme == "holdout":     # one split: no spread to measure
                assert np.isnan(lc.table[f"{col}_se"]).all() and np.isnan(want).all()
            else:
                np.testing.assert_allclose(lc.table[f"{col}_se"], want, rtol=1e-10)


def test_effective_degrees_of_freedom_is_trace_of_hat_matrix(one_input):
    # numpy: trace of the ridge hat matrix on standardised terms, +1 for the intercept
    spec = SweepSpec("y", ("x",), orders=(4,), penalties=(0.0, 0.2, 20.0),
                     scheme=SchemeSpec("kfold", folds=3))
    a = analyse(one_input, spec)
    tr = a.plan.train_sets[0]
    Z = StandardScaler().fit_transform(
        PolynomialFeatures(4, include_bias=False).fit_transform(one_input.X[tr]))
    for k, alpha in enumerate((0.0, 0.2, 20.0)):
        H = Z @ np.linalg.solve(Z.T @ Z + alpha * np.eye(4), Z.T)
        assert a.sweep.edf[0, k, 0] == pytest.approx(np.trace(H) + 1, rel=1e-9)


def test_same_spec_and_seed_give_identical_numbers(one_input):
    spec = SweepSpec("y", ("x",), max_order=5, seed=7)
    a1 = analyse(one_input, spec)
    a2 = analyse(one_input, spec)
    np.testing.assert_array_equal(a1.sweep.valid_mse, a2.sweep.valid_mse)
    assert a1.recommendation == a2.recommendation
    a3 = analyse(one_input, SweepSpec("y", ("x",), max_order=5, seed=8))
    assert not np.array_equal(a1.sweep.valid_mse, a3.sweep.valid_mse)


def test_progress_callback_reaches_one(one_input):
    seen = []
    analyse(one_input, SweepSpec("y", ("x",), max_order=3), progress=lambda f, m: seen.append(f))
    assert seen and seen[-1] == pytest.approx(1.0)
    assert all(b >= a for a, b in zip(seen, seen[1:]))


def test_large_raw_values_match_sklearn_with_a_penalty():
    # scikit-learn pipelines on inputs near 1000 (raw powers up to 1e36): the sweep works on
    # row-scaled raw terms, scikit-learn on the raw terms themselves
    rng = np.random.default_rng(21)
    x = rng.uniform(1000.0, 1040.0, 150)
    y = 0.01 * (x - 1020) ** 2 + rng.normal(size=150)
    pens = (1.0, 10.0, 100.0)
    spec = SweepSpec("y", ("x",), orders=(4, 12), penalties=pens,
                     scheme=SchemeSpec("kfold", folds=3), seed=0)
    a = analyse(ArrayData(x, y), spec)
    for i, q in enumerate((4, 12)):
        for k, alpha in enumerate(pens):
            for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
                m = _pipeline(q, alpha).fit(x[tr, None], y[tr])
                ref = np.mean((m.predict(x[va, None]) - y[va]) ** 2)
                assert a.sweep.valid_mse[i, k, s] == pytest.approx(ref, rel=1e-6)


def test_raw_powers_too_large_for_doubles_are_refused():
    from engine import InputProblem, fit_final
    x = np.linspace(1e12, 1e12 + 5, 40)
    y = np.sin(x - 1e12)
    with pytest.raises(InputProblem) as e:
        analyse(ArrayData(x, y), SweepSpec("y", ("x",), max_order=30))
    assert e.value.code == "values_too_large" and "Rescale" in str(e.value)
    with pytest.raises(InputProblem):
        fit_final(x, y, ("x",), 30)
