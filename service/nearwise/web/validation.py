"""marshmallow validation errors -> :class:`Where` entries with JSON paths."""

from __future__ import annotations

from typing import Any

from marshmallow import Schema, ValidationError, fields

from nearwise.core.errors import InvalidValue, Where, shown
from nearwise.web.field_hints import hint


def load(schema: Schema, doc: Any) -> dict[str, Any]:
    """Load ``doc`` with ``schema``; a failure becomes one 422 listing every place at fault."""
    try:
        return schema.load(doc)
    except ValidationError as exc:
        where = [_hinted(w, schema, doc) for w in _flatten(exc.messages, schema, ())]
        first = where[0]
        at = ".".join(shown(p) for p in first.path) or "the top level"
        raise InvalidValue(
            f"The request is not valid: {len(where)} problem(s); the first is at `{at}`: "
            f"{first.message}",
            where,
        ) from None


def _flatten(messages: Any, node: Schema | fields.Field | None, path: tuple) -> Any:
    if isinstance(messages, str):
        yield Where(path, _plain(messages))
        return
    if isinstance(messages, list):
        for m in messages:
            yield from _flatten(m, node, path)
        return
    for key, sub in messages.items():
        if key == "_schema":
            yield from _flatten(sub, node, path)
        elif isinstance(node, Schema):
            yield from _flatten(sub, node.fields.get(key), (*path, key))
        elif isinstance(node, fields.Nested):
            yield from _flatten({key: sub}, node.schema, path)
        elif isinstance(node, fields.List):
            yield from _flatten(sub, node.inner, (*path, key))
        elif isinstance(node, fields.Dict) and isinstance(sub, dict):
            for role, msgs in sub.items():
                inner = node.value_field if role == "value" else node.key_field
                yield from _flatten(msgs, inner, (*path, key))
        else:
            yield from _flatten(sub, None, (*path, key))


def _hinted(where: Where, schema: Schema, doc: Any) -> Where:
    """An unknown field's entry, with where a field of that name belongs when one does."""
    if where.message != UNKNOWN:
        return where
    more = hint(schema, tuple(where.path), doc)
    return Where(where.path, f"unknown field; {more}" if more else where.message)


#: The message for an unknown field without a hint.
UNKNOWN = "unknown field; see the OpenAPI document for the fields offered"


def _plain(message: str) -> str:
    if message == "Unknown field.":
        return UNKNOWN
    return message
