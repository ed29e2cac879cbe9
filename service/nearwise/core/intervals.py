"""Prediction intervals from cross-validation: K-fold CV+, jackknife+ and their locally
adaptive variants.

CV+ (Barber, Candes, Ramdas & Tibshirani 2021, section 3): with fold models mu_{-k} and
out-of-fold residuals R_i = |y_i - mu_{-k(i)}(x_i)|, the interval at x0 runs from the
floor(alpha (n + 1))-th smallest of {mu_{-k(i)}(x0) - R_i} to the ceil((1 - alpha)(n + 1))-th
smallest of {mu_{-k(i)}(x0) + R_i}. For exchangeable data its coverage is at least
1 - 2 alpha - sqrt(2/n) (their Theorem 4); in practice it is close to 1 - alpha. Jackknife+
is the same with leave-one-out models, with coverage at least 1 - 2 alpha (Theorem 1).

The adaptive variant divides the residuals by a local spread s(x) and multiplies them back
at x0 (locally weighted conformal inference, Lei, G'Sell, Rinaldo, Tibshirani & Wasserman
2018, section 5.2), so that intervals widen where the noise is larger.

Row weights (``weight_by``, precision weights: Var(noise_i) = sigma^2 / w_i) enter the same
way, as a known spread 1 / sqrt(w_i): the conformity score is R_i sqrt(w_i) (divided by the
local spread too, if adaptive), and the interval at a query row of weight w0 (1 unless the
query table gives it) uses R_i sqrt(w_i) / sqrt(w0) (``uncertainty.compute`` passes them as
``spread_train`` and ``spread_q``).

References
----------
Barber, R. F., Candes, E. J., Ramdas, A. & Tibshirani, R. J. (2021). Predictive inference with
the jackknife+. *Annals of Statistics* 49(1), 486-507.
Lei, J., G'Sell, M., Rinaldo, A., Tibshirani, R. J. & Wasserman, L. (2018). Distribution-free
predictive inference for regression. *JASA* 113(523), 1094-1111.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from sklearn.neighbors import NearestNeighbors

from nearwise.core import order_stats
from nearwise.core.budget import blocks, checkpoint

CHUNK_CELLS = 2_000_000  # elements per block when a query x training matrix is needed


def ranks(n: int, level: float) -> tuple[int, int]:
    """The order statistics used for the lower and upper ends (1-based; 0 or n + 1 means the
    end is unbounded: too few rows for this level)."""
    alpha = 1.0 - level
    lo = int(np.floor(alpha * (n + 1) + 1e-9))
    hi = int(np.ceil((1.0 - alpha) * (n + 1) - 1e-9))
    return lo, hi


def _kth_of_folds(
    mu: np.ndarray, parts: list[np.ndarray], spread: np.ndarray, k: int, upper: bool
) -> np.ndarray:
    """For each query, the k-th smallest of {mu[f] -/+ spread * s : s in parts[f]} over folds.

    ``parts`` are the sorted scaled residuals of each fold. When the n x queries candidates fit
    in CHUNK_CELLS they are formed and partitioned directly. Otherwise the search over values
    of :func:`order_stats.kth_of_shifted` finds the same candidate exactly in
    O((n + queries) folds log n); the lower end is the upper end of the negated problem
    (fl(-mu + q s) = -fl(mu - q s)). Queries without a finite positive spread get an
    unbounded end; those whose fold predictions are not finite take the definition.
    """
    n = sum(p.size for p in parts)
    sign = 1.0 if upper else -1.0
    ok = np.isfinite(spread) & (spread > 0)
    if 1 <= k <= n and n * mu.shape[1] <= CHUNK_CELLS and ok.all():
        return order_stats.direct(mu, parts, spread, k, sign)
    out = np.full(mu.shape[1], np.inf if upper else -np.inf)
    fine = ok & np.isfinite(mu).all(axis=0)
    pooled = np.sort(np.concatenate(parts))
    kk = k if upper else n - k + 1  # the rank in the negated problem
    slow = ok & ~fine
    if fine.any() and np.isfinite(pooled[kk - 1]):
        rows = np.flatnonzero(fine)
        out[rows] = sign * order_stats.kth_of_shifted(
            sign * mu[:, rows], parts, spread[rows], kk, float(pooled[kk - 1])
        )
    else:
        slow |= fine
    if slow.any():
        out[slow] = order_stats.direct(mu[:, slow], parts, spread[slow], k, sign)
    return out


def cv_plus(
    mu: np.ndarray,
    fold: np.ndarray,
    resid: np.ndarray,
    level: float,
    spread_q: np.ndarray | None = None,
    spread_train: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """K-fold CV+ interval at each query.

    Parameters
    ----------
    mu : ndarray (folds, m)
        Each fold model's prediction at the query rows.
    fold : ndarray (n,)
        The fold of each training row.
    resid : ndarray (n,)
        Absolute out-of-fold residuals.
    spread_q, spread_train : ndarray, optional
        Local spread at the queries and at the training rows (adaptive intervals).
    """
    n, m = resid.size, mu.shape[1]
    s = _scores(resid, spread_train)
    q = np.ones(m) if spread_q is None else spread_q
    parts = [np.sort(s[fold == f]) for f in range(mu.shape[0])]
    k_lo, k_hi = ranks(n, level)
    n_inf = int(np.count_nonzero(np.isinf(s)))  # rows whose residual is undefined count as
    # infinitely large: they widen both ends
    lower = np.full(m, -np.inf)
    upper = np.full(m, np.inf)
    if 1 <= k_lo and k_lo > n_inf:
        lower = _kth_of_folds(mu, parts, q, k_lo, upper=False)
    if k_hi <= n - n_inf:
        upper = _kth_of_folds(mu, parts, q, k_hi, upper=True)
    return lower, upper


def _scores(resid: np.ndarray, spread: np.ndarray | None) -> np.ndarray:
    """Residuals divided by the local spread; an undefined (NaN) residual becomes +inf."""
    s = resid if spread is None else resid / spread
    return np.where(np.isnan(s), np.inf, s)


def jackknife_plus(
    mu_loo: Callable[[np.ndarray], np.ndarray],
    m: int,
    resid: np.ndarray,
    level: float,
    spread_q: np.ndarray | None = None,
    spread_train: np.ndarray | None = None,
    changes: tuple[np.ndarray, Callable] | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Jackknife+ interval at each query.

    ``mu_loo(rows)`` returns, for the query rows ``rows``, the leave-one-out predictions
    mu_{-i}(x0) for every training row i: an array (len(rows), n). Queries are processed in
    blocks of about CHUNK_CELLS elements.

    ``changes`` (a local method's, such as kNN's ``loo_changes``): the fit's predictions at
    the queries and, for a block of rows, groups ``(rows, ind, value)`` of the few
    leave-one-out predictions that differ from it; every other mu_{-i}(x0) is the fit's. Then
    each end is the k-th smallest of n candidates of which all but a window are the fit's
    prediction plus a score in sorted order: :func:`order_stats.kth_with_changes`,
    O(queries x window log window) after one sort. Rows it cannot certify, and rows without a
    finite positive spread, take the dense route.
    """
    n = resid.size
    s = _scores(resid, spread_train)
    q = np.ones(m) if spread_q is None else spread_q
    k_lo, k_hi = ranks(n, level)
    lower = np.full(m, -np.inf)
    upper = np.full(m, np.inf)
    dense = np.ones(m, dtype=bool)
    if changes is not None and n > 0:
        base, groups = changes
        order = np.argsort(s, kind="stable")
        ranked = s[order]
        rank_of = np.empty(n, dtype=np.intp)
        rank_of[order] = np.arange(n)
        good = np.flatnonzero(np.isfinite(q) & (q > 0))
        step = max(1, CHUNK_CELLS // 64)
        for start in range(0, good.size, step):
            checkpoint()
            block = good[start : start + step]
            for sub, ind, value in groups(block):
                rows = block[sub]
                done = np.ones(rows.size, dtype=bool)
                qr, b = q[rows], base[rows]
                with np.errstate(invalid="ignore", over="ignore"):
                    # the upper end: candidates mu + q s (NaN: +inf); the lower end is the
                    # upper end of the negated problem, rank n - k + 1
                    hi_c = np.where(np.isnan(value), np.inf, value + qr[:, None] * s[ind])
                    lo_c = np.where(np.isnan(value), np.inf, -value + qr[:, None] * s[ind])
                    b_hi = np.where(np.isnan(b), np.inf, b)
                    b_lo = np.where(np.isnan(b), np.inf, -b)
                if k_hi <= n:
                    got, sure = order_stats.kth_with_changes(
                        b_hi, ranked, rank_of, qr, ind, hi_c, k_hi
                    )
                    upper[rows] = got
                    done &= sure
                if k_lo >= 1:
                    got, sure = order_stats.kth_with_changes(
                        b_lo, ranked, rank_of, qr, ind, lo_c, n - k_lo + 1
                    )
                    lower[rows] = -got
                    done &= sure
                dense[rows[done]] = False
    todo = np.flatnonzero(dense)
    step = max(1, CHUNK_CELLS // max(n, 1))
    for start in range(0, todo.size, step):
        checkpoint()
        rows = todo[start : start + step]
        mu = mu_loo(rows)
        width = q[rows, None] * s[None, :]
        with np.errstate(invalid="ignore"):
            lo_vals = np.where(np.isnan(mu), -np.inf, mu - width)
            hi_vals = np.where(np.isnan(mu), np.inf, mu + width)
        if k_lo >= 1:
            lower[rows] = np.partition(lo_vals, k_lo - 1, axis=1)[:, k_lo - 1]
        if k_hi <= n:
            upper[rows] = np.partition(hi_vals, k_hi - 1, axis=1)[:, k_hi - 1]
    return lower, upper


def jackknife(
    mu: np.ndarray,
    resid: np.ndarray,
    level: float,
    spread_q: np.ndarray | None = None,
    spread_train: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """The jackknife interval: the model fitted to all rows, plus and minus the
    ceil(level (n + 1))-th smallest absolute held-out residual (scaled by the local spread
    when given). Barber et al. (2021, section 2) call it the jackknife; it has no
    finite-sample guarantee, and is close to ``level`` when the fit is stable to leaving rows
    out. Used with leave-a-window-out residuals, for which no per-fold model is kept.
    """
    n, m = resid.size, mu.size
    s = np.sort(_scores(resid, spread_train))
    q = np.ones(m) if spread_q is None else spread_q
    _, k_hi = ranks(n, level)
    if k_hi > n or not np.isfinite(s[k_hi - 1]):
        return np.full(m, -np.inf), np.full(m, np.inf)
    half = q * s[k_hi - 1]
    return mu - half, mu + half


def local_spread(
    Xs: np.ndarray, resid: np.ndarray, Xq_s: np.ndarray, k: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Local spread of the residuals: the mean absolute residual of the k nearest training
    rows (the row itself left out at training rows), on scaled features.

    k defaults to max(10, sqrt(n)), capped at n - 1. The spread is floored at 1e-3 of the
    overall mean absolute residual so that no score is divided by zero.
    """
    n = Xs.shape[0]
    k = min(n - 1, max(10, int(np.sqrt(n)))) if k is None else min(k, n - 1)
    ok = np.isfinite(resid)
    r = np.where(ok, resid, 0.0)  # undefined residuals are left out of the local means
    index = NearestNeighbors(n_neighbors=k + 1).fit(Xs)

    def local(idx: np.ndarray) -> np.ndarray:
        count = ok[idx].sum(axis=1)
        return np.where(count > 0, r[idx].sum(axis=1) / np.maximum(count, 1), np.inf)

    def spread(Z: np.ndarray, own: bool) -> np.ndarray:
        # In blocks of rows, so that the neighbor windows (k + 1 of each row: 450 at 200,000
        # rows) are never all held at once.
        out = np.empty(Z.shape[0])
        for at in blocks(Z.shape[0], most=max(1, CHUNK_CELLS // (k + 1))):
            if not own:
                out[at] = local(index.kneighbors(Z[at], n_neighbors=k, return_distance=False))
                continue
            ind = index.kneighbors(Z[at], n_neighbors=k + 1, return_distance=False)
            mine = ind == np.arange(n)[at][:, None]
            # drop each row's own index (or the farthest neighbor if it was not returned)
            order = np.argsort(mine, axis=1, kind="stable")[:, :k]
            out[at] = local(np.take_along_axis(ind, order, axis=1))
        return out

    train, query = spread(Xs, own=True), spread(Xq_s, own=False)
    overall = float(r[ok].mean()) if ok.any() else 0.0
    if not overall > 0:  # no spread anywhere: nothing to adapt to
        return np.ones(query.shape), np.ones(train.shape)
    floor = 1e-3 * overall
    query = np.where(np.isfinite(query), np.maximum(query, floor), np.inf)
    train = np.where(np.isfinite(train), np.maximum(train, floor), np.inf)
    return query, train
