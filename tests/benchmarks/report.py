"""The benchmark report: every benchmark of bench_tuning.py, the load figures and the peak memory
of a worker, as one Markdown table with the machine it ran on. Run by hand:

    .venv/bin/python tests/benchmarks/report.py                     # about 10 minutes
    .venv/bin/python tests/benchmarks/report.py --quick             # about 3 minutes
    .venv/bin/python tests/benchmarks/report.py --out /tmp/r.md     # another file

It writes tests/benchmarks/REPORT.md unless told otherwise. Each row gives a figure, the baseline
measured in the same run, their ratio and the goal:

- bench_tuning.py: every benchmark, as that script reports it (BLAS limited to one thread).
- scale: bench_scale_knn_grid.py (issue 14): kNN's default grid at 100,000 rows against the
  old one, the chosen k's held-out error and the tuning time.
  bench_scale_hull.py (issue 14): the hull test's milliseconds per query row at 4 and 8
  features (20,000 x 1,000 rows) against the route before it, measured in the same run, and the
  rows decided.
  bench_scale_thinplate.py (issue 14): thin-plate on knots, tuned, at 50,000 x 2 and
  20,000 x 3, against one exact fit at 3,000 rows, and the cost estimate against it.
  bench_scale_intervals.py (issue 14): kNN at 100,000 x 2, answers at every training row
  (CV+ intervals, cv_residual) against tuning + 1,000 query rows, CPU seconds; goal <= 2.
- load: a real server (``nearwise serve``, 2 workers, default threads) on 127.0.0.1; 8 client
  threads on kept-alive connections send the small tuned request (kNN predict, 200 rows, 5 query
  rows) back to back; the baseline is GET /healthz sent the same way to the same server. Goal:
  200 small requests per second. Then the mixed load of ``tests/load/run_load.py`` (phase a):
  goal 0 errors, and its /healthz polls (goal: max under 100 ms).
- memory: for each of the largest requests the limits allow, a fresh server with one worker
  answers one small request (the baseline) and then the large one; the figure is the worker's
  resident-set high-water mark (/proc/<pid>/status VmHWM). Goal: at most ``--memory-bound-gib``
  (2 GiB) per worker.
- attack: the quick groups of ``tests/load/attack.py`` (issue 12) on a fresh server: slow
  connections held with /healthz under them, the worst wall time against the time budget, the
  worst worker peak memory, and how many of its checks passed.

Not a test: pytest does not collect it, and no timing belongs in the test suite.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path[:0] = [str(HERE), str(HERE.parent / "load")]

import attack  # noqa: E402
import bench_scale_hull  # noqa: E402
import bench_scale_intervals  # noqa: E402
import bench_scale_knn_grid  # noqa: E402
import bench_scale_thinplate  # noqa: E402
import bench_tuning  # noqa: E402
import calibrate_cost  # noqa: E402
import run_load  # noqa: E402
from threadpoolctl import threadpool_info, threadpool_limits  # noqa: E402

from nearwise.web.settings import Settings  # noqa: E402

GIB = 1024**3


@dataclass(frozen=True)
class Figure:
    """One line of the report."""

    group: str
    name: str
    value: str
    baseline: str
    ratio: str
    goal: str
    met: bool | None  # None: no goal

    def cells(self) -> list[str]:
        met = "-" if self.met is None else ("yes" if self.met else "NO")
        return [self.group, self.name, self.value, self.baseline, self.ratio, self.goal, met]


def from_bench(row: bench_tuning.Row) -> Figure:
    how = "base/ours" if row.faster else "ours/base"
    sign = ">=" if row.faster else "<="
    return Figure(
        "tuning",
        row.name,
        f"{row.ours:.3f} s",
        f"{row.base:.3f} s",
        f"{how} = {row.ratio:.2f}",
        f"{sign} {row.target:g}",
        row.met,
    )


# -- load -------------------------------------------------------------------------------
def load_figures(seconds: float, log_dir: Path) -> tuple[list[Figure], list[str]]:
    kinds = run_load.standard_kinds()
    notes: list[str] = []
    with run_load.serving(log_dir / "report-load.log", workers=2) as server:
        server.warm([kinds[k] for k in run_load.MIXED])
        small = run_load.run_load(server.port, [kinds["small"]], seconds, 8, seed=1, health=False)
        trivial = run_load.run_load(
            server.port, [kinds["healthz"]], seconds, 8, seed=2, health=False
        )
        clean = run_load.phase_clean(server, kinds, seconds, 8, 100.0)
        threads = Settings().threads
    rate, base = small.rate("small"), trivial.rate("healthz")
    serr, terr = small.errors(), trivial.errors()
    notes.append(
        f"Small requests: p50 {small.latency_ms('small', 50):.1f} ms, p99 "
        f"{small.latency_ms('small', 99):.1f} ms, errors {dict(serr) or 'none'}; /healthz: p50 "
        f"{trivial.latency_ms('healthz', 50):.1f} ms, p99 {trivial.latency_ms('healthz', 99):.1f}"
        f" ms, errors {dict(terr) or 'none'}."
    )
    notes.append("Mixed load (phase a of run_load.py):\n\n" + clean.load.table())
    errs = clean.load.errors()
    h = clean.load.health
    out = [
        Figure(
            "load",
            f"small tuned request (kNN predict, n = 200, 5 query rows), 2 workers x {threads} "
            "threads, 8 clients, kept-alive",
            f"{rate:.1f} req/s",
            f"/healthz {base:.1f} req/s",
            f"ours/base = {rate / base:.3f}",
            ">= 200 req/s",
            rate >= 200 and not serr,
        ),
        Figure(
            "load",
            f"errors under mixed load without faults ({seconds:g} s, 8 clients; 503 busy counts)",
            f"{sum(errs.values())} of {len(clean.load.samples)}",
            "-",
            "-",
            "0",
            not errs,
        ),
        Figure(
            "load",
            "/healthz latency under the mixed load, polled every 150 ms on a fresh connection",
            f"max {h.max_ms:.1f} ms",
            f"p50 {h.p50_ms:.1f} ms",
            f"max/p50 = {h.max_ms / h.p50_ms:.1f}",
            "max < 100 ms",
            h.max_ms < 100 and not h.failures,
        ),
    ]
    if errs:
        notes.append(f"Errors under the mixed load: {dict(errs)}.")
    return out, notes


# -- attack -------------------------------------------------------------------------------
def attack_figures(log_dir: Path) -> tuple[list[Figure], list[str]]:
    """The quick groups of tests/load/attack.py (issue 12) on a fresh server."""
    run = attack.run_own(log_dir, quick=True)
    rows = [Figure("attack", n, v, b, "-", g, m) for n, v, b, g, m in run.report_rows()]
    return rows, ["Attack run (tests/load/attack.py --quick):\n\n" + run.markdown()]


# -- the cost estimate ----------------------------------------------------------------------
def cost_figures(quick: bool) -> list[Figure]:
    """The estimate NEARWISE_MAX_COST_S is checked against, next to the measured time."""
    out = []
    with threadpool_limits(limits=1):
        for method, n, p, params in calibrate_cost.QUICK if quick else calibrate_cost.FULL:
            job = calibrate_cost.job(method, n, p, params)
            est = calibrate_cost.estimate(job)
            t0 = time.perf_counter()
            calibrate_cost.pipeline.run(job)
            took = time.perf_counter() - t0
            label = method + "".join(f" {k.strip('_')}={v}" for k, v in params.items())
            out.append(
                Figure(
                    "cost estimate",
                    f"{label}, {n:,} rows x {p} features: estimate {est:.3g} s",
                    f"{est:.3g} s",
                    f"{took:.3g} s measured",
                    f"est/measured = {est / took:.2f}",
                    "0.5 to 2",
                    0.5 <= est / took <= 2.0,
                )
            )
    return out


# -- memory -----------------------------------------------------------------------------
def big_body(method: str, rows: int, features: int, seed: int) -> bytes:
    rng = np.random.default_rng(seed)
    cols = [f"x{i}" for i in range(features)]
    X = rng.uniform(0.0, 10.0, (rows, features))
    y = np.sin(X[:, 0]) + 0.1 * X.sum(axis=1) + rng.normal(0.0, 0.2, rows)
    doc = {
        "method": method,
        "target": "y",
        "train": {"columns": [*cols, "y"], "rows": np.column_stack([X, y]).round(3).tolist()},
        "query": {"columns": cols, "rows": rng.uniform(1.0, 9.0, (5, features)).round(3).tolist()},
    }
    return json.dumps(doc).encode()


def memory_figures(
    cases: list[tuple[str, str, int, int]], bound_gib: float, log_dir: Path
) -> tuple[list[Figure], list[str]]:
    """One fresh single-worker server per case: VmHWM after a small request, then after the
    large one."""
    small = run_load.standard_kinds()["small"]
    out: list[Figure] = []
    notes: list[str] = []
    for label, method, rows, features in cases:
        body = big_body(method, rows, features, seed=7)
        kind = run_load.Kind(label, "POST", "/v1/predict", body, 1.0)
        with run_load.serving(log_dir / f"report-mem-{method}.log", workers=1) as server:
            (worker,) = server.worker_pids()
            server.warm([small], rounds=1)
            idle = run_load.vm_hwm_kib(worker) * 1024
            t0 = time.monotonic()
            status, answer, _ = run_load.send_once(server.port, kind, timeout=300)
            took = time.monotonic() - t0
            peak = run_load.vm_hwm_kib(worker) * 1024
        ok = status == 200
        if not ok:
            notes.append(f"{label}: answered {status}: {answer[:300].decode(errors='replace')}")
        else:
            notes.append(f"{label}: answered 200 in {took:.1f} s; body {len(body) / 1e6:.1f} MB.")
        out.append(
            Figure(
                "memory",
                f"{label}: {rows:,} rows x {features + 1} columns ({len(body) / 1e6:.0f} MB "
                f"JSON), answered {status}",
                f"{peak / GIB:.2f} GiB",
                f"{idle / GIB:.2f} GiB after a small request",
                f"ours/base = {peak / idle:.1f}",
                f"<= {bound_gib:g} GiB",
                ok and peak <= bound_gib * GIB,
            )
        )
    return out, notes


# -- the machine ------------------------------------------------------------------------
def machine() -> list[str]:
    model = "unknown"
    for line in Path("/proc/cpuinfo").read_text().splitlines():
        if line.startswith("model name"):
            model = line.split(":", 1)[1].strip()
            break
    mem_kib = 0
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemTotal:"):
            mem_kib = int(line.split()[1])
    import scipy
    import sklearn

    with threadpool_limits(limits=1):
        blas = ", ".join(
            f"{i['internal_api']} {i.get('version') or ''} ({i['num_threads']} thread)".replace(
                "  ", " "
            )
            for i in threadpool_info()
        )
    commit = subprocess.run(
        ["git", "-C", str(HERE), "rev-parse", "--short", "HEAD"], capture_output=True, text=True
    ).stdout.strip()
    return [
        f"- date: {time.strftime('%Y-%m-%d %H:%M %Z')}, commit {commit or 'unknown'}",
        f"- CPU: {model}, {os.cpu_count()} cores; memory {mem_kib / 1024**2:.1f} GiB; "
        f"load average at the end {' '.join(f'{v:.1f}' for v in os.getloadavg())}",
        f"- Python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__},"
        f" scikit-learn {sklearn.__version__}",
        f"- BLAS: {blas}; `nearwise serve` sets OMP/OPENBLAS/MKL_NUM_THREADS=1 in every worker",
    ]


def markdown(
    figures: list[Figure], notes: list[str], about: list[str], quick: bool, seconds: float
) -> str:
    head = ["group", "figure", "value", "baseline", "ratio", "goal", "met?"]
    lines = [
        "# Benchmark report",
        "",
        "Written by `tests/benchmarks/report.py`"
        + (" --quick (one timing per benchmark)" if quick else "")
        + f"; load runs of {seconds:g} s each.",
        "",
        *about,
        "",
        "| " + " | ".join(head) + " |",
        "|" + "---|" * len(head),
        *("| " + " | ".join(f.cells()) + " |" for f in figures),
        "",
        "## Notes",
        "",
        *(f"- {n}" if "\n" not in n else n for n in notes),
        "",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one timing per benchmark, 5 s loads")
    ap.add_argument("--out", type=Path, default=HERE / "REPORT.md")
    ap.add_argument("--memory-bound-gib", type=float, default=2.0)
    ap.add_argument(
        "--skip",
        nargs="*",
        default=[],
        choices=["tuning", "scale", "cost", "load", "memory", "attack"],
    )
    args = ap.parse_args(argv)
    repeats, seconds = (1, 5.0) if args.quick else (3, 20.0)
    rows_cap = Settings().max_rows
    figures: list[Figure] = []
    notes: list[str] = []
    with tempfile.TemporaryDirectory(prefix="nearwise-report-") as tmp:
        log_dir = Path(tmp)
        if "tuning" not in args.skip:
            with threadpool_limits(limits=1):
                for name, bench in bench_tuning.BENCHES.items():
                    print(f"[tuning] {name}", flush=True)
                    rows = bench(np.random.default_rng(2026), repeats)
                    figures += [from_bench(r) for r in rows]
        if "scale" not in args.skip:
            print("[scale] knn grid", flush=True)
            with threadpool_limits(limits=1):
                grid = bench_scale_knn_grid.run(100_000)
            figures += [Figure("scale", *r) for r in bench_scale_knn_grid.rows_for_report(grid)]
            print("[scale] hull", flush=True)
            with threadpool_limits(limits=1):
                hulls = [bench_scale_hull.run(p) for p in (4, 8)]
            figures += [Figure("scale", *r) for r in bench_scale_hull.rows_for_report(hulls)]
            print("[scale] thin-plate on knots", flush=True)
            with threadpool_limits(limits=1):
                exact = bench_scale_thinplate.exact_fit_seconds()
                plates = [
                    bench_scale_thinplate.run(n, p, exact) for n, p in ((50_000, 2), (20_000, 3))
                ]
            figures += [Figure("scale", *r) for r in bench_scale_thinplate.rows_for_report(plates)]
            print("[scale] answers at every training row", flush=True)
            with threadpool_limits(limits=1):
                every = bench_scale_intervals.run(100_000)
            figures += [Figure("scale", *r) for r in bench_scale_intervals.rows_for_report(every)]
        if "cost" not in args.skip:
            print("[cost]", flush=True)
            figures += cost_figures(args.quick)
        if "load" not in args.skip:
            print("[load]", flush=True)
            found, said = load_figures(seconds, log_dir)
            figures += found
            notes += said
        if "memory" not in args.skip:
            print("[memory]", flush=True)
            cases = [
                ("kNN predict at the row limit", "knn", rows_cap, 3),
                ("additive predict at the cell limit", "additive", rows_cap, 7),
                ("linear predict at the row limit", "linear", rows_cap, 3),
                ("spline predict (one feature) at the row limit", "spline", rows_cap, 1),
            ]
            found, said = memory_figures(cases, args.memory_bound_gib, log_dir)
            figures += found
            notes += said
        if "attack" not in args.skip:
            print("[attack]", flush=True)
            found, said = attack_figures(log_dir)
            figures += found
            notes += said
    text = markdown(figures, notes, machine(), args.quick, seconds)
    args.out.write_text(text, encoding="utf-8")
    print(text)
    print(f"wrote {args.out}")
    return 0 if all(f.met is not False for f in figures) else 1


if __name__ == "__main__":
    sys.exit(main())
