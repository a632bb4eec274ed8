"""Checks for the committed demo data sets and the script that makes them."""

from __future__ import annotations

import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_data"
SCRIPT = DEMO / "make_demo_data.py"
FILES = ("calibration_curve.csv", "drifting_line_sensors.csv", "wide_spectra.csv")


def _lag1(values: np.ndarray) -> float:
    values = np.asarray(values, dtype=float)
    return float(np.corrcoef(values[:-1], values[1:])[0, 1])


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo_regen")
    subprocess.run(
        [sys.executable, str(SCRIPT), "--out", str(out)],
        check=True,
        capture_output=True,
        cwd=REPO,
    )
    return out


@pytest.mark.parametrize("name", FILES)
def test_regeneration_is_byte_identical(regenerated: Path, name: str) -> None:
    committed = (DEMO / name).read_bytes()
    fresh = (regenerated / name).read_bytes()
    assert fresh == committed, f"{name} differs from a fresh run of make_demo_data.py"


# ---------------------------------------------------------------- calibration
@pytest.fixture(scope="module")
def calibration() -> pd.DataFrame:
    return pd.read_csv(DEMO / "calibration_curve.csv")


def test_calibration_shape_and_spacing(calibration: pd.DataFrame) -> None:
    assert calibration.shape == (24, 2)
    assert list(calibration.columns) == ["probe_mV", "bath_temp_C"]
    assert not calibration.isna().any().any()
    steps = np.diff(np.sort(calibration["probe_mV"].to_numpy()))
    assert np.all(steps > 0)
    # Not evenly spaced: step sizes vary a lot.
    assert steps.std() / steps.mean() > 0.5


def test_calibration_low_order_wins_leave_one_out(calibration: pd.DataFrame) -> None:
    x = calibration["probe_mV"].to_numpy()
    y = calibration["bath_temp_C"].to_numpy()
    loo = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # high orders are ill-conditioned by design
        for order in range(1, 11):
            errors = []
            for i in range(len(x)):
                keep = np.arange(len(x)) != i
                coef = np.polyfit(x[keep], y[keep], order)
                errors.append((np.polyval(coef, x[i]) - y[i]) ** 2)
            loo[order] = float(np.mean(errors))
    best = min(loo, key=loo.get)
    assert best in (2, 3)
    assert min(loo[k] for k in (8, 9, 10)) > 3 * loo[best]


# ---------------------------------------------------------------- drift
@pytest.fixture(scope="module")
def drift() -> pd.DataFrame:
    return pd.read_csv(DEMO / "drifting_line_sensors.csv")


DRIFT_CHANNELS = [
    "inlet_temp_C",
    "jacket_temp_C",
    "feed_pressure_kPa",
    "feed_flow_L_min",
    "stirrer_speed_rpm",
    "coolant_flow_L_min",
]


def test_drift_shape_and_time_axis(drift: pd.DataFrame) -> None:
    assert drift.shape == (3000, 9)
    assert list(drift.columns) == ["minute", "timestamp", *DRIFT_CHANNELS, "yield_pct"]
    assert np.array_equal(drift["minute"].to_numpy(), np.arange(3000))
    stamps = pd.to_datetime(drift["timestamp"], format="%Y-%m-%dT%H:%M:%S")
    assert (stamps.diff().dropna() == pd.Timedelta(minutes=1)).all()


def test_drift_serial_dependence(drift: pd.DataFrame) -> None:
    for col in DRIFT_CHANNELS:
        assert _lag1(drift[col]) > 0.9, col
    assert _lag1(drift["yield_pct"]) > 0.8


def test_drift_feed_flow_shifts_in_last_quarter(drift: pd.DataFrame) -> None:
    flow = drift["feed_flow_L_min"].to_numpy()
    cut = int(0.75 * len(flow))
    early, late = flow[:cut], flow[cut:]
    assert (late.mean() - early.mean()) / early.std() > 1.0


def test_drift_shuffled_folds_flatter_flexible_model(drift: pd.DataFrame) -> None:
    from sklearn.linear_model import Ridge
    from sklearn.model_selection import KFold, cross_val_score
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures, StandardScaler

    X = drift[DRIFT_CHANNELS].to_numpy()
    y = drift["yield_pct"].to_numpy()
    model = make_pipeline(PolynomialFeatures(3), StandardScaler(), Ridge(alpha=1e-2))
    shuffled = cross_val_score(model, X, y, cv=KFold(5, shuffle=True, random_state=0)).mean()
    blocked = cross_val_score(model, X, y, cv=KFold(5, shuffle=False)).mean()
    assert shuffled > blocked + 0.2


# ---------------------------------------------------------------- spectra
@pytest.fixture(scope="module")
def spectra() -> pd.DataFrame:
    return pd.read_csv(DEMO / "wide_spectra.csv")


def test_spectra_shape_is_wide(spectra: pd.DataFrame) -> None:
    assert spectra.shape == (60, 151)
    channels = [c for c in spectra.columns if c.startswith("abs_")]
    assert len(channels) == 150
    assert channels[0] == "abs_400nm" and channels[-1] == "abs_698nm"
    assert spectra.columns[-1] == "analyte_mg_L"
    assert spectra.shape[1] > spectra.shape[0]


def test_spectra_channels_highly_correlated(spectra: pd.DataFrame) -> None:
    values = spectra.filter(like="abs_").to_numpy()
    neighbour_corr = [
        np.corrcoef(values[:, j], values[:, j + 1])[0, 1] for j in range(values.shape[1] - 1)
    ]
    assert np.median(neighbour_corr) > 0.95


def test_spectra_penalty_rescues_fit(spectra: pd.DataFrame) -> None:
    from sklearn.linear_model import LinearRegression, RidgeCV
    from sklearn.model_selection import KFold, cross_validate

    X = spectra.filter(like="abs_").to_numpy()
    y = spectra["analyte_mg_L"].to_numpy()
    cv = KFold(5, shuffle=True, random_state=0)
    plain = cross_validate(
        LinearRegression(), X, y, cv=cv, scoring="neg_mean_squared_error", return_train_score=True
    )
    ridge = cross_validate(
        RidgeCV(alphas=np.logspace(-6, 3, 40)), X, y, cv=cv, scoring="neg_mean_squared_error"
    )
    plain_train = -plain["train_score"].mean()
    plain_cv = -plain["test_score"].mean()
    ridge_cv = -ridge["test_score"].mean()
    assert plain_train < 1e-8
    assert plain_cv > 3 * ridge_cv
