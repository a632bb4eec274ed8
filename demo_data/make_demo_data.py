"""Regenerate the Fitladder demo data sets.

Every scenario here is invented for the product's demos and tests. Each one
uses its own fixed seed, and every number is written as fixed-decimal text, so
running this script again produces files that are byte-identical.

Usage:
    python demo_data/make_demo_data.py            # writes next to this script
    python demo_data/make_demo_data.py --out DIR  # writes into DIR

Only numpy and pandas are used.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent

# The calibration seed was picked from a scan of 100 seeds (47 of them showed
# the same pattern: order 2 has the lowest leave-one-out error and orders 8-10
# are more than 3x worse) so that the demo shows the typical case clearly.
SEED_CALIBRATION = 20240601
SEED_DRIFT = 20240612
SEED_SPECTRA = 20240613

CALIBRATION_FILE = "calibration_curve.csv"
DRIFT_FILE = "drifting_line_sensors.csv"
SPECTRA_FILE = "wide_spectra.csv"
ALL_FILES = (CALIBRATION_FILE, DRIFT_FILE, SPECTRA_FILE)


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def _fixed(values: np.ndarray, decimals: int) -> list[str]:
    """Format numbers with a fixed number of decimals (no '-0.000')."""
    rounded = np.round(np.asarray(values, dtype=float), decimals) + 0.0
    return [f"{v:.{decimals}f}" for v in rounded]


def _write(frame: pd.DataFrame, path: Path) -> None:
    # Plain ASCII header, '\n' line endings, every cell already text.
    path.write_text(frame.to_csv(index=False, lineterminator="\n"), encoding="utf-8")


def _ar1(rng: np.random.Generator, n: int, phi: float, sd: float) -> np.ndarray:
    """Stationary AR(1) series with lag-1 autocorrelation `phi` and marginal SD `sd`."""
    innov_sd = sd * np.sqrt(1.0 - phi**2)
    out = np.empty(n)
    out[0] = rng.normal(0.0, sd)
    shocks = rng.normal(0.0, innov_sd, size=n)
    for t in range(1, n):
        out[t] = phi * out[t - 1] + shocks[t]
    return out


# --------------------------------------------------------------------------
# 1. calibration curve: probe output (mV) -> bath reference temperature (degC)
# --------------------------------------------------------------------------
def make_calibration() -> pd.DataFrame:
    """24 calibration points of a probe in a stirred bath.

    The bath controller was stepped to irregular set points between roughly
    55 and 335 degC (dense at the cool end, sparse at the hot end); at each
    point the probe's output (mV) and the reference thermometer's temperature
    (degC) were logged. Underneath, temperature is a gently curved (quadratic)
    function of the probe output.
    """
    rng = np.random.default_rng(SEED_CALIBRATION)
    n = 24
    # Irregular spacing: clustered where the lab does most of its work,
    # sparser at the hot end.
    probe_mv = np.sort(
        np.concatenate(
            [
                rng.uniform(1.5, 6.0, size=11),
                rng.uniform(6.0, 11.0, size=9),
                rng.uniform(11.0, 16.0, size=n - 20),
            ]
        )
    )
    true_temp = 3.5 + 25.8 * probe_mv - 0.21 * probe_mv**2
    bath_temp = true_temp + rng.normal(0.0, 1.2, size=n)
    # The logger reads the probe to 1 microvolt.
    probe_logged = probe_mv + rng.normal(0.0, 0.002, size=n)
    return pd.DataFrame(
        {
            "probe_mV": _fixed(probe_logged, 3),
            "bath_temp_C": _fixed(bath_temp, 2),
        }
    )


# --------------------------------------------------------------------------
# 2. drifting production line: serially dependent sensors and yield
# --------------------------------------------------------------------------
DRIFT_ROWS = 3000
DRIFT_START = 2250  # last 25 % of the log


def make_drift() -> pd.DataFrame:
    """One-minute log of a continuous reactor line over a little more than two days.

    Six channels wander slowly (AR(1), lag-1 autocorrelation 0.98 to 0.996).
    Yield depends on inlet temperature, feed pressure and feed flow, plus
    process noise that itself carries over from minute to minute. From minute
    2250 the feed-flow meter's level moves up by about 1.6 SD over an hour
    (a new feed batch), and the yield's sensitivity to inlet temperature
    weakens slightly.
    """
    rng = np.random.default_rng(SEED_DRIFT)
    n = DRIFT_ROWS
    minute = np.arange(n)
    timestamps = pd.date_range("2024-03-04 06:00", periods=n, freq="min")

    inlet_temp = 64.0 + _ar1(rng, n, 0.995, 2.5)
    jacket_temp = 0.6 * inlet_temp + 20.0 + _ar1(rng, n, 0.99, 1.2)
    feed_pressure = 310.0 + _ar1(rng, n, 0.996, 12.0)
    feed_flow = 42.0 + _ar1(rng, n, 0.993, 1.8)
    stirrer = 450.0 + _ar1(rng, n, 0.98, 15.0)
    coolant_flow = 18.0 + 0.25 * (inlet_temp - 64.0) + _ar1(rng, n, 0.99, 0.8)

    # Level shift of the feed-flow meter, ramped in over 60 minutes.
    ramp = np.clip((minute - DRIFT_START) / 60.0, 0.0, 1.0)
    flow_sd = float(np.std(feed_flow[:DRIFT_START]))
    feed_flow = feed_flow + 1.6 * flow_sd * ramp

    # Process relation (slightly different after the change).
    temp_gain = np.where(minute >= DRIFT_START, 0.95, 1.15)
    t_dev = inlet_temp - 64.0
    p_dev = (feed_pressure - 310.0) / 12.0
    f_dev = (feed_flow - 42.0) / 1.8
    yield_pct = (
        81.0
        + temp_gain * t_dev
        - 0.05 * t_dev**2
        - 1.4 * p_dev**2
        + 0.9 * f_dev
        + _ar1(rng, n, 0.9, 1.1)
    )

    return pd.DataFrame(
        {
            "minute": minute.astype(str),
            "timestamp": timestamps.strftime("%Y-%m-%dT%H:%M:%S"),
            "inlet_temp_C": _fixed(inlet_temp, 2),
            "jacket_temp_C": _fixed(jacket_temp, 2),
            "feed_pressure_kPa": _fixed(feed_pressure, 1),
            "feed_flow_L_min": _fixed(feed_flow, 2),
            "stirrer_speed_rpm": _fixed(stirrer, 1),
            "coolant_flow_L_min": _fixed(coolant_flow, 2),
            "yield_pct": _fixed(yield_pct, 2),
        }
    )


# --------------------------------------------------------------------------
# 3. wide spectra: 150 absorbance channels, 60 samples
# --------------------------------------------------------------------------
SPECTRA_ROWS = 60
WAVELENGTHS_NM = np.arange(400, 700, 2)  # 150 channels, 400..698 nm


def _gauss(centre: float, width: float) -> np.ndarray:
    return np.exp(-0.5 * ((WAVELENGTHS_NM - centre) / width) ** 2)


def make_spectra() -> pd.DataFrame:
    """Visible absorbance spectra of 60 invented dye-bath samples.

    Each spectrum is the sum of four broad bands (the analyte dye and three
    other dyes), a sloping baseline, and instrument noise that is correlated
    between neighbouring channels. The analyte concentration is a linear
    function of the band heights plus lab-reference error.
    """
    rng = np.random.default_rng(SEED_SPECTRA)
    n = SPECTRA_ROWS
    bands = np.vstack(
        [
            _gauss(520.0, 28.0),  # analyte dye
            _gauss(470.0, 35.0),
            _gauss(585.0, 30.0),
            _gauss(640.0, 40.0),
        ]
    )
    heights = np.column_stack(
        [
            rng.uniform(0.10, 0.90, size=n),
            rng.uniform(0.05, 0.60, size=n),
            rng.uniform(0.05, 0.70, size=n),
            rng.uniform(0.05, 0.50, size=n),
        ]
    )
    baseline_offset = rng.normal(0.02, 0.01, size=n)
    baseline_slope = rng.normal(0.0, 0.02, size=n)
    wl_scaled = (WAVELENGTHS_NM - 550.0) / 150.0

    # Instrument noise, smoothed over a few neighbouring channels.
    raw = rng.normal(0.0, 1.0, size=(n, WAVELENGTHS_NM.size + 30))
    kernel = np.exp(-0.5 * (np.arange(-15, 16) / 3.0) ** 2)
    kernel /= np.sqrt(np.sum(kernel**2))
    smooth = np.array([np.convolve(row, kernel, mode="valid") for row in raw])
    noise = 0.004 * smooth[:, : WAVELENGTHS_NM.size]

    absorbance = (
        heights @ bands
        + baseline_offset[:, None]
        + baseline_slope[:, None] * wl_scaled[None, :]
        + noise
    )
    analyte = (
        2.0
        + 30.0 * heights[:, 0]
        - 2.5 * heights[:, 1]
        + rng.normal(0.0, 0.8, size=n)
    )

    data = {}
    for j, wl in enumerate(WAVELENGTHS_NM):
        data[f"abs_{wl}nm"] = _fixed(absorbance[:, j], 4)
    data["analyte_mg_L"] = _fixed(analyte, 2)
    return pd.DataFrame(data)


# --------------------------------------------------------------------------
def write_all(out_dir: Path) -> list[Path]:
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = []
    for name, maker in (
        (CALIBRATION_FILE, make_calibration),
        (DRIFT_FILE, make_drift),
        (SPECTRA_FILE, make_spectra),
    ):
        path = out_dir / name
        _write(maker(), path)
        written.append(path)
    return written


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate the Fitladder demo data sets.")
    parser.add_argument(
        "--out",
        type=Path,
        default=HERE,
        help="folder to write the CSV files into (default: this script's folder)",
    )
    args = parser.parse_args(argv)
    for path in write_all(args.out):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
