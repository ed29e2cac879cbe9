"""Generate the demo data in samples/: one wind turbine's power readings.

The scenario is invented for the demo (it is not measured data). A 2,000 kW turbine reports
10-minute averages of wind speed at hub height, air density and electrical power. The power
curve is a logistic rise between cut-in (about 3 m/s) and rated wind speed (about 13 m/s),
scaled by air density relative to the standard 1.225 kg/m^3 and capped at rated power, plus
measurement noise. Wind speeds follow a Weibull distribution, as site wind statistics usually
do; the turbine stops above 25 m/s, so no reading lies beyond that.

Run from anywhere; the files are written next to this script:

    python3 samples/make_samples.py

It needs numpy only, and the same seed always gives the same bytes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from sample_files import write_csv, write_request

HERE = Path(__file__).resolve().parent
SEED = 2026
N_ROWS = 400
RATED_KW = 2000.0
CUT_OUT_MS = 25.0
STANDARD_DENSITY = 1.225  # kg/m^3 at sea level and 15 C

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
    """Rows of (wind_ms, air_density, power_kw)."""
    wind = 8.5 * rng.weibull(2.1, size=4 * N_ROWS)
    wind = wind[(wind > 0.5) & (wind < CUT_OUT_MS)][:N_ROWS]
    density = rng.normal(1.205, 0.035, size=N_ROWS)
    mean = power_curve(wind, density)
    # Noise grows along the slope of the curve, where gusts within 10 minutes matter most.
    sd = 15.0 + 0.15 * mean * (1.0 - mean / RATED_KW)
    power = np.clip(mean + rng.normal(0.0, sd), 0.0, RATED_KW + 30.0)
    return np.column_stack([np.round(wind, 2), np.round(density, 3), np.round(power, 1)])


def make_query() -> np.ndarray:
    wind = np.asarray(QUERY_WIND)
    return np.column_stack([wind, np.full(wind.shape, QUERY_DENSITY)])


TRAIN_COLUMNS = ["wind_ms", "air_density", "power_kw"]
QUERY_COLUMNS = ["wind_ms", "air_density"]

REQUESTS = {
    # One feature: a cubic smoothing spline of power against wind speed.
    "predict_spline.json": {
        "method": "spline",
        "target": "power_kw",
        "features": ["wind_ms"],
        "tuning": {"scheme": "kfold", "folds": 5, "seed": 0, "rule": "one_se"},
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
    write_csv(HERE / "turbine_train.csv", TRAIN_COLUMNS, train)
    write_csv(HERE / "turbine_query.csv", QUERY_COLUMNS, query)
    for name, fields in REQUESTS.items():
        write_request(HERE / name, fields, (TRAIN_COLUMNS, train), (QUERY_COLUMNS, query))
    print(f"wrote {len(train)} training rows and {len(query)} query rows to {HERE}")


if __name__ == "__main__":
    main()
