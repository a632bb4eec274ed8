"""A penalty range that fits the data, widening at an edge, and the warnings at an edge.

Effective degrees of freedom of ridge, ``1 + sum lam / (lam + alpha)`` over the
eigenvalues of the standardised cross-product matrix (Hastie, Tibshirani,
Friedman, ESL 2nd ed., eq. 3.50), are checked against scikit-learn's
StandardScaler and numpy's eigenvalues.
"""
from __future__ import annotations

import numpy as np
import pytest
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine.checks import check_grid_edges
from engine.penalty_range import Edge, extend, log_grid, penalty_edges
from engine.recommend import Cell


def _cubic(n=200, seed=0, noise=0.3):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-1, 1, n)
    return ArrayData(x, x ** 3 - x + rng.normal(0, noise, n))


def _edf(Z: np.ndarray, alpha: float) -> float:
    lam = np.linalg.eigvalsh(Z.T @ Z)
    return 1.0 + float(np.sum(lam / (lam + alpha)))


def test_data_range_spans_all_parameters_down_to_about_one():
    data = _cubic()
    a = analyse(data, SweepSpec("y", ("x",), max_order=5, scheme=SchemeSpec("kfold", folds=5)))
    pens = np.asarray(a.spec.penalties)
    assert a.spec.penalty_range == "data" and pens[0] == 0 and pens.size > 5
    # by hand on the first training set: scikit-learn's standardised raw powers
    tr = a.plan.train_sets[0]
    Z = StandardScaler().fit_transform(
        PolynomialFeatures(5, include_bias=False).fit_transform(data.X[tr]))
    assert _edf(Z, pens[1]) == pytest.approx(6 - 0.5, abs=1e-6)   # half a df given up
    assert _edf(Z, pens[-1]) <= 1.1 + 1e-9                          # about one
    t = a.validation
    for q in range(1, 6):
        g = t[t["order"] == q].sort_values("penalty")
        assert g["effective_df"].iloc[0] == pytest.approx(q + 1, abs=1e-9)  # penalty 0
        assert g["effective_df"].iloc[-1] <= 1.1 + 1e-6


def test_range_widens_when_the_pick_lies_on_its_edge():
    data = _cubic(n=60, seed=3, noise=1.5)
    narrow = (0.0, 1e-3, 1e-2)
    a = analyse(data, SweepSpec("y", ("x",), max_order=8, penalties=narrow,
                                penalty_range="data"))
    assert max(a.spec.penalties) > 1e-2
    assert any("widened" in n for n in a.notes)
    # the same grid given by the user: no widening, a warning naming the range
    g = analyse(data, SweepSpec("y", ("x",), max_order=8, penalties=narrow))
    assert g.spec.penalty_range == "given" and g.spec.penalties == narrow
    assert g.penalty_edges and g.penalty_edges[0].side == "upper"
    f, table = check_grid_edges(g)
    assert f is not None and f.code == "range_edge"
    assert "0.001 to 0.01" in f.message and len(table) >= 1


def test_no_edge_warning_inside_a_wide_range_and_below_the_top_order():
    data = _cubic(n=300, seed=1)
    a = analyse(data, SweepSpec("y", ("x",), max_order=6))
    assert a.recommendation.recommended.order < 6
    f, _ = check_grid_edges(a)
    assert f is None


def test_pick_at_the_highest_order_warns():
    data = _cubic(n=400, seed=2, noise=0.1)
    a = analyse(data, SweepSpec("y", ("x",), max_order=3))
    assert a.recommendation.recommended.order == 3
    f, table = check_grid_edges(a)
    assert f is not None and "highest order swept" in f.message
    assert "highest order" in table["side"].tolist()


def _cell(order, penalty, edf, params):
    return Cell(order, penalty, 1.0, 0.1, 1.0, 0.5, params, edf, 10.0, "")


def test_edges_need_room_to_move_and_ignore_intercept_only_cells():
    pens = (0.0, 0.1, 1.0, 10.0)
    assert penalty_edges(pens, {"best": _cell(3, 10.0, 2.5, 4)})[0].side == "upper"
    assert penalty_edges(pens, {"best": _cell(3, 10.0, 1.2, 4)}) == []      # already ~1 df
    assert penalty_edges(pens, {"best": _cell(0, 10.0, 1.0, 1)}) == []      # no terms
    assert penalty_edges(pens, {"best": _cell(3, 0.1, 3.0, 4)})[0] == Edge(
        "lower", "best", 0.1, 3.0, 4)
    assert penalty_edges(pens, {"best": _cell(3, 0.1, 3.9, 4)}) == []       # as good as 0


def test_extend_keeps_the_spacing():
    g = (0.0,) + tuple(log_grid(1e-2, 1e2, per_decade=3))
    wider = extend(g, {"upper", "lower"}, decades=1.0, per_decade=3)
    pos = np.asarray([p for p in wider if p > 0])
    assert pos.min() == pytest.approx(1e-3) and pos.max() == pytest.approx(1e3)
    np.testing.assert_allclose(np.diff(np.log10(pos)), 1 / 3, rtol=1e-9)
    assert wider[0] == 0.0


def test_older_records_keep_their_given_grid():
    d = SweepSpec("y", ("x",), penalties=(0.0, 1.0)).to_dict()
    del d["penalty_range"]
    s = SweepSpec.from_dict(d)
    assert s.penalty_range == "given" and s.penalties == (0.0, 1.0)
    assert SweepSpec.from_dict(SweepSpec("y", ("x",)).to_dict()).penalty_range == "data"
