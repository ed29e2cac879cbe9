"""One small /v1/predict request for each warning code, built from seeded demo data.

Each function below returns a ready request body (a JSON-ready dict) in which one warning code
appears. Two data sets are used, both invented for the demo:

- the wind turbine readings of ``make_samples.py`` (``turbine_train.csv``, ``turbine_query.csv``);
- an office building's hourly electricity use (kWh) against outdoor temperature (deg C) and
  occupancy (people), generated here with numpy's ``default_rng`` and a fixed seed per example.
  Use grows by about 9 kWh per degree above 18 C (cooling) and 6 kWh per degree below 12 C
  (heat pumps), and by 0.3 kWh per person present, over a base load of 140 kWh.

Usage, with the service running (``nearwise serve``):

    python3 samples/warning_examples.py            # post each example; print code -> rows/flags
    python3 samples/warning_examples.py few_rows   # only some codes
    python3 samples/warning_examples.py --write    # save the bodies as samples/warnings/<code>.json
    NEARWISE_URL=http://127.0.0.1:9000 python3 samples/warning_examples.py

It needs numpy only (and the standard library), and the same seeds always give the same bodies.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import urllib.error
import urllib.request
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
OUT_DIR = HERE / "warnings"
DEFAULT_URL = "http://127.0.0.1:8080"

Body = dict[str, Any]


# -- data ---------------------------------------------------------------------------------
def _rng(seed: int) -> np.random.Generator:
    return np.random.default_rng([2026, seed])


def _cell(v: float) -> float | int | None:
    """A JSON cell: None for NaN, an int for whole numbers, else the float."""
    if not np.isfinite(v):
        return None
    return int(v) if float(v).is_integer() else float(v)


def table(columns: list[str], *cols: np.ndarray) -> dict[str, Any]:
    """A JSON table from equally long columns (NaN becomes null)."""
    rows = np.column_stack(cols)
    return {"columns": list(columns), "rows": [[_cell(v) for v in row] for row in rows]}


def _csv_cell(text: str) -> float | int | str | None:
    """A CSV cell as a JSON cell: a number where it reads as one, else the text (a time)."""
    try:
        return _cell(float(text))
    except ValueError:
        return text


def turbine(name: str) -> dict[str, Any]:
    """``turbine_train`` or ``turbine_query`` as a JSON table, read from the CSV files (the
    training readings with their ``time`` column, which the examples do not use as a
    feature)."""
    lines = (HERE / f"{name}.csv").read_text(encoding="utf-8").splitlines()
    rows = [[_csv_cell(c) for c in line.split(",")] for line in lines[1:]]
    return {"columns": lines[0].split(","), "rows": rows}


def energy_kwh(temp_c: np.ndarray, people: np.ndarray, rng: np.random.Generator, sd=6.0):
    """Hourly electricity use of the invented office building, with measurement noise."""
    mean = (
        140.0
        + 9.0 * np.maximum(temp_c - 18.0, 0.0)
        + 6.0 * np.maximum(12.0 - temp_c, 0.0)
        + 0.3 * people
    )
    return np.round(mean + rng.normal(0.0, sd, np.shape(temp_c)), 1)


def _temps(rng: np.random.Generator, n: int, low=-5.0, high=32.0) -> np.ndarray:
    return np.round(rng.uniform(low, high, n), 1)


# -- one builder per code -----------------------------------------------------------------
def _building(method: str, temp: np.ndarray, kwh: np.ndarray, query=None) -> Body:
    """A building's energy against outdoor temperature, with query temperatures if given."""
    body: Body = {
        "method": method,
        "target": "kwh",
        "train": table(["temp_c", "kwh"], temp, kwh),
    }
    if query is not None:
        body["query"] = table(["temp_c"], np.array(query, dtype=float))
    return body


def outside_range() -> Body:
    """Turbine: a spline of power against wind; the last query row, 27 m/s, lies beyond the
    strongest wind in the data (19.97 m/s)."""
    return {
        "method": "spline",
        "target": "power_kw",
        "features": ["wind_ms"],
        "train": turbine("turbine_train"),
        "query": turbine("turbine_query"),
    }


def _commissioning(rng: np.random.Generator, n: int = 240) -> tuple[np.ndarray, ...]:
    """A building commissioned in winter that filled up by summer: over 150 days the
    temperature rises from about -2 C to 21 C and occupancy from 0 to about 380 people, so
    cold hours with a full building never occur in the data."""
    day = np.sort(rng.uniform(0.0, 150.0, n))
    temp = np.round(-2.0 + 0.15 * day + rng.normal(0.0, 3.0, n), 1)
    people = np.round(np.clip(2.5 * day + rng.normal(0.0, 25.0, n), 0.0, None))
    return temp, people, energy_kwh(temp, people, rng)


def _commissioning_query() -> dict[str, Any]:
    # row 0: a mild half-full hour, like many in the data; row 1: a cold hour with the
    # building full, far from every reading; row 2: a cool, busy hour near the readings
    return table(["temp_c", "people"], np.array([9.0, 0.0, 4.0]), np.array([180.0, 350.0, 250.0]))


def outside_hull() -> Body:
    """Building during commissioning, kNN on temperature and occupancy. Query rows 1 (0 C,
    350 people) and 2 (4 C, 250 people) lie inside both ranges, but outside the convex hull of
    the readings: those combinations never occur in the data. Row 2 is close enough to some
    readings that only the hull test notices."""
    temp, people, kwh = _commissioning(_rng(2))
    return {
        "method": "knn",
        "target": "kwh",
        "train": table(["temp_c", "people", "kwh"], temp, people, kwh),
        "query": _commissioning_query(),
    }


def high_leverage() -> Body:
    """The same data with a plane (degree 1): query row 1 lies far off the data's diagonal,
    which its leverage x0'(X'X)^-1 x0 shows even though each feature is inside its range. Row
    2, just outside the hull, stays below the largest training leverage: the leverage test
    is coarser than the hull test."""
    temp, people, kwh = _commissioning(_rng(2))
    return {
        "method": "linear",
        "target": "kwh",
        "train": table(["temp_c", "people", "kwh"], temp, people, kwh),
        "query": _commissioning_query(),
        "params": {"degree": 1},
    }


def far_from_data() -> Body:
    """Building, one feature: the meter was offline through the spring, so no reading lies
    between 10 C and 20 C. Query row 1 (15 C) is inside the range but far from every row."""
    rng = _rng(3)
    temp = _temps(rng, 400)
    temp = temp[(temp < 10.0) | (temp > 20.0)][:200]
    kwh = energy_kwh(temp, np.full(temp.shape, 150.0), rng)
    return _building("spline", temp, kwh, [5.0, 15.0, 25.0])


def wide_neighborhood() -> Body:
    """Building measured in two campaigns only, in January (-5 C to 3 C) and in July (24 C to
    32 C), kNN on temperature. The neighbors of query row 1 (the midpoint between the two
    campaigns) come from both months, so they spread over more than half the range."""
    rng = _rng(4)
    temp = np.concatenate([_temps(rng, 100, -5.0, 3.0), _temps(rng, 100, 24.0, 32.0)])
    kwh = energy_kwh(temp, np.full(temp.shape, 150.0), rng)
    middle = round(float(temp[temp < 10].max() + temp[temp > 10].min()) / 2, 1)
    return _building("knn", temp, kwh, [0.0, middle, 28.0])


SENSORS = [
    "temp_c",
    "humidity_pct",
    "solar_wm2",
    "wind_ms",
    "people",
    "hour",
    "supply_air_c",
    "chw_supply_c",
    "zone_north_c",
    "zone_south_c",
]


def _sensors(rng: np.random.Generator, n: int, p: int) -> tuple[list[np.ndarray], np.ndarray]:
    """n hours of the first p sensor readings, each spread over its own range, and the use."""
    low = np.array([-5.0, 20.0, 0.0, 0.0, 0.0, 0.0, 12.0, 5.0, 18.0, 18.0])[:p]
    high = np.array([32.0, 95.0, 900.0, 15.0, 400.0, 23.0, 18.0, 9.0, 26.0, 26.0])[:p]
    X = np.round(low + (high - low) * rng.uniform(0.0, 1.0, (n, p)), 1)
    people = X[:, 4] if p > 4 else np.full(n, 150.0)
    kwh = energy_kwh(X[:, 0], people, rng) + np.round(0.05 * X[:, 2], 1)
    return [X[:, j] for j in range(p)], kwh


def not_local() -> Body:
    """Building, eight sensor readings over 300 hours, kNN; the query rows sit at the
    quartiles of every sensor. In eight dimensions even the 10 nearest of 300 rows fill a
    cube spanning (10/300)^(1/8) = 65 % of each feature's range."""
    rng = _rng(5)
    cols, kwh = _sensors(rng, 300, 8)
    query = [np.round(np.quantile(c, [0.25, 0.5, 0.75]), 1) for c in cols]
    return {
        "method": "knn",
        "target": "kwh",
        "train": table([*SENSORS[:8], "kwh"], *cols, kwh),
        "query": table(SENSORS[:8], *query),
    }


def hull_not_tested() -> Body:
    """Building, ten sensor readings over 300 hours, kNN, query rows at the quartiles: above
    eight dimensions the convex-hull test is not run (nearly every new point is outside the
    hull there), and the answer says so."""
    rng = _rng(6)
    cols, kwh = _sensors(rng, 300, 10)
    query = [np.round(np.quantile(c, [0.25, 0.5, 0.75]), 1) for c in cols]
    return {
        "method": "knn",
        "target": "kwh",
        "train": table([*SENSORS, "kwh"], *cols, kwh),
        "query": table(SENSORS, *query),
    }


def interpolating() -> Body:
    """Turbine, kNN with k fixed at 1: each prediction is a single noisy reading."""
    return {
        "method": "knn",
        "target": "power_kw",
        "features": ["wind_ms", "air_density"],
        "train": turbine("turbine_train"),
        "query": turbine("turbine_query"),
        "params": {"k": 1},
    }


def few_rows() -> Body:
    """Building, two years of monthly bills (24 rows): use in MWh against the month's mean
    temperature, a quadratic (the usual shape of a heating-and-cooling curve)."""
    rng = _rng(7)
    month = np.arange(24)
    temp = np.round(13.0 - 11.0 * np.cos(2 * np.pi * month / 12) + rng.normal(0, 1.5, 24), 1)
    mwh = np.round(energy_kwh(temp, np.full(24, 200.0), rng, sd=4.0) * 0.72, 1)
    return {
        "method": "linear",
        "target": "mwh",
        "train": table(["month", "temp_c", "mwh"], month, temp, mwh),
        "features": ["temp_c"],
        "query": table(["temp_c"], np.array([4.0, 13.0, 22.0])),
        "params": {"degree": 2},
    }


def rank_deficient() -> Body:
    """Building, temperature and a 0/1 workday flag, polynomial least squares with the
    default degrees 1 to 3: workday^2 and workday^3 equal workday, so a degree above 1 drops
    those terms (and the products that repeat others) from the fit and names them."""
    rng = _rng(8)
    temp = _temps(rng, 200)
    workday = (rng.uniform(0.0, 1.0, 200) < 5 / 7).astype(float)
    kwh = energy_kwh(temp, 250.0 * workday + 10.0, rng)
    return {
        "method": "linear",
        "target": "kwh",
        "train": table(["temp_c", "workday", "kwh"], temp, workday, kwh),
        "query": table(["temp_c", "workday"], np.array([5.0, 25.0]), np.array([1.0, 0.0])),
    }


def grid_reduced() -> Body:
    """Building, two years of monthly bills against mean temperature, occupancy and working
    days (24 rows, three features): a degree-3 polynomial has 20 terms, more than the 19
    rows of a training fold, so the default grid stops at degree 2."""
    rng = _rng(13)
    temp = rng.uniform(-2.0, 24.0, 24)
    people = rng.uniform(80.0, 160.0, 24)
    days = rng.integers(19, 24, 24).astype(float)
    mwh = (energy_kwh(temp, people, rng) * days * 10.0) / 1000.0
    return {
        "method": "linear",
        "target": "mwh",
        "train": table(["temp_c", "people", "workdays", "mwh"], temp, people, days, mwh),
    }


def tuning_at_edge() -> Body:
    """Turbine, kNN with a grid of k from 1 to 4 only: the noisy readings want more
    neighbors, so the choice lands on the grid's end (k = 4)."""
    return {
        "method": "knn",
        "target": "power_kw",
        "features": ["wind_ms", "air_density"],
        "train": turbine("turbine_train"),
        "query": turbine("turbine_query"),
        "grid": {"k": [1, 2, 3, 4]},
    }


UNUSUAL_ROWS = (17, 88)


def unusual_response() -> Body:
    """Building, 150 hours, no query (fitted values): the meter counted two hours twice
    (rows 17 and 88), and their out-of-fold residuals stand out."""
    rng = _rng(9)
    temp = _temps(rng, 150)
    kwh = energy_kwh(temp, np.full(150, 150.0), rng)
    kwh[list(UNUSUAL_ROWS)] *= 2.0
    return _building("spline", temp, kwh)


def interval_unbounded() -> Body:
    """Building, 40 hourly readings and a 99 % interval: CV+ needs at least
    1 / (1 - 0.99) - 1 = 99 rows to bound it on both sides, so every bound is null."""
    rng = _rng(10)
    temp = _temps(rng, 40)
    kwh = energy_kwh(temp, np.full(40, 150.0), rng)
    return {**_building("linear", temp, kwh, [0.0, 15.0, 25.0]), "interval": {"level": 0.99}}


MISSING_ROWS = (5, 40, 123)


def target_missing() -> Body:
    """Building, 150 hours, no query: the meter's logger dropped out at three hours (rows 5, 40
    and 123 have a null kwh). Those rows are left out of the fit, still get a fitted value,
    and are listed."""
    rng = _rng(12)
    temp = _temps(rng, 150)
    kwh = energy_kwh(temp, np.full(150, 150.0), rng)
    kwh[list(MISSING_ROWS)] = np.nan
    return _building("spline", temp, kwh)


def x_rounded() -> Body:
    """Building, 1,500 hourly readings with temperature to 0.01 C (over 1,000 distinct
    values): the one-feature spline rounds x onto 1,000 evenly spaced knots."""
    rng = _rng(11)
    temp = np.round(rng.uniform(-5.0, 32.0, 1500), 2)
    kwh = energy_kwh(temp, np.full(1500, 150.0), rng)
    return _building("spline", temp, kwh, [0.0, 15.0, 25.0])


def method_chosen() -> Body:
    """Turbine, `method: auto`: every method is tuned on the same folds and the simplest one
    within a standard error of the best answers; the warning says which and why."""
    return {
        "method": "auto",
        "target": "power_kw",
        "features": ["wind_ms"],
        "train": turbine("turbine_train"),
        "query": turbine("turbine_query"),
    }


def method_skipped() -> Body:
    """Building, `method: auto` on a feature with three settings only (the ventilation stage,
    1 to 3): a spline needs at least five distinct values, so it is left out of the
    comparison, with the reason."""
    rng = _rng(14)
    stage = rng.integers(1, 4, 90).astype(float)
    kwh = 80.0 + 35.0 * stage + rng.normal(0.0, 6.0, 90)
    return {
        "method": "auto",
        "target": "kwh",
        "train": table(["stage", "kwh"], stage, kwh),
    }


def serial_dependence() -> Body:
    """Building, 300 hourly readings sent in time order: the outdoor temperature follows the
    day, and the departure of use from its usual level lasts for hours (a door left open, a
    meeting that runs on: noise with lag-1 correlation 0.8). The out-of-fold residuals are
    dependent in the order the rows arrived; the warning names `tuning.order_by` and the
    schemes made for such rows."""
    rng = _rng(15)
    hours = np.arange(300)
    temp = np.round(14.0 + 8.0 * np.sin(2 * np.pi * (hours - 9) / 24) + rng.normal(0, 1, 300), 1)
    noise = np.zeros(300)
    shocks = rng.normal(0.0, 6.0, 300)
    for i in range(1, 300):
        noise[i] = 0.8 * noise[i - 1] + shocks[i]
    kwh = np.round(energy_kwh(temp, np.full(300, 150.0), rng, sd=0.0) + noise, 1)
    return _building("knn", temp, kwh, [10.0, 15.0, 20.0])


def index_like_feature() -> Body:
    """Building, 60 hours saved from a data frame after `reset_index()`: the first column,
    `index`, holds 0, 1, ..., 59 in row order. Without `features` it is used as a feature
    beside the temperature; the warning names it."""
    rng = _rng(16)
    temp = _temps(rng, 60)
    kwh = energy_kwh(temp, np.full(60, 150.0), rng)
    return {
        "method": "linear",
        "target": "kwh",
        "train": table(["index", "temp_c", "kwh"], np.arange(60.0), temp, kwh),
    }


def unseen_level() -> Body:
    """Campus, 90 hourly readings from three buildings (`building`: `A`, `B`, `C`, a
    categorical feature; each has its own base load, 40 kWh apart). The second query row is an
    hour in building `D`, which has no readings: no effect can be estimated for it, so its
    value and bounds are null and it is flagged; the other rows are answered as usual."""
    rng = _rng(17)
    temp = _temps(rng, 90)
    building = np.array(["A", "B", "C"])[np.arange(90) % 3]
    base = np.array([0.0, 40.0, 80.0])[np.arange(90) % 3]
    kwh = np.round(energy_kwh(temp, np.full(90, 150.0), rng) + base, 1)
    rows = [[_cell(t), b, _cell(k)] for t, b, k in zip(temp, building, kwh, strict=True)]
    return {
        "method": "linear",
        "target": "kwh",
        "categorical": ["building"],
        "train": {"columns": ["temp_c", "building", "kwh"], "rows": rows},
        "query": {"columns": ["temp_c", "building"], "rows": [[20.0, "B"], [20.0, "D"]]},
    }


# -- the registry -------------------------------------------------------------------------
@dataclass(frozen=True)
class Example:
    """A request body that shows ``code``; ``rows`` are the prediction rows that must carry
    it as a flag (empty for a code about the data set as a whole)."""

    code: str
    build: Callable[[], Body]
    rows: tuple[int, ...] = ()


EXAMPLES: dict[str, Example] = {
    e.code: e
    for e in (
        Example("outside_range", outside_range, (7,)),
        Example("outside_hull", outside_hull, (1, 2)),
        Example("far_from_data", far_from_data, (1,)),
        Example("high_leverage", high_leverage, (1,)),
        Example("wide_neighborhood", wide_neighborhood, (1,)),
        Example("not_local", not_local),
        Example("interpolating", interpolating),
        Example("few_rows", few_rows),
        Example("rank_deficient", rank_deficient),
        Example("grid_reduced", grid_reduced),
        Example("method_chosen", method_chosen),
        Example("method_skipped", method_skipped),
        Example("tuning_at_edge", tuning_at_edge),
        Example("unusual_response", unusual_response, UNUSUAL_ROWS),
        Example("interval_unbounded", interval_unbounded, (0, 1, 2)),
        Example("target_missing", target_missing, MISSING_ROWS),
        Example("x_rounded", x_rounded),
        Example("hull_not_tested", hull_not_tested),
        Example("serial_dependence", serial_dependence),
        Example("index_like_feature", index_like_feature),
        Example("unseen_level", unseen_level, (1,)),
    )
}


# -- writing and posting ------------------------------------------------------------------
def dumps(body: Body) -> str:
    """The body as JSON text, one table row per line, so the files read easily."""
    parts = []
    for key, value in body.items():
        if isinstance(value, dict) and "rows" in value:
            rows = ",\n    ".join(json.dumps(r) for r in value["rows"])
            text = f'{{"columns": {json.dumps(value["columns"])},\n   "rows": [\n    {rows}\n   ]}}'
        else:
            text = json.dumps(value)
        parts.append(f"  {json.dumps(key)}: {text}")
    out = "{\n" + ",\n".join(parts) + "\n}\n"
    assert json.loads(out) == body
    return out


def write(codes: list[str]) -> None:
    OUT_DIR.mkdir(exist_ok=True)
    for code in codes:
        path = OUT_DIR / f"{code}.json"
        path.write_text(dumps(EXAMPLES[code].build()), encoding="utf-8")
        print(f"wrote {path.relative_to(HERE.parent)}")


def post(base: str, body: Body) -> dict[str, Any]:
    req = urllib.request.Request(
        base.rstrip("/") + "/v1/predict",
        data=json.dumps(body).encode(),
        headers={"Content-Type": "application/json", "Accept": "application/json"},
        method="POST",
    )
    with urllib.request.urlopen(req, timeout=120) as resp:
        return json.load(resp)


def summary(code: str, answer: dict[str, Any]) -> str:
    """One line: the code's rows, the flags of those rows, and the other codes present."""
    found = [w for w in answer["warnings"] if w["code"] == code]
    others = sorted({w["code"] for w in answer["warnings"]} - {code})
    if not found:
        text = "MISSING"
    elif found[0]["rows"]:
        rows = found[0]["rows"]
        preds = answer["predictions"]
        flags = "; ".join(f"{r}: {' '.join(preds[r]['flags'])}" for r in rows[:4])
        text = f"rows {rows[:10]}{' ...' if len(rows) > 10 else ''} (flags {flags})"
    else:
        text = "data set"
    return f"{code:<19} -> {text}" + (f"   [also: {', '.join(others)}]" if others else "")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("codes", nargs="*", help=f"codes to show (default: all {len(EXAMPLES)})")
    ap.add_argument("--write", action="store_true", help="save the bodies in samples/warnings/")
    args = ap.parse_args(argv)
    unknown = sorted(set(args.codes) - set(EXAMPLES))
    if unknown:
        ap.error(f"no example for {', '.join(unknown)}; choose from {', '.join(EXAMPLES)}")
    codes = args.codes or list(EXAMPLES)
    if args.write:
        write(codes)
        return 0
    base = os.environ.get("NEARWISE_URL", DEFAULT_URL)
    missing = 0
    for code in codes:
        try:
            answer = post(base, EXAMPLES[code].build())
        except urllib.error.HTTPError as exc:
            print(f"{code:<19} -> HTTP {exc.code}: {exc.read().decode(errors='replace')[:300]}")
            missing += 1
            continue
        except urllib.error.URLError as exc:
            print(f"cannot reach {base}: {exc.reason}; start it with `nearwise serve`")
            return 2
        line = summary(code, answer)
        missing += "MISSING" in line
        print(line)
    return 1 if missing else 0


if __name__ == "__main__":
    sys.exit(main())
