"""The pack as a user meets it: leave-one-out splits counted as rows, one error unit in
the headline, a saved model that takes the raw table, and a snippet that runs."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from engine import SchemeSpec, SweepSpec, analyse
from engine.loading import load_table, prepare
from engine.pack import build_pack


@pytest.fixture(scope="module")
def loo_case(demo_dir):
    """The calibration demo (24 rows) under leave-one-out, orders 0-3, two penalties."""
    path = demo_dir / "calibration_curve.csv"
    loaded = load_table(path)
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=3, penalties=(0.0, 0.01),
                     scheme=SchemeSpec("loo"))
    return loaded, data, spec, analyse(data, spec)


@pytest.fixture(scope="module")
def loo_packs(loo_case, tmp_path_factory):
    """The leave-one-out request packed."""
    loaded, data, spec, analysis = loo_case
    folder = tmp_path_factory.mktemp("loo_mse") / "pack"
    return {"mse": build_pack(folder, loaded=loaded, source_name="calibration_curve.csv",
                              data=data, spec=spec, analysis=analysis)}


# ---------------------------------------------------------------------------
# leave-one-out: one split per held-out row
# ---------------------------------------------------------------------------
def test_leave_one_out_per_split_table_has_a_row_per_held_out_row(loo_case):
    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import LeaveOneOut, cross_val_predict
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures

    _, data, spec, analysis = loo_case
    n = data.n_rows
    assert n == 24
    grid = analysis.validation
    assert (grid["folds"] == n).all()
    per = analysis.sweep.fold_table()
    assert len(per) == len(grid) * n
    for (q, a), part in per.groupby(["order", "penalty"]):
        assert list(part["fold"]) == list(range(1, n + 1))
        assert (part["n_train"] == n - 1).all() and (part["n_validation"] == 1).all()
        row = grid[(grid["order"] == q) & (grid["penalty"] == a)].iloc[0]
        # the grid's error is the mean of the per-row errors
        assert part["validation_mse"].mean() == pytest.approx(row["validation_mse"], rel=1e-12)
        if a == 0.0 and q > 0:
            # reference: scikit-learn refits leaving each row out (LeaveOneOut)
            pred = cross_val_predict(make_pipeline(PolynomialFeatures(int(q)), LinearRegression()),
                                     data.X, data.y, cv=LeaveOneOut())
            np.testing.assert_allclose(part["validation_mse"].to_numpy(), (data.y - pred) ** 2,
                                       rtol=1e-7, atol=1e-9)


def test_leave_one_out_pack_counts_every_row_as_a_split(loo_packs, loo_case):
    _, data, _, analysis = loo_case
    res = loo_packs["mse"]
    n = data.n_rows
    per = pd.read_csv(res.out_dir / "validation_per_split.csv")
    assert len(per) == len(analysis.validation) * n
    assert per["fold"].max() == n
    grid = pd.read_csv(res.out_dir / "validation_grid.csv")
    assert (grid["folds"] == n).all()
    s = res.summary
    assert s["validation"]["splits"] == n
    assert all(g["folds"] == n for g in s["grid"])
    assert f"each of {n} rows held out once" in s["validation"]["description"]


def test_k_fold_per_split_table_keeps_one_row_per_fold(demo_dir):
    loaded = load_table(demo_dir / "calibration_curve.csv")
    data = prepare(loaded.frame, "bath_temp_C", ["probe_mV"])
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=2, penalties=(0.0,),
                     scheme=SchemeSpec("kfold", folds=4))
    a = analyse(data, spec)
    per = a.sweep.fold_table()
    assert len(per) == len(a.validation) * 4 and (a.validation["folds"] == 4).all()
    assert per["n_validation"].sum() == data.n_rows * len(a.validation)
