"""The three JSON shapes of a table, read into one: columns and rows, row objects, split.

- ``{"columns": [...], "rows": [[...], ...]}``: the service's own shape.
- ``[{"x": 1, "y": 2}, ...]``: a list of row objects, as most JSON tools write a table (pandas
  ``to_json(orient="records")``). The first row's keys, in their order, name the columns;
  every row must have exactly those keys (in any order). An empty list is refused: it names
  no columns.
- ``{"columns": [...], "index": [...], "data": [[...], ...]}``: pandas' ``split`` shape
  (``to_json(orient="split")``). ``data`` is read as ``rows``; ``index`` is not read, but when
  sent it must have one entry per row. ``rows`` never comes with ``data`` or ``index``: a
  table in two shapes at once is refused rather than one of them guessed.

The schema field (:class:`TableField`) only tells the shapes apart and checks their envelope;
:func:`read` checks the size limits before it builds anything from the rows (a row object's
key count is checked before its keys are listed), turns row objects into rows in C-level
passes (``itemgetter``), and parses the cells with :func:`nearwise.web.tables.from_json`, so
the cell rules are the same in every shape. Errors point at the place in the shape sent:
:meth:`Shape.path` turns the core's ``("train", "rows", i, j)`` into ``/train/i/KEY`` for row
objects and ``/train/data/i/j`` for the split shape (used by
:func:`nearwise.web.problems.error_entry`).
"""

from __future__ import annotations

from collections.abc import MutableMapping
from dataclasses import dataclass
from operator import itemgetter
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields

from nearwise.core.errors import BadTable, PathPart, TooFewRows, Where, shown
from nearwise.web.tables import Limits, Parsed, check_shape, from_json, too_large

ROWS, RECORDS, SPLIT = "rows", "records", "split"
#: Keys naming a part of the split shape; with ``rows`` they make a table in two shapes.
SPLIT_KEYS = ("data", "index")
#: The most keys a mismatch between row objects lists.
MAX_KEYS_SHOWN = 5

EXAMPLE_ROWS = {"columns": ["wind_ms", "power_kw"], "rows": [[7.1, 812.0], [7.4, None]]}
EXAMPLE_RECORDS = [{"wind_ms": 7.1, "power_kw": 812.0}, {"wind_ms": 7.4, "power_kw": None}]
EXAMPLE_SPLIT = {
    "columns": ["wind_ms", "power_kw"],
    "index": [0, 1],
    "data": [[7.1, 812.0], [7.4, None]],
}
SHAPES_DOC = (
    "A table in one of three shapes: `{columns, rows}`; a list of row objects "
    '(`[{"wind_ms": 7.1, "power_kw": 812.0}, ...]`, as pandas `to_json(orient="records")` '
    "writes: the first row's keys, in order, name the columns, every row has the same keys, "
    "and an empty list is refused); or pandas' `split` shape `{columns, index, data}` "
    '(`to_json(orient="split")`): `data` holds the rows; `index` is not read but, when sent, '
    "has one entry per row. `rows` and `data` are never sent together. Cells follow the same "
    "rules in every shape, and so do the limits."
)


@dataclass(frozen=True)
class JsonTable:
    """A table as the schema loaded it: its shape, and its columns and rows as sent (no
    columns yet for row objects: they come from the first row)."""

    shape: str
    columns: list[str] | None
    rows: list[Any]


@dataclass(frozen=True)
class Shape:
    """How a table was sent, to point errors at the place in that shape."""

    kind: str
    columns: tuple[str, ...] = ()

    def path(self, path: tuple[PathPart, ...]) -> tuple[PathPart, ...]:
        """The path of ``path`` (written for the rows shape) in the shape sent."""
        if self.kind == ROWS or len(path) < 2 or path[1] not in ("rows", "columns"):
            return path
        name, part, *rest = path
        if self.kind == SPLIT:
            return (name, "data", *rest) if part == "rows" else path
        if part == "columns":  # the first row's keys name the columns
            return (name, 0, *self._key(rest[:1]))
        if not rest:
            return (name,)
        return (name, rest[0], *self._key(rest[1:2]), *rest[2:])

    def _key(self, j: list[PathPart]) -> tuple[PathPart, ...]:
        if j and isinstance(j[0], int) and 0 <= j[0] < len(self.columns):
            return (self.columns[j[0]],)
        return tuple(j)


class Index(fields.Field):
    """The split shape's ``index``: an array of any values, not read, counted."""

    default_error_messages = {"invalid": "Not a valid index: expected an array."}  # noqa: RUF012

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> list[Any]:
        if not isinstance(value, list):
            raise self.make_error("invalid")
        return value


def _ref(schema: type[Schema]) -> dict[str, str]:
    """The document's reference to a table schema (named as ``web.openapi`` names it)."""
    name = "Table" if schema.__name__ == "TableSchema" else schema.__name__.removesuffix("Schema")
    return {"$ref": f"#/components/schemas/{name}"}


def records_schema(max_rows: int, max_columns: int, max_name: int) -> dict[str, Any]:
    """The JSON Schema of the row-objects shape."""
    return {
        "title": "row objects",
        "description": "One object per row; the first row's keys, in order, name the columns, "
        "and every row has the same keys. Values are cells: a number, null or text (where "
        f"text is allowed). At most {max_rows} rows and {max_columns} keys per row.",
        "type": "array",
        "minItems": 1,
        "maxItems": max_rows,
        "items": {
            "type": "object",
            "minProperties": 1,
            "maxProperties": max_columns,
            "propertyNames": {"maxLength": max_name},
            "additionalProperties": {"type": ["number", "string", "null"]},
        },
        "examples": [EXAMPLE_RECORDS],
    }


class TableField(fields.Field):
    """A table in any of the three shapes -> :class:`JsonTable` (envelope checks only).

    ``rows_schema`` and ``split_schema`` check the ``{columns, rows}`` and
    ``{columns, index, data}`` objects; ``max_rows``, ``max_columns`` and ``max_name`` are the
    bounds the document states for row objects (the service checks the limits in force)."""

    default_error_messages = {  # noqa: RUF012 - marshmallow's own convention
        # make_error formats the text: braces doubled
        "invalid": "Not a table: expected {{columns, rows}}, a list of row objects or "
        "{{columns, index, data}}.",
    }

    def __init__(
        self,
        rows_schema: type[Schema],
        split_schema: type[Schema],
        *,
        max_rows: int,
        max_columns: int,
        max_name: int,
        **kwargs: Any,
    ) -> None:
        meta = dict(kwargs.pop("metadata", {}))
        text = meta.get("description", "")
        meta["description"] = f"{text} {SHAPES_DOC}".strip()
        meta["oneOf"] = [
            _ref(rows_schema),
            records_schema(max_rows, max_columns, max_name),
            _ref(split_schema),
        ]
        meta["examples"] = [EXAMPLE_ROWS, EXAMPLE_RECORDS, EXAMPLE_SPLIT]
        super().__init__(metadata=meta, **kwargs)
        self.rows_schema = rows_schema
        self.split_schema = split_schema

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> JsonTable:
        if isinstance(value, list):
            return JsonTable(RECORDS, None, value)
        if not isinstance(value, dict):
            raise self.make_error("invalid")
        split = [k for k in SPLIT_KEYS if k in value]
        if "rows" in value and split:
            raise ValidationError(
                {
                    k: [
                        f"`rows` and `{k}` were both sent: `rows` belongs to the "
                        "{columns, rows} shape, `data` and `index` to the split shape "
                        "{columns, index, data}; send one shape."
                    ]
                    for k in split
                }
            )
        if not split:
            loaded = self.rows_schema().load(value)
            return JsonTable(ROWS, loaded["columns"], loaded["rows"])
        loaded = self.split_schema().load(value)
        rows, index = loaded["data"], loaded.get("index")
        if index is not None and len(index) != len(rows):
            raise ValidationError(
                {
                    "index": [
                        f"`index` has {len(index)} entr{'y' if len(index) == 1 else 'ies'} "
                        f"and `data` {len(rows)} row{'' if len(rows) == 1 else 's'}; the "
                        "split shape has one index entry per row (the index is not read: it "
                        "may be left out)."
                    ]
                }
            )
        return JsonTable(SPLIT, loaded["columns"], rows)


def read(
    name: str,
    table: JsonTable,
    limits: Limits,
    saw_constant: bool = False,
    shapes: MutableMapping[str, Shape] | None = None,
) -> Parsed:
    """Parse a loaded table of any shape, limits first; ``shapes`` records how each table
    was sent (for the pointers of errors raised later)."""
    shapes = {} if shapes is None else shapes
    if table.shape != RECORDS:
        assert table.columns is not None
        shapes[name] = Shape(table.shape, tuple(table.columns))
        return from_json(name, table.columns, table.rows, limits, saw_constant)
    columns, rows = _records(name, table.rows, limits, shapes)
    return from_json(name, columns, rows, limits, saw_constant)


def _records(
    name: str, rows: list[Any], limits: Limits, shapes: MutableMapping[str, Shape]
) -> tuple[list[str], list[tuple[Any, ...]]]:
    """Columns and rows (tuples in column order) of a list of row objects."""
    if not rows:
        kind, fix = (
            (TooFewRows, "a training table needs rows")
            if name == "train"
            else (BadTable, 'send {"columns": [...], "rows": []} for a table without rows')
        )
        raise kind(
            f"The {name} table is an empty list: it holds no rows and names no columns; {fix}.",
            [Where((name,), "an empty list of row objects")],
        )
    first = rows[0]
    if type(first) is not dict or not first:
        _not_a_row(name, 0, first)
    if len(first) > limits.max_columns:  # before its keys are listed
        raise too_large(name, f"{len(first)} columns (keys of row 0)", limits, (name, 0))
    columns = list(first)
    shapes[name] = Shape(RECORDS, tuple(columns))
    check_shape(name, columns, len(rows), limits)
    p = len(columns)
    if set(map(type, rows)) == {dict}:
        sizes = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
        if (sizes == p).all():
            try:
                if p == 1:
                    return columns, list(zip(map(itemgetter(columns[0]), rows), strict=True))
                return columns, list(map(itemgetter(*columns), rows))
            except KeyError:
                pass  # a row with as many keys, one of them different: found below
    _first_bad_row(name, rows, first)
    raise AssertionError("unreachable")  # pragma: no cover


_KIND_NAMES = {
    bool: "a boolean",
    int: "a number",
    float: "a number",
    str: "text",
    list: "an array",
    type(None): "null",
}


def _not_a_row(name: str, i: int, row: Any) -> None:
    if isinstance(row, dict):  # an empty first row
        raise BadTable(
            f"{name} row {i} is an empty object; the first row's keys name the columns.",
            [Where((name, i), "an empty object")],
        )
    found = _KIND_NAMES.get(type(row), type(row).__name__)
    raise BadTable(
        f"{name} row {i} must be an object (a list of row objects holds one object per row, "
        f"its keys the column names); got {found}.",
        [Where((name, i), f"expected an object, found {found}")],
    )


def _first_bad_row(name: str, rows: list[Any], first: dict[str, Any]) -> None:
    """Raise at the first row that is not an object or whose keys differ from row 0's (only
    on the error path: a loop over the rows)."""
    keys = first.keys()
    for i, row in enumerate(rows):
        if type(row) is not dict:
            _not_a_row(name, i, row)
        if row.keys() == keys:
            continue
        missing = [k for k in first if k not in row]
        extra = [k for k in row if k not in first]
        most = MAX_KEYS_SHOWN
        where = [Where((name, i, k), "missing: row 0 has this key") for k in missing[:most]]
        where += [Where((name, i, k), "not a key of row 0") for k in extra[:most]]
        parts = []
        if missing:
            parts.append(f"it lacks {_keys(missing)}")
        if extra:
            parts.append(f"it has {_keys(extra)}, which row 0 lacks")
        raise BadTable(
            f"{name} row {i} does not have the keys of row 0: {'; '.join(parts)}. Every row "
            "object has the same keys (the first row's name the columns); send null for a "
            "missing value.",
            where,
        )


def _keys(keys: list[str]) -> str:
    shown_keys = ", ".join(f"`{shown(k)}`" for k in keys[:MAX_KEYS_SHOWN])
    more = len(keys) - MAX_KEYS_SHOWN
    return shown_keys + (f" and {more} more" if more > 0 else "")
