"""run(job): check -> tune -> fit -> predict, returning a frozen result."""

from __future__ import annotations

from typing import Any

import numpy as np

from nearwise.core import tuning
from nearwise.core.budget import Deadline
from nearwise.core.data import prepare
from nearwise.core.errors import BadCell, NotApplicable, UnknownName, Where
from nearwise.core.methods import METHODS, Method
from nearwise.core.results import (
    FitReport,
    Notice,
    PathEntry,
    Predictions,
    PredictResult,
    TuningReport,
)
from nearwise.core.spec import Job


def get_method(name: str) -> Method:
    if name not in METHODS:
        raise UnknownName(
            f"unknown method {name!r}; choose one of {', '.join(METHODS)}.",
            [Where(("method",), "unknown method")],
        )
    return METHODS[name]


def _finite(v: float) -> float | None:
    return float(v) if np.isfinite(v) else None


def _error(resid: np.ndarray, metric: str) -> float:
    return float(np.sqrt(np.mean(resid**2)) if metric == "rmse" else np.mean(np.abs(resid)))


def run(job: Job) -> PredictResult:
    """Fit ``job.method`` to the training table, tune it by cross-validation, and predict."""
    deadline = Deadline(job.time_budget_s)
    method = get_method(job.method)
    tuning.check_spec(job.tuning)
    if job.interval is not None:
        raise NotApplicable(
            "prediction intervals are not offered by this version of the service; leave out "
            "`interval`.",
            [Where(("interval",), "not offered yet")],
        )
    if job.tuning.scheme not in method.schemes:
        raise NotApplicable(
            f"`tuning.scheme` {job.tuning.scheme} does not apply to {method.name}; use one of "
            f"{', '.join(method.schemes)}.",
            [Where(("tuning", "scheme"), f"not available for {method.name}")],
        )
    settings = method.settings(job.params)
    grid = method.check_grid(job.grid, settings)
    data = prepare(job.train, job.target, job.features, job.query, job.tuning.group_by)
    # Work on the rows sorted by content, so that no answer depends on the order they came in.
    canon = np.lexsort((data.y, *data.X.T[::-1]))
    X, y = data.X[canon], data.y[canon]
    groups = None if data.groups is None else data.groups[canon]
    folds = tuning.make_folds(X.shape[0], job.tuning, groups, deadline.check)
    work: dict[str, Any] = {}
    values = method.candidates(X, y, folds, settings, grid, work)
    deadline.check()
    path = method.path(X, y, folds, settings, values, work)
    deadline.check()
    scores = tuning.score(y, path.oof, folds, job.tuning.metric, path.gcv_scale)
    best, chosen = tuning.choose(scores.error, scores.error_se, job.tuning.rule)
    value = values[chosen]
    model = method.fit(X, y, settings, value, work)

    notices: list[Notice] = []
    if data.rows_dropped:
        notices.append(
            Notice(
                "target_missing",
                f"{data.rows_dropped} training row(s) have no value for `{data.target}` and were "
                "left out of the fit; they still get predictions.",
                tuple(int(i) for i in np.flatnonzero(np.isnan(data.y_all))),
            )
        )
    if len(values) > 1 and chosen in (0, len(values) - 1) and not method.is_bound(value, folds):
        end = "simplest" if chosen == 0 else "most flexible"
        notices.append(
            Notice(
                "tuning_at_edge",
                f"the chosen `{method.tuned}` = {value} is the {end} candidate in the grid; the "
                "best value may lie beyond it. Widen the grid in that direction.",
            )
        )
    notices.extend(model.notices())
    if not np.all(np.isfinite(path.df)):
        notices.append(
            Notice(
                "df_unavailable",
                "the effective degrees of freedom could not be computed stably for some "
                "candidates (nearly coincident x values); they are reported as null.",
            )
        )

    where = data.X_query if data.X_query is not None else data.X_all
    with np.errstate(over="ignore", invalid="ignore"):
        value_at = model.predict(where)
        summary = model.summary(data.features)
    _check_predictions(value_at, "query" if data.X_query is not None else "train")
    residual = None if data.X_query is not None else data.y_all - value_at
    params: dict[str, Any] = {
        **{k: v for k, v in settings.items() if v is not None},
        method.tuned: value,
    }
    params.update(method_extra_params(method, settings, value, X.shape[1]))
    report = TuningReport(
        scheme=job.tuning.scheme,
        folds=folds.n_folds if folds.scheme != "gcv" else None,
        repeats=folds.repeats,
        seed=job.tuning.seed,
        rule=job.tuning.rule,
        metric=job.tuning.metric,
        group_by=job.tuning.group_by,
        best={method.tuned: values[best]},
        path=tuple(
            PathEntry(
                {method.tuned: v},
                _finite(scores.error[c]),
                _finite(scores.error_se[c]),
                _finite(path.df[c]),
            )
            for c, v in enumerate(values)
        ),
    )
    resid = scores.residual[chosen]
    tss = float(np.sum((y - y.mean()) ** 2)) * resid.shape[0]
    fit = FitReport(
        n_train=int(X.shape[0]),
        rows_dropped=data.rows_dropped,
        cv_error=float(scores.error[chosen]),
        cv_error_se=float(scores.error_se[chosen]),
        cv_r2=(1.0 - float(np.sum(resid**2)) / tss) if tss > 0 else None,
        train_error=_error(y - model.fitted, job.tuning.metric),
        df=model.df,
    )
    return PredictResult(
        method=method.name,
        target=data.target,
        features=data.features,
        params=params,
        tuning=report,
        fit=fit,
        model=summary,
        predictions=Predictions(
            value=value_at, residual=residual, flags=tuple(() for _ in range(value_at.shape[0]))
        ),
        warnings=tuple(notices),
    )


def _check_predictions(value: np.ndarray, table: str) -> None:
    bad = np.flatnonzero(~np.isfinite(value))
    if bad.size:
        raise BadCell(
            f"the prediction at {table} row {bad[0]} is too large to represent: the row lies "
            "extremely far outside the training data. Rescale the features or remove the row.",
            [Where((table, "rows", int(i)), "prediction overflows") for i in bad[:20]],
        )


def method_extra_params(method: Method, settings, value, n_features: int) -> dict[str, Any]:
    """Parameters whose default depends on the chosen value or the data, made explicit."""
    if method.name == "linear":
        inter = settings.get("interactions")
        return {"interactions": (int(value) > 1) if inter is None else inter}
    if method.name == "spline" and n_features > 1:
        return {"scale": settings.get("scale") or "standard"}
    return {}
