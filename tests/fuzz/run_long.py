"""Long fuzzing runs against a live server: many drawn cases per operation of the document.

    python tests/fuzz/run_long.py                       # start a server, 1,000 cases per operation
    python tests/fuzz/run_long.py --examples 5000 --max-seconds 3600
    python tests/fuzz/run_long.py --url http://127.0.0.1:8080   # a server already running

Without ``--url`` it starts ``python -m nearwise serve`` (gunicorn) on a free port of
127.0.0.1 with a short time budget, and stops it at the end. For every operation of the
served OpenAPI document it draws ``--examples`` cases (half from valid data, half from data
that breaks the schema; the JSON bodies repaired as in the in-suite test, see
``fuzzing.py``), sends each and applies the same four checks: no server error, a documented
status, a documented media type, a body valid against its schema. Each operation gets an
equal share of ``--max-seconds``; cases past it are not sent. Prints per operation the cases
sent, the statuses seen and every distinct failure with a curl command to reproduce it; the
exit status is 1 when anything failed (or nothing could be sent), 0 otherwise.
"""

from __future__ import annotations

import argparse
import os
import socket
import subprocess
import sys
import time
import urllib.request
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import schemathesis
from hypothesis import HealthCheck, given, seed, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode

sys.path.insert(0, str(Path(__file__).resolve().parent))
from fuzzing import CHECKS, repair_case

ROOT = Path(__file__).resolve().parents[2]


@dataclass
class Tally:
    sent: int = 0
    skipped: int = 0
    statuses: Counter[int] = field(default_factory=Counter)
    failures: dict[str, str] = field(default_factory=dict)
    seconds: float = 0.0


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def start_server(port: int, workers: int) -> subprocess.Popen[bytes]:
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join([str(ROOT / "service"), os.environ.get("PYTHONPATH", "")]),
        "NEARWISE_WORKERS": str(workers),
        "NEARWISE_TIME_BUDGET_S": "10",
        "NEARWISE_LOG_LEVEL": "WARNING",
    }
    cmd = [sys.executable, "-m", "nearwise", "serve", "--bind", f"127.0.0.1:{port}"]
    return subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)


def wait_ready(base: str, proc: subprocess.Popen[bytes] | None, timeout: float = 30.0) -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if proc is not None and proc.poll() is not None:
            err = proc.stderr.read().decode(errors="replace") if proc.stderr else ""
            raise SystemExit(f"the server exited with {proc.returncode}:\n{err}")
        try:
            with urllib.request.urlopen(base + "/readyz", timeout=2) as resp:
                if resp.status == 200:
                    return
        except OSError:
            time.sleep(0.2)
    raise SystemExit(f"{base}/readyz did not answer within {timeout:.0f} s")


def fuzz_operation(
    operation: schemathesis.APIOperation, base: str, examples: int, seconds: float, run_seed: int
) -> Tally:
    tally = Tally()
    start = time.monotonic()
    for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
        share = examples // 2 if mode is GenerationMode.POSITIVE else examples - examples // 2

        @seed(run_seed + (0 if mode is GenerationMode.POSITIVE else 1))
        @given(case=operation.as_strategy(generation_mode=mode))
        @settings(
            max_examples=share,
            deadline=None,
            database=None,
            phases=["generate"],  # no shrinking: every failure is kept as drawn
            suppress_health_check=list(HealthCheck),
        )
        def run(case: schemathesis.Case) -> None:
            if time.monotonic() - start > seconds:
                tally.skipped += 1
                return
            tally.sent += 1
            response = case.call(base_url=base, timeout=60)
            tally.statuses[response.status_code] += 1
            try:
                case.validate_response(response, checks=CHECKS)
            except (Exception, BaseExceptionGroup) as exc:  # keep one report per kind of failure
                text = str(exc)
                key = f"{response.status_code} {text.strip().splitlines()[0]}"
                tally.failures.setdefault(key, f"[{case.meta.generation.mode.value}] {text}")

        try:
            run()
        except Unsatisfiable:  # nothing to break (an operation without parameters or body)
            pass
    tally.seconds = time.monotonic() - start
    return tally


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--examples", type=int, default=1000, help="cases per operation")
    parser.add_argument("--max-seconds", type=float, default=1800.0, help="time for the run")
    parser.add_argument("--url", help="base URL of a running server (default: start one)")
    parser.add_argument("--workers", type=int, default=2, help="gunicorn workers when starting")
    parser.add_argument("--seed", type=int, default=0, help="seed of the drawn cases")
    parser.add_argument("--only", help="fuzz only operations whose label contains this text")
    args = parser.parse_args(argv)
    if args.examples < 1 or args.max_seconds <= 0:
        parser.error("--examples and --max-seconds must be positive")

    proc = None
    base = (args.url or "").rstrip("/")
    if not base:
        port = free_port()
        base = f"http://127.0.0.1:{port}"
        proc = start_server(port, args.workers)
    total = Tally()
    try:
        wait_ready(base, proc)
        schema = schemathesis.openapi.from_url(base + "/openapi.json")
        schema.hook("flatmap_case")(repair_case)
        operations = [r.ok() for r in schema.get_all_operations()]
        if args.only:
            operations = [op for op in operations if args.only in op.label]
        share = args.max_seconds / max(1, len(operations))
        print(f"fuzzing {len(operations)} operations at {base}: {args.examples} cases each")
        for op in operations:
            tally = fuzz_operation(op, base, args.examples, share, args.seed)
            total.sent += tally.sent
            total.skipped += tally.skipped
            total.statuses.update(tally.statuses)
            total.failures.update({f"{op.label}: {k}": v for k, v in tally.failures.items()})
            statuses = ", ".join(f"{s}: {n}" for s, n in sorted(tally.statuses.items()))
            print(
                f"{op.label:24} {tally.sent:6} sent {tally.skipped:6} skipped "
                f"{len(tally.failures):3} failures {tally.seconds:8.1f} s   {statuses}",
                flush=True,
            )
    finally:
        if proc is not None:
            proc.terminate()
            proc.wait(timeout=60)
    print(
        f"total: {total.sent} sent, {total.skipped} skipped (time), {len(total.failures)} failures"
    )
    for key, text in total.failures.items():
        print(f"\n=== {key}\n{text}")
    return 1 if total.failures or total.sent == 0 else 0


if __name__ == "__main__":
    sys.exit(main())
