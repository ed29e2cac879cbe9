"""A time budget, checked between folds and between the steps of a run."""

from __future__ import annotations

import time

from nearwise.core.errors import OverBudget


class Deadline:
    """Raises :class:`OverBudget` from :meth:`check` once ``seconds`` have passed.

    ``seconds=None`` never expires. Checks are cheap and happen only between units of work
    (folds, candidates' shared computations, final fit), so a single unit may overrun by its
    own duration.
    """

    def __init__(self, seconds: float | None) -> None:
        self.seconds = seconds
        self._end = None if seconds is None else time.monotonic() + seconds

    def check(self) -> None:
        if self._end is not None and time.monotonic() > self._end:
            raise OverBudget(
                f"the fit ran past its time budget of {self.seconds:g} s. Send fewer rows, a "
                "smaller grid or fewer folds, or try again when the service is less busy."
            )
