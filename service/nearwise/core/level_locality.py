"""Locality flags with categorical features: no distance is measured across levels.

The query rows are grouped by their combination of levels of the categorical features
(``site = south, shift = night``). For each group:

- when some training rows hold the same combination, the flags of :mod:`nearwise.core.locality`
  (``outside_range``, ``outside_hull``, ``far_from_data``, ``hull_not_tested``) are computed
  on the numeric features against *those* training rows only: their ranges, their convex hull,
  their nearest row and their own typical spacing. The scaling is learned from all training
  rows (``scale``), so that the units are the same in every group;
- when no training row holds that combination (each level occurs in training, but not
  together), the rows are flagged ``outside_hull``: in the one-hot coding every combination of
  levels is a vertex of a product of simplices, and a vertex that is not a training row lies
  outside the convex hull of the training rows. No distances are given;
- a row holding a level the training rows do not hold gets none of these flags (the pipeline
  flags it ``unseen_level``).

With categorical features only, the combination rule is all there is. The hull test's cost
cap (``caps.hull_cost_s``) holds for the request: the groups spend it in turn, in the order of
their level codes; rows left undecided when it is spent are flagged ``hull_not_tested``, never
guessed.
"""

from __future__ import annotations

import numpy as np

from nearwise.core import hull, locality
from nearwise.core.budget import checkpoint
from nearwise.core.categories import Categories
from nearwise.core.data import Scaler
from nearwise.core.neighbors import Nearest
from nearwise.core.results import Notice
from nearwise.core.spec import Caps

CODES = locality.CODES


def query_flags(
    X: np.ndarray, Xq: np.ndarray, scale: str, cats: Categories, caps: Caps | None = None
) -> locality.QueryLocality:
    """The locality flags of the query rows ``Xq`` (level codes in the categorical columns)
    against the training rows ``X``, group by group (see the module notes).

    ``nearest`` and ``ratio`` are NaN for rows without distances (an unseen level or an
    unseen combination, or no numeric feature).
    """
    m = Xq.shape[0]
    num = list(cats.numeric)
    rows = {code: np.zeros(m, dtype=bool) for code in CODES}
    nearest, ratio = np.full(m, np.nan), np.full(m, np.nan)
    unseen_combo = np.zeros(m, dtype=bool)
    spacings: list[float] = []
    skipped_dim = 0
    seen = np.flatnonzero(~cats.unseen(Xq))
    if seen.size:
        codes = np.vstack([cats.codes(X), cats.codes(Xq[seen])])
        ids = np.unique(codes, axis=0, return_inverse=True)[1].reshape(-1)
        train_id, query_id = ids[: X.shape[0]], ids[X.shape[0] :]
        scaler = Scaler.fit(X[:, num], scale) if num else None
        groups = np.unique(query_id)
        caps = Caps() if caps is None else caps
        left = caps.hull_cost_s
        for g in groups:
            checkpoint()
            q = seen[query_id == g]
            tr = np.flatnonzero(train_id == g)
            if tr.size == 0:
                unseen_combo[q] = True
                continue
            if scaler is None:
                continue
            Xg, Xqg = X[np.ix_(tr, num)], Xq[np.ix_(q, num)]
            Z, Zq = scaler.transform(Xg), scaler.transform(Xqg)
            near = Nearest(Z)
            spacing = locality.typical_spacing(Z, near)
            spacings.append(spacing)
            nearest[q] = near.distances(Zq, 1)[:, 0]
            ratio[q] = locality._ratio(nearest[q], spacing)
            out_range = ((Xqg < Xg.min(axis=0)) | (Xqg > Xg.max(axis=0))).any(axis=1)
            test = hull.hull_test(Z, Zq, np.flatnonzero(~out_range), max_cost_s=left)
            left = None if left is None else max(0.0, left - test.cost_s)
            rows["outside_range"][q] = out_range
            rows["outside_hull"][q] = test.outside
            rows["far_from_data"][q] = ratio[q] > locality.far_threshold(len(num))
            rows["hull_not_tested"][q] = ~out_range & ~test.tested & (test.route != "skipped")
            if test.route == "skipped" and (~out_range & ~test.tested).any():
                skipped_dim = test.dim
    hull_rows = rows["outside_hull"].copy()
    rows["outside_hull"] |= unseen_combo
    flags = tuple(tuple(c for c in CODES if rows[c][i]) for i in range(m))
    notices = []
    for code in CODES:
        if rows[code].any():
            count = int(rows[code].sum())
            if code == "outside_hull":
                text = _hull_message(int(hull_rows.sum()), int(unseen_combo.sum()))
            elif code == "far_from_data":
                text = _far_message(count, len(num), spacings)
            else:
                text = locality._message(code, count, len(num), 0.0, caps) + _WITHIN
            notices.append(Notice(code, text, tuple(int(i) for i in np.flatnonzero(rows[code]))))
    if skipped_dim:
        notices.append(Notice("hull_not_tested", locality._skipped_message(skipped_dim)))
    return locality.QueryLocality(flags, nearest, ratio, tuple(notices))


_WITHIN = (
    " With categorical features, each query row is compared with the training rows that hold "
    "the same levels only."
)


def _hull_message(in_group: int, combos: int) -> str:
    parts = []
    if in_group:
        parts.append(
            f"{in_group} query row(s) lie inside the ranges of the training rows with the same "
            "levels but outside their convex hull (numeric features, scaled, to within "
            f"{hull.HULL_TOL:g} of the largest range)"
        )
    if combos:
        parts.append(
            f"{combos} query row(s) hold a combination of levels of the categorical features "
            "that no training row holds (each level occurs in training, but not together)"
        )
    return (
        "; ".join(parts) + ": that combination of values does not occur in the training data, "
        "so the prediction extrapolates."
    )


def _far_message(count: int, p: int, spacings: list[float]) -> str:
    lo, hi = min(spacings), max(spacings)
    span = f"{lo:.3g}" if lo == hi else f"{lo:.3g} to {hi:.3g}"
    return (
        f"{count} query row(s) are more than {locality.far_threshold(p):.3g} typical spacings "
        "from the nearest training row with the same levels (typical spacing: the median "
        "distance from such a training row to its nearest distinct row with the same levels, "
        f"{span} in scaled units; the threshold is a rule of thumb). Few training rows support "
        "the prediction there."
    )
