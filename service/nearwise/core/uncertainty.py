"""Every prediction's error figures: std_error, and lower/upper at the asked level.

``cv_plus`` (the default) reuses what tuning computed: K-fold CV+ from the fold models and
out-of-fold residuals, or jackknife+ from leave-one-out updates (scheme ``loo``, and ``gcv``,
whose linear smoothers give exact leave-one-out residuals). ``model`` is the method's own
interval (linear: the t interval for a new observation; spline: the Bayesian band). The bounds
are widened where needed so that lower <= value <= upper always holds (widening keeps the
coverage guarantees).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nearwise.core import intervals
from nearwise.core.budget import blocks, checkpoint
from nearwise.core.data import Scaler
from nearwise.core.errors import InvalidValue, NotApplicable, Where
from nearwise.core.methods.base import Fitted, Method, PathResult
from nearwise.core.results import Notice
from nearwise.core.spec import INTERVAL_KINDS, IntervalSpec
from nearwise.core.tuning import Folds

ORDERED = (
    "no finite-sample guarantee: the rows are serially dependent. Coverage is approximately "
    "1 - alpha when the dependence fades within the gap and the series is long against it "
    "(mixing conditions: Chernozhukov, Wuthrich & Zhu 2018; Barber, Candes, Ramdas & "
    "Tibshirani 2023), for questions like those the scheme holds out"
)
GUARANTEE = {
    "window": "jackknife on leave-a-window-out residuals (the fit to all rows plus and minus "
    "a quantile of them): " + ORDERED + " (within the period the data cover)",
    "blocks": "CV+ on contiguous blocks with a gap: " + ORDERED + " (new periods)",
    "kfold": "K-fold CV+: coverage at least 1 - 2 alpha - sqrt(2/n) for exchangeable rows "
    "(Barber et al. 2021), usually close to 1 - alpha",
    "loo": "jackknife+: coverage at least 1 - 2 alpha for exchangeable rows (Barber et al. "
    "2021), usually close to 1 - alpha",
}


@dataclass(frozen=True)
class ErrorBars:
    std_error: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    report: dict
    notices: tuple[Notice, ...]


def check(spec: IntervalSpec, method: Method, kinds: tuple[str, ...] | None = None) -> None:
    """Check the interval options; ``kinds`` are the method's kinds under its settings."""
    kinds = method.interval_kinds if kinds is None else kinds
    if not 0.0 < spec.level < 1.0:
        raise InvalidValue(
            f"`interval.level` must lie strictly between 0 and 1; got {spec.level}.",
            [Where(("interval", "level"), "outside (0, 1)")],
        )
    if spec.kind not in INTERVAL_KINDS:
        raise InvalidValue(
            f"`interval.kind` must be one of {', '.join(INTERVAL_KINDS)}; got {spec.kind!r}.",
            [Where(("interval", "kind"), "unknown kind")],
        )
    if spec.kind not in kinds:
        raise NotApplicable(
            f"{method.name} has no interval of kind {spec.kind!r} with these settings; use "
            f"{' or '.join(kinds)}.",
            [Where(("interval", "kind"), f"not offered by {method.name}")],
        )
    if spec.kind == "model" and spec.adaptive:
        raise NotApplicable(
            "`interval.adaptive` applies to `cv_plus` intervals; a model interval has its own "
            "width. Leave out `adaptive` or use kind `cv_plus`.",
            [Where(("interval", "adaptive"), "not used by model intervals")],
        )


def compute(
    spec: IntervalSpec,
    model: Fitted,
    path: PathResult,
    folds: Folds,
    chosen: int,
    X: np.ndarray,
    y: np.ndarray,
    Xq: np.ndarray,
    value: np.ndarray,
    sigma_cv: float,
    widen: float = 1.0,
    *,
    w: np.ndarray | None = None,
    w_at: np.ndarray | None = None,
) -> ErrorBars:
    """Standard errors and interval bounds at the rows ``Xq`` whose predictions are ``value``.

    Every figure depends on a row's features alone, so rows that repeat one another (training
    rows at repeated settings, most often) are computed once.

    ``w`` holds the training rows' weights and ``w_at`` those of the rows answered (None: 1):
    intervals are for a new observation of that weight, whose noise variance is sigma^2 / w.
    CV+ and jackknife+ scale the residuals by sqrt(w_i) (the conformity score |r_i| sqrt(w_i)),
    and the interval at a row of weight w0 by 1 / sqrt(w0); the model intervals take 1 / w0
    for the new observation's noise.
    """
    key = Xq if w_at is None else np.column_stack([Xq, w_at])
    distinct, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    w0 = None if w_at is None else distinct[:, -1]
    distinct = distinct[:, : Xq.shape[1]]
    std_error, lower, upper, report = _bars(
        spec, model, path, folds, chosen, X, y, distinct, value[first], sigma_cv, w, w0
    )
    std_error, lower, upper = std_error[inverse], lower[inverse], upper[inverse]
    # An undefined bound (NaN: no noise estimate) is unbounded, never a zero-width interval.
    lower = np.fmin(np.where(np.isnan(lower), -np.inf, lower), value)
    upper = np.fmax(np.where(np.isnan(upper), np.inf, upper), value)
    if widen != 1.0:  # ordered rows: the noise's level is uncertain (serial.level_factor)
        with np.errstate(invalid="ignore"):
            lower = value - (value - lower) * widen
            upper = value + (upper - value) * widen
        report = {**report, "level_factor": widen}
    notices = []
    unbounded = np.flatnonzero(~np.isfinite(lower) | ~np.isfinite(upper))
    if unbounded.size:
        notices.append(
            Notice(
                "interval_unbounded",
                f"with {y.size} rows a {spec.level:g} interval cannot be bounded on both sides "
                f"(that takes at least 1 / (1 - level) - 1 = {1 / (1 - spec.level) - 1:.0f} rows), "
                "or there is no finite noise estimate; the missing bounds are null.",
                tuple(int(i) for i in unbounded),
            )
        )
    return ErrorBars(std_error, lower, upper, report, tuple(notices))


def _bars(
    spec: IntervalSpec,
    model: Fitted,
    path: PathResult,
    folds: Folds,
    chosen: int,
    X: np.ndarray,
    y: np.ndarray,
    Xq: np.ndarray,
    value: np.ndarray,
    sigma_cv: float,
    w: np.ndarray | None = None,
    w0: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict]:
    """std_error, lower and upper at the rows ``Xq`` whose predictions are ``value`` (before
    clamping around the values); ``w``, ``w0``: the weights of the training and those rows."""
    std_error = model.std_error(Xq, sigma_cv)
    report = {"level": spec.level, "kind": spec.kind, "adaptive": spec.adaptive}
    if spec.kind == "model":
        if w0 is None:
            lower, upper = model.model_interval(Xq, spec.level)
        else:
            lower, upper = model.model_interval(Xq, spec.level, w0)
        report["construction"] = "model"
    else:
        if folds.scheme == "gcv":
            resid = np.abs(model.loo_residuals())
        else:
            resid = np.abs(y - path.oof[chosen, 0])
        spread_q = spread_train = None
        if spec.adaptive:
            sc = Scaler.fit(X, "standard")
            scaled = resid if w is None else resid * np.sqrt(w)
            spread_q, spread_train = intervals.local_spread(
                sc.transform(X), scaled, sc.transform(Xq)
            )
        if w is not None:  # weights enter as a spread 1 / sqrt(w): see compute
            spread_train = (1.0 if spread_train is None else spread_train) / np.sqrt(w)
            if w0 is not None:
                spread_q = (1.0 if spread_q is None else spread_q) / np.sqrt(w0)
        if folds.keep_models:
            own = own_fold(X, Xq, folds.fold_id[0], path.oof[chosen, 0])
            mu = fold_predictions(path.fold_models, Xq, chosen, X.shape[0], own)
            lower, upper = intervals.cv_plus(
                mu, folds.fold_id[0], resid, spec.level, spread_q, spread_train
            )
            report["construction"] = "cv_plus"
            report["guarantee"] = GUARANTEE[folds.scheme]
        elif folds.scheme == "window":
            lower, upper = intervals.jackknife(value, resid, spec.level, spread_q, spread_train)
            report["construction"] = "jackknife"
            report["guarantee"] = GUARANTEE["window"]
        else:
            # a local method's leave-one-out predictions differ from its fit at few rows
            sparse = getattr(model, "loo_changes", None)
            lower, upper = intervals.jackknife_plus(
                model.loo_predictions(Xq),
                Xq.shape[0],
                resid,
                spec.level,
                spread_q,
                spread_train,
                changes=None if sparse is None else sparse(Xq),
            )
            report["construction"] = "jackknife_plus"
            report["guarantee"] = GUARANTEE["loo"]
    return std_error, lower, upper, report


def own_fold(
    X: np.ndarray, Xq: np.ndarray, fold: np.ndarray, oof: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """For each row of ``Xq`` that repeats a training row's features: that row's fold and its
    out-of-fold prediction, which is that fold model's prediction there (fold -1 elsewhere).
    Answers at every training row so need K - 1 fold predictions per row, not K."""
    m = Xq.shape[0]
    at, value = np.full(m, -1), np.zeros(m)
    if m == 0 or X.shape[0] == 0:
        return at, value
    _, first, inverse = np.unique(
        np.concatenate([Xq, X]), axis=0, return_index=True, return_inverse=True
    )
    inverse = inverse.reshape(-1)
    # the first training row of each group of like rows, if any
    row_of = np.full(first.size, -1)
    train_group = inverse[m:]
    row_of[train_group[::-1]] = np.arange(X.shape[0])[::-1]
    mine = row_of[inverse[:m]]
    found = mine >= 0
    at[found] = fold[mine[found]]
    value[found] = oof[mine[found]]
    return at, value


def fold_predictions(
    models, Xq: np.ndarray, chosen: int, n: int, own: tuple[np.ndarray, np.ndarray] | None = None
) -> np.ndarray:
    """Each fold model's prediction of candidate ``chosen`` at ``Xq``, shape (folds, m).

    In blocks of query rows, the budget checked before each fold's share of a block, so that
    no single call runs long or holds a large temporary (a thin-plate fold model forms a
    rows x training rows kernel block). ``own`` (from :func:`own_fold`): rows whose fold
    model's prediction is already known, taken as they are.
    """
    m = Xq.shape[0]
    mu = np.empty((len(models), m))
    fold_of = np.full(m, -1) if own is None else own[0]
    for f, fm in enumerate(models):
        rows = np.flatnonzero(fold_of != f)
        for at in blocks(rows.size, most=max(1024, intervals.CHUNK_CELLS // max(n, 1))):
            checkpoint()
            mu[f, rows[at]] = fm.predict(Xq[rows[at]], chosen)
        if own is not None:
            mu[f, fold_of == f] = own[1][fold_of == f]
    return mu
