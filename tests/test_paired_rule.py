"""The paired selection rule: standard errors of per-split differences, checked by hand.

Outside references:
- Hastie, Tibshirani, Friedman, The Elements of Statistical Learning, 2nd ed.,
  Table 3.3 (prostate data, tests/reference/prostate/prostate.tsv).
- scikit-learn pipelines refitted on the same folds (by-hand paired differences).
- Nadeau and Bengio, "Inference for the generalization error", Machine
  Learning 52 (2003): corrected variance (1/J + n_validation/n_training) s^2.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression, Ridge
from sklearn.model_selection import KFold, RepeatedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine.analysis import fit_cell
from engine.recommend import SplitErrors, nadeau_bengio_variance, paired_differences, recommend

REF = Path(__file__).parent / "reference"
PROSTATE_INPUTS = ["lcavol", "lweight", "age", "lbph", "svi", "lcp", "gleason", "pgg45"]


@pytest.fixture(scope="module")
def prostate():
    d = pd.read_csv(REF / "prostate" / "prostate.tsv", sep="\t")
    return d[d["train"] == "T"], d[d["train"] == "F"], d


def _pipe(order: int, alpha: float):
    return make_pipeline(PolynomialFeatures(order, include_bias=False), StandardScaler(),
                         Ridge(alpha=alpha) if alpha > 0 else LinearRegression())


# ---------------------------------------------------------------------------
# ESL prostate
# ---------------------------------------------------------------------------
def test_prostate_least_squares_matches_esl_table_3_3(prostate):
    train, test, whole = prostate
    # ESL Table 3.3 (2nd ed.): least-squares coefficients on standardised inputs and
    # the test error of least squares. Measured here: the table's numbers come from
    # inputs standardised over all 97 rows with the sample SD (ddof 1).
    book = [2.465, 0.680, 0.263, -0.141, 0.210, 0.305, -0.288, -0.021, 0.267]
    Xall = whole[PROSTATE_INPUTS].to_numpy(float)
    m, s = Xall.mean(axis=0), Xall.std(axis=0, ddof=1)
    Z = (train[PROSTATE_INPUTS].to_numpy(float) - m) / s
    y = train["lpsa"].to_numpy(float)
    spec = SweepSpec("lpsa", tuple(PROSTATE_INPUTS), max_order=1, penalties=(0.0,))
    model = fit_cell(ArrayData(Z, y, tuple(PROSTATE_INPUTS), "lpsa"), spec, 1, 0.0)
    np.testing.assert_array_equal(np.round(model.coefficients, 3), book)
    raw = fit_cell(ArrayData(train[PROSTATE_INPUTS].to_numpy(float), y,
                             tuple(PROSTATE_INPUTS), "lpsa"), spec, 1, 0.0)
    pred = raw.predict(test[PROSTATE_INPUTS].to_numpy(float))
    test_error = float(np.mean((pred - test["lpsa"].to_numpy(float)) ** 2))
    assert round(test_error, 3) == 0.521          # ESL Table 3.3, "Test Error" of LS


def _prostate_pick_errors(train, test, rule: str) -> list[float]:
    Xtr = train[PROSTATE_INPUTS].to_numpy(float)
    ytr = train["lpsa"].to_numpy(float)
    Xte = test[PROSTATE_INPUTS].to_numpy(float)
    yte = test["lpsa"].to_numpy(float)
    data = ArrayData(Xtr, ytr, tuple(PROSTATE_INPUTS), "lpsa")
    out = []
    for seed in range(10):
        spec = SweepSpec("lpsa", tuple(PROSTATE_INPUTS), max_order=1,
                         scheme=SchemeSpec("kfold", folds=10), seed=seed, rule=rule)
        r = analyse(data, spec).recommendation.recommended
        model = fit_cell(data, spec, r.order, r.penalty)
        out.append(float(np.mean((model.predict(Xte) - yte) ** 2)))
    return out


def test_prostate_ridge_picked_by_paired_rule_matches_esl(prostate):
    train, test, _ = prostate
    errors = _prostate_pick_errors(train, test, "paired")
    # ESL Table 3.3: ridge chosen by 10-fold CV (one-standard-error rule) has test
    # error 0.492; over fold seeds 0-9 the median pick must come within 0.02.
    assert abs(np.median(errors) - 0.492) <= 0.02, errors


def test_prostate_unpaired_rule_picks_a_heavier_penalty(prostate):
    train, test, _ = prostate
    paired = np.median(_prostate_pick_errors(train, test, "paired"))
    unpaired = np.median(_prostate_pick_errors(train, test, "unpaired"))
    # by hand with scikit-learn (measured for this project, not published): 0.507
    # paired and 0.528 unpaired; the unpaired rule over-penalises on these 67 rows
    assert unpaired > paired + 0.01


def test_paired_se_matches_by_hand_sklearn_fold_fits(prostate):
    train, _, _ = prostate
    X = train[PROSTATE_INPUTS].to_numpy(float)
    y = train["lpsa"].to_numpy(float)
    pens = (0.0, 0.1, 1.0, 3.0, 10.0, 30.0, 100.0)
    spec = SweepSpec("lpsa", tuple(PROSTATE_INPUTS), orders=(1,), penalties=pens,
                     scheme=SchemeSpec("kfold", folds=10), seed=3)
    a = analyse(ArrayData(X, y, tuple(PROSTATE_INPUTS), "lpsa"), spec)
    # by hand: scikit-learn refits on the same folds (KFold(shuffle=True, seed))
    E = np.zeros((len(pens), 10))
    for f, (tr, va) in enumerate(KFold(10, shuffle=True, random_state=3).split(X)):
        for k, al in enumerate(pens):
            m = _pipe(1, al).fit(X[tr], y[tr])
            E[k, f] = np.mean((m.predict(X[va]) - y[va]) ** 2)
    b = int(np.argmin(E.mean(axis=1)))
    D = E - E[b]
    se = D.std(axis=1, ddof=1) / np.sqrt(10)
    t = a.validation
    np.testing.assert_allclose(t["paired_difference"], D.mean(axis=1), rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(t["paired_difference_se"], se, rtol=1e-7, atol=1e-10)
    rec = a.recommendation
    # the rule by hand: simplest (largest penalty here, one order) with mean diff <= its SE
    ok = D.mean(axis=1) <= se + 1e-12
    assert rec.recommended.penalty == max(np.asarray(pens)[ok])
    assert rec.rule_name == "paired" and "paired" in rec.rule
    assert rec.recommended.paired_difference_se == pytest.approx(se[pens.index(
        rec.recommended.penalty)], rel=1e-7, abs=1e-12)


# ---------------------------------------------------------------------------
# Nadeau-Bengio
# ---------------------------------------------------------------------------
def test_nadeau_bengio_against_the_formula():
    # Nadeau and Bengio (2003), corrected resampled t: (1/J + n2/n1) * S^2
    d = np.array([1.0, 2.0, 3.0, 4.0])
    assert nadeau_bengio_variance(d, n_train=90, n_valid=10) == pytest.approx(
        (1 / 4 + 10 / 90) * (5.0 / 3.0), rel=1e-14)


def test_repeated_kfold_uses_nadeau_bengio_on_sklearn_fold_errors():
    rng = np.random.default_rng(5)
    n = 60
    x = rng.uniform(-1, 1, n)
    y = 1 + x - 2 * x ** 2 + rng.normal(0, 0.4, n)
    k, r = 5, 3
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3), penalties=(0.0,),
                     scheme=SchemeSpec("repeated", folds=k, repeats=r), seed=11)
    a = analyse(ArrayData(x, y), spec)
    X = x[:, None]
    E = np.zeros((3, k * r))
    ntr, nva = [], []
    for s, (tr, va) in enumerate(RepeatedKFold(n_splits=k, n_repeats=r,
                                               random_state=11).split(X)):
        ntr.append(len(tr))
        nva.append(len(va))
        for i, q in enumerate((1, 2, 3)):
            m = _pipe(q, 0.0).fit(X[tr], y[tr])
            E[i, s] = np.mean((m.predict(X[va]) - y[va]) ** 2)
    b = int(np.argmin(E.mean(axis=1)))
    D = E - E[b]
    var = (1 / (k * r) + np.mean(nva) / np.mean(ntr)) * D.var(axis=1, ddof=1)
    np.testing.assert_allclose(a.validation["paired_difference_se"], np.sqrt(var),
                               rtol=1e-7, atol=1e-12)
    assert "Nadeau-Bengio" in a.recommendation.se_method


# ---------------------------------------------------------------------------
# one split and leave-one-out: per-row differences
# ---------------------------------------------------------------------------
def test_holdout_se_from_per_row_differences_matches_sklearn():
    rng = np.random.default_rng(2)
    n = 120
    x = np.sort(rng.uniform(0, 3, n))
    y = np.sin(x) + rng.normal(0, 0.2, n)
    pens = (0.0, 0.01, 1.0)
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3), penalties=pens,
                     scheme=SchemeSpec("holdout", holdout_fraction=0.25))
    a = analyse(ArrayData(x, y), spec)
    tr, va = np.arange(90), np.arange(90, 120)
    X = x[:, None]
    Z = np.array([(_pipe(q, al).fit(X[tr], y[tr]).predict(X[va]) - y[va]) ** 2
                  for q in (1, 2, 3) for al in pens])        # (cells, rows)
    b = int(np.argmin(Z.mean(axis=1)))
    D = Z - Z[b]
    t = a.validation
    np.testing.assert_allclose(t["paired_difference"], D.mean(axis=1), rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(t["paired_difference_se"], D.std(axis=1, ddof=1) / np.sqrt(30),
                               rtol=1e-6, atol=1e-10)
    # never "± 0": the table's own SE is that of the mean over the 30 rows
    np.testing.assert_allclose(t["validation_mse_se"], Z.std(axis=1, ddof=1) / np.sqrt(30),
                               rtol=1e-7)
    assert (t["validation_mse_se"] > 0).all()
    assert "per-row" in a.recommendation.se_method


def test_leave_one_out_se_from_per_row_differences_matches_refits():
    rng = np.random.default_rng(4)
    n = 40
    x = rng.uniform(-1, 1, n)
    y = x ** 2 + rng.normal(0, 0.3, n)
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3), penalties=(0.0,), scheme=SchemeSpec("loo"))
    a = analyse(ArrayData(x, y), spec)
    X = x[:, None]
    Z = np.zeros((3, n))
    for i in range(n):
        keep = np.arange(n) != i
        for j, q in enumerate((1, 2, 3)):
            m = _pipe(q, 0.0).fit(X[keep], y[keep])
            Z[j, i] = (m.predict(X[i:i + 1])[0] - y[i]) ** 2
    b = int(np.argmin(Z.mean(axis=1)))
    D = Z - Z[b]
    np.testing.assert_allclose(a.validation["paired_difference_se"],
                               D.std(axis=1, ddof=1) / np.sqrt(n), rtol=1e-6, atol=1e-12)


# ---------------------------------------------------------------------------
# the rule itself
# ---------------------------------------------------------------------------
def _table(mse, edf, order, penalty):
    n = len(mse)
    return pd.DataFrame({"order": order, "penalty": penalty, "parameters": np.array(order) + 1,
                         "effective_df": edf, "train_mse": np.zeros(n),
                         "validation_mse": mse, "validation_mse_se": np.full(n, 1.0),
                         "validation_r2": np.zeros(n)})


def test_steady_gain_is_kept_by_paired_rule_and_lost_by_unpaired():
    # a complex cell beats a simple one by 1.0 on every split, while split errors
    # swing by +-10 together: the paired differences see the steady gain
    swing = np.array([-10.0, 0.0, 10.0, -5.0, 5.0])
    E = np.vstack([20 + swing + 1.0, 20 + swing])          # simple, complex
    t = _table(E.mean(axis=1), [2.0, 5.0], [1, 4], [0.0, 0.0])
    t["validation_mse_se"] = E.std(axis=1, ddof=1) / np.sqrt(5)
    paired = recommend(t, E, 100.0, rule="paired")
    unpaired = recommend(t, E, 100.0, rule="unpaired")
    assert paired.recommended.order == 4
    assert paired.recommended.paired_difference == 0.0
    assert unpaired.recommended.order == 1
    assert paired.rule_name == "paired" and unpaired.rule_name == "unpaired"
    assert paired.near_best.tolist() == [False, True]


def test_ties_go_to_larger_penalty_then_lower_order_and_extra_key_columns_pass():
    E = np.array([[1.0, 1.0], [1.0, 1.0], [1.0, 1.0]])
    t = _table([1.0, 1.0, 1.0], [2.0, 2.0, 2.0], [2, 1, 1], [1.0, 1.0, 0.5])
    t["family"] = ["ridge", "ridge", "lasso"]
    r = recommend(t, SplitErrors.of(E), 10.0)
    assert (r.recommended.order, r.recommended.penalty) == (1, 1.0)


def test_misaligned_errors_are_refused():
    from engine.errors import InputProblem
    t = _table([1.0, 2.0], [1.0, 2.0], [1, 2], [0.0, 0.0])
    with pytest.raises(InputProblem, match="aligned"):
        recommend(t, np.ones((3, 2)), 10.0)


def test_paired_differences_of_best_are_zero():
    E = np.array([[3.0, 4.0, 5.0], [1.0, 2.0, 4.0]])
    mean, se, _ = paired_differences(SplitErrors.of(E), 1)
    assert mean.tolist() == [5 / 3, 0.0] and se[1] == 0.0
    assert se[0] == pytest.approx(np.std([2.0, 2.0, 1.0], ddof=1) / np.sqrt(3))


def test_rule_is_recorded_and_older_records_keep_the_unpaired_rule():
    spec = SweepSpec("y", ("x",), rule="unpaired")
    assert SweepSpec.from_dict(spec.to_dict()).rule == "unpaired"
    assert SweepSpec.from_dict(SweepSpec("y", ("x",)).to_dict()).rule == "paired"
    old = SweepSpec("y", ("x",)).to_dict()
    del old["rule"]                      # a record written before the rule was recorded
    assert SweepSpec.from_dict(old).rule == "unpaired"
    from engine.errors import InputProblem
    with pytest.raises(InputProblem, match="selection rule"):
        SweepSpec("y", ("x",), rule="lowest").validate()


def test_lagged_holdout_gets_per_row_standard_errors():
    from engine.lagged import LagSpec
    rng = np.random.default_rng(8)
    n = 150
    x = np.cumsum(rng.normal(size=n))
    y = 0.5 * x + rng.normal(size=n)
    a = analyse(ArrayData(x, y, ("x",), "y"),
                SweepSpec("y", ("x",), max_order=2, scheme=SchemeSpec("holdout"),
                          lags=LagSpec(depths=(0, 2))))
    t = a.validation
    # the per-row sums reproduce each cell's holdout error, and no cell reads "± 0"
    np.testing.assert_allclose(a.sweep.row_sum / a.sweep.row_count, t["validation_mse"],
                               rtol=1e-8)
    assert (t["validation_mse_se"] > 0).all()
    assert "per-row" in a.recommendation.se_method
