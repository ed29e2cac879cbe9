"""How well the cost estimate (nearwise.core.cost) predicts measured fitting time.

Runs one predict (or locality summary) per shape in this process with one BLAS thread and
prints, for each, the estimate, the measured CPU seconds (so that other load on the machine
does not count) and their ratio, then the geometric mean and the extremes of the ratio. The
estimate aims at a factor of 2 either way; the limit NEARWISE_MAX_COST_S is applied to the
estimate, so a ratio above 1 refuses early and a ratio below 1 leaves the rest to the time
budget. ``--limits`` runs the shapes of the hostile test (issue 12) near the row limits, where
the ratio must stay at or above 0.8.

    .venv/bin/python tests/benchmarks/calibrate_cost.py [--quick | --limits] [--markdown FILE]

Invented data (uniform features, a sine of the first plus the others; or rows on the unit
sphere, queried on it or from inside it) for timing only.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import replace

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402

from nearwise.core import cost, locality, locality_cost, pipeline  # noqa: E402
from nearwise.core.data import Scaler, Table  # noqa: E402
from nearwise.core.neighbors import Nearest  # noqa: E402
from nearwise.core.spec import Caps, Job, TuningSpec  # noqa: E402

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
    # Thin-plate past the exact solve: on knots (thinplate_lowrank).
    ("spline", 50_000, 2, {}),
    ("spline", 20_000, 3, {}),
    ("spline", 30_000, 2, {"_scheme": "gcv", "_query": 1_000}),
    ("additive", 100_000, 3, {}),
    ("additive", 50_000, 8, {}),
    # Without a query: the answer and its intervals are at every training row.
    ("spline", 100_000, 1, {"_query": 0}),
    ("spline", 50_000, 2, {"_query": 0}),
    ("spline", 6_000, 3, {"_query": 0, "_scheme": "loo"}),
    ("knn", 100_000, 2, {"_query": 0}),
    ("knn", 10_000, 2, {"_query": 0, "_scheme": "loo"}),
    ("knn", 100_000, 2, {"_query": 0, "_scheme": "loo", "k": 50}),  # jackknife+ by windows
    ("linear", 10_000, 2, {"_query": 0, "_scheme": "loo"}),
    # The hull test's linear programs (issue 14): 1,000 query rows from 4 to 8 features.
    ("locality", 20_000, 4, {"_query": 1_000}),
    ("locality", 100_000, 8, {"_query": 1_000, "_shape": "ball"}),
]
QUICK = [
    ("knn", 5_000, 1, {}),
    ("knn", 5_000, 6, {}),
    ("linear", 20_000, 3, {}),
    ("linear", 20_000, 5, {"penalty": "lasso"}),
    ("spline", 20_000, 1, {}),
    ("spline", 800, 2, {}),
    ("spline", 5_000, 2, {}),
    ("additive", 10_000, 3, {}),
    ("spline", 20_000, 1, {"_query": 0}),
    ("knn", 3_000, 2, {"_query": 0, "_scheme": "loo"}),
]


# The hostile test's shapes (issue 12), near the row limits: kNN without a query (intervals at
# every row), kNN on rows spread on a sphere (the hull has two facets per row) and the
# locality summary on a sphere queried from inside (a degenerate nearest-row search).
LIMITS = [
    ("knn", 200_000, 1, {"_query": 0}),
    ("knn", 200_000, 2, {"_query": 0}),
    ("knn", 50_000, 3, {"_query": 2_000, "_shape": "sphere"}),
    ("knn", 100_000, 3, {"_query": 20_000, "_shape": "sphere"}),
    ("locality", 250_000, 3, {"_query": 2_000, "_shape": "ball"}),
    ("locality", 100_000, 3, {"_query": 10_000, "_shape": "ball"}),
    ("locality", 250_000, 3, {"_query": 100_000}),
]


def rows(n: int, p: int, q: int, shape: str, rng) -> tuple[np.ndarray, np.ndarray]:
    """Training and query features: uniform in the unit cube, or (``sphere``, ``ball``) on the
    unit sphere, queried on it or uniformly inside it."""
    if shape == "uniform":
        return rng.uniform(0, 1, (n, p)), rng.uniform(0, 1, (q, p))
    X = rng.standard_normal((n + q, p))
    X /= np.linalg.norm(X, axis=1)[:, None]
    if shape == "ball":
        X[n:] *= rng.uniform(0, 1, (q, 1)) ** (1 / p)
    return X[:n], X[n:]


def job(method: str, n: int, p: int, params: dict) -> Job:
    """Keys starting with ``_`` set the shape: ``_query`` rows (10), ``_scheme`` (kfold),
    ``_shape`` (uniform; sphere, ball: see :func:`rows`)."""
    q = params.get("_query", 10)
    scheme = params.get("_scheme", "kfold")
    shape = params.get("_shape", "uniform")
    params = {k: v for k, v in params.items() if not k.startswith("_")}
    rng = np.random.default_rng(0)
    X, Xq = rows(n, p, q, shape, rng)
    y = np.sin(6 * X[:, 0]) + X[:, 1:].sum(1) + rng.normal(0, 0.3, n)
    cols = (*[f"x{i}" for i in range(p)], "y")
    train = Table("train", cols, np.column_stack([X, y]))
    query = Table("query", cols[:-1], Xq) if q else None
    return Job(
        method=method,
        train=train,
        target="y",
        query=query,
        params=params,
        tuning=TuningSpec(scheme=scheme),
    )


def estimate(j: Job) -> float:
    if j.method == "locality":
        X, Xq = j.train.values[:, :-1], j.query.values if j.query else np.zeros((0, 1))
        scaler = Scaler.fit(X, "standard")
        Z = scaler.transform(X)
        probe = locality_cost.probe(X, Z, Nearest(Z), Xq, scaler.transform(Xq))
        return probe.seconds(summary=True)
    method = pipeline.get_method(j.method)
    settings, grid = pipeline.check_method(method, j, j.params, j.grid)
    # caps.cost_s set: the shape measures the locality flags' work, as a request's does
    ctx = pipeline.setup(replace(j, caps=Caps(cost_s=float("inf"))))
    return cost.total([cost.Item(method.name, settings, grid)], pipeline.shape(ctx))


def measure(j: Job) -> float:
    """CPU seconds of the request (this process, one BLAS thread)."""
    t0 = time.process_time()
    if j.method == "locality":
        X = j.train.values[:, :-1]
        names = j.train.columns[:-1]
        locality.summary(X, names, Xq=j.query.values if j.query else None)
    else:
        pipeline.run(j)
    return time.process_time() - t0


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small shapes only (about 10 s)")
    ap.add_argument("--limits", action="store_true", help="the hostile test's shapes (4 min)")
    ap.add_argument("--markdown", help="also write the table to this file")
    args = ap.parse_args(argv)
    rows = []
    for method, n, p, params in QUICK if args.quick else LIMITS if args.limits else FULL:
        j = job(method, n, p, params)
        est = estimate(j)
        took = measure(j)
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
