"""Long fuzzing runs against a live server: many drawn cases per operation of the document.

    python tests/fuzz/run_long.py                       # start a server, 1,000 cases per operation
    python tests/fuzz/run_long.py --examples 5000 --max-seconds 3600
    python tests/fuzz/run_long.py --url http://127.0.0.1:8080   # a server already running
    python tests/fuzz/run_long.py --examples 30 --large 60 --hostile 150 --max-seconds 1200

Without ``--url`` it starts ``python -m nearwise serve`` (gunicorn) on a free port of
127.0.0.1 with a short time budget, and stops it at the end. For every operation of the
served OpenAPI document it draws ``--examples`` cases (half from valid data, half from data
that breaks the schema; the JSON bodies repaired as in the in-suite test, see
``fuzzing.py``), sends each and applies the same four checks: no server error, a documented
status, a documented media type, a body valid against its schema. Each operation gets an
equal share of ``--max-seconds``; cases past it are not sent. Prints per operation the cases
sent, the statuses seen and every distinct failure with a curl command to reproduce it; the
exit status is 1 when anything failed (or nothing could be sent), 0 otherwise.

Two more passes are drawn here, not from the document (its bounds allow what its generator
never draws), with the same checks and an equal share of the time: ``--large`` /v1/locality
requests whose train and query tables have up to 50,000 rows laid out to be hard (on a sphere,
on a line, repeated, on a lattice, in far clusters, extreme magnitudes, missing cells; see
``fuzzing.SHAPES``), and ``--hostile`` GETs of /openapi.json with hostile Accept headers and
query strings. A request unanswered within 60 s counts as a hang; a 503 ``busy`` or
``time_budget_exceeded`` is the service's designed refusal, not a server error. Each failure
names its case; for a large table, the call that rebuilds its body. The slowest answer of each
pass is shown.
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
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import requests
import schemathesis
from hypothesis import HealthCheck, given, seed, settings
from hypothesis import strategies as st
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error

sys.path.insert(0, str(Path(__file__).resolve().parent))
import fuzzing
from fuzzing import CHECKS, repair_case

ROOT = Path(__file__).resolve().parents[2]
#: Seconds a request may take before it counts as a hang (the server's budget is 10 s).
CALL_TIMEOUT_S = 60.0
#: Characters of a failure's text kept in the report (a large body's curl command is cut).
FAILURE_CHARS = 3000
#: Refusals the service is built to give under load: documented, so not server errors here.
DESIGNED_503 = ("503 busy", "503 time_budget_exceeded")
LARGE_LABEL = "POST /v1/locality (large tables)"
HOSTILE_LABEL = "GET /openapi.json (hostile Accept and query)"


@dataclass
class Tally:
    sent: int = 0
    skipped: int = 0
    statuses: Counter[int | str] = field(default_factory=Counter)
    failures: dict[str, str] = field(default_factory=dict)
    seconds: float = 0.0
    slowest: tuple[float, str] = (0.0, "")

    def send(self, case: schemathesis.Case, base: str, describe: str) -> None:
        """Send one case and apply the checks; a failure is kept once per kind, with the case."""
        self.sent += 1
        t0 = time.monotonic()
        try:
            response = case.call(base_url=base, timeout=CALL_TIMEOUT_S)
        except (requests.exceptions.InvalidHeader, UnicodeError):
            self.sent -= 1  # the client library refused to send it: not the server's doing
            self.skipped += 1
            return
        except requests.RequestException as exc:  # a hang, a reset or a dropped connection
            self.statuses["no answer"] += 1
            self.failures.setdefault(f"no answer: {type(exc).__name__}", f"{describe}\n{exc}")
            return
        took = time.monotonic() - t0
        self.slowest = max(self.slowest, (took, describe))
        self.statuses[outcome(response)] += 1
        checks = CHECKS
        if outcome(response) in DESIGNED_503:
            checks = [c for c in CHECKS if c is not not_a_server_error]
        try:
            case.validate_response(response, checks=checks)
        except (Exception, BaseExceptionGroup) as exc:  # keep one report per kind of failure
            text = str(exc)
            key = f"{response.status_code} {text.strip().splitlines()[0]}"
            self.failures.setdefault(key, f"{describe}\n{text[:FAILURE_CHARS]}")


def outcome(response: requests.Response) -> int | str:
    """The status, with the problem's ``code`` when there is one (``422 over_limit``)."""
    if response.status_code < 400:
        return response.status_code
    try:
        return f"{response.status_code} {response.json().get('code', '')}".strip()
    except (ValueError, AttributeError):
        return response.status_code


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
            tally.send(case, base, f"[{case.meta.generation.mode.value}]")

        try:
            run()
        except Unsatisfiable:  # nothing to break (an operation without parameters or body)
            pass
    tally.seconds = time.monotonic() - start
    return tally


def fuzz_drawn(
    strategy: st.SearchStrategy[Any],
    make: Callable[[Any], tuple[schemathesis.Case, str]],
    base: str,
    examples: int,
    seconds: float,
    run_seed: int,
) -> Tally:
    """``examples`` items drawn from ``strategy``, each made into a case (and its description,
    enough to rebuild it) by ``make``, sent and checked."""
    tally = Tally()
    start = time.monotonic()

    @seed(run_seed)
    @given(item=strategy)
    @settings(
        max_examples=examples,
        deadline=None,
        database=None,
        phases=["generate"],
        suppress_health_check=list(HealthCheck),
    )
    def run(item: Any) -> None:
        if time.monotonic() - start > seconds:
            tally.skipped += 1
            return
        case, describe = make(item)
        tally.send(case, base, describe)

    run()
    tally.seconds = time.monotonic() - start
    return tally


def extra_passes(
    ops: dict[str, schemathesis.APIOperation],
) -> dict[str, tuple[st.SearchStrategy[Any], Callable[[Any], tuple[schemathesis.Case, str]]]]:
    """Large locality tables and hostile GETs of the OpenAPI document, drawn here rather than
    from the document (its bounds allow such tables but its generator never draws them)."""

    def large(shape: fuzzing.Shape) -> tuple[schemathesis.Case, str]:
        body = fuzzing.large_locality_body(shape)
        case = ops["POST /v1/locality"].Case(body=body, media_type="application/json")
        return case, f"fuzzing.large_locality_body(fuzzing.{shape!r})"

    def hostile(item: tuple[str, dict[str, Any]]) -> tuple[schemathesis.Case, str]:
        accept, query = item
        case = ops["GET /openapi.json"].Case(headers={"Accept": accept}, query=query)
        return case, f"GET /openapi.json, Accept: {accept[:200]!r}, query: {str(query)[:300]}"

    return {LARGE_LABEL: (fuzzing.SHAPES, large), HOSTILE_LABEL: (fuzzing.HOSTILE_GETS, hostile)}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--examples", type=int, default=1000, help="cases per operation")
    parser.add_argument("--max-seconds", type=float, default=1800.0, help="time for the run")
    parser.add_argument("--url", help="base URL of a running server (default: start one)")
    parser.add_argument("--workers", type=int, default=2, help="gunicorn workers when starting")
    parser.add_argument("--seed", type=int, default=0, help="seed of the drawn cases")
    parser.add_argument("--only", help="fuzz only operations whose label contains this text")
    parser.add_argument(
        "--large", type=int, default=100, help=f"cases of {LARGE_LABEL} (up to 50,000 rows)"
    )
    parser.add_argument("--hostile", type=int, default=200, help=f"cases of {HOSTILE_LABEL}")
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
        # Loaded from its URL, a document leaves out its own operation (GET /openapi.json);
        # loaded from its text, every operation is there.
        text = requests.get(base + "/openapi.json", timeout=30).json()
        every = [r.ok() for r in schemathesis.openapi.from_dict(text).get_all_operations()]
        extras = extra_passes({op.label: op for op in every})
        counts = {LARGE_LABEL: args.large, HOSTILE_LABEL: args.hostile}
        if args.only:
            operations = [op for op in operations if args.only in op.label]
            extras = {k: v for k, v in extras.items() if args.only in k}
        share = args.max_seconds / max(1, len(operations) + len(extras))
        print(f"fuzzing {len(operations)} operations at {base}: {args.examples} cases each")
        runs = [
            (op.label, lambda op=op: fuzz_operation(op, base, args.examples, share, args.seed))
            for op in operations
        ]
        runs += [
            (
                label,
                lambda label=label, s=strategy, m=make: fuzz_drawn(
                    s, m, base, counts[label], share, args.seed
                ),
            )
            for label, (strategy, make) in extras.items()
        ]
        for label, fuzz in runs:
            tally = fuzz()
            total.sent += tally.sent
            total.skipped += tally.skipped
            total.statuses.update(tally.statuses)
            total.failures.update({f"{label}: {k}": v for k, v in tally.failures.items()})
            statuses = ", ".join(f"{s}: {n}" for s, n in sorted(tally.statuses.items(), key=str))
            print(
                f"{label:24} {tally.sent:6} sent {tally.skipped:6} skipped "
                f"{len(tally.failures):3} failures {tally.seconds:8.1f} s   {statuses}",
                flush=True,
            )
            if tally.slowest[0] > 0:
                print(f"    slowest answer {tally.slowest[0]:.1f} s: {tally.slowest[1][:300]}")
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
