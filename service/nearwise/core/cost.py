"""Cost estimates made before any fitting, so that a request that cannot finish is refused
at once and told what would fit.

Each method's estimate counts its dominant operations (neighbor searches, least-squares
factorizations, smoothing solves) for the rows, features, query rows, folds and candidates of
the request, times seconds per operation measured on the reference machine (one core, one BLAS
thread). ``tests/benchmarks/calibrate_cost.py`` measures requests of many shapes again and prints
the ratio of estimate to measured time; the estimates aim at a factor of 2 either way, which is
enough to tell a 2 s request from a 200 s one. What the estimate lets through and then overruns
is stopped by the time budget between folds.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from itertools import pairwise
from math import comb, log2
from typing import Any

from nearwise.core.errors import OverLimit, Where
from nearwise.core.spec import Caps, TuningSpec

#: Per-row work every method shares: parsing into arrays, sorting by content, locality flags.
ROW_S = 0.8e-6
#: Intervals at the answer rows (the query, or every training row without one): K-fold CV+
#: narrows a bracket per answer row by counting each fold's sorted residuals below a value
#: (order_stats: 8 to 12 counts per end): per answer row and fold, times the training rows to
#: the power CV_PLUS_GROWTH (larger sorted arrays miss the cache more: 0.75 us at 2,000 rows,
#: 2.4 us at 100,000); jackknife+ (loo, gcv) forms every leave-one-out prediction (per answer
#: row and training row), except kNN's, of which only a window of about k + 10 per answer row
#: differs from the fit (knn_loo): per answer row and window entry, its search included.
CV_PLUS_S = 0.1e-6
CV_PLUS_GROWTH = 0.3
JACKKNIFE_S = 2e-8
KNN_JACKKNIFE_S = 0.6e-6
#: Leave-a-window-out solves from a hat matrix: per step and candidate, and per cubed window.
WINDOW_STEP_S = 1.5e-6
WINDOW_CUBE_S = 1.2e-9


@dataclass(frozen=True)
class Shape:
    """The size of one request's work.

    ``fits`` counts the training fits of tuning (folds x repeats for kfold; 1 for loo and gcv,
    whose closed forms cost about one fit on all rows); ``models`` counts the fitted models a
    query row is predicted by (the final one, plus one per fold for CV+ intervals).
    """

    n: int
    p: int
    q: int
    fits: int
    train_share: float
    models: int
    scheme: str = "kfold"
    width: int = 1  # window: the most rows one held-out step leaves out
    locality: float = 0.0  # seconds of the query rows' locality flags, as measured

    def window_fast(self, candidates: int) -> tuple[Shape, float]:
        """For a method with a leave-a-window-out fast path: the shape of its one fit on all
        rows, and the seconds of the window solves (one per step and candidate)."""
        if self.scheme != "window":
            return self, 0.0
        solves = self.fits * candidates * (WINDOW_STEP_S + self.width**3 * WINDOW_CUBE_S)
        return replace(self, fits=1), solves

    @classmethod
    def of(
        cls,
        n: int,
        p: int,
        q: int,
        spec: TuningSpec,
        n_folds: int | None = None,
        width: int = 1,
    ) -> Shape:
        """``n_folds``: the folds made (``window`` has one per step of ``order_by``);
        ``width``: the most rows a ``window`` fold leaves out of training."""
        if spec.scheme in ("kfold", "blocks"):
            fits = spec.folds * spec.repeats
            return cls(n, p, q, fits, 1 - 1 / spec.folds, 1 + fits, spec.scheme)
        if spec.scheme == "window":
            # Without a fast path every step is a fit on nearly all rows; kNN has one (below).
            return cls(n, p, q, max(1, n_folds or n), 1.0, 2, "window", max(1, width))
        return cls(n, p, q, 1, 1.0, 2, spec.scheme)

    def rows(self, n: int) -> Shape:
        # The locality flags' search and hull grow with the rows: at most in proportion.
        local = self.locality * n / max(self.n, 1)
        if self.scheme == "window":  # about one step per row
            fits = max(1, round(self.fits * n / max(self.n, 1)))
            return replace(self, n=n, fits=fits, locality=local)
        return replace(self, n=n, locality=local)

    @property
    def answers(self) -> int:
        """Rows answered: the query, or every training row without one."""
        return self.q or self.n


def _count(grid: Sequence[Any] | None, settings: Mapping[str, Any], name: str, default: int):
    if settings.get(name) is not None:
        return 1
    return len(grid) if grid is not None else default


# ---------------------------------------------------------------------------------------------
# kNN: one neighbor search per fold for every candidate k at once.

#: Seconds per neighbor found, for the window of all candidate k (sorting, running sums).
KNN_NEIGHBOR_S = 0.08e-6
#: Seconds of tree search per query point against 100,000 indexed points, by feature count, and
#: how that grows with the indexed points (exponent); measured with k = 50 on uniform data.
KNN_TREE_S = {1: 2e-6, 2: 5e-6, 3: 12e-6, 4: 20e-6, 6: 50e-6, 10: 380e-6, 15: 3000e-6}
KNN_TREE_GROWTH = {1: 0.30, 3: 0.25, 6: 0.38, 10: 0.50, 15: 0.60}
#: Seconds per neighbor beyond the KNN_WIDE_FROM nearest for gathering and running sums (the
#: tree search is counted apart); with it, 0.1 to 0.25 us per neighbor at 1 to 3 features, as
#: measured with the default grid's top (1,000 to 2,300 neighbors).
KNN_WIDE_FROM = 50
KNN_WIDE_S = 0.08e-6
#: The final fit's fitted values beyond the KNN_WIDE_FROM nearest, per training row, as a share
#: of the same neighbors in tuning (at k <= 50 the tuning's constants absorb the fit).
KNN_FIT_SHARE = 1.0
#: Above this many features the search compares with every indexed point.
KNN_BRUTE_P = 15
KNN_BRUTE_S = 0.4e-9  # seconds per indexed point and feature, per query point


def _interp(table: Mapping[int, float], p: int) -> float:
    keys = sorted(table)
    if p <= keys[0]:
        return table[keys[0]]
    for lo, hi in pairwise(keys):
        if p <= hi:
            w = (p - lo) / (hi - lo)
            return table[lo] ** (1 - w) * table[hi] ** w  # geometric: costs grow exponentially
    lo, hi = keys[-2], keys[-1]
    return table[hi] * (table[hi] / table[lo]) ** ((p - hi) / (hi - lo))


def _knn_point(index_rows: float, p: int, kmax: int) -> float:
    """Seconds to find the kmax nearest of index_rows points for one query point."""
    return _knn_search(index_rows, p, kmax) + _knn_sums(kmax)


def _knn_search(index_rows: float, p: int, kmax: int) -> float:
    index_rows = max(index_rows, 2.0)
    if p > KNN_BRUTE_P:
        return KNN_BRUTE_S * index_rows * p
    growth = (index_rows / 1e5) ** _interp(KNN_TREE_GROWTH, p)
    return _interp(KNN_TREE_S, p) * growth * (kmax + 20) / 70


def _knn_sums(kmax: int) -> float:
    """The neighbors' running sums (and, beyond KNN_WIDE_FROM, their sorting and gathering)."""
    return KNN_NEIGHBOR_S * 2 * min(kmax, KNN_WIDE_FROM) + KNN_WIDE_S * max(0, kmax - KNN_WIDE_FROM)


def knn(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape) -> float:
    from nearwise.core.methods.knn_grid import top

    if settings.get("k") is not None:
        kmax = int(settings["k"])
    elif grid is not None:
        kmax = int(max(grid))
    else:  # the default grid's top grows with the rows (knn_grid.top)
        kmax = top(max(2, int(s.n * s.train_share)), s.p)
    # The final fit's neighbors at every training row: the chosen k, not known before tuning
    # unless fixed; half the grid's top is counted.
    k_fit = kmax if settings.get("k") is not None else max(1, kmax // 2)
    width = kmax + 1
    if s.scheme == "window":  # one neighbor query of all rows, as for leave-one-out, whose
        s = replace(s, fits=1)  # window also holds the rows each one leaves out
        width += s.width
    index = s.n * s.train_share
    per_point = _knn_point(index, s.p, width)
    tuning = s.n * (s.fits * (1 - s.train_share) if s.train_share < 1 else 1) * per_point
    queries = s.answers * s.models * _knn_point(s.n, s.p, k_fit)  # at the chosen k
    build = s.fits * index * log2(index + 2) * s.p * 5e-8
    # Only the part beyond KNN_WIDE_FROM neighbors: below it the tuning's constants absorb it.
    beyond = max(0, k_fit + 1 - KNN_WIDE_FROM)
    per_neighbor = _knn_search(s.n, s.p, KNN_WIDE_FROM + 1) - _knn_search(s.n, s.p, KNN_WIDE_FROM)
    fit = s.n * beyond * (per_neighbor + KNN_WIDE_S) * KNN_FIT_SHARE
    return tuning + queries + build + fit


# ---------------------------------------------------------------------------------------------
# Least squares: one QR (or SVD) of the design per fold; lasso: coordinate descent per alpha.

LSQ_TERM_S = 0.6e-7  # per row, term and fit: building the design, residuals, deletion formulas
RIDGE_TERM_S = 1.5e-7  # the same with a penalty (standardizing, the path over alpha)
LSQ_FACTOR_S = 0.5e-9  # per row, squared term count and fit: the QR or SVD itself
LASSO_S = 1.0e-9  # per row, term, alpha and fit: coordinate-descent passes


def _terms(p: int, degree: int, interactions: bool) -> int:
    return comb(p + degree, degree) if interactions else p * degree + 1


def linear(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape) -> float:
    penalty = settings.get("penalty") or "none"
    if penalty != "lasso":  # least squares and ridge: window from the hat matrix
        name = "degree" if penalty == "none" else "alpha"
        s, solves = s.window_fast(_count(grid, settings, name, 3 if penalty == "none" else 30))
        return solves + _linear(settings, grid, s, penalty)
    return _linear(settings, grid, s, penalty)


def _linear(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape, penalty: str):
    if penalty == "none":
        degree = settings.get("degree") or (max(grid) if grid is not None else 3)
        interactions = settings.get("interactions")
        t = _terms(s.p, int(degree), True if interactions is None else bool(interactions))
    else:
        degree = settings.get("degree") or 1
        interactions = settings.get("interactions")
        inter = int(degree) > 1 if interactions is None else bool(interactions)
        t = _terms(s.p, int(degree), inter)
    rows = s.n * s.train_share
    fits = s.fits + 1
    per_term = LSQ_TERM_S if penalty == "none" else RIDGE_TERM_S
    cost = fits * rows * (per_term * t + LSQ_FACTOR_S * t * t) + s.answers * s.models * t * 1e-8
    if penalty == "lasso":
        cost += fits * rows * t * _count(grid, settings, "alpha", 30) * LASSO_S
    return cost


# ---------------------------------------------------------------------------------------------
# Splines: 1-D smoothing spline on at most MAX_KNOTS knots (banded solves per candidate);
# thin-plate: an eigendecomposition per fold, cubic in the rows.

SPLINE_ROW_S = 0.2e-6  # per row and fit: binning onto the knots, residuals
SPLINE_SOLVE_S = 0.5e-6  # per knot, candidate and fit: the banded solves
SPLINE_VARIANCE_S = 7e-11  # per point and squared knot count: the augmented system's solves
THIN_PLATE_S = 1.0e-10  # per cubed row and fit: eigendecomposition, posterior factor
THIN_PLATE_KERNEL_S = 2.0e-9  # per squared row, feature and fit: the kernel matrix
# Past thinplate_lowrank.EXACT_ROWS rows, the thin-plate spline on m knots (rank r <= m):
LOW_RANK_QR_S = 1.5e-10  # per row, squared rank and pass: QR of the design's row blocks
LOW_RANK_KNOT_S = 5e-8  # per row and knot: choosing the knots, the design's kernel entries
LOW_RANK_DESIGN_S = 5e-11  # per row, knot and rank: kernel rows times the whitened basis
LOW_RANK_CUBE_S = 1e-9  # per cubed rank and fit: stacking the folds' R factors, the SVD
LOW_RANK_ANSWER_S = 1e-8  # per answer row, model and knot: kernel rows at the answer rows
LOW_RANK_SOLVE_S = 1.5e-10  # per answer row and squared rank: std_error's triangular solves
LOW_RANK_WEIGHT_S = 5e-11  # per answer row, training row and rank: jackknife+ weights


def spline(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape) -> float:
    m = _count(grid, settings, "smoothing", 20)
    solves = 0.0
    if s.p == 1:  # window from the hat matrix (one banded solve per knot and candidate)
        s, solves = s.window_fast(m)
        knots = min(s.n, 1000)
        solves += (knots * knots * m * 1e-8) if solves else 0.0
    fits = s.fits + 1
    if s.p == 1:
        knots = min(s.n, 1000)
        # The posterior variance: direct solves at the answer rows or at 7 points per knot
        # interval, whichever are fewer (see FittedSpline1D.variance).
        variance = min(s.answers, 7 * knots) * knots * knots * SPLINE_VARIANCE_S
        tuning = fits * (s.n * SPLINE_ROW_S + knots * m * SPLINE_SOLVE_S)
        return tuning + variance + s.answers * s.models * 1e-6 + solves
    from nearwise.core.methods.thinplate_lowrank import EXACT_ROWS

    if s.n > EXACT_ROWS:
        return _thin_plate_low_rank(s)
    rows = s.n * s.train_share
    kernel = fits * rows * rows * s.p * THIN_PLATE_KERNEL_S
    return (
        fits * rows**3 * THIN_PLATE_S
        + s.n**3 * THIN_PLATE_S
        + kernel
        + s.answers * s.n * s.models * 2e-8
    )


def _thin_plate_low_rank(s: Shape) -> float:
    """One design of all rows; QR passes over the rows (K-fold: one per repeat, each fold's R
    factor made once, plus all rows; otherwise one per training set); per fit, the stacked R
    factors and an SVD; at the answer rows, kernel rows per model and the std_error solves
    (leave-one-out: every training row's smoother weight)."""
    from nearwise.core.methods.thinplate_lowrank import knot_count

    r = m = knot_count(s.n, s.p)
    if s.scheme == "kfold":
        passes = s.fits * (1 - s.train_share) + 1
    elif s.train_share < 1 or s.scheme == "window":
        passes = s.fits * s.train_share + 1
    else:  # loo (with the leverages) or gcv
        passes = 2 if s.scheme == "loo" else 1
    tuning = passes * s.n * r * r * LOW_RANK_QR_S + (s.fits + 1) * r**3 * LOW_RANK_CUBE_S
    design = s.n * m * (LOW_RANK_KNOT_S + r * LOW_RANK_DESIGN_S)
    answers = s.answers * (s.models * m * LOW_RANK_ANSWER_S + r * r * LOW_RANK_SOLVE_S)
    if s.train_share == 1 and s.scheme != "window":  # jackknife+: smoother weights
        answers += s.answers * s.n * r * LOW_RANK_WEIGHT_S
    return tuning + design + answers


# ---------------------------------------------------------------------------------------------
# Additive: per fold, a penalized least-squares basis of B columns and REML steps (B^3).

ADDITIVE_COLUMN_S = 2.5e-8  # per row, basis column and fit: the basis, projections, residuals
ADDITIVE_ROW_S = 1.0e-10  # per row, squared basis column and fit: the factorization
ADDITIVE_REML_S = 1.0e-8  # per cubed basis column and fit: the smoothing steps


def additive(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape) -> float:
    from nearwise.core.methods.additive_basis import default_knots

    knots = settings.get("knots") or default_knots(s.p)
    b = s.p * (int(knots) - 2) + s.p + 1
    s, solves = s.window_fast(_count(grid, settings, "smoothing", 20))
    fits = s.fits + 1
    rows = s.n * s.train_share
    queries = s.answers * s.models * b * 1e-8
    per_fit = rows * b * (ADDITIVE_COLUMN_S + b * ADDITIVE_ROW_S) + b**3 * ADDITIVE_REML_S
    return fits * per_fit + queries + solves


ESTIMATES: dict[str, Callable[[Mapping[str, Any], Sequence[Any] | None, Shape], float]] = {
    "knn": knn,
    "linear": linear,
    "spline": spline,
    "additive": additive,
}


@dataclass(frozen=True)
class Item:
    """One method's share of a request: its settings and grid as checked."""

    name: str
    settings: Mapping[str, Any]
    grid: Sequence[Any] | None

    def seconds(self, s: Shape) -> float:
        if s.train_share < 1:
            intervals = s.answers * (s.models - 1) * CV_PLUS_S * s.n**CV_PLUS_GROWTH
        elif self.name == "knn":
            intervals = s.answers * (_knn_k(self.settings, self.grid, s) + 10) * KNN_JACKKNIFE_S
        else:
            intervals = s.answers * s.n * JACKKNIFE_S
        return ESTIMATES[self.name](self.settings, self.grid, s) + s.n * ROW_S + intervals


def _knn_k(settings: Mapping[str, Any], grid: Sequence[Any] | None, s: Shape) -> int:
    """kNN's k for its jackknife+ window: fixed, or half the grid's top (as for its fit)."""
    from nearwise.core.methods.knn_grid import top

    if settings.get("k") is not None:
        return int(settings["k"])
    kmax = int(max(grid)) if grid is not None else top(max(2, s.n - 1), s.p)
    return max(1, kmax // 2)


def total(items: Sequence[Item], s: Shape) -> float:
    """The request's estimate: every method's share, and the locality flags once."""
    return sum(item.seconds(s) for item in items) + s.locality


def rows_under(items: Sequence[Item], s: Shape, limit: float) -> int:
    """The most training rows whose estimate stays within ``limit`` (0 when none does)."""
    lo, hi = 0, s.n
    while lo < hi:
        mid = (lo + hi + 1) // 2
        if total(items, s.rows(mid)) <= limit:
            lo = mid
        else:
            hi = mid - 1
    return lo


def check(items: Sequence[Item], s: Shape, caps: Caps) -> float:
    """Refuse the request when its estimate exceeds ``caps.cost_s``; returns the estimate."""
    estimate = total(items, s)
    if caps.cost_s is None or estimate <= caps.cost_s:
        return estimate
    parts = ", ".join(f"{i.name} {i.seconds(s):.3g} s" for i in items) if len(items) > 1 else ""
    fit = rows_under(items, s, caps.cost_s)
    if fit >= 10:
        advice = (
            f"About {fit:,} training rows fit under it with these settings; or use fewer folds "
            "or repeats, a smaller grid"
        )
    else:
        advice = "Even a few rows do not fit under it with these settings: use fewer folds"
    advice += ", fewer query rows" if s.q else ""
    advice += ", or fewer methods." if len(items) > 1 else ", or another method."
    raise OverLimit(
        f"this request is estimated at {estimate:.3g} s of fitting on one core"
        f"{f' ({parts})' if parts else ''}, over the service's limit {caps.label('cost_s')} s. "
        + advice,
        [Where(("train", "rows"), f"{s.n} rows: estimated {estimate:.3g} s")],
    )
