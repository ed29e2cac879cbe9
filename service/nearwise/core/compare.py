"""Which amount of structure do the data justify? Every method tuned on the same folds,
ranked by cross-validated error, and the simplest adequate one recommended.

Each method is tuned as ``/v1/predict`` would tune it (its own one-standard-error or minimum
rule picks its candidate). Across methods the rule is the same parsimony rule: among the
methods whose chosen candidate's error lies within one standard error of the best method's,
recommend the one with the fewest effective degrees of freedom (Hastie, Tibshirani & Friedman
2009, section 7.10, applied to the methods' effective df).

References
----------
Hastie, T., Tibshirani, R. & Friedman, J. (2009). *The Elements of Statistical Learning*, 2nd
ed., Springer, sections 7.6 (effective degrees of freedom) and 7.10.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from nearwise.core import cost, pipeline, uncertainty
from nearwise.core.errors import (
    InvalidValue,
    NearwiseError,
    OverBudget,
    OverLimit,
    UnknownName,
    Where,
)
from nearwise.core.methods import METHODS, Method
from nearwise.core.results import Notice, PredictResult, TuningReport
from nearwise.core.spec import Job


@dataclass(frozen=True)
class RankRow:
    """One method's chosen candidate, scored on the shared folds."""

    method: str
    params: dict[str, Any]
    error: float
    error_se: float
    df: float | None
    cv_r2: float | None


@dataclass(frozen=True)
class CompareResult:
    """Everything ``/v1/compare`` answers."""

    target: str
    features: tuple[str, ...]
    ranking: tuple[RankRow, ...]
    paths: dict[str, TuningReport]
    recommended: str
    reason: str
    warnings: tuple[Notice, ...]
    prediction: PredictResult | None = None
    curves: dict[str, dict[str, Any]] | None = None  # one feature, when asked: each method's fit


def _methods(job: Job, p: int) -> tuple[list[Method], bool]:
    """The methods to compare and whether the caller named them."""
    if job.methods is None:
        chosen = [
            m
            for m in METHODS.values()
            if m.min_features <= p and (m.max_features is None or p <= m.max_features)
        ]
        cap = job.caps.methods
        if cap is not None and len(chosen) > cap:
            raise OverLimit(
                f"{len(chosen)} methods apply to these data but the service compares at most "
                f"{job.caps.label('methods')} at once; name at most {cap} in `methods`.",
                [Where(("methods",), "needed: at most " + str(cap) + " methods")],
            )
        return chosen, False
    if not job.methods:
        raise InvalidValue(
            "`methods` must name at least one method.", [Where(("methods",), "empty list")]
        )
    cap = job.caps.methods
    if cap is not None and len(job.methods) > cap:
        raise OverLimit(
            f"`methods` names {len(job.methods)} methods; the service's limit is "
            f"{job.caps.label('methods')}. Compare fewer at once.",
            [Where(("methods",), f"{len(job.methods)} methods")],
        )
    out = []
    for i, name in enumerate(job.methods):
        if name not in METHODS:
            raise UnknownName(
                f"unknown method {name!r}; choose from {', '.join(METHODS)}.",
                [Where(("methods", i), "unknown method")],
            )
        if METHODS[name] in out:
            raise InvalidValue(
                f"`methods` names {name!r} twice.", [Where(("methods", i), "duplicate method")]
            )
        out.append(METHODS[name])
    return out, True


def _route(values: dict[str, Any], methods: list[Method], field: str) -> list[dict[str, Any]]:
    """Each method's share of the caller's ``params`` (or ``grid``): the names it defines."""
    shares = [{k: v for k, v in values.items() if k in {p.name for p in m.params}} for m in methods]
    for key in values:
        if not any(key in share for share in shares):
            raise UnknownName(
                f"`{key}` is not a parameter of any compared method "
                f"({', '.join(m.name for m in methods)}).",
                [Where((field, key), "unknown parameter")],
            )
    return shares


def _with_method(err: NearwiseError, name: str) -> NearwiseError:
    err.detail = f"{name}: {err.detail}"
    err.args = (err.detail,)
    return err


def _within_cost(ctx: pipeline.Context, checked: list, named: bool, skipped: list[Notice]) -> list:
    """The checked methods whose estimated cost together fits the service's limit.

    Methods the caller named are all kept or the request is refused; from the default set the
    costliest are left out (with a ``method_skipped`` notice) until the rest fits.
    """
    s, cap = pipeline.shape(ctx), ctx.job.caps.cost_s
    items = [cost.Item(m.name, settings, grid) for m, settings, grid in checked]
    if not named and cap is not None:
        while len(items) > 1 and cost.total(items, s) > cap:
            worst = max(items, key=lambda item: item.seconds(s))
            skipped.append(
                Notice(
                    "method_skipped",
                    f"{worst.name} was left out: it is estimated at {worst.seconds(s):.3g} s of "
                    f"fitting, which with the other methods is over the service's limit "
                    f"{ctx.job.caps.label('cost_s')} s.",
                )
            )
            items.remove(worst)
    cost.check(items, s, ctx.job.caps)
    kept = {item.name for item in items}
    return [c for c in checked if c[0].name in kept]


def tune_all(job: Job) -> tuple[pipeline.Context, dict[str, pipeline.Tuned], list[Notice]]:
    """Tune every compared method on one set of folds."""
    ctx = pipeline.setup(job)
    methods, named = _methods(job, ctx.X.shape[1])
    params = _route(dict(job.params), methods, "params")
    grids = _route(dict(job.grid), methods, "grid")
    tuned: dict[str, pipeline.Tuned] = {}
    skipped: list[Notice] = []
    checked: list[tuple[Method, dict[str, Any], Any]] = []
    for method, prm, grd in zip(methods, params, grids, strict=True):
        try:
            settings, grid = pipeline.check_method(method, job, prm, grd, intervals=False)
            method.check_range(settings, grid, ctx.folds)  # before the cost estimate
            if job.method == "auto":  # auto answers with intervals: the method must give them
                uncertainty.check(job.interval, method, method.interval_kinds_for(settings))
                pipeline.check_model_interval(method, job)
            checked.append((method, settings, grid))
        except NearwiseError as err:
            if named or err.code == "over_limit":
                raise _with_method(err, method.name) from None
            skipped.append(Notice("method_skipped", f"{method.name} was left out: {err.detail}"))
    checked = _within_cost(ctx, checked, named, skipped)
    for method, settings, grid in checked:
        try:
            tuned[method.name] = pipeline.tune(ctx, method, settings, grid)
        except NearwiseError as err:
            if named or isinstance(err, OverBudget):  # abandoned requests too
                raise _with_method(err, method.name) from None
            skipped.append(Notice("method_skipped", f"{method.name} was left out: {err.detail}"))
    if not tuned:
        raise InvalidValue(
            "no method could be fitted to these data: " + " ".join(n.message for n in skipped),
            [Where(("methods",), "no method applies")],
        )
    return ctx, tuned, skipped


def rank(ctx: pipeline.Context, tuned: dict[str, pipeline.Tuned]) -> list[RankRow]:
    rows = []
    for name, t in tuned.items():
        c = t.chosen
        df = t.path.df[c]
        params = {**{k: v for k, v in t.settings.items() if v is not None}, t.tuned: t.values[c]}
        p, coded = ctx.X.shape[1], ctx.data.categories is not None
        params.update(pipeline.method_extra_params(t.method, t.settings, t.values[c], p, coded))
        rows.append(
            RankRow(
                method=name,
                params=params,
                error=float(t.scores.error[c]),
                error_se=float(t.scores.error_se[c]),
                df=float(df) if np.isfinite(df) else None,
                cv_r2=pipeline.cv_r2(ctx.y, t.scores, c, ctx.w),
            )
        )
    return sorted(rows, key=lambda r: (r.error, r.method))


def recommend(rows: list[RankRow]) -> tuple[str, str]:
    """The simplest method within one standard error of the best, and why."""
    best = rows[0]
    limit = best.error + best.error_se
    close = [r for r in rows if r.error <= limit]
    pick = min(close, key=lambda r: (np.inf if r.df is None else r.df, r.error))
    if pick is best:
        others = [r.method for r in close if r is not best]
        tail = (
            f"; {', '.join(others)} came within one standard error but with more effective "
            "degrees of freedom"
            if others
            else "; no other method came within one standard error of it"
        )
        return pick.method, (
            f"{pick.method} has the lowest cross-validated error ({best.error:.4g} ± "
            f"{best.error_se:.4g}){tail}."
        )
    return pick.method, (
        f"{best.method} has the lowest cross-validated error ({best.error:.4g} ± "
        f"{best.error_se:.4g}), but {pick.method} is within one standard error of it "
        f"({pick.error:.4g}) with fewer effective degrees of freedom ({pick.df:.3g} against "
        f"{best.df if best.df is None else f'{best.df:.3g}'}): the simpler model is recommended."
    )


def compare(job: Job) -> CompareResult:
    """Tune every method on the same folds, rank them, and recommend one."""
    ctx, tuned, skipped = tune_all(job)
    rows = rank(ctx, tuned)
    name, reason = recommend(rows)
    prediction = None
    if ctx.data.X_query is not None:
        prediction = _predict(ctx, tuned[name], job)
    curves = None
    if job.curve_points and ctx.X.shape[1] == 1 and ctx.data.categories is None:
        grid = pipeline.curve_grid(ctx.X, job.curve_points)
        curves = {}
        for m, t in tuned.items():
            model = t.method.fit(ctx.X, ctx.y, t.settings, t.values[t.chosen], t.work)
            with np.errstate(over="ignore", invalid="ignore"):
                curves[m] = {"x": grid[:, 0], "value": model.predict(grid)}
    return CompareResult(
        target=ctx.data.target,
        features=ctx.data.features,
        ranking=tuple(rows),
        paths={
            m: pipeline.report(job, t, ctx.folds, ctx.gap, pipeline.dependence_of(ctx, t))
            for m, t in tuned.items()
        },
        recommended=name,
        reason=reason,
        warnings=tuple(skipped),
        prediction=prediction,
        curves=curves,
    )


def _predict(ctx: pipeline.Context, t: pipeline.Tuned, job: Job) -> PredictResult:
    uncertainty.check(job.interval, t.method, t.method.interval_kinds_for(t.settings))
    pipeline.check_model_interval(t.method, job)
    return pipeline.answer(ctx, t)


def auto(job: Job) -> PredictResult:
    """``method: auto``: compare, then answer as predict does with the recommended method."""
    ctx, tuned, skipped = tune_all(job)
    rows = rank(ctx, tuned)
    name, reason = recommend(rows)
    result = _predict(ctx, tuned[name], job)
    chose = Notice("method_chosen", f"method auto chose {name}: {reason}")
    comparison = {
        "ranking": [vars(r) for r in rows],
        "recommended": name,
        "reason": reason,
    }
    return replace(result, warnings=(chose, *skipped, *result.warnings), comparison=comparison)
