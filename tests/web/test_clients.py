"""The client snippets in samples/clients/ and the samples they post, run against a live service.

A real ``nearwise serve`` is started on a free 127.0.0.1 port (``serving`` in webhelpers).
The Python client runs with this interpreter and the Node client with ``node`` (skipped when
``node`` is not installed), each once with a good request (predictions printed) and once with a
bad one (the problem's detail and a JSON Pointer printed). Every subprocess is bounded by a
timeout.

Not run here: ``samples/clients/r_client.R`` (needs R and httr2),
``samples/clients/spreadsheet_function.gs`` (runs only inside a spreadsheet's script host) and
``samples/clients/spreadsheet_query.md`` (a recipe).

Also checked: the warehouse sample regenerates byte for byte, the new curl scripts get answers,
and on the warehouse data compare recommends additive or linear while knn is not local.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from webhelpers import serving

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "samples"
CLIENTS = SAMPLES / "clients"
NODE = shutil.which("node")
TIMEOUT = 120

# A text cell in the target column: a 422 whose error points at /train/rows/1/1.
BAD_BODY = {
    "method": "knn",
    "target": "y",
    "train": {"columns": ["x", "y"], "rows": [[float(i), float(i)] for i in range(20)]},
}
BAD_BODY["train"]["rows"][1][1] = "n/a"


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    with serving(tmp_path_factory.mktemp("serve") / "serve.log") as port:
        yield f"http://127.0.0.1:{port}"


@pytest.fixture(scope="module")
def bad_body(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("bodies") / "bad.json"
    path.write_text(json.dumps(BAD_BODY), encoding="utf-8")
    return path


def run(cmd: list[str], server: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        cmd,
        capture_output=True,
        text=True,
        timeout=TIMEOUT,
        cwd=ROOT,
        env={**os.environ, "NEARWISE_URL": server},
    )


def client_command(name: str) -> list[str]:
    if name == "python":
        return [sys.executable, str(CLIENTS / "python_client.py")]
    if NODE is None:
        pytest.skip("node is not installed: the Node client (Node 18+) cannot run here")
    return [NODE, str(CLIENTS / "node_client.mjs")]


@pytest.mark.parametrize("name", ["python", "node"])
def test_client_prints_predictions(server: str, name: str) -> None:
    out = run(client_command(name), server)  # the default body: samples/predict_spline.json
    assert out.returncode == 0, out.stderr
    lines = out.stdout.splitlines()
    assert lines[0].startswith("method spline")
    assert lines[1].split("\t") == ["row", "value", "lower", "upper", "flags"]
    rows = [line.split("\t") for line in lines[2:10]]
    assert [r[0] for r in rows] == [str(i) for i in range(8)]
    assert all(float(r[2]) <= float(r[1]) <= float(r[3]) for r in rows)
    assert rows[7][4] == "outside_range far_from_data"  # the 27 m/s query
    assert any(line.startswith("warning outside_range:") for line in lines)


@pytest.mark.parametrize("name", ["python", "node"])
def test_client_prints_the_problem(server: str, name: str, bad_body: Path) -> None:
    out = run([*client_command(name), str(bad_body)], server)
    assert out.returncode == 1, out.stderr
    lines = out.stdout.splitlines()
    assert lines[0] == "error 422: Invalid table cell"
    assert "'n/a'" in lines[1]  # the detail names the bad cell
    assert lines[2].startswith("  /train/rows/1/1: ")


@pytest.mark.parametrize("name", ["python", "node"])
def test_client_reads_compare(server: str, name: str) -> None:
    out = run([*client_command(name), str(SAMPLES / "compare_warehouse.json"), "compare"], server)
    assert out.returncode == 0, out.stderr
    assert out.stdout.startswith("recommended: additive")
    assert "method additive" in out.stdout


def test_make_warehouse_regenerates_the_committed_files(tmp_path: Path) -> None:
    copy = tmp_path / "samples"
    shutil.copytree(SAMPLES, copy)
    subprocess.run(
        [sys.executable, str(copy / "make_warehouse.py")],
        check=True,
        capture_output=True,
        timeout=TIMEOUT,
    )
    for name in (
        "warehouse_train.csv",
        "warehouse_query.csv",
        "compare_warehouse.json",
        "predict_warehouse.json",
    ):
        assert (copy / name).read_bytes() == (SAMPLES / name).read_bytes(), name


def curl(server: str, script: str, *args: str) -> str:
    out = run(["bash", str(SAMPLES / script), *args], server)
    assert out.returncode == 0, out.stderr
    return out.stdout


needs_curl = pytest.mark.skipif(shutil.which("curl") is None, reason="curl is not installed")


@needs_curl
def test_curl_locality_health_and_methods(server: str) -> None:
    loc = json.loads(curl(server, "curl_locality.sh"))
    assert loc["n"] == 400
    assert "outside_range" in loc["query"][7]["flags"]
    assert [json.loads(line)["status"] for line in curl(server, "curl_health.sh").split()] == [
        "ok",
        "ready",
    ]
    assert "additive" in json.dumps(json.loads(curl(server, "curl_methods.sh"))["methods"])


@needs_curl
def test_warehouse_compare_prefers_additive_or_linear(server: str) -> None:
    doc = json.loads(curl(server, "curl_warehouse.sh"))
    ranking = [m["method"] for m in doc["ranking"]]
    assert doc["recommended"] in {"additive", "linear"}
    assert ranking[-1] == "knn", ranking
    # the heat wave: hotter than any day; among the days at its dock (A) it is 2.75 typical
    # spacings from its nearest day, under the threshold of 3 (flags are computed within the
    # levels of the categorical `dock`)
    assert doc["prediction"]["predictions"][7]["flags"] == ["outside_range"]


def test_warehouse_knn_is_not_local(server: str, tmp_path: Path) -> None:
    body = json.loads((SAMPLES / "predict_warehouse.json").read_text(encoding="utf-8"))
    body["method"] = "knn"
    path = tmp_path / "knn.json"
    path.write_text(json.dumps(body), encoding="utf-8")
    out = run([sys.executable, str(CLIENTS / "python_client.py"), str(path)], server)
    assert out.returncode == 0, out.stderr
    assert "warning not_local:" in out.stdout
