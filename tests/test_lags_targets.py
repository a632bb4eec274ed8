"""Lag depth, nested input sets and several targets as axes of the grid.

Reference libraries: pandas (``groupby(...).shift`` builds the lagged design
independently of the engine), scikit-learn (pipelines refitted on the same
splits; ``lars_path`` for the order in which inputs enter the lasso path).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.linear_model import LinearRegression, Ridge, lars_path
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from engine import ArrayData, InputProblem, SchemeSpec, SweepSpec, analyse
from engine.analysis import analyse_targets
from engine.lagged import LagSpec, build_lagged_design, lag_name


class _PerInputPowers(BaseEstimator, TransformerMixin):
    """x_j^k for every column j and power k <= order (no products)."""

    def __init__(self, order=1):
        self.order = order

    def fit(self, X, y=None):
        return self

    def transform(self, X):
        return np.hstack([X ** k for k in range(1, self.order + 1)])


def _pipeline(order, alpha, interactions=False):
    est = LinearRegression() if alpha == 0 else Ridge(alpha=alpha)
    terms = PolynomialFeatures(order, include_bias=False) if interactions else _PerInputPowers(order)
    return make_pipeline(terms, StandardScaler(), est)


def simulate_ar2(seed: int, n: int = 400):
    """AR(2) target driven by one input with a 3-step delay (invented scenario).

    y_t = 0.5 y_{t-1} - 0.3 y_{t-2} + x_{t-3} + e_t, e ~ N(0, 0.5^2); the
    first 50 steps are discarded so the recursion has forgotten its start.
    """
    r = np.random.default_rng(seed)
    x = r.normal(size=n + 50)
    e = 0.5 * r.normal(size=n + 50)
    y = np.zeros(n + 50)
    for t in range(3, n + 50):
        y[t] = 0.5 * y[t - 1] - 0.3 * y[t - 2] + x[t - 3] + e[t]
    return x[50:], y[50:]


@pytest.fixture(scope="module")
def grouped_log():
    """Three batches logged in time order, interleaved, two inputs and two targets."""
    rng = np.random.default_rng(5)
    n = 240
    g = rng.integers(0, 3, n)
    x1 = np.cumsum(rng.normal(size=n)) * 0.3
    x2 = rng.uniform(-1, 1, n)
    frame = pd.DataFrame({"g": g, "x1": x1, "x2": x2})
    frame["a"] = (np.sin(frame["x1"]) + 0.5 * frame.groupby("g")["x2"].shift(1).fillna(0)
                  + 0.2 * rng.normal(size=n))
    frame["b"] = frame["x1"] ** 2 * 0.3 + 0.3 * rng.normal(size=n)
    return frame


def test_lagged_columns_equal_pandas_shift_per_group(grouped_log):
    # reference: pandas groupby(...).shift(l), rows with a missing lag dropped
    f = grouped_log
    lags = LagSpec(inputs=("x2",), depths=(0, 1, 2), target_depths=(0, 1, 3))
    d = build_lagged_design(f[["x1", "x2"]].to_numpy(), f[["a", "b"]].to_numpy(),
                            ("x1", "x2"), ("a", "b"), lags, groups=f["g"].to_numpy())
    ref = pd.DataFrame({"x1": f["x1"], "x2": f["x2"]})
    for l in (1, 2, 3):   # deepest lag 3 decides the rows kept at every depth
        ref[lag_name("x2", l)] = f.groupby("g")["x2"].shift(l)
        for t in ("a", "b"):
            ref[lag_name(t, l)] = f.groupby("g")[t].shift(l)
    ref = ref.dropna()
    assert d.rows_dropped == len(f) - len(ref) == 3 * 3   # 3 rows at the start of each of 3 groups
    np.testing.assert_array_equal(d.kept, ref.index.to_numpy())
    for j, name in enumerate(d.columns):
        np.testing.assert_array_equal(d.X[:, j], ref[name].to_numpy(), err_msg=name)
    assert "3 groups" in d.note and "same rows" in d.note


@pytest.mark.parametrize("interactions", [False, True])
def test_lag_cells_match_sklearn_on_shift_design(grouped_log, interactions):
    # scikit-learn pipelines on a pandas-shift design, refitted on the same splits
    f = grouped_log
    lags = LagSpec(depths=(0, 1, 2), target_depths=(0, 2))
    pens = (0.0, 0.1, 10.0)
    spec = SweepSpec("a", ("x1", "x2"), orders=(1, 2), penalties=pens, interactions=interactions,
                     scheme=SchemeSpec("blocked", folds=4, gap=2, group_column="g"), lags=lags)
    data = ArrayData(f[["x1", "x2"]].to_numpy(), f["a"].to_numpy(), ("x1", "x2"), "a",
                     groups=f["g"].to_numpy())
    a = analyse(data, spec)
    t = a.validation
    assert len(t) == 3 * 2 * 2 * len(pens)
    assert a.rows_left_out == 6
    E = a.sweep.validation_errors()
    base = pd.DataFrame({"x1": f["x1"], "x2": f["x2"], "a": f["a"]})
    for l in (1, 2):
        for c in ("x1", "x2", "a"):
            base[f"{c}_lag{l}"] = f.groupby("g")[c].shift(l)
    base = base.dropna().reset_index(drop=True)
    y = base["a"].to_numpy()
    worst = 0.0
    for row_i, row in t.iterrows():
        dx, dy, q, alpha = int(row["lags"]), int(row["target_lags"]), int(row["order"]), row["penalty"]
        cols = ["x1", "x2"] + [f"{c}_lag{l}" for l in range(1, dx + 1) for c in ("x1", "x2")]
        cols += [f"a_lag{l}" for l in range(1, dy + 1)]
        X = base[cols].to_numpy()
        for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
            m = _pipeline(q, alpha, interactions).fit(X[tr], y[tr])
            ref = np.mean((m.predict(X[va]) - y[va]) ** 2)
            worst = max(worst, abs(E[row_i, s] - ref) / ref)
    assert worst < 1e-8


def test_several_targets_equal_single_target_runs_bit_for_bit(grouped_log):
    f = grouped_log
    X = f[["x1", "x2"]].to_numpy()
    Y = f[["a", "b"]].to_numpy()
    common = dict(max_order=4, penalties=(0.0, 1e-3, 0.1, 10.0), seed=3,
                  scheme=SchemeSpec("repeated", folds=4, repeats=2))
    both = analyse_targets(ArrayData(X, Y, ("x1", "x2"), "a", targets=("a", "b")),
                           SweepSpec("a", ("x1", "x2"), extra_targets=("b",), **common))
    assert [a.target for a in both] == ["a", "b"]
    for t, a in zip(("a", "b"), both):
        single = analyse(ArrayData(X, f[t].to_numpy(), ("x1", "x2"), t),
                         SweepSpec(t, ("x1", "x2"), **common))
        grid = a.validation[single.validation.columns]
        pd.testing.assert_frame_equal(grid, single.validation, check_exact=True)
        assert (a.validation["target"] == t).all()
        np.testing.assert_array_equal(a.sweep.valid_mse, single.sweep.valid_mse)
        np.testing.assert_array_equal(a.sweep.coef_raw[2], single.sweep.coef_raw[2])
        assert a.recommendation.recommended.order == single.recommendation.recommended.order
        assert a.recommendation.recommended.penalty == single.recommendation.recommended.penalty


def test_ar2_with_delayed_input_recommends_input_lags_3_target_lags_2():
    # invented scenario (simulate_ar2): the true model has x_{t-3} and y_{t-1}, y_{t-2}
    hits = []
    for seed in range(10):
        x, y = simulate_ar2(seed)
        spec = SweepSpec("y", ("x",), orders=(1,), penalties=(0.0, 1.0, 10.0),
                         scheme=SchemeSpec("blocked", folds=5, gap=4),
                         lags=LagSpec(depths=range(0, 6), target_depths=range(0, 5)))
        rec = analyse(ArrayData(x, y, ("x",), "y"), spec).recommendation.recommended
        hits.append((rec.lags, rec.target_lags))
    assert sum(h == (3, 2) for h in hits) >= 9, hits


def test_target_lags_only_with_time_schemes():
    x, y = simulate_ar2(0, n=120)
    data = ArrayData(x, y, ("x",), "y")
    for scheme in (SchemeSpec("kfold"), SchemeSpec("grouped", group_column="g"),
                   SchemeSpec("blocked", gap=1)):
        spec = SweepSpec("y", ("x",), max_order=1, scheme=scheme,
                         lags=LagSpec(depths=(0, 1), target_depths=(0, 2)))
        with pytest.raises(InputProblem) as err:
            analyse(data, spec)
        assert err.value.code == "lags_need_time_scheme"
        assert "targets of the rows just before it" in str(err.value)
    # input lags alone may use shuffled folds; a later-period holdout takes target lags
    analyse(data, SweepSpec("y", ("x",), max_order=1, lags=LagSpec(depths=(0, 3))))
    a = analyse(data, SweepSpec("y", ("x",), max_order=1, scheme=SchemeSpec("holdout"),
                                lags=LagSpec(depths=(0, 3), target_depths=(0, 2))))
    assert a.rows_left_out == 3 and a.n_rows == 117
    assert any("do not repeat the choice of lag depth" in n for n in a.notes)


@pytest.fixture(scope="module")
def channels():
    """Eight inputs, three of which carry the signal (invented)."""
    rng = np.random.default_rng(2)
    n = 300
    X = rng.normal(size=(n, 8))
    y = 2.0 * X[:, 5] - 1.5 * X[:, 2] + 1.0 * X[:, 7] + 0.5 * rng.normal(size=n)
    return ArrayData(X, y, tuple(f"c{j}" for j in range(8)), "y")


def test_inputs_ranked_inside_each_split_by_lasso_entry(channels):
    # reference: scikit-learn lars_path(method="lasso") on each split's standardised training rows
    spec = SweepSpec("y", channels.inputs, orders=(1,), penalties=(0.0,), nested_inputs="lasso",
                     scheme=SchemeSpec("kfold", folds=4), seed=1)
    a = analyse(channels, spec)
    X, y = channels.X, channels.y
    for s, tr in enumerate(a.plan.train_sets):
        Z = StandardScaler().fit_transform(X[tr])
        _, _, coefs = lars_path(Z, y[tr] - y[tr].mean(), method="lasso")
        nz = np.abs(coefs) > 0
        first = np.where(nz.any(axis=1), nz.argmax(axis=1), coefs.shape[1] + 1)
        np.testing.assert_array_equal(a.rankings[s], np.argsort(first, kind="stable"))
    # each cell's split errors equal a refit on that split's first k ranked inputs
    E = a.sweep.validation_errors()
    for row_i, row in a.validation.iterrows():
        k = int(row["inputs_used"])
        for s, (tr, va) in enumerate(zip(a.plan.train_sets, a.plan.valid_sets)):
            cols = a.rankings[s][:k]
            m = LinearRegression().fit(X[tr][:, cols], y[tr])
            ref = np.mean((m.predict(X[va][:, cols]) - y[va]) ** 2)
            assert E[row_i, s] == pytest.approx(ref, rel=1e-8)
    # how many inputs: the three that carry the signal
    rec = a.recommendation.recommended
    assert rec.inputs_used == 3
    assert set(a.model_spec.inputs) == {"c2", "c5", "c7"}
    assert any("never on all rows" in n for n in a.notes)


def test_inputs_in_given_order(channels):
    spec = SweepSpec("y", channels.inputs, orders=(1, 2), penalties=(0.0, 1.0),
                     nested_inputs="given")
    a = analyse(channels, spec)
    assert sorted(a.validation["inputs_used"].unique()) == list(range(1, 9))
    # the signal's last input is c7, so all 8 are needed in the given order
    assert a.recommendation.recommended.inputs_used == 8


def test_spec_round_trip_and_older_records():
    spec = SweepSpec("y", ("x",), lags=LagSpec(inputs=("x",), depths=(0, 2), target_depths=(1,)),
                     nested_inputs="given", extra_targets=("z",),
                     scheme=SchemeSpec("blocked", gap=2))
    assert SweepSpec.from_dict(spec.to_dict()) == spec
    plain = SweepSpec("y", ("x",))
    d = plain.to_dict()
    assert not {"lags", "nested_inputs", "extra_targets"} & set(d)   # older records read the same
    assert SweepSpec.from_dict(d) == plain and not plain.has_rungs


def test_bad_lag_requests_are_named():
    data = ArrayData(np.arange(10.0), np.arange(10.0) ** 2, ("x",), "y")
    with pytest.raises(InputProblem, match="not one of the inputs"):
        analyse(data, SweepSpec("y", ("x",), lags=LagSpec(inputs=("w",), depths=(1,))))
    with pytest.raises(InputProblem, match="leaves no rows"):
        analyse(data, SweepSpec("y", ("x",), max_order=1, lags=LagSpec(depths=(0, 12))))


def test_view_is_the_plain_analysis_of_the_chosen_columns():
    # the recommended rung's cells equal a plain sweep on those columns (pandas-shift design)
    x, y = simulate_ar2(1, n=300)
    # the unpaired rule picks target lags 2 here (the paired rule keeps 3: 0.0017 +- 0.0008)
    spec = SweepSpec("y", ("x",), orders=(1, 2), penalties=(0.0, 1.0),
                     scheme=SchemeSpec("blocked", folds=4, gap=3),
                     lags=LagSpec(depths=(0, 3), target_depths=(0, 2, 3)), rule="unpaired")
    a = analyse(ArrayData(x, y, ("x",), "y"), spec)
    v = a.view()
    assert v.spec.lags is None and v.spec.inputs == a.model_spec.inputs
    rec = a.recommendation.recommended
    assert (rec.lags, rec.target_lags) == (3, 2)
    assert v.spec.inputs == ("x", "x_lag1", "x_lag2", "x_lag3", "y_lag1", "y_lag2")
    plain = analyse(a.model_data, v.spec)
    np.testing.assert_allclose(v.sweep.valid_mse, plain.sweep.valid_mse, rtol=1e-10)
    assert len(v.validation) == 4 and len(a.validation) == 2 * 3 * 4


def test_command_line_lags_and_two_targets_pack_and_record(tmp_path, capsys):
    # one pack section per target, grid rows with the new keys, the request in the record
    import json

    from engine.cli import main

    x, y = simulate_ar2(3, n=240)
    rng = np.random.default_rng(1)
    f = pd.DataFrame({"t": np.arange(x.size), "x": x, "y": y,
                      "z": 0.5 * x ** 2 + 0.2 * rng.normal(size=x.size)})
    src = tmp_path / "log.csv"
    f.to_csv(src, index=False)
    out = tmp_path / "pack"
    code = main(["run", str(src), "--target", "y", "--more-targets", "z", "--inputs", "x",
                 "--order-column", "t", "--scheme", "blocked", "--folds", "4", "--gap", "3",
                 "--lags", "0-4", "--target-lags", "0-3", "--max-order", "1",
                 "--penalties", "0,1", "--rule", "unpaired", "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0, printed
    assert "input lags 3, target lags 2" in printed and "Target z:" in printed
    s = json.loads((out / "summary.json").read_text())
    assert s["recommended"]["lags"] == 3 and s["recommended"]["target_lags"] == 2
    assert s["rule_name"] == "unpaired"     # the rule asked for is the rule recorded
    assert len(s["grid"]) == 5 * 4 * 2 * 2
    assert {"lags", "target_lags", "target", "order", "penalty", "validation_mse"} <= set(s["grid"][0])
    assert s["sweep"]["axes"]["lags"]["rows_left_out"] == 4
    assert s["data"]["rows_used"] == x.size - 4
    assert [t["target"] for t in s["targets"]] == ["y", "z"]
    z = json.loads((out / "target_2" / "summary.json").read_text())
    assert z["roles"]["target"] == "z" and all(r["target"] == "z" for r in z["grid"])
    md = (out / "summary.md").read_text()
    assert "Targets side by side" in md and "left out at every lag depth" in md
    assert "do not repeat the choice of lag depth" in md
    # the record holds the whole request, so a rerun sweeps the same grid
    rec = json.loads((out / "record.json").read_text())
    spec = SweepSpec.from_dict(rec["spec"])
    assert spec.extra_targets == ("z",) and spec.lags.target_depths == (0, 1, 2, 3)
    from engine.pack import pack_zip_bytes
    import io
    import zipfile
    names = zipfile.ZipFile(io.BytesIO(pack_zip_bytes(out))).namelist()
    assert "pack/targets.csv" in names and "pack/target_2/summary.json" in names


def test_plain_grid_rows_keep_their_keys():
    # a request without the new axes gives grid rows without the new keys
    from engine.pack import _GRID_KEYS, _cell_dict, _grid_keys

    x, y = simulate_ar2(4, n=80)
    a = analyse(ArrayData(x, y, ("x",), "y"), SweepSpec("y", ("x",), max_order=2,
                                                        penalties=(0.0, 1.0)))
    assert _grid_keys(a.validation) == _GRID_KEYS
    assert not {"lags", "target_lags", "inputs_used", "target"} & set(
        _cell_dict(a.recommendation.recommended))
    assert a.view() is a and a.working("d", "s") == ("d", "s")


def test_lags_refused_when_rows_are_said_not_to_be_in_time_order():
    x, y = simulate_ar2(0, n=60)
    spec = SweepSpec("y", ("x",), max_order=1, lags=LagSpec(depths=(0, 2)),
                     scheme=SchemeSpec("kfold", rows_in_time_order=False))
    with pytest.raises(InputProblem, match="time order") as err:
        analyse(ArrayData(x, y, ("x",), "y"), spec)
    assert err.value.code == "lags_need_order"


def test_page_offers_lag_depth_and_several_targets_on_the_drifting_line_demo(repo_root):
    # headless page (Streamlit AppTest): lag depths on the reactor log, heat map over two
    # axes, then a second target
    from streamlit.testing.v1 import AppTest

    at = AppTest.from_file(str(repo_root / "app.py"), default_timeout=120).run()
    at.selectbox(key="source_choice").set_value("demo:drift").run()
    at.number_input(key="max_order").set_value(1).run()
    at.number_input(key="lags_max").set_value(2).run()
    at.number_input(key="target_lags_max").set_value(1).run()
    assert not at.exception, [e.value for e in at.exception]
    assert not [e.value for e in at.error], [e.value for e in at.error]
    head = [m.value for m in at.markdown if m.value.startswith("#### Recommended:")]
    assert len(head) == 1 and "input lags" in head[0] and "target lags" in head[0]
    texts = " ".join(c.value for c in at.caption).replace("\u2060", "")
    assert "rows at the start left out for lags" in texts
    assert "same rows" in texts
    assert at.selectbox(key="heat_x").value == "lags"
    assert at.selectbox(key="heat_y").value == "target_lags"
    at.selectbox(key="heat_y").set_value("order").run()
    assert not at.exception, [e.value for e in at.exception]
    # a second target: both recommendations side by side, each shown on request
    at.multiselect(key="extra_targets").set_value(["inlet_temp_C"]).run()
    assert not at.exception, [e.value for e in at.exception]
    assert any("Targets side by side" in m.value for m in at.markdown)
    assert len(at.dataframe[0].value) == 2
    at.radio(key="target_shown").set_value("inlet_temp_C").run()
    assert not at.exception, [e.value for e in at.exception]
    texts = " ".join(c.value for c in at.caption).replace("\u2060", "")
    assert "target inlet_temp_C" in texts.replace("\\_", "_")
