"""GET /v1/cell: one fit and its predictions as plain text, for spreadsheet formulas.

A formula can only issue a GET (a URL of about 2,048 characters) and read back text, so the
data come as lists in the query string and the answer is the bare number, or one line per
``at`` value. It is ``/v1/predict`` on a one-feature table ``x, y``: the same core call
(:func:`nearwise.core.pipeline.run`) and the same defaults, so the numbers equal the JSON
answer for the same data. Errors stay ``application/problem+json``; a spreadsheet shows the
status as an error value.

Items are counted one way: a list's separators (``,`` or ``;``, chosen once per list) are
counted before any item is read, and that count is checked against the same row and cell
limits as the tables of ``/v1/predict`` (``x``, ``y`` and ``t`` form the train table, ``at``
the query table; :func:`nearwise.web.tables.most_rows`), then the items are split on it.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
from flask import Blueprint, Response, current_app, request

from nearwise.core import pipeline
from nearwise.core.data import Table
from nearwise.core.errors import NearwiseError, OverBudget, Where, shown
from nearwise.core.spec import SCHEMES, IntervalSpec, Job, TuningSpec
from nearwise.web import metrics
from nearwise.web.body import negotiate
from nearwise.web.csvio import DECIMALS
from nearwise.web.openapi_parts import problems
from nearwise.web.problems import RETRY_AFTER_S, Problem
from nearwise.web.routes import operation
from nearwise.web.routes.predict import caps
from nearwise.web.serialize import prediction_rows
from nearwise.web.slots import fit_slot
from nearwise.web.tables import Limits, most_rows, row_limit

bp = Blueprint("cell", __name__, url_prefix="/v1")

PARTS = ("value", "lower", "upper", "std_error", "flags")
#: Distinct x values from which the default method is ``spline`` rather than ``linear``.
SPLINE_FROM = 5
PARAMETERS = (
    "x",
    "y",
    "at",
    "method",
    "part",
    "level",
    "decimal",
    "folds",
    "scheme",
    "t",
    "gap",
    "w",
)
TEXT = "text/plain; charset=utf-8"
_NUMBER = re.compile(r"\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*", re.ASCII)


def _parameter(name: str, text: str, example: Any = None, **schema: Any) -> dict[str, Any]:
    out: dict[str, Any] = {
        "name": name,
        "in": "query",
        "required": name in ("x", "y", "at"),
        "description": text,
        "schema": schema or {"type": "string"},
    }
    if example is not None:
        out["example"] = example
    return out


_LIST = (
    "Numbers separated by commas (`1.5,2,3`) or by semicolons (`1.5;2;3`); with "
    "`decimal=comma`, by semicolons only (`1,5;2;3`). Spaces around items are ignored; an "
    "empty item is a missing value, as JSON null."
)
_PARAMETERS = [
    _parameter("x", "The feature values. " + _LIST, "1,2,3,4,5,6,7,8"),
    _parameter(
        "y",
        "The targets, one per `x` value (rows with a missing y are dropped).",
        "1.1,1.9,3.2,3.9,5.1,6.2,6.8,8.1",
    ),
    _parameter("at", "Where to predict: one value, or a list as for `x`.", "4.5"),
    _parameter(
        "method",
        "`knn`, `linear`, `spline`, `additive` or `auto`. Default: `spline` when the rows with "
        f"both x and y hold at least {SPLINE_FROM} distinct x values, otherwise `linear`.",
        type="string",
    ),
    _parameter(
        "part",
        "What to answer per `at` value: `value` (the prediction), `lower` or `upper` (the "
        "interval bounds), `std_error`, or `flags` (warning codes separated by spaces; an "
        "empty line for none).",
        type="string",
        enum=list(PARTS),
        default="value",
    ),
    _parameter(
        "level",
        "Coverage of the interval behind `lower` and `upper`.",
        type="number",
        exclusiveMinimum=0,
        exclusiveMaximum=1,
        default=0.9,
    ),
    _parameter(
        "decimal",
        "`point` (default) or `comma`: the decimal mark of the lists and of the answer.",
        type="string",
        enum=["point", "comma"],
        default="point",
    ),
    _parameter(
        "folds",
        "Folds of the cross-validation (`tuning.folds`).",
        type="integer",
        default=5,
        minimum=2,
        maximum=50,
    ),
    _parameter(
        "scheme",
        "Cross-validation scheme (`tuning.scheme`): `kfold`, `loo` or `gcv`; with `t`, also "
        "`window` or `blocks`.",
        type="string",
        enum=list(SCHEMES),
        default="kfold",
    ),
    _parameter(
        "t",
        "Optional: where each row lies in time, one number per `x` value (a spreadsheet's "
        "date serial numbers will do): `tuning.order_by`. The dependence of the residuals is "
        "then measured along `t`, and `scheme` may be `window` or `blocks`. " + _LIST,
        "1,2,3,4,5,6,7,8",
    ),
    _parameter(
        "gap",
        "With `scheme` `window` or `blocks`: steps of `t` left out on each side "
        "(`tuning.gap`); default chosen from the data.",
        type="integer",
        minimum=0,
    ),
    _parameter(
        "w",
        "Optional: row weights, one per `x` value (`weight_by`): numbers 0 or more, read as "
        "precision weights (a row of weight w has noise variance sigma^2 / w); a row of weight "
        "0 is left out. The intervals at `at` are for a new observation of weight 1. " + _LIST,
        "1,1,2,2,1,1,3,1",
    ),
]


@bp.get("/cell")
@operation(
    tags=["cell"],
    parameters=_PARAMETERS,
    responses={
        "200": {
            "description": "The asked part of each prediction as plain text: the number alone "
            "for one `at` value, one line per value for a list (lines separated by a line "
            "feed, no line feed after the last). Numbers in the shortest form that reads back "
            "to the same double, with the decimal mark of `decimal`; an empty line where the "
            "figure is undefined (an unbounded interval). Data-set-level warning codes go in "
            "the `Nearwise-Warnings` header.",
            "headers": {
                "Nearwise-Warnings": {
                    "description": "Data-set-level warning codes, comma-separated.",
                    "schema": {"type": "string"},
                },
                "Nearwise-Method": {
                    "description": "The method used (the default when none was named).",
                    "schema": {"type": "string"},
                },
            },
            "content": {"text/plain": {"schema": {"type": "string"}, "example": "4.48"}},
        },
        **problems(400, 401, 406, 408, 413, 414, 422, 431, 503),
    },
)
def cell() -> Response:
    """Predict from lists in the query string; answer plain text (for spreadsheet formulas).

    The same fit as POST /v1/predict with `train` = the columns `x`, `y`, `query` = the
    column `x` holding `at`, and the default tuning (5-fold, seed 0, one-standard-error
    rule) and interval (`cv_plus`). Example:
    `GET /v1/cell?x=1,2,3,4,5,6,7,8&y=1.1,1.9,3.2,3.9,5.1,6.2,6.8,8.1&at=4.5,9`.
    """
    negotiate(["text/plain"])
    settings = current_app.extensions["nearwise"]
    args = _arguments()
    comma = args.get("decimal", "point") == "comma"
    limits = Limits(
        settings.max_rows, settings.max_columns, settings.max_cells, settings.max_query_rows
    )
    train = [c for c in ("x", "y", "t", "w") if c in ("x", "y") or c in args]
    x = _numbers("x", args, comma, limits, train)
    y = _numbers("y", args, comma, limits, train)
    at = _numbers("at", args, comma, limits, ["x"])
    if len(x) != len(y):
        raise _bad(
            f"`x` has {len(x)} values and `y` has {len(y)}; give one y per x.",
            "y",
            f"{len(y)} values for {len(x)} x values",
        )
    t = _numbers("t", args, comma, limits, train) if "t" in args else None
    if t is not None and len(t) != len(x):
        raise _bad(
            f"`x` has {len(x)} values and `t` has {len(t)}; give one t per x.",
            "t",
            f"{len(t)} values for {len(x)} x values",
        )
    part = args.get("part", "value")
    if part not in PARTS:
        raise _bad(
            f"`part` is one of {', '.join(PARTS)}; got {shown(part, quoted=True)}.",
            "part",
            "unknown part",
        )
    w = _numbers("w", args, comma, limits, train) if "w" in args else None
    if w is not None and len(w) != len(x):
        raise _bad(
            f"`x` has {len(x)} values and `w` has {len(w)}; give one weight per x.",
            "w",
            f"{len(w)} values for {len(x)} x values",
        )
    method = args.get("method") or _default_method(x, y)
    columns, cells = ("x", "y"), [x, y]
    tuning = _tuning(args)
    if t is not None:
        columns, cells = ("x", "y", "t"), [x, y, t]
        tuning["order_by"] = "t"
    if w is not None:
        columns, cells = (*columns, "w"), [*cells, w]
    job = Job(
        method=method,
        methods=None,
        train=Table("train", columns, np.column_stack(cells).reshape(len(x), len(columns))),
        target="y",
        features=["x"],
        query=Table("query", ("x",), at.reshape(-1, 1)),
        params={},
        grid={},
        tuning=TuningSpec(**tuning),
        interval=IntervalSpec(**_interval(args)),
        time_budget_s=settings.time_budget_s,
        caps=caps(settings),
        weight_by=None if w is None else "w",
    )
    try:  # the slot is taken only now: the arguments are read and checked
        with fit_slot(), metrics.fitting(method, len(x)):
            result = pipeline.run(job)
    except NearwiseError as exc:
        raise _cell_problem(exc, columns) from None
    rows = prediction_rows(result.predictions)
    lines = [_line(row, part, comma) for row in rows]
    resp = Response("\n".join(lines), content_type=TEXT)
    codes = list(dict.fromkeys(n.code for n in result.warnings if not n.rows))
    if codes:
        resp.headers["Nearwise-Warnings"] = ", ".join(codes)
    resp.headers["Nearwise-Method"] = result.method
    return resp


def _arguments() -> dict[str, str]:
    unknown = [k for k in request.args if k not in PARAMETERS]
    if unknown:
        raise Problem(
            422,
            f"Unknown parameter `{shown(unknown[0])}`; /v1/cell reads {', '.join(PARAMETERS)}.",
            [{"parameter": shown(k), "message": "unknown parameter"} for k in unknown],
            code="unknown_name",
        )
    for name in request.args:
        if len(request.args.getlist(name)) > 1:
            raise _bad(f"`{name}` is given more than once; give it once.", name, "given twice")
    args = request.args.to_dict()
    for name in ("x", "y", "at"):
        if name not in args:
            raise _bad(
                f"`{name}` is missing: /v1/cell needs x, y (the data) and at (where to predict).",
                name,
                "Missing data for required field.",
            )
    decimal = args.get("decimal")
    if decimal is not None:
        if decimal.lower() not in DECIMALS:
            raise _bad("`decimal` is `point` or `comma`.", "decimal", "point or comma")
        args["decimal"] = "comma" if DECIMALS[decimal.lower()] == "," else "point"
    return args


def _numbers(
    name: str, args: dict[str, str], comma: bool, limits: Limits, columns: list[str]
) -> np.ndarray:
    """A list parameter -> floats (NaN for an empty item). Never guesses a decimal comma.

    ``columns`` are those of the table the list is a column of (``at``: the query table), for
    the row and cell limits its item count is checked against before any item is read."""
    text = args[name]
    if comma:
        sep = ";"
    elif ";" in text:
        if "," in text:
            raise Problem(
                400,
                f"`{name}` holds both semicolons and commas ({shown(text, quoted=True)}): if the "
                "commas are decimal marks (1,5;2,5), set `decimal=comma`; otherwise separate "
                "the values with commas or semicolons alone.",
                [{"parameter": name, "message": "commas and semicolons; set decimal"}],
                code="csv_format_undeclared",
            )
        sep = ";"
    else:
        sep = ","
    table = "query" if name == "at" else "train"
    count, most = text.count(sep) + 1, most_rows(table, columns, limits)
    if count > most:
        var = "NEARWISE_MAX_QUERY_ROWS" if table == "query" else "NEARWISE_MAX_ROWS"
        if most < row_limit(table, limits):
            var += ", NEARWISE_MAX_CELLS"
        raise Problem(
            413,
            f"`{name}` has {count} values; at most {most} are allowed ({var}).",
            [{"parameter": name, "message": "too long"}],
            code="table_too_large",
        )
    items = text.split(sep)
    out = np.empty(len(items))
    for i, item in enumerate(items):
        item = item.strip()
        if comma and "." in item and _NUMBER.fullmatch(item.replace(",", "")):
            raise Problem(
                400,
                f"`{name}` item {i + 1} is {shown(item, quoted=True)}, a number with a point while "
                "`decimal=comma` is set: remove thousands separators, or drop `decimal=comma`.",
                [{"parameter": name, "message": f"item {i + 1}: point with decimal=comma"}],
                code="csv_format_undeclared",
            )
        number = item.replace(",", ".") if comma else item
        if not number:
            out[i] = np.nan
        elif _NUMBER.fullmatch(number):
            out[i] = float(number)
            if not np.isfinite(out[i]):
                raise _bad(f"`{name}` item {i + 1} is too large for a double.", name, "too large")
        else:
            raise _bad(
                f"`{name}` item {i + 1} is {shown(item, quoted=True)}, not a number. {_LIST}",
                name,
                f"item {i + 1}: not a number",
            )
    return out


def _default_method(x: np.ndarray, y: np.ndarray) -> str:
    usable = x[np.isfinite(x) & np.isfinite(y)]
    return "spline" if np.unique(usable).size >= SPLINE_FROM else "linear"


def _tuning(args: dict[str, str]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if "folds" in args:
        try:
            out["folds"] = int(args["folds"])
        except ValueError:
            raise _bad(
                "`folds` is a whole number from 2 to 50.", "folds", "not an integer"
            ) from None
        if not 2 <= out["folds"] <= 50:
            raise _bad("`folds` is a whole number from 2 to 50.", "folds", "out of range")
    if "gap" in args:
        try:
            out["gap"] = int(args["gap"])
        except ValueError:
            raise _bad("`gap` is a whole number, 0 or more.", "gap", "not an integer") from None
        if out["gap"] < 0:
            raise _bad("`gap` is a whole number, 0 or more.", "gap", "negative")
    if "scheme" in args:
        if args["scheme"] not in SCHEMES:
            raise _bad(f"`scheme` is one of {', '.join(SCHEMES)}.", "scheme", "unknown scheme")
        out["scheme"] = args["scheme"]
    return out


def _interval(args: dict[str, str]) -> dict[str, Any]:
    if "level" not in args:
        return {}
    text = args["level"]
    if args.get("decimal") == "comma":
        text = text.replace(",", ".")
    try:
        level = float(text) if _NUMBER.fullmatch(text) else float("nan")
    except ValueError:
        level = float("nan")
    if not 0 < level < 1:
        raise _bad("`level` is a number between 0 and 1, e.g. 0.9.", "level", "not in (0, 1)")
    return {"level": level}


def _line(row: dict[str, Any], part: str, comma: bool) -> str:
    if part == "flags":
        return " ".join(row["flags"])
    value = row.get(part)
    if value is None:
        return ""
    text = repr(float(value))
    return text.replace(".", ",") if comma else text


_RENAMES = {"train": {0: "x", 1: "y", 2: "t"}, "query": {0: "at"}}
_TUNING_NAMES = {"order_by": "t", "weight_by": "w"}


def _rename(where: Where, train: tuple[str, ...] | None = None) -> Where:
    """A core error's place, named by the cell parameter at fault (lists count from 1);
    ``train`` names the train table's columns in order (default: x, y, t)."""
    path = where.path
    if path and path[0] in _RENAMES:
        if len(path) >= 4 and path[1] == "rows":
            names = dict(enumerate(train)) if train and path[0] == "train" else None
            name = (names or _RENAMES[str(path[0])]).get(int(path[3]), str(path[0]))
            return Where((name,), f"item {int(path[2]) + 1}: {where.message}")
        if len(path) >= 3 and path[1] == "rows":
            names = "x, y" if path[0] == "train" else "at"
            return Where((names,), f"item {int(path[2]) + 1}: {where.message}")
        return Where(("x, y" if path[0] == "train" else "at",), where.message)
    if len(path) >= 2 and path[0] in ("tuning", "interval"):
        return Where((_TUNING_NAMES.get(str(path[1]), str(path[1])),), where.message)
    if path and path[0] == "weight_by":
        return Where(("w",), where.message)
    return where


def _cell_problem(exc: NearwiseError, train: tuple[str, ...] | None = None) -> Problem:
    """A core error with its places named by the cell parameters (``tuning.folds`` is
    ``folds``), as the same status and code predict would answer."""
    entries = []
    for w in exc.where:
        renamed = _rename(w, train)
        entries.append({"parameter": str(renamed.path[0]), "message": renamed.message})
    detail = exc.detail
    if "`tuning." in detail or "`interval." in detail:
        detail += " Here `tuning.folds`, `tuning.scheme`, `tuning.gap`, `tuning.order_by` and "
        detail += "`interval.level` are the parameters `folds`, `scheme`, `gap`, `t` and `level`."
    over = isinstance(exc, OverBudget)
    headers = {"Retry-After": str(RETRY_AFTER_S)} if over else {}
    status = 503 if over else 422
    return Problem(status, detail, entries, code=exc.code, headers=headers)


def _bad(detail: str, name: str, message: str) -> Problem:
    return Problem(422, detail, [{"parameter": name, "message": message}], code="invalid_value")
