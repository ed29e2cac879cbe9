"""Fit slots: a worker runs at most ``fit_slots`` fits; the next one is refused at once."""

from __future__ import annotations

import threading
import time

import pytest
from webhelpers import body, problem

from nearwise.core import pipeline
from nearwise.web.app import create_app
from nearwise.web.settings import Settings


@pytest.fixture
def blocked(monkeypatch: pytest.MonkeyPatch):
    """Fits that wait for the test to let them go: ``(started, release)`` events."""
    started, release = threading.Semaphore(0), threading.Event()
    real = pipeline.run

    def slow_run(job):
        started.release()
        assert release.wait(30), "the test never released the fit"
        return real(job)

    monkeypatch.setattr(pipeline, "run", slow_run)
    yield started, release
    release.set()


def _post_in_thread(app, results: list, path: str = "/v1/predict") -> threading.Thread:
    def go() -> None:
        results.append(app.test_client().post(path, json=body()))

    t = threading.Thread(target=go)
    t.start()
    return t


def test_a_request_beyond_the_slots_gets_a_fast_503(blocked) -> None:
    started, release = blocked
    app = create_app(Settings(threads=4, fits_per_worker=2))
    results: list = []
    threads = [_post_in_thread(app, results) for _ in range(2)]
    for _ in threads:
        assert started.acquire(timeout=30)  # both slots are fitting now
    assert app.extensions["nearwise_slots"].in_use == 2

    client = app.test_client()
    t0 = time.perf_counter()
    resp = client.post("/v1/predict", json=body())
    waited = time.perf_counter() - t0
    doc = problem(resp, 503)
    assert doc["code"] == "busy"
    assert resp.headers["Retry-After"] == "2"
    assert "NEARWISE_FITS_PER_WORKER" in doc["detail"]
    # Refused without waiting for a slot: the blocked fits hold theirs for up to 30 s.
    assert waited < 5
    # Health and the catalogue need no slot.
    assert client.get("/healthz").status_code == 200
    assert client.get("/v1/methods").status_code == 200
    for path in ("/v1/compare", "/v1/locality"):
        assert problem(client.post(path, json=body()), 503)["code"] == "busy"
    assert problem(client.get("/v1/cell?x=1,2,3&y=1,2,3&at=2"), 503)["code"] == "busy"

    release.set()
    for t in threads:
        t.join(30)
    assert [r.status_code for r in results] == [200, 200]
    assert app.extensions["nearwise_slots"].in_use == 0
    assert client.post("/v1/predict", json=body()).status_code == 200


def test_a_failed_fit_gives_its_slot_back() -> None:
    app = create_app(Settings(threads=2, fits_per_worker=1))
    client = app.test_client()
    for _ in range(3):
        assert problem(client.post("/v1/predict", json=body(method="nope")), 422)
    assert app.extensions["nearwise_slots"].in_use == 0
    assert client.post("/v1/predict", json=body()).status_code == 200


def test_each_app_has_its_own_slots() -> None:
    # gunicorn builds one app per worker process, so the slots are per worker.
    a, b = create_app(Settings()), create_app(Settings())
    assert a.extensions["nearwise_slots"] is not b.extensions["nearwise_slots"]
    assert a.extensions["nearwise_slots"].slots == Settings().fit_slots == 4
