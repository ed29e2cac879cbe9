"""A request's time budget and its client's presence, checked between units of work.

:class:`Deadline` raises :class:`~nearwise.core.errors.OverBudget` from :meth:`Deadline.check`
once its seconds have passed, and :class:`~nearwise.core.errors.Abandoned` once its
``abandoned`` callable (given by the web layer) says the client has gone. Checks are cheap (a
clock read; the callable at most every :data:`ABANDON_POLL_S`) and sit between units of work:
folds, blocks of rows, bisection steps, blocks of a picture or of a CSV answer. Every such unit
is kept short (well under a second on one core at the service's row limits), so a request
stops soon after its budget.

Code reached through interfaces that cannot carry the deadline (a method's fitted model, the
spline's posterior, the nearest-row search) calls :func:`checkpoint`, which checks the deadline
in force in this thread's context: :meth:`Deadline.scope` sets it (the pipeline does, around its
stages). Without one in force, :func:`checkpoint` does nothing. This is the cancel-scope
pattern of structured concurrency, kept to one ``ContextVar``: each request thread sees its
own deadline.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar

from nearwise.core.errors import Abandoned, OverBudget

#: Seconds between two calls of the ``abandoned`` callable (checks in between skip it).
ABANDON_POLL_S = 0.2
#: Blocks of :func:`blocks` aim at this many seconds each.
BLOCK_TARGET_S = 0.05


class Deadline:
    """The time budget of one request, and a way to learn that its client has gone.

    Parameters
    ----------
    seconds : float or None
        The budget from now; None never expires.
    abandoned : callable, optional
        Returns True once nobody waits for the answer (the web layer passes one that peeks at
        the client's socket). Called by :meth:`check` at most every :data:`ABANDON_POLL_S`.
    clock : callable
        Seconds, monotonic (tests pass a fake clock).
    """

    def __init__(
        self,
        seconds: float | None,
        abandoned: Callable[[], bool] | None = None,
        *,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self.seconds = seconds
        self.abandoned = abandoned
        self._clock = clock
        now = clock()
        self._end = None if seconds is None else now + seconds
        self._poll_at = now + ABANDON_POLL_S
        self.gone = False

    def check(self) -> None:
        """Raise :class:`OverBudget` past the budget, :class:`Abandoned` once the client left."""
        now = self._clock()
        if self._end is not None and now > self._end:
            raise OverBudget(
                f"the request ran past its time budget of {self.seconds:g} s. Send fewer rows, "
                "fewer query rows, a smaller grid or fewer folds, or try again when the service "
                "is less busy."
            )
        if self.abandoned is not None and (self.gone or now >= self._poll_at):
            self._poll_at = now + ABANDON_POLL_S
            self.gone = self.gone or bool(self.abandoned())
            if self.gone:
                raise Abandoned(
                    "the client closed the connection before the answer was ready; the work "
                    "was stopped."
                )

    def remaining(self) -> float | None:
        """Seconds left (negative once past), or None without a budget."""
        return None if self._end is None else self._end - self._clock()

    @contextmanager
    def scope(self) -> Iterator[Deadline]:
        """Make this the deadline :func:`checkpoint` checks, for the duration of the block."""
        token = _IN_FORCE.set(self)
        try:
            yield self
        finally:
            _IN_FORCE.reset(token)


_IN_FORCE: ContextVar[Deadline | None] = ContextVar("nearwise_deadline", default=None)


def checkpoint() -> None:
    """Check the deadline in force (see :meth:`Deadline.scope`); nothing without one."""
    deadline = _IN_FORCE.get()
    if deadline is not None:
        deadline.check()


def in_force() -> Deadline | None:
    """The deadline in force in this context, if any."""
    return _IN_FORCE.get()


def blocks(
    total: int,
    most: int,
    first: int = 64,
    target_s: float = BLOCK_TARGET_S,
    clock: Callable[[], float] = time.perf_counter,
) -> Iterator[slice]:
    """Consecutive slices over ``range(total)``, with :func:`checkpoint` before each.

    For work whose cost per row is unknown in advance (a nearest-row search costs a
    microsecond per row on spread-out rows and milliseconds on degenerate ones): the first
    block has ``first`` rows, and each next one is resized so that it takes about ``target_s``
    (at most 4 times larger or smaller than the last, never above ``most`` rows, which bounds
    memory). The slices never change a result, only how often the budget is checked.
    """
    size = max(1, min(first, most))
    start = 0
    while start < total:
        checkpoint()
        stop = min(total, start + size)
        t0 = clock()
        yield slice(start, stop)
        took = clock() - t0
        start = stop
        scale = 4.0 if took <= target_s / 4 else target_s / took
        size = int(max(1, min(most, size * 4, max(size / 4, size * scale))))
