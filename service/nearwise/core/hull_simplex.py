"""Hull membership of many query rows at once: a batched simplex with column generation.

For a query row q and training rows w_1..w_n (in the hull test's subspace coordinates, d of
them, r = d + 1), the program

    min 1's+ + 1's-  subject to  W_S' lambda + s+ - s- = q,  1' lambda = 1,  all >= 0

gives the L1 distance from q to the hull of the rows S. Every query row of a block of
:data:`QUERY_BLOCK` is solved at the same time by the primal simplex method, written out in
numpy: each row keeps its basis of r columns, the inverse of the basis matrix and the basic
values, and one pivot of every row is a handful of array operations over the block (pricing by
Dantzig's rule, the ratio test, a rank-one update of the inverse). S starts as the given seed
rows; when a row's program is optimal on S, its dual (u, t) prices every training row
(column generation, Dantzig & Wolfe 1960): the training rows are read in chunks, each cut into
2r segments, the row of largest u'w + t in each segment is a candidate (partial pricing), and
the 2r best candidates with u'w + t > :data:`VIOLATION` join S.

**Why the verdicts are exact.** The simplex only proposes; a verdict is given only with a
certificate checked directly, on the rows themselves, with the basis solved afresh:

- *inside*: weights lambda >= 0 of training rows, scaled to sum 1, with
  ||sum lambda_j w_j - q||_1 <= ``tol``: the point sum lambda_j w_j is in the hull, within ``tol``
  of q;
- *outside*: a direction u with u'q - max_i u'w_i > ``tol`` * max_k |u_k|, the maximum taken
  over every training row. For any point h of the hull, u'(q - h) >= that gap and
  u'(q - h) <= max_k |u_k| ||q - h||_1, so q is farther than ``tol`` from the hull in L1.

By linear-programming duality one of the two exists for every row: the optimal weights of
the program over all rows are within the L1 distance of q, and its optimal dual has
max_k |u_k| <= 1 (the slack columns' reduced costs) and a gap of at least the L1 distance
(u'q + t is the distance and u'w + t <= 0 for every row). A row for which
neither is found within :data:`MAX_ROUNDS` pricing rounds and :data:`MAX_PIVOTS` pivots per
round (degenerate programs, rounding) is returned undecided, for the caller's other test; it is
never guessed. Degenerate pivots do not cycle: a row whose objective has not moved for
:data:`STALL` pivots switches to Bland's rule (smallest index enters and leaves), which cannot
cycle in exact arithmetic (a row that still makes no progress runs out of pivots).

Cost per query row: pivots x r (2d + |seeds| + added rows) for the reduced costs, and per
pricing round n r multiplications (one matrix product over the block, in chunks of at most
``cells`` entries). Memory: the block's added rows (QUERY_BLOCK x MAX_ROUNDS x 2r indices,
and their coordinates while pivoting: at most 18 MB at d = 8) and one pricing chunk.

References
----------
Dantzig, G. B. & Wolfe, P. (1960). Decomposition principle for linear programs.
*Operations Research* 8(1), 101-111.
Bland, R. G. (1977). New finite pivoting rules for the simplex method. *Mathematics of
Operations Research* 2(2), 103-107.
Chvatal, V. (1983). *Linear Programming*. Freeman, chapters 3 and 7 (the revised simplex method).
"""

from __future__ import annotations

import numpy as np

from nearwise.core.budget import checkpoint

#: Query rows solved together.
QUERY_BLOCK = 512
#: Training rows joining a program per round, per equality row (r = d + 1).
WIDTH = 2
#: Pricing rounds per query row, at most.
MAX_ROUNDS = 30
#: Pivots per row and round, at most (times r).
MAX_PIVOTS = 12
#: Pivots without progress before a row switches to Bland's rule.
STALL = 8
#: A column enters when its reduced cost is below -EPS.
EPS = 1e-10
#: Smallest pivot element accepted by the ratio test.
PIVOT = 1e-9
#: A training row joins a program when its u'w + t exceeds this.
VIOLATION = 1e-9
#: The work counted against a cap, in seconds on the reference machine (one core, one BLAS
#: thread; tests/benchmarks/calibrate_cost.py): per query row, round and equality row (the
#: pivots), and per query row priced, training row and equality row (the pricing pass).
SOLVE_S = 5e-6
PRICE_S = 0.2e-9


def decide(
    W: np.ndarray,
    Wq: np.ndarray,
    seeds: np.ndarray,
    tol: float,
    cells: int,
    budget_s: float | None = None,
) -> tuple[np.ndarray, np.ndarray, float]:
    """Outside, and decided, for each query row (see the module notes), and the work counted.

    ``W`` (n, d) training rows and ``Wq`` (m, d) query rows in the same coordinates, ``seeds``
    indices of training rows to start from (at least one), ``tol`` the L1 distance counted as
    inside, ``cells`` the largest query rows x training rows product computed at once.
    ``budget_s``: no new round starts once the work counted (:data:`SOLVE_S`,
    :data:`PRICE_S`) reaches it; rows not decided by then are returned undecided. The count
    depends on the data only, never on the clock, so the same request decides the same rows.
    """
    m = Wq.shape[0]
    outside = np.zeros(m, dtype=bool)
    decided = np.zeros(m, dtype=bool)
    spent = 0.0
    WT = np.ascontiguousarray(W.T)  # (d, n): each pricing chunk a contiguous block
    for start in range(0, m, QUERY_BLOCK):
        left = None if budget_s is None else budget_s - spent
        if left is not None and left <= 0:
            break
        block = _Block(W, WT, Wq[start : start + QUERY_BLOCK], seeds, tol, cells)
        out, done = block.run(left)
        outside[start : start + QUERY_BLOCK] = out
        decided[start : start + QUERY_BLOCK] = done
        spent += block.spent
    return outside, decided, spent


class _Block:
    """The programs of one block of query rows. Column ids of a row: 0..d-1 the slacks s+,
    d..2d-1 the slacks s-, then the seed rows, then the rows added by pricing."""

    def __init__(
        self,
        W: np.ndarray,
        WT: np.ndarray,
        Q: np.ndarray,
        seeds: np.ndarray,
        tol: float,
        cells: int,
    ):
        self.W, self.WT, self.Q, self.tol, self.cells = W, WT, Q, tol, cells
        B, d = Q.shape
        self.d, self.r = d, d + 1
        self.seeds = np.asarray(seeds, dtype=int)
        self.S = np.vstack([W[self.seeds].T, np.ones(self.seeds.size)])  # (r, seeds)
        self.width = min(WIDTH * self.r, W.shape[0])
        self.added = np.zeros((B, MAX_ROUNDS * self.width), dtype=int)
        self.n_added = np.zeros(B, dtype=int)
        self.b = np.column_stack([Q, np.ones(B)])
        self.spent = 0.0
        # start: the nearest seed (L1) with weight 1, the slacks taking up the difference
        near = np.abs(Q[:, None, :] - W[self.seeds][None, :, :]).sum(axis=2).argmin(axis=1)
        diff = Q - W[self.seeds[near]]
        self.basis = np.column_stack([np.where(diff >= 0, 0, d) + np.arange(d), 2 * d + near])

    def run(self, budget_s: float | None) -> tuple[np.ndarray, np.ndarray]:
        B, n, r = self.Q.shape[0], self.W.shape[0], self.r
        outside = np.zeros(B, dtype=bool)
        decided = np.zeros(B, dtype=bool)
        live = np.arange(B)
        room = self.added.shape[1]
        while live.size and (budget_s is None or self.spent < budget_s):
            checkpoint()
            self.spent += SOLVE_S * r * live.size
            optimal = self._solve(live)
            value, inside = self._inside(live)
            decided[live[inside]] = True
            price = live[optimal & ~inside & (value > self.tol)]
            if price.size == 0:
                break
            self.spent += PRICE_S * r * n * price.size
            certified, violators = self._price(price)
            outside[price[certified]] = decided[price[certified]] = True
            grow = []
            for i, rows, done in zip(price, violators, certified, strict=True):
                k = self.n_added[i]
                if done or rows.size == 0 or k + rows.size > room:
                    continue  # decided; or optimal over every row, or out of room: undecided
                self.added[i, k : k + rows.size] = rows
                self.n_added[i] = k + rows.size
                grow.append(i)
            live = np.array(grow, dtype=int)
        return outside & decided, decided

    # ------------------------------------------------------------------ columns and bases

    def _columns(self, rows: np.ndarray, ids: np.ndarray) -> np.ndarray:
        """The constraint columns (len, r) of column ``ids`` of query ``rows`` (equal shapes)."""
        d, e = self.d, self.seeds.size
        out = np.zeros((*ids.shape, self.r))
        slack = ids < 2 * d
        k = ids[slack] % d
        out[slack, k] = np.where(ids[slack] < d, 1.0, -1.0)
        seed = (ids >= 2 * d) & (ids < 2 * d + e)
        out[seed] = self.S[:, ids[seed] - 2 * d].T
        add = ids >= 2 * d + e
        rr = np.broadcast_to(rows.reshape(rows.shape + (1,) * (ids.ndim - rows.ndim)), ids.shape)
        idx = self.added[rr[add], ids[add] - 2 * d - e]
        out[add, :d] = self.W[idx]
        out[add, d] = 1.0
        return out

    def _fresh(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Basis matrices (transposed to rows x r x r), their inverses and the basic values,
        solved afresh; singular bases start over from the slacks and the first seed."""
        M = np.swapaxes(self._columns(rows, self.basis[rows]), 1, 2)  # (L, r, r) columns
        inv, bad = _invert(M)
        if bad.any():
            d = self.d
            diff = self.Q[rows[bad]] - self.W[self.seeds[0]]
            self.basis[rows[bad]] = np.column_stack(
                [np.where(diff >= 0, 0, d) + np.arange(d), np.full(bad.sum(), 2 * d)]
            )
            M[bad] = np.swapaxes(self._columns(rows[bad], self.basis[rows[bad]]), 1, 2)
            inv[bad] = np.linalg.inv(M[bad])  # slacks and one row: never singular
        x = np.einsum("lrs,ls->lr", inv, self.b[rows])
        return M, inv, np.maximum(x, 0.0)

    # ------------------------------------------------------------------ the restricted programs

    def _solve(self, live: np.ndarray) -> np.ndarray:
        """Pivot each row's program over its columns until it is optimal or its value is at
        most ``tol``; True where that was reached (False: out of pivots, or no pivot element)."""
        d, r, e = self.d, self.r, self.seeds.size
        rows, where = live.copy(), np.arange(live.size)  # working rows, their place in live
        _, inv, x = self._fresh(rows)
        basis = self.basis[rows].copy()
        A = int(self.n_added[rows].max())
        Wadd = self.W[self.added[rows, :A]]  # (L, A, d)
        valid = np.arange(A)[None, :] < self.n_added[rows][:, None]
        optimal = np.zeros(live.size, dtype=bool)
        active = np.ones(rows.size, dtype=bool)
        still = np.zeros(rows.size, dtype=int)
        last = np.full(rows.size, np.inf)
        bland = np.zeros(rows.size, dtype=bool)
        for step in range(MAX_PIVOTS * r):
            if step % 16 == 15:
                checkpoint()
            cB = (basis < 2 * d).astype(float)
            value = (cB * x).sum(axis=1)
            y = np.einsum("lr,lrs->ls", cB, inv)
            u, t = y[:, :d], y[:, d]
            rc = np.empty((rows.size, 2 * d + e + A))
            rc[:, :d] = 1 - u
            rc[:, d : 2 * d] = 1 + u
            rc[:, 2 * d : 2 * d + e] = -(y @ self.S)
            if A:
                priced = np.matmul(Wadd, u[:, :, None])[:, :, 0] + t[:, None]
                rc[:, 2 * d + e :] = np.where(valid, -priced, np.inf)
            np.put_along_axis(rc, basis, np.inf, axis=1)
            neg = rc < -EPS
            done = active & (~neg.any(axis=1) | (value <= self.tol))
            optimal[where[done]] = True
            active &= ~done
            improved = value < last - 1e-13
            still = np.where(improved, 0, still + 1)
            last = np.where(improved, value, last)
            bland |= still > STALL
            g = np.flatnonzero(active)
            if g.size == 0:
                break
            enter = np.where(bland[g], neg[g].argmax(axis=1), rc[g].argmin(axis=1))
            dcol = np.einsum("lrs,ls->lr", inv[g], self._columns(rows[g], enter))
            pos = dcol > PIVOT
            ratio = np.where(pos, x[g] / np.where(pos, dcol, 1.0), np.inf)
            best = ratio.min(axis=1)
            tie = ratio <= best[:, None] * (1 + 1e-12)
            first = np.where(tie, basis[g], np.iinfo(basis.dtype).max).argmin(axis=1)
            leave = np.where(bland[g], first, ratio.argmin(axis=1))
            stuck = ~np.isfinite(best)  # no pivot element (rounding): the row gives up
            active[g[stuck]] = False
            ok = ~stuck
            g, enter, dcol, leave, best = g[ok], enter[ok], dcol[ok], leave[ok], best[ok]
            x[g] -= best[:, None] * dcol
            x[g, leave] = best
            np.maximum(x, 0.0, out=x)
            piv = inv[g, leave, :] / dcol[np.arange(g.size), leave][:, None]
            inv[g] -= dcol[:, :, None] * piv[:, None, :]
            inv[g, leave, :] = piv
            basis[g, leave] = enter
            if active.sum() < 0.5 * rows.size:  # keep only the working rows
                self.basis[rows] = basis
                keep = active
                rows, where, basis, inv, x = (
                    rows[keep],
                    where[keep],
                    basis[keep],
                    inv[keep],
                    x[keep],
                )
                Wadd, valid, still, last = Wadd[keep], valid[keep], still[keep], last[keep]
                bland, active = bland[keep], active[keep]
        self.basis[rows] = basis
        return optimal

    def _inside(self, live: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Objective values and the checked inside certificates of the rows ``live``."""
        d = self.d
        M, _, x = self._fresh(live)
        value = np.where(self.basis[live] < 2 * d, x, 0.0).sum(axis=1)
        lam = np.where(self.basis[live] >= 2 * d, x, 0.0)  # (L, r)
        total = lam.sum(axis=1)
        point = np.einsum("lkr,lr->lk", M[:, :d, :], lam) / np.where(total > 0, total, 1.0)[:, None]
        resid = np.abs(point - self.Q[live]).sum(axis=1)
        return value, (total > 0) & (resid <= self.tol)

    def _price(self, rows: np.ndarray) -> tuple[np.ndarray, list[np.ndarray]]:
        """For rows optimal on their columns: is the dual a checked outside certificate, and
        else the training rows with the largest u'w + t > 0 (at most ``width``)."""
        d, n = self.d, self.W.shape[0]
        _, inv, _ = self._fresh(rows)
        cB = (self.basis[rows] < 2 * d).astype(float)
        y = np.einsum("lr,lrs->ls", cB, inv)  # (L, r)
        u, t = y[:, :d], y[:, d]
        L, k = rows.size, self.width
        # chunks of k segments; the largest u'w + t of each segment is a candidate, and the k
        # largest candidates join the row's columns (partial pricing, Chvatal 1983, ch. 7)
        step = k * max(1, self.cells // (L * k))
        best_v = np.full((L, k), -np.inf)
        best_i = np.zeros((L, k), dtype=int)
        for start in range(0, n, step):
            checkpoint()
            g = u @ self.WT[:, start : start + step]  # (L, chunk)
            c = g.shape[1]
            s = -(-c // k)  # segment length (the last chunk is padded)
            if s * k != c:
                g = np.concatenate([g, np.full((L, s * k - c), -np.inf)], axis=1)
            g = g.reshape(L, k, s)
            at = g.argmax(axis=2)
            val = np.concatenate([best_v, _take(g, at[:, :, None])[:, :, 0] + t[:, None]], 1)
            idx = np.concatenate([best_i, start + np.arange(k) * s + at], axis=1)
            keep = np.argpartition(val, -k, axis=1)[:, -k:]
            best_v, best_i = _take(val, keep), _take(idx, keep)
        top = best_v.max(axis=1)  # the largest u'w + t over every row
        gap = (np.einsum("lk,lk->l", u, self.Q[rows]) + t) - top
        certified = gap > self.tol * np.abs(u).max(axis=1)
        violators = [best_i[j][best_v[j] > VIOLATION] for j in range(L)]
        return certified, violators


def _take(a: np.ndarray, idx: np.ndarray) -> np.ndarray:
    return np.take_along_axis(a, idx, axis=-1)


def _invert(M: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Inverses of the basis matrices, and which are (nearly) singular. Their entries are at
    most 1 in size (rows scaled to the unit range), so a large inverse means a large condition
    number."""
    try:
        inv = np.linalg.inv(M)
    except np.linalg.LinAlgError:
        bad = np.linalg.cond(M) > 1 / PIVOT**2
        inv = np.zeros_like(M)
        inv[~bad] = np.linalg.inv(M[~bad])
        return inv, bad
    return inv, ~(np.abs(inv).max(axis=(1, 2)) < 1 / PIVOT)
