"""How sure: error interval, prediction intervals, and the learning curve carried forward."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.optimize import curve_fit
from sklearn.linear_model import LinearRegression, Ridge
from sklearn.model_selection import KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler

from engine.analysis import ArrayData, analyse, learning_curve
from engine.extrapolation import fit_power_law, rows_outlook
from engine.intervals import cvplus_bounds, error_interval, prediction_intervals
from engine.spec import SchemeSpec, SweepSpec


def _cubic(n, seed, sd=1.0):
    rng = np.random.default_rng(seed)
    x = rng.uniform(-2, 2, n)
    return x, 1.0 + x - 0.5 * x ** 3 + rng.normal(0, sd, n)


def _spec(order=3, penalty=0.0, scheme=None, seed=0, **kw):
    return SweepSpec("y", ("x",), orders=tuple(range(1, order + 1)), penalties=(penalty,),
                     scheme=scheme or SchemeSpec("kfold", folds=5), seed=seed, **kw)


# ---------------------------------------------------------------------------
# prediction intervals against reference libraries and definitions
# ---------------------------------------------------------------------------
def test_analytic_interval_matches_statsmodels_ols_prediction_interval():
    # Reference: statsmodels OLS get_prediction(...).summary_frame(alpha) "obs_ci" columns,
    # the textbook least-squares prediction interval y_hat ± t * s * sqrt(1 + x'(X'X)^-1 x).
    sm = pytest.importorskip("statsmodels.api")
    x, y = _cubic(80, 1)
    pi = prediction_intervals(ArrayData(x, y), _spec(), 3, 0.0, level=0.9)
    xn = np.array([-2.5, -1.0, 0.0, 0.7, 2.2])
    V = np.column_stack([x ** k for k in range(4)])
    ref = sm.OLS(y, V).fit().get_prediction(np.column_stack([xn ** k for k in range(4)]))
    frame = ref.summary_frame(alpha=0.1)
    got = pi.bounds(xn)
    np.testing.assert_allclose(got["prediction"], frame["mean"], rtol=1e-9)
    np.testing.assert_allclose(got["analytic_low"], frame["obs_ci_lower"], rtol=1e-8)
    np.testing.assert_allclose(got["analytic_high"], frame["obs_ci_upper"], rtol=1e-8)


def test_quantiles_are_bit_for_bit_scipy_stats_ppf():
    # reference: scipy.stats.t.ppf and scipy.stats.norm.ppf, the same bits (including +0.0
    # at the median, inf at q = 1 and nan above 1)
    from engine.intervals import _normal_quantile, _t_quantile

    levels = [0.0, 1e-12, 0.05, 0.5, 0.68, 0.8, 0.9, 0.95, 0.975, 0.99, 0.999, 1 - 1e-12, 1.0,
              1.5, *np.linspace(0.0, 1.0, 41)]
    dfs = [1e-3, 0.5, 1.0, 1.5, 2.0, 3.0, 7.25, 10.0, 29.0, 30.0, 99.5, 1e3, 1e5, 1e7,
           1e12, np.inf]
    for level in levels:
        q = 0.5 + level / 2.0
        z, ref = _normal_quantile(q), stats.norm.ppf(q)
        assert type(z) is type(ref) and (np.array(z).tobytes() == np.array(ref).tobytes()), level
        for df in dfs:
            t, ref = _t_quantile(q, df), stats.t.ppf(q, df)
            assert type(t) is type(ref), (level, df)
            assert np.array(t).tobytes() == np.array(ref).tobytes(), (level, df, t, ref)


def test_ridge_interval_centre_and_variance_by_hand():
    # Reference: scikit-learn PolynomialFeatures -> StandardScaler -> Ridge for the centre;
    # the variance sigma^2 (1/n + z'(Z'Z + a I)^-1 Z'Z (Z'Z + a I)^-1 z) of the ridge fitted
    # value computed with numpy on the standardised design (Hoerl and Kennard's ridge).
    x, y = _cubic(60, 2)
    a = 3.0
    pi = prediction_intervals(ArrayData(x, y), _spec(penalty=a), 3, a, level=0.9)
    pipe = make_pipeline(PolynomialFeatures(3, include_bias=False), StandardScaler(),
                         Ridge(alpha=a)).fit(x[:, None], y)
    xn = np.array([-1.5, 0.3, 1.9])
    got = pi.bounds(xn)
    np.testing.assert_allclose(got["prediction"], pipe.predict(xn[:, None]), rtol=1e-9)
    P = np.column_stack([x ** k for k in (1, 2, 3)])
    mu, sd = P.mean(0), P.std(0)
    Z = (P - mu) / sd
    G = Z.T @ Z
    Ainv = np.linalg.inv(G + a * np.eye(3))
    zn = (np.column_stack([xn ** k for k in (1, 2, 3)]) - mu) / sd
    h = 1 / 60 + np.einsum("ij,jk,ki->i", zn, Ainv @ G @ Ainv, zn.T)
    H = Z @ Ainv @ Z.T
    edf = 1 + np.trace(H)
    resid = y - pipe.predict(x[:, None])
    s = math.sqrt(resid @ resid / (60 - edf))
    half = stats.t.ppf(0.95, 60 - edf) * s * np.sqrt(1 + h)
    np.testing.assert_allclose(got["analytic_high"] - got["prediction"], half, rtol=1e-8)


def test_cvplus_bounds_match_the_definition_by_sorting():
    # Reference: Barber, Candes, Ramdas, Tibshirani (Ann. Statist. 2021), K-fold CV+:
    # low = floor(alpha (n+1))-th smallest of mu_k(i)(x) - R_i, high = ceil((1-alpha)(n+1))-th
    # smallest of mu_k(i)(x) + R_i. Computed here by brute-force sorting.
    rng = np.random.default_rng(3)
    S, m = 4, 7
    radii = [np.sort(np.abs(rng.standard_t(3, size=s))) for s in (9, 10, 11, 12)]
    centres = rng.normal(size=(m, S))
    lo, hi = cvplus_bounds(centres, radii, level=0.8)
    N = sum(r.size for r in radii)
    k_lo, k_hi = math.floor(0.2 * (N + 1)), math.ceil(0.8 * (N + 1))
    for i in range(m):
        lows = np.sort(np.concatenate([centres[i, s] - radii[s] for s in range(S)]))
        highs = np.sort(np.concatenate([centres[i, s] + radii[s] for s in range(S)]))
        assert lo[i] == pytest.approx(lows[k_lo - 1], abs=1e-12)
        assert hi[i] == pytest.approx(highs[k_hi - 1], abs=1e-12)
    # too few residuals for the level: the interval is unbounded, as the definition says
    lo2, hi2 = cvplus_bounds(centres[:, :1], [radii[0][:5]], level=0.9)
    assert np.all(np.isinf(lo2)) and np.all(np.isinf(hi2))


def test_cvplus_bounds_on_many_residuals_with_ties_match_sorting():
    # Reference: the same definition (Barber et al. 2021) by brute-force sorting, on sets
    # large enough that the bracket of most points narrows to a single value of the union
    # before the float bisection ends, with repeated residuals and an offset centre.
    rng = np.random.default_rng(11)
    S, m = 5, 60
    radii = [np.sort(np.round(np.abs(rng.standard_t(3, size=s)), 2)) for s in (400, 500, 600,
                                                                                 700, 800)]
    centres = 1e3 + rng.normal(size=(m, 1)) * 5 + rng.normal(size=(m, S)) * 0.05
    for level in (0.5, 0.9):
        lo, hi = cvplus_bounds(centres, radii, level=level)
        N = sum(r.size for r in radii)
        alpha = 1 - level
        k_lo, k_hi = math.floor(alpha * (N + 1)), math.ceil((1 - alpha) * (N + 1))
        for i in range(m):
            lows = np.sort(np.concatenate([centres[i, s] - radii[s] for s in range(S)]))
            highs = np.sort(np.concatenate([centres[i, s] + radii[s] for s in range(S)]))
            # the bisection ends within one rounding of the sorted value
            assert lo[i] == pytest.approx(lows[k_lo - 1], rel=4e-16, abs=0)
            assert hi[i] == pytest.approx(highs[k_hi - 1], rel=4e-16, abs=0)


def test_split_models_reproduce_the_sweep_validation_errors():
    # The intervals reuse the sweep's splits and solver: the validation residuals of each
    # split model give back the sweep's per-split validation MSE (scikit-learn parity of
    # the sweep is tested in test_sweep_parity.py).
    x, y = _cubic(120, 4)
    spec = _spec(penalty=0.5)
    data = ArrayData(x, y)
    an = analyse(data, spec)
    pi = prediction_intervals(data, spec, 3, 0.5)
    got = np.array([np.mean(r ** 2) for r in pi.radii])
    np.testing.assert_allclose(got, an.sweep.valid_mse[2, 0, :], rtol=1e-9)


# ---------------------------------------------------------------------------
# error interval: nested cross-validation against a by-hand run
# ---------------------------------------------------------------------------
def _nested_cv_by_hand(X, y, folds: list, K: int, model) -> tuple[float, float, float, float]:
    """Bates, Hastie, Tibshirani (JASA 2023), Algorithm 1 (nested CV), by hand.

    ``folds`` holds one fold label per row for each repetition; ``model()`` makes a
    scikit-learn regressor fitted afresh on every training set. Returns the plain CV
    error, its naive standard error, the nested-CV standard error (bounded between
    the naive one and sqrt(K) times it) and the bias-corrected centre.
    """
    n = len(y)
    a_list, b_list, e_in_all, e_out_all = [], [], [], []
    for fold in folds:
        for k in range(K):
            te, tr = np.flatnonzero(fold == k), np.flatnonzero(fold != k)
            e_out = (y[te] - model().fit(X[tr], y[tr]).predict(X[te])) ** 2
            e_in = []
            for j in range(K):
                if j == k:
                    continue
                itr = np.flatnonzero((fold != k) & (fold != j))
                iva = np.flatnonzero(fold == j)
                m = model().fit(X[itr], y[itr])
                e_in.append((y[iva] - m.predict(X[iva])) ** 2)
            e_in = np.concatenate(e_in)
            a_list.append((e_in.mean() - e_out.mean()) ** 2)
            b_list.append(e_out.var(ddof=1) / e_out.size)
            e_in_all.append(e_in)
            e_out_all.append(e_out)
    err_ncv = np.concatenate(e_in_all).mean()
    e_all = np.concatenate(e_out_all)
    err_cv = e_all.mean()
    naive = e_all.std(ddof=1) / math.sqrt(n)
    se = math.sqrt(max(np.mean(a_list) - np.mean(b_list), 0) * (K - 1) / K)
    se = min(max(se, naive), math.sqrt(K) * naive)
    centre = err_ncv - (1 + (K - 2) / K) * (err_ncv - err_cv)
    return err_cv, naive, se, centre


def test_nested_cv_matches_a_by_hand_run_with_scikit_learn():
    # Reference: Bates, Hastie, Tibshirani (JASA 2023), Algorithm 1 (nested CV) with
    # scikit-learn LinearRegression fits on the same shuffled KFold outer folds.
    x, y = _cubic(90, 5)
    K = 5
    spec = _spec(seed=7)
    ei = error_interval(ArrayData(x, y), spec, 3, 0.0, repeats=1, folds=K, level=0.9)
    X = np.column_stack([x ** k for k in (1, 2, 3)])
    fold = np.empty(90, dtype=np.int64)
    for k, (_, te) in enumerate(KFold(K, shuffle=True, random_state=7).split(X)):
        fold[te] = k
    err_cv, naive, se, centre = _nested_cv_by_hand(X, y, [fold], K, LinearRegression)
    z = stats.norm.ppf(0.95)
    assert ei.cv_estimate == pytest.approx(err_cv, rel=1e-9)
    assert ei.naive_se == pytest.approx(naive, rel=1e-9)
    assert ei.se == pytest.approx(se, rel=1e-9)
    assert ei.estimate == pytest.approx(centre, rel=1e-9)
    assert (ei.low, ei.high) == pytest.approx((centre - z * se, centre + z * se), rel=1e-9)


def test_one_split_scheme_gets_a_real_interval_from_the_validation_rows():
    x, y = _cubic(100, 6)
    spec = _spec(scheme=SchemeSpec("holdout", holdout_fraction=0.3))
    ei = error_interval(ArrayData(x, y), spec, 3, 0.0)
    tr, va = np.arange(70), np.arange(70, 100)
    X = np.column_stack([x ** k for k in (1, 2, 3)])
    e = (y[va] - LinearRegression().fit(X[tr], y[tr]).predict(X[va])) ** 2
    se = e.std(ddof=1) / math.sqrt(30)
    assert ei.method == "validation rows"
    assert ei.se == pytest.approx(se, rel=1e-9) and ei.se > 0
    assert ei.estimate == pytest.approx(e.mean(), rel=1e-9)
    pi = prediction_intervals(ArrayData(x, y), spec, 3, 0.0)
    assert pi.checked_on == "later period" and pi.checked_rows == 30


# ---------------------------------------------------------------------------
# simulation: the intervals cover at their nominal level
# ---------------------------------------------------------------------------
NODES, WEIGHTS = np.polynomial.legendre.leggauss(12)


def test_intervals_cover_at_their_nominal_level_in_simulation():
    # Simulation, fixed seeds, 200 replicates of n = 100 rows from a true cubic with
    # normal noise; nominal level 0.90. Stated tolerances: error interval 0.90 ± 0.06
    # (200 replicates: binomial SE 0.02; Bates et al. report near-nominal coverage);
    # prediction intervals on fresh rows and the coverage reported on validation rows
    # 0.90 ± 0.03. The benchmark benchmarks/interval_coverage.py runs 1,000 replicates.
    spec = _spec()
    hit_err, fresh_a, fresh_c, rep_a, rep_c = [], [], [], [], []
    xq = 2.0 * NODES
    for r in range(200):
        x, y = _cubic(100, 10_000 + r)
        data = ArrayData(x, y)
        s = _spec(seed=r)
        ei = error_interval(data, s, 3, 0.0, repeats=3)
        pi = prediction_intervals(data, s, 3, 0.0)
        fq = pi.bounds(xq)["prediction"].to_numpy()
        truth_q = 1.0 + xq - 0.5 * xq ** 3
        # true error of the all-rows model: noise variance + mean squared bias on U(-2, 2),
        # exact by Gauss-Legendre quadrature (the integrand is a polynomial of degree 6)
        err = 1.0 + 0.5 * float(np.sum(WEIGHTS * (truth_q - fq) ** 2))
        hit_err.append(ei.low <= err <= ei.high)
        rng = np.random.default_rng(50_000 + r)
        xn = rng.uniform(-2, 2, 100)
        yn = 1.0 + xn - 0.5 * xn ** 3 + rng.normal(0, 1, 100)
        b = pi.bounds(xn)
        fresh_a.append(np.mean((yn >= b["analytic_low"]) & (yn <= b["analytic_high"])))
        fresh_c.append(np.mean((yn >= b["cvplus_low"]) & (yn <= b["cvplus_high"])))
        rep_a.append(pi.analytic_coverage)
        rep_c.append(pi.cvplus_coverage)
    assert abs(np.mean(hit_err) - 0.90) <= 0.06, np.mean(hit_err)
    for v in (fresh_a, fresh_c, rep_a, rep_c):
        assert abs(np.mean(v) - 0.90) <= 0.03, np.mean(v)


# ---------------------------------------------------------------------------
# learning curve carried forward
# ---------------------------------------------------------------------------
def test_power_law_fit_agrees_with_scipy_curve_fit():
    # Reference: scipy.optimize.curve_fit (Levenberg-Marquardt) on the same model and data.
    n = np.array([50, 100, 200, 400, 800, 1600], float)
    rng = np.random.default_rng(8)
    e = 3.0 * n ** -0.7 + 0.25 + rng.normal(0, 0.002, n.size)
    fit = fit_power_law(n, e)
    p, _ = curve_fit(lambda n, a, b, c: a * n ** -b + c, n, e, p0=(1.0, 0.5, 0.1))
    np.testing.assert_allclose([fit.a, fit.b, fit.c], p, rtol=1e-4)


def test_extrapolation_from_the_first_half_predicts_the_full_size():
    # Held-back truth: a 4,000-row simulated table; the curve is fitted on training sizes up
    # to half the largest and must predict the measured validation error at the full size
    # (2x) within its stated band (lowest to highest per-split prediction).
    x, y = _cubic(4000, 9)
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3, 4, 5, 6), penalties=(0.0,),
                     scheme=SchemeSpec("kfold", folds=5),
                     learning_sizes=(0.02, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 1.0))
    lc = learning_curve(ArrayData(x, y), spec)
    half = lc.table["train_size"].max() / 2
    out = rows_outlook(lc.folds[lc.folds["train_size"] <= half],
                       lc.table[lc.table["train_size"] <= half], (3, 0.0), 2000, factors=(2.0,))
    full = lc.table[lc.table["train_size"] == lc.table["train_size"].max()].set_index("order")
    tab = out.table.set_index("order")
    for q in (2, 3, 4, 6):
        assert tab.loc[q, "status"] == "fitted"
        assert tab.loc[q, "low_at_2x"] <= full.loc[q, "validation_mse"] <= tab.loc[q, "high_at_2x"]
    # the straight line and quadratic miss the cubic: more rows cannot fix them
    assert tab.loc[1, "floor"] > tab.loc[3, "floor"] + 0.2
    assert out.supported_order[2.0] >= 3 and not out.declined


def test_extrapolation_declines_in_plain_words_when_the_curve_does_not_fall():
    rows = []
    for fold in (1, 2, 3):
        for size, e in zip((20, 40, 60, 80, 100), (1.0, 0.8, 1.6, 0.9, 0.85)):
            rows.append((2, 0.0, size, size, fold, 0.5, e + 0.001 * fold))
    folds = pd.DataFrame(rows, columns=["order", "penalty", "train_size", "rows_used", "fold",
                                        "train_mse", "validation_mse"])
    table = (folds.groupby(["order", "penalty", "train_size"]).agg(
        validation_mse=("validation_mse", "mean"),
        validation_mse_se=("validation_mse", lambda v: v.std(ddof=1) / math.sqrt(len(v))))
        .reset_index())
    out = rows_outlook(folds, table, (2, 0.0), 125)
    assert out.declined and out.supported_order[5.0] is None
    assert "does not fall steadily" in out.verdict[0]
    assert "rises from 0.802 at 40 rows to 1.602 at 60" in out.verdict[0]


# ---------------------------------------------------------------------------
# large tables: the same quantities from group summaries and one residual pass
# ---------------------------------------------------------------------------
def test_row_sets_split_into_atoms_like_numpy_unique_on_membership_rows():
    # Reference: numpy.unique over the rows of the explicit (rows x sets) membership
    # matrix; the atoms must be exactly its distinct non-empty rows.
    from engine.intervals import _atoms
    rng = np.random.default_rng(3)
    n = 500
    sets = [np.flatnonzero(rng.random(n) < 0.5) for _ in range(90)]   # > 40 sets: renumbering
    labels, n_atoms, member = _atoms(n, sets + [np.arange(0)])
    B = np.zeros((n, len(sets) + 1), dtype=bool)
    for j, s in enumerate(sets):
        B[s, j] = True
    uniq, inv = np.unique(B, axis=0, return_inverse=True)
    used = B.any(axis=1)
    assert n_atoms == int(uniq.any(axis=1).sum())
    assert np.all((labels >= 0) == used)
    # same partition of the used rows, and each atom's membership is its rows' membership
    pairs = set(zip(labels[used].tolist(), inv.ravel()[used].tolist()))
    assert len(pairs) == n_atoms
    np.testing.assert_array_equal(member[:, labels[used]].T.astype(bool), B[used])


@pytest.mark.parametrize("from_sweep,penalty", [(False, 0.0), (True, 0.0), (True, 0.3)])
def test_grouped_nested_cv_of_a_large_table_matches_scikit_learn_on_the_same_folds(
        monkeypatch, from_sweep, penalty):
    # Reference: Bates, Hastie, Tibshirani (JASA 2023), Algorithm 1, with scikit-learn
    # LinearRegression fitted row by row on exactly the folds the large-table route uses
    # (rows dealt once into seeded groups, groups dealt afresh into folds per repetition);
    # the groups are summarised by the intervals' own pass or by the sweep's pass.
    import engine.analysis as A
    import engine.intervals as iv
    monkeypatch.setattr(iv, "LARGE_ROWS", 100)
    monkeypatch.setattr(A, "LARGE_ROWS", 100)
    n, K, R, seed = 600, 3, 2, 11
    x, y = _cubic(n, 21)
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3, 4), penalties=(penalty,),
                     scheme=SchemeSpec("kfold", folds=K), seed=seed)
    groups = analyse(ArrayData(x, y), spec).row_groups if from_sweep else None
    assert (groups is not None) == from_sweep
    ei = error_interval(ArrayData(x, y), spec, 3, penalty, repeats=R, folds=K, level=0.9,
                        groups=groups)

    def model():   # scikit-learn Ridge on StandardScaler'd raw powers for a penalty
        return (LinearRegression() if penalty == 0 else
                make_pipeline(StandardScaler(), Ridge(alpha=penalty)))
    assert "groups" in ei.notes[-1] and f"seed {seed}" in ei.notes[-1]
    X = np.column_stack([x ** k for k in (1, 2, 3)])
    if from_sweep:
        group, G = groups.label, groups.n_groups
        assert f"{G} groups" in ei.notes[-1]
    else:
        G = K * iv.GROUPS_PER_FOLD
        group = np.empty(n, dtype=np.int64)
        group[np.random.default_rng(seed).permutation(n)] = np.arange(n) % G
    folds = []
    for r in range(R):
        of = np.empty(G, dtype=np.int64)
        of[np.random.default_rng(seed + r).permutation(G)] = np.arange(G) % K
        folds.append(of[group])
    err_cv, naive, se, centre = _nested_cv_by_hand(X, y, folds, K, model)
    assert ei.cv_estimate == pytest.approx(err_cv, rel=1e-9)
    assert ei.naive_se == pytest.approx(naive, rel=1e-9)
    assert ei.se == pytest.approx(se, rel=1e-9)
    assert ei.estimate == pytest.approx(centre, rel=1e-9)
    assert ei.repeats == R and ei.folds == K


def test_large_table_prediction_intervals_match_row_by_row_fits(monkeypatch):
    # Reference: scikit-learn Ridge on PolynomialFeatures -> StandardScaler, fitted row by
    # row on each split's training rows; the CV+ radii are the sorted absolute validation
    # residuals (Barber et al. 2021), here formed from summaries and one residual pass.
    import engine.intervals as iv
    monkeypatch.setattr(iv, "LARGE_ROWS", 100)
    x, y = _cubic(400, 22)
    a = 0.3
    spec = _spec(penalty=a, seed=5)
    pi = prediction_intervals(ArrayData(x, y), spec, 3, a)
    from engine.analysis import plan_for
    plan = plan_for(ArrayData(x, y), spec.scheme, spec.seed)
    for s, (tr, va) in enumerate(zip(plan.train_sets, plan.valid_sets)):
        m = make_pipeline(PolynomialFeatures(3, include_bias=False), StandardScaler(),
                          Ridge(alpha=a)).fit(x[tr, None], y[tr])
        want = np.sort(np.abs(y[va] - m.predict(x[va, None])))
        np.testing.assert_allclose(pi.radii[s], want, rtol=1e-8, atol=1e-10)


def test_outlook_from_a_shared_learning_curve_equals_its_own_run():
    # The pack runs one learning curve of every order and every penalty and the outlook
    # reads its rows; each row is computed on its own, so the outlook must equal the one
    # that runs its own curve at just the penalties it needs.
    from engine.extrapolation import more_rows
    x, y = _cubic(600, 12)
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3, 4), penalties=(0.0, 0.1, 1.0),
                     scheme=SchemeSpec("kfold", folds=4))
    data = ArrayData(x, y)
    an = analyse(data, spec)
    own = more_rows(an, data)
    shared = more_rows(an, data, learning=learning_curve(data, an.spec))
    pd.testing.assert_frame_equal(shared.table, own.table, check_exact=False, rtol=1e-9)
    assert shared.verdict == own.verdict


@pytest.mark.parametrize("scheme", [SchemeSpec("kfold", folds=5), SchemeSpec("blocked", folds=4, gap=5)])
def test_prediction_intervals_from_the_sweep_pieces_match_row_by_row_fits(scheme):
    # Every training set of the intervals is a union of the sweep's pieces. Reference:
    # scikit-learn StandardScaler -> Ridge on the raw powers, fitted row by row on each
    # split's training rows (CV+ radii) and on the folds inside them (coverage).
    x, y = _cubic(500, 23)
    a = 0.2
    spec = SweepSpec("y", ("x",), orders=(1, 2, 3, 4), penalties=(0.0, a), scheme=scheme, seed=3)
    data = ArrayData(x, y)
    an = analyse(data, spec)
    from engine.intervals import CellDesign, _from_pieces
    assert _from_pieces(an.plan, an.sweep.pieces, an.basis,
                        CellDesign.make(data, spec, 3, a)) is not None   # the pieces route runs
    rows = prediction_intervals(data, spec, 3, a)
    shared = prediction_intervals(data, spec, 3, a, plan=an.plan, pieces=an.sweep.pieces,
                                  pieces_basis=an.basis)
    P = np.column_stack([x ** k for k in (1, 2, 3)])
    for s, (tr, va) in enumerate(zip(an.plan.train_sets, an.plan.valid_sets)):
        m = make_pipeline(StandardScaler(), Ridge(alpha=a)).fit(P[tr], y[tr])
        want = np.sort(np.abs(y[va] - m.predict(P[va])))
        np.testing.assert_allclose(shared.radii[s], want, rtol=1e-8, atol=1e-10)
    pd.testing.assert_frame_equal(shared.per_split, rows.per_split, check_exact=False, rtol=1e-9)
    assert shared.cvplus_width == pytest.approx(rows.cvplus_width, rel=1e-9)
    assert shared.analytic_width == pytest.approx(rows.analytic_width, rel=1e-9)


@pytest.mark.parametrize("scheme", [SchemeSpec("kfold", folds=4),
                                    SchemeSpec("repeated", folds=4, repeats=2),
                                    SchemeSpec("blocked", folds=4, gap=5)])
def test_how_sure_one_pass_gives_the_separate_intervals(monkeypatch, scheme):
    # how_sure reads the rows once for the nested cross-validation's outer errors and the
    # prediction intervals' residuals; error_interval and prediction_intervals (checked
    # against scikit-learn above) read them once each. The numbers must agree.
    import engine.analysis as A
    import engine.intervals as iv
    monkeypatch.setattr(iv, "LARGE_ROWS", 100)
    monkeypatch.setattr(A, "LARGE_ROWS", 100)
    rng = np.random.default_rng(8)
    X = rng.uniform(-2, 2, size=(900, 2))
    y = 1 + X[:, 0] - 0.4 * X[:, 0] ** 3 + 0.5 * X[:, 1] ** 2 + rng.normal(0, 0.5, 900)
    data = ArrayData(X, y, ("a", "b"))
    spec = SweepSpec("y", ("a", "b"), orders=(1, 2, 3), penalties=(0.0, 0.5), scheme=scheme,
                     seed=4)
    an = analyse(data, spec)
    rec = an.recommendation.recommended
    sure = iv.how_sure(an, data)
    ei = error_interval(data, an.spec, rec.order, rec.penalty, groups=an.row_groups)
    pi = prediction_intervals(data, an.spec, rec.order, rec.penalty, plan=an.plan,
                              pieces=an.pieces, pieces_basis=an.basis)
    for key in ("estimate", "low", "high", "cv_estimate", "se", "naive_se"):
        assert getattr(sure.error, key) == pytest.approx(getattr(ei, key), rel=1e-10)
    assert sure.error.notes == ei.notes
    for key in ("analytic_coverage", "cvplus_coverage", "analytic_width", "cvplus_width"):
        assert getattr(sure.prediction, key) == pytest.approx(getattr(pi, key), rel=1e-10)
    for mine, theirs in zip(sure.prediction.radii, pi.radii):
        np.testing.assert_allclose(mine, theirs, rtol=1e-10, atol=1e-12)
    np.testing.assert_array_equal(sure.prediction.oof[0], pi.oof[0])
    np.testing.assert_allclose(sure.prediction.oof[1], pi.oof[1], rtol=1e-10, atol=1e-12)
