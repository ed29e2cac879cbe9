"""run(job): check -> tune -> fit -> predict, returning a frozen result."""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from nearwise.core import (
    categories,
    cost,
    index_like,
    level_locality,
    locality,
    locality_cost,
    sequence,
    serial,
    tuning,
    uncertainty,
)
from nearwise.core.budget import Deadline, blocks
from nearwise.core.data import Prepared, prepare
from nearwise.core.errors import BadCell, NotApplicable, OverLimit, UnknownName, Where
from nearwise.core.methods import METHODS, Method
from nearwise.core.results import (
    FitReport,
    Notice,
    PathEntry,
    Predictions,
    PredictResult,
    TuningReport,
)
from nearwise.core.spec import ORDERED_SCHEMES, Job


def get_method(name: str) -> Method:
    if name not in METHODS:
        raise UnknownName(
            f"unknown method {name!r}; choose one of {', '.join(METHODS)} or auto.",
            [Where(("method",), "unknown method")],
        )
    return METHODS[name]


def _finite(v: float) -> float | None:
    return float(v) if np.isfinite(v) else None


def _error(resid: np.ndarray, metric: str, w: np.ndarray | None = None) -> float:
    """RMSE or MAE of ``resid``, weighted by ``w`` if given (sum w loss / sum w)."""
    loss = resid**2 if metric == "rmse" else np.abs(resid)
    mean = float(np.mean(loss) if w is None else np.sum(w * loss) / np.sum(w))
    return float(np.sqrt(mean)) if metric == "rmse" else mean


@dataclass
class Context:
    """What every method of one request shares: checked data sorted by content, and folds."""

    job: Job
    data: Prepared
    canon: np.ndarray
    X: np.ndarray
    y: np.ndarray
    folds: tuning.Folds
    deadline: Deadline
    line: sequence.Timeline | None = None  # where the working rows lie along order_by
    gap: serial.Gap | None = None  # window and blocks: the gap in force
    noise: tuple[float, int] | None = None  # the pilot's noise lag-1 estimate, steps used
    w: np.ndarray | None = None  # with weight_by: the working rows' weights (positive)


@dataclass
class Tuned:
    """One method's tuning on the shared folds."""

    method: Method
    settings: dict[str, Any]
    values: list[Any]
    path: Any
    scores: tuning.Scores
    best: int
    chosen: int
    work: dict[str, Any]

    @property
    def tuned(self) -> str:
        return self.method.tuned_for(self.settings)


def setup(job: Job) -> Context:
    """Check the request's shared options and data, sort rows by content, assign folds."""
    deadline = job.clock()
    with deadline.scope():
        return _setup(job, deadline)


def _setup(job: Job, deadline: Deadline) -> Context:
    tuning.check_spec(job.tuning)
    check_fold_fits(job)
    spec = job.tuning
    check_categorical(job)
    data = prepare(
        job.train,
        job.target,
        job.features,
        job.query,
        spec.group_by,
        spec.order_by,
        job.weight_by,
        job.categorical,
        job.categorical_reference,
    )
    categories.check_cells(
        data.categories, data.X_all.shape[0], job.caps.cells, job.caps.label("cells")
    )
    index_like.refuse_unnamed(job.train, data.features, job.features)
    line = None
    if spec.order_by is not None:
        line = sequence.timeline(job.train, spec.order_by).take(data.kept)
    # Work on the rows sorted by content (and place in time), so that no answer depends on the
    # order they came in.
    keys = (data.y, *data.X.T[::-1]) if line is None else (line.key, data.y, *data.X.T[::-1])
    if data.weights is not None:  # rows that differ in weight alone are ordered by it
        keys = (data.weights, *keys)
    canon = np.lexsort(keys)
    X, y = data.X[canon], data.y[canon]
    groups = None if data.groups is None else data.groups[canon]
    if line is not None:
        line = line.take(canon)
    # The pilot's noise estimate, along order_by or in the order the rows arrived.
    flat = X if data.categories is None else data.categories.flat(X)
    noise = serial.noise_lag1(flat, y, canon if line is None else line.step, deadline.check)
    gap = None
    if spec.scheme in ORDERED_SCHEMES:
        assert line is not None  # check_spec asks for order_by
        folds, gap = serial.make_folds(spec, line, noise, deadline.check)
    else:
        folds = tuning.make_folds(X.shape[0], spec, groups, deadline.check)
    w = None if data.weights is None else data.weights[canon]
    return Context(job, data, canon, X, y, folds, deadline, line, gap, noise, w)


def check_categorical(job: Job) -> None:
    """Refuse the options that do not take categorical features yet: adaptive intervals (their
    local spread is measured by distances on numeric features)."""
    if job.categorical and job.interval.adaptive:
        raise NotApplicable(
            "`interval.adaptive` is not offered with `categorical` features: the local spread "
            "of the residuals is measured by distances on numeric features. Leave out "
            "`adaptive`, or the categorical columns.",
            [Where(("interval", "adaptive"), "not offered with categorical features")],
        )


def check_model_interval(method: Method, job: Job) -> None:
    """Refuse a smoother's model band for rows in time order: the band assumes independent
    noise, and no correction for dependence is offered for it."""
    if job.interval.kind != "model" or job.tuning.order_by is None:
        return
    if method.name in ("spline", "additive"):
        raise NotApplicable(
            f"`interval.kind` model is not offered for {method.name} with `tuning.order_by`: "
            "its Bayesian band assumes independent noise and would be too narrow for rows "
            "whose noise carries over in time. Use kind cv_plus (with scheme window or "
            "blocks), or linear, whose model interval uses HAC standard errors.",
            [Where(("interval", "kind"), f"no model band for ordered rows with {method.name}")],
        )


def check_fold_fits(job: Job) -> None:
    """Refuse more folds x repeats than the service allows."""
    spec, cap = job.tuning, job.caps.fold_fits
    if cap is None or spec.scheme not in ("kfold", "blocks") or spec.folds * spec.repeats <= cap:
        return
    at = "repeats" if spec.repeats > 1 else "folds"
    most = max(1, cap // spec.folds) if at == "repeats" else cap
    raise OverLimit(
        f"{spec.folds} folds x {spec.repeats} repeats make {spec.folds * spec.repeats} fits; the "
        f"service's limit is {job.caps.label('fold_fits')}. Use fewer {at} (at most {most}).",
        [Where(("tuning", at), "over the limit on folds x repeats")],
    )


def check_grid_size(job: Job, grid) -> None:
    """Refuse a grid list longer than the service allows."""
    cap = job.caps.grid
    for key, values in (grid or {}).items():
        if cap is not None and isinstance(values, (list, tuple)) and len(values) > cap:
            raise OverLimit(
                f"`grid.{key}` lists {len(values)} candidates; the service's limit is "
                f"{job.caps.label('grid')}. Send a coarser grid.",
                [Where(("grid", key), f"{len(values)} candidates")],
            )


def shape(ctx: Context) -> cost.Shape:
    """The size of the request's work, for the cost estimate."""
    q = 0 if ctx.data.X_query is None else int(ctx.data.X_query.shape[0])
    n, folds, cats = ctx.X.shape[0], ctx.folds, ctx.data.categories
    # With categorical features their dummy columns count as features.
    p = ctx.X.shape[1] if cats is None else cats.width
    s = cost.Shape.of(n, p, q, ctx.job.tuning, folds.n_folds, n - folds.min_train)
    num = list(range(ctx.X.shape[1])) if cats is None else list(cats.numeric)
    if q and num and ctx.job.caps.cost_s is not None:  # measured on the data (locality_cost)
        with ctx.deadline.scope():
            # Within level combinations the flags search subsets: all rows bound the work.
            measured = locality_cost.measure(
                ctx.X[:, num], ctx.data.X_query[:, num], hull_cost_s=ctx.job.caps.hull_cost_s
            )
        s = replace(s, locality=measured.seconds())
    return s


def check_method(
    method: Method, job: Job, params, grid, intervals: bool = True
) -> tuple[dict[str, Any], Any]:
    """The method's settings and grid from the caller's values, and the options it supports."""
    check_grid_size(job, grid)
    if job.categorical and not method.categorical:
        raise NotApplicable(
            f"{method.name} does not take categorical features ({method.categorical_doc}).",
            [Where(("categorical",), f"not offered by {method.name}")],
        )
    settings = method.settings(params)
    if intervals:
        uncertainty.check(job.interval, method, method.interval_kinds_for(settings))
        check_model_interval(method, job)
    schemes = method.schemes_for(settings)
    if job.tuning.scheme not in schemes:
        raise NotApplicable(
            f"`tuning.scheme` {job.tuning.scheme} does not apply to {method.name} with these "
            f"settings; use one of {', '.join(schemes)}.",
            [Where(("tuning", "scheme"), f"not available for {method.name}")],
        )
    return settings, method.check_grid(grid, settings)


def tune(ctx: Context, method: Method, settings: dict[str, Any], grid) -> Tuned:
    """Score every candidate of ``method`` on the shared folds and choose one."""
    with ctx.deadline.scope():
        return _tune(ctx, method, settings, grid)


def _tune(ctx: Context, method: Method, settings: dict[str, Any], grid) -> Tuned:
    # ``line``: where the working rows lie along order_by (None without it), for fits whose
    # error figures account for serial dependence (linear: HAC standard errors).
    # ``weights``: the rows' precision weights (None: all 1), read by every method.
    # ``categories``: which columns of X hold level codes (None: all numeric).
    work: dict[str, Any] = {
        "features": ctx.data.features,
        "line": ctx.line,
        "weights": ctx.w,
        "categories": ctx.data.categories,
    }
    values = method.candidates(ctx.X, ctx.y, ctx.folds, settings, grid, work)
    ctx.deadline.check()
    path = method.path(ctx.X, ctx.y, ctx.folds, settings, values, work)
    ctx.deadline.check()
    scores = tuning.score(ctx.y, path.oof, ctx.folds, ctx.job.tuning.metric, path.gcv_scale, ctx.w)
    best, chosen = tuning.choose(
        scores.error, scores.error_se, ctx.job.tuning.rule, ctx.folds.scheme
    )
    return Tuned(method, settings, values, path, scores, best, chosen, work)


def run(job: Job) -> PredictResult:
    """Fit ``job.method`` to the training table, tune it by cross-validation, and predict.

    ``method: auto`` compares every method that applies on the same folds and answers with
    the recommended one (see :mod:`nearwise.core.compare`).
    """
    if job.method == "auto":
        from nearwise.core import compare

        return compare.auto(job)
    method = get_method(job.method)
    settings, grid = check_method(method, job, job.params, job.grid)
    ctx = setup(job)
    method.check_range(settings, grid, ctx.folds)  # range errors before the cost estimate
    cost.check([cost.Item(method.name, settings, grid)], shape(ctx), job.caps)
    return answer(ctx, tune(ctx, method, settings, grid))


def answer(ctx: Context, t: Tuned) -> PredictResult:
    """Fit the chosen candidate to all rows and answer with predictions and error figures."""
    with ctx.deadline.scope():
        return _answer(ctx, t)


def _answer(ctx: Context, t: Tuned) -> PredictResult:
    job, data, X, y, folds = ctx.job, ctx.data, ctx.X, ctx.y, ctx.folds
    method, settings, values, path, scores = t.method, t.settings, t.values, t.path, t.scores
    chosen, work = t.chosen, t.work
    value = values[chosen]
    model = method.fit(X, y, settings, value, work)
    ctx.deadline.check()

    at_query = data.X_query is not None
    where = data.X_query if at_query else data.X_all
    cats = data.categories
    unseen = None if cats is None else cats.unseen(where)
    if unseen is not None and unseen.any():
        # Rows holding a level not in training are answered with null: every figure is
        # computed at the reference level in its place and then blanked.
        where = cats.placeholder(where)
    with np.errstate(over="ignore", invalid="ignore"):
        value_at = predict_rows(model, where, X.shape[0])
        summary = model.summary(data.features)
    _check_predictions(value_at, "query" if at_query else "train")
    # The noise of a row of weight 1: with weights, mean(w r^2) estimates sigma^2.
    unit = 1.0 if ctx.w is None else ctx.w
    sigma_cv = float(np.sqrt(np.mean(scores.residual[chosen] ** 2 * unit)))
    oof_resid = _oof_residual(y, path, folds, chosen, model)
    dep = serial.dependence(oof_resid, ctx.line, ctx.canon, ctx.noise)
    widen = serial.level_factor(dep, folds.scheme, job.interval.kind)
    w_at = data.query_weights if at_query else None  # the answered rows' weights (None: 1)
    bars = uncertainty.compute(
        job.interval,
        model,
        path,
        folds,
        chosen,
        X,
        y,
        where,
        value_at,
        sigma_cv,
        widen,
        w=ctx.w,
        w_at=w_at,
    )
    notices = [
        *_fit_notices(data, t, folds, model, at_query),
        *index_like.notices(job.train, data.features, job.features),
        *work.get("notices", ()),
        *bars.notices,
        *model.query_notices(where),
    ]
    if at_query:
        scale = settings.get("scale") or "standard"
        if cats is None:
            notices.extend(locality.query_flags(X, where, scale, job.caps).notices)
        else:
            flags = level_locality.query_flags(X, data.X_query, scale, cats, job.caps)
            notices.extend(flags.notices)
    notices.extend(serial.notice(dep, job.tuning))
    cv_residual = None
    if not at_query:
        cv_residual = np.full(data.y_all.shape, np.nan)
        cv_residual[data.kept[ctx.canon]] = oof_resid
        notices.extend(_unusual(cv_residual))
    params: dict[str, Any] = {
        **{k: v for k, v in settings.items() if v is not None},
        t.tuned: value,
    }
    params.update(method_extra_params(method, settings, value, X.shape[1], cats is not None))
    fit = FitReport(
        n_train=int(X.shape[0]),
        rows_dropped=data.rows_dropped,
        cv_error=float(scores.error[chosen]),
        cv_error_se=float(scores.error_se[chosen]),
        cv_r2=cv_r2(y, scores, chosen, ctx.w),
        train_error=_error(y - model.fitted, job.tuning.metric, ctx.w),
        df=model.df,
        rows_zero_weight=data.rows_zero_weight,
        weight_by=job.weight_by,
    )
    if unseen is not None and unseen.any():
        value_at[unseen] = np.nan  # no level effect: value, std_error and bounds are null
        for arr in (bars.std_error, bars.lower, bars.upper):
            arr[unseen] = np.nan
        notices = categories.unseen_notices(notices, unseen, cats, at_query)
    if cats is not None:
        summary = {**summary, "categorical": cats.describe()}
    curve = None
    if job.curve_points and X.shape[1] == 1 and cats is None:
        grid = curve_grid(X, job.curve_points)
        with np.errstate(over="ignore", invalid="ignore"):
            at = model.predict(grid)
        band = uncertainty.compute(
            job.interval, model, path, folds, chosen, X, y, grid, at, sigma_cv, widen, w=ctx.w
        )
        curve = {"x": grid[:, 0], "value": at, "lower": band.lower, "upper": band.upper}
    return PredictResult(
        method=method.name,
        target=data.target,
        features=data.features,
        params=params,
        tuning=report(job, t, folds, ctx.gap, dep),
        fit=fit,
        model=summary,
        predictions=Predictions(
            value=value_at,
            residual=None if at_query else data.y_all - value_at,
            std_error=bars.std_error,
            lower=bars.lower,
            upper=bars.upper,
            flags=_row_flags(notices, value_at.shape[0]),
            cv_residual=cv_residual,
        ),
        warnings=tuple(notices),
        interval=bars.report,
        curve=curve,
        series=_series(ctx, oof_resid, dep),
    )


#: Query rows x training rows predicted in one call at most (the budget is checked between
#: calls), and at least 1,024 rows.
PREDICT_BLOCK_CELLS = 2_000_000


def predict_rows(model, Xq: np.ndarray, n: int = 1) -> np.ndarray:
    """``model.predict(Xq)`` in blocks of rows (each row's prediction depends on its own
    features only), the budget checked before each, so that no call holds a large
    temporary (a thin-plate kernel block is rows x ``n`` training rows: 16 MB) or runs
    long."""
    out = np.empty(Xq.shape[0])
    most = max(1024, PREDICT_BLOCK_CELLS // max(n, 1))
    for at in blocks(Xq.shape[0], most=most, first=1024):
        out[at] = model.predict(Xq[at])
    return out


def _series(ctx: Context, resid: np.ndarray, dep) -> dict[str, Any] | None:
    """With order_by: the out-of-fold residuals against it, in time order (for pictures)."""
    if ctx.line is None:
        return None
    order = np.argsort(ctx.line.key, kind="stable")
    return {
        "column": ctx.line.column,
        "kind": ctx.line.kind,
        "t": ctx.line.key[order],
        "residual": resid[order],
        "lag1": None if dep is None else dep.lag1,
    }


def curve_grid(X: np.ndarray, points: int) -> np.ndarray:
    """An even grid over the training range of one feature, 5 % wider on each side."""
    lo, hi = float(X[:, 0].min()), float(X[:, 0].max())
    pad = 0.05 * (hi - lo)
    return np.linspace(lo - pad, hi + pad, points)[:, None]


def cv_r2(
    y: np.ndarray, scores: tuning.Scores, c: int, w: np.ndarray | None = None
) -> float | None:
    """Out-of-fold R^2 of candidate c: 1 - pooled squared residuals / total sum of squares
    (both weighted by ``w`` if given, about the weighted mean)."""
    resid = scores.residual[c]
    wt = np.ones(y.size) if w is None else w / np.max(w)
    ybar = float(np.sum(wt * y) / np.sum(wt))
    tss = float(np.sum(wt * (y - ybar) ** 2)) * resid.shape[0]
    return (1.0 - float(np.sum(wt * resid**2)) / tss) if tss > 0 else None


def report(
    job: Job,
    t: Tuned,
    folds,
    gap: serial.Gap | None = None,
    dep: sequence.Dependence | None = None,
) -> TuningReport:
    values, scores, path, tuned = t.values, t.scores, t.path, t.tuned
    return TuningReport(
        scheme=job.tuning.scheme,
        folds=folds.n_folds if folds.scheme in ("kfold", "blocks") else None,
        repeats=folds.repeats,
        seed=job.tuning.seed,
        rule=job.tuning.rule,
        metric=job.tuning.metric,
        group_by=job.tuning.group_by,
        best={tuned: values[t.best]},
        path=tuple(
            PathEntry(
                {tuned: v},
                _finite(scores.error[c]),
                _finite(scores.error_se[c]),
                _finite(path.df[c]),
            )
            for c, v in enumerate(values)
        ),
        order_by=job.tuning.order_by,
        gap=None if gap is None else gap.steps,
        gap_source=None if gap is None else gap.source,
        gap_rule=None if gap is None else gap.rule,
        dependence=None if dep is None else dep.report(),
    )


def _fit_notices(data, t: Tuned, folds, model, at_query) -> list[Notice]:
    method, values, chosen, path, tuned = t.method, t.values, t.chosen, t.path, t.tuned
    notices: list[Notice] = []
    if data.rows_dropped:
        missing = tuple(int(i) for i in np.flatnonzero(np.isnan(data.y_all)))
        notices.append(
            Notice(
                "target_missing",
                f"{data.rows_dropped} training row(s) have no value for `{data.target}` and were "
                "left out of the fit; they still get predictions"
                + (
                    f" (training rows {', '.join(map(str, missing[:10]))}"
                    f"{', ...' if len(missing) > 10 else ''})."
                    if at_query
                    else "."
                ),
                () if at_query else missing,
            )
        )
    value = values[chosen]
    at_end = len(values) > 1 and chosen in (0, len(values) - 1)
    if at_end and not method.is_bound(value, folds, t.work):
        end = "simplest" if chosen == 0 else "most flexible"
        notices.append(
            Notice(
                "tuning_at_edge",
                f"the chosen `{tuned}` = {value} is the {end} candidate in the grid; the "
                "best value may lie beyond it. Widen the grid in that direction.",
            )
        )
    notices.extend(model.notices())
    if data.X.shape[0] < FEW_ROWS:
        notices.append(
            Notice(
                "few_rows",
                f"only {data.X.shape[0]} usable training rows: the cross-validated error, the "
                f"choice of `{tuned}` and the intervals are rough (a common rule of "
                f"thumb asks for at least {FEW_ROWS}).",
            )
        )
    if not np.all(np.isfinite(path.df)):
        notices.append(
            Notice(
                "df_unavailable",
                "the effective degrees of freedom could not be computed stably for some "
                "candidates (nearly coincident x values); they are reported as null.",
            )
        )
    return notices


def dependence_of(ctx: Context, t: Tuned) -> sequence.Dependence | None:
    """The dependence figures of a tuned method's chosen candidate (None for gcv, whose
    residuals need the final fit)."""
    if ctx.folds.scheme == "gcv":
        return None
    resid = _oof_residual(ctx.y, t.path, ctx.folds, t.chosen, None)
    return serial.dependence(resid, ctx.line, ctx.canon, ctx.noise)


def _oof_residual(y, path, folds, chosen, model) -> np.ndarray:
    """Out-of-fold residual of every usable training row in the working order (averaged over
    repeats); for GCV the exact leave-one-out residual."""
    if folds.scheme == "gcv":
        return model.loo_residuals()
    return y - path.oof[chosen].mean(axis=0)


UNUSUAL_Z = 3.5
FEW_ROWS = 30


def _unusual(cv_residual: np.ndarray) -> list[Notice]:
    """Rows whose out-of-fold residual has a modified z-score above 3.5: 0.6745 |r - median|
    / MAD (Iglewicz & Hoaglin 1993, "How to Detect and Handle Outliers", a common rule)."""
    r = cv_residual[np.isfinite(cv_residual)]
    if r.size < 3:
        return []
    med = np.median(r)
    mad = np.median(np.abs(r - med))
    if mad <= 0:
        return []
    with np.errstate(invalid="ignore"):
        z = 0.6745 * np.abs(cv_residual - med) / mad
    rows = np.flatnonzero(z > UNUSUAL_Z)
    if not rows.size:
        return []
    return [
        Notice(
            "unusual_response",
            f"{rows.size} training row(s) lie far from what the other rows predict: their "
            f"out-of-fold residual has a modified z-score above {UNUSUAL_Z} (0.6745 |r - "
            "median| / MAD). Check them for recording errors.",
            tuple(int(i) for i in rows),
        )
    ]


def _row_flags(notices: list[Notice], m: int) -> tuple[tuple[str, ...], ...]:
    flags: list[list[str]] = [[] for _ in range(m)]
    for notice in notices:
        for r in notice.rows:
            if 0 <= r < m and notice.code not in flags[r]:
                flags[r].append(notice.code)
    return tuple(tuple(f) for f in flags)


def _check_predictions(value: np.ndarray, table: str) -> None:
    bad = np.flatnonzero(~np.isfinite(value))
    if bad.size:
        raise BadCell(
            f"the prediction at {table} row {bad[0]} is too large to represent: the row lies "
            "extremely far outside the training data. Rescale the features or remove the row.",
            [Where((table, "rows", int(i)), "prediction overflows") for i in bad[:20]],
        )


def method_extra_params(
    method: Method, settings, value, n_features: int, categorical: bool = False
) -> dict[str, Any]:
    """Parameters whose default depends on the chosen value or the data, made explicit."""
    if method.name == "knn" and categorical:
        return {"mismatch": settings.get("mismatch", categories.MISMATCH)}
    if method.name == "linear":
        inter = settings.get("interactions")
        return {"interactions": (int(value) > 1) if inter is None else inter}
    if method.name == "spline" and n_features > 1:
        return {"scale": settings.get("scale") or "standard"}
    return {}
