"""k-nearest-neighbor regression with every k scored from one neighbor query per fold.

Ties at the k-th distance are shared out: the neighbors tied with the k-th one enter with equal
fractional weight, so that the prediction does not depend on the order of the rows. Without
ties this is the usual kNN average and equals scikit-learn's ``KNeighborsRegressor``.

With row weights w_j the prediction is the weighted average sum w_j y_j / sum w_j over the
neighbors (times 1/d_j with distance weights; a tied run's members enter with their equal
fraction of their own weights): the ratio of the averages of w y and of w, each computed as
above (:func:`_average`).

References
----------
Fix, E. & Hodges, J. L. (1951). Discriminatory analysis, nonparametric discrimination.
Hastie, Tibshirani & Friedman (2009), *The Elements of Statistical Learning*, section 2.3.2.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy.spatial import cKDTree
from sklearn.neighbors import NearestNeighbors

from nearwise.core.budget import blocks
from nearwise.core.data import SCALES, Scaler
from nearwise.core.errors import InvalidValue, NotApplicable, Where
from nearwise.core.locality import not_local_notice
from nearwise.core.methods import knn_grid
from nearwise.core.methods.base import Method, Param, PathResult, row_weights
from nearwise.core.methods.coding import categories_of, knn_scaler
from nearwise.core.results import Notice
from nearwise.core.tuning import Folds

MIXED_DISTANCE = (
    "squared distance = sum of squared differences of the scaled numeric features + "
    "mismatch^2 per categorical feature whose levels differ (Gower 1971, squared Euclidean "
    "form)"
)
WIDE_FRACTION = 0.5  # wide_neighborhood: neighbors spanning more than this share of a range
FIT_BLOCK_CELLS = 1_000_000  # neighbor-window entries per block of the final fit (8 MB each)


@dataclass(frozen=True)
class Drop:
    """Index rows each query row must not use: its own row (leave-one-out), or every row
    within ``gap`` steps of its own step along ``order_by`` (leave-a-window-out).

    ``own`` holds each query row's index row, ``step`` the index rows' steps and ``upto`` the
    index rows at steps below each step (from :meth:`window`); :meth:`counts` says how many
    rows each query row drops.
    """

    own: np.ndarray
    step: np.ndarray | None = None
    gap: int = 0
    upto: np.ndarray | None = None

    @classmethod
    def window(cls, step: np.ndarray, gap: int) -> Drop:
        upto = np.concatenate([[0], np.cumsum(np.bincount(step))])
        return cls(np.arange(step.size), step, gap, upto)

    def take(self, rows: np.ndarray) -> Drop:
        return replace(self, own=self.own[rows])

    def counts(self) -> np.ndarray:
        if self.step is None or self.upto is None:
            return np.ones(self.own.size, dtype=np.intp)
        steps = self.upto.size - 1
        mine = self.step[self.own]
        hi = np.clip(mine + self.gap + 1, 0, steps)
        return self.upto[hi] - self.upto[np.clip(mine - self.gap, 0, steps)]

    def hits(self, ind: np.ndarray) -> np.ndarray:
        if self.step is None:
            return ind == self.own[:, None]
        return np.abs(self.step[ind] - self.step[self.own][:, None]) <= self.gap


def _query(
    index: Index, Xq: np.ndarray, width: int, n_index: int, drop: Drop | None
) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distances and indices of the ``width`` nearest indexed rows.

    With ``drop``, each query row's dropped rows are removed (matched by index, so that
    duplicate rows are handled); ``width`` plus the most any row drops are fetched, and of
    the rest the nearest ``width`` kept (a row whose dropped rows were not all among those
    fetched keeps its nearest ``width``: the farthest are cut).
    """
    if drop is None:
        return index.kneighbors(Xq, n_neighbors=min(width, n_index))
    counts = drop.counts()
    extra = int(counts.max())
    d, ind = index.kneighbors(Xq, n_neighbors=min(width + extra, n_index))
    keep = min(width, n_index - extra) if drop.step is not None else min(width, n_index - 1)
    order = np.argsort(drop.hits(ind), axis=1, kind="stable")[:, :keep]
    return np.take_along_axis(d, order, axis=1), np.take_along_axis(ind, order, axis=1)


def _all_k(d: np.ndarray, yn: np.ndarray, kmax: int, weights: str) -> np.ndarray:
    """Predictions for k = 1..kmax from sorted neighbor distances ``d`` and targets ``yn``.

    Every run of tied distances must be complete within the window, except a run that
    starts after column kmax - 1. Rows without any tie among their first kmax + 1 distances
    (the usual case with continuous features) take a shortcut: plain running means.
    """
    w = d.shape[1]
    plain = (d[:, 1 : min(kmax + 1, w)] != d[:, : min(kmax, w - 1)]).all(axis=1)
    if weights == "distance":
        plain &= d[:, 0] > 0
    if plain.all():
        return _no_ties(d, yn, kmax, weights)
    out = np.empty((d.shape[0], kmax))
    if plain.any():
        out[plain] = _no_ties(d[plain], yn[plain], kmax, weights)
    tied = ~plain
    out[tied] = _with_ties(d[tied], yn[tied], kmax, weights)
    return out


def _no_ties(d: np.ndarray, yn: np.ndarray, kmax: int, weights: str) -> np.ndarray:
    ks = np.arange(1, kmax + 1)[None, :]
    if weights == "uniform":
        return np.cumsum(yn[:, :kmax], axis=1) / ks
    wgt = 1.0 / d[:, :kmax]
    return np.cumsum(wgt * yn[:, :kmax], axis=1) / np.cumsum(wgt, axis=1)


def _with_ties(d: np.ndarray, yn: np.ndarray, kmax: int, weights: str) -> np.ndarray:
    m, w = d.shape
    cols = np.arange(w)
    new = np.ones((m, w), dtype=bool)
    new[:, 1:] = d[:, 1:] != d[:, :-1]
    start = np.maximum.accumulate(np.where(new, cols, 0), axis=1)[:, :kmax]
    last = np.ones((m, w), dtype=bool)
    last[:, :-1] = new[:, 1:]
    end = np.minimum.accumulate(np.where(last, cols + 1, w)[:, ::-1], axis=1)[:, ::-1][:, :kmax]
    ks = np.arange(1, kmax + 1)[None, :]
    share = ks - start  # how many members of the tied run enter the k nearest
    run = end - start
    zero = np.zeros((m, 1))
    cs = np.concatenate([zero, np.cumsum(yn, axis=1)], axis=1)
    cs_s = np.take_along_axis(cs, start, axis=1)
    run_mean = (np.take_along_axis(cs, end, axis=1) - cs_s) / run
    if weights == "uniform":
        return (cs_s + share * run_mean) / ks
    at_zero = d[:, 0] == 0
    with np.errstate(divide="ignore"):
        wgt = np.where(d > 0, 1.0 / np.where(d > 0, d, 1.0), 0.0)
    cw = np.concatenate([zero, np.cumsum(wgt, axis=1)], axis=1)
    cwy = np.concatenate([zero, np.cumsum(wgt * yn, axis=1)], axis=1)
    wk = wgt[:, :kmax]
    num = np.take_along_axis(cwy, start, axis=1) + share * wk * run_mean
    den = np.take_along_axis(cw, start, axis=1) + share * wk
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    if at_zero.any():
        # Training rows at distance zero take all the weight, shared equally among them.
        e0 = end[at_zero, 0]
        out[at_zero] = (cs[at_zero, e0] / e0)[:, None]
    return out


def predict_all_k(
    index: Index,
    y_index: np.ndarray,
    Xq: np.ndarray,
    kmax: int,
    weights: str,
    self_rows: np.ndarray | None = None,
    drop: Drop | None = None,
    w_index: np.ndarray | None = None,
) -> np.ndarray:
    """Predictions at ``Xq`` for every k in 1..kmax, shape (n_query, kmax).

    One query of kmax + 1 neighbors serves all k; rows whose tied run reaches past the window
    are queried again with a wider window until the run is complete. ``self_rows`` (each query
    row's own index row) or ``drop`` name index rows a query row must not use; ``w_index``
    holds the index rows' weights (None: all 1).
    """
    n_index = y_index.shape[0]
    if self_rows is not None:
        drop = Drop(self_rows)
    n_avail = n_index - (drop.counts() if drop is not None else np.zeros(Xq.shape[0], np.intp))
    out = np.empty((Xq.shape[0], kmax))
    rows = np.arange(Xq.shape[0])
    width = kmax + 1
    while rows.size:
        dr = None if drop is None else drop.take(rows)
        d, ind = _query(index, Xq[rows], width, n_index, dr)
        w = d.shape[1]
        open_run = (d[:, kmax - 1] == d[:, w - 1]) & (w < n_avail[rows])
        done = ~open_run
        out[rows[done]] = _average(d[done], ind[done], y_index, w_index, kmax, weights)
        rows = rows[open_run]
        width = min(2 * width, int(n_avail.max()))
    return out


def _average(d, ind, y, w, kmax: int, weights: str) -> np.ndarray:
    """:func:`_all_k` of the neighbors ``ind``; with row weights ``w``, the weighted average
    as the ratio of the averages of w y and of w."""
    if w is None:
        return _all_k(d, y[ind], kmax, weights)
    wn = w[ind]
    return _all_k(d, wn * y[ind], kmax, weights) / _all_k(d, wn, kmax, weights)


def _complete_windows(index: Index, Xq: np.ndarray, need: int, n_index: int):
    """Yield ``(rows, d, ind)`` groups whose windows hold the ``need`` nearest neighbors and
    every row tied with the last of them (widening the query where a tie run is cut off)."""
    rows = np.arange(Xq.shape[0])
    width = min(need + 8, n_index)
    while rows.size:
        d, ind = index.kneighbors(Xq[rows], n_neighbors=width)
        if width < n_index:
            open_run = d[:, min(need, width) - 1] == d[:, -1]
        else:
            open_run = np.zeros(rows.size, dtype=bool)
        done = ~open_run
        if done.any():
            yield rows[done], d[done], ind[done]
        rows = rows[open_run]
        width = min(2 * width, n_index)


#: Above this many features neighbors are found by computing every distance, as scikit-learn's
#: own automatic choice does; a KD-tree searches at or below it.
BRUTE_ABOVE = 15


class Index:
    """Sorted nearest-neighbor search over the rows it was built on.

    scipy's ``cKDTree`` at or below BRUTE_ABOVE features, scikit-learn's exhaustive search
    above. Queried directly, the tree skips an estimator's per-call input checks and dispatch,
    which cost more than the search itself for small requests. Which engine finds the
    neighbors does not change an answer: runs of tied distances are always completed (see
    :func:`predict_all_k`), and tests compare the predictions with scikit-learn's.
    """

    def __init__(self, Xs: np.ndarray) -> None:
        self.n_samples_fit_, self.n_features_in_ = Xs.shape
        data = np.ascontiguousarray(Xs, dtype=float)
        if self.n_features_in_ <= BRUTE_ABOVE:
            self._tree: cKDTree | None = cKDTree(data)
            self._brute = None
        else:
            self._tree = None
            self._brute = NearestNeighbors(algorithm="brute").fit(data)

    def kneighbors(self, Xq: np.ndarray, n_neighbors: int) -> tuple[np.ndarray, np.ndarray]:
        """Distances and indices of the ``n_neighbors`` nearest rows, nearest first."""
        if self._tree is None:
            return self._brute.kneighbors(Xq, n_neighbors=n_neighbors)
        d, ind = self._tree.query(
            np.ascontiguousarray(Xq, dtype=float), k=[*range(1, n_neighbors + 1)]
        )
        return d, ind.astype(np.intp, copy=False)


def _held_out(folds: Folds) -> str:
    """How the rows are held out, for messages."""
    if folds.scheme == "loo":
        return "leave-one-out"
    if folds.scheme == "window":
        return f"windows of {folds.gap} steps on each side"
    return f"{folds.n_folds} {'blocks' if folds.scheme == 'blocks' else 'folds'}"


def _index(Xs: np.ndarray) -> Index:
    return Index(Xs)


@dataclass(frozen=True)
class FoldKNN:
    """The neighbor index of one training fold."""

    scaler: Scaler
    index: Index
    y: np.ndarray
    weights: str
    values: tuple[int, ...]
    w: np.ndarray | None = None  # row weights (None: all 1)

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        k = self.values[c]
        Xs = self.scaler.transform(Xq)
        return _by_blocks(self.index, self.y, Xs, k, self.weights, self.w)


def _by_blocks(
    index: Index, y: np.ndarray, Xs: np.ndarray, k: int, weights: str, w=None
) -> np.ndarray:
    """The k-neighbor predictions at the scaled rows ``Xs``, in blocks of rows with the budget
    checked before each: a block's neighbor windows hold at most FIT_BLOCK_CELLS entries, and
    blocks are sized to take about budget.BLOCK_TARGET_S (a search on degenerate data costs a
    thousand times more per row than on spread-out rows)."""
    out = np.empty(Xs.shape[0])
    for at in blocks(Xs.shape[0], most=max(1, FIT_BLOCK_CELLS // (k + 1))):
        out[at] = predict_all_k(index, y, Xs[at], k, weights, w_index=w)[:, -1]
    return out


@dataclass
class FittedKNN:
    """kNN fitted to all usable rows."""

    k: int
    weights: str
    scaler: Scaler
    index: Index
    y: np.ndarray
    fitted: np.ndarray
    df: float
    typical_radius: float
    Xs: np.ndarray  # the scaled training rows
    w: np.ndarray | None = None  # row weights (None: all 1)
    # With categorical features: the numeric features (the first columns of ``Xs``) and the
    # mismatch weight gamma; None without them.
    p_numeric: int | None = None
    mismatch: float | None = None

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        Xs = self.scaler.transform(Xq)
        k = self.k
        return _by_blocks(self.index, self.y, Xs, k, self.weights, self.w)

    def notices(self) -> list:
        n, p = self.index.n_samples_fit_, self.index.n_features_in_
        if self.p_numeric is not None:  # e_p over the numeric features (none: no notice)
            p = self.p_numeric
        out = []
        if self.k == 1 or self.weights == "distance":
            out.append(
                Notice(
                    "interpolating",
                    "k = 1: every training row is predicted by itself, so the fit reproduces the "
                    "noise; prefer the tuned k or a larger one."
                    if self.k == 1
                    else "with distance weights a training row is its own nearest neighbor at "
                    "distance 0, so the fitted values reproduce the training targets and "
                    "`train_error` is 0; judge the fit by `cv_error`.",
                )
            )
        local = not_local_notice(self.k, n, p) if p else None
        if local is not None:
            out.append(local)
        return out

    def query_notices(self, Xq: np.ndarray) -> list:
        """``wide_neighborhood``: the k neighbors of a query spread over more than half of a
        feature's training range."""
        if Xq.shape[0] == 0 or self.p_numeric == 0:
            return []
        Xs = self.scaler.transform(Xq)
        train = self.Xs
        if self.p_numeric is not None:  # the spread of the numeric features only
            train = train[:, : self.p_numeric]
        span = train.max(axis=0) - train.min(axis=0)
        is_wide = np.zeros(Xs.shape[0], dtype=bool)
        # In blocks: the neighbors' rows (m, k, p) of every query row are never all held.
        for at in blocks(Xs.shape[0], most=max(1, FIT_BLOCK_CELLS // (self.k * Xs.shape[1]))):
            _, ind = self.index.kneighbors(Xs[at], n_neighbors=self.k)
            nb = train[ind]  # (rows, k, p): numeric features only
            spread = nb.max(axis=1) - nb.min(axis=1)
            with np.errstate(invalid="ignore", divide="ignore"):
                is_wide[at] = (spread > WIDE_FRACTION * span).any(axis=1)
        wide = np.flatnonzero(is_wide)
        if not wide.size:
            return []
        return [
            Notice(
                "wide_neighborhood",
                f"for {wide.size} row(s) the {self.k} nearest training rows spread over more than "
                f"{WIDE_FRACTION:.0%} of some feature's training range, so the average is not "
                "local there.",
                tuple(int(i) for i in wide),
            )
        ]

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """sigma / sqrt(k): the noise in an average of k targets; the bias of the local
        average is not included. With row weights, sigma / sqrt(the k neighbors' summed
        weights), sigma the noise of a row of weight 1."""
        if self.w is None:
            return np.full(Xq.shape[0], sigma_cv / np.sqrt(self.k))
        Xs = self.scaler.transform(Xq)
        return sigma_cv / np.sqrt(self.k * _by_blocks(self.index, self.w, Xs, self.k, "uniform"))

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) for every training row i, by blocks of query rows.

        Leaving out a row changes a prediction only if the row is among its k nearest
        neighbors (or tied with the k-th); those few are recomputed from one wider query.
        """
        Xs = self.scaler.transform(Xq)
        base = self.predict(Xq)
        n = self.y.shape[0]

        def block(rows: np.ndarray) -> np.ndarray:
            out = np.repeat(base[rows, None], n, axis=1)
            for sub, d, ind in _complete_windows(self.index, Xs[rows], self.k + 1, n):
                for j in range(d.shape[1]):
                    keep = np.delete(np.arange(d.shape[1]), j)
                    pred = _average(d[:, keep], ind[:, keep], self.y, self.w, self.k, self.weights)
                    out[sub, ind[:, j]] = pred[:, -1]
            return out

        return block

    def loo_changes(self, Xq: np.ndarray):
        from nearwise.core.methods import knn_loo  # jackknife+ from the few changed rows

        return knn_loo.changes(self, Xq)

    def summary(self, names: tuple[str, ...]) -> dict[str, Any]:
        n = self.y.shape[0]
        out = {
            "k": self.k,
            "neighborhood_fraction": self.k / n,
            "typical_radius": self.typical_radius,
            "radius_units": "scaled features (see `scale`)",
        }
        if self.mismatch is not None:
            out["mismatch"] = self.mismatch
            out["distance"] = MIXED_DISTANCE
        return out


class KNN(Method):
    """k-nearest-neighbor regression."""

    name = "knn"
    summary = (
        "Average of the targets of the k nearest training rows, with Euclidean distance "
        "on scaled features (a categorical feature whose levels differ adds `mismatch`^2 to "
        "the squared distance). Larger k is simpler."
    )
    min_features = 1
    max_features = None
    schemes = ("kfold", "loo", "window", "blocks")
    tuned = "k"
    default_grid = knn_grid.DOC
    params = (
        Param(
            "k",
            "integer",
            None,
            "number of neighbors",
            low=1,
            tunable=True,
            simpler="larger",
            data_range=True,
        ),
        Param(
            "weights",
            "choice",
            "uniform",
            "`uniform` averages the k neighbors; `distance` weights them by 1/distance",
            choices=("uniform", "distance"),
        ),
        Param(
            "scale",
            "choice",
            "standard",
            "feature scaling before distances: `standard` (mean 0, sd 1), `range` (0 to 1) "
            "or `none`",
            choices=SCALES,
        ),
        Param(
            "mismatch",
            "number",
            None,
            "with `categorical` features: gamma, the distance a differing level adds "
            "(squared distance = sum of squared scaled numeric differences + gamma^2 per "
            "categorical feature that differs; Gower 1971). Default 1: a mismatch counts as "
            "much as a difference of one unit in a scaled feature (one standard deviation "
            "with `standard`, the whole range with `range`, as in Gower's coefficient); a large "
            "value (such as 100) keeps the neighbors within the query's levels while a level "
            "holds k rows; 0 ignores the levels",
            low=0.0,
        ),
    )
    std_error_doc = (
        "sigma / sqrt(k), with sigma the root mean squared out-of-fold residual; "
        "it measures noise only, not the bias of the local average"
    )
    references = (
        "Hastie, Tibshirani & Friedman (2009), The Elements of Statistical Learning, section 2.3.2",
    )

    def order(self, values):
        return sorted(values, reverse=True)

    def max_k(self, folds: Folds) -> int:
        return folds.min_train - 1

    def is_bound(self, value: Any, folds: Folds, work=None) -> bool:
        return value in (1, self.max_k(folds))

    def _check_k(self, k: int, folds: Folds, path: tuple) -> None:
        hi = self.max_k(folds)
        if not 1 <= k <= hi:
            raise InvalidValue(
                f"`k` must be an integer in [1, {hi}] for {folds.n} rows in "
                f"{_held_out(folds)}; "
                f"got {k}. The smallest training fold holds {folds.min_train} rows.",
                [Where(path, f"outside [1, {hi}]")],
            )

    def check_range(self, settings, grid, folds):
        if "k" in settings:
            self._check_k(settings["k"], folds, ("params", "k"))
        for i, k in enumerate(grid or ()):
            self._check_k(k, folds, ("grid", "k", i))

    def candidates(self, X, y, folds, settings, grid, work=None):
        if "mismatch" in settings and categories_of(work) is None:
            raise NotApplicable(
                "`mismatch` weighs differing levels of categorical features; these data have "
                "none. Name the categorical columns in `categorical`, or leave out `mismatch`.",
                [Where(("params", "mismatch"), "no categorical feature")],
            )
        if folds.scheme == "gcv":
            raise NotApplicable(
                "knn is not scored by gcv here; use `tuning.scheme` kfold or loo "
                "(leave-one-out is exact and costs one neighbor query).",
                [Where(("tuning", "scheme"), "gcv does not apply to knn")],
            )
        self.check_range(settings, grid, folds)
        if "k" in settings:
            return [settings["k"]]
        if grid is not None:
            return self.order(grid)
        return self.order(knn_grid.values(folds.min_train, X.shape[1]))

    def path(self, X, y, folds, settings, values, work=None):
        kmax = max(values)
        cols = np.asarray(values) - 1
        weights, scale = settings["weights"], settings["scale"]
        w = row_weights(work)
        cats, gamma = categories_of(work), settings.get("mismatch")
        if folds.scheme in ("loo", "window"):
            # One neighbor query of all rows, each leaving out its own row (loo) or the rows
            # within the gap of its step (window); features scaled once with all rows.
            sc = knn_scaler(X, scale, cats, gamma)
            Xs = sc.transform(X)
            index = _index(Xs)
            drop = (
                Drop(np.arange(X.shape[0]))
                if folds.scheme == "loo"
                else Drop.window(folds.step, folds.gap)
            )
            # In blocks of rows, so that the neighbor windows (k plus the largest window
            # left out) of every row are never all held at once.
            step = max(1, FIT_BLOCK_CELLS // (kmax + 1 + int(drop.counts().max())))
            oof = np.empty((len(values), 1, X.shape[0]))
            for start in range(0, X.shape[0], step):
                folds.check()
                rows = np.arange(start, min(X.shape[0], start + step))
                pred = predict_all_k(
                    index, y, Xs[rows], kmax, weights, drop=drop.take(rows), w_index=w
                )
                oof[:, 0, rows] = pred[:, cols].T
            models = ()
        else:
            oof = np.empty((len(values), folds.repeats, X.shape[0]))
            models = []
            for r, _f, train, test in folds.splits():
                sc = knn_scaler(X[train], scale, cats, gamma)
                index = _index(sc.transform(X[train]))
                Xt = sc.transform(X[test])
                for at in blocks(test.size, most=max(1, FIT_BLOCK_CELLS // (kmax + 1))):
                    wt = None if w is None else w[train]
                    pred = predict_all_k(index, y[train], Xt[at], kmax, weights, w_index=wt)
                    oof[:, r, test[at]] = pred[:, cols].T
                if r == 0 and folds.keep_models:
                    wt = None if w is None else w[train]
                    models.append(FoldKNN(sc, index, y[train], weights, tuple(values), wt))
        df = X.shape[0] / np.asarray(values, dtype=float)
        return PathResult(oof, df, fold_models=tuple(models))

    def fit(self, X, y, settings, value, work=None):
        k = int(value)
        n = X.shape[0]
        cats = categories_of(work)
        sc = knn_scaler(X, settings["scale"], cats, settings.get("mismatch"))
        Xs = sc.transform(X)
        index = _index(Xs)
        # One query of the training rows serves both the fitted values (k nearest, the row
        # itself included) and the typical radius (distance to the k-th other row).
        fitted = np.empty(n)
        radius = np.empty(n)
        # In blocks of rows, so that the neighbor windows of 250,000 rows are never all held at
        # once (each row's figures depend on its own window only), sized by their time so
        # that the budget is checked often (blocks() checks it before each).
        for part in blocks(n, most=max(1, FIT_BLOCK_CELLS // (k + 1))):
            block = np.arange(part.start, part.stop)
            for rows, d, ind in _complete_windows(index, Xs[block], min(k + 1, n), n):
                at = block[rows]
                fitted[at] = _average(d, ind, y, row_weights(work), k, settings["weights"])[:, -1]
                is_self = ind == at[:, None]
                order = np.argsort(is_self, axis=1, kind="stable")
                radius[at] = np.take_along_axis(d, order, axis=1)[:, min(k, n - 1) - 1]
        return FittedKNN(
            k,
            settings["weights"],
            sc,
            index,
            y,
            fitted,
            n / k,
            float(np.median(radius)),
            Xs,
            row_weights(work),
            None if cats is None else len(cats.numeric),
            None if cats is None else sc.gamma,
        )
