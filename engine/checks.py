"""Warning signs: checks that a chosen model's validation numbers can be trusted.

Each check is a small function on arrays plus a ``check_*`` function that
turns the numbers into a `Finding` (or nothing) and a table. `run_checks`
runs them all on prepared data and an `engine.analysis.Analysis`.

Thresholds are stated in every message or advice. Where a threshold is a rule
of thumb rather than a derived limit it is marked "common practice" below.
The checks are screening aids: passing them does not prove a model fit for
use, and where predictions feed decisions about safety the user's own
validation standards apply.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any, Callable

import numpy as np
import pandas as pd

from .jsonable import json_ready
from . import leakage as _leakage
from .analysis import Analysis, DataLike, analyse
from .compare import cell_label, fit_candidates
from .design import PolynomialBasis
from .errors import InputProblem
from .final_fit import FinalModel, fit_final
from .spec import SchemeSpec
from .threads import one_thread
from .summaries import (LARGE_ROWS, SAMPLE_ROWS, SHIFT_SAMPLE_ROWS, fold_summaries,
                        out_of_fold_from_summaries, seeded_sample, split_leverage)

Progress = Callable[[float, str], None]


# ---------------------------------------------------------------------------
# thresholds
# ---------------------------------------------------------------------------
#: Lag-1 autocorrelation of validation residuals above which neighbouring rows
#: are treated as dependent. 0.5 corresponds to a Durbin-Watson statistic of
#: about 1 (DW ~ 2(1 - r)); chosen here, not a published limit.
RESIDUAL_AUTOCORRELATION_LIMIT = 0.5
#: Durbin-Watson outside this interval counts as far from 2 (no dependence).
#: Common practice reads values below 1 or above 3 as a clear sign.
DURBIN_WATSON_RANGE = (1.0, 3.0)
#: Blocked-fold gap, in multiples of the decorrelation length (chosen here).
GAP_MULTIPLE = 3.0
#: Population stability index bands, common practice in model monitoring:
#: below 0.1 no real shift, 0.1-0.25 moderate, above 0.25 major.
PSI_MODERATE, PSI_MAJOR = 0.1, 0.25
#: Two-sample Kolmogorov-Smirnov p-value that an input must also pass before a
#: shift is reported, so that small samples do not raise alarms on noise. With
#: serially dependent rows the p-value is too small; it is used as a gate only.
SHIFT_P_VALUE = 0.01
#: Share of the earlier period's rows taken as the reference when no holdout
#: or train/test column defines the periods.
REFERENCE_SHARE = 0.75
#: Extrapolation probes: how far past each end of an input's range (share of
#: the range) and how far a prediction may leave the target's observed range
#: (share of that range) before the check fires. Chosen here: a straight line
#: pushed 25% past the data moves about 25% of the target's range, a gently
#: curving one somewhat more; more than half the range is beyond what a
#: smooth, well-supported curve does so close to the data.
EXTRAPOLATION_PUSHES = (0.10, 0.25)
EXTRAPOLATION_MARGIN = 0.5
EXTRAPOLATION_SERIOUS = 2.0
#: Leverage flag 2p/n (common practice, after Belsley, Kuh and Welsch, cited
#: from memory); the check fires when the share of held-out rows above it
#: exceeds the training rows' own share by more than this many points.
LEVERAGE_MULTIPLE = 2.0
LEVERAGE_EXCESS = 0.10
#: Rows per fitted parameter (common practice: the "one in ten" rule of thumb
#: often cited from regression-modelling texts; cited from memory).
ROWS_PER_PARAMETER = 10.0
ROWS_PER_PARAMETER_SERIOUS = 5.0
#: Condition number of the standardised design. With condition number k a
#: relative change e in the data can move the coefficients by up to about
#: k * e. Above 1e3 (the level at which statsmodels' regression summary warns,
#: cited from memory) coefficients trade off against each other and cannot be
#: read one by one; above 1e6 rounding coefficients to six significant digits
#: when copying them can visibly change predictions.
CONDITION_CAUTION, CONDITION_SERIOUS = 1e3, 1e6
#: Validation error more than this many times the training error.
GAP_RATIO = 2.0
GAP_RATIO_SERIOUS = 5.0
#: Fewest held-out rows a validation error should rest on (common practice, a rule of
#: thumb: for normal errors the standard error of an RMSE from m rows is about
#: RMSE / sqrt(2 m), a handbook result for the sample standard deviation, i.e. more
#: than +-22% below 10 rows); under 3, serious.
MIN_VALIDATION_ROWS = 10
MIN_VALIDATION_ROWS_SERIOUS = 3

_SHUFFLING = ("kfold", "repeated", "loo")


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------
_plain = json_ready   # numpy values to plain Python; NaN and inf become None


@dataclass
class Finding:
    """One warning sign.

    Attributes
    ----------
    code : short tag (``serial_dependence``, ``period_shift``, ...).
    message : one plain sentence with the number behind it.
    value : the headline number.
    advice : what to do.
    severity : ``'caution'`` or ``'serious'``.
    details : further numbers for reports.
    """

    code: str
    message: str
    value: float
    advice: str
    severity: str = "caution"
    details: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        """Plain-data form."""
        return {"code": self.code, "message": self.message, "value": _plain(self.value),
                "advice": self.advice, "severity": self.severity,
                "details": _plain(self.details)}


@dataclass
class CheckReport:
    """All findings of `run_checks`, with the tables behind them.

    Attributes
    ----------
    findings : the checks that fired (an empty list when none did).
    tables : ``summary`` (every check, fired or not), ``leakage``, ``serial``,
        ``scheme_comparison`` (when run), ``period_shift``, ``extrapolation``,
        ``leverage``, ``samples_per_parameter``, ``conditioning``.
    notes : plain sentences on how the checks were run.
    row_order : how the row order was read (see `row_order_basis`): a status
        and one sentence.
    skipped : checks computed but not used as warnings, each ``{"code",
        "reason"}``.
    """

    findings: list[Finding] = field(default_factory=list)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    row_order: dict = field(default_factory=dict)
    skipped: list[dict] = field(default_factory=list)

    def codes(self) -> list[str]:
        """Codes of the findings, each once, in the order found."""
        out: list[str] = []
        for f in self.findings:
            if f.code not in out:
                out.append(f.code)
        return out

    def by_code(self, code: str) -> Finding | None:
        """The finding with ``code``, or None."""
        for f in self.findings:
            if f.code == code:
                return f
        return None

    def to_dict(self) -> dict:
        return {"findings": [f.to_dict() for f in self.findings], "notes": list(self.notes),
                "row_order": dict(self.row_order), "skipped": [dict(x) for x in self.skipped]}


# ---------------------------------------------------------------------------
# formatting
# ---------------------------------------------------------------------------
def _num(v: float, digits: int = 3) -> str:
    """A number for a sentence: ``digits`` significant digits (whole numbers
    from 100 up, thousands separated; powers of ten from a million up)."""
    if v is None or not np.isfinite(v):
        return "infinite" if v is not None and np.isinf(v) else "not available"
    a = abs(v)
    if a >= 1e6 or (0 < a < 1e-3):
        return f"{v:.{max(digits - 1, 1)}e}"
    if a >= 100:
        return f"{v:,.0f}"
    return f"{v:.{digits}g}"


def _corr(v: float) -> str:
    return f"{v:.2f}" if np.isfinite(v) else "not available"


def _join(labels: list[str]) -> str:
    """``a``; ``a and b``; ``a, b and c`` — with each label in parentheses
    when there are several and a label itself contains a comma."""
    labels = list(labels)
    if len(labels) > 1 and any("," in x for x in labels):
        labels = [f"({x})" for x in labels]
    if len(labels) <= 1:
        return "".join(labels)
    return ", ".join(labels[:-1]) + " and " + labels[-1]


def _capital(text: str) -> str:
    return text[:1].upper() + text[1:]


def _r2(v: float) -> str:
    if not np.isfinite(v):
        return "not available"
    return f"{v:.2f}" if v > -10 else f"{v:,.0f}"


def _pct(v: float) -> str:
    return f"{100 * v:.0f}%"


def _rows(n: float) -> str:
    return f"{int(round(n)):,}"


def _model_name(order: int, penalty: float) -> str:
    return cell_label(int(order), float(penalty))


# ---------------------------------------------------------------------------
# small functions on arrays
# ---------------------------------------------------------------------------
#: values per piece in `durbin_watson` of a long series
_DW_PIECE = 1 << 16


def durbin_watson(resid) -> float:
    """Durbin-Watson statistic of residuals in row order.

    ``sum((e_t - e_{t-1})^2) / sum(e_t^2)``; about 2 for independent
    residuals, towards 0 when neighbours move together, towards 4 when they
    alternate. Roughly ``2 (1 - r)`` with ``r`` the lag-1 autocorrelation.

    Parameters
    ----------
    resid : residuals, in the order of the rows.

    Returns
    -------
    float (nan for fewer than 2 values or all-zero residuals).
    """
    e = np.asarray(resid, dtype=float).ravel()
    if e.size < 2:
        return float("nan")
    if e.size <= _DW_PIECE:
        den = float(e @ e)
        if den == 0:
            return float("nan")
        d = np.diff(e)
        return float(d @ d) / den
    # a long series a piece at a time in one reused buffer (no second array as long as
    # the residuals), each piece squared and summed pairwise by numpy: no BLAS (whose
    # threads would compete with other work), at least as accurate as one dot product
    buf = np.empty(_DW_PIECE)
    den = num = 0.0
    for i in range(0, e.size, _DW_PIECE):
        part = e[i:i + _DW_PIECE]
        den += float(np.multiply(part, part, out=buf[:part.size]).sum())
        d = buf[:min(_DW_PIECE, e.size - 1 - i)]
        if d.size:
            np.subtract(e[i + 1:i + 1 + d.size], e[i:i + d.size], out=d)
            num += float(np.multiply(d, d, out=d).sum())
    return num / den if den != 0 else float("nan")


def lag1_autocorrelation(x) -> float:
    """Lag-1 sample autocorrelation.

    ``sum_t (x_t - m)(x_{t+1} - m) / sum_t (x_t - m)^2`` (the usual estimator,
    which lies in [-1, 1]).

    Returns
    -------
    float (nan for fewer than 3 values or a constant series).
    """
    v = np.asarray(x, dtype=float).ravel()
    if v.size < 3 or not np.ptp(v) > 0:
        return float("nan")
    d = v - v.mean()
    scale = float(np.max(np.abs(d)))
    if not scale > 0:
        return float("nan")
    d = d / scale  # keeps tiny values from underflowing in the products
    den = float(d @ d)
    r = float(d[:-1] @ d[1:]) / den
    return float(min(1.0, max(-1.0, r)))


def effective_sample_size(n: float, r: float) -> float:
    """Rows' worth of independent information when neighbours correlate.

    ``n (1 - r) / (1 + r)``: the variance of a mean of ``n`` values from a
    first-order autoregressive series with lag-1 autocorrelation ``r`` equals
    that of ``n (1 - r) / (1 + r)`` independent values (large-``n`` form).
    Negative ``r`` is treated as 0, so the result never exceeds ``n``.
    """
    if not np.isfinite(r):
        return float(n)
    r = min(max(float(r), 0.0), 1.0)
    return float(n) * (1.0 - r) / (1.0 + r)


def decorrelation_length(r: float) -> float:
    """Rows over which a first-order autoregressive correlation ``r`` decays by 1/e.

    ``-1 / ln(r)`` for ``0 < r < 1``; 0 for ``r <= 0``; infinite for ``r >= 1``.
    """
    if not np.isfinite(r) or r <= 0:
        return 0.0
    if r >= 1:
        return float("inf")
    return -1.0 / math.log(r)


def _bin_shares(values: np.ndarray, edges: np.ndarray, n_bins: int) -> np.ndarray:
    idx = np.searchsorted(edges, values, side="right")
    return np.bincount(idx, minlength=n_bins).astype(float) / max(values.size, 1)


def population_stability_index(expected, actual, bins: int = 10,
                               floor: float = 1e-4) -> float:
    """Population stability index of ``actual`` against ``expected``.

    Bins are cut at the quantiles of ``expected`` (``bins`` equal shares,
    ties merged; the outer bins are open-ended). A value equal to a cut
    goes to the bin above it. Shares below ``floor`` are raised to ``floor``
    so an empty bin gives a large, finite term.

    ``PSI = sum_i (a_i - e_i) ln(a_i / e_i)`` over the bins, with ``e_i`` and
    ``a_i`` the shares of ``expected`` and ``actual`` in bin ``i``. Each term
    is >= 0. Common practice in model monitoring: below 0.1 no real shift,
    0.1-0.25 moderate, above 0.25 major.

    Parameters
    ----------
    expected : reference sample (training rows).
    actual : sample to compare (later rows).
    bins : number of quantile bins.
    floor : smallest share used in the logarithm.

    Returns
    -------
    float
    """
    e = np.asarray(expected, dtype=float).ravel()
    a = np.asarray(actual, dtype=float).ravel()
    if e.size == 0 or a.size == 0:
        return float("nan")
    qs = np.linspace(0, 1, int(bins) + 1)[1:-1]
    edges = np.unique(np.quantile(e, qs))
    k = edges.size + 1
    pe = np.maximum(_bin_shares(e, edges, k), floor)
    pa = np.maximum(_bin_shares(a, edges, k), floor)
    return float(np.sum((pa - pe) * np.log(pa / pe)))


def ks_statistic(a, b) -> float:
    """Two-sample Kolmogorov-Smirnov statistic: largest gap between the two
    empirical distribution functions (0 = same, 1 = no overlap)."""
    x = np.sort(np.asarray(a, dtype=float).ravel())
    y = np.sort(np.asarray(b, dtype=float).ravel())
    if x.size == 0 or y.size == 0:
        return float("nan")
    pts = np.concatenate([x, y])
    fx = np.searchsorted(x, pts, side="right") / x.size
    fy = np.searchsorted(y, pts, side="right") / y.size
    return float(np.max(np.abs(fx - fy)))


def standardised_mean_difference(a, b) -> float:
    """``(mean(b) - mean(a)) / sqrt((var(a) + var(b)) / 2)`` (sample variances).

    Common practice reads |value| above about 0.1-0.25 as a noticeable
    imbalance; 0 when both samples are constant and equal.
    """
    x = np.asarray(a, dtype=float).ravel()
    y = np.asarray(b, dtype=float).ravel()
    if x.size == 0 or y.size == 0:
        return float("nan")
    va = float(np.var(x, ddof=1)) if x.size > 1 else 0.0
    vb = float(np.var(y, ddof=1)) if y.size > 1 else 0.0
    diff = float(y.mean() - x.mean())
    s = math.sqrt((va + vb) / 2.0)
    if s == 0:
        return 0.0 if diff == 0 else math.copysign(float("inf"), diff)
    return diff / s


def share_outside(reference, values) -> float:
    """Share of ``values`` below the minimum or above the maximum of ``reference``."""
    r = np.asarray(reference, dtype=float).ravel()
    v = np.asarray(values, dtype=float).ravel()
    if r.size == 0 or v.size == 0:
        return float("nan")
    return float(np.mean((v < r.min()) | (v > r.max())))


def _singular(Z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Singular values and right singular vectors of a tall matrix, via its R factor."""
    R = np.linalg.qr(Z, mode="r") if Z.shape[0] > Z.shape[1] else Z
    _, s, Vt = np.linalg.svd(R, full_matrices=False)
    return s, Vt


def leverage(train_terms, query_terms=None, penalty: float = 0.0) -> np.ndarray:
    """Hat values of a linear model with an intercept, at training or new rows.

    The terms are centred and scaled by the training rows' mean and standard
    deviation (as the engine's ridge penalty is defined); for a row with
    standardised terms ``t`` the value is ``1/n + t' (T'T + penalty I)^+ t``
    (pseudo-inverse without a penalty). At the training rows this is the
    diagonal of the hat matrix; at a new row it measures how far the row lies
    from the training rows in the model's terms (values above 1 mean the
    prediction there is less certain than a single observation).

    Parameters
    ----------
    train_terms : (n, p) model terms of the training rows (no intercept column).
    query_terms : (m, p) terms of the rows to evaluate; the training rows when None.
    penalty : ridge penalty on the standardised terms.

    Returns
    -------
    (m,) array.
    """
    T = np.asarray(train_terms, dtype=float)
    if T.ndim == 1:
        T = T[:, None]
    n, p = T.shape
    Q = T if query_terms is None else np.asarray(query_terms, dtype=float)
    if Q.ndim == 1:
        Q = Q[:, None] if p == 1 else Q[None, :]
    base = np.full(Q.shape[0], 1.0 / n)
    if p == 0:
        return base
    mean = T.mean(axis=0)
    sd = T.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    Z = (T - mean) / sd
    Zq = (Q - mean) / sd
    s, Vt = _singular(Z)
    proj = Zq @ Vt.T
    if penalty > 0:
        h = base + (proj * proj) @ (1.0 / (s * s + penalty))
        rest = np.einsum("ij,ij->i", Zq, Zq) - np.einsum("ij,ij->i", proj, proj)
        h += np.clip(rest, 0.0, None) / penalty
        return h
    tol = (s.max() if s.size else 0.0) * max(n, p) * np.finfo(float).eps
    w = np.where(s > tol, 1.0 / np.where(s > tol, s * s, 1.0), 0.0)
    return base + (proj * proj) @ w


# ---------------------------------------------------------------------------
# model terms and fits per split
# ---------------------------------------------------------------------------
def model_terms(X_train: np.ndarray, X_query: np.ndarray | None, input_names, order: int,
                penalty: float, interactions: bool) -> tuple[np.ndarray, np.ndarray]:
    """Terms of a cell at training and query rows, in a basis fit for `leverage`.

    Without a penalty the hat values do not depend on the basis, so the
    engine's well-scaled working basis is used; with a penalty they do, so the
    raw-power terms (on which the penalty is defined) are used.
    """
    X_train = np.asarray(X_train, float)
    Xq = X_train if X_query is None else np.asarray(X_query, float)
    basis = PolynomialBasis.fit(X_train, input_names, max(int(order), 0), interactions)
    Ft = basis.expand(X_train, order=order)
    Fq = basis.expand(Xq, order=order)
    if penalty > 0 and Ft.shape[1]:
        A, a0 = basis.raw_map(order)
        Ft = Ft @ A.T + a0
        Fq = Fq @ A.T + a0
    return np.asarray(Ft), np.asarray(Fq)


def fit_predict(X_train: np.ndarray, y_train: np.ndarray, X_query: np.ndarray, input_names,
                order: int, penalty: float, interactions: bool = False) -> np.ndarray:
    """Fit one cell on training rows and predict query rows, quickly.

    The same model as `engine.final_fit.fit_final` (least squares without a
    penalty; ridge with an unpenalised intercept on standardised raw-power
    terms, scikit-learn's ``Ridge`` ``alpha``, with a penalty), solved by QR
    and an SVD of the small triangular factor, without the exact conversion
    to raw-unit coefficients. Used where only predictions are needed
    (out-of-fold residuals).

    Returns
    -------
    (m,) predictions at ``X_query``.
    """
    X_train = np.asarray(X_train, float)
    X_query = np.asarray(X_query, float)
    if X_train.ndim == 1:
        X_train = X_train[:, None]
    if X_query.ndim == 1:
        X_query = X_query[:, None]
    y = np.asarray(y_train, float)
    ybar = float(y.mean())
    Ft, Fq = model_terms(X_train, X_query, input_names, order, penalty, interactions)
    if Ft.shape[1] == 0:
        return np.full(X_query.shape[0], ybar)
    mean = Ft.mean(axis=0)
    sd = Ft.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    Z = (Ft - mean) / sd
    Zq = (Fq - mean) / sd
    if Z.shape[0] > Z.shape[1]:
        Q, R = np.linalg.qr(Z)
        Ur, s, Vt = np.linalg.svd(R, full_matrices=False)
        c = Ur.T @ (Q.T @ (y - ybar))
    else:
        U, s, Vt = np.linalg.svd(Z, full_matrices=False)
        c = U.T @ (y - ybar)
    if penalty > 0:
        w = s / (s * s + penalty)
    else:
        tol = (s.max() if s.size else 0.0) * max(Z.shape) * np.finfo(float).eps
        w = np.where(s > tol, 1.0 / np.where(s > tol, s, 1.0), 0.0)
    beta = Vt.T @ (w * c)
    return ybar + Zq @ beta


def _first_round(analysis: Analysis) -> list[tuple[np.ndarray, np.ndarray]]:
    plan = analysis.plan
    out = []
    for (tr, va), (r, _) in zip(zip(plan.train_sets, plan.valid_sets), plan.split_round):
        if r == 0:
            out.append((np.asarray(tr), np.asarray(va)))
    return out


def out_of_fold_residuals(data: DataLike, analysis: Analysis, order: int,
                          penalty: float, fold_stats=None) -> tuple[np.ndarray, np.ndarray]:
    """Validation residuals of one cell, each row from a fit that did not see it.

    The cell is refitted on the training rows of each split of the analysis's
    first round of splits (`fit_predict`, the model of
    `engine.final_fit.fit_final`); for leave-one-out the exact identity
    ``e_i / (1 - h_i)`` is used.

    Returns
    -------
    (rows, residuals): validated row indices (ascending) and their residuals.
    """
    X, y = np.asarray(data.X, float), np.asarray(data.y, float)
    spec = analysis.spec
    if fold_stats is not None and not analysis.plan.loo:
        # the same fits from each split's training summaries (`engine.summaries`)
        return out_of_fold_from_summaries(fold_stats, X, y, order, penalty)
    if analysis.plan.loo:
        e = y - fit_predict(X, y, X, spec.inputs, order, penalty, spec.interactions)
        Ft, _ = model_terms(X, None, spec.inputs, order, penalty, spec.interactions)
        h = leverage(Ft, None, penalty)
        ok = h < 1 - 1e-10
        rows = np.flatnonzero(ok)
        return rows, e[ok] / (1.0 - h[ok])
    rows, res = [], []
    for tr, va in _first_round(analysis):
        rows.append(va)
        res.append(y[va] - fit_predict(X[tr], y[tr], X[va], spec.inputs, order, penalty,
                                       spec.interactions))
    r = np.concatenate(rows)
    e = np.concatenate(res)
    o = np.argsort(r, kind="stable")
    return r[o], e[o]


def _has_order(data: DataLike, analysis: Analysis) -> bool:
    return getattr(data, "order", None) is not None or bool(analysis.spec.scheme.order_column)


def sorted_by_input(data: DataLike, analysis: Analysis) -> str | None:
    """The input the rows are sorted by, when no order column was given.

    With rows sorted by an input (a calibration table listed by set point) the
    row order says nothing about time, so the checks that read the row order
    as time (serial dependence, period shift) do not fire; their tables are
    still filled in.
    """
    if _has_order(data, analysis):
        return None
    X = np.asarray(data.X, float)
    if X.shape[0] < 3:
        return None
    for j, name in enumerate(analysis.spec.inputs):
        if not _monotone(X[:, j]):
            continue
        if np.ptp(X[:, j]) > 0:
            return str(name)
    return None


def _monotone(v: np.ndarray) -> bool:
    """True when ``v`` never falls or never rises. Its first rows are screened first: a
    column that goes both ways there goes both ways over all rows."""
    head = np.diff(v[:257])
    if not (np.all(head >= 0) or np.all(head <= 0)):
        return False
    d = np.diff(v)
    return bool(np.all(d >= 0) or np.all(d <= 0))


_TIME_SCHEMES = ("blocked", "holdout")
#: Checks that read the row order as time.
ROW_ORDER_CHECKS = ("serial_dependence", "period_shift")


@dataclass(frozen=True)
class RowOrder:
    """How the checks read the order of the rows.

    Attributes
    ----------
    status : ``'order_column'`` (rows sorted by the order column),
        ``'time_scheme'`` (blocked folds or a later-period holdout take the
        file's row order as time order), ``'stated'`` (the user said the file's
        row order is time order), ``'not_time'`` (the user said it is not),
        ``'sorted_by_input'`` (rows listed by an input, no order given) or
        ``'assumed'`` (nothing said: the file's row order is taken as time).
    sentence : one plain sentence saying so, for the page and the pack.
    known : the time order rests on an order column, the scheme or the user's word.
    use : the row-order checks may raise warnings.
    """

    status: str
    sentence: str
    known: bool
    use: bool

    def to_dict(self) -> dict:
        return {"status": self.status, "sentence": self.sentence, "known": self.known,
                "used": self.use}


def row_order_basis(data: DataLike, analysis: Analysis) -> RowOrder:
    """Whether (and why) the row order may be read as time by the checks.

    An order column, or a time scheme (blocked folds, later-period holdout),
    makes the order known. Otherwise the user's answer counts
    (``SchemeSpec.rows_in_time_order``); without one, rows sorted by the
    target or by an input are not read as time (the row-order checks are
    skipped), and any other
    row order is assumed to be time order, stated as such, and its warnings
    go no higher than caution.
    """
    scheme = analysis.spec.scheme
    if _has_order(data, analysis):
        col = scheme.order_column
        return RowOrder("order_column", (f"Rows were sorted by the order column {col}."
                                         if col else "Rows were sorted by their order values."),
                        True, True)
    if scheme.kind in _TIME_SCHEMES:
        listed = sorted_by_input(data, analysis) or sorted_by_target(data, analysis)
        note = (f" The rows are listed by {listed}, so the later rows are those with its "
                "largest (or smallest) values; make sure that is the period you mean to "
                "hold out." if listed else "")
        return RowOrder("time_scheme", "No order column was given; the validation scheme "
                        "takes the file's row order as time order, and so do these checks."
                        + note, True, True)
    stated = getattr(scheme, "rows_in_time_order", None)
    if stated is True:
        return RowOrder("stated", "No order column was given; as stated, the file's row "
                        "order was read as time order.", True, True)
    if stated is False:
        return RowOrder("not_time", "As stated, the file's row order is not time order, so "
                        "the checks that read the row order as time were not used.", False, False)
    name = sorted_by_input(data, analysis)
    if name is not None:
        return RowOrder("sorted_by_input", f"No order column was given and the rows are listed "
                        f"by the input {name}, so their order follows that input rather than "
                        "time: the checks that read the row order as time were computed but "
                        "not used as warnings (choose an order column, or say the rows are in "
                        "time order, to use them).", False, False)
    name = sorted_by_target(data, analysis)
    if name is not None:
        return RowOrder("sorted_by_target", f"No order column was given and the rows are "
                        f"listed by the target {name}, so their order follows the target rather "
                        "than time: the checks that read the row order as time were computed "
                        "but not used as warnings (choose an order column, or say the rows are "
                        "in time order, to use them).", False, False)
    return RowOrder("assumed", "No order column was given and it was not said whether the rows "
                    "are in time order: the checks that read the row order as time assume the "
                    "file's row order is time order, and their warnings go no higher than "
                    "caution.", False, True)


def _row_order_advice(basis: RowOrder) -> str:
    if basis.status == "assumed":
        return (" This assumes the file's row order is time order (no order column was given); "
                "if it is not, set this warning aside, and if it is, say so or choose an order "
                "column.")
    if basis.status in ("time_scheme", "stated"):
        return " No order column was given, so the row order of the table was taken as the order in time."
    return ""


def sorted_by_target(data: DataLike, analysis: Analysis) -> str | None:
    """The target's name when the rows are listed by it (and no order column was given)."""
    if _has_order(data, analysis):
        return None
    y = np.asarray(data.y, float).ravel()
    if y.size < 3 or not _monotone(y) or not np.ptp(y) > 0:
        return None
    return str(analysis.spec.target)


def suggested_gap(r: float, n: int, folds: int) -> int:
    """Blocked-fold gap: `GAP_MULTIPLE` decorrelation lengths, capped at half a block."""
    cap = max(int(n // (2 * max(folds, 2))), 0)
    L = decorrelation_length(r)
    if L == 0:
        return 0
    g = cap if not np.isfinite(L) else int(math.ceil(GAP_MULTIPLE * L))
    return int(min(g, cap))


# ---------------------------------------------------------------------------
# the checks
# ---------------------------------------------------------------------------
def final_fit_durbin_watson(data: DataLike, model: FinalModel) -> float:
    """Durbin-Watson statistic of ``model``'s residuals on every row of ``data``, in order."""
    e = model.predict(np.asarray(data.X, float))
    return durbin_watson(np.subtract(np.asarray(data.y, float), e, out=e))  # e: residuals


def check_serial_dependence(data: DataLike, analysis: Analysis,
                            final_model: FinalModel | None = None,
                            basis: RowOrder | None = None, fold_stats=None, oof=None,
                            dw: float | None = None
                            ) -> tuple[Finding | None, pd.DataFrame, pd.DataFrame | None]:
    """Are neighbouring rows dependent, and does the scheme account for it?

    Computes the lag-1 autocorrelation of the target and of the recommended
    cell's out-of-fold residuals, the Durbin-Watson statistic of the final
    fit's residuals and the effective sample size ``n (1 - r) / (1 + r)``.
    Fires when the residual lag-1 autocorrelation exceeds
    `RESIDUAL_AUTOCORRELATION_LIMIT` (0.5) or Durbin-Watson lies outside
    `DURBIN_WATSON_RANGE` (1 to 3). When the scheme shuffles rows (k-fold,
    repeated, leave-one-out) the sweep is also run on blocked folds with a gap
    of `GAP_MULTIPLE` decorrelation lengths (capped at half a block) and the
    two are compared in errors: the ratio of the validation MSEs of the same
    model, and both R² against the target's variance over all rows (serious
    when blocked folds' error is at least `FLATTERY_RATIO` times the shuffled
    folds', caution below). Warnings go no higher than caution when the row
    order is only assumed to be time order, and none is raised when the rows
    are not in time order (`row_order_basis`).

    ``dw``: the Durbin-Watson statistic of ``final_model``'s residuals on every
    row, already computed (`final_fit_durbin_watson`).

    Returns
    -------
    (finding or None, serial table, scheme comparison table or None)
    """
    spec = analysis.spec
    rec = analysis.recommendation.recommended
    X, y = np.asarray(data.X, float), np.asarray(data.y, float)
    n = y.size
    if final_model is None and dw is None:
        final_model = fit_final(X, y, spec.inputs, rec.order, rec.penalty, spec.interactions,
                                target=spec.target, family=rec.family, l1_ratio=rec.l1_ratio)
    r_target = lag1_autocorrelation(y)
    rows, oof = oof if oof is not None else out_of_fold_residuals(
        data, analysis, rec.order, rec.penalty, fold_stats=fold_stats)
    contiguous = rows.size > 2 and np.all(np.diff(rows) == 1)
    # residual autocorrelation over consecutive validated rows only
    if contiguous or rows.size == n:
        r_resid = lag1_autocorrelation(oof)
    else:
        full = np.full(n, np.nan)
        full[rows] = oof
        pairs = np.isfinite(full[:-1]) & np.isfinite(full[1:])
        d = full - np.nanmean(full)
        den = np.nansum(d * d)
        r_resid = float(np.sum(d[:-1][pairs] * d[1:][pairs]) / den) if den > 0 else float("nan")
    if dw is None:
        dw = final_fit_durbin_watson(data, final_model)
    r_use = r_resid if np.isfinite(r_resid) else 1.0 - dw / 2.0
    ess = effective_sample_size(n, r_use)
    folds = int(spec.scheme.folds) if spec.scheme.kind in ("kfold", "repeated", "blocked") else 5
    gap = suggested_gap(r_use, n, folds)
    table = pd.DataFrame([
        ("rows", float(n), "Rows in the analysis, in their given order."),
        ("target lag-1 autocorrelation", r_target,
         "How much each target value resembles the one before it."),
        ("validation residual lag-1 autocorrelation", r_resid,
         f"Out-of-fold residuals of the recommended model ({rec.label}); "
         f"the check fires above {RESIDUAL_AUTOCORRELATION_LIMIT}."),
        ("Durbin-Watson (final fit residuals)", dw,
         "About 2 when neighbouring residuals are unrelated; the check fires below "
         f"{DURBIN_WATSON_RANGE[0]:g} or above {DURBIN_WATSON_RANGE[1]:g} (common practice)."),
        ("effective sample size", ess,
         "n (1 - r) / (1 + r): independent rows' worth of information."),
        ("decorrelation length (rows)", decorrelation_length(r_use),
         "Rows over which the residual correlation falls by 1/e."),
        ("suggested gap (rows)", float(gap),
         f"{GAP_MULTIPLE:g} decorrelation lengths, at most half a block."),
    ], columns=["measure", "value", "note"])

    fires = ((np.isfinite(r_resid) and abs(r_resid) > RESIDUAL_AUTOCORRELATION_LIMIT)
             or (np.isfinite(dw) and not (DURBIN_WATSON_RANGE[0] <= dw <= DURBIN_WATSON_RANGE[1])))
    basis = row_order_basis(data, analysis) if basis is None else basis
    if not fires or not basis.use:
        return None, table, None

    kind = spec.scheme.kind
    details: dict[str, Any] = {"target_lag1": r_target, "residual_lag1": r_resid,
                               "durbin_watson": dw, "effective_sample_size": ess,
                               "rows": n, "suggested_gap": gap, "scheme": kind,
                               "row_order": basis.status}
    head = (f"Validation errors of neighbouring rows move together (lag-1 autocorrelation "
            f"{_corr(r_resid)}, Durbin-Watson {_corr(dw)})")
    ess_txt = (f"the {_rows(n)} rows carry about as much information as "
               f"{_rows(max(ess, 1))} independent ones")
    comparison = None
    if kind in _SHUFFLING:
        comparison, blocked_desc, blocked_rec_r2, same_r2 = _scheme_comparison(
            data, analysis, folds, gap)
        details.update({"shuffled_r2": rec.validation_r2, "blocked_r2": same_r2,
                        "blocked_best_r2": blocked_rec_r2, "blocked_scheme": blocked_desc})
        severity = "serious"
        if comparison is not None:
            message, flatters = _flattery_sentence(head, comparison, gap, rec.label,
                                                   spec.target, details)
            if not flatters:
                severity = "caution"
        else:
            message = (f"{head}, so shuffled folds may flatter the model; blocked folds could "
                       "not be run on these rows to measure by how much.")
        advice = (f"Switch to blocked folds with a gap of about {gap} rows (or a later-period "
                  f"holdout) and judge the model by those numbers; {ess_txt}.")
    else:
        message = f"{head}: {ess_txt}."
        if kind == "blocked" and int(spec.scheme.gap) < gap:
            advice = (f"Your blocked folds keep neighbours apart, but widen the gap from "
                      f"{int(spec.scheme.gap)} to about {gap} rows so that rows next to each "
                      "held-out block do not train the model.")
        else:
            advice = ("Your scheme keeps neighbouring rows apart; keep in mind that the rows "
                      f"are worth about {_rows(max(ess, 1))} independent ones when judging how "
                      "many parameters the data support.")
        severity = "caution"
    if not basis.known:
        severity = "caution"
    advice += _row_order_advice(basis)
    finding = Finding("serial_dependence", message, float(r_resid if np.isfinite(r_resid) else dw),
                      advice, severity, details)
    return finding, table, comparison


#: Blocked-fold validation MSE at least this many times the shuffled folds' MSE
#: for the same model counts as shuffled folds flattering it (chosen here).
FLATTERY_RATIO = 1.25


def _flattery_sentence(head: str, comparison: pd.DataFrame, gap: int, label: str,
                       target: str, details: dict) -> tuple[str, bool]:
    """Shuffled against blocked folds for the same model, in errors.

    The ratio of the two validation MSEs, and both R² against one common
    variance (the target's over all rows), so the two R² differ exactly as
    the errors do.
    """
    c = comparison.set_index("role")
    mine = c.loc["your scheme, recommended model"]
    same = c.loc["same model, blocked folds"]
    ratio = float(same["mse_ratio"])
    details.update({"mse_ratio": ratio, "shuffled_mse": float(mine["validation_mse"]),
                    "blocked_mse": float(same["validation_mse"]),
                    "shuffled_r2_common": float(mine["validation_r2_common"]),
                    "blocked_r2_common": float(same["validation_r2_common"])})
    numbers = (f"MSE {_num(float(same['validation_mse']))} against "
               f"{_num(float(mine['validation_mse']))}; R² {_r2(float(same['validation_r2_common']))} "
               f"against {_r2(float(mine['validation_r2_common']))}, both measured against the "
               f"variance of {target} over all rows")
    r_txt = _num(ratio, 3) if np.isfinite(ratio) else "infinitely many"
    if ratio >= FLATTERY_RATIO:
        return (f"{head}, so shuffled folds flatter the model: for the same model ({label}), "
                f"blocked folds with a {gap}-row gap give a validation error {r_txt} times "
                f"that of shuffled folds ({numbers})."), True
    return (f"{head}; for the same model ({label}), blocked folds with a {gap}-row gap give a "
            f"validation error only {r_txt} times that of shuffled folds ({numbers}), so "
            f"shuffled folds flatter it little here (the check calls {FLATTERY_RATIO:g} times "
            "or more flattering)."), False


def _scheme_comparison(data: DataLike, analysis: Analysis, folds: int, gap: int):
    """Sweep again on blocked folds; compare with the shuffled scheme."""
    spec = analysis.spec
    rec = analysis.recommendation.recommended
    scheme = SchemeSpec("blocked", folds=folds, gap=gap,
                        order_column=spec.scheme.order_column)
    try:
        blocked = analyse(data, replace(spec, scheme=scheme))
    except InputProblem:
        return None, "", float("nan"), float("nan")
    same = blocked.cell_row(rec.order, rec.penalty, rec.family, rec.l1_ratio)
    brec = blocked.recommendation.recommended
    rows = [
        {"scheme": spec.scheme.kind, "description": analysis.plan.description,
         "role": "your scheme, recommended model", "model": rec.label, "order": rec.order,
         "penalty": rec.penalty, "validation_r2": rec.validation_r2,
         "validation_mse": rec.validation_mse, "validation_rmse": math.sqrt(rec.validation_mse)},
        {"scheme": "blocked", "description": blocked.plan.description,
         "role": "same model, blocked folds", "model": rec.label, "order": rec.order,
         "penalty": rec.penalty, "validation_r2": float(same["validation_r2"]),
         "validation_mse": float(same["validation_mse"]),
         "validation_rmse": float(same["validation_rmse"])},
        {"scheme": "blocked", "description": blocked.plan.description,
         "role": "model blocked folds recommend", "model": brec.label, "order": brec.order,
         "penalty": brec.penalty, "validation_r2": brec.validation_r2,
         "validation_mse": brec.validation_mse, "validation_rmse": math.sqrt(brec.validation_mse)},
    ]
    table = pd.DataFrame(rows)
    var_y = float(np.var(np.asarray(data.y, float)))
    table["validation_r2_common"] = (1.0 - table["validation_mse"] / var_y
                                     if var_y > 0 else float("nan"))
    table["mse_ratio"] = table["validation_mse"] / float(rec.validation_mse) \
        if rec.validation_mse > 0 else float("nan")
    return (table, blocked.plan.description, float(brec.validation_r2),
            float(same["validation_r2"]))


def period_rows(data: DataLike, analysis: Analysis) -> tuple[np.ndarray, np.ndarray, str]:
    """Rows of the earlier and later period.

    The training and test rows of a later-period holdout or of a train/test
    split column; otherwise the first `REFERENCE_SHARE` (75%) of the rows in
    order against the rest.
    """
    plan = analysis.plan
    n = int(np.asarray(data.y).size)
    if plan.kind in ("holdout", "column") and len(plan.train_sets) == 1:
        tr, va = plan.train_sets[0], plan.valid_sets[0]
        if plan.kind == "holdout":
            return tr, va, f"the training rows ({_rows(tr.size)}) against the later test rows ({_rows(va.size)})"
        return tr, va, f"the training rows ({_rows(tr.size)}) against the test rows ({_rows(va.size)})"
    cut = int(round(REFERENCE_SHARE * n))
    cut = min(max(cut, 2), n - 1)
    idx = np.arange(n)
    return (idx[:cut], idx[cut:],
            f"the first {_pct(cut / n)} of rows in order ({_rows(cut)}) against the last "
            f"{_pct(1 - cut / n)} ({_rows(n - cut)})")


def shift_table(X_before: np.ndarray, X_after: np.ndarray, inputs, bins: int = 10) -> pd.DataFrame:
    """Per input: how the later rows differ from the earlier ones.

    Columns: ``input``, ``mean_before``, ``mean_after``, ``smd``
    (standardised mean difference), ``ks`` (Kolmogorov-Smirnov statistic),
    ``ks_p_value`` (scipy's two-sample test; too small for dependent rows),
    ``psi`` (population stability index on ``bins`` quantile bins of the
    earlier rows), ``share_outside`` (later rows outside the earlier range),
    ``moved`` (PSI above 0.1 and KS p-value below 0.01). Sorted by PSI, the
    largest first.
    """
    A = np.asarray(X_before, float)
    B = np.asarray(X_after, float)
    rows = []
    for j, name in enumerate(inputs):
        # each column sorted once: the quantile cuts, the KS test and the range share
        # read the sorted copies (the same values as on the unsorted columns)
        a, b = np.sort(A[:, j]), np.sort(B[:, j])
        psi = population_stability_index(a, b, bins)
        from scipy import stats as _stats   # imported only when a shift is tested

        test = _stats.ks_2samp(a, b) if a.size and b.size else None
        p = float(test.pvalue) if test is not None else float("nan")
        if test is not None and not np.isnan(test.statistic):
            # `ks_statistic` where scipy found the largest gap (two searches instead of
            # two sweeps; scipy's own statistic is rounded to a multiple of 1 / lcm of
            # the sizes for small samples)
            v = test.statistic_location
            ks = float(abs(np.searchsorted(a, v, side="right") / a.size
                           - np.searchsorted(b, v, side="right") / b.size))
        else:
            ks = ks_statistic(a, b)
        outside = (float(np.mean((b < a[0]) | (b > a[-1]))) if a.size and b.size
                   else float("nan"))      # `share_outside` on the sorted columns
        rows.append({"input": str(name), "mean_before": float(A[:, j].mean()),
                     "mean_after": float(B[:, j].mean()),
                     "smd": standardised_mean_difference(A[:, j], B[:, j]), "ks": ks,
                     "ks_p_value": p, "psi": psi, "share_outside": outside,
                     "moved": bool(psi > PSI_MODERATE and p < SHIFT_P_VALUE)})
    t = pd.DataFrame(rows, columns=["input", "mean_before", "mean_after", "smd", "ks",
                                    "ks_p_value", "psi", "share_outside", "moved"])
    t["_abs_smd"] = t["smd"].abs()
    t = t.sort_values(["psi", "_abs_smd"], ascending=[False, False], kind="stable")
    return t.drop(columns="_abs_smd").reset_index(drop=True)


def period_shift_table(data: DataLike, analysis: Analysis) -> pd.DataFrame:
    """`shift_table` of the earlier against the later rows (`period_rows`), with a
    first column ``comparison`` saying which rows; on a stated, seeded sample of
    each period when either holds more than `SHIFT_SAMPLE_ROWS` rows."""
    before, after, how = period_rows(data, analysis)
    X = np.asarray(data.X, float)
    if before.size > SHIFT_SAMPLE_ROWS or after.size > SHIFT_SAMPLE_ROWS:
        # large tables: a stated, seeded sample of each period (`engine.summaries`)
        seed = int(analysis.spec.seed)
        before = seeded_sample(before, SHIFT_SAMPLE_ROWS, seed)
        after = seeded_sample(after, SHIFT_SAMPLE_ROWS, seed + 1)
        how += (f", on a seeded sample of {_rows(before.size)} and {_rows(after.size)} rows "
                f"(seed {seed})")
    table = shift_table(X[before], X[after], analysis.spec.inputs)
    table.insert(0, "comparison", how)
    return table


def check_period_shift(data: DataLike, analysis: Analysis,
                       basis: RowOrder | None = None, table: pd.DataFrame | None = None
                       ) -> tuple[Finding | None, pd.DataFrame]:
    """Do the inputs of the later period differ from those of the earlier one?

    Per input: standardised mean difference, Kolmogorov-Smirnov statistic,
    population stability index on the earlier rows' decile bins and the share
    of later rows outside the earlier range (`shift_table`). An input has
    moved when its PSI exceeds 0.1 (common practice: 0.1-0.25 moderate, above
    0.25 major) and the KS p-value is below 0.01 (a gate against noise in small
    samples). Fires when any input moved; serious when one exceeds 0.25 and
    the row order is known to be time order (`row_order_basis`), caution when
    it is only assumed; quiet when the rows are not in time order. ``table``:
    `period_shift_table` already computed for this data and analysis.
    """
    table = period_shift_table(data, analysis) if table is None else table
    how = str(table["comparison"].iloc[0]) if len(table) else period_rows(data, analysis)[2]
    moved = table[table["moved"]]
    basis = row_order_basis(data, analysis) if basis is None else basis
    if moved.empty or not basis.use:
        return None, table
    top = moved.iloc[0]
    names = list(moved["input"])
    n_in = len(table)
    lead = (f"The later rows differ from the earlier ones in {len(names)} of {n_in} "
            f"input{'s' if n_in != 1 else ''}" if n_in > 1 else
            "The later rows differ from the earlier ones in the input")
    message = (f"{lead}, most in {top['input']} (PSI {_num(top['psi'], 2)}, means "
               f"{_num(abs(top['smd']), 2)} standard deviations apart, "
               f"{_pct(top['share_outside'])} of later rows outside the earlier range), "
               f"comparing {how}.")
    others = f" (then {', '.join(names[1:4])})" if len(names) > 1 else ""
    advice = (f"Find out what changed in {top['input']}{others}; judge the model on a "
              "later-period holdout and consider refitting on recent rows before trusting "
              "predictions for the new period. PSI above 0.25 is commonly read as a major "
              "shift, 0.1-0.25 as moderate.")
    advice += _row_order_advice(basis)
    severity = "serious" if float(top["psi"]) > PSI_MAJOR and basis.known else "caution"
    details = {"inputs_moved": names, "comparison": how, "psi": float(top["psi"]),
               "smd": float(top["smd"]), "ks": float(top["ks"]),
               "share_outside": float(top["share_outside"])}
    return Finding("period_shift", message, float(top["psi"]), advice, severity, details), table


def probe_points(X: np.ndarray) -> pd.DataFrame:
    """Query points past and near the ends of each input's range.

    For each input: 25% and 10% of its range below the minimum, its 1st and
    99th percentiles, 10% and 25% above the maximum; the other inputs at their
    medians. Columns: ``input``, ``where``, ``push`` (0.1, 0.25 or
    ``'percentile'``), ``x`` and one column per input index (``_x0``...).
    """
    X = np.asarray(X, float)
    # one sort per column gives its ends, both percentiles and the median (sorting a
    # contiguous copy is faster than partitioning the strided column, and the
    # percentiles of the sorted values are the same numbers)
    ends = np.empty((5, X.shape[1]))
    for j in range(X.shape[1]):
        s = np.sort(X[:, j])
        # (the ends read first: the percentiles reorder the sorted copy, not copy it)
        ends[:, j] = (s[0], s[-1], *np.percentile(s, [1, 50, 99], overwrite_input=True))
    lo, hi, p1, med, p99 = ends
    rows = []
    for j in range(X.shape[1]):
        span = hi[j] - lo[j] if hi[j] > lo[j] else max(abs(lo[j]), 1.0)
        spots = [(f"{_pct(EXTRAPOLATION_PUSHES[1])} below the smallest value",
                  EXTRAPOLATION_PUSHES[1], lo[j] - EXTRAPOLATION_PUSHES[1] * span),
                 (f"{_pct(EXTRAPOLATION_PUSHES[0])} below the smallest value",
                  EXTRAPOLATION_PUSHES[0], lo[j] - EXTRAPOLATION_PUSHES[0] * span),
                 ("1st percentile", "percentile", p1[j]),
                 ("99th percentile", "percentile", p99[j]),
                 (f"{_pct(EXTRAPOLATION_PUSHES[0])} past the largest value",
                  EXTRAPOLATION_PUSHES[0], hi[j] + EXTRAPOLATION_PUSHES[0] * span),
                 (f"{_pct(EXTRAPOLATION_PUSHES[1])} past the largest value",
                  EXTRAPOLATION_PUSHES[1], hi[j] + EXTRAPOLATION_PUSHES[1] * span)]
        for where, push, v in spots:
            pt = med.copy()
            pt[j] = v
            rows.append((j, where, push, float(v), pt))
    return pd.DataFrame(rows, columns=["input_index", "where", "push", "x", "point"])


def check_extrapolation(data: DataLike, models: dict[tuple[int, float], FinalModel],
                        probes: pd.DataFrame | None = None
                        ) -> tuple[Finding | None, pd.DataFrame]:
    """Do candidates swing wildly just past (or near the ends of) the data?

    For every candidate, predictions at `probe_points` (10% and 25% past each
    end of each input's range, and its 1st and 99th percentiles, the other
    inputs at their medians). A prediction fires when it lies beyond the
    target's observed range by more than half that range
    (`EXTRAPOLATION_MARGIN`, chosen here). Serious when more than twice the
    range beyond. ``probes``: `probe_points` of ``data.X`` already computed.
    """
    X, y = np.asarray(data.X, float), np.asarray(data.y, float)
    inputs = tuple(getattr(data, "inputs", None) or next(iter(models.values())).input_names)
    y_lo, y_hi = float(y.min()), float(y.max())
    y_span = y_hi - y_lo if y_hi > y_lo else 1.0
    probes = probe_points(X) if probes is None else probes
    P = np.vstack(probes["point"].to_numpy()) if len(probes) else np.zeros((0, X.shape[1]))
    frames = []
    for (q, a), m in models.items():
        pred = m.predict(P)
        beyond = np.maximum.reduce([y_lo - pred, pred - y_hi, np.zeros_like(pred)]) / y_span
        margin = np.full(pred.shape, EXTRAPOLATION_MARGIN)
        frames.append(pd.DataFrame({
            "model": _model_name(q, a), "order": q, "penalty": a,
            "input": [inputs[j] for j in probes["input_index"]], "where": probes["where"],
            "x": probes["x"], "prediction": pred, "target_min": y_lo, "target_max": y_hi,
            "beyond": beyond, "margin": margin, "flagged": beyond > margin}))
    table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    if table.empty or not table["flagged"].any():
        return None, table
    flagged = table[table["flagged"]]
    worst = flagged.loc[flagged["beyond"].idxmax()]
    bad_models = list(dict.fromkeys(flagged["model"]))
    bad_cells = list(dict.fromkeys(zip(flagged["order"].astype(int), flagged["penalty"].astype(float))))
    ok_models = [lab for lab in dict.fromkeys(table["model"]) if lab not in bad_models]
    d = X.shape[1]
    factor = float(worst["beyond"])
    message = (f"{_capital(worst['model'])} predicts "
               f"{_num(worst['prediction'])} at {worst['input']} = {_num(worst['x'])} "
               f"({worst['where']}), {_num(factor, 2)} times the target's observed range "
               f"beyond it (observed {_num(y_lo)} .. {_num(y_hi)}; the check fires at more "
               "than half the range beyond it)")
    others = [m for m in bad_models if m != worst["model"]]
    if others:
        message += f"; {_join(others)} also leave{'s' if len(others) == 1 else ''} the range"
    message += "."
    lo, hi = X.min(axis=0), X.max(axis=0)
    if d == 1:
        where = f"beyond {inputs[0]} = {_num(lo[0])} .. {_num(hi[0])}"
    else:
        names = list(dict.fromkeys(flagged["input"]))
        parts = [f"{nm} {_num(lo[inputs.index(nm)])} .. {_num(hi[inputs.index(nm)])}"
                 for nm in names[:4]]
        if len(names) > 4:
            parts.append(f"and {len(names) - 4} more inputs")
        where = "outside the measured ranges (" + "; ".join(parts) + ")"
    advice = f"Do not use {_join(bad_models)} {where}"
    if ok_models:
        advice += f"; if predictions near or past the ends matter, prefer {ok_models[0]}"
    advice += (". Where these predictions feed safety decisions, let your own standards "
               "set the valid range.")
    severity = "serious" if factor > EXTRAPOLATION_SERIOUS else "caution"
    details = {"models": bad_models, "cells": [list(c) for c in bad_cells],
               "worst_input": worst["input"], "worst_x": float(worst["x"]),
               "worst_prediction": float(worst["prediction"]),
               "target_range": [y_lo, y_hi]}
    return Finding("extrapolation", message, factor, advice, severity, details), table


def check_leverage(data: DataLike, analysis: Analysis,
                   cells: list[tuple[int, float]], fold_stats=None
                   ) -> tuple[Finding | None, pd.DataFrame]:
    """Do held-out rows lie far from the rows each fit learned from?

    For each candidate and each split of the analysis's first round, the
    leverage of the validation rows in the design of the training rows
    (`leverage`); for leave-one-out ``h / (1 - h)``, the exact value for a row
    against the other rows. The flag is 2p/n with p the effective number of
    parameters and n the training rows (common practice). Fires when the share
    of held-out rows above it exceeds the training rows' own share by more
    than 10 percentage points (`LEVERAGE_EXCESS`, chosen here).
    """
    spec = analysis.spec
    X = np.asarray(data.X, float)
    rows = []
    for q, a in cells:
        val_above = val_total = tr_above = tr_total = 0
        max_lev = 0.0
        thresholds = []
        sampled = False
        if fold_stats is not None and not analysis.plan.loo:
            # large tables: fits and thresholds from summaries, shares on a seeded sample
            for part in split_leverage(fold_stats, X, q, a, int(spec.seed),
                                       SAMPLE_ROWS):
                thresholds.append(part["threshold"])
                val_above += part["validation_share_above"] * part["validation_rows"]
                val_total += part["validation_rows"]
                tr_above += part["training_share_above"] * part["training_rows"]
                tr_total += part["training_rows"]
                max_lev = max(max_lev, part["max_validation_leverage"])
                sampled = sampled or part["sampled"]
        elif analysis.plan.loo:
            Ft, _ = model_terms(X, None, spec.inputs, q, a, spec.interactions)
            h = leverage(Ft, None, a)
            n = X.shape[0]
            p_eff = float(h.sum())
            thr = LEVERAGE_MULTIPLE * p_eff / n
            hv = np.where(h < 1, h / np.where(h < 1, 1 - h, 1.0), np.inf)
            val_above, val_total = int(np.sum(hv > thr)), n
            tr_above, tr_total = int(np.sum(h > thr)), n
            max_lev = float(np.max(hv))
            thresholds.append(thr)
        else:
            for tr, va in _first_round(analysis):
                Ft, Fq = model_terms(X[tr], X[va], spec.inputs, q, a, spec.interactions)
                h_tr = leverage(Ft, None, a)
                h_va = leverage(Ft, Fq, a)
                thr = LEVERAGE_MULTIPLE * float(h_tr.sum()) / tr.size
                thresholds.append(thr)
                val_above += int(np.sum(h_va > thr))
                val_total += va.size
                tr_above += int(np.sum(h_tr > thr))
                tr_total += tr.size
                max_lev = max(max_lev, float(np.max(h_va)) if h_va.size else 0.0)
        rows.append({"model": _model_name(q, a), "order": q, "penalty": a,
                     "threshold": float(np.mean(thresholds)),
                     "validation_share_above": val_above / max(val_total, 1),
                     "training_share_above": tr_above / max(tr_total, 1),
                     "max_validation_leverage": max_lev,
                     "validation_rows": val_total, "sampled": sampled})
    table = pd.DataFrame(rows, columns=["model", "order", "penalty", "threshold",
                                        "validation_share_above", "training_share_above",
                                        "max_validation_leverage", "validation_rows",
                                        "sampled"])
    if table.empty:
        return None, table
    excess = table["validation_share_above"] - table["training_share_above"]
    if not (excess > LEVERAGE_EXCESS).any():
        return None, table
    w = table.loc[excess.idxmax()]
    message = (f"For {w['model']}, {_pct(w['validation_share_above'])} of the held-out rows "
               f"have leverage above 2p/n = {_num(w['threshold'], 2)} (common practice), against "
               f"{_pct(w['training_share_above'])} of the training rows: held-out rows lie "
               "away from the rows the fit learned from.")
    advice = ("Treat predictions for such rows as extrapolation: compare their input values "
              "with the training rows (see the period shift table) and collect rows that "
              "cover them before relying on the model there.")
    details = {"model": w["model"], "threshold": float(w["threshold"]),
               "validation_share_above": float(w["validation_share_above"]),
               "training_share_above": float(w["training_share_above"])}
    severity = "serious" if float(excess.max()) > 3 * LEVERAGE_EXCESS else "caution"
    return (Finding("high_leverage", message, float(w["validation_share_above"]), advice,
                    severity, details), table)


def _sweep_effective_df(analysis: Analysis) -> dict[tuple[int, float], float]:
    """Effective degrees of freedom of each (order, penalty) cell as the sweep measured
    them (cells with several rows on other grid axes are left out)."""
    t = analysis.validation
    if "effective_df" not in t:
        return {}
    keys = list(zip(t["order"].astype(int), t["penalty"].astype(float)))
    seen: dict = {}
    for k, v in zip(keys, t["effective_df"].astype(float)):
        seen[k] = None if k in seen else float(v)
    return {k: v for k, v in seen.items() if v is not None}


def check_samples_per_parameter(n_rows: int, models: dict[tuple[int, float], FinalModel],
                                effective: dict[tuple[int, float], float] | None = None
                                ) -> tuple[Finding | None, pd.DataFrame]:
    """Fewer than 10 rows per fitted parameter (rule of thumb, common practice).

    Parameters are the effective degrees of freedom of each candidate's final
    fit (the number of coefficients, intercept included, without a penalty;
    fewer with one). Serious below 5 rows per parameter. ``effective`` gives the
    effective degrees of freedom the sweep measured for a cell; when given, it is
    used, so the page's samples-per-parameter tile and this warning count alike
    (`engine.labels.samples_per_parameter`).
    """
    rows = []
    for (q, a), m in models.items():
        p = max(float((effective or {}).get((int(q), float(a)), m.effective_df)), 1.0)
        rows.append({"model": _model_name(q, a), "order": q, "penalty": a,
                     "coefficients": len(m.terms), "effective_parameters": p,
                     "rows": n_rows, "rows_per_parameter": n_rows / p})
    table = pd.DataFrame(rows, columns=["model", "order", "penalty", "coefficients",
                                        "effective_parameters", "rows", "rows_per_parameter"])
    low = table[table["rows_per_parameter"] < ROWS_PER_PARAMETER]
    if low.empty:
        return None, table
    w = low.loc[low["rows_per_parameter"].idxmin()]
    pen = float(w["penalty"]) > 0
    p_eff, p_all = float(w["effective_parameters"]), int(w["coefficients"])
    if pen:
        what = f"{p_eff:.1f} effective parameters (of {p_all} coefficients)"
    elif p_eff < p_all - 0.5:
        what = f"{p_all} coefficients, of which the data determine only {p_eff:.0f},"
    else:
        what = f"{p_all} parameters"
    message = (f"{_capital(w['model'])} fits {what} to {_rows(n_rows)} rows, "
               f"{float(w['rows_per_parameter']):.1f} rows per parameter; a common rule of thumb "
               f"asks for at least {ROWS_PER_PARAMETER:g}.")
    others = [m for m in low["model"] if m != w["model"]]
    if others:
        message = message[:-1] + f" ({_join(others)} also below)."
    need = int(math.ceil(ROWS_PER_PARAMETER * float(w["effective_parameters"])))
    advice = (f"Collect more rows (about {_rows(need)} for this model) or prefer a simpler "
              "model or a larger penalty; treat the validation error of this model as rough.")
    severity = "serious" if float(w["rows_per_parameter"]) < ROWS_PER_PARAMETER_SERIOUS else "caution"
    details = {"models": list(low["model"]), "rows": n_rows,
               "parameters": float(w["effective_parameters"])}
    return (Finding("few_samples_per_parameter", message, float(w["rows_per_parameter"]), advice,
                    severity, details), table)


def penalised_condition_number(X: np.ndarray, input_names, order: int, penalty: float,
                               interactions: bool) -> float:
    """Condition number of the ridge system on standardised terms.

    ``sqrt((s_max^2 + penalty) / (s_min^2 + penalty))`` with ``s`` the
    singular values of the centred, standardised raw-term design (missing
    singular values, when terms outnumber rows, count as 0). Without a penalty
    this is the design's own condition number.
    """
    Ft, _ = model_terms(X, None, input_names, order, 1.0, interactions)
    if Ft.shape[1] == 0:
        return 1.0
    sd = Ft.std(axis=0)
    Z = (Ft - Ft.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
    s, _ = _singular(Z)
    if s.size < Z.shape[1]:
        s = np.r_[s, np.zeros(Z.shape[1] - s.size)]
    top, low = s.max() ** 2 + penalty, s.min() ** 2 + penalty
    return float(np.sqrt(top / low)) if low > 0 else float("inf")


def check_conditioning(data: DataLike, models: dict[tuple[int, float], FinalModel],
                       interactions: bool) -> tuple[Finding | None, pd.DataFrame]:
    """Condition number of each candidate's standardised design.

    Without a penalty, `FinalModel.condition_number`; with one, the condition
    number of the penalised system (`penalised_condition_number`), since the
    penalty is what keeps such a fit stable. Caution above 1e3, serious above
    1e6 (see `CONDITION_CAUTION`).
    """
    X = np.asarray(data.X, float)
    rows = []
    for (q, a), m in models.items():
        sv = getattr(m, "design_singular_values", None)
        if a == 0:
            c = float(m.condition_number)
        elif sv is not None and len(sv):
            # the fit's own singular values (missing ones, terms beyond rows, count as 0)
            s2 = np.r_[np.asarray(sv, float), np.zeros(max(len(m.terms) - 1 - len(sv), 0))] ** 2
            low = s2.min() + a
            c = float(np.sqrt((s2.max() + a) / low)) if low > 0 else float("inf")
        else:
            c = penalised_condition_number(X, m.input_names, q, a, interactions)
        rows.append({"model": _model_name(q, a), "order": q, "penalty": a,
                     "condition_number": c, "design_condition_number": float(m.condition_number)})
    table = pd.DataFrame(rows, columns=["model", "order", "penalty", "condition_number",
                                        "design_condition_number"])
    bad = table[~(table["condition_number"] <= CONDITION_CAUTION)]
    if bad.empty:
        return None, table
    w = bad.loc[bad["condition_number"].fillna(np.inf).idxmax()] if bad["condition_number"].notna().any() else bad.iloc[0]
    c = float(w["condition_number"])
    c_txt = "infinite (some terms are exact combinations of others)" if not np.isfinite(c) else _num(c, 2)
    with_pen = " (penalty included)" if float(w["penalty"]) > 0 else ""
    message = (f"The standardised design of {w['model']}{with_pen} has condition number "
               f"{c_txt}: its terms nearly repeat each other, so single coefficients swing "
               f"with small changes in the data (caution above {CONDITION_CAUTION:,.0f}, "
               f"serious above {CONDITION_SERIOUS:,.0f}).")
    others = [m for m in bad["model"] if m != w["model"]]
    if others:
        message = (message[:-1] + f"; {_join(others)} also "
                   f"{'exceeds' if len(others) == 1 else 'exceed'} the caution level.")
    advice = ("Read the model's predictions rather than its individual coefficients, copy "
              "coefficients at full precision if you use them elsewhere, and prefer a lower "
              "order, fewer inputs or a ridge penalty if the coefficients themselves matter.")
    severity = "serious" if not (c <= CONDITION_SERIOUS) else "caution"
    details = {"models": list(bad["model"]), "condition_number": c}
    return (Finding("ill_conditioned", message, c, advice, severity, details), table)


def leakage_table(found: list) -> pd.DataFrame:
    """One row per `engine.leakage.Reproduction`: columns, kind, relation and closeness."""
    rows = [{"columns": ", ".join(r.columns), "kind": r.kind, "relation": r.relation,
             "r2": r.r2, "validation_r2": r.validation_r2,
             "rank_correlation": r.rank_correlation, "residual_share": r.residual_share,
             "exact": r.exact} for r in found]
    return pd.DataFrame(rows, columns=["columns", "kind", "relation", "r2", "validation_r2",
                                       "rank_correlation", "residual_share", "exact"])


def check_target_leakage(data: DataLike, inputs, target: str
                         ) -> tuple[Finding | None, pd.DataFrame]:
    """Does an input, or a weighted sum of two, reproduce the target almost exactly?

    Screened from correlations and ranks (`engine.leakage.find_reproductions`):
    a straight line in one input, a standard transform (log, square root,
    square, reciprocal), a monotone function by ranks, or a plane in two inputs,
    with leave-one-out R² of at least 0.999 (rank correlation 0.999 for the
    monotone kind). Fires when other inputs remain besides the ones found (the
    model then rides on them) or when the relation is exact (residual below
    0.1% of the target's SD); with only those inputs and an inexact relation
    (a calibration against a reference) it stays quiet. Serious when other
    inputs remain and the relation is a fitted one, caution otherwise.
    """
    X, y = np.asarray(data.X, float), np.asarray(data.y, float)
    inputs = [str(c) for c in inputs]
    found = _leakage.find_reproductions(X, y, inputs, str(target))
    table = leakage_table(found)
    named = {c for r in found for c in r.columns}
    others = [c for c in inputs if c not in named]
    fire = [r for r in found if r.exact or others]
    if not fire:
        return None, table
    top = fire[0]
    cols = [c for r in fire for c in r.columns]
    clauses = [_leakage.describe(r, str(target)) for r in fire[:3]]
    more = f" ({len(fire) - 3} more in the leakage table)" if len(fire) > 3 else ""
    message = (f"{'Input' if len(cols) == 1 else 'Inputs'} {_join(cols)} "
               f"{'reproduces' if len(cols) == 1 else 'reproduce'} "
               f"the target {target} almost exactly: " + "; ".join(clauses) + more
               + ". Any model with "
               + ("this input" if len(cols) == 1 else "these inputs")
               + " looks near-perfect on validation rows for that reason alone.")
    advice = (f"If {_join(cols)} {'is' if len(cols) == 1 else 'are'} computed from {target} "
              "or recorded after it (a transformed copy, a total or difference it is part "
              "of), remove it from the inputs and sweep again. If it is an independent "
              "measurement taken before the target is known (a reference instrument), "
              "this warning can be set aside.")
    serious = bool(others) and any(r.kind != "monotone" for r in fire)
    details = {"columns": cols, "others": others,
               "reproductions": [r.to_dict() for r in fire]}
    value = float(top.validation_r2 if np.isfinite(top.validation_r2)
                  else top.rank_correlation ** 2)
    return (Finding("target_leakage", message, value, advice,
                    "serious" if serious else "caution", details), table)


def check_train_validation_gap(analysis: Analysis) -> tuple[Finding | None, dict]:
    """Validation error far above training error for the recommended cell.

    Fires when the mean validation MSE exceeds `GAP_RATIO` (2) times the mean
    training MSE (chosen here: for a well-specified model with p parameters
    and n rows the expected ratio is about (n + p) / (n - p), close to 1);
    serious above 5.
    """
    rec = analysis.recommendation.recommended
    tr, va = float(rec.train_mse), float(rec.validation_mse)
    ratio = va / tr if tr > 0 else (float("inf") if va > 0 else 1.0)
    info = {"model": rec.label, "train_mse": tr, "validation_mse": va, "ratio": ratio}
    if not ratio > GAP_RATIO:
        return None, info
    r_txt = "infinitely many" if not np.isfinite(ratio) else _num(ratio, 2)
    message = (f"For the recommended {rec.label} the validation error is {r_txt} times the "
               f"training error (MSE {_num(va)} against {_num(tr)}); above {GAP_RATIO:g} times "
               "suggests the fit relies on its own training rows.")
    advice = ("Prefer a simpler model or a larger penalty, or collect more rows; if the gap "
              "comes from a later period or from dependent rows, see those checks.")
    severity = "serious" if ratio > GAP_RATIO_SERIOUS else "caution"
    return Finding("train_validation_gap", message, ratio, advice, severity, info), info


def validation_rows(plan) -> tuple[int, int]:
    """(rows held out at least once, fewest rows held out by one split) of a plan."""
    if getattr(plan, "loo", False):
        return int(plan.n_rows), 1
    seen = np.zeros(int(plan.n_rows), dtype=bool)
    fewest = int(plan.n_rows)
    for rnd in plan.rounds:
        used = rnd.pieces >= 0
        counts = np.bincount(rnd.pieces[used], minlength=rnd.n_pieces)
        valid = np.asarray(rnd.valid, dtype=float)
        if valid.size:
            fewest = min(fewest, int((valid @ counts).min()))
            held = np.flatnonzero(valid.any(axis=0))
            seen |= used & np.isin(rnd.pieces, held)
    return int(seen.sum()), fewest


def check_validation_rows(analysis: Analysis) -> tuple[Finding | None, dict]:
    """The validation error rests on very few held-out rows.

    Fires when fewer than `MIN_VALIDATION_ROWS` (10, common practice) distinct
    rows are held out over all splits (for one split, e.g. a holdout, that
    split's validation set; k-fold holds out every row once, leave-one-out too);
    serious under `MIN_VALIDATION_ROWS_SERIOUS` (3). The sentence gives the
    rough relative standard error of an RMSE from m rows, 1 / sqrt(2 m).
    """
    plan = analysis.plan
    held, fewest = validation_rows(plan)
    splits = int(plan.n_splits)
    info = {"rows_held_out": held, "fewest_in_a_split": fewest, "splits": splits,
            "threshold": MIN_VALIDATION_ROWS}
    if held >= MIN_VALIDATION_ROWS:
        return None, info
    spread = 1.0 / np.sqrt(2.0 * max(held, 1))
    info["rmse_relative_se"] = spread
    split_text = "its one split" if splits == 1 else f"its {splits} splits together"
    message = (f"The validation error rests on only {_rows(held)} row"
               f"{'s' if held != 1 else ''} held out "
               f"({split_text}); an RMSE from so few rows is uncertain by about "
               f"\u00b1{_pct(spread)} (one standard error), too much to tell the models apart. "
               f"Fewer than {MIN_VALIDATION_ROWS} held-out rows fire this warning (common "
               "practice).")
    advice = ("Hold out more rows (a larger holdout fraction) or use k-fold "
              "cross-validation, which holds out every row once; then run again.")
    severity = "serious" if held < MIN_VALIDATION_ROWS_SERIOUS else "caution"
    return Finding("few_validation_rows", message, float(held), advice, severity, info), info


def check_grid_edges(analysis: Analysis) -> tuple[Finding | None, pd.DataFrame]:
    """The chosen cell on an edge of the swept range: the range may be too narrow.

    Fires when the best or recommended cell lies on the largest (or smallest
    positive) penalty of a range the user fixed (a data-fitted range widens
    itself first, see `engine.penalty_range`; it fires too if it is still on
    an edge after widening), or when the recommended cell uses the highest
    order swept. Penalty edges count only where a stronger (weaker) penalty
    could still change the fit by more than half a degree of freedom.
    """
    from .labels import penalty_text
    from .penalty_range import edge_sentence, edge_table, range_of

    rec = analysis.recommendation
    spec = analysis.spec
    edges = list(getattr(analysis, "penalty_edges", []) or [])
    table = edge_table(edges)
    sentences, advice = [], []
    if edges:
        lo, hi = range_of(spec.penalties)
        sentences += [edge_sentence(e, lo, hi) + "." for e in edges]
        advice.append(
            f"Widen the penalty range past {penalty_text(hi if edges[0].side == 'upper' else lo)}"
            + (" (or let the range follow the data)" if spec.penalty_range == "given" else "")
            + " and run again; the pick may move.")
    orders = spec.order_list()
    top = max(orders) if orders else 0
    r = rec.recommended
    # a straight line of several inputs is usually a deliberate choice; from order 2
    # (or one input) a pick at the top of the range says the range may be too short
    if (top >= 2 or (top == 1 and len(spec.inputs) == 1)) and int(r.order) == top \
            and r.parameters > 1:
        sentences.append(f"The recommended cell uses order {top}, the highest order swept "
                         f"(orders {min(orders)} to {top}); a higher order was not tried.")
        advice.append(f"Sweep orders above {top} to see whether the data support more; "
                      "keep the lower order if they add nothing.")
        table = pd.concat([table, pd.DataFrame([{"side": "highest order", "role": "recommended",
                                                 "penalty": r.penalty,
                                                 "effective_df": r.effective_df,
                                                 "parameters": r.parameters}])],
                          ignore_index=True)
    if not sentences:
        return None, table
    message = " ".join(sentences) + " The range swept may be too narrow."
    return Finding("range_edge", message, float(len(sentences)), " ".join(advice), "caution",
                   {"penalty_range": list(range_of(spec.penalties)),
                    "penalty_range_from_data": spec.penalty_range == "data",
                    "highest_order": int(top),
                    "edges": table.to_dict(orient="records")}), table


# ---------------------------------------------------------------------------
# all checks
# ---------------------------------------------------------------------------
def default_candidates(analysis: Analysis) -> list[tuple[int, float]]:
    """The recommended and the best cell (once if they coincide)."""
    r, b = analysis.recommendation.recommended, analysis.recommendation.best
    out = [(int(r.order), float(r.penalty))]
    if (int(b.order), float(b.penalty)) not in out:
        out.append((int(b.order), float(b.penalty)))
    return out


@dataclass
class ChecksAhead:
    """The parts of `run_checks` that read every row but need no more than the data,
    the analysis and the recommended model fitted on all rows, so they can be
    computed beside other work (`checks_ahead`).

    Attributes
    ----------
    shift : `period_shift_table`.
    probes : `probe_points` of the inputs.
    durbin_watson : `final_fit_durbin_watson` of the recommended model.
    model : that model (its residuals are only used for the recommended cell).
    """

    shift: pd.DataFrame
    probes: pd.DataFrame
    durbin_watson: float | None
    model: FinalModel


def checks_ahead(data: DataLike, analysis: Analysis, model: FinalModel) -> ChecksAhead:
    """`ChecksAhead` for ``data``, ``analysis`` and the recommended cell's ``model``.

    Uses no BLAS routine and changes nothing shared, so it may run in a thread
    while the caller computes something else; `run_checks` takes the result."""
    return ChecksAhead(shift=period_shift_table(data, analysis),
                       probes=probe_points(np.asarray(data.X, float)),
                       durbin_watson=final_fit_durbin_watson(data, model), model=model)


def run_checks(data: DataLike, analysis: Analysis,
               candidates: list[tuple[int, float]] | None = None,
               progress: Progress | None = None,
               models: dict[tuple[int, float], FinalModel] | None = None,
               oof: tuple | None = None,
               ahead: ChecksAhead | Callable[[], ChecksAhead] | None = None) -> CheckReport:
    """Run every warning-sign check on a finished analysis.

    Parameters
    ----------
    data : the prepared data the analysis ran on (rows in time order when an
        order column was given; otherwise the table's row order is used).
    analysis : `engine.analysis.analyse` output.
    candidates : (order, penalty) cells to check for extrapolation, leverage,
        rows per parameter and conditioning; default the recommended and best
        cells.
    progress : called as ``progress(fraction_done, message)``.
    models : the candidates already fitted on all rows (`engine.compare.fit_candidates`),
        so that they are fitted once; missing ones are fitted here.
    oof : ``(rows, residuals)``, the recommended cell's (ridge) out-of-fold residuals on
        the first round of splits already formed (`engine.intervals.PredictionIntervals.oof`);
        used for a large table instead of a pass of its own.
    ahead : `checks_ahead` for this data and analysis, or a function that waits for it
        (started in a thread beside other work); computed here when None.

    Returns
    -------
    CheckReport
        Findings in the order target leakage, serial dependence, period shift,
        extrapolation, leverage, rows per parameter, conditioning,
        train/validation gap; tables for each.
    """
    # many small factorisations: on a busy machine a threaded BLAS spends far longer
    # coordinating threads than computing (measured: a QR of 2,400 x 18 took 0.12 s on
    # two threads under load against 0.003 s on one)
    with one_thread():
        return _run_checks(data, analysis, candidates, progress, models, oof, ahead)


def _run_checks(data: DataLike, analysis: Analysis, candidates, progress,
                fitted=None, oof=None, ahead=None) -> CheckReport:
    def tick(f: float, msg: str) -> None:
        if progress:
            progress(f, msg)

    spec = analysis.spec
    cells = default_candidates(analysis) if candidates is None else [
        (int(q), float(a)) for q, a in candidates]
    rec = analysis.recommendation.recommended
    tick(0.0, "Fitting the candidates on all rows")
    fam = {"family": rec.family, "l1_ratio": rec.l1_ratio}
    fitted = dict(fitted or {})
    missing = [c for c in cells if c not in fitted]
    if missing:
        fitted.update(fit_candidates(data, spec, missing, **fam))
    models = {c: fitted[c] for c in cells}
    rec_key = (int(rec.order), float(rec.penalty))
    fold_stats = None
    if np.asarray(data.y).size >= LARGE_ROWS and not analysis.plan.loo:
        # large tables: one pass gives every split's training summaries, shared by the
        # residual and leverage checks (no refits on the rows)
        top = max([q for q, _ in cells] + [int(rec.order)])
        fold_stats = analysis.fold_summaries()      # the sweep's pieces, when it kept them
        if fold_stats is None or fold_stats.basis.max_order < top:
            design = PolynomialBasis.fit(np.asarray(data.X, float), spec.inputs, top,
                                         spec.interactions)
            fold_stats = fold_summaries(data.X, data.y, design, analysis.plan)
    rec_model = models.get(rec_key) or fit_candidates(data, spec, [rec_key], **fam)[rec_key]
    if callable(ahead):
        ahead = ahead()
    if ahead is not None and ahead.model is not rec_model:
        ahead = replace(ahead, durbin_watson=None)   # residuals of another fit: not used
    report = CheckReport()
    summary = []
    basis = row_order_basis(data, analysis)
    report.row_order = basis.to_dict()
    report.notes.append(basis.sentence)
    if not basis.use:
        report.skipped = [{"code": c, "reason": basis.sentence} for c in ROW_ORDER_CHECKS]

    tick(0.1, "Looking for inputs that reproduce the target")
    f0, t_leak = check_target_leakage(data, spec.inputs, spec.target)
    report.tables["leakage"] = t_leak
    summary.append(("target_leakage", f0,
                    float(t_leak["validation_r2"].max()) if len(t_leak) else float("nan"),
                    "one input or two reproduce the target with validation R² of at least "
                    f"{_leakage.NEAR_R2} (rank correlation {_leakage.NEAR_RANK} for a "
                    "monotone function)"))

    tick(0.15, "Checking for dependence between neighbouring rows")
    f, t_serial, comparison = check_serial_dependence(
        data, analysis, rec_model, basis, fold_stats=fold_stats,
        oof=oof if fold_stats is not None and rec.family == "ridge" else None,
        dw=ahead.durbin_watson if ahead is not None else None)
    report.tables["serial"] = t_serial
    if comparison is not None:
        report.tables["scheme_comparison"] = comparison
    summary.append(("serial_dependence", f, float(t_serial.loc[2, "value"]),
                    f"residual lag-1 autocorrelation above {RESIDUAL_AUTOCORRELATION_LIMIT} or "
                    f"Durbin-Watson outside {DURBIN_WATSON_RANGE[0]:g}-{DURBIN_WATSON_RANGE[1]:g}"))

    tick(0.45, "Comparing the earlier and later rows")
    f2, t_shift = check_period_shift(data, analysis, basis,
                                     table=ahead.shift if ahead is not None else None)
    report.tables["period_shift"] = t_shift
    summary.append(("period_shift", f2, float(t_shift["psi"].max()) if len(t_shift) else float("nan"),
                    f"an input with PSI above {PSI_MODERATE} and KS p-value below {SHIFT_P_VALUE}"))

    tick(0.6, "Probing predictions past the data")
    f3, t_ext = check_extrapolation(data, models,
                                    probes=ahead.probes if ahead is not None else None)
    report.tables["extrapolation"] = t_ext
    summary.append(("extrapolation", f3, float(t_ext["beyond"].max()) if len(t_ext) else float("nan"),
                    "a prediction near or past the data more than half the target's "
                    "range beyond that range"))

    tick(0.7, "Computing leverage of held-out rows")
    f4, t_lev = check_leverage(data, analysis, cells, fold_stats=fold_stats)
    if len(t_lev) and "sampled" in t_lev and bool(t_lev["sampled"].any()):
        report.notes.append(
            f"Leverage: thresholds and fits from all rows; the shares of rows above the "
            f"threshold were counted on a seeded sample of at most {SAMPLE_ROWS:,} training "
            f"and {SAMPLE_ROWS:,} held-out rows per split (seed {int(spec.seed)}).")
    if fold_stats is not None:
        report.notes.append(
            "Out-of-fold residuals: each split's fit solved from its training summaries, "
            "residuals of every held-out row in one pass over the rows (no sample).")
    report.tables["leverage"] = t_lev
    exc = (t_lev["validation_share_above"] - t_lev["training_share_above"]).max() if len(t_lev) else float("nan")
    summary.append(("high_leverage", f4, float(exc),
                    f"held-out share above 2p/n more than {_pct(LEVERAGE_EXCESS)} points above "
                    "the training share"))

    tick(0.85, "Counting rows per parameter and conditioning")
    n = int(np.asarray(data.y).size)
    f5, t_spp = check_samples_per_parameter(n, models, _sweep_effective_df(analysis))
    report.tables["samples_per_parameter"] = t_spp
    summary.append(("few_samples_per_parameter", f5, float(t_spp["rows_per_parameter"].min()),
                    f"fewer than {ROWS_PER_PARAMETER:g} rows per parameter"))
    f6, t_cond = check_conditioning(data, models, spec.interactions)
    report.tables["conditioning"] = t_cond
    summary.append(("ill_conditioned", f6, float(t_cond["condition_number"].max()),
                    f"condition number above {CONDITION_CAUTION:,.0f}"))
    f7, gap_info = check_train_validation_gap(analysis)
    summary.append(("train_validation_gap", f7, float(gap_info["ratio"]),
                    f"validation MSE more than {GAP_RATIO:g} times training MSE"))
    f8, t_edges = check_grid_edges(analysis)
    report.tables["range_edges"] = t_edges
    summary.append(("range_edge", f8, float(len(t_edges)),
                    "the chosen cell on an edge of the penalty range or at the highest order"))

    f9, rows_info = check_validation_rows(analysis)
    summary.append(("few_validation_rows", f9, float(rows_info["rows_held_out"]),
                    f"fewer than {MIN_VALIDATION_ROWS} rows held out for validation"))

    report.findings = [x for x in (f0, f, f2, f3, f4, f5, f6, f7, f8, f9) if x is not None]
    skipped = {x["code"]: x["reason"] for x in report.skipped}
    report.tables["summary"] = pd.DataFrame(
        [{"code": c, "fired": fi is not None, "severity": fi.severity if fi else "",
          "value": v, "fires_when": rule,
          "note": (f"not used: {skipped[c]}" if c in skipped else
                   f"assumes the file's row order is time order"
                   if basis.status == "assumed" and c in ROW_ORDER_CHECKS else "")}
         for c, fi, v, rule in summary])
    report.notes += [
        f"Checked {len(cells)} candidate{'s' if len(cells) != 1 else ''}: "
        + "; ".join(_model_name(q, a) for q, a in cells) + ".",
        "These checks are screening aids; passing them does not show that a model is fit "
        "for use. Where predictions feed decisions about safety, your own validation "
        "standards apply.",
    ]
    tick(1.0, "Checks done")
    return report
