"""Checks against published reference values and facts of the trade."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from engine import ArrayData, SchemeSpec, SweepSpec, analyse, fit_final

REF = Path(__file__).parent / "reference"


def test_auto_loocv_matches_published_values():
    # Published: James, Witten, Hastie, Tibshirani, "An Introduction to Statistical
    # Learning", 2nd ed. (2021), Section 5.3.2: LOOCV MSE of mpg ~ poly(horsepower, d).
    auto = pd.read_csv(REF / "auto" / "auto.csv")
    data = ArrayData(auto[["horsepower"]].to_numpy(float), auto["mpg"].to_numpy(float),
                     ("horsepower",), "mpg")
    spec = SweepSpec("mpg", ("horsepower",), orders=(1, 2, 3, 4, 5), penalties=(0.0,),
                     scheme=SchemeSpec("loo"))
    a = analyse(data, spec)
    published = [24.23151, 19.24821, 19.33498, 19.42443, 19.03321]
    got = a.sweep.valid_mse[:, 0, 0]
    np.testing.assert_array_equal(np.round(got, 5), published)


def _lre(est: np.ndarray, cert: np.ndarray) -> np.ndarray:
    """Log relative error, as used with the NIST StRD (capped at 15)."""
    err = np.abs(est - cert)
    with np.errstate(divide="ignore"):
        lre = np.where(cert != 0, -np.log10(err / np.abs(cert)), -np.log10(err))
    return np.minimum(lre, 15.0)


CERT = json.loads((REF / "nist" / "certified.json").read_text())


@pytest.mark.parametrize("name", sorted(CERT))
def test_final_fit_reproduces_nist_certified_coefficients(name):
    # Published: NIST Statistical Reference Datasets (StRD), linear regression,
    # certified coefficients; score = log relative error (LRE), required >= 10 (every
    # coefficient agrees with the certified value to at least 10 significant digits).
    c = CERT[name]
    d = pd.read_csv(REF / "nist" / f"{name}.csv")
    cols = [k for k in d.columns if k != "y"]
    order = c["polynomial_degree"] or 1
    m = fit_final(d[cols].to_numpy(float), d["y"].to_numpy(float), cols, order)
    cert = np.array(c["certified_coefficients"])
    assert len(m.coefficients) == len(cert)
    lre = _lre(m.coefficients, cert)
    assert lre.min() >= 10.0, f"{name}: LRE {np.round(lre, 1)}"


def test_nist_residual_sd_and_r2():
    # NIST StRD certified residual standard deviation and R-squared (Norris, Pontius, Longley)
    for name in ("Norris", "Pontius", "Longley"):
        c = CERT[name]
        d = pd.read_csv(REF / "nist" / f"{name}.csv")
        cols = [k for k in d.columns if k != "y"]
        m = fit_final(d[cols].to_numpy(float), d["y"].to_numpy(float), cols,
                      c["polynomial_degree"] or 1)
        assert m.residual_sd == pytest.approx(c["certified_residual_standard_deviation"], rel=1e-7)
        assert m.r2 == pytest.approx(c["certified_r_squared"], rel=1e-9)


def test_final_fit_with_penalty_matches_sklearn_ridge():
    # scikit-learn: PolynomialFeatures -> StandardScaler -> Ridge on all rows
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures, StandardScaler
    rng = np.random.default_rng(1)
    x = rng.uniform(0, 4, 90)
    y = np.exp(-x) + 0.05 * rng.normal(size=90)
    m = fit_final(x[:, None], y, ("x",), 5, penalty=0.7)
    ref = make_pipeline(PolynomialFeatures(5, include_bias=False), StandardScaler(),
                        Ridge(alpha=0.7)).fit(x[:, None], y)
    np.testing.assert_allclose(m.std_coefficients, ref[-1].coef_, rtol=1e-8)
    grid = np.linspace(-1, 5, 13)[:, None]
    np.testing.assert_allclose(m.predict(grid), ref.predict(grid), rtol=1e-9, atol=1e-9)


def test_condition_number_matches_numpy():
    # numpy.linalg.cond of the centred, standardised raw-power design
    rng = np.random.default_rng(4)
    x = rng.uniform(1, 3, 50)
    m = fit_final(x[:, None], x ** 2 + rng.normal(size=50), ("x",), 4)
    Z = np.column_stack([x ** k for k in range(1, 5)])
    Z = (Z - Z.mean(0)) / Z.std(0)
    assert m.condition_number == pytest.approx(np.linalg.cond(Z), rel=1e-6)


def test_n_distinct_points_with_order_n_minus_1_interpolate():
    # Common practice: a polynomial of degree n-1 passes through n distinct points.
    rng = np.random.default_rng(6)
    n = 9
    x = np.linspace(-2, 3, n) + rng.uniform(-0.1, 0.1, n)   # distinct, well spread
    y = rng.normal(size=n)
    data = ArrayData(x, y)
    # the holdout keeps the first n-1 rows for training: order n-2 must interpolate them
    spec = SweepSpec("y", ("x",), orders=(n - 2,), penalties=(0.0,),
                     scheme=SchemeSpec("holdout", holdout_fraction=0.1))
    m = fit_final(x[:, None], y, ("x",), n - 1)
    assert m.train_mse < 1e-20 * np.var(y) + 1e-24
    a = analyse(data, SweepSpec("y", ("x",), orders=(n - 2,), penalties=(0.0,),
                                scheme=SchemeSpec("loo")))
    assert a.sweep.train_mse[0, 0, 0] > 0  # LOO reports the all-rows fit, which cannot interpolate
    a2 = analyse(data, spec)
    assert a2.plan.train_sets[0].size == n - 1
    # the sweep works from cross-product matrices, so "zero" is relative to their precision
    assert a2.sweep.train_mse[0, 0, 0] < 1e-12 * np.var(y)


def test_unrelated_input_gives_flat_fit_and_simple_recommendation():
    # Common practice: an input drawn independently of the target has slope ~ 0 and the
    # one-standard-error rule picks the intercept-only model or a heavy penalty.
    rng = np.random.default_rng(12)
    n = 5000
    x = rng.normal(size=n)
    y = 3.0 + rng.normal(size=n)
    data = ArrayData(x, y)
    spec = SweepSpec("y", ("x",), max_order=5, scheme=SchemeSpec("kfold", folds=5), seed=0)
    a = analyse(data, spec)
    slope = fit_final(x[:, None], y, ("x",), 1).coefficients[1]
    assert abs(slope) < 4 / np.sqrt(n)   # ~ 4 standard errors of the slope
    rec = a.recommendation.recommended
    assert rec.order == 0 or rec.effective_df < 1.5
