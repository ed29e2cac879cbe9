"""Service settings, read once from ``NEARWISE_*`` environment variables.

Every setting has an embedded default, so the service starts with none of them set. A value
that cannot be read stops start-up with a :class:`SettingsError` naming the variable.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any

PREFIX = "NEARWISE_"
LOG_LEVELS = ("DEBUG", "INFO", "WARNING", "ERROR", "CRITICAL")
OPEN_ENDPOINT_CHOICES = ("/healthz", "/readyz", "/metrics")
#: Settings whose values are secrets: shown masked by ``nearwise serve --print-config``.
SECRETS = ("api_keys",)


class SettingsError(ValueError):
    """A ``NEARWISE_*`` variable holds a value the service cannot use."""


@dataclass(frozen=True)
class Settings:
    """Settings in force; the field ``max_rows`` is read from ``NEARWISE_MAX_ROWS`` and so on."""

    bind: str = "127.0.0.1:8080"
    workers: int = 2
    #: Threads per worker. At most ``worker_fit_cap`` of them fit at once; the others stay
    #: free for health checks and fast 503 answers, so nothing queues behind a long fit.
    threads: int = 10
    #: Fits per worker: the service runs at most ``workers * fits_per_worker`` fits at once,
    #: shared by its workers (one worker may run more than its share while another is idle).
    fits_per_worker: int = 4
    max_body_bytes: int = 32 * 1024 * 1024
    max_rows: int = 250_000
    max_columns: int = 50
    max_cells: int = 2_000_000
    max_query_rows: int = 100_000
    #: Candidates in one method's grid.
    max_grid: int = 200
    #: Folds x repeats of k-fold tuning.
    max_fold_fits: int = 100
    #: Methods in one compare (or ``auto``).
    max_methods: int = 4
    #: The largest estimated fitting time accepted before any fitting starts (seconds on one core).
    max_cost_s: float = 20.0
    #: Estimated seconds of the convex-hull test's linear programs (4 to 8 features) in one
    #: request, counted from the data as they run; query rows not decided within it are
    #: flagged hull_not_tested. A cap on the request's size, not a verdict on those rows.
    max_hull_cost_s: float = 5.0
    time_budget_s: float = 30.0
    #: Seconds gunicorn lets in-flight requests finish after SIGTERM.
    graceful_timeout_s: int = 35
    #: Seconds from the first byte of a request until its whole header must have arrived; past
    #: it the answer is 408 and the connection closes. Headers are read without a thread.
    header_timeout_s: float = 10.0
    #: Seconds from the end of the header until the whole body must have arrived (408 past it),
    #: and the longest an answer may take to send. Bodies are read without a thread, so waiting
    #: costs a socket and the bytes so far: 120 s lets a 32 MiB body come at 2.3 Mbit/s.
    body_timeout_s: float = 120.0
    #: MiB of address space a worker may add to what it holds once loaded (about 0.37 GiB);
    #: an allocation past it fails as a 503 ``out_of_memory`` answer instead of the OOM killer.
    #: 0 turns the guard off.
    worker_memory_mb: int = 3072
    api_keys: tuple[str, ...] = ()
    #: Service endpoints answered without an API key when keys are set (/v1/* always needs one).
    open_endpoints: tuple[str, ...] = ("/healthz", "/readyz", "/metrics")
    cors_origins: tuple[str, ...] = ()
    log_level: str = "INFO"
    #: Directory for the metrics of all workers; empty: a fresh one under the temp directory.
    metrics_dir: str = ""

    @classmethod
    def from_env(cls, environ: Mapping[str, str] | None = None) -> Settings:
        """Read every ``NEARWISE_*`` variable that is set; the others keep their defaults."""
        env = os.environ if environ is None else environ
        values: dict[str, Any] = {}
        for f in fields(cls):
            name = PREFIX + f.name.upper()
            raw = env.get(name)
            if raw is not None:
                values[f.name] = _READERS[f.name](name, raw)
        settings = cls(**values)
        settings.check()
        return settings

    @property
    def fit_slots(self) -> int:
        """Fits the whole service runs at once."""
        return self.workers * self.fits_per_worker

    @property
    def worker_fit_cap(self) -> int:
        """Fits one worker runs at once: two threads stay free (one with only two threads)."""
        return max(1, self.threads - 2)

    def check(self) -> None:
        """Settings that only make sense together; an error names the variables."""
        if self.threads == 1:
            raise SettingsError(
                f"{PREFIX}THREADS must be at least 2: one thread stays free for health checks."
            )

    def variables(self, masked: bool = True) -> dict[str, str]:
        """Every setting as its variable name and the text that would set it; secrets masked."""
        out: dict[str, str] = {}
        for f in fields(self):
            value = getattr(self, f.name)
            if isinstance(value, tuple):
                shown = ",".join("****" if masked and f.name in SECRETS else v for v in value)
            else:
                shown = f"{value:g}" if isinstance(value, float) else str(value)
            out[PREFIX + f.name.upper()] = shown
        return out

    def with_overrides(self, names: Mapping[str, str], values: Mapping[str, str]) -> Settings:
        """A copy with some fields replaced by text values, each checked as if read from the
        environment; an error names the value's source from ``names`` (e.g. ``--bind``)."""
        checked = {k: read_value(k, names[k], raw) for k, raw in values.items()}
        settings = replace(self, **checked)
        settings.check()
        return settings


def read_value(field: str, name: str, raw: str) -> Any:
    """Check and convert one setting given as text; errors name ``name``."""
    return _READERS[field](name, raw)


def _positive_int(name: str, raw: str) -> int:
    text = raw.strip()
    if not text.isascii() or not text.isdigit() or int(text) < 1:
        raise SettingsError(f"{name} must be a positive integer; got {raw!r}.")
    return int(text)


def _non_negative_int(name: str, raw: str) -> int:
    text = raw.strip()
    if not text.isascii() or not text.isdigit():
        raise SettingsError(f"{name} must be a whole number, 0 or more; got {raw!r}.")
    return int(text)


def _positive_float(name: str, raw: str) -> float:
    try:
        value = float(raw.strip())
    except ValueError:
        value = float("nan")
    if not (0 < value < float("inf")) or "_" in raw:
        raise SettingsError(f"{name} must be a positive number of seconds; got {raw!r}.")
    return value


def _bind(name: str, raw: str) -> str:
    host, sep, port = raw.strip().rpartition(":")
    bracketed = host.startswith("[") and host.endswith("]")
    ok_host = bool(host) and (bracketed or ":" not in host) and not any(c.isspace() for c in host)
    ok_port = port.isascii() and port.isdigit() and 1 <= int(port) <= 65535
    if not (sep and ok_host and ok_port):
        raise SettingsError(
            f"{name} must be HOST:PORT with a port in 1-65535 (IPv6 as [::1]:8080); got {raw!r}."
        )
    return f"{host}:{int(port)}"


def _list(name: str, raw: str) -> tuple[str, ...]:
    items = tuple(item.strip() for item in raw.split(","))
    if raw.strip() == "":
        return ()
    if any(item == "" for item in items):
        raise SettingsError(
            f"{name} must be a comma-separated list without empty items; got {raw!r}."
        )
    return items


def _open_endpoints(name: str, raw: str) -> tuple[str, ...]:
    items = _list(name, raw)
    unknown = [item for item in items if item not in OPEN_ENDPOINT_CHOICES]
    if unknown:
        raise SettingsError(
            f"{name} may list only {', '.join(OPEN_ENDPOINT_CHOICES)}; got {', '.join(unknown)}."
        )
    return items


def _directory(name: str, raw: str) -> str:
    text = raw.strip()
    if text and not os.path.isabs(text):
        raise SettingsError(f"{name} must be an absolute path or empty; got {raw!r}.")
    return text


def _log_level(name: str, raw: str) -> str:
    level = raw.strip().upper()
    if level not in LOG_LEVELS:
        raise SettingsError(f"{name} must be one of {', '.join(LOG_LEVELS)}; got {raw!r}.")
    return level


_READERS: dict[str, Callable[[str, str], Any]] = {
    "bind": _bind,
    "workers": _positive_int,
    "threads": _positive_int,
    "fits_per_worker": _positive_int,
    "max_body_bytes": _positive_int,
    "max_rows": _positive_int,
    "max_columns": _positive_int,
    "max_cells": _positive_int,
    "max_query_rows": _positive_int,
    "max_grid": _positive_int,
    "max_fold_fits": _positive_int,
    "max_methods": _positive_int,
    "max_cost_s": _positive_float,
    "max_hull_cost_s": _positive_float,
    "time_budget_s": _positive_float,
    "graceful_timeout_s": _positive_int,
    "header_timeout_s": _positive_float,
    "body_timeout_s": _positive_float,
    "worker_memory_mb": _non_negative_int,
    "api_keys": _list,
    "open_endpoints": _open_endpoints,
    "cors_origins": _list,
    "log_level": _log_level,
    "metrics_dir": _directory,
}


def log_level_number(settings: Settings) -> int:
    """The :mod:`logging` level number of ``settings.log_level``."""
    return int(logging.getLevelName(settings.log_level))
