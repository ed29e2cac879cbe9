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

from nearwise.core.budget import blocks, checkpoint

CHUNK_CELLS = 2_000_000  # elements per block when a query x training matrix is needed


def ranks(n: int, level: float) -> tuple[int, int]:
    """The order statistics used for the lower and upper ends (1-based; 0 or n + 1 means the
    end is unbounded: too few rows for this level)."""
    alpha = 1.0 - level
    lo = int(np.floor(alpha * (n + 1) + 1e-9))
    hi = int(np.ceil((1.0 - alpha) * (n + 1) - 1e-9))
    return lo, hi


#: Candidates left in a query's bracket when the bisection stops and they are sorted.
SELECT_AT = 32


def _kth_of_folds(
    mu: np.ndarray, parts: list[np.ndarray], spread: np.ndarray, k: int, upper: bool
) -> np.ndarray:
    """For each query, the k-th smallest of {mu[f] -/+ spread * s : s in parts[f]} over folds.

    ``parts`` are the sorted scaled residuals of each fold. When the n x queries candidates fit
    in CHUNK_CELLS they are formed and partitioned directly. Otherwise, per query: the answer
    lies between min_f and max_f of mu[f] -/+ spread * S, S the k-th smallest pooled
    residual (the (n - k + 1)-th for the lower end), since every fold's values are its
    residuals shifted by mu[f]; bisection on the value narrows that bracket, counting the
    candidates below a value with one searchsorted per fold (O(folds x queries x log n) per
    step), until at most SELECT_AT candidates lie inside it; those are formed and the right
    one taken. About 12 steps instead of the 60 a bisection to full precision takes; queries
    whose fold predictions are not finite take that full bisection, and queries without a
    finite positive spread get an unbounded end.
    """
    n = sum(p.size for p in parts)
    direct = 1 <= k <= n and n * mu.shape[1] <= CHUNK_CELLS
    if direct and np.all(np.isfinite(spread) & (spread > 0)):
        sign = 1.0 if upper else -1.0
        with np.errstate(over="ignore", invalid="ignore"):
            values = np.concatenate(
                [mu[f][None, :] + sign * spread[None, :] * s[:, None] for f, s in enumerate(parts)]
            )
        return np.partition(values, k - 1, axis=0)[k - 1]
    # No finite positive spread (adaptive intervals where no neighbor has a residual): the
    # interval is unbounded there.
    spread_ok = np.isfinite(spread) & (spread > 0)
    out = np.full(mu.shape[1], np.inf if upper else -np.inf)
    fine = spread_ok & np.isfinite(mu).all(axis=0)
    pooled = np.sort(np.concatenate(parts))
    S = pooled[k - 1] if upper else pooled[n - k]
    slow = spread_ok & ~fine
    if fine.any() and np.isfinite(S):
        rows = np.flatnonzero(fine)
        got, ok = _narrow_and_select(mu[:, rows], parts, spread[rows], k, upper, S)
        out[rows[ok]] = got[ok]
        slow[rows[~ok]] = True
    else:
        slow |= fine
    if slow.any():
        finite = [p[np.isfinite(p)] for p in parts]
        smax = max((p[-1] for p in finite if p.size), default=0.0)
        m, q = mu[:, slow], spread[slow]
        with np.errstate(invalid="ignore", over="ignore"):
            lo = m.min(axis=0) - q * smax - 1.0
            hi = m.max(axis=0) + q * smax + 1.0
        out[slow] = _bisect(m, parts, q, k, upper, lo, hi)
    return out


def _count(mu: np.ndarray, parts: list[np.ndarray], q: np.ndarray, v: np.ndarray, upper: bool):
    """For each query, how many candidates mu[f] -/+ q s are <= v."""
    count = np.zeros(v.shape, dtype=np.int64)
    for f, s in enumerate(parts):
        checkpoint()  # one step of one fold: O(queries log n), 15 ms at 200,000 queries
        with np.errstate(over="ignore", invalid="ignore"):
            if upper:  # mu + q s <= v  <=>  s <= (v - mu) / q
                count += np.searchsorted(s, (v - mu[f]) / q, side="right")
            else:  # mu - q s <= v  <=>  s >= (mu - v) / q
                count += s.size - np.searchsorted(s, (mu[f] - v) / q, side="left")
    return count


def _bisect(mu, parts, q, k: int, upper: bool, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """The smallest value with at least k candidates at or below it, by bisection from
    [lo, hi] to full precision (at most 200 steps)."""
    for _ in range(200):
        with np.errstate(invalid="ignore", over="ignore"):
            mid = 0.5 * (lo + hi)
        enough = _count(mu, parts, q, mid, upper) >= k
        stuck = (mid <= lo) | (mid >= hi)
        hi = np.where(enough, mid, hi)
        lo = np.where(enough, lo, mid)
        if stuck.all():
            break
    return hi


def _narrow_and_select(mu, parts, q, k: int, upper: bool, S: float):
    """The k-th smallest candidate of each query from the bracket around mu -/+ q S (see
    :func:`_kth_of_folds`); ``ok`` is False where rounding broke the bracket."""
    sign = 1.0 if upper else -1.0
    base = mu + sign * q * S
    # a few units in the last place wider: the counts divide by q, which rounds
    tol = 8 * np.spacing(np.abs(base).max(axis=0) + q * abs(S))
    lo = base.min(axis=0) - tol
    hi = base.max(axis=0) + tol
    c_lo, c_hi = _count(mu, parts, q, lo, upper), _count(mu, parts, q, hi, upper)
    ok = (c_lo < k) & (c_hi >= k)
    todo = np.flatnonzero(ok & (c_hi - c_lo > SELECT_AT))
    while todo.size:
        mid = 0.5 * (lo[todo] + hi[todo])
        stuck = (mid <= lo[todo]) | (mid >= hi[todo])  # adjacent floats: the answer is hi
        c = _count(mu[:, todo], parts, q[todo], mid, upper)
        enough = c >= k
        hi[todo] = np.where(enough, mid, hi[todo])
        c_hi[todo] = np.where(enough, c, c_hi[todo])
        lo[todo] = np.where(enough, lo[todo], mid)
        c_lo[todo] = np.where(enough, c_lo[todo], c)
        todo = todo[~stuck & (c_hi[todo] - c_lo[todo] > SELECT_AT)]
    out = hi.copy()
    pick = np.flatnonzero(ok & (c_hi - c_lo <= SELECT_AT))
    step = max(1, CHUNK_CELLS // SELECT_AT)  # a block's table of candidates: 16 MB
    for start in range(0, pick.size, step):
        checkpoint()
        at = pick[start : start + step]
        out[at] = _select(mu[:, at], parts, q[at], lo[at], hi[at], k - c_lo[at], upper)
    return out, ok


def _select(mu, parts, q, lo, hi, kth: np.ndarray, upper: bool) -> np.ndarray:
    """For each query, the kth-smallest (1-based) of its candidates counted in (lo, hi] (at
    most SELECT_AT of them): placed in a row of a (queries, SELECT_AT) table, then sorted."""
    sign = 1.0 if upper else -1.0
    m = mu.shape[1]
    table = np.full((m, SELECT_AT), np.inf)
    filled = np.zeros(m, dtype=np.intp)
    for f, s in enumerate(parts):
        with np.errstate(over="ignore", invalid="ignore"):
            if upper:
                a = np.searchsorted(s, (lo - mu[f]) / q, side="right")
                b = np.searchsorted(s, (hi - mu[f]) / q, side="right")
            else:
                a = np.searchsorted(s, (mu[f] - hi) / q, side="left")
                b = np.searchsorted(s, (mu[f] - lo) / q, side="left")
        size = b - a
        who = np.repeat(np.arange(m), size)
        within = np.arange(who.size) - np.repeat(np.cumsum(size) - size, size)
        table[who, filled[who] + within] = mu[f][who] + sign * q[who] * s[a[who] + within]
        filled += size
    table.sort(axis=1)
    return table[np.arange(m), kth - 1]


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
) -> tuple[np.ndarray, np.ndarray]:
    """Jackknife+ interval at each query.

    ``mu_loo(rows)`` returns, for the query rows ``rows``, the leave-one-out predictions
    mu_{-i}(x0) for every training row i: an array (len(rows), n). Queries are processed in
    blocks of about CHUNK_CELLS elements.
    """
    n = resid.size
    s = _scores(resid, spread_train)
    q = np.ones(m) if spread_q is None else spread_q
    k_lo, k_hi = ranks(n, level)
    lower = np.full(m, -np.inf)
    upper = np.full(m, np.inf)
    step = max(1, CHUNK_CELLS // max(n, 1))
    for start in range(0, m, step):
        checkpoint()
        rows = np.arange(start, min(m, start + step))
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
