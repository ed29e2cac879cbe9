"""Where the training data can speak: per-query extrapolation flags and neighborhood sizes.

Everything is measured on the features after :class:`nearwise.core.data.Scaler` (``standard``
by default), in those scaled units. Query flags, in this fixed order:

- ``outside_range``: a coordinate beyond its training minimum-maximum.
- ``outside_hull``: inside every range, but outside the convex hull of the training rows
  (:mod:`nearwise.core.hull`; not run above :data:`nearwise.core.hull.HULL_MAX_DIM`
  dimensions, where nearly every new point is outside the hull).
- ``far_from_data``: distance to the nearest training row over the typical spacing above
  :func:`far_threshold` (3 from two dimensions on; a rule of thumb).
- ``hull_not_tested``: the hull test's cost cap (``Caps.hull_cost_s``, a matter of the
  request's size) was reached before this row was decided; or, as a notice without rows, the
  training rows span more than :data:`nearwise.core.hull.HULL_MAX_DIM` dimensions.

References
----------
Hastie, T., Tibshirani, R. & Friedman, J. (2009). *The Elements of Statistical Learning*,
2nd ed., Springer, section 2.5 (local methods in high dimensions: e_p(r) = r^(1/p)).
Montgomery, D. C., Peck, E. A. & Vining, G. G. (2012). *Introduction to Linear Regression
Analysis*, 5th ed., Wiley, section 3.8 (hidden extrapolation: the convex hull of the data).
Clark, P. J. & Evans, F. C. (1954). Distance to nearest neighbor as a measure of spatial
relationships in populations. *Ecology* 35(4), 445-453.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.spatial.distance import cdist

from nearwise.core import hull, locality_cost
from nearwise.core.budget import Deadline, checkpoint
from nearwise.core.data import SCALES, Scaler
from nearwise.core.errors import InvalidValue, TooFewRows, Where
from nearwise.core.neighbors import Nearest, sample_rows
from nearwise.core.results import Notice
from nearwise.core.spec import Caps

CODES = ("outside_range", "outside_hull", "far_from_data", "hull_not_tested")
#: far_from_data: nearest distance over typical spacing above this (a rule of thumb) ...
FAR_RATIO = 3.0
#: ... or above 10^(1/p) when that is larger (one dimension: 10; see far_threshold).
FAR_TAIL = 10.0
#: not_local: the neighborhood cube's edge fraction e_p(k/n) above this.
NOT_LOCAL_EDGE = 0.5
#: Fractions of the rows in the neighborhood table, besides the one asked for.
FRACTIONS = (0.01, 0.05, 0.10)
#: Training rows over which the medians of the typical spacing and the radii are taken.
SPACING_SAMPLE = 1000
RADIUS_SAMPLE = 500
#: Nearest rows searched per sampled row for one at another location; beyond, the distinct rows.
SPACING_WINDOW = 16


@dataclass(frozen=True)
class QueryLocality:
    """Locality of each query row.

    ``flags[i]`` holds the codes of :data:`CODES` that concern query row i, in that order;
    ``nearest`` the distance to the nearest training row and ``ratio`` that distance over
    the typical spacing (both in scaled units; ``inf`` if all training rows coincide);
    ``notices`` one notice per code that occurred, naming its rows.
    """

    flags: tuple[tuple[str, ...], ...]
    nearest: np.ndarray
    ratio: np.ndarray
    notices: tuple[Notice, ...]


def edge_fraction(r: float, p: int) -> float:
    """Edge of the cube holding fraction ``r`` of uniform data in the unit cube: r^(1/p).

    Parameters
    ----------
    r : float
        Fraction of the data, in (0, 1].
    p : int
        Dimension.

    Returns
    -------
    float
        The fraction of each feature's range the cube must span.

    References
    ----------
    Hastie, Tibshirani & Friedman (2009), *The Elements of Statistical Learning*, 2nd ed.,
    section 2.5: e_10(0.01) = 0.63, e_10(0.1) = 0.80.
    """
    return float(r) ** (1.0 / p)


def far_threshold(p: int) -> float:
    """The ``far_from_data`` threshold in ``p`` dimensions: max(3, 10^(1/p)).

    Three typical spacings is a rule of thumb. For rows scattered like a Poisson process,
    a new point drawn from the same density is farther than t median spacings from its
    nearest row with probability 2^(-t^p) (Clark & Evans 1954): 1 in 8 for t = 3 in one
    dimension, which would flag ordinary gaps. t^p >= 10 keeps that chance near 1 in 1,000,
    so one dimension uses 10, two 3.16, and three or more 3.

    References
    ----------
    Clark & Evans (1954), Ecology 35(4), 445-453.
    """
    return max(FAR_RATIO, FAR_TAIL ** (1.0 / p))


def not_local_notice(k: int, n: int, p: int, threshold: float = NOT_LOCAL_EDGE) -> Notice | None:
    """The data-set-level ``not_local`` warning for k neighbors among n rows in p dimensions.

    Returns a notice when e_p(k/n) = (k/n)^(1/p), the fraction of each feature's range a
    cube holding k of n uniformly spread rows must span, is above ``threshold``; else None.

    References
    ----------
    Hastie, Tibshirani & Friedman (2009), *The Elements of Statistical Learning*, 2nd ed.,
    section 2.5.
    """
    r = k / n
    e = edge_fraction(r, p)
    if e <= threshold:
        return None
    return Notice(
        "not_local",
        f"k = {k} neighbors of {n} rows is a fraction r = {r:.3g}; in {p} dimension(s) a "
        f"cube holding that fraction of evenly spread rows spans e_p(r) = r^(1/p) = {e:.2f} "
        f"of each feature's range, above {threshold:g}. The neighborhoods are not local: "
        "predictions average over a wide region (Hastie, Tibshirani & Friedman, The "
        "Elements of Statistical Learning, 2nd ed., section 2.5).",
    )


def query_flags(
    X: np.ndarray, Xq: np.ndarray, scale: str = "standard", caps: Caps | None = None
) -> QueryLocality:
    """Flag query rows that lie where the training rows cannot support a prediction.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Training features, finite, n >= 1.
    Xq : ndarray, shape (m, p)
        Query features, finite.
    scale : {"standard", "range", "none"}
        Feature scaling learned from ``X``; distances are Euclidean after it.
    caps : Caps, optional
        ``caps.hull_cost_s`` caps the hull test's linear programs (None: no cap).

    Returns
    -------
    QueryLocality

    Notes
    -----
    Cost: one nearest-row search per query row (:class:`nearwise.core.neighbors.Nearest`),
    the same for up to :data:`SPACING_SAMPLE` training rows, and the
    hull test of :func:`nearwise.core.hull.hull_test` for rows inside every range (facets
    up to 3 dimensions; linear programs from 4 to 8, their work capped by
    ``caps.hull_cost_s``; none above).

    References
    ----------
    Montgomery, Peck & Vining (2012), section 3.8, for extrapolation beyond the hull.
    """
    scaler = Scaler.fit(X, scale)
    Z = scaler.transform(X)
    near = Nearest(Z)
    return _locality(X, Xq, Z, scaler.transform(Xq), near, typical_spacing(Z, near), caps)


def _locality(
    X: np.ndarray,
    Xq: np.ndarray,
    Z: np.ndarray,
    Zq: np.ndarray,
    near: Nearest,
    spacing: float,
    caps: Caps | None = None,
) -> QueryLocality:
    m, p = Xq.shape
    nearest = near.distances(Zq, 1)[:, 0]
    ratio = _ratio(nearest, spacing)
    out_range = ((Xq < X.min(axis=0)) | (Xq > X.max(axis=0))).any(axis=1)
    caps = Caps() if caps is None else caps
    test = hull.hull_test(Z, Zq, np.flatnonzero(~out_range), max_cost_s=caps.hull_cost_s)
    rows = {
        "outside_range": out_range,
        "outside_hull": test.outside,
        "far_from_data": ratio > far_threshold(p),
        "hull_not_tested": ~out_range & ~test.tested & (test.route != "skipped"),
    }
    flags = tuple(tuple(c for c in CODES if rows[c][i]) for i in range(m))
    notices = [
        Notice(code, _message(code, int(rows[code].sum()), p, spacing, caps), _rows(rows[code]))
        for code in CODES
        if rows[code].any()
    ]
    if test.route == "skipped" and (~out_range & ~test.tested).any():
        notices.append(Notice("hull_not_tested", _skipped_message(test.dim)))
    return QueryLocality(flags, nearest, ratio, tuple(notices))


def _ratio(nearest: np.ndarray, spacing: float) -> np.ndarray:
    if spacing > 0:
        return nearest / spacing
    return np.where(nearest > 0, np.inf, 0.0)


def _rows(mask: np.ndarray) -> tuple[int, ...]:
    return tuple(int(i) for i in np.flatnonzero(mask))


def _message(code: str, count: int, p: int, spacing: float, caps: Caps | None = None) -> str:
    if code == "outside_range":
        return (
            f"{count} query row(s) have a feature beyond its training minimum-maximum: the "
            "prediction there extrapolates beyond the data."
        )
    if code == "outside_hull":
        return (
            f"{count} query row(s) lie inside every feature's training range but outside the "
            "convex hull of the training rows (tested by linear programming on the scaled "
            f"features, to within {hull.HULL_TOL:g} of the largest feature range): that "
            "combination of values does not occur in the training data, so the prediction "
            "extrapolates."
        )
    if code == "far_from_data":
        return (
            f"{count} query row(s) are more than {far_threshold(p):.3g} typical spacings from "
            "the nearest training row (typical spacing: the median distance from a training "
            f"row to its nearest distinct row, {spacing:.3g} in scaled units; the threshold "
            "is a rule of thumb). Few training rows support the prediction there."
        )
    cap = (caps or Caps(hull_cost_s=0.0)).label("hull_cost_s")
    return (
        f"The convex-hull test did not reach {count} query row(s): the request's hull work "
        f"reached the service's cost cap ({cap} s) first. The cap is about the size of this "
        "request (training rows x query rows), not about these rows; send fewer query rows "
        "to test them all. The other flags still apply to them."
    )


def _skipped_message(dim: int) -> str:
    return (
        f"The training rows span {dim} dimensions; above {hull.HULL_MAX_DIM} the convex-hull "
        "test is not run (nearly every new point lies outside the hull there, so it would "
        "flag almost every row). Judge extrapolation by outside_range and far_from_data."
    )


def typical_spacing(Z: np.ndarray, near: Nearest | None = None) -> float:
    """Median distance from a training row to its nearest row at a different location.

    Duplicated rows are skipped over, so the spacing is not 0 unless all rows coincide. For
    more than :data:`SPACING_SAMPLE` rows the median is taken over that many rows, chosen
    as in :func:`.neighbors.sample_rows`, each measured against all rows.

    References
    ----------
    Clark & Evans (1954), Ecology 35(4), 445-453 (mean nearest-neighbor distance).
    """
    n = Z.shape[0]
    near = Nearest(Z) if near is None else near
    rows = Z[sample_rows(Z, SPACING_SAMPLE)]
    first = np.full(rows.shape[0], np.inf)
    todo = np.arange(rows.shape[0])
    k = min(2, n)
    while todo.size and k <= SPACING_WINDOW:
        d = near.distances(rows[todo], max(k, 2))
        first[todo] = np.where((d > 0) & np.isfinite(d), d, np.inf).min(axis=1)
        todo = todo[~np.isfinite(first[todo])]
        if k >= n:
            todo = todo[:0]
        k = min(2 * k, n) if k < n else k + 1
    if todo.size:
        # Rows repeated more than SPACING_WINDOW times: search the distinct rows, where the
        # nearest row at another location is the second nearest (the row itself is first).
        distinct = np.unique(Z, axis=0)
        if distinct.shape[0] > 1:
            first[todo] = Nearest(distinct).distances(rows[todo], 2)[:, 1]
    found = first[np.isfinite(first)]
    return float(np.median(found)) if found.size else 0.0


def radius_holding(X: np.ndarray, centre: np.ndarray, fraction: float) -> float:
    """Radius of the ball around ``centre`` that holds ``fraction`` of the rows of ``X``.

    The distance to the ceil(fraction n)-th nearest row, in the units of ``X`` (no scaling).
    """
    n = X.shape[0]
    k = max(1, min(n, math.ceil(round(fraction * n, 9))))
    d = np.sqrt(((X - centre) ** 2).sum(axis=1))
    return float(np.partition(d, k - 1)[k - 1])


def neighborhood_radii(Z: np.ndarray, orders: Sequence[int]) -> np.ndarray:
    """For each k in ``orders``: median over rows of the distance to the k-th nearest other row.

    Rows are ``Z``'s (scaled); each k is in [1, n - 1]. For more than :data:`RADIUS_SAMPLE`
    rows the median is over that many rows (chosen as in :func:`.neighbors.sample_rows`),
    each measured against all rows: cost O(RADIUS_SAMPLE n p).
    """
    n = Z.shape[0]
    centres = Z[sample_rows(Z, RADIUS_SAMPLE)]
    ks = np.asarray(orders, dtype=int)  # the row itself is at index 0
    block = max(1, 2_000_000 // n)
    out = []
    for i in range(0, centres.shape[0], block):
        checkpoint()
        d2 = cdist(centres[i : i + block], Z, "sqeuclidean")
        out.append(np.partition(d2, np.unique(ks), axis=1)[:, ks])
    return np.median(np.sqrt(np.vstack(out)), axis=0)


def summary(
    X: np.ndarray,
    names: Sequence[str],
    k: int | None = None,
    fraction: float | None = None,
    Xq: np.ndarray | None = None,
    scale: str = "standard",
    *,
    caps: Caps | None = None,
    deadline: Deadline | None = None,
) -> dict[str, Any]:
    """The locality diagnostics of a training table, without fitting anything.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Training features, finite, n >= 2.
    names : sequence of str
        Feature names.
    k, fraction : optional
        A neighborhood size to add to the table (at most one): k rows in [1, n], or a
        fraction in (0, 1] (k = ceil(fraction n)). It also decides the ``not_local`` warning.
    Xq : ndarray, shape (m, p), optional
        Query rows to flag.
    scale : {"standard", "range", "none"}
    caps : Caps, optional
        With ``caps.cost_s``: the work is measured and estimated first
        (:mod:`nearwise.core.locality_cost`) and refused with
        :class:`~nearwise.core.errors.OverLimit` above it, before any other work.
    deadline : Deadline, optional
        The time budget, checked between blocks of every search and of the hull test.

    Returns
    -------
    dict
        ``n``, ``p``, ``scale``, ``features``; ``ranges`` (per feature: ``name``, ``min``,
        ``max``, ``range`` and ``spacing``, the median gap between adjacent distinct values,
        in its own units); ``typical_spacing`` (scaled units); ``thresholds``;
        ``neighborhoods`` (per fraction r: ``fraction``, ``k`` = ceil(r n), ``edge_fraction``
        e_p(r), ``radius`` = the median over rows of the distance to their k-th nearest other
        row, k capped at n - 1, in scaled units, and ``requested``); ``query`` (per query row:
        ``nearest``, ``ratio``, ``flags``); ``warnings`` (``code``, ``message``, ``rows``).

    References
    ----------
    Hastie, Tibshirani & Friedman (2009), *The Elements of Statistical Learning*, 2nd ed.,
    section 2.5.
    """
    _check_options(X.shape[0], k, fraction, scale)
    with (Deadline(None) if deadline is None else deadline).scope():
        return _summary(X, names, k, fraction, Xq, scale, caps)


def _summary(X, names, k, fraction, Xq, scale, caps) -> dict[str, Any]:
    n, p = X.shape
    scaler = Scaler.fit(X, scale)
    Z = scaler.transform(X)
    near = Nearest(Z)
    Zq = None if Xq is None else scaler.transform(Xq)
    if caps is not None and caps.cost_s is not None:
        none = np.zeros((0, p))
        measured = locality_cost.probe(
            X,
            Z,
            near,
            none if Xq is None else Xq,
            none if Zq is None else Zq,
            caps.hull_cost_s,
        )
        locality_cost.check(measured, caps)
    spacing = typical_spacing(Z, near)
    asked = k if fraction is None else max(1, math.ceil(round(fraction * n, 9)))
    notices = []
    if asked is not None:
        notices.append(not_local_notice(asked, n, p))
    query: list[dict[str, Any]] = []
    if Xq is not None:
        loc = _locality(X, Xq, Z, Zq, near, spacing, caps)
        query = [
            {"nearest": float(d), "ratio": float(r), "flags": list(f)}
            for d, r, f in zip(loc.nearest, loc.ratio, loc.flags, strict=True)
        ]
        notices.extend(loc.notices)
    return {
        "n": n,
        "p": p,
        "scale": scale,
        "features": list(names),
        "ranges": [_feature_range(name, X[:, j]) for j, name in enumerate(names)],
        "typical_spacing": spacing,
        "thresholds": {
            "far_from_data": far_threshold(p),
            "not_local": NOT_LOCAL_EDGE,
            "hull_max_dim": hull.HULL_MAX_DIM,
        },
        "neighborhoods": _neighborhoods(Z, asked, fraction),
        "query": query,
        "warnings": [
            {"code": w.code, "message": w.message, "rows": list(w.rows)} for w in notices if w
        ],
    }


def _check_options(n: int, k: int | None, fraction: float | None, scale: str) -> None:
    if n < 2:
        raise TooFewRows(
            f"the locality diagnostics need at least 2 training rows; got {n}.",
            [Where(("train", "rows"), f"{n} row(s)")],
        )
    if k is not None and fraction is not None:
        raise InvalidValue(
            "give `k` or `fraction`, not both: each sets the neighborhood size.",
            [Where(("k",), "given with `fraction`"), Where(("fraction",), "given with `k`")],
        )
    if k is not None and not 1 <= k <= n:
        raise InvalidValue(
            f"`k` must be an integer in [1, {n}] for {n} training rows; got {k}.",
            [Where(("k",), f"outside [1, {n}]")],
        )
    if fraction is not None and not 0 < fraction <= 1:
        raise InvalidValue(
            f"`fraction` must be in (0, 1]; got {fraction}.",
            [Where(("fraction",), "outside (0, 1]")],
        )
    if scale not in SCALES:
        raise InvalidValue(
            f"`scale` must be one of {', '.join(SCALES)}; got {scale!r}.",
            [Where(("scale",), "unknown scaling")],
        )


def _feature_range(name: str, x: np.ndarray) -> dict[str, Any]:
    values = np.unique(x)
    gap = float(np.median(np.diff(values))) if values.size > 1 else None
    lo, hi = float(values[0]), float(values[-1])
    return {"name": name, "min": lo, "max": hi, "range": hi - lo, "spacing": gap}


def _neighborhoods(Z: np.ndarray, k: int | None, fraction: float | None) -> list[dict[str, Any]]:
    n, p = Z.shape
    asked = None if k is None else (fraction if fraction is not None else k / n)
    rows = {r: max(1, math.ceil(round(r * n, 9))) for r in FRACTIONS}
    if asked is not None:
        rows[asked] = k
    order = sorted(rows)
    radii = neighborhood_radii(Z, [min(rows[r], n - 1) for r in order])
    return [
        {
            "fraction": r,
            "k": rows[r],
            "edge_fraction": edge_fraction(r, p),
            "radius": float(radius),
            "requested": r == asked,
        }
        for r, radius in zip(order, radii, strict=True)
    ]
