"""Speed of the tuning paths against the slow way and against lower bounds. Run by hand:

    .venv/bin/python tests/benchmarks/bench_tuning.py            # everything, a few minutes
    .venv/bin/python tests/benchmarks/bench_tuning.py knn json   # some benchmarks only
    .venv/bin/python tests/benchmarks/bench_tuning.py locality   # locality flags vs a predict
    .venv/bin/python tests/benchmarks/bench_tuning.py overhead   # intervals + locality in a predict
    .venv/bin/python tests/benchmarks/bench_tuning.py window     # window scheme vs kfold

Not a test: pytest does not collect this file (its name does not start with ``test_``), and no
timing belongs in the test suite. Every figure is the best of a few runs (time.perf_counter)
measured in this one process, with BLAS limited to one thread as in a service worker
(``--blas-threads`` to change). Each benchmark also checks that both sides computed the same
numbers, so a ratio never compares different work.

A ratio is written ``base/ours`` where we must be faster than a baseline, and ``ours/base``
where we must stay close to a lower bound (work that any method of the same kind must do).
"""

from __future__ import annotations

import argparse
import gc
import json
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import linalg
from scipy.interpolate import RBFInterpolator, make_smoothing_spline
from scipy.spatial.distance import cdist
from scipy.special import xlogy
from sklearn.model_selection import GridSearchCV
from sklearn.neighbors import KNeighborsRegressor, NearestNeighbors
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from threadpoolctl import threadpool_limits

from nearwise.core import locality, pipeline, uncertainty
from nearwise.core.data import Table
from nearwise.core.locality import query_flags
from nearwise.core.methods.knn import KNN, FittedKNN
from nearwise.core.methods.spline import Spline
from nearwise.core.spec import Job, TuningSpec
from nearwise.core.tuning import Folds, make_folds


@dataclass(frozen=True)
class Row:
    name: str
    ours: float
    base: float
    faster: bool  # True: target is base/ours >= target; False: ours/base <= target
    target: float

    @property
    def ratio(self) -> float:
        return self.base / self.ours if self.faster else self.ours / self.base

    @property
    def met(self) -> bool:
        return self.ratio >= self.target if self.faster else self.ratio <= self.target

    def cells(self) -> list[str]:
        how = "base/ours" if self.faster else "ours/base"
        sign = ">=" if self.faster else "<="
        return [
            self.name,
            f"{self.ours:.3f}",
            f"{self.base:.3f}",
            f"{how} = {self.ratio:.2f}",
            f"{sign} {self.target:g}",
            "yes" if self.met else "NO",
        ]


def best_of(fn: Callable[[], Any], repeats: int) -> tuple[float, Any]:
    """Smallest wall time of ``repeats`` calls, and the last call's result.

    The previous result is dropped and garbage collected before each call, so that no call
    pays for collecting objects left over from another (the garbage collector stays on).
    """
    best, out = float("inf"), None
    for _ in range(repeats):
        out = None
        gc.collect()
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def note(text: str) -> None:
    print(f"  {text}", flush=True)


def cv_splits(folds: Folds) -> list[tuple[np.ndarray, np.ndarray]]:
    return [(train, test) for _r, _f, train, test in folds.splits()]


# -- kNN ----------------------------------------------------------------------------------
def bench_knn(rng: np.random.Generator, repeats: int) -> list[Row]:
    n, p, kmax = 20_000, 3, 50
    X = rng.uniform(0.0, 1.0, size=(n, p)) * [1.0, 10.0, 100.0]
    y = np.sin(6 * X[:, 0]) + 0.02 * X[:, 1] + 0.004 * X[:, 2] + rng.normal(0, 0.3, n)
    folds = make_folds(n, TuningSpec(folds=5, seed=0))
    method = KNN()
    settings = method.settings({})
    values = method.order(range(1, kmax + 1))
    print(f"kNN: n={n}, p={p}, k=1..{kmax}, 5 folds", flush=True)

    t_ours, path = best_of(lambda: method.path(X, y, folds, settings, values), repeats)

    splits = cv_splits(folds)
    search = GridSearchCV(
        make_pipeline(StandardScaler(), KNeighborsRegressor()),
        {"kneighborsregressor__n_neighbors": list(range(1, kmax + 1))},
        cv=splits,
        scoring="neg_mean_squared_error",
        refit=False,
        n_jobs=1,
    )
    t_grid, fitted = best_of(lambda: search.fit(X, y), max(1, repeats - 1))

    # Same numbers: per-fold MSE of every k (ours are ordered k = 50..1).
    fold_id = folds.fold_id[0]
    ours_mse = np.array(
        [
            [np.mean((y[test] - path.oof[c, 0, test]) ** 2) for c in range(kmax)]
            for test in (np.flatnonzero(fold_id == f) for f in range(5))
        ]
    )[:, ::-1]
    theirs = -np.array([fitted.cv_results_[f"split{f}_test_score"] for f in range(5)])
    note(f"max |fold MSE ours - GridSearchCV| = {np.max(np.abs(ours_mse - theirs)):.2e}")

    Xs = StandardScaler().fit_transform(X)  # pre-scaled once: the bound excludes scaling

    def one_query_per_fold() -> None:
        for train, test in splits:
            NearestNeighbors().fit(Xs[train]).kneighbors(Xs[test], n_neighbors=kmax)

    t_bound, _ = best_of(one_query_per_fold, repeats)
    return [
        Row("knn k=1..50 vs GridSearchCV", t_ours, t_grid, True, 25),
        Row("knn k=1..50 vs one 50-NN query/fold", t_ours, t_bound, False, 1.5),
    ]


# -- thin-plate spline --------------------------------------------------------------------
def tps_kernel(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    r = cdist(A, B)
    return xlogy(r**2, r)  # r^2 log r, 0 at r = 0


def bench_thinplate(rng: np.random.Generator, repeats: int) -> list[Row]:
    n = 1_500
    X = rng.uniform(0.0, 1.0, size=(n, 2))
    y = np.sin(3 * X[:, 0]) * np.cos(2 * X[:, 1]) + rng.normal(0, 0.1, n)
    method = Spline()
    settings = method.settings({"scale": "none"})  # the RBFInterpolator call exactly
    kfold = make_folds(n, TuningSpec(folds=5, seed=0))
    loo = make_folds(n, TuningSpec(scheme="loo"))
    lams = method.candidates(X, y, kfold, settings, None)
    print(f"thin-plate spline: n={n}, p=2, {len(lams)} smoothing values", flush=True)

    t_ours, path = best_of(lambda: method.path(X, y, kfold, settings, lams), repeats)
    t_loo, _ = best_of(lambda: method.path(X, y, loo, settings, lams), repeats)
    splits = cv_splits(kfold)

    def refit_loop() -> np.ndarray:
        oof = np.empty((len(lams), n))
        for train, test in splits:
            for c, lam in enumerate(lams):
                rbf = RBFInterpolator(X[train], y[train], kernel="thin_plate_spline", smoothing=lam)
                oof[c, test] = rbf(X[test])
        return oof

    t_refit, oof = best_of(refit_loop, max(1, repeats - 1))
    diff = np.max(np.abs(oof - path.oof[:, 0, :]), axis=1)
    note(
        f"max |oof ours - RBFInterpolator| per smoothing: largest {diff.max():.1e}, "
        f"median {np.median(diff):.1e} (y spread {np.ptp(y):.1f})"
    )

    def one_eigh_per_fold() -> None:
        for train, _test in splits:
            linalg.eigh(tps_kernel(X[train], X[train]), check_finite=False)

    t_bound, _ = best_of(one_eigh_per_fold, repeats)
    return [
        Row("thin-plate 5-fold vs RBFInterpolator refits", t_ours, t_refit, True, 2.5),
        Row("thin-plate 5-fold vs kernel+eigh per fold", t_ours, t_bound, False, 1.5),
        Row("thin-plate loo vs 5-fold RBF refits", t_loo, t_refit, True, 6),
    ]


# -- one-feature spline -------------------------------------------------------------------
def bench_spline1d(rng: np.random.Generator, repeats: int, rounded: bool) -> list[Row]:
    n = 100_000
    x = rng.uniform(0.0, 10.0, n)
    if rounded:
        x = np.round(x, 3)
    y = np.sin(x) + 0.1 * x + rng.normal(0, 0.3, n)
    label = "x to 3 decimals" if rounded else "x unrounded"
    job = Job(
        method="spline",
        train=Table("train", ("x", "y"), np.column_stack([x, y])),
        target="y",
        tuning=TuningSpec(folds=5, seed=0),
    )
    print(
        f"1-D spline: n={n}, {label} ({np.unique(x).size} distinct), 20 smoothing values, "
        "5 folds, whole pipeline.run",
        flush=True,
    )

    t_ours, result = best_of(lambda: pipeline.run(job), repeats)
    lam = result.params["smoothing"]

    def one_fit() -> np.ndarray:
        # scipy wants strictly increasing x: sort and average repeats (weights = counts).
        t, inv, counts = np.unique(x, return_inverse=True, return_counts=True)
        ybar = np.bincount(inv, weights=y) / counts
        return make_smoothing_spline(t, ybar, w=counts.astype(float), lam=lam)(x)

    t_base, fitted = best_of(one_fit, repeats)
    ours_fit = y - result.predictions.residual
    note(
        f"max |fitted ours - make_smoothing_spline| at smoothing {lam:.3g}: "
        f"{np.max(np.abs(ours_fit - fitted)):.1e}"
    )
    errors = ", ".join(f"{e.error:.3g}" for e in result.tuning.path)
    note(f"cv error path (simplest first): {errors}")
    note(f"warnings: {', '.join(w.code for w in result.warnings) or 'none'}")
    return [Row(f"1-D spline tuned, {label}, vs one fit", t_ours, t_base, False, 5)]


# -- JSON table ---------------------------------------------------------------------------
def bench_json(rng: np.random.Generator, repeats: int) -> list[Row]:
    try:
        from nearwise.web.jsonio import loads_strict
        from nearwise.web.schemas import PredictRequest
        from nearwise.web.tables import Limits, from_json
        from nearwise.web.validation import load
    except ImportError as exc:
        print(f"JSON table: skipped, the web layer's table parser is not importable ({exc})")
        return []
    n = 100_000
    rows = np.column_stack(
        [
            np.round(rng.uniform(0, 25, n), 2),
            np.round(rng.normal(1.2, 0.03, n), 3),
            np.round(rng.uniform(0, 2000, n), 1),
        ]
    ).tolist()
    doc = {
        "method": "knn",
        "target": "power_kw",
        "train": {"columns": ["wind_ms", "air_density", "power_kw"], "rows": rows},
    }
    body = json.dumps(doc).encode()
    del rows, doc  # keep no Python rows alive: both sides then pay the same garbage collection
    limits = Limits(max_rows=250_000, max_columns=50, max_cells=2_000_000)
    schema = PredictRequest()
    print(f"JSON table: {n} rows x 3 columns, {len(body) / 1e6:.1f} MB body", flush=True)

    def ours() -> Any:
        parsed = loads_strict(body)
        data = load(schema, parsed.doc)
        t = data["train"]
        return from_json("train", t["columns"], t["rows"], limits, parsed.saw_constant).table

    def baseline() -> np.ndarray:
        return np.asarray(json.loads(body)["train"]["rows"], dtype=float)

    t_ours, table = best_of(ours, repeats)
    t_base, values = best_of(baseline, repeats)
    note(f"same values: {np.array_equal(table.values, values)}")
    return [Row("JSON 100k-row table vs json.loads+asarray", t_ours, t_base, False, 1.5)]


# -- locality -----------------------------------------------------------------------------
def knn_predict_job(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, Job]:
    """n = 20,000 training rows in p = 3 features of different units, 1,000 query rows (some
    beyond the ranges), and the kNN predict job over them (5 folds, default grid)."""
    n, p, m = 20_000, 3, 1_000
    units = np.array([1.0, 10.0, 100.0])
    X = rng.uniform(0.0, 1.0, size=(n, p)) * units
    y = np.sin(6 * X[:, 0] / units[0]) + rng.normal(0, 0.3, n)
    Xq = rng.uniform(-0.05, 1.05, size=(m, p)) * units  # some rows beyond the ranges
    cols = ("x0", "x1", "x2")
    job = Job(
        method="knn",
        train=Table("train", (*cols, "y"), np.column_stack([X, y])),
        target="y",
        query=Table("query", cols, Xq),
        tuning=TuningSpec(folds=5, seed=0),
    )
    return X, Xq, job


def bench_locality(rng: np.random.Generator, repeats: int) -> list[Row]:
    X, Xq, job = knn_predict_job(rng)
    (n, p), m = X.shape, Xq.shape[0]
    print(f"locality: n={n}, p={p}, {m} query rows, vs one kNN predict, 5 folds", flush=True)

    t_ours, loc = best_of(lambda: query_flags(X, Xq), repeats)
    t_base, result = best_of(lambda: pipeline.run(job), repeats)
    scaler = StandardScaler().fit(X)
    d = NearestNeighbors(n_neighbors=1).fit(scaler.transform(X)).kneighbors(scaler.transform(Xq))
    note(f"max |nearest ours - NearestNeighbors| = {np.max(np.abs(loc.nearest - d[0][:, 0])):.1e}")
    counts = ", ".join(f"{w.code} {len(w.rows)}" for w in loc.notices)
    note(f"flags: {counts or 'none'}; kNN chose k = {result.params['k']}")
    # pipeline.run computes the same flags itself: the request without them took base - ours.
    note(f"flags add {t_ours / (t_base - t_ours):.1%} to the request without them")
    return [Row("locality flags vs whole kNN predict", t_ours, t_base, False, 0.1)]


# -- overhead of the error figures and the flags --------------------------------------------
class Stopwatch:
    """Wraps functions, as a profiler would, and adds up the wall time spent inside them."""

    def __init__(self) -> None:
        self.spent: dict[str, float] = {}
        self._undo: list[tuple[Any, str, Any]] = []

    def wrap(self, owner: Any, name: str, label: str) -> None:
        original = getattr(owner, name)
        self.spent[label] = 0.0

        def timed(*args: Any, **kwargs: Any) -> Any:
            t0 = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.spent[label] += time.perf_counter() - t0

        self._undo.append((owner, name, original))
        setattr(owner, name, timed)

    def reset(self) -> None:
        self.spent = dict.fromkeys(self.spent, 0.0)

    def restore(self) -> None:
        for owner, name, original in reversed(self._undo):
            setattr(owner, name, original)
        self._undo.clear()


def bench_overhead(rng: np.random.Generator, repeats: int) -> list[Row]:
    """Intervals plus locality within one kNN predict request: the time spent in
    uncertainty.compute (std_error and CV+ bounds), locality.query_flags (outside_range,
    outside_hull, far_from_data) and the model's query_notices (wide_neighborhood), against
    the rest of the same request."""
    X, Xq, job = knn_predict_job(rng)
    (n, p), m = X.shape, Xq.shape[0]
    print(
        f"overhead: n={n}, p={p}, {m} query rows, kNN predict, 5 folds; intervals and "
        "locality timed inside the same run",
        flush=True,
    )
    plain = pipeline.run(job)  # unwrapped, to check the wrappers change nothing
    watch = Stopwatch()
    # pipeline.run calls these through their modules and through the fitted model's class,
    # so replacing the attributes there times exactly the calls the request makes.
    watch.wrap(uncertainty, "compute", "uncertainty.compute")
    watch.wrap(locality, "query_flags", "locality.query_flags")
    watch.wrap(FittedKNN, "query_notices", "FittedKNN.query_notices")
    runs = []
    try:
        for _ in range(repeats):
            watch.reset()
            gc.collect()
            t0 = time.perf_counter()
            result = pipeline.run(job)
            runs.append((time.perf_counter() - t0, dict(watch.spent)))
    finally:
        watch.restore()
    same = (
        all(
            np.array_equal(getattr(plain.predictions, k), getattr(result.predictions, k))
            for k in ("value", "std_error", "lower", "upper")
        )
        and plain.predictions.flags == result.predictions.flags
    )
    note(f"same predictions, bounds and flags as an unwrapped run: {same}")
    total, spent = min(runs, key=lambda r: r[0])  # the fastest run, with its own parts
    extra = sum(spent.values())
    parts = ", ".join(f"{k} {v:.3f} s" for k, v in spent.items())
    note(f"fastest request {total:.3f} s; inside it: {parts}")
    note(f"kNN chose k = {result.params['k']}; intervals: {result.interval['construction']}")
    note(f"intervals + locality add {extra / (total - extra):.1%} to the request without them")
    if not same:
        raise SystemExit("overhead: the wrapped run gave different numbers")
    return [Row("intervals + locality inside a kNN predict", extra, total - extra, False, 0.30)]


# -- driver -------------------------------------------------------------------------------
# -- compare ------------------------------------------------------------------------------
def bench_compare(rng: np.random.Generator, repeats: int) -> list[Row]:
    """compare over every method that applies, against tuning each method alone (its own
    parse, checks, sort and folds, then its path), summed, in the same run."""
    from nearwise.core import compare
    from nearwise.core.methods import METHODS

    n, p = 5000, 3
    X = rng.uniform(0, 1, (n, p))
    y = np.sin(3 * X[:, 0]) + X[:, 1] ** 2 + X[:, 2] + rng.normal(0, 0.1, n)
    cols = ("a", "b", "c", "y")
    job = Job("compare", Table("train", cols, np.column_stack([X, y])), "y")
    t_ours, result = best_of(lambda: compare.compare(job), repeats)
    names = [r.method for r in result.ranking]
    print(f"compare: n={n}, p={p}, methods {', '.join(names)}", flush=True)

    def alone() -> None:
        for name in names:
            solo = Job(name, job.train, "y")
            settings, grid = pipeline.check_method(METHODS[name], solo, {}, {})
            pipeline.tune(pipeline.setup(solo), METHODS[name], settings, grid)

    t_base, _ = best_of(alone, repeats)
    note(
        f"recommended {result.recommended}; skipped: "
        f"{', '.join(w.message.split(' was')[0] for w in result.warnings) or 'none'}"
    )
    return [Row("compare vs sum of tuning each alone", t_ours, t_base, False, 1.2)]


def bench_window(rng: np.random.Generator, repeats: int) -> list[Row]:
    """The ``window`` scheme (default gap, chosen from the data) against 5-fold ``kfold`` on
    the same rows, for kNN (p = 2) and the 1-D spline, n = 20,000 rows of a series with AR(1)
    noise (lag-1 correlation 0.6): setup (checks, sort, pilot, folds) and the tuning path.
    Before timing, the window's out-of-fold predictions at a few held-out steps are checked
    against refits without the window (our own kNN on the kept rows; scipy's
    make_smoothing_spline on them, in range)."""
    from nearwise.core.methods import METHODS

    n = 20_000
    t = np.arange(n, dtype=float)
    e = np.zeros(n)
    shocks = rng.normal(0, 0.3, n)
    for i in range(1, n):
        e[i] = 0.6 * e[i - 1] + shocks[i]
    rows = []
    for name, p in (("knn", 2), ("spline", 1)):
        X = rng.uniform(0, 1, (n, p))
        y = np.sin(6 * X[:, 0]) + (X[:, 1] if p > 1 else 0) + e
        cols = ("t", *(f"x{j}" for j in range(p)), "y")
        train = Table("train", cols, np.column_stack([t, X, y]))
        feats = [f"x{j}" for j in range(p)]

        def tuned(scheme: str, name=name, train=train, feats=feats):
            spec = TuningSpec(scheme=scheme, order_by="t" if scheme == "window" else None)
            job = Job(name, train, "y", features=feats, tuning=spec)
            settings, grid = pipeline.check_method(METHODS[name], job, {}, {})
            ctx = pipeline.setup(job)
            return ctx, pipeline.tune(ctx, METHODS[name], settings, grid)

        ctx, tw = tuned("window")
        folds, c = ctx.folds, tw.chosen
        value = tw.values[c]
        for f in (17, n // 2):
            train_rows = np.flatnonzero(np.abs(folds.step - f) > folds.gap)
            test_rows = np.flatnonzero(folds.step == f)
            if name == "knn":
                from nearwise.core.data import Scaler
                from nearwise.core.methods.knn import _index, predict_all_k

                Xs = Scaler.fit(ctx.X, "standard").transform(ctx.X)
                ref = predict_all_k(
                    _index(Xs[train_rows]), ctx.y[train_rows], Xs[test_rows], value, "uniform"
                )[:, -1]
            else:
                xt, yt = ctx.X[train_rows, 0], ctx.y[train_rows]
                o = np.argsort(xt)
                from nearwise.core.methods import spline1d

                snap = spline1d.Snap.of(ctx.X[:, 0])
                tt, yb, w = spline1d.average_ties(snap.x[train_rows], yt)
                ref = make_smoothing_spline(tt, yb, w=w, lam=value)(snap.x[test_rows])
                del o
            gap = float(np.max(np.abs(ref - tw.path.oof[c, 0, test_rows])))
            assert gap < 1e-6 * float(np.ptp(ctx.y)), (name, f, gap)
        note(f"window {name}: gap {ctx.gap.steps} steps (from the data), chosen {value}")
        t_ours, _ = best_of(lambda tuned=tuned: tuned("window"), repeats)
        t_base, _ = best_of(lambda tuned=tuned: tuned("kfold"), repeats)
        label = "kNN, p = 2" if name == "knn" else "1-D spline"
        rows.append(Row(f"window vs 5-fold kfold, {label}, n = 20,000", t_ours, t_base, False, 2.0))
    return rows


BENCHES: dict[str, Callable[[np.random.Generator, int], list[Row]]] = {
    "window": bench_window,
    "knn": bench_knn,
    "thinplate": bench_thinplate,
    "spline1d": lambda rng, r: [*bench_spline1d(rng, r, True), *bench_spline1d(rng, r, False)],
    "json": bench_json,
    "locality": bench_locality,
    "overhead": bench_overhead,
    "compare": bench_compare,
}


def print_table(rows: list[Row]) -> None:
    head = ["benchmark", "ours (s)", "baseline (s)", "ratio", "target", "met?"]
    cells = [head] + [r.cells() for r in rows]
    width = [max(len(c[i]) for c in cells) for i in range(len(head))]
    for k, line in enumerate(cells):
        print("  ".join(c.ljust(w) for c, w in zip(line, width, strict=True)).rstrip())
        if k == 0:
            print("  ".join("-" * w for w in width))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("only", nargs="*", help=f"benchmarks to run: {', '.join(BENCHES)} (all)")
    ap.add_argument("--repeats", type=int, default=3, help="runs per timing (best is kept)")
    ap.add_argument("--blas-threads", type=int, default=1)
    args = ap.parse_args(argv)
    unknown = sorted(set(args.only) - set(BENCHES))
    if unknown:
        ap.error(f"unknown benchmark(s) {', '.join(unknown)}; choose from {', '.join(BENCHES)}")
    rows: list[Row] = []
    with threadpool_limits(limits=args.blas_threads):
        for name in args.only or list(BENCHES):
            rows += BENCHES[name](np.random.default_rng(2026), args.repeats)
    print()
    print_table(rows)
    return 0 if all(r.met for r in rows) else 1


if __name__ == "__main__":
    sys.exit(main())
