"""How well the cost estimate (nearwise.core.cost) predicts measured fitting time.

Runs one predict per shape (method, rows, features) in this process with one BLAS thread and
prints, for each, the estimate, the measured seconds and their ratio, then the geometric mean
and the extremes of the ratio. The estimate aims at a factor of 2 either way; the limit
NEARWISE_MAX_COST_S is applied to the estimate, so a ratio above 1 refuses early and a ratio
below 1 leaves the rest to the time budget.

    .venv/bin/python tests/benchmarks/calibrate_cost.py [--quick] [--markdown FILE]

Invented data (uniform features, a sine of the first plus the others) for timing only.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402

from nearwise.core import cost, pipeline  # noqa: E402
from nearwise.core.data import Table  # noqa: E402
from nearwise.core.spec import Job, TuningSpec  # noqa: E402

FULL = [
    ("knn", 20_000, 1, {}),
    ("knn", 100_000, 3, {}),
    ("knn", 50_000, 6, {}),
    ("knn", 20_000, 10, {}),
    ("knn", 10_000, 20, {}),
    ("linear", 100_000, 3, {}),
    ("linear", 20_000, 10, {}),
    ("linear", 250_000, 10, {"penalty": "ridge"}),
    ("linear", 100_000, 10, {"penalty": "lasso"}),
    ("spline", 250_000, 1, {}),
    ("spline", 2_000, 2, {}),
    ("additive", 100_000, 3, {}),
    ("additive", 50_000, 8, {}),
    # Without a query: the answer and its intervals are at every training row.
    ("spline", 100_000, 1, {"_query": 0}),
    ("knn", 100_000, 2, {"_query": 0}),
    ("knn", 10_000, 2, {"_query": 0, "_scheme": "loo"}),
    ("linear", 10_000, 2, {"_query": 0, "_scheme": "loo"}),
]
QUICK = [
    ("knn", 5_000, 1, {}),
    ("knn", 5_000, 6, {}),
    ("linear", 20_000, 3, {}),
    ("linear", 20_000, 5, {"penalty": "lasso"}),
    ("spline", 20_000, 1, {}),
    ("spline", 800, 2, {}),
    ("additive", 10_000, 3, {}),
    ("spline", 20_000, 1, {"_query": 0}),
    ("knn", 3_000, 2, {"_query": 0, "_scheme": "loo"}),
]


def job(method: str, n: int, p: int, params: dict) -> Job:
    """Keys starting with ``_`` set the shape: ``_query`` rows (10), ``_scheme`` (kfold)."""
    q = params.get("_query", 10)
    scheme = params.get("_scheme", "kfold")
    params = {k: v for k, v in params.items() if not k.startswith("_")}
    rng = np.random.default_rng(0)
    X = rng.uniform(0, 1, (n, p))
    y = np.sin(6 * X[:, 0]) + X[:, 1:].sum(1) + rng.normal(0, 0.3, n)
    cols = (*[f"x{i}" for i in range(p)], "y")
    train = Table("train", cols, np.column_stack([X, y]))
    query = Table("query", cols[:-1], rng.uniform(0, 1, (q, p))) if q else None
    return Job(
        method=method,
        train=train,
        target="y",
        query=query,
        params=params,
        tuning=TuningSpec(scheme=scheme),
    )


def estimate(j: Job) -> float:
    method = pipeline.get_method(j.method)
    settings, grid = pipeline.check_method(method, j, j.params, j.grid)
    ctx = pipeline.setup(j)
    return cost.Item(method.name, settings, grid).seconds(pipeline.shape(ctx))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small shapes only (about 10 s)")
    ap.add_argument("--markdown", help="also write the table to this file")
    args = ap.parse_args(argv)
    rows = []
    for method, n, p, params in QUICK if args.quick else FULL:
        j = job(method, n, p, params)
        est = estimate(j)
        t0 = time.perf_counter()
        pipeline.run(j)
        took = time.perf_counter() - t0
        label = method + "".join(f" {v}" for v in params.values())
        rows.append((label, n, p, est, took, est / took))
        print(
            f"{label:18} n={n:>7} p={p:>2}  estimate {est:8.3f} s  measured {took:8.3f} s  "
            f"ratio {est / took:5.2f}",
            flush=True,
        )
    ratios = np.array([r[-1] for r in rows])
    gmean = float(np.exp(np.mean(np.log(ratios))))
    print(
        f"ratio estimate/measured: geometric mean {gmean:.2f}, "
        f"min {ratios.min():.2f}, max {ratios.max():.2f}"
    )
    if args.markdown:
        lines = [
            "| method | rows | features | estimate (s) | measured (s) | ratio |",
            "|---|---:|---:|---:|---:|---:|",
        ]
        lines += [
            f"| {m} | {n:,} | {p} | {e:.3g} | {t:.3g} | {r:.2f} |" for m, n, p, e, t, r in rows
        ]
        lines.append(
            f"\nGeometric mean of the ratio {gmean:.2f} (min {ratios.min():.2f}, "
            f"max {ratios.max():.2f})."
        )
        with open(args.markdown, "w", encoding="utf-8") as fh:
            fh.write("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
