"""Request, response and problem schemas. Unknown fields are refused everywhere.

The request schemas check the envelope only (types, required fields, size caps); the core
checks method names, parameter values and the numbers. Response schemas document the answers;
predictions are written directly (not through marshmallow) for speed.
"""

from __future__ import annotations

from marshmallow import RAISE, Schema, fields, validate

from nearwise.core.spec import INTERVAL_KINDS, METRICS, RULES, SCHEMES
from nearwise.web.fields import Number, Rows, Scalar, StrictInteger

MAX_GRID = 200


def _doc(text: str, **more: object) -> dict[str, object]:
    return {"description": text, **more}


class Strict(Schema):
    class Meta:
        unknown = RAISE


class TableSchema(Strict):
    columns = fields.List(
        fields.String(),
        required=True,
        validate=validate.Length(min=1),
        metadata=_doc("Column names, unique.", example=["wind_ms", "power_kw"]),
    )
    rows = Rows(
        required=True,
        metadata=_doc(
            "One array per row, one cell per column: a number, null (missing) or text (only in "
            "the `tuning.group_by` column).",
            example=[[7.1, 812.0], [7.4, None]],
        ),
    )


class TuningSchema(Strict):
    scheme = fields.String(
        validate=validate.OneOf(SCHEMES),
        metadata=_doc(
            "`kfold`, `loo`, or `gcv` where the method is a linear smoother.", default="kfold"
        ),
    )
    folds = StrictInteger(
        validate=validate.Range(2, 50), metadata=_doc("Folds for `kfold`.", default=5)
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
    group_by = fields.String(
        metadata=_doc(
            "A train column; rows sharing a value stay in one fold. Not a feature by default."
        )
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

    target = fields.String(required=True, metadata=_doc("Column of `train` to predict."))
    features = fields.List(
        fields.String(),
        validate=validate.Length(min=1),
        metadata=_doc("Input columns; default: all but `target` and `tuning.group_by`."),
    )
    params = fields.Dict(
        keys=fields.String(),
        values=Scalar(),
        metadata=_doc("Fixed parameter values; a fixed parameter is not tuned.", example={"k": 10}),
    )
    grid = fields.Dict(
        keys=fields.String(),
        values=fields.List(Number(), validate=validate.Length(1, MAX_GRID)),
        metadata=_doc(
            f"Candidate values per tunable parameter (at most {MAX_GRID} each).",
            example={"k": [1, 3, 5, 9, 15]},
        ),
    )
    tuning = fields.Nested(TuningSchema, metadata=_doc("Cross-validation settings."))
    interval = fields.Nested(IntervalSchema, metadata=_doc("Prediction interval settings."))


class PredictFields(_JobFields):
    """Every predict field except the tables (the form-field view of a request)."""

    method = fields.String(
        required=True,
        metadata=_doc(
            "`knn`, `linear`, `spline` or `additive`, or `auto` (compare them on the same "
            "folds and use the recommended one); see GET /v1/methods.",
            example="spline",
        ),
    )


class CompareFields(_JobFields):
    """Every compare field except the tables."""

    methods = fields.List(
        fields.String(),
        validate=validate.Length(1, 10),
        metadata=_doc(
            "Methods to compare; default: every method that applies to the number of features.",
            example=["knn", "linear", "spline", "additive"],
        ),
    )


class _Tables(Strict):
    train = fields.Nested(TableSchema, required=True, metadata=_doc("The training table."))
    query = fields.Nested(
        TableSchema,
        metadata=_doc(
            "Rows to predict at; it holds at least the feature columns. Absent: predict at the "
            "training rows (fitted values, with `residual`)."
        ),
    )


class CompareRequest(CompareFields, _Tables):
    """The compare request as JSON."""


class PredictRequest(PredictFields):
    train = fields.Nested(TableSchema, required=True, metadata=_doc("The training table."))
    query = fields.Nested(
        TableSchema,
        metadata=_doc(
            "Rows to predict at; it holds at least the feature columns. Absent: predict at the "
            "training rows (fitted values, with `residual`)."
        ),
    )
