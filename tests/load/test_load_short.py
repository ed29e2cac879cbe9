"""A short load and fault run on a real gunicorn server (``run_load.py``, about 10 s of load).

One server with 2 workers and the default threads (so 4 fit slots per worker) goes through the
phases of ``run_load.py`` in order: clean mixed load at concurrency 8, SIGKILL of one worker
under load, SIGTERM of the master with slow fits in flight. Each test checks one phase.

503 ``busy`` in the clean phase: 8 kept-alive client connections and 2 x 4 fit slots are enough
only when each worker holds 4 of the connections. gunicorn does not spread connections evenly:
whichever worker wakes first accepts, often several at once, and a kept-alive connection stays
with its worker. A worker holding 5 or more connections answers the extra fits 503 ``busy``
until those clients reconnect. ``test_clean_load_has_no_busy`` asserts none occur and fails
while this is so; the other checks of the clean phase hold either way.

The /healthz bound: ``run_load.py`` checks that the slowest poll stays under 100 ms. On the
shared 2-core machine used here (load average 5 to 6 from other jobs), polls took p50 20 to 30 ms
and up to 0.34 s in the clean phase and 1.05 s while one worker carried the load alone: a poll
is answered by a worker thread that shares its process's GIL with up to 4 fitting threads, and
the client, the poller, both workers and the other jobs share 2 cores. A 100 ms bound on the
maximum fails on such a machine for reasons outside the service. The test bounds the median at
100 ms and the maximum at 3 s (worst measured at load average 7: 2.08 s, while the replacement
worker imported the app); a worker that stalls, or health checks that wait for the fits in
front of them, push the median up by far more than that.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import run_load

HEALTH_P50_MS = 100.0
HEALTH_MAX_MS = 3000.0


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


def test_clean_load_has_no_errors_but_busy(phases: dict[str, run_load.Phase]) -> None:
    phase = phases["(a)"]
    errs = phase.load.errors()
    assert set(errs) <= {"503 busy"}, failed(phase)
    assert errs["503 busy"] < 8, failed(phase)  # one per client at most, then it reconnects
    assert {s.kind for s in phase.load.samples} == set(run_load.MIXED), failed(phase)
    assert len(phase.load.ok("small")) >= 20, failed(phase)
    assert not phase.load.health.failures, failed(phase)
    health_within_bounds(phase)


def test_clean_load_has_no_busy(phases: dict[str, run_load.Phase]) -> None:
    phase = phases["(a)"]
    assert not phase.load.errors(), failed(phase)  # 503 busy included


def test_killed_worker_loses_only_its_requests_and_is_replaced(
    phases: dict[str, run_load.Phase],
) -> None:
    phase = phases["(b)"]
    assert phase.passed, failed(phase)
    errs = phase.load.errors()
    assert sum(v for k, v in errs.items() if not k[:1].isdigit()) <= 8, failed(phase)
    assert set(errs) <= {"503 busy", "RemoteDisconnected", "ConnectionResetError"}, failed(phase)
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
