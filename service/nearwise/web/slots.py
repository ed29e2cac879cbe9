"""Fit slots: at most ``Settings.fit_slots`` fits run at once in one worker process.

A request that needs a fit while every slot is taken is refused at once with a 503 and
``Retry-After``, instead of waiting in gunicorn's queue until its client gives up. The threads
beyond the slots stay free, so health checks and these refusals are answered while every slot
is fitting.
"""

from __future__ import annotations

import functools
import threading
from collections.abc import Callable
from typing import Any, TypeVar

from flask import current_app

from nearwise.web.problems import Problem

View = TypeVar("View", bound=Callable[..., Any])
#: Seconds a refused client is asked to wait: short, since slots free up as fits finish.
BUSY_RETRY_AFTER_S = 2


class FitSlots:
    """A non-blocking counting semaphore with the number of slots in use readable."""

    def __init__(self, slots: int) -> None:
        self.slots = slots
        self._free = threading.BoundedSemaphore(slots)
        self._lock = threading.Lock()
        self.in_use = 0

    def try_acquire(self) -> bool:
        if not self._free.acquire(blocking=False):
            return False
        with self._lock:
            self.in_use += 1
        return True

    def release(self) -> None:
        with self._lock:
            self.in_use -= 1
        self._free.release()


def install(app: Any, slots: int) -> None:
    """Give ``app`` its own slots: one app per worker process, so one set per worker."""
    app.extensions["nearwise_slots"] = FitSlots(slots)


def fitting(view: View) -> View:
    """Run ``view`` in a fit slot, or answer 503 ``busy`` at once when none is free."""

    @functools.wraps(view)
    def held(*args: Any, **kwargs: Any) -> Any:
        slots: FitSlots = current_app.extensions["nearwise_slots"]
        if not slots.try_acquire():
            raise Problem(
                503,
                f"Every fit slot of this worker is busy ({slots.slots} fits at once, "
                "NEARWISE_FITS_PER_WORKER); nothing was computed. Try again shortly.",
                code="busy",
                title="Busy",
                headers={"Retry-After": str(BUSY_RETRY_AFTER_S)},
            )
        try:
            return view(*args, **kwargs)
        finally:
            slots.release()

    return held  # type: ignore[return-value]
