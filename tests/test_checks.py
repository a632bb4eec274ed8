"""Warning signs: parity of the small statistics with scipy/statsmodels/scikit-learn,
and scenarios in which each check must fire (or stay quiet)."""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine.checks import (
    CheckReport, Finding, durbin_watson, effective_sample_size, fit_predict, ks_statistic,
    lag1_autocorrelation, leverage, model_terms, population_stability_index, run_checks,
    shift_table, standardised_mean_difference, suggested_gap,
)

REPO = Path(__file__).resolve().parents[1]
CHECK_CODES = {"target_leakage", "serial_dependence", "period_shift", "extrapolation", "high_leverage",
               "few_samples_per_parameter", "ill_conditioned", "train_validation_gap", "range_edge",
               "few_validation_rows"}


# ---------------------------------------------------------------------------
# parity of the small statistics
# ---------------------------------------------------------------------------
def test_durbin_watson_matches_statsmodels():
    from statsmodels.stats.stattools import durbin_watson as sm_dw  # reference: statsmodels
    rng = np.random.default_rng(0)
    for e in (rng.normal(size=50), np.cumsum(rng.normal(size=200)), rng.normal(size=3)):
        assert durbin_watson(e) == pytest.approx(float(sm_dw(e)), rel=1e-12)


def test_durbin_watson_of_long_series_matches_statsmodels():
    # reference: statsmodels durbin_watson; series longer than one piece of the sums
    from statsmodels.stats.stattools import durbin_watson as sm_dw
    from engine.checks import _DW_PIECE
    rng = np.random.default_rng(3)
    walk = np.cumsum(rng.normal(size=3 * _DW_PIECE + 17))
    for e in (rng.normal(size=_DW_PIECE + 1), rng.normal(5, 1, size=2 * _DW_PIECE), walk,
              np.repeat(rng.normal(size=_DW_PIECE // 2 + 1), 2)):
        assert durbin_watson(e) == pytest.approx(float(sm_dw(e)), rel=1e-12)
    assert durbin_watson(walk) < 0.01
    assert math.isnan(durbin_watson(np.zeros(_DW_PIECE + 5)))


def test_lag1_autocorrelation_matches_statsmodels_acf():
    from statsmodels.tsa.stattools import acf  # reference: statsmodels acf (adjusted=False)
    rng = np.random.default_rng(1)
    ar = np.zeros(400)
    for t in range(1, ar.size):
        ar[t] = 0.8 * ar[t - 1] + rng.normal()
    for x in (rng.normal(size=100), ar):
        assert lag1_autocorrelation(x) == pytest.approx(float(acf(x, nlags=1)[1]), rel=1e-10)
    assert lag1_autocorrelation(ar) > 0.6


def test_ks_statistic_matches_scipy():
    from scipy.stats import ks_2samp  # reference: scipy two-sample KS
    rng = np.random.default_rng(2)
    cases = [(rng.normal(size=40), rng.normal(0.5, 1, size=65)),
             (rng.integers(0, 5, size=30).astype(float), rng.integers(0, 7, size=21).astype(float)),
             (np.arange(10.0), np.arange(10.0) + 100)]
    for a, b in cases:
        assert ks_statistic(a, b) == pytest.approx(ks_2samp(a, b).statistic, abs=1e-12)


def test_psi_hand_worked_example():
    # Training values 1..8, four bins at the training quartiles (numpy's linear
    # quantiles): cuts 2.75, 4.5, 6.25 -> bins {1,2} {3,4} {5,6} {7,8}, each
    # holding 2/8 = 0.25 of the training rows.
    # Later values [1, 3, 4, 5, 7, 8, 8, 8] fall 1, 2, 1, 4 into those bins:
    # shares 0.125, 0.25, 0.125, 0.5.
    # PSI = (0.125-0.25) ln(0.125/0.25) + 0 + (0.125-0.25) ln(0.5) + (0.5-0.25) ln(2)
    #     = 0.125 ln 2 + 0.125 ln 2 + 0.25 ln 2 = 0.5 ln 2 = 0.34657...
    expected = np.arange(1.0, 9.0)
    actual = np.array([1, 3, 4, 5, 7, 8, 8, 8], float)
    assert population_stability_index(expected, actual, bins=4) == pytest.approx(
        0.5 * math.log(2), rel=1e-12)


def test_standardised_mean_difference_and_effective_sample_size():
    a = np.array([1.0, 2.0, 3.0, 4.0])       # mean 2.5, sample variance 5/3
    b = np.array([3.0, 4.0, 5.0, 6.0])       # mean 4.5, sample variance 5/3
    assert standardised_mean_difference(a, b) == pytest.approx(2.0 / math.sqrt(5.0 / 3.0))
    # n (1 - r) / (1 + r) (AR(1) variance of the mean, large-n form)
    assert effective_sample_size(100, 0.0) == pytest.approx(100.0)
    assert effective_sample_size(100, 0.5) == pytest.approx(100 / 3)
    assert effective_sample_size(100, -0.4) == pytest.approx(100.0)


def test_leverage_matches_statsmodels_hat_values_and_new_point_formula():
    import statsmodels.api as sm  # reference: statsmodels OLSInfluence.hat_matrix_diag
    rng = np.random.default_rng(3)
    T = rng.normal(size=(40, 3)) * [1.0, 50.0, 0.01] + [0.0, 1000.0, 5.0]
    y = rng.normal(size=40)
    infl = sm.OLS(y, sm.add_constant(T)).fit().get_influence()
    np.testing.assert_allclose(leverage(T), infl.hat_matrix_diag, rtol=1e-9)
    # a new row: x0' (X'X)^-1 x0 with the intercept column (textbook formula, numpy)
    Xd = sm.add_constant(T)
    q = np.array([[0.5, 1100.0, 5.02], [3.0, 900.0, 4.9]])
    qd = np.column_stack([np.ones(2), q])
    ref = np.einsum("ij,jk,ik->i", qd, np.linalg.inv(Xd.T @ Xd), qd)
    np.testing.assert_allclose(leverage(T, q), ref, rtol=1e-8)


def test_ridge_leverage_sums_to_effective_degrees_of_freedom():
    from engine.final_fit import fit_final
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 3, 60)
    y = np.sin(x) + rng.normal(scale=0.1, size=60)
    m = fit_final(x[:, None], y, ("x",), 4, 0.1)
    Ft, _ = model_terms(x[:, None], None, ("x",), 4, 0.1, False)
    assert leverage(Ft, None, 0.1).sum() == pytest.approx(m.effective_df, rel=1e-8)


@pytest.mark.parametrize("order,penalty,interactions", [(3, 0.0, False), (3, 0.5, False),
                                                        (2, 0.1, True), (2, 0.0, True)])
def test_fit_predict_matches_scikit_learn(order, penalty, interactions):
    # reference: scikit-learn PolynomialFeatures -> StandardScaler -> Ridge/LinearRegression
    from sklearn.linear_model import LinearRegression, Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures, StandardScaler
    rng = np.random.default_rng(5)
    d = 2 if interactions else 1
    X = rng.uniform(1, 4, size=(80, d))
    y = X.sum(axis=1) ** 2 + rng.normal(size=80)
    Xq = rng.uniform(0, 5, size=(15, d))
    names = tuple(f"x{j}" for j in range(d))
    ours = fit_predict(X, y, Xq, names, order, penalty, interactions)
    est = LinearRegression() if penalty == 0 else Ridge(alpha=penalty)
    ref = make_pipeline(PolynomialFeatures(order, include_bias=False), StandardScaler(),
                        est).fit(X, y).predict(Xq)
    np.testing.assert_allclose(ours, ref, rtol=1e-7, atol=1e-7)


# ---------------------------------------------------------------------------
# property tests
# ---------------------------------------------------------------------------
finite = st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None)
@given(arrays(float, st.integers(1, 60), elements=finite),
       arrays(float, st.integers(1, 60), elements=finite))
def test_psi_is_never_negative_and_ks_in_unit_interval(a, b):
    assert population_stability_index(a, b) >= 0.0
    ks = ks_statistic(a, b)
    assert 0.0 <= ks <= 1.0


@settings(max_examples=60, deadline=None)
@given(arrays(float, st.integers(1, 80), elements=finite), st.integers(2, 12))
def test_psi_of_a_sample_against_itself_is_zero(a, bins):
    assert population_stability_index(a, a, bins=bins) == 0.0
    assert ks_statistic(a, a) == 0.0


@settings(max_examples=80, deadline=None)
@given(arrays(float, st.integers(3, 80), elements=finite))
def test_lag1_autocorrelation_in_range(x):
    r = lag1_autocorrelation(x)
    if np.ptp(x) == 0:
        assert math.isnan(r)
    else:
        assert -1.0 <= r <= 1.0


# ---------------------------------------------------------------------------
# scenarios
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def random_walk():
    """Target and two inputs: independent Gaussian random walks (no real relation)."""
    rng = np.random.default_rng(1)
    n = 800
    X = np.cumsum(rng.normal(size=(n, 2)), axis=0)
    y = np.cumsum(rng.normal(size=n))
    data = ArrayData(X, y, ("a", "b"), "y", order=np.arange(n, dtype=float))
    spec = SweepSpec("y", ("a", "b"), max_order=6, interactions=True,
                     scheme=SchemeSpec("kfold", order_column="t"))
    return data, analyse(data, spec)


def test_random_walk_shuffled_folds_flatter_and_serial_dependence_fires(random_walk):
    data, an = random_walk
    rep = run_checks(data, an)
    f = rep.by_code("serial_dependence")
    assert f is not None and f.severity == "serious"
    comp = rep.tables["scheme_comparison"].set_index("role")
    shuffled = comp.loc["your scheme, recommended model", "validation_r2"]
    blocked = comp.loc["same model, blocked folds", "validation_r2"]
    assert shuffled > 0.5
    assert blocked < 0.1
    assert comp.loc["same model, blocked folds", "scheme"] == "blocked"
    # the message compares errors: the MSE ratio of the same model and both R²
    # against one common variance (the target's over all rows), as printed
    ratio = comp.loc["same model, blocked folds", "mse_ratio"]
    mse_s = comp.loc["your scheme, recommended model", "validation_mse"]
    mse_b = comp.loc["same model, blocked folds", "validation_mse"]
    assert ratio == pytest.approx(mse_b / mse_s, rel=1e-12) and ratio > 5
    assert f"{ratio:.3g} times that of shuffled folds" in f.message
    r2s = comp.loc["your scheme, recommended model", "validation_r2_common"]
    r2b = comp.loc["same model, blocked folds", "validation_r2_common"]
    y = np.asarray(data.y)
    assert r2s == pytest.approx(1 - mse_s / np.var(y)) and r2b == pytest.approx(1 - mse_b / np.var(y))
    # with one common variance the R² differ exactly as the errors do
    assert (1 - r2b) / (1 - r2s) == pytest.approx(ratio, rel=1e-12)
    assert f"R² {r2b:.2f} against {r2s:.2f}" in f.message
    # the per-block R² (each block against its own mean) is not what the message quotes
    assert f"{blocked:,.0f}" not in f.message
    # Durbin-Watson in the message: statsmodels' value on the final fit's residuals
    from statsmodels.stats.stattools import durbin_watson as sm_dw
    from engine.final_fit import fit_final
    rec = an.recommendation.recommended
    m = fit_final(data.X, data.y, an.spec.inputs, rec.order, rec.penalty, an.spec.interactions)
    dw = sm_dw(np.asarray(data.y) - m.predict(data.X))          # statsmodels
    assert f"Durbin-Watson {dw:.2f}" in f.message
    assert f.details["durbin_watson"] == pytest.approx(dw, rel=1e-10)
    assert "blocked folds" in f.advice.lower()
    assert f.details["residual_lag1"] > 0.5
    serial = rep.tables["serial"].set_index("measure")["value"]
    assert serial["Durbin-Watson (final fit residuals)"] < 1.0
    assert serial["effective sample size"] < 0.2 * 800


def test_random_walk_under_blocked_folds_shows_train_validation_gap(random_walk):
    data, an = random_walk
    from dataclasses import replace
    spec = replace(an.spec, scheme=SchemeSpec("blocked", folds=5, gap=20, order_column="t"))
    rep = run_checks(data, analyse(data, spec))
    f = rep.by_code("train_validation_gap")
    assert f is not None and f.value > 2
    assert f"{f.value:.2g}" in f.message or f"{f.value:,.0f}" in f.message
    serial = rep.by_code("serial_dependence")
    assert serial is not None
    assert "scheme_comparison" not in rep.tables          # the scheme is already blocked
    assert "widen the gap" in serial.advice               # 20 rows is below the suggestion


def _shift_data(seed=3, n=600):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 3))
    X[int(0.7 * n):, 1] += 2.0          # input 'v' moves by about 2 SD in the last 30%
    y = 1 + X @ np.array([1.0, 0.5, -0.7]) + rng.normal(scale=0.5, size=n)
    return ArrayData(X, y, ("u", "v", "w"), "y", order=np.arange(n, dtype=float))


@pytest.mark.parametrize("kind", ["kfold", "holdout"])
def test_period_shift_names_the_input_that_moved(kind):
    data = _shift_data()
    spec = SweepSpec("y", ("u", "v", "w"), max_order=2,
                     scheme=SchemeSpec(kind, holdout_fraction=0.3, order_column="t"))
    rep = run_checks(data, analyse(data, spec))
    f = rep.by_code("period_shift")
    assert f is not None
    assert f.details["inputs_moved"][0] == "v"
    assert " v " in f.message and "PSI" in f.message
    t = rep.tables["period_shift"]
    assert list(t["input"])[0] == "v"
    assert set(t["input"]) == {"u", "v", "w"}
    assert t["psi"].is_monotonic_decreasing
    assert t.iloc[0]["psi"] > 0.25 and t.iloc[0]["smd"] > 1.0


def test_shift_table_quiet_for_same_distribution():
    rng = np.random.default_rng(11)
    X = rng.normal(size=(2000, 2))
    t = shift_table(X[:1500], X[1500:], ("a", "b"))
    assert not t["moved"].any()
    assert (t["psi"] < 0.1).all()


@pytest.mark.parametrize("n", [900, 30_000])   # scipy's exact and asymptotic p-values
def test_shift_table_ks_matches_scipy_with_ties_and_missing_values(n):
    # reference: scipy ks_2samp (statistic and p-value) on each column's two periods
    from scipy.stats import ks_2samp
    rng = np.random.default_rng(12)
    X = np.column_stack([rng.normal(size=n), rng.integers(0, 6, n).astype(float),
                         rng.normal(size=n), rng.normal(size=n)])
    cut = 2 * n // 3                      # two periods of 2/3 and 1/3 of the rows
    X[cut + 50:, 0] += 0.4                # later values larger, then smaller
    X[cut + 50:, 3] -= 0.3
    X[[5, cut + 100], 2] = np.nan         # sorts last; the statistic is then `ks_statistic`'s
    t = shift_table(X[:cut], X[cut:], ("a", "b", "c", "d")).set_index("input")
    for j, name in enumerate("abcd"):
        assert t.loc[name, "ks"] == ks_statistic(X[:cut, j], X[cut:, j])
        if name != "c":
            ref = ks_2samp(X[:cut, j], X[cut:, j])
            assert t.loc[name, "ks"] == pytest.approx(ref.statistic, abs=1e-12)
            assert t.loc[name, "ks_p_value"] == ref.pvalue
    assert math.isnan(t.loc["c", "ks_p_value"])
    assert t.loc["a", "moved"] and not t.loc["b", "moved"]


@pytest.fixture(scope="module")
def few_points():
    """20 readings of a gentle quadratic, in acquisition (random) order."""
    rng = np.random.default_rng(0)
    x = rng.uniform(2, 15, 20)
    y = 50 + 12 * x + 0.6 * x ** 2 + rng.normal(scale=3, size=20)
    data = ArrayData(x, y, ("x",), "y")
    spec = SweepSpec("y", ("x",), max_order=10, scheme=SchemeSpec("kfold"))
    return data, analyse(data, spec)


def test_extrapolation_fires_for_the_high_order_only(few_points):
    data, an = few_points
    rep = run_checks(data, an, candidates=[(2, 0.0), (9, 0.0)])
    f = rep.by_code("extrapolation")
    assert f is not None
    assert f.details["cells"] == [[9, 0.0]]
    assert f.message.startswith("Order 9 predicts")
    assert "order 2" not in f.message
    x = data.X[:, 0]
    assert f"{x.min():.3g} .. {x.max():.3g}" in f.advice
    t = rep.tables["extrapolation"]
    assert not t[t["order"] == 2]["flagged"].any()
    assert t[t["order"] == 9]["flagged"].any()
    # the order-2 curve stays close to the target's observed range everywhere probed
    assert t[t["order"] == 2]["beyond"].max() < 0.5
    # conditioning and rows per parameter flag the high order
    assert "order 9" in rep.by_code("ill_conditioned").message
    assert rep.by_code("ill_conditioned").severity == "serious"
    spp = rep.tables["samples_per_parameter"].set_index("order")["rows_per_parameter"]
    assert spp[9] == pytest.approx(2.0) and spp[2] == pytest.approx(20 / 3)
    cond = rep.tables["conditioning"].set_index("order")["condition_number"]
    assert cond[2] < 1e3 < 1e6 < cond[9]


def test_well_specified_independent_rows_raise_no_warning():
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 10, 500)
    y = 1 + 2 * x + rng.normal(size=500)
    data = ArrayData(x, y, ("x",), "y")
    an = analyse(data, SweepSpec("y", ("x",), max_order=3, scheme=SchemeSpec("kfold")))
    rep = run_checks(data, an)
    assert rep.findings == []
    assert rep.codes() == []
    summary = rep.tables["summary"]
    assert set(summary["code"]) == CHECK_CODES
    assert not summary["fired"].any()
    # the tables are filled in even when nothing fires
    for name in ("serial", "period_shift", "extrapolation", "leverage",
                 "samples_per_parameter", "conditioning"):
        assert len(rep.tables[name]) > 0


def test_rows_sorted_by_an_input_do_not_count_as_time():
    # reference data: demo calibration table, listed by probe reading, no order column
    from engine.loading import load_table, prepare
    lt = load_table(REPO / "demo_data" / "calibration_curve.csv")
    data = prepare(lt.frame, "bath_temp_C", ["probe_mV"])
    an = analyse(data, SweepSpec("bath_temp_C", ("probe_mV",), max_order=10,
                                 scheme=SchemeSpec("loo")))
    rep = run_checks(data, an, candidates=[(2, 0.0), (8, 0.0)])
    assert "serial_dependence" not in rep.codes()
    assert "period_shift" not in rep.codes()
    assert any("listed by the input probe_mV" in n for n in rep.notes)
    ext = rep.by_code("extrapolation")
    assert ext is not None and ext.details["cells"] == [[8, 0.0]]


def test_drifting_demo_log_under_shuffled_folds():
    # demo_data/README.md: AR(1) channels, feed flow raised by ~1.6 SD in the last 25%
    from engine.loading import load_table, prepare
    lt = load_table(REPO / "demo_data" / "drifting_line_sensors.csv")
    inputs = ["inlet_temp_C", "jacket_temp_C", "feed_pressure_kPa", "feed_flow_L_min",
              "stirrer_speed_rpm", "coolant_flow_L_min"]
    data = prepare(lt.frame, "yield_pct", inputs, order_column="minute")
    spec = SweepSpec("yield_pct", tuple(inputs), max_order=3,
                     scheme=SchemeSpec("kfold", order_column="minute"))
    rep = run_checks(data, analyse(data, spec))
    assert {"serial_dependence", "period_shift"} <= set(rep.codes())
    assert rep.by_code("period_shift").details["inputs_moved"][0] == "feed_flow_L_min"
    comp = rep.tables["scheme_comparison"].set_index("role")
    assert (comp.loc["same model, blocked folds", "validation_mse"]
            > comp.loc["your scheme, recommended model", "validation_mse"])


def test_checks_computed_ahead_give_the_same_report():
    # the row passes computed in a thread beside other work (`checks_ahead`) change nothing
    from engine.checks import checks_ahead, default_candidates
    from engine.compare import fit_candidates
    from engine.fingerprint import in_background
    data = _shift_data(seed=5, n=900)
    spec = SweepSpec("y", ("u", "v", "w"), max_order=3,
                     scheme=SchemeSpec("kfold", order_column="t"))
    an = analyse(data, spec)
    cells = default_candidates(an)
    models = fit_candidates(data, spec, cells)
    rec = models[cells[0]]
    plain = run_checks(data, an, cells, models=models)
    for ahead in (checks_ahead(data, an, rec), in_background(checks_ahead, data, an, rec)):
        early = run_checks(data, an, cells, models=models, ahead=ahead)
        assert early.codes() == plain.codes() and "period_shift" in early.codes()
        assert [f.to_dict() for f in early.findings] == [f.to_dict() for f in plain.findings]
        assert early.tables.keys() == plain.tables.keys()
        for key, table in plain.tables.items():
            assert early.tables[key].equals(table), key
    # residuals of another fit than the one checked are not used for Durbin-Watson
    other = fit_candidates(data, spec, [(1, 0.0)])[(1, 0.0)]
    mixed = run_checks(data, an, cells, models=models, ahead=checks_ahead(data, an, other))
    assert mixed.tables["serial"].equals(plain.tables["serial"])


def test_probe_points_take_numpy_percentiles_and_ends():
    # reference: numpy.percentile (linear interpolation), numpy.median, min and max
    from engine.checks import probe_points
    rng = np.random.default_rng(8)
    X = np.column_stack([rng.normal(size=1001), np.round(rng.uniform(0, 3, 1001), 1),
                         rng.exponential(size=1001)])
    t = probe_points(X)
    med = np.median(X, axis=0)
    for j in range(X.shape[1]):
        rows = t[t["input_index"] == j].set_index("where")
        assert rows.loc["1st percentile", "x"] == np.percentile(X[:, j], 1)
        assert rows.loc["99th percentile", "x"] == np.percentile(X[:, j], 99)
        span = X[:, j].max() - X[:, j].min()
        assert rows.loc["10% past the largest value", "x"] == X[:, j].max() + 0.1 * span
        assert rows.loc["25% below the smallest value", "x"] == X[:, j].min() - 0.25 * span
        for point in rows["point"]:
            assert np.array_equal(np.delete(point, j), np.delete(med, j))


def test_suggested_gap_is_capped_at_half_a_block():
    assert suggested_gap(0.0, 1000, 5) == 0
    assert suggested_gap(0.5, 1000, 5) == math.ceil(3 / math.log(2))
    assert suggested_gap(0.999, 1000, 5) == 100
    assert suggested_gap(1.0, 1000, 5) == 100


def test_findings_serialise_and_carry_the_required_fields(few_points):
    data, an = few_points
    rep = run_checks(data, an, candidates=[(2, 0.0), (9, 0.0)])
    assert isinstance(rep, CheckReport) and rep.findings
    for f in rep.findings:
        assert isinstance(f, Finding)
        d = f.to_dict()
        assert {"code", "message", "value", "advice", "severity"} <= set(d)
        assert d["severity"] in ("caution", "serious")
        assert d["code"] in CHECK_CODES
        assert d["message"].endswith(".") and d["advice"]
        json.dumps(d)
    assert len(rep.codes()) == len(set(rep.codes()))


def test_progress_is_reported():
    rng = np.random.default_rng(2)
    x = rng.uniform(0, 1, 100)
    data = ArrayData(x, x + rng.normal(scale=0.1, size=100), ("x",), "y")
    an = analyse(data, SweepSpec("y", ("x",), max_order=2))
    seen = []
    run_checks(data, an, progress=lambda f, m: seen.append((f, m)))
    assert seen[0][0] == 0.0 and seen[-1][0] == 1.0
    assert all(isinstance(m, str) and m for _, m in seen)


# ---------------------------------------------------------------------------
# few validation rows
# ---------------------------------------------------------------------------
def _demo_calibration():
    from engine.loading import load_table, prepare
    loaded = load_table(REPO / "demo_data" / "calibration_curve.csv")
    return prepare(loaded.frame, "bath_temp_C", ["probe_mV"])


def test_few_validation_rows_fires_for_a_tiny_holdout():
    from engine.checks import MIN_VALIDATION_ROWS
    data = _demo_calibration()
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=3, penalties=(0.0, 0.1),
                     scheme=SchemeSpec("holdout", holdout_fraction=0.001))
    analysis = analyse(data, spec)
    held = [len(v) for v in analysis.plan.valid_sets]
    assert held == [1]                      # the scheme really validates on one row
    rep = run_checks(data, analysis)
    f = rep.by_code("few_validation_rows")
    assert f is not None and f.severity == "serious"
    assert f.value == 1 and f.details["threshold"] == MIN_VALIDATION_ROWS == 10
    assert "only 1 row held out" in f.message and "common practice" in f.message
    # 1/sqrt(2m): the large-sample standard error of a sample standard deviation over sigma
    # (a handbook result for normal errors), 71% at m = 1
    assert "\u00b171%" in f.message
    assert "holdout fraction" in f.advice and "k-fold" in f.advice
    row = rep.tables["summary"].set_index("code").loc["few_validation_rows"]
    assert bool(row["fired"]) and row["value"] == 1


def test_few_validation_rows_quiet_for_five_fold_on_the_demo():
    data = _demo_calibration()            # 24 rows: 5 folds of 4-5 rows, every row held out once
    spec = SweepSpec("bath_temp_C", ("probe_mV",), max_order=3, penalties=(0.0, 0.1),
                     scheme=SchemeSpec("kfold", folds=5))
    analysis = analyse(data, spec)
    assert sorted(len(v) for v in analysis.plan.valid_sets) == [4, 5, 5, 5, 5]
    rep = run_checks(data, analysis)
    assert rep.by_code("few_validation_rows") is None
    row = rep.tables["summary"].set_index("code").loc["few_validation_rows"]
    assert not bool(row["fired"]) and row["value"] == 24


def test_few_validation_rows_reaches_the_command_line_and_the_summary(demo_dir, tmp_path, capsys):
    from engine.cli import main
    out = tmp_path / "pack"
    code = main(["run", str(demo_dir / "calibration_curve.csv"), "--target", "bath_temp_C",
                 "--max-order", "2", "--penalties", "0,0.1", "--scheme", "holdout",
                 "--holdout-fraction", "0.001", "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0
    assert "Warning (serious): The validation error rests on only 1 row held out" in printed
    summary = json.loads((out / "summary.json").read_text())
    codes = [w["code"] for w in summary["warnings"]]
    assert "few_validation_rows" in codes
    assert "rests on only 1 row" in (out / "summary.md").read_text()
