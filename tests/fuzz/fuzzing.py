"""What the in-suite fuzz test and ``run_long.py`` share: the checks and the body repairs.

Bodies drawn from the OpenAPI document alone rarely reach a fit: a random `target` is not a
column and random rows do not have one cell per column. :func:`repair_case` turns about two
thirds of the JSON request bodies into well-formed tables (unique column names, rows as wide as the
columns, a `target` among them, a query holding the feature columns) while keeping the other
half as drawn, so both the envelope checks and the numerics are exercised.
"""

from __future__ import annotations

from typing import Any

from hypothesis import strategies as st
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
)

from nearwise.core.methods import METHODS

CHECKS = [
    not_a_server_error,
    status_code_conformance,
    content_type_conformance,
    response_schema_conformance,
]
#: Rows of a repaired table: enough for folds, few enough for fast fits.
MAX_REPAIRED_ROWS = 30
MAX_REPAIRED_COLUMNS = 4

_NUMBERS = st.one_of(
    st.floats(allow_nan=False, allow_infinity=False),
    st.floats(-1e3, 1e3),
    st.integers(-5, 5),
)


def _table(
    columns: list[str], min_rows: int, max_rows: int, target: str | None = None
) -> st.SearchStrategy[dict[str, Any]]:
    """Rows of numbers, one per column; only the target column may hold missing cells."""
    row = st.tuples(*(_NUMBERS | st.none() if c == target else _NUMBERS for c in columns))
    return st.lists(row.map(list), min_size=min_rows, max_size=max_rows).map(
        lambda rows: {"columns": columns, "rows": rows}
    )


@st.composite
def _repaired(draw: st.DrawFn, body: dict[str, Any]) -> dict[str, Any]:
    train = body["train"]
    names = list(dict.fromkeys(str(c) for c in train["columns"]))[:MAX_REPAIRED_COLUMNS]
    if len(names) < 2:
        names = [*names, *(n for n in ("x", "y") if n not in names)][:2]
    out = dict(body)
    target = draw(st.sampled_from(names))
    out["train"] = draw(_table(names, 8, MAX_REPAIRED_ROWS, target if "target" in body else None))
    out["target"] = target
    others = [n for n in names if n != target]
    drawn = out.get("tuning")
    tuning = dict(drawn) if isinstance(drawn, dict) else {}  # negative cases draw any type
    tuning.pop("group_by", None)
    if draw(st.booleans()):
        out.pop("tuning", None)
    else:
        out["tuning"] = tuning
    if "target" not in body:  # locality: no target or tuning, features from every column
        out.pop("target")
        out.pop("tuning", None)
        others = names
    if draw(st.booleans()) or "features" not in out:
        out.pop("features", None)
    else:
        out["features"] = draw(st.lists(st.sampled_from(others), min_size=1, unique=True))
    for key in ("params", "grid"):
        if draw(st.booleans()):
            out.pop(key, None)
    if "method" in out:
        out["method"] = draw(st.sampled_from([*METHODS, "auto"]))
    if "methods" in out and draw(st.booleans()):
        out.pop("methods")
    if "k" in out and "fraction" in out:
        out.pop(draw(st.sampled_from(["k", "fraction"])))
    if "k" in out:  # at most the training rows
        out["k"] = draw(st.integers(1, max(1, len(out["train"]["rows"]))))
    if draw(st.booleans()):
        out.pop("query", None)
    else:
        out["query"] = draw(_table(others, 0, 5))
    return out


@st.composite
def _cell_query(draw: st.DrawFn, query: dict[str, Any]) -> dict[str, Any]:
    """GET /v1/cell parameters with x, y and at as lists of numbers, y as long as x."""
    n = draw(st.integers(6, MAX_REPAIRED_ROWS))
    numbers = st.lists(_NUMBERS.map(repr), min_size=n, max_size=n)
    out = {k: v for k, v in query.items() if k not in ("decimal", "level") or draw(st.booleans())}
    out["x"] = ",".join(draw(numbers))
    out["y"] = ",".join(draw(numbers))
    out["at"] = ",".join(draw(st.lists(_NUMBERS.map(repr), min_size=1, max_size=5)))
    out.pop("decimal", None)
    if "method" in out:
        out["method"] = draw(st.sampled_from([*METHODS, "auto"]))
    return out


def repair_case(context: Any, case: Any) -> st.SearchStrategy[Any]:
    """A ``flatmap_case`` hook: the case as drawn, or one with a repaired JSON body and no
    query-string fields (they are not read with a JSON body; see the module doc), or for
    GET /v1/cell lists of numbers in x, y and at."""
    if case.operation.path == "/v1/cell" and isinstance(case.query, dict):
        repaired_query = _cell_query(case.query).map(lambda q: case.derive(query=q, keep_auth=True))
        return st.one_of(repaired_query, repaired_query, st.just(case))
    body = case.body
    repairable = (
        case.media_type == "application/json"
        and isinstance(body, dict)
        and isinstance(body.get("train"), dict)
        and isinstance(body["train"].get("columns"), list)
        and "rows" in body["train"]
    )
    if not repairable:
        return st.just(case)
    # Repaired first: Hypothesis starts from the first branch of one_of.
    repaired = _repaired(body).map(lambda b: _with_body(case, b))
    return st.one_of(repaired, repaired, st.just(case))


def _with_body(case: Any, body: dict[str, Any]) -> Any:
    repaired = case.derive(query={}, keep_auth=True)
    repaired.body = body
    return repaired
