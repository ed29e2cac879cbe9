"""kNN's leave-one-out predictions as changes: leaving out row i moves the prediction at x0
only when i is among the k nearest rows of x0 (or tied with the k-th), so each answer row has
a window of a few changed predictions and the fit's own prediction for every other row.

:func:`changes` gives them for jackknife+ at many rows (``intervals.jackknife_plus`` with
``changes``), which then costs O(rows x window log window) instead of O(rows x n). The changed
values are those of ``FittedKNN.loo_predictions``, computed the same way.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from nearwise.core.budget import blocks
from nearwise.core.methods.knn import FittedKNN, _average, _complete_windows

#: Neighbor-window entries per block of answer rows (8 MB per array).
WINDOW_CELLS = 1_000_000

Groups = Callable[[np.ndarray], Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]]


def changes(model: FittedKNN, Xq: np.ndarray) -> tuple[np.ndarray, Groups]:
    """The fit's predictions at ``Xq`` and, for a block of rows, groups ``(sub, ind, value)``:
    the rows ``sub`` of the block, the training rows ``ind`` (sub, w) whose leaving out may
    change their prediction and the leave-one-out predictions ``value`` (sub, w) then."""
    Xs = model.scaler.transform(Xq)
    base = model.predict(Xq)
    n = model.y.shape[0]

    def groups(rows: np.ndarray):
        # in blocks of rows whose windows hold about WINDOW_CELLS entries (budget checked
        # before each), so that memory stays bounded at large k
        for at in blocks(rows.size, most=max(1, WINDOW_CELLS // (model.k + 10))):
            part = np.arange(rows.size)[at]
            for sub, d, ind in _complete_windows(model.index, Xs[rows[at]], model.k + 1, n):
                plain = _plain(d, model.k, model.weights)
                if plain.any():
                    yield part[sub[plain]], *_quick(d[plain], ind[plain], model)
                if not plain.all():
                    yield part[sub[~plain]], ind[~plain], _slow(d[~plain], ind[~plain], model)

    return base, groups


def _plain(d: np.ndarray, k: int, weights: str) -> np.ndarray:
    """Rows without ties among their first k + 2 distances (and, for distance weights, no
    row at distance 0): leaving one of the k + 1 nearest out brings in the next one."""
    if d.shape[1] < k + 2:
        return np.zeros(d.shape[0], dtype=bool)
    plain = (d[:, 1 : k + 2] > d[:, : k + 1]).all(axis=1)
    if weights == "distance":
        plain &= d[:, 0] > 0
    return plain


def _quick(d: np.ndarray, ind: np.ndarray, model: FittedKNN):
    """Leaving out one of the k + 1 nearest: the weighted sums of the k + 1 less its share,
    O(k) per row (every farther row changes nothing and is left out)."""
    k = model.k
    d, ind = d[:, : k + 1], ind[:, : k + 1]
    coef = np.ones(d.shape) if model.weights == "uniform" else 1.0 / d
    if model.w is not None:
        coef = coef * model.w[ind]
    top = coef * model.y[ind]
    value = (top.sum(axis=1)[:, None] - top) / (coef.sum(axis=1)[:, None] - coef)
    return ind, value


def _slow(d: np.ndarray, ind: np.ndarray, model: FittedKNN) -> np.ndarray:
    """Every row of the window left out in turn and the k-average of the rest taken, ties
    shared out as the fit does (O(window^2) per row)."""
    value = np.empty(ind.shape)
    for j in range(d.shape[1]):
        keep = np.delete(np.arange(d.shape[1]), j)
        pred = _average(d[:, keep], ind[:, keep], model.y, model.w, model.k, model.weights)
        value[:, j] = pred[:, -1]
    return value
