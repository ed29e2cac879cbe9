"""Strict marshmallow fields: JSON types are taken as sent, never coerced."""

from __future__ import annotations

import math
from typing import Any

from marshmallow import fields


class StrictInteger(fields.Integer):
    """An integer; booleans, floats and numeric strings are refused."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(strict=True, **kwargs)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.make_error("invalid")
        return value


class Number(fields.Float):
    """A finite JSON number; booleans and strings are refused."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(allow_nan=False, **kwargs)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> float | int:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.make_error("invalid")
        if isinstance(value, float) and not math.isfinite(value):
            raise self.make_error("special")
        return value


class Scalar(fields.Field):
    """A parameter value: text (at most ``max_length`` characters), a boolean or a finite
    number (checked further by the core)."""

    default_error_messages = {  # noqa: RUF012 - marshmallow's own convention
        "invalid": "Not a valid value: expected text, a boolean or a finite number.",
        "long": "Longer than maximum length {max_length}.",
    }

    def __init__(self, max_length: int | None = None, **kwargs: Any) -> None:
        kwargs.setdefault("metadata", {})
        schema: dict[str, Any] = {"type": ["string", "number", "boolean"]}
        if max_length is not None:
            schema["maxLength"] = max_length  # applies to the text form only
        kwargs["metadata"] = {**schema, **kwargs["metadata"]}
        self.max_length = max_length
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> Any:
        if isinstance(value, float) and not math.isfinite(value):
            raise self.make_error("invalid")
        if not isinstance(value, str | bool | int | float):
            raise self.make_error("invalid")
        if isinstance(value, str) and self.max_length is not None and len(value) > self.max_length:
            raise self.make_error("long", max_length=self.max_length)
        return value


class Rows(fields.Field):
    """Table rows: an array of arrays of cells, parsed later in one vectorised pass.

    ``width`` is the most cells per row the document states (the table's column limit); the
    rows are checked against the columns when parsed.
    """

    default_error_messages = {"invalid": "Not a valid list of rows."}  # noqa: RUF012

    def __init__(self, width: int | None = None, **kwargs: Any) -> None:
        cell = {"type": ["number", "string", "null"]}
        row: dict[str, Any] = {"type": "array", "items": cell}
        if width is not None:
            row["maxItems"] = width
        kwargs["metadata"] = {"type": "array", "items": row, **kwargs.get("metadata", {})}
        super().__init__(**kwargs)

    def _deserialize(self, value: Any, attr: Any, data: Any, **kwargs: Any) -> list[Any]:
        if not isinstance(value, list):
            raise self.make_error("invalid")
        return value
