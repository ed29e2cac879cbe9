"""Health checks stay fast while every worker is busy fitting (real gunicorn, gthread workers).

Each worker runs at most NEARWISE_FITS_PER_WORKER fits; its other threads answer /healthz and
refuse extra fits at once with 503 ``busy``. The fits here are kNN in 12 dimensions (about a
second or more each on one core), sent from more client threads than there are fit slots.
"""

from __future__ import annotations

import json
import threading
import time
from pathlib import Path

import numpy as np
from webhelpers import request, serving

WORKERS, THREADS, SLOTS = 2, 4, 1  # 2 fits in the service; 2 threads per worker stay free
HEALTH_GOAL_S = 0.100  # the liveness goal
PROBE_TIMEOUT_S = 1.0  # Kubernetes' default probe timeout, which the manifests keep


def _slow_body() -> bytes:
    rng = np.random.default_rng(7)
    X = rng.uniform(0, 1, (5000, 12))
    y = X.sum(1) + rng.normal(0, 0.1, 5000)
    cols = [f"x{j}" for j in range(12)] + ["y"]
    rows = np.column_stack([X, y]).round(6).tolist()
    return json.dumps(
        {"method": "knn", "target": "y", "train": {"columns": cols, "rows": rows}}
    ).encode()


def test_healthz_answers_within_100_ms_while_every_slot_is_fitting(tmp_path: Path) -> None:
    env = {"NEARWISE_FITS_PER_WORKER": str(SLOTS)}
    payload = _slow_body()
    with serving(tmp_path / "serve.log", env, workers=WORKERS, threads=THREADS) as port:
        results: list[tuple[int, float]] = []

        def fit() -> None:
            status, _ = request(port, "POST", "/v1/predict", payload)
            results.append((status, time.monotonic()))

        clients = [threading.Thread(target=fit) for _ in range(3 * WORKERS * SLOTS)]
        start = time.monotonic()
        for c in clients:
            c.start()
        time.sleep(0.3)  # let the fits reach both workers
        latencies = []
        while not any(s == 200 for s, _ in results) and time.monotonic() - start < 60:
            t0 = time.perf_counter()
            status, text = request(port, "GET", "/healthz")
            latencies.append(time.perf_counter() - t0)
            assert status == 200, text
            time.sleep(0.05)
        done = [t for s, t in results if s == 200]
        busy_until = min(done) if done else None
        for c in clients:
            c.join(120)

    statuses = sorted(s for s, _ in results)
    # Every slot fitted, the extra requests were refused at once, nothing else happened.
    assert statuses.count(200) >= WORKERS * SLOTS, statuses
    assert set(statuses) <= {200, 503}, statuses
    assert busy_until is not None and busy_until - start > 0.5, "the fits were too quick"
    assert len(latencies) >= 5, latencies
    # On a quiet 2-core machine every probe answers in about 10-25 ms. The test machine may be
    # shared, where the scheduler can delay one probe past the goal: 19 in 20 must meet it, and
    # none may come near the probe timeout.
    slow = [t for t in latencies if t >= HEALTH_GOAL_S]
    assert len(slow) <= len(latencies) // 20, sorted(latencies)[-5:]
    assert max(latencies) < PROBE_TIMEOUT_S / 2, sorted(latencies)[-5:]
