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
from nearwise.web.csv_cells import MAX_TOKEN_CHARS, MAX_TOKENS
from nearwise.web.fields import Number, Rows, Scalar, StrictInteger
from nearwise.web.settings import Settings
from nearwise.web.table_shapes import Index, TableField

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
        "the `categorical`, `tuning.group_by` and `tuning.order_by` columns). "
        f"At most {limit} rows ({setting}), at most "
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


def _index_doc(limit: int) -> dict[str, object]:
    return _doc(
        "Row labels (any values), one per row of `data`; not read. May be left out.",
        type="array",
        maxItems=limit,
    )


class SplitTableSchema(TableSchema):
    """pandas' `split` shape (`to_json(orient="split")`): `data` holds the rows."""

    class Meta(Strict.Meta):
        title = "split"
        exclude = ("rows",)  # `data` holds them

    index = Index(metadata=_index_doc(DEFAULTS.max_rows))
    data = Rows(
        DEFAULTS.max_columns,
        required=True,
        metadata=_rows_doc(DEFAULTS.max_rows, "NEARWISE_MAX_ROWS"),
    )


class QuerySplitTableSchema(SplitTableSchema):
    """A query table in the split shape, with the query's row limit."""

    index = Index(metadata=_index_doc(DEFAULTS.max_query_rows))
    data = Rows(
        DEFAULTS.max_columns,
        required=True,
        metadata=_rows_doc(DEFAULTS.max_query_rows, "NEARWISE_MAX_QUERY_ROWS"),
    )


def _table(rows: type[Schema], split: type[Schema], limit: int, **kwargs: object) -> TableField:
    """A table field: `{columns, rows}`, a list of row objects or the split shape."""
    bounds = {"max_rows": limit, "max_columns": DEFAULTS.max_columns, "max_name": MAX_NAME}
    return TableField(rows, split, **bounds, **kwargs)  # type: ignore[arg-type]


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


class CsvFields(Strict):
    """Fields on how CSV tables are read: form fields and query-string parameters only (a
    JSON body holding one is a 422: JSON tables mark a missing cell with null)."""

    na = fields.List(
        fields.String(validate=validate.Length(max=MAX_TOKEN_CHARS)),
        validate=validate.Length(max=MAX_TOKENS),
        metadata=_doc(
            "CSV tables only: the texts read as a missing value (like an empty cell or JSON "
            "null), replacing the default set, which is pandas read_csv's: `NA`, `N/A`, `n/a`, "
            "`#N/A`, `#N/A N/A`, `#NA`, `NULL`, `null`, `None`, `<NA>`, `NaN`, `-NaN`, `nan`, "
            "`-nan`, `1.#IND`, `-1.#IND`, `1.#QNAN`, `-1.#QNAN`. A token matches a whole cell "
            "exactly (case and spaces count); an empty cell is always missing, so `na=` (one "
            "empty item) leaves only empty cells missing. Comma-separated, repeated, or a "
            f"JSON array (for tokens holding commas); at most {MAX_TOKENS}.",
            example=["NA", "-999"],
            maxItems=MAX_TOKENS,
        ),
    )


class _JobFields(CsvFields):
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
    categorical = fields.List(
        _name(),
        validate=validate.Length(min=1),
        metadata=_doc(
            "Feature columns holding categories (text, or numbers read as names: 1, 1.0 and "
            '"1" are the level `1`). Levels come from the usable training rows, sorted as '
            "numbers when all are numbers, else as text; at most 200 per column, and rows x "
            "(numeric features + levels) within NEARWISE_MAX_CELLS. linear and additive use "
            "treatment coding (a 0/1 term `column[level]` per level but the reference); knn "
            "adds gamma^2 (`params.mismatch`, default 1) to the squared distance per column "
            "that differs; spline refuses them. A query row with a level not in training is "
            "answered with the flag `unseen_level` and null value and bounds. A missing level "
            "is refused. Form fields: comma-separated or repeated.",
            example=["dock"],
            maxItems=DEFAULTS.max_columns,
        ),
    )
    categorical_reference = fields.Dict(
        keys=_name(),
        values=Scalar(MAX_NAME),
        metadata=_doc(
            "Reference level per categorical column (the level the others are compared "
            "with); default: the first level in sorted order. Form fields: "
            "`categorical_reference.dock=B`.",
            example={"dock": "B"},
        ),
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
    train = _table(
        TableSchema,
        SplitTableSchema,
        DEFAULTS.max_rows,
        required=True,
        metadata=_doc("The training table."),
    )
    query = _table(
        QueryTableSchema,
        QuerySplitTableSchema,
        DEFAULTS.max_query_rows,
        metadata=_doc(
            "Rows to predict at; it holds at least the feature columns. Absent: predict at the "
            "training rows (fitted values, with `residual`)."
        ),
    )


class CompareRequest(CompareFields, _Tables):
    """The compare request as JSON."""

    class Meta(Strict.Meta):
        exclude = ("na",)  # CSV tables only


class PredictRequest(PredictFields, _Tables):
    """The predict request as JSON."""

    class Meta(Strict.Meta):
        exclude = ("na",)  # CSV tables only
