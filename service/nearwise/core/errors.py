"""Errors raised by the core.

Every error carries a stable snake_case ``code`` and a list of :class:`Where` entries that
point at the input at fault. The web layer turns them into RFC 9457 problem details; the
core knows nothing of HTTP.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

PathPart = str | int

#: The most characters of a caller's value (a name, a cell, a header) an error message echoes.
ECHO_CHARS = 80


def shown(value: object, quoted: bool = False, limit: int = ECHO_CHARS) -> str:
    """A caller's value as an error message echoes it: at most ``limit`` characters,
    longer text cut with an ellipsis and its full length stated (``abc… (1048576
    characters)``), lone surrogates written as escapes; ``quoted`` puts the text in quotes as
    ``repr`` does. Every echo goes through here, so that no answer grows with what was sent."""
    text = value if isinstance(value, str) else str(value)
    cut = len(text) > limit
    head = text[:limit] + "…" if cut else text
    # repr escapes a lone surrogate itself; plain text gets the same escape (UTF-8 has none)
    out = repr(head) if quoted else head.encode("utf-8", "backslashreplace").decode("utf-8")
    return f"{out} ({len(text)} characters)" if cut else out


@dataclass(frozen=True)
class Where:
    """One place in the request that is at fault.

    ``path`` is the JSON path of the offending value, e.g. ``("train", "rows", 12, 1)`` for
    row 12, column 1 of the training table, or ``("params", "k")``.
    """

    path: tuple[PathPart, ...]
    message: str


class NearwiseError(Exception):
    """Base class: a request the core cannot answer."""

    code = "invalid_request"
    title = "Invalid request"

    def __init__(self, detail: str, where: Sequence[Where] = ()) -> None:
        super().__init__(detail)
        self.detail = detail
        self.where = tuple(where)


class InvalidValue(NearwiseError):
    """A parameter or option has a value outside what it accepts."""

    code = "invalid_value"
    title = "Invalid value"


class UnknownName(NearwiseError):
    """A method, parameter, option or column name that does not exist."""

    code = "unknown_name"
    title = "Unknown name"


class BadCell(NearwiseError):
    """A table cell that is not a finite number where one is needed."""

    code = "bad_cell"
    title = "Invalid table cell"


class BadTable(NearwiseError):
    """A table whose shape or columns are wrong (ragged rows, duplicate names, ...)."""

    code = "bad_table"
    title = "Invalid table"


class TooFewRows(NearwiseError):
    """Not enough usable rows (or distinct values) for the fit or the folds asked for."""

    code = "too_few_rows"
    title = "Too few rows"


class UnsupportedDimension(NearwiseError):
    """The method does not support this number of features."""

    code = "unsupported_dimension"
    title = "Unsupported number of features"


class NotApplicable(NearwiseError):
    """An option that exists but does not apply to this method or data."""

    code = "not_applicable"
    title = "Option does not apply"


class OverLimit(NearwiseError):
    """The request asks for more work than the service's limits allow (grid, folds, methods,
    or the cost estimated before fitting)."""

    code = "over_limit"
    title = "Over a service limit"


class OverBudget(NearwiseError):
    """The fit ran past the time budget it was given."""

    code = "time_budget_exceeded"
    title = "Time budget exceeded"


class Abandoned(OverBudget):
    """The client closed its connection: nobody waits for the answer, so the work stopped.

    A subclass of :class:`OverBudget` so that every handler of an overrun also stops an
    abandoned request (the web layer answers 503 with this code, which nobody reads, and
    counts and logs it under the code ``client_closed_request``, the 499 of some proxies).
    """

    code = "client_closed_request"
    title = "Client closed the request"
