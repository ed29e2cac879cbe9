"""Issue 14, item 2: kNN's default grid grows with the rows.

100,000 rows of a smooth 2-D surface (sin(3 (a + b) / sqrt 2) on the unit square, noise sd 0.3,
the surface of tests/core/test_knn_grid.py), 1,000 query rows, 5-fold tuning. Two predicts in
this one process: the old default grid (k = 1..50, sent as a grid) and today's default (k up to
K = ceil(80,000^(2/3)) = 1,857, log-spaced). For each: CPU seconds of the tuning path alone and
of the whole predict; the k chosen by the default rule (one standard error) and by the least
error, and their held-out error against the surface (RMSE at 2,000 new points), divided by
that of the best k on a wide grid (1 to 4,000) scored on the same folds with scikit-learn's
neighbors (the check of tests/core/test_knn_grid.py), and by that of the best k of all (the
surface known: no cross-validation can do better). One BLAS thread.

    .venv/bin/python tests/benchmarks/bench_scale_knn_grid.py [--rows 100000]

Not a test: pytest does not collect it.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import dataclass, replace

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402
from sklearn.neighbors import NearestNeighbors  # noqa: E402
from sklearn.preprocessing import StandardScaler  # noqa: E402

from nearwise.core import pipeline  # noqa: E402
from nearwise.core.data import Table  # noqa: E402
from nearwise.core.spec import Job  # noqa: E402
from nearwise.core.tuning import choose  # noqa: E402

NOISE = 0.3
WIDE_TOP = 4_000


def surface(X: np.ndarray) -> np.ndarray:
    return np.sin(3 * X.sum(axis=1) / np.sqrt(2))


@dataclass(frozen=True)
class Side:
    label: str
    tuning_s: float
    predict_s: float
    k_one_se: int
    k_min: int
    top: int
    err_one_se: float  # held-out RMSE against the surface, / the wide grid's CV best
    err_min: float
    oracle_min: float  # the same, / the best k of all


@dataclass(frozen=True)
class Result:
    rows: int
    best_k: int  # the wide grid's best by cross-validation
    best_err: float
    oracle_k: int  # the best k knowing the surface
    old: Side
    new: Side


def _truth(X, y, Xq, ks) -> np.ndarray:
    sc = StandardScaler().fit(X)
    nn = NearestNeighbors(n_neighbors=int(max(ks))).fit(sc.transform(X))
    ind = nn.kneighbors(sc.transform(Xq), return_distance=False)
    ks = np.asarray(ks)
    means = np.cumsum(y[ind], axis=1)[:, ks - 1] / ks
    return np.sqrt(((means - surface(Xq)[:, None]) ** 2).mean(axis=0))


def _cv_best(X, y, fold_id, ks) -> int:
    """The k of least 5-fold error on the same folds, with scikit-learn's neighbors."""
    sq = np.zeros(len(ks))
    for f in np.unique(fold_id):
        train, test = fold_id != f, fold_id == f
        sc = StandardScaler().fit(X[train])
        nn = NearestNeighbors(n_neighbors=int(max(ks))).fit(sc.transform(X[train]))
        Xt, yt, ytr = sc.transform(X[test]), y[test], y[train]
        for at in range(0, Xt.shape[0], 1_000):
            ind = nn.kneighbors(Xt[at : at + 1_000], return_distance=False)
            means = np.cumsum(ytr[ind], axis=1)[:, ks - 1] / ks
            sq += ((means - yt[at : at + 1_000, None]) ** 2).sum(axis=0)
    return int(ks[np.argmin(sq)])


def run(rows: int = 100_000) -> Result:
    rng = np.random.default_rng(14)
    X = rng.uniform(0, 1, (rows, 2))
    y = surface(X) + rng.normal(0, NOISE, rows)
    Xq = rng.uniform(0, 1, (2_000, 2))
    cols = ("a", "b", "y")
    job = Job(
        "knn",
        Table("train", cols, np.column_stack([X, y])),
        "y",
        query=Table("query", cols[:2], rng.uniform(0, 1, (1_000, 2))),
    )
    every = np.unique(np.rint(np.geomspace(1, 2 * WIDE_TOP, 100)).astype(int))
    err_every = _truth(X, y, Xq, every)
    oracle_k, oracle_err = int(every[np.argmin(err_every)]), float(err_every.min())
    ctx = pipeline.setup(job)
    wide = np.unique(np.rint(np.geomspace(1, WIDE_TOP, 80)).astype(int))
    best_k = _cv_best(ctx.X, ctx.y, ctx.folds.fold_id[0], wide)
    best_err = float(_truth(X, y, Xq, [best_k])[0])
    sides = []
    for label, grid in (("old grid k = 1..50", {"k": list(range(1, 51))}), ("default grid", {})):
        j = replace(job, grid=grid)
        ctx = pipeline.setup(j)
        method = pipeline.get_method("knn")
        settings, checked = pipeline.check_method(method, j, j.params, j.grid)
        values = method.candidates(ctx.X, ctx.y, ctx.folds, settings, checked)
        t0 = time.process_time()
        method.path(ctx.X, ctx.y, ctx.folds, settings, values)
        tuning = time.process_time() - t0
        t0 = time.process_time()
        result = pipeline.run(j)
        predict = time.process_time() - t0
        ks = [e.params["k"] for e in result.tuning.path]
        error = np.array([e.error for e in result.tuning.path])
        se = np.array([e.error_se for e in result.tuning.path])
        k1, k0 = (ks[choose(error, se, rule)[1]] for rule in ("one_se", "min"))
        e1, e0 = _truth(X, y, Xq, [k1, k0]) / best_err
        o0 = e0 * best_err / oracle_err
        sides.append(Side(label, tuning, predict, k1, k0, max(ks), float(e1), float(e0), o0))
    return Result(rows, best_k, best_err, oracle_k, *sides)


def rows_for_report(r: Result) -> list[tuple[str, str, str, str, str, bool | None]]:
    """(figure, value, baseline, ratio, goal, met) for report.py."""
    o, n = r.old, r.new
    at = f"knn {r.rows:,} x 2, smooth surface"
    return [
        (
            f"{at}: held-out error of the chosen k (least error) / best k on a wide grid",
            f"{n.err_min:.3f} (k = {n.k_min} of 1..{n.top})",
            f"{o.err_min:.3f} (k = {o.k_min} of 1..{o.top})",
            f"wide grid's best k = {r.best_k}, RMSE {r.best_err:.4f}",
            "<= 1.05",
            n.err_min <= 1.05,
        ),
        (
            f"{at}: the same, / the best k knowing the surface (k = {r.oracle_k})",
            f"{n.oracle_min:.3f}",
            f"{o.oracle_min:.3f}",
            "-",
            "-",
            None,
        ),
        (
            f"{at}: the same for the default rule (one standard error)",
            f"{n.err_one_se:.3f} (k = {n.k_one_se})",
            f"{o.err_one_se:.3f} (k = {o.k_one_se})",
            "-",
            "-",
            None,
        ),
        (
            f"{at}: tuning path CPU s, default grid vs old grid",
            f"{n.tuning_s:.2f} s",
            f"{o.tuning_s:.2f} s",
            f"ours/base = {n.tuning_s / o.tuning_s:.1f}",
            "-",
            None,
        ),
        (
            f"{at}: whole predict (1,000 query rows) CPU s, default grid vs old grid",
            f"{n.predict_s:.2f} s",
            f"{o.predict_s:.2f} s",
            f"ours/base = {n.predict_s / o.predict_s:.1f}",
            "-",
            None,
        ),
    ]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    args = ap.parse_args(argv)
    r = run(args.rows)
    for row in rows_for_report(r):
        print(" | ".join("-" if c is None else str(c) for c in row))
    return 0 if r.new.err_min <= 1.05 else 1


if __name__ == "__main__":
    sys.exit(main())
