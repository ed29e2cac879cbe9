"""Generate the second demo scenario in samples/: a cold-storage warehouse's daily energy use.

The scenario is invented for the demo (it is not measured data). A frozen-food warehouse logs,
for each of two years of days (`day`, an ISO 8601 date, from Monday 1 January 2024), its
electricity use in kWh, nine numeric inputs and one categorical input:

| column           | meaning                                   | effect on energy_kwh             |
|------------------|-------------------------------------------|----------------------------------|
| outdoor_temp_c   | daily mean outdoor temperature, deg C     | smooth, curving up in heat       |
| door_openings    | dock door openings                        | linear, 2.2 kWh each             |
| humidity_pct     | outdoor relative humidity, %              | smooth step above about 75 %     |
| load_delivered_t | tonnes of goods brought in, to be chilled | linear, 14 kWh per tonne         |
| defrost_cycles   | evaporator defrost cycles                 | linear, 45 kWh each              |
| setpoint_c       | freezer room setpoint, deg C              | linear, 70 kWh per degree colder |
| solar_kwh_m2     | solar irradiation on the roof, kWh/m^2    | linear, 90 kWh per unit          |
| weekday          | 0 = Monday ... 6 = Sunday                 | none (only through doors)        |
| staff_hours      | hours worked on the floor                 | none                             |
| dock             | loading dock in use: A, B or C (text)     | B +90 kWh, C +240 kWh against A  |

Energy is built additively from those effects over a base load of 2,400 kWh, plus noise with a
standard deviation of 120 kWh. Dock A has an air curtain; dock B is older and leaks more cold
air, and dock C faces south without a curtain. The dock of each day is drawn from its own
seeded generator (DOCK_SEED), so the nine numeric inputs and the noise are those the
scenario had before the dock was added.

Weather lasts over days, and so do the other departures from the usual: the departures of
temperature, humidity and sunshine from their seasonal course follow AR(1) series from day to
day (lag-1 correlations WEATHER_PERSISTENCE, HUMIDITY_PERSISTENCE and SUN_PERSISTENCE), and so
does the noise on energy (NOISE_PERSISTENCE: a compressor running hot, ice building up on a
coil, a shift that leaves doors open, each lasts a few days).

With ten inputs a neighborhood of even a few days spans most of every input's range, so kNN
stops being local, while the additive and linear fits, which estimate one effect per input,
do well.

The query rows are the forecast of one week, and a heat-wave day hotter than any in the data.

Run from anywhere; the files are written next to this script:

    python3 samples/make_warehouse.py

It needs numpy only, and the same seed always gives the same bytes.
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import numpy as np
from sample_files import ar1, time_stamps, with_labels, write_csv, write_request

HERE = Path(__file__).resolve().parent
SEED = 3032
N_DAYS = 730
FIRST_DAY = "2024-01-01"  # a Monday: day 0
WEATHER_PERSISTENCE = 0.75  # lag-1 correlation of the temperature's departure, day to day
HUMIDITY_PERSISTENCE = 0.6
SUN_PERSISTENCE = 0.6
NOISE_PERSISTENCE = 0.7  # lag-1 correlation of the noise on energy, day to day
DOCK_SEED = [SEED, 1]  # the docks' own generator: the other columns stay as they were
DOCKS = ("A", "B", "C")
DOCK_SHARE = (0.5, 0.3, 0.2)  # how often each dock is in use
DOCK_KWH = {"A": 0.0, "B": 90.0, "C": 240.0}  # extra energy on a day at that dock

FEATURES = [
    "outdoor_temp_c",
    "door_openings",
    "humidity_pct",
    "load_delivered_t",
    "defrost_cycles",
    "setpoint_c",
    "solar_kwh_m2",
    "weekday",
    "staff_hours",
]
TARGET = "energy_kwh"
CATEGORICAL = ["dock"]
INPUTS = [*FEATURES, *CATEGORICAL]  # the features of the requests: nine numbers and the dock
DECIMALS = [1, 0, 0, 1, 0, 0, 2, 0, 1]


def energy(x: dict[str, np.ndarray]) -> np.ndarray:
    """Expected daily energy use in kWh: a sum of one effect per input."""
    heat = x["outdoor_temp_c"]
    cooling = 40.0 * heat + 3.0 * np.maximum(heat - 12.0, 0.0) ** 2
    moisture = 300.0 / (1.0 + np.exp(-(x["humidity_pct"] - 75.0) / 4.0))
    return (
        2400.0
        + cooling
        + 2.2 * x["door_openings"]
        + moisture
        + 14.0 * x["load_delivered_t"]
        + 45.0 * x["defrost_cycles"]
        - 70.0 * (x["setpoint_c"] + 18.0)
        + 90.0 * x["solar_kwh_m2"]
    )


def make_inputs(rng: np.random.Generator, day: np.ndarray) -> dict[str, np.ndarray]:
    """The nine inputs for days counted from FIRST_DAY (day 0 is a Monday, 1 January)."""
    n = day.size
    season = 2.0 * np.pi * day / 365.0
    weekday = day % 7
    busy = np.select([weekday < 5, weekday == 5], [1.0, 0.45], 0.15)
    temp = 11.0 - 9.5 * np.cos(season - 0.35) + 3.2 * ar1(rng, n, WEATHER_PERSISTENCE)
    humid = 72.0 - 0.9 * (temp - 11.0) + 9.0 * ar1(rng, n, HUMIDITY_PERSISTENCE)
    humidity = np.clip(humid, 28.0, 100.0)
    doors = rng.poisson(190.0 * busy * rng.lognormal(0.0, 0.25, n))
    load = 48.0 * busy * rng.gamma(6.0, 1.0 / 6.0, n)
    defrost = rng.poisson(1.5 + humidity / 45.0 + doors / 150.0)
    # The setpoint changes in blocks of about a month: colder for ice cream in summer.
    block = rng.choice([-25.0, -22.0, -20.0, -18.0], size=n // 30 + 1, p=[0.2, 0.3, 0.3, 0.2])
    setpoint = block[day // 30 % block.size]
    sun = 3.3 - 2.5 * np.cos(season - 0.2) + 0.9 * ar1(rng, n, SUN_PERSISTENCE)
    solar = np.clip(sun, 0.2, None)
    staff = np.round(np.clip(8.0 * (2.0 + 9.0 * busy) + rng.normal(0.0, 6.0, n), 8.0, None), 1)
    columns = [temp, doors, humidity, load, defrost, setpoint, solar, weekday, staff]
    return {
        name: np.round(col.astype(float), d)
        for name, col, d in zip(FEATURES, columns, DECIMALS, strict=True)
    }


def make_docks(dock_rng: np.random.Generator, n: int) -> np.ndarray:
    """The loading dock in use on each of ``n`` days."""
    return dock_rng.choice(np.array(DOCKS), size=n, p=DOCK_SHARE)


def make_train(rng: np.random.Generator, docks: np.ndarray) -> np.ndarray:
    x = make_inputs(rng, np.arange(N_DAYS))
    extra = np.array([DOCK_KWH[d] for d in docks])
    y = np.round(energy(x) + extra + 120.0 * ar1(rng, N_DAYS, NOISE_PERSISTENCE), 1)
    return np.column_stack([*(x[name] for name in FEATURES), y])


def make_query(rng: np.random.Generator) -> np.ndarray:
    """A forecast week (Monday to Sunday, at the turn of June and July) and a heat-wave Monday
    at 39 deg C, hotter than any day in the data."""
    x = make_inputs(rng, np.arange(N_DAYS + 180, N_DAYS + 188))
    rows = np.column_stack([x[name] for name in FEATURES])
    rows[-1, 0] = 39.0  # hotter than any day in the data
    rows[-1, 2] = 30.0
    return rows


# Both bodies name their ten features: `day` is in the train table to place the days, and is
# not a feature; `dock` holds text and is declared in `categorical`.
REQUESTS = {
    # Every method that applies to ten features, on the same folds: POST it to /v1/compare.
    # The spline is not tried: it takes at most three inputs, and no categorical one.
    "compare_warehouse.json": {
        "target": TARGET,
        "features": INPUTS,
        "categorical": CATEGORICAL,
        "tuning": {"folds": 5, "seed": 0},
    },
    # One smooth effect per numeric input and one effect per dock: POST it to /v1/predict.
    "predict_warehouse.json": {
        "method": "additive",
        "target": TARGET,
        "features": INPUTS,
        "categorical": CATEGORICAL,
        "tuning": {"folds": 5, "seed": 0},
    },
}


def main() -> None:
    rng = np.random.default_rng(SEED)
    dock_rng = np.random.default_rng(DOCK_SEED)
    docks = make_docks(dock_rng, N_DAYS)
    train = make_train(rng, docks)
    query = make_query(rng)
    # The forecast week's docks; the heat-wave Monday is at dock A.
    query_docks = [*make_docks(dock_rng, len(query) - 1), "A"]
    columns = ["day", *INPUTS, TARGET]
    days = time_stamps(FIRST_DAY, timedelta(days=1), N_DAYS, date_only=True)
    train_rows = [
        [*row[:-1], str(dock), row[-1]]
        for row, dock in zip(with_labels(days, train), docks, strict=True)
    ]
    query_rows = [[*row, str(dock)] for row, dock in zip(query.tolist(), query_docks, strict=True)]
    write_csv(HERE / "warehouse_train.csv", columns, train_rows)
    write_csv(HERE / "warehouse_query.csv", INPUTS, query_rows)
    for name, fields in REQUESTS.items():
        write_request(HERE / name, fields, (columns, train_rows), (INPUTS, query_rows))
    print(f"wrote {len(train)} training rows and {len(query)} query rows to {HERE}")


if __name__ == "__main__":
    main()
