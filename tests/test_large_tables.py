"""Large-table routes (summaries, streamed passes, seeded samples) against the row-wise routes.

The row-wise routes are themselves checked against scikit-learn and NIST
elsewhere; here the same request runs both ways on a table small enough for
both, with the size switch lowered.
"""
from __future__ import annotations

import numpy as np
import pytest

from engine import ArrayData, SchemeSpec, SweepSpec, analyse
from engine import checks as C
from engine import compare, summaries


def _data(n=3000, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-2, 3, size=(n, 3)) + [10, 0, 100]
    e = np.zeros(n)
    for i in range(1, n):          # serially dependent noise
        e[i] = 0.7 * e[i - 1] + rng.normal(0, 0.3)
    y = 1 + 0.5 * X[:, 0] - 0.2 * X[:, 1] ** 2 + 0.01 * X[:, 2] + e
    return ArrayData(X, y, inputs=("a", "b", "c"), target="y")


@pytest.fixture
def large_route(monkeypatch):
    """Switch the large-table routes on for small tables (and sample nothing)."""
    def on(sample_rows=10**9):
        monkeypatch.setattr(compare, "LARGE_ROWS", 100)
        monkeypatch.setattr(C, "LARGE_ROWS", 100)
        monkeypatch.setattr(summaries, "SAMPLE_ROWS", sample_rows)
        monkeypatch.setattr(C, "SAMPLE_ROWS", sample_rows)
    return on


@pytest.mark.parametrize("scheme", [SchemeSpec("kfold", folds=5), SchemeSpec("blocked", folds=4, gap=10)])
def test_checks_from_summaries_match_the_row_wise_checks(scheme, large_route, monkeypatch):
    data = _data()
    spec = SweepSpec("y", ("a", "b", "c"), max_order=3, scheme=scheme, seed=3)
    analysis = analyse(data, spec)
    cells = [(1, 0.0), (3, 0.0), (3, 1.0)]
    exact = C.run_checks(data, analysis, cells)
    large_route()
    # with the sample covering every row the summaries route must give the same numbers
    monkeypatch.setattr(summaries, "SAMPLE_ROWS", 10**9)
    fast = C.run_checks(data, analysis, cells)
    assert exact.codes() == fast.codes()
    for name in ("serial", "conditioning"):
        a, b = exact.tables[name], fast.tables[name]
        col = "value" if name == "serial" else "condition_number"
        np.testing.assert_allclose(b[col].to_numpy(float), a[col].to_numpy(float), rtol=1e-7)
    la, lb = exact.tables["leverage"], fast.tables["leverage"]
    for col in ("threshold", "validation_share_above", "training_share_above",
                "max_validation_leverage"):
        np.testing.assert_allclose(lb[col].to_numpy(float), la[col].to_numpy(float),
                                   rtol=1e-7, atol=1e-12)
    assert any("one pass over the rows" in n for n in fast.notes)


def test_sampled_leverage_is_stated_and_close(large_route):
    data = _data(6000, seed=1)
    spec = SweepSpec("y", ("a", "b", "c"), max_order=2, scheme=SchemeSpec("kfold", folds=3))
    analysis = analyse(data, spec)
    exact = C.run_checks(data, analysis, [(2, 0.0)])
    large_route(sample_rows=1500)
    fast = C.run_checks(data, analysis, [(2, 0.0)])
    la, lb = exact.tables["leverage"], fast.tables["leverage"]
    np.testing.assert_allclose(lb["threshold"], la["threshold"], rtol=1e-9)
    # shares from 1,500 of ~2,000 held-out rows per split: within sampling error
    assert abs(float(lb["validation_share_above"][0]) - float(la["validation_share_above"][0])) < 0.03
    assert bool(lb["sampled"][0])
    assert any("seeded sample of at most 1,500" in n for n in fast.notes)


@pytest.mark.parametrize("penalty", [0.0, 0.3])
def test_candidate_fits_from_summaries_match_qr(penalty, large_route):
    data = _data(4000, seed=2)
    spec = SweepSpec("y", ("a", "b", "c"), max_order=3, interactions=True)
    exact = compare.fit_candidates(data, spec, [(3, penalty), (2, penalty)])
    large_route()
    fast = compare.fit_candidates(data, spec, [(3, penalty), (2, penalty)])
    for key in exact:
        a, b = exact[key], fast[key]
        np.testing.assert_allclose(b.coefficients, a.coefficients, rtol=1e-8,
                                   atol=1e-10 * np.abs(a.coefficients).max())
        np.testing.assert_allclose(b.predict(data.X), a.predict(data.X), rtol=1e-10, atol=1e-9)
        np.testing.assert_allclose(b.condition_number, a.condition_number, rtol=1e-6)
        np.testing.assert_allclose(b.effective_df, a.effective_df, rtol=1e-9)
        np.testing.assert_allclose(b.train_mse, a.train_mse, rtol=1e-9)


def test_indicator_columns_found_from_the_first_rows_match_the_full_definition():
    # Reference: the definition checked on every row with numpy (a column of only 0 and 1,
    # neither constant; two such columns never 1 together); the quick route screens the
    # first rows and checks only the columns that pass there.
    from engine.design import indicator_structure
    rng = np.random.default_rng(4)
    n = 2000
    level = rng.integers(0, 3, n)
    X = np.column_stack([
        rng.normal(size=n),                          # continuous
        (level == 0).astype(float),                  # two levels of one text column
        (level == 1).astype(float),
        np.r_[np.ones(300), np.zeros(n - 300)],      # 0/1 but all ones in the first rows
        np.r_[np.zeros(n - 1), 2.0],                 # 0 everywhere but one late 2
        rng.integers(0, 2, n).astype(float),         # independent 0/1
    ])
    binary = [j for j in range(X.shape[1])
              if np.all((X[:, j] == 0) | (X[:, j] == 1)) and X[:, j].any() and not X[:, j].all()]
    pairs = [(a, b) for i, a in enumerate(binary) for b in binary[i + 1:]
             if not np.any((X[:, a] == 1) & (X[:, b] == 1))]
    assert indicator_structure(X) == (tuple(binary), tuple(pairs))
    assert binary == [1, 2, 3, 5] and (1, 2) in pairs


@pytest.mark.parametrize("scheme", [SchemeSpec("kfold", folds=5), SchemeSpec("repeated", folds=3, repeats=2)])
def test_all_rows_and_fold_summaries_from_the_sweep_pieces_match_numpy(scheme):
    # Reference: numpy mean and centred cross-products of the expanded design rows
    # (terms then target), for all rows and for each first-round training set.
    data = _data(1500, seed=5)
    spec = SweepSpec("y", ("a", "b", "c"), max_order=3, interactions=True, scheme=scheme)
    analysis = analyse(data, spec)
    R = np.column_stack([analysis.basis.expand(data.X), data.y])

    def direct(rows):
        Z = R[rows]
        m = Z.mean(axis=0)
        return m, (Z - m).T @ (Z - m)
    s = analysis.all_rows_summary()
    m, M = direct(np.arange(len(data.y)))
    assert s.n == len(data.y)
    np.testing.assert_allclose(s.mean, m, rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(s.comoment, M, rtol=1e-10, atol=1e-9)
    fs = analysis.fold_summaries()
    assert len(fs.splits) == scheme.folds
    for i, (tr, _) in enumerate(fs.splits):
        m, M = direct(tr)
        assert fs.n_t[i] == tr.size
        np.testing.assert_allclose(fs.mean_t[i], m, rtol=1e-11, atol=1e-12)
        np.testing.assert_allclose(fs.comoment_t[i], M, rtol=1e-10, atol=1e-9)


def test_candidate_fits_from_the_sweep_summary_match_their_own_pass(large_route):
    data = _data(3000, seed=6)
    spec = SweepSpec("y", ("a", "b", "c"), max_order=3)
    analysis = analyse(data, spec)
    large_route()
    own = compare.fit_candidates(data, spec, [(3, 0.5), (2, 0.0)])
    shared = compare.fit_candidates(data, spec, [(3, 0.5), (2, 0.0)],
                                    summary=analysis.all_rows_summary())
    for key in own:
        np.testing.assert_allclose(shared[key].coefficients, own[key].coefficients, rtol=1e-9,
                                   atol=1e-12 * np.abs(own[key].coefficients).max())
        np.testing.assert_allclose(shared[key].train_mse, own[key].train_mse, rtol=1e-9)


def test_sweep_and_learning_curve_from_one_shared_pass(monkeypatch):
    # Large tables summarise (fold piece, row block) once for both the sweep and the
    # learning curve. Reference for the curve: scikit-learn StandardScaler -> Ridge on the
    # per-input powers fitted to the first `size` training rows of a split (row order, as
    # sklearn.model_selection.learning_curve takes them); the sweep must equal its own pass.
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    import engine.analysis as A
    data = _data(2500, seed=7)
    spec = SweepSpec("y", ("a", "b", "c"), max_order=3, penalties=(0.0, 0.5),
                     scheme=SchemeSpec("kfold", folds=4), seed=2)
    own = analyse(data, spec)
    assert own.learning_pieces is None
    monkeypatch.setattr(A, "LARGE_ROWS", 100)
    shared = analyse(data, spec)
    assert shared.learning_pieces is not None
    np.testing.assert_allclose(shared.validation["validation_mse"],
                               own.validation["validation_mse"], rtol=1e-9)
    lc_own = A.learning_curve(data, spec, orders=[1, 3])
    lc = A.learning_curve(data, spec, orders=[1, 3], pieces=shared.learning_pieces)
    np.testing.assert_allclose(lc.folds["validation_mse"], lc_own.folds["validation_mse"],
                               rtol=1e-9)
    np.testing.assert_allclose(lc.table["train_mse"], lc_own.table["train_mse"], rtol=1e-9)
    tr, va = shared.plan.train_sets[1], shared.plan.valid_sets[1]
    size = int(lc.folds["train_size"].unique()[1])
    first = tr[:size]
    powers = np.column_stack([data.X ** k for k in (1, 2, 3)])   # no interaction terms
    m = make_pipeline(StandardScaler(), Ridge(alpha=0.5)).fit(powers[first], data.y[first])
    want = np.mean((data.y[va] - m.predict(powers[va])) ** 2)
    row = lc.folds[(lc.folds["order"] == 3) & (lc.folds["penalty"] == 0.5)
                   & (lc.folds["train_size"] == size) & (lc.folds["fold"] == 2)]
    assert float(row["validation_mse"].iloc[0]) == pytest.approx(want, rel=1e-7)


def test_monotone_screen_matches_the_definition_on_every_row():
    # Reference: numpy.diff over all rows (never falls, or never rises); the quick route
    # screens the first rows before looking at the rest.
    from engine.checks import _monotone
    rng = np.random.default_rng(8)
    up = np.sort(rng.normal(size=3000))
    late_dip = up.copy()
    late_dip[2500] = up[2400]
    cases = [up, up[::-1], late_dip, rng.normal(size=3000), np.ones(3000), up[:10]]
    for v in cases:
        d = np.diff(v)
        assert _monotone(v) == bool(np.all(d >= 0) or np.all(d <= 0))
    assert _monotone(up) and not _monotone(late_dip)


@pytest.mark.parametrize("scheme", [SchemeSpec("kfold", folds=5), SchemeSpec("blocked", folds=4, gap=10)])
def test_serial_check_from_the_intervals_residuals_matches_its_own_pass(scheme, large_route):
    # The intervals form every first-round validation residual of the recommended (ridge)
    # cell; the serial-dependence check reads them instead of its own pass. Reference for
    # the residuals: scikit-learn StandardScaler -> Ridge per split on the raw powers.
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from engine.intervals import prediction_intervals
    data = _data()
    spec = SweepSpec("y", ("a", "b", "c"), max_order=2, penalties=(0.0, 0.3), scheme=scheme,
                     seed=3)
    analysis = analyse(data, spec)
    rec = analysis.recommendation.recommended
    large_route()
    pi = prediction_intervals(data, spec, rec.order, rec.penalty)
    rows, res = pi.oof
    P = np.column_stack([data.X ** k for k in range(1, rec.order + 1)])
    for tr, va in zip(analysis.plan.train_sets, analysis.plan.valid_sets):
        if np.isin(va, rows).all() and va.size:
            m = make_pipeline(StandardScaler(), Ridge(alpha=rec.penalty)).fit(P[tr], data.y[tr])
            got = res[np.searchsorted(rows, va)]
            np.testing.assert_allclose(got, data.y[va] - m.predict(P[va]), rtol=1e-7, atol=1e-9)
    own = C.run_checks(data, analysis)
    shared = C.run_checks(data, analysis, oof=pi.oof)
    np.testing.assert_allclose(shared.tables["serial"]["value"].to_numpy(float),
                               own.tables["serial"]["value"].to_numpy(float), rtol=1e-9)
    assert shared.codes() == own.codes()
