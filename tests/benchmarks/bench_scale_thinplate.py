"""Thin-plate spline past the exact solve (issue 14): a tuned predict on knots at 50,000 rows
with two features and 20,000 with three (5-fold, the default grid of 20 smoothing values, 1,000
query rows, CV+ intervals), against one exact thin-plate fit at 3,000 rows with a fixed
smoothing, measured in the same run (CPU seconds, one BLAS thread).

    .venv/bin/python tests/benchmarks/bench_scale_thinplate.py

Invented data (uniform features, a sine of the first plus the others, noise 0.3) for timing
only. Goal: each tuned request within the default cost limit (20 s), and the estimate within
0.8 to 2 times the measured time.
"""

from __future__ import annotations

import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

import calibrate_cost  # noqa: E402

from nearwise.core import pipeline  # noqa: E402
from nearwise.core.methods.spline import Spline  # noqa: E402

LIMIT_S = 20.0
QUERY_ROWS = 1_000


@dataclass(frozen=True)
class Result:
    rows: int
    p: int
    tuned_s: float
    estimate_s: float
    exact_s: float
    knots: int


def exact_fit_seconds(rows: int = 3_000) -> float:
    rng = np.random.default_rng(0)
    X = rng.uniform(size=(rows, 2))
    y = np.sin(6 * X[:, 0]) + X[:, 1] + rng.normal(0, 0.3, rows)
    t0 = time.process_time()
    Spline().fit(X, y, {}, 1.0)
    return time.process_time() - t0


def run(rows: int, p: int, exact_s: float) -> Result:
    job = calibrate_cost.job("spline", rows, p, {"_query": QUERY_ROWS})
    estimate = calibrate_cost.estimate(job)
    t0 = time.process_time()
    res = pipeline.run(job)
    return Result(rows, p, time.process_time() - t0, estimate, exact_s, int(res.model["knots"]))


def rows_for_report(results: list[Result]) -> list[tuple[str, str, str, str, str, bool | None]]:
    """(figure, value, baseline, ratio, goal, met) for report.py."""
    out = []
    for r in results:
        at = f"thin-plate {r.rows:,} x {r.p} on {r.knots} knots, tuned, {QUERY_ROWS:,} query rows"
        out += [
            (
                f"{at}: CPU time vs one exact fit at 3,000 rows",
                f"{r.tuned_s:.2f} s",
                f"{r.exact_s:.2f} s",
                f"ours/base = {r.tuned_s / r.exact_s:.2f}",
                f"<= {LIMIT_S:.0f} s",
                r.tuned_s <= LIMIT_S,
            ),
            (
                f"{at}: cost estimate vs measured",
                f"{r.estimate_s:.2f} s",
                f"{r.tuned_s:.2f} s",
                f"est/meas = {r.estimate_s / r.tuned_s:.2f}",
                "0.8 to 2",
                0.8 <= r.estimate_s / r.tuned_s <= 2,
            ),
        ]
    return out


def main() -> int:
    exact = exact_fit_seconds()
    results = [run(50_000, 2, exact), run(20_000, 3, exact)]
    lines = rows_for_report(results)
    for line in lines:
        print(" | ".join("-" if c is None else str(c) for c in line))
    return 0 if all(line[-1] for line in lines) else 1


if __name__ == "__main__":
    sys.exit(main())
