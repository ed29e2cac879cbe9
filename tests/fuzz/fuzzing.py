"""What the in-suite fuzz test and ``run_long.py`` share: the checks and the body repairs; and
for ``run_long.py`` alone, large /v1/locality tables (:data:`SHAPES`) and hostile requests
for the OpenAPI document (:data:`HOSTILE_GETS`).

Bodies drawn from the OpenAPI document alone rarely reach a fit: a random `target` is not a
column and random rows do not have one cell per column. :func:`repair_case` turns about two
thirds of the JSON request bodies into well-formed tables (unique column names, rows as wide as the
columns, a `target` among them, a query holding the feature columns) while keeping the other
half as drawn, so both the envelope checks and the numerics are exercised.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
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


def _columns_of(table: Any) -> list[Any] | None:
    """The column names of a drawn table in any of its shapes (web/table_shapes.py)."""
    if isinstance(table, dict) and isinstance(table.get("columns"), list):
        return table["columns"]
    if isinstance(table, list) and table and isinstance(table[0], dict):
        return list(table[0])
    return None


def _in_shape(table: dict[str, Any], like: Any) -> Any:
    """A repaired ``{columns, rows}`` table in the shape of the drawn table ``like``."""
    if isinstance(like, list):
        return [dict(zip(table["columns"], row, strict=True)) for row in table["rows"]]
    if isinstance(like, dict) and ("data" in like or "index" in like):
        return {"columns": table["columns"], "data": table["rows"]}
    return table


@st.composite
def _repaired(draw: st.DrawFn, body: dict[str, Any]) -> dict[str, Any]:
    sent = dict.fromkeys(str(c) for c in _columns_of(body["train"]) or [])
    # names a table may hold: not empty, no control characters
    names = [n for n in sent if n.isprintable() and n.strip()][:MAX_REPAIRED_COLUMNS]
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
    out["train"] = _in_shape(out["train"], body["train"])
    if draw(st.booleans()):
        out.pop("query", None)
    else:
        out["query"] = _in_shape(draw(_table(others, 0, 5)), body.get("query"))
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
        and _columns_of(body.get("train")) is not None
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


# -- large /v1/locality tables (run_long.py) ----------------------------------------------
#: How the rows of a large table lie: shapes that are hard for k-d trees, hulls and scaling.
LAYOUTS = (
    "uniform",  # independent uniform columns
    "sphere",  # on the unit sphere (every row a hull vertex; a degenerate k-d tree)
    "line",  # every row on one line (affine dimension 1)
    "duplicates",  # a handful of distinct rows, repeated
    "grid",  # an integer lattice: ties at every distance
    "constant",  # the first column constant
    "clusters",  # two tight clusters far apart
    "extreme",  # magnitudes near 1e100 and a column whose spread is 1e-300
    "nulls",  # a few missing cells (refused: features must be finite)
)
LARGE_ROWS = 50_000


@dataclass(frozen=True)
class Shape:
    """One large locality request; ``large_locality_body(shape)`` rebuilds its body exactly."""

    layout: str
    n: int  # training rows
    q: int  # query rows (0: no query)
    p: int  # columns
    seed: int
    outside: bool  # query rows shifted away from the training rows
    options: tuple[tuple[str, Any], ...] = ()  # k, fraction, scale, features


def _rows(layout: str, n: int, p: int, rng: np.random.Generator) -> np.ndarray:
    if layout == "sphere" and p > 1:
        v = rng.normal(size=(n, p))
        return v / np.linalg.norm(v, axis=1, keepdims=True)
    if layout == "line":
        return np.outer(rng.uniform(-1, 1, n), rng.normal(size=p)) + rng.normal(size=p)
    if layout == "duplicates":
        return rng.normal(size=(3, p))[rng.integers(0, 3, n)]
    if layout == "grid":
        return rng.integers(0, 5, (n, p)).astype(float)
    if layout == "clusters":
        return rng.normal(0, 1e-3, (n, p)) + 1e6 * rng.integers(0, 2, (n, 1))
    X = rng.uniform(-1, 1, (n, p))
    if layout == "constant":
        X[:, 0] = 7.0
    elif layout == "extreme":
        X[:, 0] *= 1e99
        X[:, -1] = 1.0 + 1e-300 * rng.uniform(0, 1, n)
    return X


def large_locality_body(shape: Shape) -> dict[str, Any]:
    rng = np.random.default_rng(shape.seed)
    cols = [f"c{i}" for i in range(shape.p)]
    X = _rows(shape.layout, shape.n, shape.p, rng)
    cells: list[list[Any]] = np.round(X, 6).tolist() if shape.layout != "extreme" else X.tolist()
    if shape.layout == "nulls":
        for i in rng.integers(0, shape.n, 3):
            cells[i][0] = None
    body: dict[str, Any] = {"train": {"columns": cols, "rows": cells}, **dict(shape.options)}
    if shape.q:
        Q = _rows(shape.layout, shape.q, shape.p, rng) + (10.0 if shape.outside else 0.0)
        body["query"] = {"columns": cols, "rows": np.round(Q, 6).tolist()}
    return body


#: Row counts: Hypothesis favors small integers, so sizes come from classes up to the largest,
#: each less a small drawn amount.
_SIZES = st.builds(
    lambda size, less: max(1, size - less),
    st.sampled_from([LARGE_ROWS, 20_000, 5_000, 1_000, 100, 3, 1]),
    st.integers(0, 99),
)
#: Options as drawn by anyone: often invalid (k past the rows, k with fraction, unknown names).
_ANY_OPTIONS = st.fixed_dictionaries(
    {},
    optional={
        "k": st.integers(1, 60_000),
        "fraction": st.floats(0.0, 1.5),
        "scale": st.sampled_from(["standard", "range", "none"]),
        "features": st.lists(st.sampled_from(["c0", "c1", "c9"]), max_size=3),
    },
)


@st.composite
def _shape(draw: st.DrawFn) -> Shape:
    """Half the shapes with valid options (so the numerics run), a quarter with none, a
    quarter with options drawn freely."""
    n, p = draw(_SIZES), draw(st.sampled_from(range(1, 9)))
    options: dict[str, Any] = {}
    mode = draw(st.sampled_from(["valid", "valid", "none", "any"]))
    if mode == "valid":
        if draw(st.booleans()):
            options["k"] = draw(st.integers(1, n))
        elif draw(st.booleans()):
            options["fraction"] = draw(st.floats(1e-6, 1.0))
        if draw(st.booleans()):
            options["scale"] = draw(st.sampled_from(["standard", "range", "none"]))
        if draw(st.booleans()):
            cols = [f"c{i}" for i in range(p)]
            options["features"] = draw(st.lists(st.sampled_from(cols), min_size=1, unique=True))
    elif mode == "any":
        options = draw(_ANY_OPTIONS)
    return Shape(
        layout=draw(st.sampled_from(LAYOUTS)),
        n=n,
        q=draw(_SIZES | st.just(0)),
        p=p,
        seed=draw(st.integers(0, 2**32 - 1)),
        outside=draw(st.booleans()),
        options=tuple(sorted(options.items())),
    )


SHAPES = _shape()


# -- hostile GET /openapi.json (run_long.py) ----------------------------------------------
_HEADER_TEXT = st.text(
    st.characters(min_codepoint=0x21, max_codepoint=0xFF, exclude_characters="\x7f"), max_size=200
)
ACCEPTS = (
    "text/html",
    "application/xml",
    "*/*;q=0",
    "application/json;q=0",
    "application/json;q=-1",
    "application/json;q=nan",
    "application/*",
    "*/*",
    ",,,",
    "application/json;charset=utf-16",
    "image/svg+xml",
    "text/csv",
    "application/problem+json",
    "*/*;q=0.5;q=0.9",
    "a" * 8000,
    "application/json, " * 400,
)
_QUERY_KEYS = st.sampled_from(["format", "callback", "__proto__", "$ref", "url", "a[]"]) | st.text(
    min_size=1, max_size=20
)
_QUERY_VALUES = st.sampled_from(
    ["csv", "svg", "json", "xml", "", "../../etc/passwd", "\x00"]
) | st.text(max_size=50)
HOSTILE_GETS = st.tuples(
    st.sampled_from(ACCEPTS) | _HEADER_TEXT,
    st.dictionaries(_QUERY_KEYS, _QUERY_VALUES | st.lists(_QUERY_VALUES, max_size=30), max_size=5),
)
