"""Fit slots: how many fits run at once, in the whole service and in one worker.

The service runs at most ``Settings.fit_slots`` fits at once (``workers x fits_per_worker``),
shared by its workers: gunicorn's workers accept connections unevenly, so a fixed share per
worker would refuse a request in one worker while another sits idle. Under gunicorn the pool is
a directory of lock files made by the master before it forks; a fit holds an exclusive
``flock`` on one file, and the kernel drops the lock when the holder's file is closed or its
process dies, so a killed worker never leaks a slot. Each worker also fits on at most
``Settings.worker_fit_cap`` threads, leaving threads free for health checks and refusals.

A request that needs a fit while no slot is free is refused at once with 503 ``busy`` and
``Retry-After``, instead of waiting in a queue until its client gives up.
"""

from __future__ import annotations

import contextlib
import fcntl
import os
import random
import threading
import time
from collections.abc import Iterator
from pathlib import Path

from flask import Flask, current_app

from nearwise.web.problems import Problem

#: Seconds a refused client is asked to wait: short, since slots free up as fits finish.
BUSY_RETRY_AFTER_S = 2
#: Passes over the pool's files before refusing, a short pause apart: under load, a slot is
#: sometimes freed a moment after a pass has found every file locked (measured at 8 clients on
#: 8 slots: 1 refusal in about 1,900 requests with a single pass, none in 6,600 with three).
POOL_PASSES = 3
POOL_PAUSE_S = 0.01


def make_pool(directory: Path, slots: int) -> Path:
    """Create the lock files of a service-wide pool of ``slots`` (done once, before forking)."""
    directory.mkdir(parents=True, exist_ok=True)
    for old in directory.glob("slot-*"):
        old.unlink()
    for i in range(slots):
        (directory / f"slot-{i:04d}").touch()
    return directory


class FitSlots:
    """The worker's cap (a semaphore) and, when given, the service-wide pool (lock files)."""

    def __init__(self, worker_cap: int, total: int, pool: Path | None = None) -> None:
        self.worker_cap = worker_cap
        self.total = total
        self._worker = threading.BoundedSemaphore(worker_cap)
        self._shared = threading.BoundedSemaphore(total) if pool is None else None
        self._files = sorted(pool.glob("slot-*")) if pool is not None else []
        self._lock = threading.Lock()
        self.in_use = 0

    def try_acquire(self) -> int | None:
        """Take a slot: returns a token for :meth:`release`, or None when none is free."""
        if not self._worker.acquire(blocking=False):
            return None
        token = self._take_shared()
        if token is None:
            self._worker.release()
            return None
        with self._lock:
            self.in_use += 1
        return token

    def _take_shared(self) -> int | None:
        if self._shared is not None:
            return -1 if self._shared.acquire(blocking=False) else None
        for attempt in range(POOL_PASSES):
            if attempt:
                time.sleep(POOL_PAUSE_S)
            token = self._lock_a_file()
            if token is not None:
                return token
        return None

    def _lock_a_file(self) -> int | None:
        start = random.randrange(len(self._files))  # spread the attempts over the files
        for i in range(len(self._files)):
            fd = os.open(self._files[(start + i) % len(self._files)], os.O_RDONLY)
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except BlockingIOError:
                os.close(fd)
                continue
            return fd
        return None

    def release(self, token: int) -> None:
        if token >= 0:
            os.close(token)  # closing the file drops its lock
        elif self._shared is not None:
            self._shared.release()
        with self._lock:
            self.in_use -= 1
        self._worker.release()


def install(app: Flask, worker_cap: int, total: int, pool: Path | None = None) -> None:
    """Give ``app`` its slots; under gunicorn ``pool`` is the master's lock-file directory."""
    app.extensions["nearwise_slots"] = FitSlots(worker_cap, total, pool)


@contextlib.contextmanager
def fit_slot() -> Iterator[None]:
    """Hold a fit slot for the numerical work of a request, or answer 503 ``busy`` at once.

    Routes take it only after the body has been read and parsed and the job built, so a client
    that is slow to send (or sends a malformed body) never holds a slot: slots are for numbers.
    """
    slots: FitSlots = current_app.extensions["nearwise_slots"]
    token = slots.try_acquire()
    if token is None:
        raise Problem(
            503,
            f"Every fit slot is busy ({slots.total} fits at once in the service, "
            f"NEARWISE_WORKERS x NEARWISE_FITS_PER_WORKER, at most {slots.worker_cap} per "
            "worker); nothing was computed. Try again shortly.",
            code="busy",
            headers={"Retry-After": str(BUSY_RETRY_AFTER_S)},
        )
    try:
        yield
    finally:
        slots.release(token)
