"""The per-worker memory guard (``NEARWISE_WORKER_MEMORY_MB``): an allocation past it is a
MemoryError, answered as 503 ``out_of_memory``, and the worker goes on serving."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
from webhelpers import body, problem, request, serving

from nearwise.web.app import create_app
from nearwise.web.settings import Settings

MIB = 2**20


def test_a_memory_error_in_a_request_is_503_out_of_memory() -> None:
    app = create_app(Settings())

    @app.get("/hungry")
    def hungry() -> None:
        raise MemoryError

    resp = app.test_client().get("/hungry")
    doc = problem(resp, 503)
    assert doc["code"] == "out_of_memory"
    assert resp.headers["Retry-After"] == "10"


GUARD = """
import logging, sys
import numpy as np
from nearwise.web.worker_support import limit_address_space
headroom, size = int(sys.argv[1]), int(sys.argv[2])
limit = limit_address_space(headroom, logging.getLogger("test"))
assert (limit is None) == (headroom == 0)
try:
    a = np.empty(size * 2**20, dtype=np.uint8)
    print("allocated")
except MemoryError:
    print("MemoryError")
"""


def guarded(headroom_mb: int, alloc_mb: int) -> str:
    out = subprocess.run(
        [sys.executable, "-c", GUARD, str(headroom_mb), str(alloc_mb)],
        capture_output=True,
        text=True,
        check=True,
        timeout=60,
    )
    return out.stdout.strip()


def test_the_limit_is_the_size_at_start_plus_the_headroom() -> None:
    assert guarded(256, 200) == "allocated"  # just inside
    assert guarded(256, 300) == "MemoryError"  # just outside
    assert guarded(0, 4096) == "allocated"  # 0: no guard


def _big_body(rows: int) -> bytes:
    rng = np.random.default_rng(3)
    X = rng.uniform(0.0, 1.0, (rows, 3))
    doc = {
        "method": "knn",
        "target": "y",
        "train": {
            "columns": ["a", "b", "c", "y"],
            "rows": np.column_stack([X, X.sum(1)]).round(4).tolist(),
        },
        "query": {"columns": ["a", "b", "c"], "rows": [[0.5, 0.5, 0.5]]},
    }
    return json.dumps(doc).encode()


def test_real_gunicorn_answers_503_and_keeps_serving(tmp_path: Path) -> None:
    # 64 MiB above the loaded worker: a small predict fits; parsing an 8 MB table does not
    # (its rows as Python objects take over 100 MiB).
    big = _big_body(250_000)
    log = tmp_path / "serve.log"
    with serving(log, {"NEARWISE_WORKER_MEMORY_MB": "64"}, workers=1, threads=4) as port:
        small = json.dumps(body()).encode()
        assert request(port, "POST", "/v1/predict", small)[0] == 200
        for _ in range(2):
            status, data = request(port, "POST", "/v1/predict", big)
            assert status == 503, data[:300]
            assert json.loads(data)["code"] == "out_of_memory"
        assert request(port, "GET", "/healthz") == (200, b'{"status":"ok"}')
        assert request(port, "POST", "/v1/predict", small)[0] == 200
    text = log.read_text(encoding="utf-8")
    assert text.count("Booting worker") == 1, "the worker must not have been replaced"
    assert "NEARWISE_WORKER_MEMORY_MB=64" in text


FRAGMENTS = """
import logging, sys
import numpy as np
from nearwise.web.worker_support import tune_malloc

def rss():
    with open("/proc/self/status") as f:
        return next(int(v.split()[1]) * 1024 for v in f if v.startswith("VmRSS:"))

if sys.argv[1] == "tuned":
    assert tune_malloc(logging.getLogger("test"))
a = np.ones(4 * 2**20 // 8)
del a  # a 4 MiB block freed: glibc's default raises its mmap threshold past 1 MiB
base = rss()
kept, arrays = [], []
for i in range(100):
    arrays.append(np.ones(2**20 // 8))  # a request's 1 MiB arrays ...
    kept.append(b"x" * 65536 + bytes([i]))  # ... and 64 KiB objects that outlive them
del arrays
print((rss() - base) / 2**20)
"""


def retained_mib(mode: str) -> float:
    out = subprocess.run(
        [sys.executable, "-c", FRAGMENTS, mode], capture_output=True, text=True, timeout=60
    )
    assert out.returncode == 0, out.stderr
    return float(out.stdout)


def test_freed_arrays_go_back_to_the_system_in_a_tuned_worker() -> None:
    """The worker's malloc setting (glibc mallopt; man 3 mallopt): 100 MiB of arrays freed
    between long-lived 64 KiB objects. Untuned, glibc keeps them (the control, about 106 MiB
    here); tuned, only the 6.25 MiB of kept objects stay."""
    assert retained_mib("default") > 50  # the control: this pattern does fragment
    assert retained_mib("tuned") < 20
