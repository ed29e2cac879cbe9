"""Load and fault run against a real gunicorn server on 127.0.0.1. Run by hand:

    .venv/bin/python tests/load/run_load.py                  # 60 s of load, then the faults
    .venv/bin/python tests/load/run_load.py --duration 20    # shorter
    .venv/bin/python tests/load/run_load.py --workers 2 --threads 6 --concurrency 8

It starts ``python -m nearwise serve --bind 127.0.0.1:PORT`` and runs three phases on it:

(a) clean: client threads, each on its own keep-alive connection, send a mix of small requests
    (kNN predict on 200 rows, tuned, 5 query rows) and medium ones (2,000 rows: one-feature
    spline, additive, compare) for the given duration. Expected: no error at all; a 503 ``busy``
    counts as an error.
(b) kill: the same load; a third of the way in, one worker gets SIGKILL. Only the requests it
    held may fail (at most one per client connection: connection errors <= the concurrency),
    the master starts a new worker, and every request sent after the new worker answers succeeds.
(c) term: slow requests (thin-plate spline) are sent; while all are still in flight the master
    gets SIGTERM. Every one of them must complete with 200 and the master must exit with 0.

Meanwhile a separate process polls GET /healthz every 150 ms on a fresh connection and records
its latency; the check is that the largest stays under ``--health-max-ms`` (100 ms). The client
sends nothing beyond 127.0.0.1, and every loop ends by itself (duration and request timeouts).
A Markdown summary goes to standard output; the exit status is 1 when a check fails.

The functions here are also used by ``test_load_short.py`` (a short run in the test suite) and by
``tests/benchmarks/report.py`` (the load figures of the benchmark report).
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import random
import signal
import socket
import subprocess
import sys
import threading
import time
from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

HOST = "127.0.0.1"
TIMEOUT_S = 60.0  # per request: the service's own time budget is 30 s
HEALTH_EVERY_S = 0.15
#: Seconds between the start of one client and the next. Connections opened all at once tend
#: to be accepted by one worker (see ``phase_burst``); opened in turn, they spread over both.
RAMP_S = 0.1


# -- request bodies ---------------------------------------------------------------------
def table(rng: np.random.Generator, n: int, p: int, q: int = 0) -> tuple[dict, dict | None]:
    """A training table ``x0..x{p-1}, y`` of n rows (invented smooth data with noise) and, when
    q > 0, a query table of q rows inside the data's ranges."""
    cols = [f"x{i}" for i in range(p)]
    X = rng.uniform(0.0, 10.0, (n, p))
    y = np.sin(X[:, 0]) + 0.1 * X.sum(axis=1) + rng.normal(0.0, 0.2, n)
    train = {"columns": [*cols, "y"], "rows": np.column_stack([X, y]).round(4).tolist()}
    query = None
    if q:
        query = {"columns": cols, "rows": rng.uniform(0.5, 9.5, (q, p)).round(3).tolist()}
    return train, query


def predict_body(method: str, n: int, p: int, q: int = 5, seed: int = 0) -> bytes:
    train, query = table(np.random.default_rng(seed), n, p, q)
    doc: dict = {"method": method, "target": "y", "train": train}
    if query is not None:
        doc["query"] = query
    return json.dumps(doc).encode()


def compare_body(methods: Sequence[str], n: int, p: int, seed: int = 0) -> bytes:
    train, _ = table(np.random.default_rng(seed), n, p)
    return json.dumps({"methods": list(methods), "target": "y", "train": train}).encode()


@dataclass(frozen=True)
class Kind:
    """One kind of request in the mix."""

    name: str
    method: str  # HTTP method
    path: str
    body: bytes | None
    weight: float


def standard_kinds(slow_rows: int = 2000) -> dict[str, Kind]:
    """Every kind of request the runs use, by name. ``weight`` is its share in the mixed load.
    ``slow_rows``: training rows of the thin-plate request of the SIGTERM phase."""
    return {
        "small": Kind("small", "POST", "/v1/predict", predict_body("knn", 200, 2, 5, 1), 0.85),
        "spline": Kind(
            "spline", "POST", "/v1/predict", predict_body("spline", 2000, 1, 5, 2), 0.05
        ),
        "additive": Kind(
            "additive", "POST", "/v1/predict", predict_body("additive", 2000, 3, 5, 3), 0.05
        ),
        "compare": Kind(
            "compare",
            "POST",
            "/v1/compare",
            compare_body(["knn", "linear", "spline"], 2000, 1, 4),
            0.05,
        ),
        "healthz": Kind("healthz", "GET", "/healthz", None, 1.0),
        # Thin-plate spline, tuned: seconds of fitting on 2,000 rows, for the SIGTERM phase.
        "slow": Kind(
            "slow", "POST", "/v1/predict", predict_body("spline", slow_rows, 2, 5, 5), 1.0
        ),
    }


MIXED = ("small", "spline", "additive", "compare")


# -- the server -------------------------------------------------------------------------
def free_port() -> int:
    with socket.socket() as s:
        s.bind((HOST, 0))
        return int(s.getsockname()[1])


def children(pid: int) -> list[int]:
    """Process ids whose parent is ``pid`` (Linux /proc)."""
    out: list[int] = []
    for task in Path(f"/proc/{pid}/task").glob("*/children"):
        try:
            out += [int(c) for c in task.read_text().split()]
        except OSError:
            pass
    return sorted(set(out))


def vm_hwm_kib(pid: int) -> int:
    """The resident-set high-water mark of a process, in KiB (/proc/<pid>/status VmHWM)."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1])
    raise RuntimeError(f"no VmHWM for process {pid}")


def get(port: int, path: str, timeout: float = 5.0) -> tuple[int, bytes]:
    conn = http.client.HTTPConnection(HOST, port, timeout=timeout)
    try:
        conn.request("GET", path)
        resp = conn.getresponse()
        return resp.status, resp.read()
    finally:
        conn.close()


class Server:
    """``python -m nearwise serve`` (gunicorn master and workers) on a free loopback port."""

    def __init__(
        self,
        log_path: Path,
        workers: int = 2,
        threads: int | None = None,
        env: Mapping[str, str] | None = None,
    ) -> None:
        self.port = free_port()
        self.log_path = log_path
        args = [
            sys.executable,
            "-m",
            "nearwise",
            "serve",
            "--bind",
            f"{HOST}:{self.port}",
            "--workers",
            str(workers),
        ]
        if threads is not None:
            args += ["--threads", str(threads)]
        clean = {k: v for k, v in os.environ.items() if not k.startswith("NEARWISE_")}
        self._log = log_path.open("wb")
        self.proc = subprocess.Popen(
            args, stdout=self._log, stderr=subprocess.STDOUT, env={**clean, **(env or {})}
        )
        self.workers = workers

    @property
    def pid(self) -> int:
        return self.proc.pid

    def wait_ready(self, timeout: float = 60.0) -> None:
        """Until /healthz answers 200 and every worker is running."""
        deadline = time.monotonic() + timeout
        while True:
            try:
                pids = self.worker_pids()
                ready = len(pids) == self.workers and all(accepting(p) for p in pids)
                if ready and get(self.port, "/healthz")[0] == 200:
                    return
            except OSError:
                pass
            if self.proc.poll() is not None:
                raise RuntimeError(f"the server exited:\n{self.log_path.read_text()[-3000:]}")
            if time.monotonic() > deadline:
                raise RuntimeError(f"the server did not answer within {timeout:g} s")
            time.sleep(0.1)

    def worker_pids(self) -> list[int]:
        return children(self.pid)

    def warm(self, kinds: Sequence[Kind], rounds: int = 2) -> None:
        """Send each kind a few times on fresh connections, so both workers have imported and
        run every code path before anything is measured."""
        for _ in range(rounds * self.workers):
            for kind in kinds:
                status, _body, _err = send_once(self.port, kind)
                if status != 200:
                    raise RuntimeError(f"warm-up {kind.name} answered {status}: {_body[:300]!r}")

    def close(self) -> int:
        """SIGTERM, then SIGKILL after 40 s; returns the exit status."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=40)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=30)
        self._log.close()
        return int(self.proc.returncode)


@contextmanager
def serving(
    log_path: Path,
    workers: int = 2,
    threads: int | None = None,
    env: Mapping[str, str] | None = None,
) -> Iterator[Server]:
    server = Server(log_path, workers, threads, env)
    try:
        server.wait_ready()
        yield server
    finally:
        server.close()


# -- the client -------------------------------------------------------------------------
@dataclass
class Sample:
    kind: str
    start: float  # time.monotonic() when sent
    latency: float  # seconds
    outcome: str  # "200", "503 busy", "ConnectionResetError", ...


def outcome_of(status: int, body: bytes) -> str:
    if status < 400:
        return str(status)
    try:
        code = json.loads(body).get("code", "")
    except (ValueError, AttributeError):
        code = ""
    return f"{status} {code}".strip()


def send_once(port: int, kind: Kind, timeout: float = TIMEOUT_S) -> tuple[int, bytes, str]:
    conn = http.client.HTTPConnection(HOST, port, timeout=timeout)
    try:
        return send(conn, kind)
    finally:
        conn.close()


def send(conn: http.client.HTTPConnection, kind: Kind) -> tuple[int, bytes, str]:
    headers = {"Content-Type": "application/json"} if kind.body is not None else {}
    conn.request(kind.method, kind.path, body=kind.body, headers=headers)
    resp = conn.getresponse()
    body = resp.read()
    return resp.status, body, resp.getheader("Retry-After") or ""


def client_loop(
    port: int,
    kinds: Sequence[Kind],
    until: float,
    seed: int,
    out: list[Sample],
    stop: threading.Event,
    delay: float = 0.0,
) -> None:
    """One client: one keep-alive connection, requests back to back until ``until``.

    After a connection error it opens a new connection. After a 503 it waits the smaller of
    Retry-After and 0.2 s and also opens a new connection: a kept-alive connection stays with
    the worker that accepted it, and only a new one can reach a worker with a free fit slot."""
    pick = random.Random(seed)
    weights = [k.weight for k in kinds]
    stop.wait(delay)
    conn = http.client.HTTPConnection(HOST, port, timeout=TIMEOUT_S)
    try:
        while time.monotonic() < until and not stop.is_set():
            kind = pick.choices(kinds, weights)[0]
            t0 = time.monotonic()
            try:
                status, body, retry = send(conn, kind)
                out.append(Sample(kind.name, t0, time.monotonic() - t0, outcome_of(status, body)))
                if status == 503:
                    conn.close()
                    time.sleep(min(float(retry or 1), 0.2))
                    conn = http.client.HTTPConnection(HOST, port, timeout=TIMEOUT_S)
            except (OSError, http.client.HTTPException) as exc:
                out.append(Sample(kind.name, t0, time.monotonic() - t0, type(exc).__name__))
                conn.close()
                conn = http.client.HTTPConnection(HOST, port, timeout=TIMEOUT_S)
                time.sleep(0.01)
    finally:
        conn.close()


@dataclass
class HealthPoll:
    """Latencies (s) of GET /healthz polled from a separate process, and its failures."""

    latencies: list[float] = field(default_factory=list)
    failures: Counter = field(default_factory=Counter)

    @property
    def max_ms(self) -> float:
        return 1000 * max(self.latencies) if self.latencies else float("nan")

    @property
    def p99_ms(self) -> float:
        return 1000 * pct(self.latencies, 99)

    @property
    def p50_ms(self) -> float:
        return 1000 * pct(self.latencies, 50)


class HealthPoller:
    """``run_load.py --poll-health PORT SECONDS`` in its own process, so that the client threads
    never delay a poll; it stops when its time is up or its standard input is closed, and
    prints one JSON line."""

    def __init__(self, port: int, seconds: float, every: float = HEALTH_EVERY_S) -> None:
        self.proc = subprocess.Popen(
            [
                sys.executable,
                __file__,
                "--poll-health",
                str(port),
                f"{seconds:.3f}",
                "--every",
                str(every),
            ],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
        )
        self.seconds = seconds

    def result(self) -> HealthPoll:
        """Stop polling now and return what was measured."""
        try:
            out, _ = self.proc.communicate(input="", timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            out, _ = self.proc.communicate()
        doc = json.loads(out.strip().splitlines()[-1]) if out.strip() else {}
        return HealthPoll(doc.get("latencies", []), Counter(doc.get("failures", {})))


def poll_health(port: int, seconds: float, every: float) -> dict:
    """GET /healthz on a fresh connection every ``every`` seconds for ``seconds``, or until
    standard input reaches its end."""
    latencies: list[float] = []
    failures: Counter = Counter()
    closed = threading.Event()
    threading.Thread(target=lambda: (sys.stdin.read(), closed.set()), daemon=True).start()
    end = time.monotonic() + seconds
    nxt = time.monotonic()
    while nxt < end and not closed.is_set():
        t0 = time.monotonic()
        try:
            status, _ = get(port, "/healthz", timeout=5.0)
            if status == 200:
                latencies.append(time.monotonic() - t0)
            else:
                failures[str(status)] += 1
        except (OSError, http.client.HTTPException) as exc:
            failures[type(exc).__name__] += 1
        nxt += every
        closed.wait(max(0.0, nxt - time.monotonic()))
    return {"latencies": latencies, "failures": dict(failures)}


def pct(values: Sequence[float], q: float) -> float:
    """The q-th percentile (nearest rank), NaN when empty."""
    if not values:
        return float("nan")
    s = sorted(values)
    return s[min(len(s) - 1, max(0, int(np.ceil(q / 100 * len(s))) - 1))]


@dataclass
class LoadResult:
    samples: list[Sample]
    seconds: float
    health: HealthPoll | None = None

    def of(self, kind: str | None = None) -> list[Sample]:
        return [s for s in self.samples if kind is None or s.kind == kind]

    def ok(self, kind: str | None = None) -> list[Sample]:
        return [s for s in self.of(kind) if s.outcome == "200"]

    def errors(self, after: float | None = None) -> Counter:
        return Counter(
            s.outcome
            for s in self.samples
            if s.outcome != "200" and (after is None or s.start >= after)
        )

    def rate(self, kind: str | None = None) -> float:
        """Successful requests per second of this kind."""
        return len(self.ok(kind)) / self.seconds

    def latency_ms(self, kind: str | None, q: float) -> float:
        return 1000 * pct([s.latency for s in self.ok(kind)], q)

    def table(self) -> str:
        lines = [
            "| kind | sent | ok/s | p50 (ms) | p99 (ms) | max (ms) | errors |",
            "|---|---|---|---|---|---|---|",
        ]
        for kind in [*sorted({s.kind for s in self.samples}), None]:
            errs = Counter(s.outcome for s in self.of(kind) if s.outcome != "200")
            lat = [s.latency for s in self.ok(kind)]
            lines.append(
                f"| {kind or 'all'} | {len(self.of(kind))} | {self.rate(kind):.1f} | "
                f"{self.latency_ms(kind, 50):.1f} | {self.latency_ms(kind, 99):.1f} | "
                f"{1000 * max(lat) if lat else float('nan'):.1f} | "
                f"{', '.join(f'{k}: {v}' for k, v in sorted(errs.items())) or '0'} |"
            )
        return "\n".join(lines)


def run_load(
    port: int,
    kinds: Sequence[Kind],
    seconds: float,
    concurrency: int = 8,
    seed: int = 0,
    health: bool = True,
    during: Callable[[float], None] | None = None,
    ramp_s: float = RAMP_S,
) -> LoadResult:
    """``concurrency`` client threads for at most ``seconds``, client i starting after
    i x ``ramp_s``. ``during(start)``, when given, runs in this thread while the load goes on;
    the load stops when it returns."""
    samples: list[Sample] = []
    stop = threading.Event()
    poller = HealthPoller(port, seconds) if health else None
    start = time.monotonic()
    until = start + seconds
    threads = [
        threading.Thread(
            target=client_loop,
            args=(port, kinds, until, seed + i, samples, stop, i * ramp_s),
            daemon=True,
        )
        for i in range(concurrency)
    ]
    for t in threads:
        t.start()
    try:
        if during is not None:
            during(start)
            stop.set()
    finally:
        for t in threads:
            t.join(timeout=seconds + TIMEOUT_S + 5)
        stop.set()
    elapsed = time.monotonic() - start
    return LoadResult(samples, elapsed, poller.result() if poller else None)


# -- phases -----------------------------------------------------------------------------
@dataclass
class Check:
    name: str
    passed: bool
    detail: str


@dataclass
class Phase:
    name: str
    checks: list[Check] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    load: LoadResult | None = None

    def check(self, name: str, passed: bool, detail: str) -> None:
        self.checks.append(Check(name, bool(passed), detail))

    @property
    def passed(self) -> bool:
        return all(c.passed for c in self.checks)

    def markdown(self) -> str:
        parts = [f"### {self.name}", ""]
        if self.load is not None:
            parts += [self.load.table(), ""]
            h = self.load.health
            if h is not None:
                fails = ", ".join(f"{k}: {v}" for k, v in sorted(h.failures.items())) or "0"
                parts += [
                    f"/healthz polled {len(h.latencies) + sum(h.failures.values())} times: "
                    f"p50 {h.p50_ms:.1f} ms, p99 {h.p99_ms:.1f} ms, max {h.max_ms:.1f} ms "
                    f"(slowest: {', '.join(f'{1000 * v:.0f}' for v in sorted(h.latencies)[-5:])} "
                    f"ms), failures {fails}",
                    "",
                ]
        parts += [f"- {n}" for n in self.notes]
        parts += [f"- [{'ok' if c.passed else 'FAILED'}] {c.name}: {c.detail}" for c in self.checks]
        return "\n".join(parts) + "\n"


def mixed(kinds: Mapping[str, Kind]) -> list[Kind]:
    return [kinds[k] for k in MIXED]


def health_check(phase: Phase, bound_ms: float, allowed_failures: int = 0) -> None:
    h = phase.load.health if phase.load else None
    if h is None:
        return
    phase.check(
        f"/healthz max latency < {bound_ms:g} ms",
        h.max_ms < bound_ms,
        f"max {h.max_ms:.1f} ms, p99 {h.p99_ms:.1f} ms over {len(h.latencies)} polls",
    )
    failed = sum(h.failures.values())
    phase.check(
        f"/healthz failures <= {allowed_failures}",
        failed <= allowed_failures,
        f"{failed} ({dict(h.failures) or 'none'})",
    )


def phase_clean(
    server: Server,
    kinds: Mapping[str, Kind],
    seconds: float,
    concurrency: int,
    health_max_ms: float,
) -> Phase:
    """(a) Mixed load, no fault: no error of any kind."""
    phase = Phase(f"(a) clean: {seconds:g} s, concurrency {concurrency}")
    phase.load = run_load(server.port, mixed(kinds), seconds, concurrency, seed=100)
    errs = phase.load.errors()
    phase.check(
        "no errors (503 busy included)",
        not errs,
        f"{sum(errs.values())} {dict(errs) or ''}".strip(),
    )
    phase.check(
        "every kind was sent",
        {s.kind for s in phase.load.samples} == set(MIXED),
        ", ".join(sorted({s.kind for s in phase.load.samples})),
    )
    health_check(phase, health_max_ms)
    return phase


def phase_burst(
    server: Server, kinds: Mapping[str, Kind], seconds: float, concurrency: int
) -> Phase:
    """All clients open their connections at the same moment and send small fits. A kept-alive
    connection stays with the worker that accepted it, so when one worker accepts more
    connections than it has fit slots, the excess get 503 ``busy`` until they reconnect. The
    check expects none; it fails while one worker can take the whole burst."""
    phase = Phase(
        f"(a2) burst: {concurrency} connections opened at once, small fits, {seconds:g} s"
    )
    phase.load = run_load(
        server.port, [kinds["small"]], seconds, concurrency, seed=300, health=False, ramp_s=0.0
    )
    errs = phase.load.errors()
    busy = [s for s in phase.load.samples if s.outcome == "503 busy"]
    t0 = min(s.start for s in phase.load.samples)
    if busy:
        phase.notes.append(
            f"503 busy sent within {max(s.start for s in busy) - t0:.2f} s of the start; "
            "each client reconnects after one"
        )
    phase.check(
        "no errors (503 busy included)",
        not errs,
        f"{sum(errs.values())} {dict(errs) or ''}".strip(),
    )
    return phase


def phase_kill(
    server: Server,
    kinds: Mapping[str, Kind],
    before_s: float,
    after_s: float,
    concurrency: int,
    health_max_ms: float,
) -> Phase:
    """(b) Mixed load; after ``before_s`` one worker gets SIGKILL. Only the requests it held
    may fail, the master starts a new worker, and once that worker has loaded the app (and
    one second more, for the clients to reconnect) every request succeeds for ``after_s``."""
    phase = Phase(
        f"(b) SIGKILL one worker: load for {before_s:g} s, the kill, then {after_s:g} s after "
        f"the new worker is ready; concurrency {concurrency}"
    )
    before = server.worker_pids()
    victim = before[0]
    when: dict[str, float] = {}

    def fault(start: float) -> None:
        time.sleep(max(0.0, start + before_s - time.monotonic()))
        os.kill(victim, signal.SIGKILL)
        when["kill"] = time.monotonic()
        deadline = when["kill"] + 60
        new: list[int] = []
        while not new and time.monotonic() < deadline:
            new = [p for p in server.worker_pids() if p not in before]
            time.sleep(0.01)
        when["spawned"] = time.monotonic()
        while new and not accepting(new[0]) and time.monotonic() < deadline:
            time.sleep(0.01)
        when["ready"] = time.monotonic()
        time.sleep(1.0 + after_s)

    phase.load = run_load(
        server.port, mixed(kinds), before_s + 70 + after_s, concurrency, seed=200, during=fault
    )
    after = server.worker_pids()
    kill, ready = when["kill"], when["ready"]
    t0 = min(s.start for s in phase.load.samples)
    phase.notes.append(
        f"worker {victim} killed at {kill - t0:.2f} s; its replacement was forked after "
        f"{when['spawned'] - kill:.2f} s and was accepting connections after {ready - kill:.2f} s "
        f"(it imports the app first); workers before {before}, after {after}"
    )
    phase.check(
        "the master replaced the killed worker",
        len(after) == len(before) and victim not in after,
        f"{before} -> {after}",
    )
    errs = phase.load.errors()
    conn_errors = sum(v for k, v in errs.items() if not k[:1].isdigit())
    phase.check(
        f"connection errors <= concurrency ({concurrency})",
        conn_errors <= concurrency,
        f"{conn_errors}",
    )
    early = Counter(
        s.outcome
        for s in phase.load.samples
        if s.outcome not in ("200", "503 busy") and s.start + s.latency < kill
    )
    phase.check(
        "no error but 503 busy before the kill (see phase a2)",
        not early,
        f"{dict(early) or 'none'}",
    )
    other = {k: v for k, v in errs.items() if k[:1].isdigit() and k != "503 busy"}
    phase.check("no HTTP error other than 503 busy", not other, f"{other or 'none'}")
    busy = [s for s in phase.load.samples if s.outcome == "503 busy"]
    phase.notes.append(
        f"503 busy answers: {len(busy)}, all sent between the kill and "
        f"{max((s.start for s in busy), default=kill) - kill:.2f} s after it (one worker "
        "carried the load meanwhile; fast refusals, allowed in this phase)"
    )
    late = [s for s in phase.load.samples if s.start >= ready + 1.0]
    late_errs = Counter(s.outcome for s in late if s.outcome != "200")
    phase.check(
        "every request sent from 1 s after the new worker was ready succeeded",
        len(late) >= concurrency and not late_errs,
        f"{len(late)} sent, errors {dict(late_errs) or 'none'}",
    )
    health_check(phase, health_max_ms, allowed_failures=1)
    return phase


def accepting(pid: int) -> bool:
    """Whether a gthread worker has entered its main loop: its epoll set then holds the
    listening socket besides its own wake-up pipe (Linux /proc/<pid>/fdinfo ``tfd`` lines).
    Before that, while the worker imports the app, it accepts nothing."""
    try:
        for info in Path(f"/proc/{pid}/fdinfo").iterdir():
            try:
                text = info.read_text()
            except OSError:
                continue
            if sum(line.startswith("tfd:") for line in text.splitlines()) >= 2:
                return True
    except OSError:
        pass
    return False


def phase_term(server: Server, kinds: Mapping[str, Kind], slow: int) -> Phase:
    """(c) SIGTERM the master while ``slow`` long requests are in flight: each completes with
    200 and the master exits with status 0."""
    phase = Phase(f"(c) SIGTERM the master with {slow} slow requests in flight")
    results: list[tuple[str, float]] = []
    lock = threading.Lock()
    kind = kinds["slow"]

    def one() -> None:
        try:
            status, body, _ = send_once(server.port, kind)
            out = outcome_of(status, body)
        except (OSError, http.client.HTTPException) as exc:
            out = type(exc).__name__
        with lock:
            results.append((out, time.monotonic()))

    threads = [threading.Thread(target=one, daemon=True) for _ in range(slow)]
    t0 = time.monotonic()
    for t in threads:
        t.start()
    time.sleep(0.5)  # every request sent and being fitted
    term = time.monotonic()
    server.proc.send_signal(signal.SIGTERM)
    for t in threads:
        t.join(timeout=TIMEOUT_S + 10)
    try:
        rc = server.proc.wait(timeout=60)
    except subprocess.TimeoutExpired:
        rc = None
    exited = time.monotonic()
    in_flight = [r for r in results if r[1] > term]
    phase.notes.append(
        f"SIGTERM {term - t0:.2f} s after sending; answers came "
        f"{', '.join(f'{r[1] - term:.2f}' for r in results)} s after it; the master exited "
        f"{exited - term:.2f} s after it"
    )
    phase.check(
        "every slow request was still in flight at SIGTERM",
        len(in_flight) == slow,
        f"{len(in_flight)} of {slow}",
    )
    outs = Counter(r[0] for r in results)
    phase.check("each completed with 200", outs == Counter({"200": slow}), f"{dict(outs)}")
    phase.check("the master exited with status 0", rc == 0, f"exit status {rc}")
    try:
        get(server.port, "/healthz", timeout=2.0)
        refused = False
    except OSError:
        refused = True
    phase.check(
        "the port is closed afterwards", refused, "connection refused" if refused else "open"
    )
    return phase


def run_all(
    log_dir: Path,
    seconds: float,
    kill_before_s: float,
    kill_after_s: float,
    concurrency: int = 8,
    workers: int = 2,
    threads: int | None = None,
    slow: int = 4,
    health_max_ms: float = 100.0,
    slow_rows: int = 2000,
    burst_s: float = 0.0,
) -> list[Phase]:
    """The phases on one server: clean, burst (when ``burst_s`` > 0), kill, then term (which
    stops the server)."""
    kinds = standard_kinds(slow_rows)
    phases: list[Phase] = []
    with serving(log_dir / "load-server.log", workers, threads) as server:
        server.warm([kinds[k] for k in MIXED])
        phases.append(phase_clean(server, kinds, seconds, concurrency, health_max_ms))
        if burst_s > 0:
            phases.append(phase_burst(server, kinds, burst_s, concurrency))
        phases.append(
            phase_kill(server, kinds, kill_before_s, kill_after_s, concurrency, health_max_ms)
        )
        server.wait_ready()
        server.warm([kinds["small"]], rounds=2)
        phases.append(phase_term(server, kinds, slow))
    return phases


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--duration", type=float, default=60.0, help="seconds of clean load (60)")
    ap.add_argument(
        "--kill-before", type=float, default=10.0, help="seconds of load before the SIGKILL (10)"
    )
    ap.add_argument(
        "--kill-after",
        type=float,
        default=20.0,
        help="seconds of load once the new worker is ready (20)",
    )
    ap.add_argument("--concurrency", type=int, default=8)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--threads", type=int, default=None, help="default: the service's own")
    ap.add_argument(
        "--burst", type=float, default=3.0, help="seconds of the burst phase, 0 to leave it out (3)"
    )
    ap.add_argument("--slow", type=int, default=4, help="slow requests in flight at SIGTERM")
    ap.add_argument("--health-max-ms", type=float, default=100.0)
    ap.add_argument("--log-dir", type=Path, default=Path("/tmp"))
    ap.add_argument("--poll-health", nargs=2, metavar=("PORT", "SECONDS"), help=argparse.SUPPRESS)
    ap.add_argument("--every", type=float, default=HEALTH_EVERY_S, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.poll_health:
        port, seconds = int(args.poll_health[0]), float(args.poll_health[1])
        print(json.dumps(poll_health(port, min(seconds, 3600.0), args.every)), flush=True)
        return 0
    phases = run_all(
        args.log_dir,
        args.duration,
        args.kill_before,
        args.kill_after,
        args.concurrency,
        args.workers,
        args.threads,
        args.slow,
        args.health_max_ms,
        burst_s=args.burst,
    )
    print(f"## Load run: {args.workers} workers, concurrency {args.concurrency}\n")
    for phase in phases:
        print(phase.markdown())
    ok = all(p.passed for p in phases)
    print("All checks passed." if ok else "Some checks FAILED.")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
