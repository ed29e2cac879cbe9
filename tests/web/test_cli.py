"""The ``nearwise`` command: ``openapi`` writes the document, ``serve`` runs gunicorn."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest
from webhelpers import request, serving

from nearwise import cli
from nearwise.web.app import create_app
from nearwise.web.openapi import render
from nearwise.web.settings import Settings


@pytest.fixture(autouse=True)
def no_nearwise_variables(monkeypatch: pytest.MonkeyPatch) -> None:
    """Each test sees the embedded defaults, whatever the machine's environment holds."""
    for name in [k for k in os.environ if k.startswith("NEARWISE_")]:
        monkeypatch.delenv(name)


def test_openapi_writes_the_document(tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    target = tmp_path / "doc.json"
    assert cli.main(["openapi", str(target)]) == 0
    assert target.read_text(encoding="utf-8") == render(create_app(Settings()))
    assert "wrote" in capsys.readouterr().out


def test_openapi_to_stdout(capsys: pytest.CaptureFixture) -> None:
    assert cli.main(["openapi", "-"]) == 0
    assert json.loads(capsys.readouterr().out)["openapi"] == "3.1.0"


def test_bad_settings_stop_the_command(monkeypatch, capsys) -> None:
    monkeypatch.setenv("NEARWISE_WORKERS", "none")
    assert cli.main(["serve"]) == 2
    assert "NEARWISE_WORKERS" in capsys.readouterr().err


def test_bad_flag_is_named(capsys) -> None:
    assert cli.main(["serve", "--threads", "0"]) == 2
    assert "--threads" in capsys.readouterr().err


def test_serve_sets_one_blas_thread_and_gunicorn_defaults(monkeypatch) -> None:
    seen: dict[str, object] = {}

    def fake_run(self: cli.Server) -> None:
        seen.update({k: os.environ.get(k) for k in cli.BLAS_THREADS})
        seen.update(
            bind=self.cfg.bind,
            workers=self.cfg.workers,
            threads=self.cfg.threads,
            worker_class=self.cfg.worker_class_str,
        )

    for var in cli.BLAS_THREADS:
        monkeypatch.setenv(var, "8")
    monkeypatch.setattr(cli.Server, "run", fake_run)
    assert cli.main(["serve", "--workers", "3"]) == 0
    assert seen == {
        "OMP_NUM_THREADS": "1",
        "OPENBLAS_NUM_THREADS": "1",
        "MKL_NUM_THREADS": "1",
        "bind": ["127.0.0.1:8080"],
        "workers": 3,
        "threads": 10,
        "worker_class": "nearwise.web.worker.NearwiseWorker",
    }


def test_serve_help_gives_the_settings_defaults(capsys) -> None:
    with pytest.raises(SystemExit):
        cli.main(["serve", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    d = Settings()
    assert f"NEARWISE_BIND or {d.bind})" in text
    assert f"NEARWISE_WORKERS or {d.workers})" in text
    assert f"NEARWISE_THREADS or {d.threads})" in text


@pytest.mark.parametrize(
    ("name", "raw", "ok"),
    [
        ("NEARWISE_HEADER_TIMEOUT_S", "2.5", True),
        ("NEARWISE_HEADER_TIMEOUT_S", "0", False),
        ("NEARWISE_BODY_TIMEOUT_S", "60", True),
        ("NEARWISE_BODY_TIMEOUT_S", "-1", False),
        ("NEARWISE_WORKER_MEMORY_MB", "0", True),
        ("NEARWISE_WORKER_MEMORY_MB", "4096", True),
        ("NEARWISE_WORKER_MEMORY_MB", "-1", False),
        ("NEARWISE_WORKER_MEMORY_MB", "2.5", False),
    ],
)
def test_the_read_deadlines_and_memory_guard_are_settings(monkeypatch, capsys, name, raw, ok):
    monkeypatch.setenv(name, raw)
    assert cli.main(["serve", "--print-config"]) == (0 if ok else 2)
    out = capsys.readouterr()
    if ok:
        shown = dict(line.split("=", 1) for line in out.out.splitlines())
        assert float(shown[name]) == float(raw)
    else:
        assert name in out.err


@pytest.fixture
def served(tmp_path: Path):
    """``python -m nearwise serve`` on a free 127.0.0.1 port, stopped after the test."""
    with serving(tmp_path / "serve.log", {"NEARWISE_MAX_BODY_BYTES": "2000"}) as port:
        yield port


def test_serve_answers_and_refuses_oversized_chunked_bodies(served: int) -> None:
    status, data = request(served, "GET", "/healthz")
    assert (status, json.loads(data)) == (200, {"status": "ok"})
    big = json.dumps(
        {
            "method": "knn",
            "target": "y",
            "train": {"columns": ["x", "y"], "rows": [[i, 2.0 * i] for i in range(300)]},
        }
    ).encode()
    assert len(big) > 2000
    status, data = request(served, "POST", "/v1/predict", big, chunked=True)
    assert status == 413 and json.loads(data)["code"] == "body_too_large"
    small = json.dumps(
        {
            "method": "knn",
            "target": "y",
            "train": {"columns": ["x", "y"], "rows": [[i, 2.0 * i] for i in range(30)]},
        }
    ).encode()
    status, data = request(served, "POST", "/v1/predict", small, chunked=True)
    assert status == 200, data


def test_print_config_shows_every_setting_with_keys_masked(monkeypatch, capsys) -> None:
    monkeypatch.setenv("NEARWISE_API_KEYS", "s3cret-one,s3cret-two")
    monkeypatch.setenv("NEARWISE_MAX_ROWS", "1234")
    assert cli.main(["serve", "--print-config", "--workers", "5"]) == 0
    out = capsys.readouterr().out
    shown = dict(line.split("=", 1) for line in out.splitlines())
    assert "s3cret" not in out
    assert shown["NEARWISE_API_KEYS"] == "****,****"
    assert shown["NEARWISE_MAX_ROWS"] == "1234"
    assert shown["NEARWISE_WORKERS"] == "5"
    assert set(shown) == {"NEARWISE_" + f.upper() for f in Settings.__dataclass_fields__}


def test_one_thread_per_worker_is_refused(monkeypatch, capsys) -> None:
    monkeypatch.setenv("NEARWISE_THREADS", "1")  # no thread would stay free for health checks
    assert cli.main(["serve", "--print-config"]) == 2
    assert "NEARWISE_THREADS" in capsys.readouterr().err


def test_the_command_reads_its_settings_before_numpy_is_loaded() -> None:
    # OpenBLAS sizes its thread pool when it is first loaded: the workers fork from the master,
    # so `nearwise serve` must set the one-thread variables before anything imports numpy.
    import subprocess
    import sys

    # The master also loads the worker class; prometheus_client must wait for the metrics
    # directory variable that the master sets on starting.
    code = (
        "import sys, nearwise.cli, nearwise.web.worker\n"
        "names = ('numpy', 'scipy', 'sklearn', 'flask', 'prometheus_client')\n"
        "print(sorted(m for m in names if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
