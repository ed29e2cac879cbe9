"""Request fields sent as form fields or query-string parameters (with CSV tables).

A field's name is its path in the JSON body with dots: ``method``, ``target``,
``tuning.folds``, ``interval.level``, ``params.k``, ``grid.k``. Text fields are taken as
sent; number, boolean and parameter fields are read as a JSON literal (``5``, ``0.25``,
``true``) when they are one, and otherwise kept as text for the schema to judge. A list
(``features``, ``grid.NAME``) is one field per item, or one field holding a JSON array or
comma-separated items. Nothing else is converted; a field given twice is refused.

A list holds at most ``most`` items (the largest list any field within the limits holds; see
:func:`nearwise.web.intake.most_items`): a longer one is refused before its items are built,
and a field read as a number, boolean or parameter is never parsed as an array or object.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from marshmallow import Schema, fields

from nearwise.core.errors import InvalidValue, OverLimit, Where, shown
from nearwise.web import prescan
from nearwise.web.jsonio import loads_lenient


def collect(
    sources: Iterable[tuple[str, list[str]]], schema: Schema, most: int = 1000
) -> dict[str, Any]:
    """Build the request document from ``(name, values)`` pairs of form or query fields;
    a list holds at most ``most`` items."""
    doc: dict[str, Any] = {}
    seen: set[str] = set()
    for name, values in sources:
        if name in seen:
            raise twice(name)
        seen.add(name)
        path = name.split(".")
        field = _field_at(schema, path)
        if len(values) > 1 and not isinstance(field, fields.List):
            raise twice(name)
        value = _decode(name, field, values, most)
        node = doc
        for key in path[:-1]:
            child = node.setdefault(key, {})
            if not isinstance(child, dict):
                raise twice(key)
            node = child
        if path[-1] in node:
            raise twice(name)
        node[path[-1]] = value
    return doc


def twice(name: str) -> InvalidValue:
    return InvalidValue(
        f"`{shown(name)}` is given more than once (as a form field and in the query string, "
        "or twice); give it once.",
        [Where(tuple(name.split(".")), "given more than once")],
    )


def _field_at(schema: Schema, path: list[str]) -> fields.Field | None:
    field: Any = schema.fields.get(path[0])
    for key in path[1:]:
        if isinstance(field, fields.Nested):
            field = field.schema.fields.get(key)
        elif isinstance(field, fields.Dict):
            field = field.value_field
        else:
            return None
    return field


def _decode(name: str, field: fields.Field | None, values: list[str], most: int) -> Any:
    if isinstance(field, fields.List):
        items = values if len(values) > 1 else _split(name, values[0], most)
        if isinstance(items, list) and len(items) > most:
            raise _too_many(name, most)
        return [_scalar(field.inner, v) for v in items] if isinstance(items, list) else items
    return _scalar(field, values[0])


def _split(name: str, text: str, most: int) -> Any:
    if text.lstrip().startswith("["):
        # ``most`` items make most + 1 values with the list itself: a longer list is not built
        if prescan.json_over(text.encode("utf-8", "surrogatepass"), most + 1, most + 1):
            raise _too_many(name, most)
        try:
            return loads_lenient(text)
        except ValueError:
            return text
    return text.split(",", most)  # one past the limit says it is passed


def _too_many(name: str, most: int) -> OverLimit:
    return OverLimit(
        f"`{shown(name)}` holds more than {most} items; no list field of a request within the "
        "limits holds more (NEARWISE_MAX_GRID, NEARWISE_MAX_COLUMNS, NEARWISE_MAX_METHODS).",
        [Where(tuple(name.split(".")), f"more than {most} items")],
    )


def _scalar(field: fields.Field | None, value: Any) -> Any:
    if not isinstance(value, str) or field is None or isinstance(field, fields.String):
        return value
    if value.lstrip()[:1] in ("[", "{"):
        return value  # never a number, boolean or parameter: left for the schema to refuse
    try:
        decoded = loads_lenient(value)
    except ValueError:
        return value
    return decoded if decoded is None or isinstance(decoded, bool | int | float) else value
