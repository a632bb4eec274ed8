"""Inputs that reproduce the target: the screening statistics against scipy and
scikit-learn, and the warning on public tables with and without a planted leak.

Reference data (tests/reference/, copied from the shared reference sets):
- auto/auto.csv: Auto MPG as distributed with James, Witten, Hastie, Tibshirani,
  "An Introduction to Statistical Learning", 2nd ed. (2021);
- prostate/prostate.tsv: Stamey et al. (1989) as used in Hastie, Tibshirani,
  Friedman, "The Elements of Statistical Learning", 2nd ed., Section 3.2.1.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import LeaveOneOut, cross_val_predict

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine.checks import check_target_leakage, run_checks
from engine.leakage import (
    correlations, find_reproductions, loo_fit, pair_r2, rank_correlations,
)
from engine.loading import load_table, prepare

REF = Path(__file__).resolve().parent / "reference"
PROSTATE_INPUTS = ["lcavol", "lweight", "age", "lbph", "svi", "lcp", "gleason", "pgg45"]
AUTO_INPUTS = ["cylinders", "displacement", "horsepower", "weight", "acceleration", "year"]


@pytest.fixture(scope="module")
def auto() -> pd.DataFrame:
    return load_table(REF / "auto" / "auto.csv").frame


@pytest.fixture(scope="module")
def prostate() -> pd.DataFrame:
    return load_table(REF / "prostate" / "prostate.tsv").frame


# ---------------------------------------------------------------------------
# the screening statistics against reference libraries
# ---------------------------------------------------------------------------
def test_rank_correlations_match_scipy_spearman(auto):
    X = auto[AUTO_INPUTS].to_numpy(float)
    y = auto["mpg"].to_numpy(float)
    got = rank_correlations(X, y)
    want = [stats.spearmanr(X[:, j], y).statistic for j in range(X.shape[1])]  # scipy
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_pair_r2_matches_scikit_learn_two_input_fits(auto):
    X = auto[AUTO_INPUTS].to_numpy(float)
    y = auto["mpg"].to_numpy(float)
    r, R, ok = correlations(X, y)
    assert ok.all()
    P = pair_r2(r, R)
    for a, b in [(0, 1), (2, 3), (3, 5), (1, 4)]:
        want = LinearRegression().fit(X[:, [a, b]], y).score(X[:, [a, b]], y)  # scikit-learn
        assert P[a, b] == pytest.approx(want, abs=1e-10)
        assert P[b, a] == pytest.approx(want, abs=1e-10)
    assert np.isnan(np.diag(P)).all()


def test_loo_fit_matches_scikit_learn_leave_one_out(prostate):
    X = prostate[["lcavol", "lweight"]].to_numpy(float)
    y = prostate["lpsa"].to_numpy(float)
    r2, loo, coef = loo_fit(X, y)
    lr = LinearRegression().fit(X, y)
    pred = cross_val_predict(LinearRegression(), X, y, cv=LeaveOneOut())   # scikit-learn refits
    tss = np.sum((y - y.mean()) ** 2)
    assert r2 == pytest.approx(lr.score(X, y), abs=1e-12)
    assert loo == pytest.approx(1 - np.sum((y - pred) ** 2) / tss, abs=1e-10)
    np.testing.assert_allclose(coef, np.r_[lr.intercept_, lr.coef_], rtol=1e-10)


# ---------------------------------------------------------------------------
# planted leaks on public tables: the warning fires and names the columns
# ---------------------------------------------------------------------------
def _finding(frame: pd.DataFrame, target: str, inputs: list[str]):
    data = prepare(frame, target, inputs)
    return check_target_leakage(data, inputs, target)


def test_log_transformed_copy_of_the_target_is_named(auto):
    frame = auto.copy()
    frame["log_mpg"] = np.round(np.log(frame["mpg"]), 6)   # a stored, rounded log copy
    inputs = ["horsepower", "weight", "log_mpg", "year"]
    f, table = _finding(frame, "mpg", inputs)
    assert f is not None and f.code == "target_leakage"
    assert f.details["columns"] == ["log_mpg"]
    assert f.message.startswith("Input log_mpg reproduces the target mpg")
    assert "log of mpg = a + b * log_mpg" in f.message
    assert f.severity == "serious"                       # other inputs remain
    assert set(f.details["others"]) == {"horsepower", "weight", "year"}
    row = table.set_index("columns").loc["log_mpg"]
    assert row["kind"] == "transform" and bool(row["exact"])
    # the same relation by hand with scikit-learn: log(mpg) on log_mpg, R² ~ 1
    x = frame[["log_mpg"]].to_numpy(float)
    assert LinearRegression().fit(x, np.log(frame["mpg"])).score(x, np.log(frame["mpg"])) > 0.999999
    assert "remove it from the inputs" in f.advice


def test_target_equal_to_difference_of_two_inputs_is_named(auto):
    frame = auto.copy()
    # a derived target: weight less 10 x displacement (both inputs), stored to 0.1
    frame["derived"] = np.round(frame["weight"] - 10 * frame["displacement"], 1)
    inputs = ["horsepower", "displacement", "acceleration", "weight"]
    f, table = _finding(frame, "derived", inputs)
    assert f is not None
    assert sorted(f.details["columns"]) == ["displacement", "weight"]
    assert "Inputs displacement and weight reproduce the target derived" in f.message
    rep = f.details["reproductions"][0]
    assert rep["kind"] == "combination" and rep["exact"]
    # the fitted weights recover the identity (intercept, displacement, weight)
    np.testing.assert_allclose(rep["coefficients"], [0.0, -10.0, 1.0], atol=1e-3)
    # each input alone does not reproduce it (checked with scikit-learn)
    for c in ("weight", "displacement"):
        x = frame[[c]].to_numpy(float)
        assert LinearRegression().fit(x, frame["derived"]).score(x, frame["derived"]) < 0.99


def test_difference_of_two_inputs_without_other_inputs_is_still_named():
    # an exact identity is worth a word even when nothing else is swept
    rng = np.random.default_rng(4)
    a, b = rng.normal(50, 10, 200), rng.normal(20, 5, 200)
    data = ArrayData(np.c_[a, b], np.round(a - b, 2), ("exports", "imports"), "balance")
    f, _ = check_target_leakage(data, data.inputs, data.target)
    assert f is not None and f.severity == "caution"
    assert sorted(f.details["columns"]) == ["exports", "imports"]


def test_leak_warning_reaches_run_checks_first(auto):
    frame = auto.copy()
    frame["log_mpg"] = np.log(frame["mpg"])
    inputs = ["horsepower", "log_mpg"]
    data = prepare(frame, "mpg", inputs)
    an = analyse(data, SweepSpec("mpg", tuple(inputs), max_order=2,
                                 scheme=SchemeSpec("kfold", folds=5)))
    rep = run_checks(data, an)
    assert rep.codes()[0] == "target_leakage"
    assert len(rep.tables["leakage"]) == 1
    row = rep.tables["summary"].set_index("code").loc["target_leakage"]
    assert bool(row["fired"])


# ---------------------------------------------------------------------------
# tables without such columns stay quiet
# ---------------------------------------------------------------------------
def test_prostate_inputs_raise_no_leakage_warning(prostate):
    f, table = _finding(prostate, "lpsa", PROSTATE_INPUTS)
    assert f is None and table.empty
    # the strongest single input explains about half of lpsa (ESL Section 3.2.1:
    # lcavol is the leading predictor), nowhere near a copy
    r, _, _ = correlations(prostate[PROSTATE_INPUTS].to_numpy(float), prostate["lpsa"])
    assert 0.4 < np.max(r * r) < 0.7


def test_auto_inputs_raise_no_leakage_warning(auto):
    f, table = _finding(auto, "mpg", AUTO_INPUTS)
    assert f is None and table.empty


def test_calibration_with_its_only_input_stays_quiet():
    # demo calibration table: the probe reading is meant to reproduce the bath temperature
    frame = load_table(Path(__file__).resolve().parents[1] / "demo_data"
                       / "calibration_curve.csv").frame
    f, table = _finding(frame, "bath_temp_C", ["probe_mV"])
    assert f is None
    assert list(table["columns"]) == ["probe_mV"]        # seen, but it is the only input


def test_row_number_of_a_table_sorted_by_the_target_is_caught(prostate):
    # prostate.tsv lists the subjects by increasing lpsa, so its id column is a
    # monotone function of the target: a leak if used as an input
    f, _ = _finding(prostate, "lpsa", PROSTATE_INPUTS + ["id"])
    assert f is not None and f.details["columns"] == ["id"]
    assert stats.spearmanr(prostate["id"], prostate["lpsa"]).statistic > 0.999   # scipy
    assert f.severity == "caution"                   # found by ranks only


def test_pairs_among_many_noise_inputs_do_not_fire():
    rng = np.random.default_rng(7)
    X = rng.normal(size=(60, 150))
    y = X[:, :5] @ np.ones(5) + rng.normal(size=60)
    assert find_reproductions(X, y, [f"c{j}" for j in range(150)]) == []


@pytest.mark.parametrize("n", [60, 25_000])   # every row screened; every third row screened
def test_columns_given_one_by_one_give_the_same_findings(n):
    """A list of columns (the table's own arrays, not copied) is screened exactly as
    the same numbers in one array: copies, transforms, pairs and ranks alike."""
    rng = np.random.default_rng(11)
    X = np.asfortranarray(rng.normal(size=(n, 7)))
    y = 2 * X[:, 0] + 0.3 * X[:, 1] + rng.normal(scale=0.5, size=n)
    X[:, 3] = np.exp(y / 5) + 1e-6 * rng.normal(size=n)          # a transformed copy
    X[:, 5] = 3 * y - X[:, 6] + 1e-7 * rng.normal(size=n)        # a pair
    names = [f"c{j}" for j in range(7)]
    whole = find_reproductions(X, y, names, "y")
    one_by_one = find_reproductions([X[:, j].copy() for j in range(7)], y, names, "y")
    assert [r.columns for r in whole] == [("c5", "c6"), ("c3",)]
    assert len(one_by_one) == len(whole)
    for a, b in zip(whole, one_by_one):
        np.testing.assert_equal(a.to_dict(), b.to_dict())     # nan == nan here
