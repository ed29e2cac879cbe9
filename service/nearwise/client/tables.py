"""Tables as the client sends them: one normal form, and its JSON and CSV encodings.

A table may be given as a pandas DataFrame, a list of row objects (dicts with the same keys),
the service's own ``{"columns", "rows"}`` or pandas' split shape ``{"columns", "index",
"data"}``. Each becomes a :class:`Table` of plain Python cells: ``None`` (missing), ``bool``,
``int``, ``float`` or ``str``. Nothing is changed on the way: NaN, ``pandas.NA`` and ``NaT`` are
missing cells (JSON null), dates and date-times are written in ISO 8601 (as ``tuning.order_by``
reads them), an infinite number or a cell of another type is refused with ``ValueError`` naming
its row and column. A DataFrame's index is not sent; it labels the rows of the answer.

:func:`Table.csv_safe` says whether the CSV encoding reads back exactly as the JSON one: every
text cell must be one the service reads as that very text (not empty, no surrounding spaces or
line breaks, not a number, not a boolean), and no cell may be a boolean.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

Cell = None | bool | int | float | str


@dataclass(frozen=True)
class Table:
    """A table in normal form: column names, rows of plain cells and the caller's labels."""

    columns: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    index: Any = None  # the DataFrame's index, when one was given

    def __len__(self) -> int:
        return len(self.rows)

    def part(self, start: int, stop: int) -> Table:
        """Rows ``start`` to ``stop`` (not included)."""
        index = None if self.index is None else self.index[start:stop]
        return Table(self.columns, self.rows[start:stop], index)

    def as_json(self) -> dict[str, Any]:
        return {"columns": list(self.columns), "rows": [list(r) for r in self.rows]}

    def csv_safe(self) -> bool:
        """Whether :meth:`as_csv` reads back, cell for cell, as :meth:`as_json` does."""
        return all(_csv_safe(v) for row in self.rows for v in row) and all(
            _csv_safe(c) for c in self.columns
        )

    def as_csv(self) -> bytes:
        """UTF-8 CSV with a header line; a missing cell is empty, numbers keep every digit."""
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\r\n")
        writer.writerow(self.columns)
        for row in self.rows:
            writer.writerow(
                ["" if v is None else repr(v) if isinstance(v, float) else v for v in row]
            )
        return out.getvalue().encode("utf-8")


def table(data: Any, name: str) -> Table:
    """``data`` (any accepted shape) in normal form; ``name`` (``train``, ``query``) labels
    errors."""
    if _is_frame(data):
        return _from_frame(data, name)
    if isinstance(data, Mapping):
        if "columns" not in data or ("rows" in data) == ("data" in data):
            raise ValueError(
                f"`{name}` as a dict needs `columns` and either `rows` or `data` (pandas' split "
                f"shape); it has the keys {sorted(map(str, data))}."
            )
        columns = _names(data["columns"], name)
        rows = data["rows"] if "rows" in data else data["data"]
        return Table(columns, _rows(rows, columns, name))
    if isinstance(data, Sequence) and not isinstance(data, str | bytes):
        return _from_records(data, name)
    raise TypeError(
        f"`{name}` must be a pandas DataFrame, a list of row dicts, or a dict with `columns` "
        f"and `rows`; got {type(data).__name__}."
    )


def _is_frame(data: Any) -> bool:
    kind = type(data)
    return kind.__name__ == "DataFrame" and kind.__module__.startswith("pandas")


def _names(columns: Any, name: str) -> tuple[str, ...]:
    names = tuple(columns)
    for i, c in enumerate(names):
        if not isinstance(c, str):
            raise ValueError(
                f"`{name}` column {i} is named {c!r}, a {type(c).__name__}; column names must "
                "be text (rename it, e.g. with DataFrame.rename(columns=str))."
            )
    return names


def _from_frame(frame: Any, name: str) -> Table:
    columns = _names(frame.columns, name)
    if len(set(columns)) != len(columns):
        raise ValueError(f"`{name}` has duplicate column names: {list(columns)}.")
    cols = [_column(frame.iloc[:, j], name, c) for j, c in enumerate(columns)]
    return Table(columns, tuple(zip(*cols, strict=True)) if cols else (), frame.index)


def _column(series: Any, name: str, column: str) -> list[Cell]:
    kind = series.dtype.kind
    if kind == "f":
        values = series.tolist()
        for i, v in enumerate(values):
            if math.isinf(v):
                raise _infinite(name, i, column)
        return [None if v != v else v for v in values]
    if kind in "iub":
        return series.tolist()
    if kind == "M":
        return [None if v is None or v != v else v.isoformat() for v in series.tolist()]
    return [_cell(v, name, i, column) for i, v in enumerate(series.tolist())]


def _from_records(records: Sequence[Any], name: str) -> Table:
    if not records:
        return Table((), ())
    first = records[0]
    if not isinstance(first, Mapping):
        raise TypeError(f"`{name}` row 0 is a {type(first).__name__}, not a dict of cells.")
    columns = _names(first.keys(), name)
    rows = []
    for i, rec in enumerate(records):
        if not isinstance(rec, Mapping) or set(rec) != set(columns):
            keys = sorted(map(str, rec)) if isinstance(rec, Mapping) else type(rec).__name__
            raise ValueError(
                f"`{name}` row {i} has the keys {keys}; every row needs exactly the keys of "
                f"row 0: {list(columns)}."
            )
        rows.append(tuple(_cell(rec[c], name, i, c) for c in columns))
    return Table(columns, tuple(rows))


def _rows(rows: Any, columns: tuple[str, ...], name: str) -> tuple[tuple[Cell, ...], ...]:
    out = []
    for i, row in enumerate(rows):
        if len(row) != len(columns):
            raise ValueError(f"`{name}` row {i} holds {len(row)} cells for {len(columns)} columns.")
        out.append(tuple(_cell(v, name, i, c) for v, c in zip(row, columns, strict=True)))
    return tuple(out)


def _cell(v: Any, name: str, row: int, column: str) -> Cell:
    if v is None or isinstance(v, bool | str):
        return v
    if isinstance(v, numbers.Integral):
        return int(v)
    if isinstance(v, numbers.Real):
        f = float(v)
        if math.isinf(f):
            raise _infinite(name, row, column)
        return None if f != f else f
    if isinstance(v, dt.date | dt.datetime):
        return None if v != v else v.isoformat()  # pandas' NaT is a datetime unequal to itself
    kind = type(v)
    if kind.__name__ in ("NAType", "NaTType") or (kind.__name__ == "bool_"):
        return bool(v) if kind.__name__ == "bool_" else None
    raise ValueError(
        f"`{name}` row {row}, column `{column}` holds a {kind.__name__} ({v!r:.40}); cells "
        "must be numbers, text, dates or missing."
    )


def _infinite(name: str, row: int, column: str) -> ValueError:
    return ValueError(
        f"`{name}` row {row}, column `{column}` is infinite; the service reads finite numbers "
        "(leave the cell missing, or drop the row)."
    )


def _csv_safe(v: Cell) -> bool:
    if v is None or (isinstance(v, int | float) and not isinstance(v, bool)):
        return True
    if not isinstance(v, str) or not v or v != v.strip() or "\r" in v or "\n" in v:
        return False
    if v.lower() in ("true", "false"):
        return False
    try:
        float(v.replace("_", "!"))  # a number written as text would be read as a number
    except ValueError:
        return True
    return False
