"""What the locality diagnostics will cost, measured on the data before they run.

The nearest-row search and the hull test cost what the data's shape makes them cost, not
what the row counts alone say: a query row among spread-out rows is found in about a hundred
distance computations, while one at the centre of rows spread on a sphere visits a third of
them (tens of thousands); rows in a cube have a few hundred hull facets, rows on a sphere
twice as many as rows. So the estimate measures both, cheaply:

- **the search**: :class:`~nearwise.core.neighbors.Nearest` counts the distances its tree
  computes; :data:`PROBE_ROWS` query rows (a fixed sample, independent of row order) are
  searched and their mean count taken. On a sphere queried from inside, this is the count
  that separates a 1 s request from a 25 min one.
- **the hull**: in two or three dimensions the facet test costs query rows x facets. The
  vertices of the hulls of two samples (:data:`HULL_SAMPLES` rows) give the growth exponent
  of the vertex count, V(n) = V(s2) (n / s2)^beta with beta in [0, 1] (1 on a sphere, where
  every row is a vertex; near 0 in a cube), and facets = V (two dimensions) or 2V - 4 (three,
  triangulated). From four to eight dimensions the linear programs of
  :mod:`nearwise.core.hull_simplex` cost, per query row inside the ranges, one solve per round
  and one pricing pass over the training rows per round after the first; the rounds grow
  with the dimension (:data:`LP_ROUNDS`, measured on rows in a cube, a ball and on a sphere).
  Their work is counted as it runs and capped (``Caps.hull_cost_s``), so the estimate is at
  most the cap.

Each count is then priced in seconds per operation measured on the reference machine (one
core, one BLAS thread) by ``tests/benchmarks/calibrate_cost.py``, which prints the ratio of
estimate to measured time for each shape it runs.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from math import log2

import numpy as np
from scipy.spatial import ConvexHull, QhullError

from nearwise.core import hull, hull_simplex
from nearwise.core.data import Scaler
from nearwise.core.errors import OverLimit, Where
from nearwise.core.neighbors import KD_MAX_DIM, Nearest, sample_rows
from nearwise.core.spec import Caps

#: Query rows searched to measure the search's work per row.
PROBE_ROWS = 200
#: Training rows searched to measure the same for the typical spacing (SPACING_SAMPLE rows).
PROBE_TRAIN_ROWS = 100
#: Sample sizes whose hulls give the growth of the vertex count.
HULL_SAMPLES = (1000, 4000)

#: Tree search: seconds per query row, plus per distance computed (and per feature of it).
SEARCH_ROW_S = 1e-6
SEARCH_CALL_S = 8e-9
SEARCH_CALL_P_S = 2e-9
#: Building the tree: per row, feature and log2 of the rows.
TREE_BUILD_S = 1.1e-8
#: Brute force (above KD_MAX_DIM features): per query row, training row and feature.
BRUTE_S = 0.7e-9
#: The typical spacing: per sampled training row (k = 2 searches, with their overhead).
SPACING_ROW_S = 4e-5
#: The probe itself: the sample hulls and searches, at most.
PROBE_S = 0.05
#: Per query row: ranges, flags, notices.
ROW_S = 2e-6
#: The summary's neighborhood radii: per sampled row (RADIUS_SAMPLE) and training row, plus
#: per feature of it.
RADIUS_S = 12.5e-9
RADIUS_P_S = 0.3e-9
#: The hull: the subspace (per row and squared feature); qhull (per row, and per vertex in two
#: and in three dimensions); the facet test (per query row, and per query row and facet).
FLAT_S = 2e-9
QHULL_ROW_S = 0.3e-6
QHULL_VERTEX_S = {2: 3e-6, 3: 7.5e-6}
FACET_ROW_S = 1.5e-6
FACET_S = 1.7e-9
#: The linear-program route (4 to 8 dimensions): pricing passes per query row, per dimension
#: above 3 (measured, 1,000 query rows, 2,000 to 100,000 training rows: 0.01 to 0.7 at four
#: dimensions, 0.4 to 3.4 at eight; the seconds per solve and per priced row are
#: hull_simplex.SOLVE_S and PRICE_S); and per query or training row, direction and dimension
#: (the 128 extremes).
LP_ROUNDS = 0.5
DIRECTION_S = 1e-9


@dataclass(frozen=True)
class Probe:
    """The measured shape of one locality computation.

    ``inside`` counts the query rows inside every training range (those the hull test
    decides); ``search`` and ``search_train`` are the distances computed per query row and per
    training row; ``dim`` is the training rows' affine dimension and ``facets`` the estimated
    facet count (0 off the facet route); ``hull_cap_s`` the cap on the linear programs' work.
    """

    n: int
    p: int
    m: int
    inside: int
    search: float
    search_train: float
    dim: int
    facets: float
    hull_cap_s: float | None = None

    def seconds(self, summary: bool = False) -> float:
        """Estimated seconds on one core; ``summary`` adds the data-set part of
        ``/v1/locality`` (typical spacing and neighborhood radii) to the query flags."""
        n, p, m = self.n, self.p, self.m
        tree = n * p * log2(n + 2) * TREE_BUILD_S if p <= KD_MAX_DIM else 0.0
        spacing = min(n, 1000) * SPACING_ROW_S + _search(min(n, 1000), self.search_train, n, p)
        total = tree + spacing + _search(m, self.search, n, p) + m * ROW_S + self.hull()
        total += PROBE_S + _search(PROBE_ROWS + PROBE_TRAIN_ROWS, self.search, n, p)
        if summary:
            total += min(n, 500) * n * (RADIUS_S + p * RADIUS_P_S)
        return total

    def hull(self) -> float:
        """Estimated seconds of the hull test."""
        n, d = self.n, self.dim
        if self.inside == 0 or d > hull.HULL_MAX_DIM:
            return n * self.p**2 * FLAT_S
        flat = n * self.p**2 * FLAT_S
        if d <= 1:
            return flat + self.inside * FACET_ROW_S
        if d <= hull.FACET_MAX_DIM:
            vertices = self.facets if d == 2 else (self.facets + 4) / 2
            build = n * QHULL_ROW_S + vertices * QHULL_VERTEX_S[d]
            return flat + build + self.inside * (FACET_ROW_S + self.facets * FACET_S)
        r, rounds = d + 1, LP_ROUNDS * (d - hull.FACET_MAX_DIM)
        per_row = r * (hull_simplex.SOLVE_S * (1 + rounds) + hull_simplex.PRICE_S * n * rounds)
        lp = self.inside * per_row
        if self.hull_cap_s is not None:
            lp = min(lp, self.hull_cap_s)
        directions = (n + self.m) * hull.N_DIRECTIONS * d * DIRECTION_S
        return flat + lp + directions

    def queries(self, m: int) -> Probe:
        """The same shape with ``m`` query rows (the inside share kept)."""
        inside = round(self.inside * m / self.m) if self.m else 0
        return replace(self, m=m, inside=inside)


def _search(rows: int, work: float, n: int, p: int) -> float:
    if p > KD_MAX_DIM:
        return rows * n * p * BRUTE_S
    return rows * (SEARCH_ROW_S + work * (SEARCH_CALL_S + p * SEARCH_CALL_P_S))


def probe(
    X: np.ndarray,
    Z: np.ndarray,
    near: Nearest,
    Xq: np.ndarray,
    Zq: np.ndarray,
    hull_cost_s: float | None = None,
) -> Probe:
    """Measure a locality computation: ``X``/``Xq`` raw training and query rows, ``Z``/``Zq``
    the same scaled, ``near`` the search over ``Z``, ``hull_cost_s`` the hull test's cap."""
    n, p = Z.shape
    m = Zq.shape[0]
    inside = int(np.count_nonzero(~((Xq < X.min(axis=0)) | (Xq > X.max(axis=0))).any(axis=1)))
    search = near.work(Zq[sample_rows(Zq, PROBE_ROWS)]) if m else 0.0
    search_train = near.work(Z[sample_rows(Z, PROBE_TRAIN_ROWS)])
    dim, facets = 0, 0.0
    if inside and p <= hull.HULL_MAX_DIM:
        dim, facets = _facets(Z)
    return Probe(n, p, m, inside, search, search_train, dim, facets, hull_cost_s)


def measure(
    X: np.ndarray, Xq: np.ndarray, scale: str = "standard", hull_cost_s: float | None = None
) -> Probe:
    """:func:`probe` for the query flags of a predict: training rows ``X``, query rows ``Xq``."""
    scaler = Scaler.fit(X, scale)
    Z = scaler.transform(X)
    return probe(X, Z, Nearest(Z), Xq, scaler.transform(Xq), hull_cost_s)


def _facets(Z: np.ndarray) -> tuple[int, float]:
    """The affine dimension of the rows and their hull's estimated facet count."""
    W = hull.subspace(Z)
    n, dim = W.shape
    if dim <= 1 or dim > hull.FACET_MAX_DIM:
        return dim, 2.0 if dim == 1 else 0.0
    small, large = HULL_SAMPLES
    try:
        if n <= large:
            vertices = float(_vertices(W))
        else:
            v1 = _vertices(W[sample_rows(W, small)])
            v2 = _vertices(W[sample_rows(W, large)])
            beta = min(1.0, max(0.0, np.log(v2 / v1) / np.log(large / small)))
            vertices = v2 * (n / large) ** beta
    except QhullError:  # the test falls back to linear programs: priced as facets over n rows
        vertices = float(n)
    return dim, vertices if dim == 2 else 2.0 * vertices - 4.0


def _vertices(W: np.ndarray) -> int:
    return int(ConvexHull(W).vertices.size)


def check(probe: Probe, caps: Caps, summary: bool = True) -> float:
    """Refuse a ``/v1/locality`` request whose estimate exceeds ``caps.cost_s``; returns it."""
    estimate = probe.seconds(summary)
    limit = caps.cost_s
    if limit is None or estimate <= limit:
        return estimate
    fit = 0
    if probe.m:
        lo, hi = 0, probe.m
        while lo < hi:
            mid = (lo + hi + 1) // 2
            lo, hi = (mid, hi) if probe.queries(mid).seconds(summary) <= limit else (lo, mid - 1)
        fit = lo
    advice = (
        f"About {fit:,} query rows fit under it with these training rows; or send fewer "
        "training rows."
        if fit
        else "Send fewer training rows or fewer query rows."
    )
    search = (
        f" (the nearest-row search measured {probe.search:.3g} distances per query row)"
        if probe.m
        else ""
    )
    raise OverLimit(
        f"this request is estimated at {estimate:.3g} s of work on one core{search}, over the "
        f"service's limit {caps.label('cost_s')} s. " + advice,
        [
            Where(("query", "rows"), f"{probe.m} rows: estimated {estimate:.3g} s")
            if probe.m
            else Where(("train", "rows"), f"{probe.n} rows: estimated {estimate:.3g} s")
        ],
    )
