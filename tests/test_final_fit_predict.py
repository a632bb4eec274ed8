"""Predictions of a fitted model, block by block, against outside evaluations of the same
polynomial."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from sklearn.preprocessing import PolynomialFeatures

from engine.final_fit import _PREDICT_BLOCK, fit_final

CASES = [  # inputs, order, interactions, penalty, family
    (1, 5, False, 0.0, "ridge"),
    (3, 3, True, 0.0, "ridge"),
    (4, 4, False, 0.5, "ridge"),
    (3, 2, True, 0.01, "lasso"),
]


def _model(d: int, order: int, interactions: bool, penalty: float, family: str, seed: int = 4):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-2, 3, size=(400, d)) * np.arange(1, d + 1) + np.arange(d) * 5.0
    y = np.sin(X[:, 0]) + X[:, -1] * 0.3 + (X[:, 0] * X[:, -1] if d > 1 else 0) * 0.01 \
        + rng.normal(0, 0.1, 400)
    names = tuple(f"x{j}" for j in range(d))
    return fit_final(X, y, names, order, penalty, interactions, family=family), X


def _query(model, X_fit: np.ndarray, n: int, seed: int = 5) -> np.ndarray:
    """``n`` rows spread a little past the training range of each input."""
    rng = np.random.default_rng(seed)
    lo, hi = X_fit.min(axis=0), X_fit.max(axis=0)
    return lo + (hi - lo) * rng.uniform(-0.2, 1.2, size=(n, X_fit.shape[1]))


def _term_by_term(model, X: np.ndarray) -> np.ndarray:
    """The scaled-monomial sum evaluated one term at a time on all rows: the intercept,
    then each coefficient times its term (product of powers, inputs in order) added in
    the order of the terms."""
    U = (X - model.centre) / model.half_range
    out = np.full(X.shape[0], model.scaled_intercept)
    for e, b in zip(model.exponents, model.scaled_coefficients):
        term = None
        for j in np.flatnonzero(e):
            p = U[:, j]
            for _ in range(int(e[j]) - 1):
                p = p * U[:, j]
            term = p if term is None else term * p
        out += b * term
    return out


@pytest.mark.parametrize("d,order,interactions,penalty,family", CASES)
def test_predict_matches_scikit_learn_polynomial_features(d, order, interactions, penalty,
                                                          family):
    # Reference: scikit-learn PolynomialFeatures on the scaled inputs u = (x - centre) /
    # half_range, times the model's scaled-monomial coefficients matched by exponents.
    # Two summation orders differ by at most a few units in the last place of the sum of
    # the terms' absolute values (bound taken as 1e-12 of it).
    model, X_fit = _model(d, order, interactions, penalty, family)
    X = _query(model, X_fit, 2 * _PREDICT_BLOCK + 777)
    U = (X - model.centre) / model.half_range
    pf = PolynomialFeatures(order, interaction_only=False, include_bias=False).fit(U)
    F = pf.transform(U)
    where = {tuple(int(v) for v in p): k for k, p in enumerate(pf.powers_)}
    cols = [where[tuple(int(v) for v in e)] for e in model.exponents]
    terms = F[:, cols] * model.scaled_coefficients
    want = model.scaled_intercept + terms.sum(axis=1)
    scale = abs(model.scaled_intercept) + np.abs(terms).sum(axis=1)
    got = model.predict(X)
    assert got.shape == (X.shape[0],)
    assert np.all(np.abs(got - want) <= 1e-12 * scale)


@pytest.mark.parametrize("d,order,interactions,penalty,family", CASES)
def test_predict_is_the_term_by_term_sum_exactly(d, order, interactions, penalty, family):
    # Reference: the same arithmetic written out on whole columns (numpy); the blocks
    # change where the rows are computed, not the operations on each row.
    model, X_fit = _model(d, order, interactions, penalty, family)
    X = _query(model, X_fit, 3 * _PREDICT_BLOCK + 5)
    got = model.predict(X)
    np.testing.assert_array_equal(got, _term_by_term(model, X))
    for i in (0, 1, _PREDICT_BLOCK - 1, _PREDICT_BLOCK, X.shape[0] - 1):   # one row at a time
        np.testing.assert_array_equal(model.predict(X[i:i + 1]), got[i:i + 1])


def test_predict_with_uneven_powers_and_terms_out_of_order():
    # Reference: the term-by-term sum (numpy) on a model whose inputs need different
    # highest powers and whose terms are not in the order of the powers.
    model, X_fit = _model(3, 3, True, 0.0, "ridge")
    keep = [t for t, e in enumerate(model.exponents) if e[2] <= 1][::-1]
    odd = replace(model, exponents=model.exponents[keep],
                  scaled_coefficients=model.scaled_coefficients[keep] * 1.5)
    assert len(set(odd.exponents.max(axis=0))) > 1
    X = _query(odd, X_fit, _PREDICT_BLOCK + 300)
    np.testing.assert_array_equal(odd.predict(X), _term_by_term(odd, X))


def test_predict_of_one_input_and_of_no_terms():
    model, X_fit = _model(1, 3, False, 0.0, "ridge")
    x = _query(model, X_fit, 50)[:, 0]
    np.testing.assert_array_equal(model.predict(x), model.predict(x[:, None]))
    np.testing.assert_array_equal(model.predict(x), _term_by_term(model, x[:, None]))
    assert model.predict(np.empty((0, 1))).shape == (0,)
    flat, _ = _model(2, 0, False, 0.0, "ridge")
    np.testing.assert_array_equal(flat.predict(np.ones((7, 2))),
                                  np.full(7, flat.scaled_intercept))
