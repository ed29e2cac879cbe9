"""A short load and fault run on a real gunicorn server (``run_load.py``, about 10 s of load).

One server with 2 workers and the default threads and fit slots (10 threads per worker, 8 fits
in the service, shared by the workers) goes through the phases of ``run_load.py`` in order:
clean mixed load at concurrency 8, SIGKILL of one worker under load, SIGTERM of the master with
slow fits in flight. Each test checks one phase.

Concurrency 8 against 8 shared fit slots: no request may get 503 ``busy`` in the clean phase,
however unevenly gunicorn's workers accept the connections.

The /healthz bound: ``run_load.py`` itself checks that the slowest poll stays under 100 ms (on a
quiet 2-core machine the slowest of about 100 polls took 26 to 43 ms). The suite may share the
machine with other jobs, so here the median must stay under 100 ms and the slowest poll under
1 s (a Kubernetes liveness probe's timeout); a worker that stalls, or health checks that wait
behind the fits, push both far past that. tests/web/test_liveness.py holds 19 polls in 20 to
the 100 ms goal while every fit slot is busy.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import run_load

HEALTH_P50_MS = 100.0
HEALTH_MAX_MS = 1000.0


@pytest.fixture(scope="module")
def phases(tmp_path_factory: pytest.TempPathFactory) -> dict[str, run_load.Phase]:
    log_dir: Path = tmp_path_factory.mktemp("load")
    run = run_load.run_all(
        log_dir,
        seconds=5.0,
        kill_before_s=1.5,
        kill_after_s=2.0,
        concurrency=8,
        workers=2,
        slow=2,
        health_max_ms=HEALTH_MAX_MS,
        slow_rows=1200,
    )
    return {p.name[:3]: p for p in run}


def failed(phase: run_load.Phase) -> str:
    return phase.markdown()


def health_within_bounds(phase: run_load.Phase) -> None:
    h = phase.load.health
    assert h is not None and len(h.latencies) >= 10, failed(phase)
    assert h.p50_ms < HEALTH_P50_MS, failed(phase)
    assert h.max_ms < HEALTH_MAX_MS, failed(phase)


def test_clean_load_has_no_errors(phases: dict[str, run_load.Phase]) -> None:
    phase = phases["(a)"]
    assert not phase.load.errors(), failed(phase)  # 503 busy included
    assert {s.kind for s in phase.load.samples} == set(run_load.MIXED), failed(phase)
    assert len(phase.load.ok("small")) >= 20, failed(phase)
    assert not phase.load.health.failures, failed(phase)
    health_within_bounds(phase)


def test_killed_worker_loses_only_its_requests_and_is_replaced(
    phases: dict[str, run_load.Phase],
) -> None:
    phase = phases["(b)"]
    assert phase.passed, failed(phase)
    errs = phase.load.errors()
    assert sum(v for k, v in errs.items() if not k[:1].isdigit()) <= 8, failed(phase)
    # The killed worker's in-flight requests lose their connection: before the answer began
    # (RemoteDisconnected, ConnectionResetError, BrokenPipeError) or partway through it
    # (IncompleteRead). Their number is bounded above; no other failure is allowed.
    lost = {"RemoteDisconnected", "ConnectionResetError", "BrokenPipeError", "IncompleteRead"}
    assert set(errs) <= {"503 busy", *lost}, failed(phase)
    health_within_bounds(phase)


def test_sigterm_lets_fits_in_flight_finish(phases: dict[str, run_load.Phase]) -> None:
    phase = phases["(c)"]
    assert phase.passed, failed(phase)
    assert [c.name for c in phase.checks] == [
        "every slow request was still in flight at SIGTERM",
        "each completed with 200",
        "the master exited with status 0",
        "the port is closed afterwards",
    ]
