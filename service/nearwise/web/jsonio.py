"""Strict JSON in and out: no NaN or Infinity, no duplicate keys, no NaN ever written."""

from __future__ import annotations

import json
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

from nearwise.core.errors import shown


class DuplicateKey(ValueError):
    """A JSON object names the same key twice; ``path`` points at the second one."""

    def __init__(self, path: tuple[str | int, ...]) -> None:
        super().__init__(f"key `{shown(path[-1])}` appears more than once in one object")
        self.path = path


class TooDeep(ValueError):
    """The body nests arrays or objects deeper than the parser can follow."""


def _int(text: str) -> int | float:
    return int(text) if len(text) <= 4000 else float("inf")


def loads_lenient(text: str) -> Any:
    """``json.loads`` for small form values; anything unreadable raises ValueError."""
    try:
        return json.loads(text)
    except RecursionError:
        raise TooDeep("the value nests arrays too deeply") from None


class _Dup(dict):
    """An object that held a duplicate key, kept so its place can be found after parsing."""

    duplicate: str = ""


@dataclass
class Parsed:
    """A parsed JSON document and whether a ``NaN``/``Infinity`` literal appeared anywhere."""

    doc: Any
    saw_constant: bool


def loads_strict(body: bytes) -> Parsed:
    """Parse a UTF-8 JSON body (a leading byte order mark is ignored).

    Raises
    ------
    UnicodeDecodeError, json.JSONDecodeError
        The body is not UTF-8 or not JSON.
    DuplicateKey
        An object repeats a key (the first such place is reported).
    """
    flags = {"constant": False, "dup": False}

    def constant(text: str) -> float:
        flags["constant"] = True
        return float(text)

    def pairs(items: list[tuple[str, Any]]) -> dict[str, Any]:
        d = dict(items)
        if len(d) == len(items):
            return d
        flags["dup"] = True
        marked = _Dup(d)
        seen: set[str] = set()
        for key, _ in items:
            if key in seen:
                marked.duplicate = key
                break
            seen.add(key)
        return marked

    # A leading byte order mark is ignored, as for CSV and text bodies (RFC 8259, section 8.1,
    # lets a parser ignore it).
    text = body.decode("utf-8-sig")
    try:
        doc = json.loads(text, parse_constant=constant, object_pairs_hook=pairs)
    except RecursionError:
        raise TooDeep("the body nests arrays or objects too deeply") from None
    except ValueError as exc:
        if isinstance(exc, json.JSONDecodeError):
            raise
        # an integer too long to convert: read it as a number too large for a double
        doc = json.loads(text, parse_constant=constant, object_pairs_hook=pairs, parse_int=_int)
    if flags["dup"]:
        raise DuplicateKey(next(_find_dup(doc, ())))
    return Parsed(doc, flags["constant"])


def _find_dup(node: Any, path: tuple[str | int, ...]) -> Iterator[tuple[str | int, ...]]:
    if isinstance(node, _Dup):
        yield (*path, node.duplicate)
    if isinstance(node, dict):
        for k, v in node.items():
            if isinstance(v, dict | list):
                yield from _find_dup(v, (*path, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            if isinstance(v, dict | list):
                yield from _find_dup(v, (*path, i))


def jsonable(obj: Any) -> Any:
    """Plain JSON values from core results: numpy scalars and arrays become Python values and
    every non-finite float becomes ``None``."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return jsonable(obj.tolist())
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        value = float(obj)
        return value if np.isfinite(value) else None
    return obj


def dumps(obj: Any) -> bytes:
    """Compact UTF-8 JSON; raises rather than write NaN or Infinity."""
    return json.dumps(obj, allow_nan=False, ensure_ascii=False, separators=(",", ":")).encode()
