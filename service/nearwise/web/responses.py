"""Schemas of the answers, for the OpenAPI document (the views write the JSON directly)."""

from __future__ import annotations

from marshmallow import fields, validate

from nearwise.core.catalogue import warning_codes
from nearwise.web.fields import Scalar
from nearwise.web.problem_types import TYPES
from nearwise.web.schemas import Strict, _doc


def _num(text: str, nullable: bool = False) -> fields.Float:
    return fields.Float(allow_none=nullable, metadata=_doc(text))


class PathEntrySchema(Strict):
    params = fields.Dict(keys=fields.String(), values=Scalar(), metadata=_doc("The candidate."))
    error = _num("Cross-validated error (the tuning metric).")
    error_se = _num("Standard error of `error` across folds.", nullable=True)
    df = _num("Effective degrees of freedom, where defined.", nullable=True)


class CompareTuningSchema(Strict):
    """The cross-validation settings (shared by every method in a comparison)."""

    scheme = fields.String()
    folds = fields.Integer(allow_none=True, metadata=_doc("Null for `loo` and `gcv`."))
    repeats = fields.Integer()
    seed = fields.Integer()
    rule = fields.String()
    metric = fields.String()
    group_by = fields.String(allow_none=True)
    order_by = fields.String(allow_none=True, metadata=_doc("The column placing rows in time."))
    gap = fields.Integer(
        allow_none=True,
        metadata=_doc("`window` and `blocks`: the steps left out on each side (in force)."),
    )


class DependenceSchema(Strict):
    """Serial dependence of the out-of-fold residuals of the chosen fit."""

    lag1 = _num("Lag-1 autocorrelation (sample ACF, divisor n).")
    ljung_box_p = _num("Ljung-Box p-value over `ljung_box_lags` lags.")
    ljung_box_lags = fields.Integer(metadata=_doc("min(10, steps // 5)."))
    effective_rows = _num("n (1 - rho) / (1 + rho), rho = max(lag1, 0).")
    order = fields.String(
        metadata=_doc("`order_by` (residuals averaged per step) or `arrival` (as sent).")
    )
    noise_lag1 = _num(
        "A pilot fit's estimate of the noise's own lag-1 correlation (AR(1), from first "
        "differences of its out-of-fold residuals on contiguous blocks), in the same order; "
        "null when the series is too short for the pilot.",
        nullable=True,
    )


class TuningReportSchema(CompareTuningSchema):
    gap_source = fields.String(
        allow_none=True, metadata=_doc("`caller` or `data` (the default rule); null without gap.")
    )
    gap_rule = fields.String(
        allow_none=True,
        metadata=_doc("How the gap was set: the pilot's estimate and the rule, or the cap."),
    )
    dependence = fields.Nested(
        DependenceSchema,
        allow_none=True,
        metadata=_doc(
            "Serial dependence of the out-of-fold residuals: along `order_by` when given, "
            "else in the order rows arrived; null with fewer than 10 steps (or for `gcv` in "
            "compare)."
        ),
    )
    best = fields.Dict(
        keys=fields.String(), values=Scalar(), metadata=_doc("The minimum-error candidate.")
    )
    path = fields.List(
        fields.Nested(PathEntrySchema), metadata=_doc("Every candidate, simplest first.")
    )


class FitReportSchema(Strict):
    n_train = fields.Integer(metadata=_doc("Training rows used."))
    rows_dropped = fields.Integer(metadata=_doc("Training rows dropped: missing target."))
    cv_error = _num("Cross-validated error of the chosen parameters.", nullable=True)
    cv_error_se = _num("Its standard error.", nullable=True)
    cv_r2 = _num("1 - cross-validated MSE / variance of the target.", nullable=True)
    train_error = _num("Error on the training rows.", nullable=True)
    df = _num("Effective degrees of freedom of the final fit.", nullable=True)
    rows_zero_weight = fields.Integer(
        metadata=_doc("Training rows of weight 0 in the `weight_by` column, left out of the fit.")
    )
    weight_by = fields.String(
        allow_none=True,
        metadata=_doc(
            "The column of row weights (null: every row weighs 1). With weights, `cv_error`, "
            "`cv_r2` and `train_error` are weighted means over the rows."
        ),
    )


class IntervalReportSchema(Strict):
    level = fields.Float(metadata=_doc("Coverage asked for."))
    kind = fields.String(metadata=_doc("`cv_plus` or `model`."))
    adaptive = fields.Boolean(metadata=_doc("Scaled by the local spread of the residuals."))
    construction = fields.String(
        metadata=_doc("`cv_plus` (K-fold), `jackknife_plus` (loo and gcv) or `model`.")
    )
    guarantee = fields.String(metadata=_doc("The finite-sample coverage guarantee."))
    level_factor = fields.Float(
        metadata=_doc(
            "`window` and `blocks`: the factor sqrt(1 + 1/m) by which the half-widths were "
            "widened for the uncertain level of dependent noise (m: `tuning.dependence."
            "effective_rows`); absent otherwise."
        )
    )


class PredictionSchema(Strict):
    value = _num("The prediction.", nullable=True)
    residual = _num(
        "Target minus fitted value; only without a query, null where the target is missing.",
        nullable=True,
    )
    cv_residual = _num(
        "Out-of-fold residual (target minus the prediction of the model that did not see the "
        "row); only without a query, null where the target is missing.",
        nullable=True,
    )
    std_error = _num(
        "Standard error of the prediction (see GET /v1/methods for each method's formula); "
        "null where it is undefined.",
        nullable=True,
    )
    lower = _num("Lower interval bound; null where unbounded.", nullable=True)
    upper = _num("Upper interval bound; null where unbounded.", nullable=True)
    flags = fields.List(fields.String(), metadata=_doc("Warning codes concerning this row."))


class WarningSchema(Strict):
    code = fields.String(
        validate=validate.OneOf(warning_codes()),
        metadata=_doc("Stable snake_case code; each is described at GET /v1/methods."),
    )
    message = fields.String()
    rows = fields.List(fields.Integer(), metadata=_doc("Rows concerned; empty: the data set."))


class RankRowSchema(Strict):
    method = fields.String()
    params = fields.Dict(keys=fields.String(), values=Scalar(), metadata=_doc("Its parameters."))
    error = _num("Cross-validated error of the method's chosen candidate.", nullable=True)
    error_se = _num("Its standard error.", nullable=True)
    df = _num("Effective degrees of freedom (the measure of simplicity).", nullable=True)
    cv_r2 = _num("Out-of-fold R^2.", nullable=True)


class ComparisonSchema(Strict):
    ranking = fields.List(fields.Nested(RankRowSchema), metadata=_doc("Lowest error first."))
    recommended = fields.String(metadata=_doc("The method used for the predictions."))
    reason = fields.String(metadata=_doc("Why it was recommended."))


class PredictResponse(Strict):
    method = fields.String()
    target = fields.String()
    features = fields.List(fields.String())
    params = fields.Dict(
        keys=fields.String(),
        values=Scalar(),
        metadata=_doc("Every parameter in force, fixed and tuned."),
    )
    predictions = fields.List(
        fields.Nested(PredictionSchema), metadata=_doc("One per query row (or training row).")
    )
    warnings = fields.List(fields.Nested(WarningSchema))
    tuning = fields.Nested(TuningReportSchema)
    fit = fields.Nested(FitReportSchema)
    interval = fields.Nested(IntervalReportSchema)
    model = fields.Dict(metadata=_doc("Method-specific summary; see GET /v1/methods."))
    comparison = fields.Nested(
        ComparisonSchema, metadata=_doc("Only for `method: auto`: the ranking behind the choice.")
    )


class CompareResponse(Strict):
    target = fields.String()
    features = fields.List(fields.String())
    tuning = fields.Nested(CompareTuningSchema, metadata=_doc("The folds every method shared."))
    ranking = fields.List(
        fields.Nested(RankRowSchema), metadata=_doc("One row per method, lowest error first.")
    )
    paths = fields.Dict(
        keys=fields.String(),
        values=fields.Nested(TuningReportSchema),
        metadata=_doc("Each method's whole tuning path, simplest candidate first."),
    )
    recommended = fields.String(
        metadata=_doc(
            "The simplest method (fewest effective degrees of freedom) whose error is within "
            "one standard error of the best method's."
        )
    )
    reason = fields.String()
    warnings = fields.List(fields.Nested(WarningSchema))
    prediction = fields.Nested(
        PredictResponse,
        metadata=_doc("With a query: the recommended method's answer, as POST /v1/predict."),
    )


class ParameterSchema(Strict):
    name = fields.String(metadata=_doc("Parameter name, as used in `params` and `grid`."))
    type = fields.String(metadata=_doc("`integer`, `number`, `choice` or `boolean`."))
    doc = fields.String(metadata=_doc("What the parameter does."))
    tunable = fields.Boolean(metadata=_doc("True for the parameter tuned by cross-validation."))
    default = Scalar(metadata=_doc("Value used when the parameter is neither given nor tuned."))
    minimum = fields.Float(metadata=_doc("Smallest accepted value."))
    maximum = fields.Float(metadata=_doc("Largest accepted value."))
    choices = fields.List(fields.String(), metadata=_doc("Accepted values of a choice."))
    simpler = fields.String(
        metadata=_doc("`larger` or `smaller`: the direction that gives the simpler model.")
    )


class FeatureRangeSchema(Strict):
    min = fields.Integer(metadata=_doc("Fewest features the method accepts."))
    max = fields.Integer(allow_none=True, metadata=_doc("Most features; null for no limit."))


class MethodSchema(Strict):
    name = fields.String(metadata=_doc("Method name, as used in `method`."))
    summary = fields.String(metadata=_doc("What the method fits."))
    features = fields.Nested(FeatureRangeSchema, metadata=_doc("Supported dimensions."))
    parameters = fields.List(fields.Nested(ParameterSchema))
    tuned = fields.String(metadata=_doc("The parameter tuned by cross-validation."))
    default_grid = fields.String(metadata=_doc("The candidates tried when no grid is given."))
    schemes = fields.List(fields.String(), metadata=_doc("Tuning schemes the method supports."))
    interval_kinds = fields.List(
        fields.String(), metadata=_doc("Prediction interval kinds offered.")
    )
    intervals = fields.Dict(
        keys=fields.String(),
        values=fields.String(),
        metadata=_doc("How each interval kind is built, and its coverage guarantee."),
    )
    std_error = fields.String(metadata=_doc("How `std_error` is computed."))
    references = fields.List(fields.String(), metadata=_doc("Published sources of the method."))


class WarningCodeSchema(Strict):
    code = fields.String(metadata=_doc("The warning code."))
    concerns = fields.String(metadata=_doc("`rows`, `data set`, or either."))
    rule = fields.String(metadata=_doc("When it is raised, with its threshold and source."))


class MethodsResponse(Strict):
    methods = fields.List(
        fields.Nested(MethodSchema),
        metadata=_doc(
            "Per method: summary, dimensions, parameters (type, range, simpler direction), "
            "default grid, interval kinds and how `std_error` is computed."
        ),
    )
    tuning = fields.Dict(metadata=_doc("The tuning schemes, rules and metrics, with defaults."))
    warnings = fields.List(
        fields.Nested(WarningCodeSchema), metadata=_doc("Every warning code and its rule.")
    )


class StatusSchema(Strict):
    status = fields.String(metadata=_doc("`ok` or `ready`."))


class ErrorEntrySchema(Strict):
    pointer = fields.String(
        metadata=_doc(
            "RFC 6901 JSON Pointer into the request (JSON "
            "bodies and form fields: `tuning.folds` is "
            "`/tuning/folds`)."
        )
    )
    part = fields.String(metadata=_doc("CSV part at fault (`train` or `query`)."))
    line = fields.Integer(
        metadata=_doc(
            "Line of that part (the header is line 1), or of a JSON body that fails to parse."
        )
    )
    character = fields.Integer(
        metadata=_doc("Character within that line, from 1, where a JSON body fails to parse.")
    )
    column = fields.String(metadata=_doc("Column name in that part."))
    parameter = fields.String(metadata=_doc("Query-string parameter at fault."))
    header = fields.String(
        metadata=_doc(
            "Request header at fault (`Accept` for a 406, `Content-Type` or `Content-Encoding` "
            "for a 415, `Authorization` for a 401)."
        )
    )
    method = fields.String(metadata=_doc("HTTP method the endpoint does not take (405)."))
    message = fields.String(required=True)


class ProblemSchema(Strict):
    type = fields.String(metadata=_doc("`/problems/{code}`."))
    title = fields.String()
    status = fields.Integer()
    detail = fields.String(metadata=_doc("What is wrong and how to fix it."))
    code = fields.String(
        validate=validate.OneOf(sorted(TYPES)),
        metadata=_doc("Stable snake_case code; its page is `/problems/{code}`."),
    )
    errors = fields.List(fields.Nested(ErrorEntrySchema))
