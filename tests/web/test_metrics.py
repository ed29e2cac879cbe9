"""GET /metrics: counters and histograms move with requests, in one process (Flask test client)
and summed over two gunicorn workers sharing a metrics directory that is emptied at start."""

from __future__ import annotations

import http.client
import os
import re
import signal
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from types import SimpleNamespace

import pytest
from prometheus_client.mmap_dict import MmapedDict
from prometheus_client.parser import text_string_to_metric_families
from webhelpers import body, problem, serving

from nearwise.cli import Server, prepare_metrics_dir
from nearwise.web.app import create_app
from nearwise.web.settings import Settings


def samples(text: str) -> dict[tuple[str, frozenset[tuple[str, str]]], float]:
    out = {}
    for family in text_string_to_metric_families(text):
        for s in family.samples:
            out[(s.name, frozenset(s.labels.items()))] = s.value
    return out


def value(snapshot: dict, name: str, **labels: str) -> float:
    return snapshot.get((name, frozenset(labels.items())), 0.0)


def answered(resp) -> int:
    """Read the answer in full, as a server does; the request is counted once it has been."""
    resp.get_data()
    resp.close()
    return resp.status_code


def scrape(client) -> dict:
    resp = client.get("/metrics")
    assert resp.status_code == 200
    assert resp.headers["Content-Type"] == "text/plain; version=0.0.4; charset=utf-8"
    return samples(resp.get_data(as_text=True))


def test_request_counter_and_latency_move_after_a_request(client) -> None:
    before = scrape(client)
    assert answered(client.get("/v1/methods")) == 200
    after = scrape(client)
    labels = {"route": "/v1/methods", "method": "GET", "status": "200"}
    assert value(after, "nearwise_http_requests_total", **labels) == (
        value(before, "nearwise_http_requests_total", **labels) + 1
    )
    count = "nearwise_http_request_duration_seconds_count"
    assert value(after, count, route="/v1/methods") == value(before, count, route="/v1/methods") + 1


def test_routes_are_url_rules_never_raw_paths(client) -> None:
    before = scrape(client)
    assert answered(client.get("/no/such/secret-path-4711")) == 404
    assert answered(client.get("/docs/assets/docs-init.js")) == 200
    text = client.get("/metrics").get_data(as_text=True)
    assert "secret-path-4711" not in text and "docs-init" not in text
    after = samples(text)
    name = "nearwise_http_requests_total"
    unmatched = {"route": "unmatched", "method": "GET", "status": "404"}
    assert value(after, name, **unmatched) == value(before, name, **unmatched) + 1
    asset = {"route": "/docs/assets/<path:filename>", "method": "GET", "status": "200"}
    assert value(after, name, **asset) == value(before, name, **asset) + 1


def test_fit_time_and_training_rows_by_method_and_route(client) -> None:
    before = scrape(client)
    assert answered(client.post("/v1/predict", json=body("knn"))) == 200
    assert (
        client.get("/v1/cell?x=1,2,3,4,5,6,7,8&y=1,2,3,4,5,6,7,9&at=2&method=linear").status_code
        == 200
    )
    after = scrape(client)
    for method in ("knn", "linear"):
        name = "nearwise_fit_duration_seconds_count"
        assert value(after, name, method=method) == value(before, name, method=method) + 1
    total = "nearwise_fit_duration_seconds_sum"
    assert value(after, total, method="knn") > value(before, total, method="knn")
    rows = "nearwise_training_rows_sum"
    assert value(after, rows, route="/v1/predict") == value(before, rows, route="/v1/predict") + 40
    assert value(after, rows, route="/v1/cell") == value(before, rows, route="/v1/cell") + 8
    bucket = "nearwise_training_rows_bucket"
    le30 = {"route": "/v1/cell", "le": "30.0"}
    assert value(after, bucket, **le30) == value(before, bucket, **le30) + 1


def test_a_refused_fit_records_rows_but_no_fit_time(client) -> None:
    before = scrape(client)
    problem(client.post("/v1/predict", json=body("linear", params={"degree": 99})), 422)
    after = scrape(client)
    name = "nearwise_fit_duration_seconds_count"
    assert value(after, name, method="linear") == value(before, name, method="linear")


def test_rejections_by_problem_code_and_status() -> None:
    client = create_app(Settings(api_keys=("k",), max_body_bytes=300)).test_client()
    key = {"Authorization": "Bearer k"}
    small = {"method": "knn", "target": "nope", "train": {"columns": ["x", "y"], "rows": []}}
    before = scrape(client)
    # each answer is read in full, as a server does, before the next scrape
    answers = [
        (client.get("/v1/methods"), 401),
        (client.get("/v1/methods", headers={"Authorization": "Bearer x"}), 401),
        (client.post("/v1/predict", json=body(), headers=key), 413),
        (client.post("/v1/predict", data=b"x", content_type="image/png", headers=key), 415),
        (client.post("/v1/predict", json=small, headers=key), 422),
    ]
    codes = [(problem(resp, status)["code"], str(status)) for resp, status in answers]
    assert codes[:4] == [
        ("unauthorized", "401"),
        ("invalid_api_key", "401"),
        ("body_too_large", "413"),
        ("unsupported_media_type", "415"),
    ]
    after = scrape(client)
    for code, status in set(codes):
        name = "nearwise_rejections_total"
        assert value(after, name, code=code, status=status) == (
            value(before, name, code=code, status=status) + codes.count((code, status))
        ), (code, status)
    ok = {"route": "/v1/methods", "method": "GET", "status": "200"}
    assert value(after, "nearwise_http_requests_total", **ok) == value(
        before, "nearwise_http_requests_total", **ok
    )


def test_metrics_need_a_key_when_not_open() -> None:
    client = create_app(Settings(api_keys=("k",), open_endpoints=("/healthz",))).test_client()
    problem(client.get("/metrics"), 401)
    assert client.get("/metrics", headers={"Authorization": "Bearer k"}).status_code == 200


def test_prepare_metrics_dir_removes_value_files_only(tmp_path: Path) -> None:
    (tmp_path / "counter_123.db").write_bytes(b"old")
    (tmp_path / "histogram_456.db").write_bytes(b"old")
    (tmp_path / "notes.txt").write_text("kept")
    path, created = prepare_metrics_dir(str(tmp_path))
    assert (path, created) == (str(tmp_path), False)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]
    fresh, created = prepare_metrics_dir("")
    try:
        assert created and Path(fresh).is_dir() and not any(Path(fresh).iterdir())
        import tempfile

        assert Path(fresh).parent == Path(tempfile.gettempdir())
    finally:
        Path(fresh).rmdir()


def test_child_exit_marks_the_worker_dead(tmp_path: Path) -> None:
    server = Server(Settings(metrics_dir=str(tmp_path)))
    server.metrics_dir = str(tmp_path)
    live = tmp_path / "gauge_livesum_4242.db"
    live.write_bytes(b"")
    kept = tmp_path / "counter_4242.db"
    kept.write_bytes(b"")
    server.child_exit(None, SimpleNamespace(pid=4242))
    assert not live.exists() and kept.exists()


def test_server_registers_the_hooks() -> None:
    server = Server(Settings())
    assert server.cfg.on_starting.__func__ is Server.on_starting
    assert server.cfg.child_exit.__func__ is Server.child_exit
    assert server.cfg.on_exit.__func__ is Server.on_exit


# Under gunicorn, two workers.


def get(port: int, path: str) -> tuple[int, str]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=10)
    try:
        conn.request("GET", path)
        resp = conn.getresponse()
        return resp.status, resp.read().decode()
    finally:
        conn.close()


def per_worker(directory: Path, route: str) -> dict[str, float]:
    """The request count for ``route`` in each worker's counter file."""
    counts: dict[str, float] = {}
    for f in directory.glob("counter_*.db"):
        pid = f.stem.split("_")[1]
        for key, val, *_ in MmapedDict.read_all_values_from_file(str(f)):
            if '"nearwise_http_requests_total"' in key and f'"{route}"' in key:
                counts[pid] = counts.get(pid, 0.0) + val
    return counts


def settled(read, expected, seconds: float = 10.0):
    """``read()`` once it equals ``expected``: a request is counted when its answer has been
    sent, a moment after the client has it. Returns the last value read."""
    deadline = time.monotonic() + seconds
    while (got := read()) != expected and time.monotonic() < deadline:
        time.sleep(0.05)
    return got


def test_counts_of_two_workers_add_up_and_the_directory_is_wiped_at_start(tmp_path: Path) -> None:
    directory = tmp_path / "metrics"
    env = {"NEARWISE_METRICS_DIR": str(directory)}
    with serving(tmp_path / "first.log", env) as port:
        for _ in range(5):
            assert get(port, "/readyz")[0] == 200
        assert settled(lambda: sum(per_worker(directory, "/readyz").values()), 5) == 5
    (directory / "keep.txt").write_text("not a metrics file")

    with serving(tmp_path / "second.log", env, workers=2, threads=2) as port:
        status, text = get(port, "/metrics")
        assert status == 200
        assert value(samples(text), "nearwise_http_requests_total", route="/readyz",
                     method="GET", status="200") == 0  # fmt: skip
        assert (directory / "keep.txt").exists()

        # Concurrent requests; when one worker keeps taking them all, it is stopped and the
        # master starts another: its counts must stay in the sum.
        sent = 0
        deadline = time.monotonic() + 60
        with ThreadPoolExecutor(max_workers=8) as pool:
            while len(per_worker(directory, "/readyz")) < 2:
                assert time.monotonic() < deadline, "requests never reached a second worker"
                statuses = list(pool.map(lambda _: get(port, "/readyz")[0], range(40)))
                assert statuses == [200] * 40
                sent += 40
                if sent % 400 == 0:
                    busy = per_worker(directory, "/readyz")
                    if len(busy) == 1:
                        os.kill(int(next(iter(busy))), signal.SIGTERM)
                        time.sleep(1)
        assert settled(lambda: sum(per_worker(directory, "/readyz").values()), sent) == sent
        workers = per_worker(directory, "/readyz")
        assert len(workers) == 2 and all(n > 0 for n in workers.values()), workers
        total = value(
            samples(get(port, "/metrics")[1]),
            "nearwise_http_requests_total",
            route="/readyz",
            method="GET",
            status="200",
        )
        assert total == sent == sum(workers.values())


def test_default_directory_is_created_under_the_temp_dir_and_removed(tmp_path: Path) -> None:
    log = tmp_path / "serve.log"
    with serving(log) as port:
        assert get(port, "/readyz")[0] == 200
        match = re.search(r"metrics of all workers are kept in ([^\"]+)", log.read_text())
        assert match is not None, log.read_text()
        directory = Path(match.group(1))
        import tempfile

        assert directory.parent == Path(tempfile.gettempdir())
        readyz = {"route": "/readyz", "method": "GET", "status": "200"}

        def count() -> float:
            return value(
                samples(get(port, "/metrics")[1]), "nearwise_http_requests_total", **readyz
            )

        assert settled(count, 1.0) == 1.0
        assert list(directory.glob("counter_*.db"))
    assert not directory.exists()


@pytest.fixture(autouse=True)
def _no_multiprocess_env(monkeypatch) -> None:
    """The in-process tests read this process's registry."""
    monkeypatch.delenv("PROMETHEUS_MULTIPROC_DIR", raising=False)
