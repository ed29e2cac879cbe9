"""The samples a newcomer runs first: regenerated identically, and every curl script answered
by a real server on 127.0.0.1."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
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
        "predict_knn.json",
        "predict_linear.json",
        "compare_turbine.json",
        "warehouse_train.csv",
        "warehouse_query.csv",
        "compare_warehouse.json",
        "predict_warehouse.json",
    ):
        assert (copy / name).read_bytes() == (SAMPLES / name).read_bytes(), name


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
