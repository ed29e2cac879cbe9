"""Fold assignment, cross-validated scoring of a whole grid, and the one-standard-error rule.

The methods compute out-of-fold predictions for every candidate at once (their fast paths);
this module turns those predictions into the score table the API returns and picks a
candidate. The folds and out-of-fold predictions are kept for later use (intervals, method
comparison).

References
----------
Hastie, T., Tibshirani, R. & Friedman, J. (2009). *The Elements of Statistical Learning*, 2nd
ed., Springer, section 7.10 (K-fold cross-validation and the one-standard-error rule).
Craven, P. & Wahba, G. (1979). Smoothing noisy data with spline functions. *Numerische
Mathematik* 31, 377-403 (generalised cross-validation).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from nearwise.core.errors import InvalidValue, NotApplicable, TooFewRows, Where
from nearwise.core.spec import METRICS, ORDERED_SCHEMES, RULES, SCHEMES, TuningSpec


@dataclass(frozen=True)
class Folds:
    """How rows are split for cross-validation.

    ``fold_id`` has shape (repeats, n): the test fold of each row in each repeat (K-fold and
    ``blocks``: K folds; ``window``: one fold per step of ``order_by``), or the row's own
    number (leave-one-out). For ``gcv`` there are no folds and ``fold_id`` is None.
    ``min_train`` is the size of the smallest training fold (n for ``gcv``).

    For ``window`` and ``blocks``, ``step`` holds each row's step along ``order_by``, ``span``
    the first and last step of each fold, and ``gap`` the steps left out of training on each
    side of a held-out fold.
    """

    scheme: str
    n: int
    n_folds: int
    repeats: int
    fold_id: np.ndarray | None
    min_train: int
    check: Callable[[], None] = field(default=lambda: None, compare=False, repr=False)
    step: np.ndarray | None = field(default=None, compare=False, repr=False)
    span: np.ndarray | None = field(default=None, compare=False, repr=False)
    gap: int = 0

    @property
    def folded(self) -> bool:
        """Whether rows are held out fold by fold (kfold, blocks, window), each fold scored by
        a model fitted without it."""
        return self.scheme in ("kfold", *ORDERED_SCHEMES)

    @property
    def keep_models(self) -> bool:
        """Whether the path keeps one model per fold for CV+ intervals (not for ``window``,
        whose folds are as many as the steps)."""
        return self.scheme in ("kfold", "blocks")

    def train_mask(self, f: int, ids: np.ndarray) -> np.ndarray:
        """Training rows of fold f: the other folds, less the gap around f's span."""
        if self.step is None or self.span is None:
            return ids != f
        lo, hi = self.span[f]
        return (self.step < lo - self.gap) | (self.step > hi + self.gap)

    def train_sizes(self) -> np.ndarray:
        """Training rows of every fold of ``window`` or ``blocks``, counted from the rows per
        step (no pass per fold)."""
        assert self.step is not None and self.span is not None
        steps = int(self.span[-1, 1]) + 1
        upto = np.concatenate([[0], np.cumsum(np.bincount(self.step, minlength=steps))])
        lo = np.clip(self.span[:, 0] - self.gap, 0, steps)
        hi = np.clip(self.span[:, 1] + self.gap + 1, 0, steps)
        return self.n - (upto[hi] - upto[lo])

    def smallest(self) -> int:
        """The ``window`` or ``blocks`` fold with the fewest training rows."""
        return int(np.argmin(self.train_sizes()))

    def splits(self):
        """Yield ``(repeat, fold, train_index, test_index)`` for the folded schemes; the time
        budget is checked before each fold."""
        assert self.fold_id is not None
        for r in range(self.repeats):
            ids = self.fold_id[r]
            for f in range(self.n_folds):
                self.check()
                test = np.flatnonzero(ids == f)
                train = np.flatnonzero(self.train_mask(f, ids))
                yield r, f, train, test


def check_spec(spec: TuningSpec) -> None:
    """Check the tuning options that do not depend on the data."""
    if spec.scheme not in SCHEMES:
        raise InvalidValue(
            f"`tuning.scheme` must be one of {', '.join(SCHEMES)}; got {spec.scheme!r}.",
            [Where(("tuning", "scheme"), "unknown scheme")],
        )
    if spec.rule not in RULES:
        raise InvalidValue(
            f"`tuning.rule` must be one of {', '.join(RULES)}; got {spec.rule!r}.",
            [Where(("tuning", "rule"), "unknown rule")],
        )
    if spec.metric not in METRICS:
        raise InvalidValue(
            f"`tuning.metric` must be one of {', '.join(METRICS)}; got {spec.metric!r}.",
            [Where(("tuning", "metric"), "unknown metric")],
        )
    if spec.scheme in ("kfold", "blocks") and spec.folds < 2:
        raise InvalidValue(
            f"`tuning.folds` must be at least 2; got {spec.folds}.",
            [Where(("tuning", "folds"), "fewer than 2 folds")],
        )
    if spec.repeats < 1:
        raise InvalidValue(
            f"`tuning.repeats` must be at least 1; got {spec.repeats}.",
            [Where(("tuning", "repeats"), "fewer than 1 repeat")],
        )
    if spec.scheme != "kfold" and spec.repeats != 1:
        raise NotApplicable(
            f"`tuning.repeats` applies to the kfold scheme only; {spec.scheme} is deterministic. "
            "Leave repeats at 1.",
            [Where(("tuning", "repeats"), f"not used by {spec.scheme}")],
        )
    if spec.scheme in ORDERED_SCHEMES and spec.order_by is None:
        raise NotApplicable(
            f"`tuning.scheme` {spec.scheme} holds rows out along time: name the column that "
            "places each row in the sequence in `tuning.order_by`.",
            [Where(("tuning", "order_by"), f"needed by {spec.scheme}")],
        )
    if spec.gap is not None and spec.scheme not in ORDERED_SCHEMES:
        raise NotApplicable(
            f"`tuning.gap` applies to the window and blocks schemes; {spec.scheme} leaves no "
            "gap. Leave out `gap` or use one of those schemes.",
            [Where(("tuning", "gap"), f"not used by {spec.scheme}")],
        )
    if spec.gap is not None and spec.gap < 0:
        raise InvalidValue(
            f"`tuning.gap` must be a whole number of steps, 0 or more; got {spec.gap}.",
            [Where(("tuning", "gap"), "negative")],
        )
    if spec.scheme in ORDERED_SCHEMES and spec.group_by is not None:
        raise NotApplicable(
            f"`tuning.group_by` is not combined with the {spec.scheme} scheme: its folds follow "
            "`order_by` alone. For several series (one per machine, say), use kfold with "
            "`group_by` (each series held out whole), or send one series per request.",
            [Where(("tuning", "group_by"), f"not used by {spec.scheme}")],
        )
    if spec.scheme != "kfold" and spec.group_by is not None:
        raise NotApplicable(
            f"`tuning.group_by` needs the kfold scheme; {spec.scheme} leaves single rows out.",
            [Where(("tuning", "group_by"), f"not used by {spec.scheme}")],
        )


def make_folds(
    n: int,
    spec: TuningSpec,
    groups: np.ndarray | None = None,
    check: Callable[[], None] | None = None,
) -> Folds:
    """Assign rows to folds.

    K-fold: a seeded permutation split into ``folds`` parts whose sizes differ by at most one,
    drawn afresh for each repeat. With groups, whole groups are dealt to folds: groups are
    shuffled, then each (largest first) goes to the fold holding the fewest rows so far.
    """
    extra = () if check is None else (check,)
    if spec.scheme == "gcv":
        return Folds("gcv", n, 1, 1, None, n, *extra)
    if spec.scheme == "loo":
        if n < 3:
            raise TooFewRows(
                f"leave-one-out needs at least 3 usable rows; got {n}.",
                [Where(("train", "rows"), f"{n} usable rows")],
            )
        return Folds("loo", n, n, 1, np.arange(n)[None, :], n - 1, *extra)
    k = spec.folds
    units = n if groups is None else int(groups.max()) + 1
    if units < k:
        what = "rows" if groups is None else "groups"
        fix = "`tuning.scheme: loo`" if groups is None else "more groups"
        raise TooFewRows(
            f"{k}-fold cross-validation needs at least {k} usable {what}; got {units}. "
            f"Use fewer folds (`tuning.folds`) or {fix}.",
            [Where(("tuning", "folds"), f"{k} folds for {units} {what}")],
        )
    rng = np.random.default_rng(spec.seed)
    fold_id = np.empty((spec.repeats, n), dtype=np.intp)
    for r in range(spec.repeats):
        if groups is None:
            perm = rng.permutation(n)
            fold_id[r, perm] = np.arange(n) % k
        else:
            sizes = np.bincount(groups, minlength=units)
            order = rng.permutation(units)
            order = order[np.argsort(-sizes[order], kind="stable")]
            load = np.zeros(k, dtype=np.intp)
            g_fold = np.empty(units, dtype=np.intp)
            for g in order:
                f = int(np.argmin(load))
                g_fold[g] = f
                load[f] += sizes[g]
            fold_id[r] = g_fold[groups]
    counts = np.stack([np.bincount(fold_id[r], minlength=k) for r in range(spec.repeats)])
    min_train = int(n - counts.max())
    if min_train < 2:
        raise TooFewRows(
            f"a training fold would hold {min_train} row(s); use fewer folds or more groups.",
            [Where(("tuning", "folds"), "training fold too small")],
        )
    return Folds("kfold", n, k, spec.repeats, fold_id, min_train, *extra)


def ordered_folds(
    spec: TuningSpec,
    step: np.ndarray,
    steps: int,
    gap: int,
    check: Callable[[], None] | None = None,
) -> Folds:
    """Folds along ``order_by``: ``blocks`` deals the steps into ``folds`` contiguous runs of
    nearly equal length; ``window`` makes every step a fold of its own. A fold's training rows
    are those more than ``gap`` steps from every step of the fold (h-block and hv-block
    cross-validation: Burman, Chow & Nolan 1994; Racine 2000).
    """
    extra = () if check is None else (check,)
    n = int(step.size)
    if spec.scheme == "blocks":
        k = spec.folds
        if steps < k:
            raise TooFewRows(
                f"{k} contiguous blocks need at least {k} distinct `{spec.order_by}` values; got "
                f"{steps}. Use fewer folds (`tuning.folds`).",
                [Where(("tuning", "folds"), f"{k} blocks for {steps} steps")],
            )
        of_step = (np.arange(steps) * k) // steps
    else:
        if steps < 2:
            raise TooFewRows(
                f"the window scheme holds out one `{spec.order_by}` value at a time and needs at "
                f"least 2 distinct values; every row has the same one. Use `kfold`.",
                [Where(("tuning", "order_by"), "one distinct value")],
            )
        k = steps
        of_step = np.arange(steps)
    first = np.searchsorted(of_step, np.arange(k), side="left")
    last = np.searchsorted(of_step, np.arange(k), side="right") - 1
    fold_id = of_step[step][None, :].astype(np.intp)
    folds = Folds(
        spec.scheme,
        n,
        k,
        1,
        fold_id,
        0,
        *extra,
        step=step,
        span=np.stack([first, last], 1),
        gap=gap,
    )
    train = folds.train_sizes()
    min_train = int(train.min())
    if min_train < 2:
        f = int(np.argmin(train))
        raise TooFewRows(
            f"`tuning.gap` = {gap} steps leaves {min_train} training row(s) for the fold at "
            f"steps {first[f]}-{last[f]} of {steps}; use a smaller gap"
            + (" or more folds." if spec.scheme == "blocks" else "."),
            [Where(("tuning", "gap"), "gap too large to leave training rows")],
        )
    return replace(folds, min_train=min_train)


@dataclass(frozen=True)
class Scores:
    """Cross-validated errors of every candidate, in candidate order.

    ``oof`` holds out-of-fold predictions with shape (candidates, repeats, n); for ``gcv`` it
    holds the fitted values and ``residual`` the GCV-inflated residuals.
    """

    error: np.ndarray
    error_se: np.ndarray
    unit_errors: np.ndarray
    residual: np.ndarray
    oof: np.ndarray


def score(
    y: np.ndarray,
    oof: np.ndarray,
    folds: Folds,
    metric: str,
    gcv_scale: np.ndarray | None = None,
    weights: np.ndarray | None = None,
) -> Scores:
    """Score every candidate from its out-of-fold predictions.

    The error is pooled over all held-out rows (and repeats): the root mean squared or the mean
    absolute residual. Its standard error is the standard deviation of the per-fold errors
    divided by the square root of the number of folds (each row is a fold for leave-one-out and
    GCV); with repeats it is computed within each repeat and averaged, because repeats reuse
    the same rows and do not add independent folds. For RMSE it is taken on the squared scale
    and carried over by the delta method, se(RMSE) = se(MSE) / (2 RMSE).

    For GCV, ``gcv_scale`` holds 1 - df/n per candidate; residuals are divided by it, so the
    squared error equals the GCV score of Craven & Wahba.

    With row ``weights`` w_i every mean is weighted: the pooled error is sum w loss / sum w,
    each fold's error the weighted mean over its rows (its standard error as above, from the
    folds' errors). For leave-one-out and GCV, whose units are the rows, the standard error is
    that of a weighted mean, sqrt(n / (n - 1) sum w_i^2 (l_i - L)^2) / sum w_i, which equals
    sd(l) / sqrt(n) when the weights are equal. Weighted GCV is sum w r^2 / (sum w (1 -
    df/n)^2), the score of Craven & Wahba with weights scaled to mean 1.
    """
    resid = y[None, None, :] - oof
    if gcv_scale is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            resid = resid / gcv_scale[:, None, None]
    loss = resid**2 if metric == "rmse" else np.abs(resid)
    n_c = oof.shape[0]
    # Weights scaled to at most 1, so that w * loss cannot overflow where loss does not.
    wt = np.ones(y.size) if weights is None else weights / np.max(weights)
    if folds.folded:
        assert folds.fold_id is not None
        k = folds.n_folds
        units = np.empty((n_c, folds.repeats * k))
        for r in range(folds.repeats):
            ids = folds.fold_id[r]
            cnt = np.bincount(ids, weights=wt, minlength=k)
            for c in range(n_c):
                units[c, r * k : (r + 1) * k] = (
                    np.bincount(ids, weights=wt * loss[c, r], minlength=k) / cnt
                )
    else:
        units = loss[:, 0, :]
    if weights is None:
        pooled = loss.reshape(n_c, -1).mean(axis=1)
    else:
        pooled = (loss * wt).reshape(n_c, -1).sum(axis=1) / (wt.sum() * folds.repeats)
    per_repeat = units.reshape(n_c, folds.repeats, -1)
    m = per_repeat.shape[2]
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        if m > 1 and weights is not None and not folds.folded:
            se_units = _weighted_mean_se(units, wt)
        elif m > 1:
            # Scaled before the standard deviation so that squares of huge errors (targets
            # near the 1e100 limit) do not overflow.
            big = np.max(np.abs(per_repeat), axis=(1, 2))
            big = np.where(np.isfinite(big) & (big > 0), big, 1.0)
            unit = per_repeat / big[:, None, None]
            se_units = big * (unit.std(axis=2, ddof=1) / np.sqrt(m)).mean(axis=1)
        else:
            se_units = np.zeros(n_c)
    if metric == "rmse":
        error = np.sqrt(pooled)
        with np.errstate(divide="ignore", invalid="ignore"):
            error_se = np.where(error > 0, se_units / (2 * error), 0.0)
    else:
        error, error_se = pooled, se_units
    bad = ~np.isfinite(error)
    error = np.where(bad, np.inf, error)
    error_se = np.where(bad | ~np.isfinite(error_se), np.inf, error_se)
    return Scores(error, error_se, units, resid, oof)


def _weighted_mean_se(units: np.ndarray, wt: np.ndarray) -> np.ndarray:
    """Per candidate (row of ``units``), the standard error of the weighted mean of its
    entries: sqrt(n / (n - 1) sum w_i^2 (l_i - L)^2) / sum w_i, L the weighted mean."""
    n = units.shape[1]
    big = np.max(np.abs(units), axis=1)
    big = np.where(np.isfinite(big) & (big > 0), big, 1.0)
    u = units / big[:, None]
    mean = (u @ wt) / wt.sum()
    dev = (u - mean[:, None]) * wt[None, :]
    return big * np.sqrt(n / (n - 1) * np.sum(dev**2, axis=1)) / wt.sum()


def choose(
    error: np.ndarray, error_se: np.ndarray, rule: str, scheme: str = "kfold"
) -> tuple[int, int]:
    """Return ``(best, chosen)`` indices; candidates are ordered simplest first.

    ``best`` has the smallest error (the simplest one on ties). With ``one_se`` the chosen
    candidate is the simplest whose error is at most the best error plus its standard error.
    """
    if not np.isfinite(error).any():
        fix = {
            "kfold": "Use fewer folds, a simpler grid, or more rows.",
            "blocks": "Use a smaller gap, fewer folds, a simpler grid, or more rows.",
            "window": "Use a smaller gap, a simpler grid, or more rows.",
            "loo": "Some row alone determines a term of every candidate; use `kfold`, a "
            "simpler grid, or more rows.",
            "gcv": "Every candidate uses all the degrees of freedom; use a simpler grid.",
        }[scheme]
        raise TooFewRows(
            f"no candidate could be scored: every fit failed on some held-out row. {fix}",
            [Where(("tuning", "scheme"), "no candidate scored")],
        )
    best = int(np.argmin(error))
    if rule == "min":
        return best, best
    limit = error[best] + error_se[best]
    chosen = int(np.flatnonzero(error <= limit)[0])
    return best, chosen
