"""The samples a newcomer runs first: regenerated identically, the time-ordered turbine body
tuned along its `time` column (in-process), and every curl script answered by a real server on
127.0.0.1."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from flask.testing import FlaskClient
from webhelpers import serving

SAMPLES = Path(__file__).resolve().parents[2] / "samples"


def test_make_samples_regenerates_the_committed_files(tmp_path: Path) -> None:
    copy = tmp_path / "samples"
    shutil.copytree(SAMPLES, copy)
    for script in ("make_samples.py", "make_warehouse.py"):
        subprocess.run(
            [sys.executable, str(copy / script)], check=True, capture_output=True, timeout=60
        )
    for name in (
        "turbine_train.csv",
        "turbine_query.csv",
        "predict_spline.json",
        "predict_turbine_window.json",
        "predict_knn.json",
        "predict_linear.json",
        "compare_turbine.json",
        "warehouse_train.csv",
        "warehouse_query.csv",
        "compare_warehouse.json",
        "predict_warehouse.json",
    ):
        assert (copy / name).read_bytes() == (SAMPLES / name).read_bytes(), name


def sample(name: str) -> dict:
    """A committed sample request body, parsed."""
    return json.loads((SAMPLES / name).read_text(encoding="utf-8"))


def warning_codes(doc: dict) -> list[str]:
    return [w["code"] for w in doc["warnings"]]


def test_window_sample_is_the_spline_sample_tuned_along_time() -> None:
    window, spline = sample("predict_turbine_window.json"), sample("predict_spline.json")
    assert window["tuning"] == {"order_by": "time", "scheme": "window"}
    assert {k: v for k, v in window.items() if k != "tuning"} == {
        k: v for k, v in spline.items() if k != "tuning"
    }


def test_window_sample_tunes_along_time_without_the_dependence_warning(
    client: FlaskClient,
) -> None:
    resp = client.post("/v1/predict", json=sample("predict_turbine_window.json"))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    doc = resp.get_json()
    tuning = doc["tuning"]
    assert tuning["scheme"] == "window" and tuning["order_by"] == "time", tuning
    gap = tuning["gap"]
    assert isinstance(gap, int) and not isinstance(gap, bool) and gap >= 0, gap
    assert tuning["gap_source"] == "data"
    assert doc["interval"]["construction"] == "jackknife", doc["interval"]
    assert "serial_dependence" not in warning_codes(doc)


def test_spline_sample_on_the_same_rows_warns_of_serial_dependence(client: FlaskClient) -> None:
    resp = client.post("/v1/predict", json=sample("predict_spline.json"))
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert "serial_dependence" in warning_codes(resp.get_json())


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    with serving(tmp_path_factory.mktemp("serve") / "serve.log") as port:
        yield f"http://127.0.0.1:{port}"


@pytest.mark.skipif(shutil.which("curl") is None, reason="curl is not installed")
@pytest.mark.parametrize(
    ("script", "args", "kind"),
    [
        ("curl_predict.sh", [], "json"),
        ("curl_predict.sh", ["knn"], "json"),
        ("curl_predict.sh", ["linear"], "json"),
        ("curl_predict.sh", ["window"], "json"),
        ("curl_compare.sh", [], "json"),
        ("curl_csv.sh", [], "csv"),
        ("curl_cell.sh", [], "text"),
    ],
)
def test_sample_scripts_get_answers(server: str, script: str, args: list[str], kind: str) -> None:
    out = subprocess.run(
        ["bash", str(SAMPLES / script), *args],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "NEARWISE_URL": server},
    )
    assert out.returncode == 0, out.stderr
    if kind == "json":
        doc = json.loads(out.stdout)
        assert "predictions" in doc or "recommended" in doc
    elif kind == "text":
        lines = out.stdout.splitlines()
        assert lines[0] == "# value" and len([float(v) for v in lines[1:4]]) == 3
    else:
        assert out.stdout.splitlines()[0].endswith("prediction,std_error,lower,upper,flags")
