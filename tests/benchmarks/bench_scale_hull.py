"""Issue 14, item 4: a hull verdict for every query row up to 8 features.

20,000 training rows and 1,000 query rows, both uniform in the unit cube, in 4 and in 8
dimensions (a kNN predict's query flags). For each, in this one process, CPU seconds per query
row of:

- the hull test as it runs now (separating directions, the batched simplex, HiGHS for the rows
  it leaves), with the service's default cap NEARWISE_MAX_HULL_COST_S; every row must be
  decided;
- the route before issue 14, measured in the same run: the separating directions, then one
  HiGHS column-generation program per row (``hull._by_highs``), for every row (no cap); and
  how many rows its old cap of 250 programs decided;
- the whole query flags (nearest-row search, spacing, hull) and the kNN predict itself
  (tuning, fit, 1,000 answers with their flags), for scale.

One BLAS thread. Run by hand; report.py runs it too:

    .venv/bin/python tests/benchmarks/bench_scale_hull.py [--rows 20000]

Not a test: pytest does not collect it.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import dataclass

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402

from nearwise.core import hull, hull_simplex, locality, pipeline  # noqa: E402
from nearwise.core.data import Table  # noqa: E402
from nearwise.core.spec import Caps, Job  # noqa: E402
from nearwise.web.settings import Settings  # noqa: E402

QUERY_ROWS = 1_000
OLD_CAP = 250  # programs per request before issue 14


@dataclass(frozen=True)
class Result:
    p: int
    rows: int
    hull_s: float  # the hull test now
    decided: int
    old_s: float  # the old route, every row
    old_capped: int  # rows the old cap of 250 programs decided
    flags_s: float  # query_flags now
    predict_s: float  # the kNN predict


def _cpu(run) -> tuple[float, object]:
    t0 = time.process_time()
    out = run()
    return time.process_time() - t0, out


def _old_route(Z: np.ndarray, Zq: np.ndarray, budget: float | None) -> int:
    """Rows decided by directions + HiGHS column generation (the route before issue 14)."""
    centre, size = Z.mean(axis=0), float(np.ptp(Z, axis=0).max())
    W, Wq = (Z - centre) / size, (Zq - centre) / size  # full rank: no subspace needed
    D = np.random.default_rng(0).standard_normal((hull.N_DIRECTIONS, W.shape[1]))
    D /= np.linalg.norm(D, axis=1)[:, None]
    top, seeds = hull._extremes(W, D)
    clear = hull.beyond(Wq, D, -top)
    _, done, _ = hull._by_highs(W, Wq[~clear], seeds, budget)
    return int(clear.sum() + done.sum())


def run(p: int, rows: int = 20_000) -> Result:
    rng = np.random.default_rng(14)
    X, Xq = rng.uniform(size=(rows, p)), rng.uniform(size=(QUERY_ROWS, p))
    cap = Settings().max_hull_cost_s
    hull.hull_test(X[:500], Xq[:50])  # warm-up: first calls load code
    hull_s, test = _cpu(lambda: hull.hull_test(X, Xq, max_cost_s=cap))
    old_s, _ = _cpu(lambda: _old_route(X, Xq, None))
    per_program = hull.LP_SOLVE_S + rows * p * hull_simplex.PRICE_S
    old_capped = _old_route(X, Xq, OLD_CAP * per_program)
    caps = Caps(hull_cost_s=cap)
    flags_s, _ = _cpu(lambda: locality.query_flags(X, Xq, caps=caps))
    y = np.sin(6 * X[:, 0]) + X[:, 1:].sum(axis=1) + rng.normal(0, 0.3, rows)
    cols = tuple(f"x{i}" for i in range(p))
    job = Job(
        "knn",
        Table("train", (*cols, "y"), np.column_stack([X, y])),
        "y",
        query=Table("query", cols, Xq),
        caps=caps,
    )
    predict_s, _ = _cpu(lambda: pipeline.run(job))
    return Result(p, rows, hull_s, int(test.tested.sum()), old_s, old_capped, flags_s, predict_s)


def rows_for_report(results: list[Result]) -> list[tuple[str, str, str, str, str, bool | None]]:
    """(figure, value, baseline, ratio, goal, met) for report.py."""
    out = []
    for r in results:
        at = f"locality {r.p}-D, {r.rows:,} training x {QUERY_ROWS:,} query rows"
        ms = 1e3 / QUERY_ROWS
        out += [
            (
                f"{at}: hull test ms per row, now vs the old route (HiGHS per row, uncapped)",
                f"{r.hull_s * ms:.3f} ms",
                f"{r.old_s * ms:.3f} ms",
                f"base/ours = {r.old_s / r.hull_s:.1f}",
                ">= 3",
                r.old_s / r.hull_s >= 3,
            ),
            (
                f"{at}: rows decided, now vs the old cap of {OLD_CAP} programs",
                f"{r.decided:,}",
                f"{r.old_capped:,}",
                "-",
                f"= {QUERY_ROWS:,}",
                r.decided == QUERY_ROWS,
            ),
            (
                f"{at}: all query flags vs the kNN predict, ms per row",
                f"{r.flags_s * ms:.3f} ms",
                f"{r.predict_s * ms:.3f} ms",
                f"ours/base = {r.flags_s / r.predict_s:.2f}",
                "<= 0.5",
                r.flags_s / r.predict_s <= 0.5,
            ),
        ]
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=20_000)
    args = ap.parse_args(argv)
    results = [run(p, args.rows) for p in (4, 8)]
    lines = rows_for_report(results)
    for line in lines:
        print(" | ".join("-" if c is None else str(c) for c in line))
    return 0 if all(line[-1] for line in lines) else 1


if __name__ == "__main__":
    sys.exit(main())
