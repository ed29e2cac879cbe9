"""Request, response and problem schemas. Unknown fields are refused everywhere.

The request schemas check the envelope only (types, required fields, name lengths, grid
size); the core checks method names, parameter values and the numbers. The size bounds the
document states (``maxItems`` of rows, columns, query rows, grid values and methods) are those of
the default :class:`Settings`, the ones the document is generated with; the service checks
the limits in force (table sizes give a 413 naming the table). Response schemas document the
answers; predictions are written directly (not through marshmallow) for speed.
"""

from __future__ import annotations

from marshmallow import RAISE, Schema, fields, validate

from nearwise.core.methods import METHODS
from nearwise.core.spec import INTERVAL_KINDS, METRICS, RULES, SCHEMES
from nearwise.web.fields import Number, Rows, Scalar, StrictInteger
from nearwise.web.settings import Settings

#: The limits the document states: those of the default settings.
DEFAULTS = Settings()
MAX_GRID = DEFAULTS.max_grid
#: Longest name (column, target, feature, method, parameter) in a JSON request, in characters.
MAX_NAME = 256
#: The method names ``method`` accepts.
METHOD_NAMES = (*METHODS, "auto")


def _name(**kwargs: object) -> fields.String:
    """A column, method or parameter name: at most MAX_NAME characters."""
    return fields.String(validate=validate.Length(max=MAX_NAME), **kwargs)  # type: ignore[arg-type]


def _doc(text: str, **more: object) -> dict[str, object]:
    return {"description": text, **more}


class Strict(Schema):
    class Meta:
        unknown = RAISE


def _rows_doc(limit: int, setting: str) -> dict[str, object]:
    return _doc(
        "One array per row, one cell per column: a number, null (missing) or text (only in "
        f"the `tuning.group_by` column). At most {limit} rows ({setting}), at most "
        f"{DEFAULTS.max_columns} cells per row and {DEFAULTS.max_cells} cells in all "
        "(NEARWISE_MAX_CELLS); a larger table is a 413.",
        example=[[7.1, 812.0], [7.4, None]],
        maxItems=limit,
    )


class TableSchema(Strict):
    columns = fields.List(
        _name(),
        required=True,
        validate=validate.Length(min=1),
        metadata=_doc(
            f"Column names, unique; at most {DEFAULTS.max_columns} (NEARWISE_MAX_COLUMNS).",
            example=["wind_ms", "power_kw"],
            maxItems=DEFAULTS.max_columns,
        ),
    )
    rows = Rows(
        DEFAULTS.max_columns,
        required=True,
        metadata=_rows_doc(DEFAULTS.max_rows, "NEARWISE_MAX_ROWS"),
    )


class QueryTableSchema(TableSchema):
    """A query table: the same shape, with its own row limit."""

    rows = Rows(
        DEFAULTS.max_columns,
        required=True,
        metadata=_rows_doc(DEFAULTS.max_query_rows, "NEARWISE_MAX_QUERY_ROWS"),
    )


class TuningSchema(Strict):
    scheme = fields.String(
        validate=validate.OneOf(SCHEMES),
        metadata=_doc(
            "`kfold`, `loo`, `gcv` where the method is a linear smoother; for rows in time "
            "order (with `order_by`): `window` (each row predicted without the rows within "
            "`gap` of it: questions within the period covered) or `blocks` (`folds` "
            "contiguous blocks, `gap` left out on each side: questions about new periods).",
            default="kfold",
        ),
    )
    folds = StrictInteger(
        validate=validate.Range(2, 50),
        metadata=_doc("Folds for `kfold`, blocks for `blocks`.", default=5),
    )
    repeats = StrictInteger(
        validate=validate.Range(1, 20),
        metadata=_doc("Repetitions of `kfold` with fresh fold assignments.", default=1),
    )
    seed = StrictInteger(
        validate=validate.Range(0, 2**32 - 1),
        metadata=_doc("Seed of the fold assignment.", default=0),
    )
    rule = fields.String(
        validate=validate.OneOf(RULES),
        metadata=_doc(
            "`one_se`: the simplest candidate within one standard error of the best; `min`: the "
            "best.",
            default="one_se",
        ),
    )
    metric = fields.String(
        validate=validate.OneOf(METRICS),
        metadata=_doc("Cross-validated error measure.", default="rmse"),
    )
    group_by = _name(
        metadata=_doc(
            "A train column; rows sharing a value stay in one fold. Not a feature by default."
        )
    )
    order_by = _name(
        metadata=_doc(
            "A train column placing each row in time or sequence: numbers, or ISO 8601 dates "
            "or date-times (one form throughout). Needed by `window` and `blocks`; with any "
            "scheme it gives the order in which `tuning.dependence` is measured. Not a "
            "feature unless `features` lists it. Answers depend on its values, not on the "
            "order rows are sent in."
        )
    )
    gap = StrictInteger(
        validate=validate.Range(0, 1_000_000),
        metadata=_doc(
            "`window` and `blocks`: steps of `order_by` (distinct values) left out of "
            "training on each side of a held-out row or block. Default: chosen from the data "
            "(a pilot fit's AR(1) estimate phi of the noise's lag-1 correlation; the last lag h "
            "with phi^h >= 0.1, at most a tenth of the steps) and reported with its rule."
        ),
    )


class IntervalSchema(Strict):
    level = Number(
        validate=validate.Range(0, 1, min_inclusive=False, max_inclusive=False),
        metadata=_doc(
            "Coverage of the prediction intervals.",
            default=0.9,
            exclusiveMinimum=0,
            exclusiveMaximum=1,
        ),
    )
    kind = fields.String(
        validate=validate.OneOf(INTERVAL_KINDS),
        metadata=_doc("`cv_plus`, or `model` where the method has one.", default="cv_plus"),
    )
    adaptive = fields.Boolean(
        metadata=_doc(
            "Scale `cv_plus` intervals by the local spread of the residuals, for noise that "
            "varies with the features.",
            default=False,
        )
    )


class _JobFields(Strict):
    """The fields predict and compare share, except the tables."""

    target = _name(required=True, metadata=_doc("Column of `train` to predict."))
    features = fields.List(
        _name(),
        validate=validate.Length(min=1),
        metadata=_doc(
            "Input columns; default: all but `target` and `tuning.group_by`.",
            maxItems=DEFAULTS.max_columns,
        ),
    )
    params = fields.Dict(
        keys=_name(),
        values=Scalar(MAX_NAME),
        metadata=_doc("Fixed parameter values; a fixed parameter is not tuned.", example={"k": 10}),
    )
    grid = fields.Dict(
        keys=_name(),
        # The length is checked against the live NEARWISE_MAX_GRID by the core (422
        # over_limit); the document states the default.
        values=fields.List(
            Number(), validate=validate.Length(min=1), metadata={"maxItems": MAX_GRID}
        ),
        metadata=_doc(
            f"Candidate values per tunable parameter (at most {MAX_GRID} each, NEARWISE_MAX_GRID).",
            example={"k": [1, 3, 5, 9, 15]},
        ),
    )
    tuning = fields.Nested(TuningSchema, metadata=_doc("Cross-validation settings."))
    interval = fields.Nested(IntervalSchema, metadata=_doc("Prediction interval settings."))
    weight_by = _name(
        metadata=_doc(
            "A train column of row weights: numbers 0 or more, read as precision weights "
            "(a row of weight w has noise variance sigma^2 / w, as in weighted least squares). "
            "Every method fits the weighted criterion; cross-validated errors are weighted "
            "means; a row of weight 0 is left out (counted in `fit.rows_zero_weight`). Not a "
            "feature. A query table holding this column gives its rows' weights for the "
            "intervals (positive); otherwise a predicted row has weight 1.",
            example="n_readings",
        )
    )


class PredictFields(_JobFields):
    """Every predict field except the tables (the form-field view of a request)."""

    method = fields.String(
        required=True,
        validate=validate.Length(max=MAX_NAME),
        metadata=_doc(
            "`knn`, `linear`, `spline` or `additive`, or `auto` (compare them on the same "
            "folds and use the recommended one); see GET /v1/methods.",
            example="spline",
            enum=list(METHOD_NAMES),
        ),
    )


class CompareFields(_JobFields):
    """Every compare field except the tables."""

    methods = fields.List(
        fields.String(validate=validate.Length(max=MAX_NAME), metadata={"enum": list(METHODS)}),
        validate=validate.Length(min=1),
        metadata=_doc(
            "Methods to compare, each once; default: every method that applies to the number "
            f"of features. At most {DEFAULTS.max_methods} (NEARWISE_MAX_METHODS).",
            example=["knn", "linear", "spline", "additive"],
            maxItems=DEFAULTS.max_methods,
            uniqueItems=True,
        ),
    )


class _Tables(Strict):
    train = fields.Nested(TableSchema, required=True, metadata=_doc("The training table."))
    query = fields.Nested(
        QueryTableSchema,
        metadata=_doc(
            "Rows to predict at; it holds at least the feature columns. Absent: predict at the "
            "training rows (fitted values, with `residual`)."
        ),
    )


class CompareRequest(CompareFields, _Tables):
    """The compare request as JSON."""


class PredictRequest(PredictFields, _Tables):
    """The predict request as JSON."""
