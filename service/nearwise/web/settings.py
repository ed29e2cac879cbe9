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


class SettingsError(ValueError):
    """A ``NEARWISE_*`` variable holds a value the service cannot use."""


@dataclass(frozen=True)
class Settings:
    """Settings in force; the field ``max_rows`` is read from ``NEARWISE_MAX_ROWS`` and so on."""

    bind: str = "127.0.0.1:8080"
    workers: int = 2
    threads: int = 4
    max_body_bytes: int = 32 * 1024 * 1024
    max_rows: int = 250_000
    max_columns: int = 50
    max_cells: int = 2_000_000
    time_budget_s: float = 60.0
    api_keys: tuple[str, ...] = ()
    cors_origins: tuple[str, ...] = ()
    log_level: str = "INFO"

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
        return cls(**values)

    def with_overrides(self, names: Mapping[str, str], values: Mapping[str, str]) -> Settings:
        """A copy with some fields replaced by text values, each checked as if read from the
        environment; an error names the value's source from ``names`` (e.g. ``--bind``)."""
        checked = {k: read_value(k, names[k], raw) for k, raw in values.items()}
        return replace(self, **checked)


def read_value(field: str, name: str, raw: str) -> Any:
    """Check and convert one setting given as text; errors name ``name``."""
    return _READERS[field](name, raw)


def _positive_int(name: str, raw: str) -> int:
    text = raw.strip()
    if not text.isascii() or not text.isdigit() or int(text) < 1:
        raise SettingsError(f"{name} must be a positive integer; got {raw!r}.")
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


def _log_level(name: str, raw: str) -> str:
    level = raw.strip().upper()
    if level not in LOG_LEVELS:
        raise SettingsError(f"{name} must be one of {', '.join(LOG_LEVELS)}; got {raw!r}.")
    return level


_READERS: dict[str, Callable[[str, str], Any]] = {
    "bind": _bind,
    "workers": _positive_int,
    "threads": _positive_int,
    "max_body_bytes": _positive_int,
    "max_rows": _positive_int,
    "max_columns": _positive_int,
    "max_cells": _positive_int,
    "time_budget_s": _positive_float,
    "api_keys": _list,
    "cors_origins": _list,
    "log_level": _log_level,
}


def log_level_number(settings: Settings) -> int:
    """The :mod:`logging` level number of ``settings.log_level``."""
    return int(logging.getLevelName(settings.log_level))
