"""Exact k-th smallest values for CV+ and jackknife+ at many answer rows, without forming the
n candidates of every row.

Both intervals take, at each answer row, the k-th smallest of n candidates mu_i + q s_i (the
lower end is the same problem negated: fl(-mu + q s) = -fl(mu - q s) exactly). The candidates
have structure:

- **CV+** (:func:`kth_of_shifted`): the candidates of fold f are that fold's sorted scores s,
  all shifted by the same mu_f. The k-th smallest of the union of K shifted sorted lists is
  found by a search over values: counting the candidates at or below a value takes one binary
  search per fold (vectorised over rows). The search interpolates between the counts at the
  ends of a bracket (two counts a step, aimed just below and just above rank k; a step that
  does not halve the bracket is followed by one that cuts it in thirds), until the bracket
  holds at most SELECT_AT runs of tied scores; those are formed and the right one taken.
  O((n + m) K log n) with a few steps.
- **jackknife+ of a local method** (:func:`kth_with_changes`): leaving out row i changes the
  prediction at x0 only for the few rows i near x0 (kNN: the k nearest and those tied with
  them); every other candidate is mu(x0) + q s_i, monotone in s_i. With the scores sorted once,
  the k-th smallest of the n candidates lies among the sorted scores at ranks k - w .. k + w
  (w the changed rows) and the w changed candidates: O(m w log w) after an O(n log n) sort.

Exactness does not rest on the search's arithmetic: each answer is a candidate formed exactly
as the definition forms it, and it is certified by the rank argument (every candidate left
below the selected window is at most the answer, every one above is at least it, and the
counts add up to k). Rows the certificate rejects (rounding at a bracket's end) take the
direct computation. Callers keep rows whose predictions or spread are not finite apart.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from nearwise.core.budget import checkpoint

#: Runs of tied candidates left in a row's bracket when the search stops and they are sorted.
SELECT_AT = 64
#: The share of a bracket's candidates a search step allows for the curvature of the count.
CURVE = 0.03
#: Answer rows searched together (their per-fold positions are held: K x ROWS_AT_ONCE ints).
ROWS_AT_ONCE = 65_536
#: Elements per block when candidates are formed directly.
DIRECT_CELLS = 2_000_000


@dataclass(frozen=True)
class _Part:
    """One fold's sorted scores and their runs of ties."""

    s: np.ndarray
    rid: np.ndarray  # run id of each position
    value: np.ndarray  # each run's score
    start: np.ndarray  # each run's first position
    end: np.ndarray  # one past each run's last position

    @classmethod
    def of(cls, s: np.ndarray) -> _Part:
        new = np.ones(s.size, dtype=bool)
        new[1:] = s[1:] != s[:-1]  # inf == inf: a run
        start = np.flatnonzero(new)
        end = np.append(start[1:], s.size)
        return cls(s, np.cumsum(new) - 1, s[start], start, end)


def direct(
    mu: np.ndarray, parts: list[np.ndarray], q: np.ndarray, k: int, sign: float = 1.0
) -> np.ndarray:
    """The definition: for each row (column of ``mu``), every candidate mu[f] + sign q s
    formed and the k-th smallest taken (NaN sorts last); in blocks of rows with the budget
    checked before each."""
    n = sum(p.size for p in parts)
    out = np.empty(mu.shape[1])
    step = max(1, DIRECT_CELLS // max(n, 1))
    for a in range(0, mu.shape[1], step):
        checkpoint()
        b = min(mu.shape[1], a + step)
        with np.errstate(over="ignore", invalid="ignore"):
            values = np.concatenate(
                [mu[f][None, a:b] + sign * q[None, a:b] * s[:, None] for f, s in enumerate(parts)]
            )
        out[a:b] = np.partition(values, k - 1, axis=0)[k - 1]
    return out


def kth_of_shifted(
    mu: np.ndarray, parts: list[np.ndarray], q: np.ndarray, k: int, pooled_kth: float
) -> np.ndarray:
    """For each row j, the k-th smallest of {mu[f, j] + q[j] s : s in parts[f], all f}.

    ``parts`` are sorted; ``mu`` (folds, rows) finite and ``q`` finite and positive;
    ``pooled_kth`` is the k-th smallest score of all parts (finite). Exact: see the module.
    """
    ps = [_Part.of(s) for s in parts]
    out = np.empty(mu.shape[1])
    for a in range(0, mu.shape[1], ROWS_AT_ONCE):
        b = min(mu.shape[1], a + ROWS_AT_ONCE)
        out[a:b] = _block(mu[:, a:b], ps, q[a:b], k, pooled_kth, parts)
    return out


def _positions(mu, ps: list[_Part], q, v) -> np.ndarray:
    """Per fold and row, how many of the fold's candidates are at or below ``v`` (by the
    scores: s <= (v - mu) / q; rounding may misplace one at the edge, which the certificate
    catches)."""
    pos = np.empty(mu.shape, dtype=np.intp)
    for f, p in enumerate(ps):
        checkpoint()  # one count of one fold: O(rows log n), about 10 ms at 100,000 rows
        with np.errstate(over="ignore", invalid="ignore"):
            pos[f] = np.searchsorted(p.s, (v - mu[f]) / q, side="right")
    return pos


def _runs(ps: list[_Part], lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Runs of tied scores between the positions ``lo`` and ``hi`` (per row, over folds)."""
    total = np.zeros(lo.shape[1], dtype=np.intp)
    for f, p in enumerate(ps):
        inside = hi[f] > lo[f]
        last = p.rid[np.maximum(hi[f] - 1, 0)]
        first = p.rid[np.minimum(lo[f], p.s.size - 1)]
        total += np.where(inside, last - first + 1, 0)
    return total


def _block(mu, ps: list[_Part], q, k: int, S: float, parts) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore"):
        base = mu + q * S
        # a few units in the last place wider: the counts divide by q, which rounds
        tol = 8 * np.spacing(np.abs(base).max(axis=0) + q * abs(S))
        lo = base.min(axis=0) - tol
        hi = base.max(axis=0) + tol
    p_lo, p_hi = _positions(mu, ps, q, lo), _positions(mu, ps, q, hi)
    c_lo, c_hi = p_lo.sum(axis=0), p_hi.sum(axis=0)
    ok = (c_lo < k) & (c_hi >= k) & np.isfinite(lo) & np.isfinite(hi)
    thirds = np.zeros(mu.shape[1], dtype=bool)  # the last step did not halve the bracket
    todo = np.flatnonzero(ok & (_runs(ps, p_lo, p_hi) > SELECT_AT))
    while todo.size:
        lo_t, hi_t, cl, ch = lo[todo], hi[todo], c_lo[todo], c_hi[todo]
        span = hi_t - lo_t
        with np.errstate(over="ignore", invalid="ignore"):
            width = (ch - cl).astype(float)
            # aim at ranks k -/+ h: h allows for the error of a linear guess of the count,
            # random (the square root of the candidates in the bracket) and from the
            # curvature of the scores' distribution (a share of them)
            h = np.maximum(SELECT_AT / 4, np.sqrt(width) + CURVE * width)
            v1 = lo_t + span * np.clip((k - h - cl) / width, 0.0, 1.0)
            v2 = lo_t + span * np.clip((k + h - cl) / width, 0.0, 1.0)
            third = thirds[todo]
            v1 = np.where(third, lo_t + span / 3, v1)
            v2 = np.where(third, hi_t - span / 3, v2)
        v1 = np.clip(v1, lo_t, hi_t)
        v2 = np.clip(v2, v1, hi_t)
        m_t, q_t = mu[:, todo], q[todo]
        p1, p2 = _positions(m_t, ps, q_t, v1), _positions(m_t, ps, q_t, v2)
        c1, c2 = p1.sum(axis=0), p2.sum(axis=0)
        # the new bracket: (v1, v2] when it holds rank k, else the part of (lo, hi] that does
        new_lo = np.where(c2 < k, v2, np.where(c1 < k, v1, lo_t))
        new_cl = np.where(c2 < k, c2, np.where(c1 < k, c1, cl))
        new_plo = np.where(c2 < k, p2, np.where(c1 < k, p1, p_lo[:, todo]))
        new_hi = np.where(c1 >= k, v1, np.where(c2 >= k, v2, hi_t))
        new_ch = np.where(c1 >= k, c1, np.where(c2 >= k, c2, ch))
        new_phi = np.where(c1 >= k, p1, np.where(c2 >= k, p2, p_hi[:, todo]))
        stuck = (new_lo == lo_t) & (new_hi == hi_t)  # adjacent floats: nothing left to split
        lo[todo], hi[todo], c_lo[todo], c_hi[todo] = new_lo, new_hi, new_cl, new_ch
        p_lo[:, todo], p_hi[:, todo] = new_plo, new_phi
        thirds[todo] = 2 * (new_ch - new_cl) > ch - cl
        runs = _runs(ps, p_lo[:, todo], p_hi[:, todo])
        todo = todo[~stuck & (runs > SELECT_AT)]
    out = np.empty(mu.shape[1])
    rows = np.flatnonzero(ok)
    got, sure = _select(mu[:, rows], ps, q[rows], p_lo[:, rows], p_hi[:, rows], k)
    out[rows] = got
    redo = np.concatenate([np.flatnonzero(~ok), rows[~sure]])
    if redo.size:
        out[redo] = direct(mu[:, redo], parts, q[redo], k)
    return out


def _select(mu, ps: list[_Part], q, p_lo, p_hi, k: int) -> tuple[np.ndarray, np.ndarray]:
    """For each row, the candidate of rank k - (candidates below ``p_lo``) among the runs
    between ``p_lo`` and ``p_hi``, and whether the rank argument certifies it. Rows whose
    search stopped with more than SELECT_AT runs (adjacent floats) get wider tables."""
    m = mu.shape[1]
    out, sure = np.full(m, np.nan), np.zeros(m, dtype=bool)
    need = k - p_lo.sum(axis=0)
    size = _runs(ps, p_lo, p_hi)
    wide = np.flatnonzero(size > SELECT_AT)
    groups = [(np.flatnonzero(size <= SELECT_AT), SELECT_AT)]
    groups += [(wide[size[wide] == w], int(w)) for w in np.unique(size[wide])]
    for rows, width in groups:
        step = max(1, DIRECT_CELLS // width)
        for a in range(0, rows.size, step):
            checkpoint()
            at = rows[a : a + step]
            out[at], sure[at] = _table(
                mu[:, at], ps, q[at], p_lo[:, at], p_hi[:, at], need[at], width
            )
    return out, sure


def _table(mu, ps: list[_Part], q, p_lo, p_hi, need, width: int):
    m = mu.shape[1]
    value = np.full((m, width), np.inf)
    mult = np.zeros((m, width), dtype=np.intp)
    filled = np.zeros(m, dtype=np.intp)
    below = np.full(m, -np.inf)  # the largest candidate left below the window
    above = np.full(m, np.inf)  # the smallest candidate left above it
    for f, p in enumerate(ps):
        a, b = p_lo[f], p_hi[f]
        with np.errstate(over="ignore", invalid="ignore"):
            has = a > 0
            below[has] = np.maximum(below[has], mu[f][has] + q[has] * p.s[a[has] - 1])
            has = b < p.s.size
            above[has] = np.minimum(above[has], mu[f][has] + q[has] * p.s[b[has]])
        inside = b > a
        r0 = p.rid[np.minimum(a, p.s.size - 1)]
        cnt = np.where(inside, p.rid[np.maximum(b - 1, 0)] - r0 + 1, 0)
        who = np.repeat(np.arange(m), cnt)
        within = np.arange(who.size) - np.repeat(np.cumsum(cnt) - cnt, cnt)
        run = r0[who] + within
        col = filled[who] + within
        with np.errstate(over="ignore", invalid="ignore"):
            value[who, col] = mu[f][who] + q[who] * p.value[run]
        mult[who, col] = np.minimum(b[who], p.end[run]) - np.maximum(a[who], p.start[run])
        filled += cnt
    order = np.argsort(value, axis=1, kind="stable")
    value = np.take_along_axis(value, order, axis=1)
    cum = np.cumsum(np.take_along_axis(mult, order, axis=1), axis=1)
    idx = np.minimum((cum < need[:, None]).sum(axis=1), width - 1)
    got = value[np.arange(m), idx]
    sure = (need >= 1) & (need <= cum[:, -1]) & (below <= got) & (got <= above)
    return got, sure


def kth_with_changes(
    base: np.ndarray,
    s_sorted: np.ndarray,
    rank_of: np.ndarray,
    q: np.ndarray,
    ind: np.ndarray,
    changed: np.ndarray,
    k: int,
) -> tuple[np.ndarray, np.ndarray]:
    """For rows r, the k-th smallest of {base[r] + q[r] s_i : every i} with the candidates of
    the rows ``ind[r]`` replaced by ``changed[r]`` (already formed, +inf where undefined).

    ``s_sorted`` holds the scores sorted, ``rank_of[i]`` the position of row i in it; ``base``
    may be +inf (then so is every unchanged candidate), ``q`` finite and positive. Returns the
    values and whether each is certified (see the module); the caller redoes the others.
    """
    n = s_sorted.size
    r, w = ind.shape
    lo = max(0, k - 1 - w)
    hi = min(n - 1, k - 1 + w)
    with np.errstate(over="ignore", invalid="ignore"):
        window = base[:, None] + q[:, None] * s_sorted[None, lo : hi + 1]
        below = base + q * s_sorted[lo - 1] if lo > 0 else np.full(r, -np.inf)
        above = base + q * s_sorted[hi + 1] if hi + 1 < n else np.full(r, np.inf)
    pos = rank_of[ind]
    gone_below = (pos < lo).sum(axis=1)
    inside = (pos >= lo) & (pos <= hi)
    rr, cc = np.nonzero(inside)
    window[rr, pos[rr, cc] - lo] = np.inf  # left out: replaced by its changed candidate
    cand = np.concatenate([window, changed], axis=1)
    real = cand.shape[1] - inside.sum(axis=1)  # the infinities put in are not candidates
    need = k - (lo - gone_below)
    idx = np.clip(need - 1, 0, cand.shape[1] - 1)
    got = np.sort(cand, axis=1)[np.arange(r), idx]
    sure = (need >= 1) & (need <= real) & (below <= got) & (got <= above)
    return got, sure


Changes = Callable[[np.ndarray], list[tuple[np.ndarray, np.ndarray, np.ndarray]]]
