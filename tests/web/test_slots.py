"""Fit slots: a worker runs at most ``fit_slots`` fits; the next one is refused at once."""

from __future__ import annotations

import threading
import time

import pytest
from webhelpers import body, problem

from nearwise.core import pipeline
from nearwise.web.app import create_app
from nearwise.web.settings import Settings
from nearwise.web.slots import FitSlots, make_pool


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


def _occupy(app, started, fits: int) -> tuple[list, list]:
    """Start ``fits`` blocked fits in ``app`` and wait until each holds its slot."""
    results: list = []
    threads = [_post_in_thread(app, results) for _ in range(fits)]
    for _ in threads:
        assert started.acquire(timeout=30)
    return threads, results


def _finish(threads: list, results: list, release) -> None:
    release.set()
    for t in threads:
        t.join(30)
    assert [r.status_code for r in results] == [200] * len(threads)


def test_a_request_beyond_the_slots_gets_a_fast_503(blocked) -> None:
    started, release = blocked
    app = create_app(Settings(workers=1, threads=6, fits_per_worker=2))
    threads, results = _occupy(app, started, 2)  # both slots are fitting now
    assert app.extensions["nearwise_slots"].in_use == 2

    client = app.test_client()
    t0 = time.perf_counter()
    resp = client.post("/v1/predict", json=body())
    waited = time.perf_counter() - t0
    doc = problem(resp, 503)
    assert doc["code"] == "busy"
    assert resp.headers["Retry-After"] == "2"
    assert "NEARWISE_WORKERS x NEARWISE_FITS_PER_WORKER" in doc["detail"]
    # Refused without waiting for a slot: the blocked fits hold theirs for up to 30 s.
    assert waited < 5
    # Health and the catalogue need no slot.
    assert client.get("/healthz").status_code == 200
    assert client.get("/v1/methods").status_code == 200
    compare = {k: v for k, v in body().items() if k != "method"}
    locality = {"train": body()["train"], "features": ["x"]}
    for path, sent in (("/v1/compare", compare), ("/v1/locality", locality)):
        assert problem(client.post(path, json=sent), 503)["code"] == "busy"
    # The body is read, parsed and checked before a slot is sought: a bad request is told
    # what is wrong with it even while every slot is busy.
    bad_json = client.post("/v1/predict", data=b'{"target": ', content_type="application/json")
    assert problem(bad_json, 400)
    assert problem(client.post("/v1/predict", json=body(train={"columns": ["x"]})), 422)
    assert problem(client.post("/v1/compare", json=body()), 422)
    assert problem(client.get("/v1/cell?x=1,2,3&y=1,2&at=2"), 422)
    assert problem(client.get("/v1/cell?x=1,2,3&y=1,2,3&at=2"), 503)["code"] == "busy"

    _finish(threads, results, release)
    assert app.extensions["nearwise_slots"].in_use == 0
    assert client.post("/v1/predict", json=body()).status_code == 200


def test_a_failed_fit_gives_its_slot_back() -> None:
    app = create_app(Settings(workers=1, threads=2, fits_per_worker=1))
    client = app.test_client()
    for _ in range(3):
        bad_json = client.post("/v1/predict", data=b'{"target": ', content_type="application/json")
    assert problem(bad_json, 400)
    assert problem(client.post("/v1/predict", json=body(train={"columns": ["x"]})), 422)
    assert app.extensions["nearwise_slots"].in_use == 0
    assert client.post("/v1/predict", json=body()).status_code == 200


def test_the_worker_cap_leaves_threads_free_even_with_a_larger_pool(blocked) -> None:
    started, release = blocked
    # The service-wide pool has 8 slots, but one worker with 4 threads fits on 2 at most.
    app = create_app(Settings(workers=2, threads=4, fits_per_worker=4))
    threads, results = _occupy(app, started, 2)
    assert problem(app.test_client().post("/v1/predict", json=body()), 503)["code"] == "busy"
    _finish(threads, results, release)


def test_pool_slots_are_shared_between_processes_and_freed_when_a_holder_dies(tmp_path) -> None:
    import subprocess
    import sys

    pool = make_pool(tmp_path / "pool", 2)
    mine = FitSlots(worker_cap=4, total=2, pool=pool)
    # Another process (a worker) holds one slot's lock until it is killed.
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import fcntl, os, sys, time\n"
            f"fd = os.open({str(pool / 'slot-0000')!r}, os.O_RDONLY)\n"
            "fcntl.flock(fd, fcntl.LOCK_EX)\n"
            "print('held', flush=True)\n"
            "time.sleep(60)\n",
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        first = mine.try_acquire()
        assert first is not None
        assert mine.try_acquire() is None  # one slot held elsewhere, one here: none left
        holder.kill()  # a worker killed mid-fit: the kernel drops its lock
        holder.wait(30)
        second = mine.try_acquire()
        assert second is not None
        mine.release(first)
        mine.release(second)
        assert mine.in_use == 0
    finally:
        holder.kill()
        holder.wait(30)
        holder.stdout.close()


def test_each_app_has_its_own_worker_cap() -> None:
    # gunicorn builds one app per worker process; each caps its own threads.
    a, b = create_app(Settings()), create_app(Settings())
    assert a.extensions["nearwise_slots"] is not b.extensions["nearwise_slots"]
    assert a.extensions["nearwise_slots"].worker_cap == Settings().worker_fit_cap == 8
    assert Settings().fit_slots == 8
