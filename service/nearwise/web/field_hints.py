"""Hints for an unknown request field: where a field of that name does belong.

A field sent at the wrong level (``{"folds": 3}`` for ``tuning.folds``, ``{"k": 10}`` for
``params.k``), a body meant for the other endpoint (``method`` against ``methods``) or a
misspelt name (``taget``) is answered with the place the caller most likely meant. The hint
is a suggestion in the message only; nothing the caller sent is moved or changed.

Where a name is looked up, in order:

1. the other endpoint's field (``method`` in a compare body, ``methods`` in a predict body);
2. a field of the same name elsewhere in the request schema (any depth), or a method
   parameter, as ``params.<name>`` (``grid.<name>`` when the value sent is a list and the
   parameter is tuned);
3. a field name close by spelling (:func:`difflib.get_close_matches`, ratio at least
   :data:`CLOSE`), first among the fields next to it, then anywhere; the same for parameters.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterator
from typing import Any

from marshmallow import Schema, fields

from nearwise.core.methods import METHODS

#: Least similarity (difflib's ratio, 2 x matching characters / total characters) for a
#: spelling hint: "taget" -> "target" is 0.91, "fold" -> "folds" 0.89, "k" -> "ks" 0.67.
CLOSE = 0.8


def schema_paths(schema: Schema, prefix: tuple[str, ...] = ()) -> Iterator[tuple[str, ...]]:
    """Every field path of ``schema``, nested schemas included, by the names a body uses."""
    for name, field in schema.fields.items():
        key = field.data_key or name
        yield (*prefix, key)
        if isinstance(field, fields.Nested) and isinstance(field.schema, Schema):
            yield from schema_paths(field.schema, (*prefix, key))


def _params() -> dict[str, list[str]]:
    """Each method parameter's name -> the methods that take it, in registry order."""
    out: dict[str, list[str]] = {}
    for method in METHODS.values():
        for p in method.params:
            out.setdefault(p.name, []).append(method.name)
    return out


def _tuned() -> set[str]:
    """The parameters that take a grid (tunable in some method)."""
    return {p.name for m in METHODS.values() for p in m.params if p.tunable}


def _dotted(path: tuple[str, ...]) -> str:
    return ".".join(path)


def _value_at(doc: Any, path: tuple) -> Any:
    for key in path:
        if not isinstance(doc, dict) or key not in doc:
            return None
        doc = doc[key]
    return doc


def hint(root: Schema, path: tuple, doc: Any) -> str:
    """The hint for the unknown field at ``path`` (a tuple of keys) of ``doc``, loaded with
    ``root``; an empty string when no better place is known."""
    if not path or not all(isinstance(k, str) for k in path):
        return ""
    name, parent = path[-1], path[:-1]
    known = list(schema_paths(root))
    tops = {p[0] for p in known if len(p) == 1}
    if not parent:
        if name == "method" and "methods" in tops:
            return (
                "compare takes `methods`, a list of method names (`method` belongs to /v1/predict)"
            )
        if name == "methods" and "method" in tops:
            return (
                "predict takes one `method` (`auto` chooses among all); a list `methods` "
                "belongs to /v1/compare"
            )
    if parent and parent[0] in ("params", "grid"):
        return ""  # the core names a method's unknown parameter itself
    elsewhere = [p for p in known if p[-1] == name and p != path]
    if elsewhere:
        return "did you mean " + " or ".join(f"`{_dotted(p)}`" for p in elsewhere) + "?"
    params = _params()
    if name in params:
        return _param_hint(name, params[name], _value_at(doc, path))
    siblings = [p for p in known if p[:-1] == parent]
    for pool in (siblings, known):
        match = _close(name, [p[-1] for p in pool])
        if match:
            target = next(p for p in pool if p[-1] == match)
            return f"did you mean `{_dotted(target)}`?"
    match = _close(name, list(params))
    if match:
        return _param_hint(match, params[match], _value_at(doc, path))
    return ""


def _param_hint(name: str, methods: list[str], value: Any) -> str:
    where = "grid" if isinstance(value, list) and name in _tuned() else "params"
    of = ", ".join(f"`{m}`" for m in methods)
    return f"did you mean `{where}.{name}` (a parameter of {of})?"


def _close(name: str, pool: list[str]) -> str:
    lowered = {p.lower(): p for p in pool}
    if name.lower() in lowered:
        return lowered[name.lower()]
    found = difflib.get_close_matches(name, pool, n=1, cutoff=CLOSE)
    return found[0] if found else ""
