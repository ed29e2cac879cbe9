"""Is a point inside the convex hull of the training rows? Exact, and bounded in cost.

A point x0 lies in the hull of rows x_1..x_n iff some weights lambda >= 0 with sum 1 give
X'lambda = x0: a linear program. This module answers it for many query rows at once:

1. **Flat data.** The rows are centered and divided by the largest feature range; an SVD
   finds the affine subspace they span (directions along which they spread by more than
   :data:`HULL_TOL`). A query off that subspace is outside (the direction separates it); the
   others are tested in the subspace's ``dim`` coordinates.
2. **dim <= 3** (:data:`FACET_MAX_DIM`): the hull's facets from qhull decide every row, in
   O(facets) per row. Each facet is a separating hyperplane, the dual certificate of the
   linear program, so this is the same test. In one to three dimensions qhull takes
   O(n log n) time and the hull has O(n) facets.
3. **4 <= dim <= 8** (:data:`HULL_MAX_DIM`), in three steps, each exact:

   a. *a separating direction*: the rows' extremes along :data:`N_DIRECTIONS` fixed
      directions. A query beyond one of them by more than :data:`HULL_TOL` is outside, with
      no program (that direction is the certificate).
   b. *a batched simplex* (:mod:`nearwise.core.hull_simplex`): the L1 distance from each
      query to the hull, min 1's+ + 1's- subject to X'lambda + s+ - s- = x0, 1'lambda = 1, all
      >= 0, solved for a block of queries at once by column generation, starting from those
      extremes. A verdict is given only with a certificate checked on the rows: weights
      within :data:`HULL_TOL` of the query (inside), or a direction along which the query
      lies beyond every row by more than :data:`HULL_TOL` times the direction's largest
      component (outside, since then its L1 distance exceeds :data:`HULL_TOL`). By duality
      one of the two exists for every query; see that module for the argument.
   c. *HiGHS* (scipy ``linprog``): the rare rows the simplex leaves undecided (degenerate
      programs, rounding) get the same program from HiGHS, by column generation with at most
      :data:`MAX_ROUNDS` rounds, the last over every row. Up to :data:`BATCH` programs go to
      HiGHS together as one block-diagonal program.

4. **dim > 8**: not tested. Nearly every new point is outside the hull there, so the test
   would flag almost everything; the graded distance measures are the guide.

Cost: step (a) costs (n + m) x 128 x dim multiplications; step (b) about
:data:`~nearwise.core.hull_simplex.SOLVE_S` x (dim + 1) per query and round, plus n x (dim + 1)
multiplications per query and pricing round (none for most rows inside the extremes' hull;
about three on average at dim = 8 with rows spread in a ball or on a sphere). That work is
counted as it is done, from the data alone; ``max_cost_s`` caps it, and rows still undecided
when it is reached are reported as not tested, never guessed. The cap is about the size of
the request, not about those rows.

References
----------
Barber, C. B., Dobkin, D. P. & Huhdanpaa, H. (1996). The Quickhull algorithm for convex hulls.
*ACM Transactions on Mathematical Software* 22(4), 469-483.
Dantzig, G. B. & Wolfe, P. (1960). Decomposition principle for linear programs.
*Operations Research* 8(1), 101-111 (column generation).
Huangfu, Q. & Hall, J. A. J. (2018). Parallelizing the dual revised simplex method.
*Mathematical Programming Computation* 10, 119-142 (HiGHS).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.optimize import linprog
from scipy.spatial import ConvexHull, QhullError

from nearwise.core import hull_simplex
from nearwise.core.budget import checkpoint

#: Distance from the hull, in units of the largest feature range, still counted as inside.
HULL_TOL = 1e-7
#: Largest affine dimension decided by qhull facets.
FACET_MAX_DIM = 3
#: Largest affine dimension in which the hull test runs at all.
HULL_MAX_DIM = 8
#: Programs solved together in one block-diagonal call to HiGHS (step c).
BATCH = 100
#: Rounds of column generation per query row in HiGHS (step c); the last is over every row.
MAX_ROUNDS = 20
#: Work counted per HiGHS program (step c), in seconds on the reference machine.
LP_SOLVE_S = 1e-3
#: Fixed directions whose extreme rows seed the programs and certify clear outsiders.
N_DIRECTIONS = 128
#: Query rows x facets (or directions) computed at once: 8 MB of float64 per chunk, so the
#: facet test's memory does not grow with the query (20,000 rows x 200,000 facets of rows on
#: a sphere would be 30 GiB at once), and the time budget is checked between chunks.
FACET_CELLS = 1 << 20


@dataclass(frozen=True)
class HullTest:
    """Result of :func:`hull_test` for the query rows.

    ``outside`` and ``tested`` are boolean arrays over the query rows (rows not asked about
    are untested and not outside). ``dim`` is the affine dimension of the training rows;
    ``route`` is ``"facets"``, ``"lp"`` or ``"skipped"`` (dim above :data:`HULL_MAX_DIM`);
    ``cost_s`` the work counted against ``max_cost_s`` (the linear programs only).
    """

    outside: np.ndarray
    tested: np.ndarray
    dim: int
    route: str
    cost_s: float = 0.0


def hull_test(
    Z: np.ndarray,
    Zq: np.ndarray,
    rows: np.ndarray | None = None,
    *,
    route: str = "auto",
    max_cost_s: float | None = None,
) -> HullTest:
    """Which query rows lie outside the convex hull of the training rows.

    Parameters
    ----------
    Z : ndarray, shape (n, p)
        Training rows (already scaled), n >= 1.
    Zq : ndarray, shape (m, p)
        Query rows.
    rows : ndarray of int, optional
        The query rows to test (default: all).
    route : {"auto", "lp"}
        ``"lp"`` uses the linear program in every dimension up to :data:`HULL_MAX_DIM`
        (for checks against other implementations).
    max_cost_s : float, optional
        Cap on the linear programs' work, in seconds on the reference machine as counted
        (see the module notes); None: no cap.

    Returns
    -------
    HullTest
    """
    m = Zq.shape[0]
    outside = np.zeros(m, dtype=bool)
    tested = np.zeros(m, dtype=bool)
    ask = np.arange(m) if rows is None else np.asarray(rows, dtype=int)
    centre = Z.mean(axis=0)
    size = float(np.ptp(Z, axis=0).max()) if Z.size else 0.0
    size = size if size > 0 else 1.0
    U = (Z - centre) / size
    Uq = (Zq[ask] - centre) / size
    basis, off = _flat_basis(U, Uq)
    dim = basis.shape[1]
    outside[ask[off]] = True
    tested[ask[off]] = True
    keep = ask[~off]
    if dim > HULL_MAX_DIM:
        return HullTest(outside, tested, dim, "skipped")
    W, Wq = U @ basis, Uq[~off] @ basis
    if dim <= FACET_MAX_DIM and route == "auto":
        out = _by_facets(W, Wq)
        if out is not None:
            outside[keep], tested[keep] = out, True
            return HullTest(outside, tested, dim, "facets")
    out, done, spent = _by_lp(W, Wq, max_cost_s)
    outside[keep], tested[keep] = out & done, done
    return HullTest(outside, tested, dim, "lp", spent)


def subspace(Z: np.ndarray) -> np.ndarray:
    """The training rows in the coordinates the test uses: centered, divided by the largest
    feature range, in an orthonormal basis of the affine subspace they span (its dimension
    is the number of columns)."""
    centre = Z.mean(axis=0)
    size = float(np.ptp(Z, axis=0).max()) if Z.size else 0.0
    U = (Z - centre) / (size if size > 0 else 1.0)
    basis, _ = _flat_basis(U, U[:0])
    return U @ basis


def _flat_basis(U: np.ndarray, Uq: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Orthonormal basis of the directions the rows spread along, and the queries off it."""
    n, p = U.shape
    M = U - U.mean(axis=0)
    if n < p:  # a full basis of R^p: the complement of the rows' span is flat too
        M = np.vstack([M, np.zeros((p - n, p))])
    _, _, vt = np.linalg.svd(M, full_matrices=False)
    coords = U @ vt.T
    spread = np.ptp(coords, axis=0) > HULL_TOL
    lo, hi = coords.min(axis=0), coords.max(axis=0)
    qc = Uq @ vt.T
    flat = ~spread
    off = ((qc[:, flat] < lo[flat] - HULL_TOL) | (qc[:, flat] > hi[flat] + HULL_TOL)).any(axis=1)
    return vt[spread].T, off


def _by_facets(W: np.ndarray, Wq: np.ndarray) -> np.ndarray | None:
    """Outside by the hull's facets, or None when qhull cannot build the hull."""
    dim = W.shape[1]
    if dim == 0:
        return np.zeros(len(Wq), dtype=bool)
    if dim == 1:
        w = W[:, 0]
        return (Wq[:, 0] < w.min() - HULL_TOL) | (Wq[:, 0] > w.max() + HULL_TOL)
    try:
        eq = ConvexHull(W).equations  # unit normals: a @ w + b <= 0 inside
    except QhullError:
        return None
    return beyond(Wq, eq[:, :-1], eq[:, -1])


def beyond(Wq: np.ndarray, normals: np.ndarray, offsets: np.ndarray) -> np.ndarray:
    """For each row w of ``Wq``: is a @ w + b > HULL_TOL for some row a of ``normals`` (with its
    offset b)?

    In chunks of at most FACET_CELLS query rows x facets, the budget checked before each: one
    matrix product of [w, 1] with [normals, offsets]' per chunk (2 ns per row and facet on
    one core), then the largest value of each row.
    """
    m = Wq.shape[0]
    out = np.zeros(m, dtype=bool)
    if m == 0 or normals.shape[0] == 0:
        return out
    planes = np.ascontiguousarray(np.column_stack([normals, offsets]).T)  # (dim + 1, facets)
    step = max(1, FACET_CELLS // normals.shape[0])
    for start in range(0, m, step):
        checkpoint()
        w = Wq[start : start + step]
        # one expression: the chunk's products are freed before the next chunk's are made
        out[start : start + step] = (np.column_stack([w, np.ones(len(w))]) @ planes).max(
            axis=1
        ) > HULL_TOL
    return out


def _by_lp(
    W: np.ndarray, Wq: np.ndarray, budget_s: float | None
) -> tuple[np.ndarray, np.ndarray, float]:
    """Outside, and decided, for each query row, and the work counted: steps a to c."""
    m, dim = Wq.shape
    outside = np.zeros(m, dtype=bool)
    done = np.zeros(m, dtype=bool)
    if m == 0:
        return outside, done, 0.0
    D = np.random.default_rng(0).standard_normal((N_DIRECTIONS, dim))
    D /= np.linalg.norm(D, axis=1)[:, None]
    top, seeds = _extremes(W, D)
    clear = beyond(Wq, D, -top)
    outside[clear] = done[clear] = True
    ask = np.flatnonzero(~clear)
    out, ok, spent = hull_simplex.decide(W, Wq[ask], seeds, HULL_TOL, FACET_CELLS, budget_s)
    outside[ask], done[ask] = out, ok
    rest = ask[~ok]
    if budget_s is not None and spent >= budget_s:
        rest = rest[:0]  # the cap was reached in the simplex: its undecided rows stay so
    if rest.size:
        left = None if budget_s is None else budget_s - spent
        out, ok, more = _by_highs(W, Wq[rest], seeds, left)
        outside[rest], done[rest] = out, ok
        spent += more
    return outside, done, spent


def _by_highs(
    W: np.ndarray, Wq: np.ndarray, seeds: np.ndarray, budget_s: float | None
) -> tuple[np.ndarray, np.ndarray, float]:
    """Step c: HiGHS column generation for each query row, the last round over every row."""
    m, dim = Wq.shape
    n = W.shape[0]
    outside = np.zeros(m, dtype=bool)
    done = np.zeros(m, dtype=bool)
    width = min(2 * (dim + 1), n)
    sets: dict[int, np.ndarray] = {}
    rounds: dict[int, int] = {}
    queue = list(range(m))[::-1]  # in order of index, the first at the end
    spent = 0.0
    while (sets or queue) and (budget_s is None or spent < budget_s):
        checkpoint()
        while queue and len(sets) < BATCH:
            i = queue.pop()
            sets[i], rounds[i] = seeds, 0
        batch = sorted(sets)
        spent += len(batch) * (LP_SOLVE_S + n * dim * hull_simplex.PRICE_S)
        values, duals = _solve_block(W, Wq[batch], [sets[i] for i in batch])
        for j, i in enumerate(batch):
            rounds[i] += 1
            gain = W @ duals[j, :dim] + duals[j, dim]
            verdict, grown = _step(values[j], gain, sets.pop(i), width)
            if verdict is not None:
                outside[i], done[i] = verdict, True
            else:
                sets[i] = grown if rounds[i] < MAX_ROUNDS - 1 else np.arange(n)
    return outside, done, spent


def _extremes(W: np.ndarray, D: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Largest projection of the rows on each direction, and the rows that reach it."""
    top = np.full(D.shape[0], -np.inf)
    arg = np.zeros(D.shape[0], dtype=int)
    chunk = 8192
    for start in range(0, W.shape[0], chunk):
        checkpoint()
        proj = D @ W[start : start + chunk].T  # (directions, chunk)
        j = proj.argmax(axis=1)
        best = proj[np.arange(D.shape[0]), j]
        better = best > top
        top[better], arg[better] = best[better], start + j[better]
    return top, np.unique(arg)


def _step(
    value: float, gain: np.ndarray, S: np.ndarray, width: int
) -> tuple[bool | None, np.ndarray]:
    """One pricing step: inside, outside (no row can lower the distance), or a larger set."""
    if value <= HULL_TOL:
        return False, S
    gain[S] = -np.inf
    best = np.argpartition(gain, -width)[-width:]
    best = best[gain[best] > 1e-9]
    if best.size == 0:
        return True, S
    return None, np.union1d(S, best)


def _solve_block(
    W: np.ndarray, Wq: np.ndarray, sets: list[np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """L1 distance from each query row to the hull of its rows, and the dual solutions.

    One linear program per query row, solved together as one block-diagonal program: for row
    q with rows S, min 1's+ + 1's- subject to W_S' lambda + s+ - s- = q, 1'lambda = 1, all
    >= 0. Its dual (u, t) is a hyperplane u'w + t <= 0 holding every row of S; when the
    distance is positive, the query is beyond it, and a row with u'w + t > 0 could lower it.
    """
    B, dim = len(sets), W.shape[1]
    idx = np.concatenate(sets)
    block = np.repeat(np.arange(B), [S.size for S in sets])
    K, r = idx.size, dim + 1
    # weight columns first (one per row of each set), then 2 dim slack columns per block
    lam_rows = (block[:, None] * r + np.arange(r)).ravel()
    lam_cols = np.repeat(np.arange(K), r)
    lam_vals = np.column_stack([W[idx], np.ones(K)]).ravel()
    slack_rows = np.tile((np.arange(B)[:, None] * r + np.arange(dim)).ravel(), 2)
    slack_cols = K + np.concatenate(
        [(np.arange(B)[:, None] * 2 * dim + np.arange(dim) + h * dim).ravel() for h in (0, 1)]
    )
    slack_vals = np.repeat([1.0, -1.0], B * dim)
    A = sparse.csc_matrix(
        (
            np.concatenate([lam_vals, slack_vals]),
            (np.concatenate([lam_rows, slack_rows]), np.concatenate([lam_cols, slack_cols])),
        ),
        shape=(B * r, K + 2 * dim * B),
    )
    cost = np.concatenate([np.zeros(K), np.ones(2 * dim * B)])
    rhs = np.column_stack([Wq, np.ones(B)]).ravel()
    res = linprog(cost, A_eq=A, b_eq=rhs, bounds=(0, None), method="highs")
    if res.status != 0:  # pragma: no cover - every block is feasible and bounded
        raise RuntimeError(f"hull program failed: {res.message}")
    values = res.x[K:].reshape(B, 2 * dim).sum(axis=1)
    return values, res.eqlin.marginals.reshape(B, r)
