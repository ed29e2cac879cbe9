"""JSON tables and CSV parts -> :class:`nearwise.core.data.Table`, in one vectorised pass.

Cells are numbers, ``null`` (JSON) or an empty cell (CSV) for a missing value, or text (kept in
``Table.labels``; the core allows text only in the grouping column). Booleans, nested values,
``NaN``/``Infinity`` literals and numbers too large for a double are refused with the row and
column at fault; nothing is coerced. Row objects and pandas' split shape are read into rows
by :mod:`nearwise.web.table_shapes` first.
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass
from itertools import chain
from typing import Any

import numpy as np

from nearwise.core.data import Table
from nearwise.core.errors import BadCell, BadTable, Where, shown
from nearwise.web.problems import Problem

_NUMERIC = {float, int, type(None)}
_CELL_TYPES = (float, int, type(None), str)
_CELL_SET = set(_CELL_TYPES)
_NUMBER, _NULL, _TEXT, _OTHER = 0, 1, 2, 3
_KINDS = {float: _NUMBER, int: _NUMBER, type(None): _NULL, str: _TEXT}


def _kind(cell: Any) -> int:
    return _KINDS.get(type(cell), _OTHER)


@dataclass(frozen=True)
class Limits:
    """Size caps on one table (``NEARWISE_MAX_ROWS``, ``_MAX_COLUMNS``, ``_MAX_CELLS``)."""

    max_rows: int
    max_columns: int
    max_cells: int
    max_query_rows: int | None = None


@dataclass(frozen=True)
class Parsed:
    """A parsed table with its cells as sent (for echoing them back in a CSV answer)."""

    table: Table
    cells: list[list[Any]]


def row_limit(name: str, limits: Limits) -> int:
    """The row limit of the table ``name`` (the query's is the lower of its own and train's)."""
    if name == "query" and limits.max_query_rows is not None:
        return min(limits.max_rows, limits.max_query_rows)
    return limits.max_rows


def too_large(name: str, size: str, limits: Limits, path: tuple) -> Problem:
    """The 413 for a table of ``size`` (``"300 rows x 2 columns"``) over the limits."""
    most = row_limit(name, limits)
    return Problem(
        413,
        f"The {name} table has {size}; the limits are "
        f"{most} rows, {limits.max_columns} columns and {limits.max_cells} cells "
        f"(NEARWISE_MAX_{'QUERY_' if most != limits.max_rows else ''}ROWS, "
        "NEARWISE_MAX_COLUMNS, NEARWISE_MAX_CELLS).",
        [Where(path, "table over the size limits")],
        code="table_too_large",
    )


def most_rows(name: str, columns: list[str], limits: Limits) -> int:
    """The most rows a table with these columns may have (rows and cells limits); a 413 if
    the columns alone are over the limit. A reader stops one row past this number."""
    p = len(columns)
    if p > limits.max_columns:
        raise too_large(name, f"{p} columns", limits, (name,))
    return min(row_limit(name, limits), limits.max_cells // max(p, 1))


def check_shape(
    name: str, columns: list[str], n_rows: int, limits: Limits, stopped: bool = False
) -> None:
    """Refuse tables over the limits (413) and duplicate column names (422).

    ``stopped``: reading stopped after ``n_rows`` rows, one past :func:`most_rows`; the table
    holds at least that many."""
    p = len(columns)
    most = row_limit(name, limits)
    if n_rows > most or p > limits.max_columns or n_rows * p > limits.max_cells:
        rows = f"more than {n_rows - 1}" if stopped else str(n_rows)
        path = (name, "rows") if n_rows > most else (name,)
        raise too_large(name, f"{rows} rows x {p} columns", limits, path)
    seen: dict[str, int] = {}
    for j, col in enumerate(columns):
        _check_name(name, j, col)
        if col in seen:
            raise BadTable(
                f"Column names must be unique; `{shown(col)}` appears more than once in {name}.",
                [Where((name, "columns", j), f"duplicate column `{shown(col)}`")],
            )
        seen[col] = j


def _check_name(table: str, j: int, col: str) -> None:
    """Refuse a column name holding a control character (tab, line breaks and the other C0
    and C1 codes) or a lone surrogate: neither can be written back in a CSV answer or a
    header, and neither is a name anyone means."""
    for ch in col:
        kind = unicodedata.category(ch)
        if kind in ("Cc", "Cs"):
            what = "a control character" if kind == "Cc" else "a lone surrogate"
            raise BadTable(
                f"Column {j} of {table} has a name holding {what} (U+{ord(ch):04X}); column "
                "names are printable text. Rename the column.",
                [Where((table, "columns", j), f"{what} U+{ord(ch):04X} in the name")],
            )


def from_json(
    name: str, columns: list[str], rows: list[Any], limits: Limits, saw_constant: bool = False
) -> Parsed:
    """Parse the ``rows`` of a JSON table whose envelope was already checked.

    ``saw_constant`` says a ``NaN``/``Infinity`` literal appeared somewhere in the body, which
    takes the slower path that can tell it from ``null``.
    """
    check_shape(name, columns, len(rows), limits)
    p = len(columns)
    if not rows:
        return Parsed(Table(name, tuple(columns), np.empty((0, p))), [])
    try:
        kinds = set(map(type, chain.from_iterable(rows)))
    except TypeError:
        _raise_first_problem(name, rows, p)
    if kinds <= _NUMERIC and not saw_constant:
        try:
            values = np.array(rows, dtype=np.float64)  # None -> NaN
        except (ValueError, OverflowError, TypeError):
            _raise_first_problem(name, rows, p)
        if values.shape != (len(rows), p):
            _raise_first_problem(name, rows, p)
        check_finite(name, values, ~np.isnan(values))
        return Parsed(Table(name, tuple(columns), values), rows)
    return Parsed(_from_objects(name, columns, rows, saw_constant), rows)


def _from_objects(name: str, columns: list[str], rows: list[Any], saw_constant: bool) -> Table:
    """The slower path: some cell is text or not a plain number; columns are typed one by one,
    and only columns holding text (or a NaN/Infinity literal somewhere) go cell by cell."""
    p = len(columns)
    try:
        obj = np.array(rows, dtype=object)
    except ValueError:
        _raise_first_problem(name, rows, p)
    if obj.shape != (len(rows), p):
        _raise_first_problem(name, rows, p)
    values = np.empty(obj.shape)
    is_num = np.empty(obj.shape, dtype=bool)
    labels: dict[int, np.ndarray] = {}
    for j in range(p):
        col = obj[:, j]
        kinds = set(map(type, col))
        if not kinds <= _CELL_SET:
            _raise_first_problem(name, rows, p)
        try:
            if kinds <= _NUMERIC and not saw_constant:
                values[:, j] = col.astype(np.float64)  # None -> NaN
                is_num[:, j] = ~np.isnan(values[:, j])
            else:
                codes = np.frompyfunc(_kind, 1, 1)(col).astype(np.int8)
                is_num[:, j] = codes == _NUMBER
                values[:, j] = np.where(is_num[:, j], col, np.nan).astype(np.float64)
                if (codes == _TEXT).any():
                    labels[j] = col
        except OverflowError:
            _raise_first_problem(name, rows, p)
    check_finite(name, values, is_num)
    return Table(name, tuple(columns), values, labels)


def check_finite(name: str, values: np.ndarray, is_num: np.ndarray) -> None:
    """Refuse any cell marked as a number whose value is not finite."""
    bad = is_num & ~np.isfinite(values)
    if bad.any():
        i, j = (int(v[0]) for v in np.nonzero(bad))
        not_finite(name, i, j)


def not_finite(name: str, i: int, j: int) -> None:
    """Raise the error for a NaN, an infinity or a number too large for a double."""
    raise BadCell(
        f"{name} row {i}, column {j} is not a finite number (NaN, Infinity or a number too "
        "large for a double). Send null for a missing value.",
        [Where((name, "rows", i, j), "not a finite number")],
    )


def _raise_first_problem(name: str, rows: list[Any], p: int) -> Any:
    """Walk the rows cell by cell (only on the error path) and raise at the first fault."""
    for i, row in enumerate(rows):
        if not isinstance(row, list | tuple):  # tuples: rows made from row objects
            raise BadTable(
                f"{name} row {i} must be an array of {p} cells; got {type(row).__name__}.",
                [Where((name, "rows", i), "expected an array")],
            )
        if len(row) != p:
            raise BadTable(
                f"{name} row {i} has {len(row)} cells; the table has {p} columns.",
                [Where((name, "rows", i), f"expected {p} cells, found {len(row)}")],
            )
        for j, cell in enumerate(row):
            if isinstance(cell, bool) or not isinstance(cell, _CELL_TYPES):
                found = "a boolean" if isinstance(cell, bool) else f"{type(cell).__name__}"
                raise BadCell(
                    f"{name} row {i}, column {j} holds {found}; cells are numbers, null or text.",
                    [Where((name, "rows", i, j), f"expected a number, null or text; got {found}")],
                )
            if isinstance(cell, int | float) and not _finite(cell):
                not_finite(name, i, j)
    raise BadTable(f"The {name} table could not be read.", [Where((name, "rows"), "unreadable")])


def _finite(cell: int | float) -> bool:
    try:
        return bool(np.isfinite(float(cell)))
    except OverflowError:
        return False
