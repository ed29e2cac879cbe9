"""Generate the demo data in samples/: one wind turbine's power readings, in time order.

The scenario is invented for the demo (it is not measured data). A 2,000 kW turbine reports
10-minute averages of wind speed at hub height, air density and electrical power, 400 readings
in a row (about 2.8 days), each stamped with the start of its 10 minutes (`time`, an ISO 8601
date-time). The power curve is a logistic rise between cut-in (about 3 m/s) and rated wind
speed (about 13 m/s), scaled by air density relative to the standard 1.225 kg/m^3 and capped
at rated power, plus measurement noise.

Readings close in time are alike, as in any turbine log:

- the wind follows the weather of those days (WIND_COURSE): a breeze that dies down to light
  airs by the first morning, then a depression coming in, the wind rising in steps over two
  days to about 16 m/s on the third morning and easing after it. Gusts and lulls ride on that
  course: the speed departs from it by a relative amount that follows an AR(1) series (lag-1
  correlation WIND_PERSISTENCE per 10 minutes), so a gust lasts over several readings and the
  speed drifts rather than jumping. The strongest reading is about 20 m/s; none reaches the
  25 m/s at which the turbine stops;
- air density drifts with the weather (AR(1), AIR_PERSISTENCE per 10 minutes);
- the departure of power from the curve (gusts, yaw error) lasts over several readings: an
  AR(1) series with lag-1 correlation NOISE_PERSISTENCE, scaled by a standard deviation that
  grows along the slope of the curve, where gusts within 10 minutes matter most.

Run from anywhere; the files are written next to this script:

    python3 samples/make_samples.py

It needs numpy only, and the same seed always gives the same bytes.
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import numpy as np
from sample_files import ar1, time_stamps, with_labels, write_csv, write_request

HERE = Path(__file__).resolve().parent
SEED = 2026
N_ROWS = 400
START = "2025-11-03T00:00"  # the first reading; one every 10 minutes after it
RATED_KW = 2000.0
CUT_OUT_MS = 25.0
STANDARD_DENSITY = 1.225  # kg/m^3 at sea level and 15 C
# The wind's course, (hours from START, m/s), followed between these points in straight lines.
WIND_COURSE = [
    (0, 7.0),
    (6, 2.5),
    (10, 1.0),
    (18, 6.0),
    (26, 10.0),
    (32, 7.5),
    (40, 12.5),
    (46, 10.0),
    (54, 16.0),
    (60, 12.0),
    (66.5, 5.0),
]
GUSTINESS = 0.16  # standard deviation of the wind's relative departure from its course
WIND_PERSISTENCE = 0.9  # lag-1 correlation of that departure over 10 minutes
AIR_PERSISTENCE = 0.99
NOISE_PERSISTENCE = 0.75  # lag-1 correlation of the power's departure from the curve

# Query rows: typical speeds, rated speed, and 27 m/s, beyond every training reading.
QUERY_WIND = [3.5, 5.0, 7.5, 10.0, 12.5, 15.0, 18.0, 27.0]
QUERY_DENSITY = 1.225


def power_curve(wind_ms: np.ndarray, density: np.ndarray) -> np.ndarray:
    """Expected power in kW: a logistic rise, scaled by density, capped at rated power."""
    rise = 1.0 / (1.0 + np.exp(-(wind_ms - 8.6) / 1.25))
    at_zero = 1.0 / (1.0 + np.exp(8.6 / 1.25))  # so that the curve starts at 0 kW
    shape = np.clip((rise - at_zero) / (1.0 - at_zero), 0.0, None)
    return np.minimum(RATED_KW * 1.04 * shape * density / STANDARD_DENSITY, RATED_KW)


def make_train(rng: np.random.Generator) -> np.ndarray:
    """Rows of (wind_ms, air_density, power_kw), one every 10 minutes."""
    hours, course_ms = np.array(WIND_COURSE).T
    course = np.interp(np.arange(N_ROWS) / 6.0, hours, course_ms)
    departure = GUSTINESS * ar1(rng, N_ROWS, WIND_PERSISTENCE)
    wind = course * np.exp(departure - GUSTINESS**2 / 2.0)  # the course is the mean speed
    assert wind.max() < CUT_OUT_MS, "the turbine would have stopped"
    density = 1.205 + 0.035 * ar1(rng, N_ROWS, AIR_PERSISTENCE)
    mean = power_curve(wind, density)
    sd = 15.0 + 0.15 * mean * (1.0 - mean / RATED_KW)
    power = np.clip(mean + sd * ar1(rng, N_ROWS, NOISE_PERSISTENCE), 0.0, RATED_KW + 30.0)
    return np.column_stack([np.round(wind, 2), np.round(density, 3), np.round(power, 1)])


def make_query() -> np.ndarray:
    wind = np.asarray(QUERY_WIND)
    return np.column_stack([wind, np.full(wind.shape, QUERY_DENSITY)])


TRAIN_COLUMNS = ["time", "wind_ms", "air_density", "power_kw"]
QUERY_COLUMNS = ["wind_ms", "air_density"]

# Every body names its features: `time` is in the train table to place the readings, and is
# not a feature.
REQUESTS = {
    # One feature: a cubic smoothing spline of power against wind speed.
    "predict_spline.json": {
        "method": "spline",
        "target": "power_kw",
        "features": ["wind_ms"],
        "tuning": {"scheme": "kfold", "folds": 5, "seed": 0, "rule": "one_se"},
    },
    # The same spline, tuned along `time`: each reading is predicted without the readings
    # within `tuning.gap` steps of it (the gap chosen from the data; the rule is one_se too).
    "predict_turbine_window.json": {
        "method": "spline",
        "target": "power_kw",
        "features": ["wind_ms"],
        "tuning": {"order_by": "time", "scheme": "window"},
    },
    # Two features: neighbors in (wind speed, density) after standard scaling.
    "predict_knn.json": {
        "method": "knn",
        "target": "power_kw",
        "features": ["wind_ms", "air_density"],
        "params": {"weights": "uniform", "scale": "standard"},
        "tuning": {"folds": 5, "repeats": 2, "seed": 7},
    },
    # Two features: polynomial least squares, degree chosen by leave-one-out.
    "predict_linear.json": {
        "method": "linear",
        "target": "power_kw",
        "features": ["wind_ms", "air_density"],
        "grid": {"degree": [1, 2, 3, 4, 5]},
        "tuning": {"scheme": "loo", "rule": "one_se"},
    },
    # Every method that applies, on the same folds: POST it to /v1/compare.
    "compare_turbine.json": {
        "target": "power_kw",
        "features": ["wind_ms", "air_density"],
        "tuning": {"folds": 5, "seed": 0},
    },
}


def main() -> None:
    rng = np.random.default_rng(SEED)
    train = make_train(rng)
    query = make_query()
    stamps = time_stamps(START, timedelta(minutes=10), len(train))
    train_rows = with_labels(stamps, train)
    query_rows = query.tolist()
    write_csv(HERE / "turbine_train.csv", TRAIN_COLUMNS, train_rows)
    write_csv(HERE / "turbine_query.csv", QUERY_COLUMNS, query_rows)
    for name, fields in REQUESTS.items():
        write_request(HERE / name, fields, (TRAIN_COLUMNS, train_rows), (QUERY_COLUMNS, query_rows))
    print(f"wrote {len(train)} training rows and {len(query)} query rows to {HERE}")


if __name__ == "__main__":
    main()
