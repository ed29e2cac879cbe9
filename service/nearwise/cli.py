"""The ``nearwise`` command: ``serve`` runs gunicorn, ``openapi`` writes the OpenAPI document.

Nothing here imports numpy: the BLAS thread variables are set before the workers import it.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from gunicorn.app.base import BaseApplication

from nearwise.web.settings import Settings, SettingsError

DEFAULT_OPENAPI = Path("openapi") / "openapi.json"
BLAS_THREADS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
#: Read by prometheus_client when a worker first imports it: where each worker keeps its values.
METRICS_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"
SERVE_FLAGS = ("bind", "workers", "threads")
GIL_SWITCH_S = 0.001
#: The worker: gunicorn's gthread, reading each request whole before a thread takes it.
WORKER_CLASS = "nearwise.web.worker.NearwiseWorker"
#: Connections one worker holds at once (reading, answering or kept alive); gunicorn's default.
WORKER_CONNECTIONS = 1000


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    args = _parser().parse_args(argv)
    try:
        return int(args.run(args))
    except SettingsError as exc:
        print(f"nearwise: {exc}", file=sys.stderr)
        return 2


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="nearwise", description="The nearwise service.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    serve = sub.add_parser("serve", help="serve the API with gunicorn (gthread workers)")
    defaults = Settings()
    serve.add_argument("--bind", help=f"HOST:PORT (default: NEARWISE_BIND or {defaults.bind})")
    serve.add_argument(
        "--workers", help=f"worker processes (default: NEARWISE_WORKERS or {defaults.workers})"
    )
    serve.add_argument(
        "--threads", help=f"threads per worker (default: NEARWISE_THREADS or {defaults.threads})"
    )
    serve.add_argument(
        "--print-config",
        action="store_true",
        help="print the effective settings (API keys masked) and exit without serving",
    )
    serve.set_defaults(run=serve_command)
    doc = sub.add_parser("openapi", help="write the OpenAPI document")
    doc.add_argument(
        "path",
        nargs="?",
        default=str(DEFAULT_OPENAPI),
        help=f"file to write, or - for standard output (default: {DEFAULT_OPENAPI})",
    )
    doc.set_defaults(run=openapi_command)
    return parser


def openapi_command(args: argparse.Namespace) -> int:
    """Write the document generated with default settings, so it never depends on the host."""
    from nearwise.web.app import create_app
    from nearwise.web.openapi import render

    text = render(create_app(Settings()))
    if args.path == "-":
        sys.stdout.write(text)
        return 0
    Path(args.path).write_text(text, encoding="utf-8")
    print(f"wrote {args.path}")
    return 0


def serve_command(args: argparse.Namespace) -> int:
    """Run gunicorn in this process with embedded defaults; no config file is read."""
    for var in BLAS_THREADS:
        os.environ[var] = "1"  # one BLAS thread per worker: fair sharing, identical sums
    given = {k: getattr(args, k) for k in SERVE_FLAGS if getattr(args, k) is not None}
    settings = Settings.from_env().with_overrides({k: f"--{k}" for k in SERVE_FLAGS}, given)
    if args.print_config:
        for name, value in settings.variables(masked=True).items():
            print(f"{name}={value}")
        return 0
    Server(settings).run()
    return 0


def prepare_metrics_dir(configured: str) -> tuple[str, bool]:
    """The directory the workers share their metrics through, emptied of earlier values, and
    whether it was created here (a fresh one under the temp directory when none is set).

    Only the value files (``*.db``) of an earlier run are removed from a configured directory.
    """
    if not configured:
        return tempfile.mkdtemp(prefix="nearwise-metrics-"), True
    os.makedirs(configured, exist_ok=True)
    for entry in os.scandir(configured):
        if entry.name.endswith(".db") and entry.is_file(follow_symlinks=False):
            os.remove(entry.path)
    return configured, False


class Server(BaseApplication):
    """gunicorn with options from :class:`Settings`; each worker builds its own app.

    Hooks: ``on_starting`` (in the master, before any worker exists) prepares the metrics
    directory and sets ``PROMETHEUS_MULTIPROC_DIR`` for the workers to inherit; ``child_exit``
    marks a worker's metrics dead; ``on_exit`` removes the directories created at start (the
    metrics directory unless configured, and the fit slots' lock files).
    """

    def __init__(self, settings: Settings) -> None:
        from nearwise.web.slots import make_pool

        self.settings = settings
        # The fit slots all workers share: lock files made here, before the workers fork.
        self.fit_pool = make_pool(
            Path(tempfile.mkdtemp(prefix="nearwise-slots-")), settings.fit_slots
        )
        self.metrics_dir: str | None = None
        self.metrics_dir_created = False
        super().__init__()

    def on_starting(self, server: Any) -> None:
        self.metrics_dir, self.metrics_dir_created = prepare_metrics_dir(self.settings.metrics_dir)
        os.environ[METRICS_VARIABLE] = self.metrics_dir
        server.log.info("metrics of all workers are kept in %s", self.metrics_dir)

    def child_exit(self, server: Any, worker: Any) -> None:
        from prometheus_client import multiprocess

        multiprocess.mark_process_dead(worker.pid, self.metrics_dir)

    def on_exit(self, server: Any) -> None:
        shutil.rmtree(self.fit_pool, ignore_errors=True)
        if self.metrics_dir_created and self.metrics_dir:
            shutil.rmtree(self.metrics_dir, ignore_errors=True)

    def load_config(self) -> None:
        s = self.settings
        options: dict[str, Any] = {
            "bind": [s.bind],
            "workers": s.workers,
            "threads": s.threads,
            "worker_class": WORKER_CLASS,
            "worker_connections": WORKER_CONNECTIONS,
            "loglevel": s.log_level.lower(),
            "accesslog": "-",
            "errorlog": "-",
            "logger_class": "nearwise.jsonlog.GunicornLogger",  # JSON lines on stdout
            "on_starting": self.on_starting,
            "child_exit": self.child_exit,
            "on_exit": self.on_exit,
            "proc_name": "nearwise",
            "timeout": 30,
            "graceful_timeout": s.graceful_timeout_s,
            "worker_tmp_dir": "/dev/shm" if os.path.isdir("/dev/shm") else None,  # heartbeat in RAM
        }
        if "control_socket_disable" in self.cfg.settings:  # gunicorn >= 25.1: no shared socket
            options["control_socket_disable"] = True
        for key, value in options.items():
            self.cfg.set(key, value)

    def load(self) -> Any:
        from nearwise.web.app import create_app

        # Fitting threads hold the GIL between native calls; a short switch interval lets a
        # health check or a refusal on another thread through within a few milliseconds.
        sys.setswitchinterval(GIL_SWITCH_S)
        return create_app(self.settings, self.fit_pool)
