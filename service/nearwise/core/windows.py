"""Leave-a-window-out predictions of a linear smoother from its hat matrix, with no refit.

For a fit y_hat = H y by penalized least squares (fixed penalty), removing a set S of rows
changes the predictions at S to y_S - (I - H_SS)^-1 r_S, where r = y - y_hat are the
residuals of the fit to all rows and H_SS is the block of H on S (the leave-a-set-out
formula; with |S| = 1 it is the leave-one-out residual r_i / (1 - h_ii)). For the ``window``
scheme, S is every row within the gap of a step, and the rows at the step itself are the
held-out ones.

References
----------
Burman, P., Chow, E. & Nolan, D. (1994). A cross-validatory method for dependent data.
*Biometrika* 81(2), 351-358.
Cook, R. D. & Weisberg, S. (1982). *Residuals and Influence in Regression*, Chapman & Hall,
section 3.6 (deleting a set of cases).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from nearwise.core.tuning import Folds

#: Elements of the (steps, width, width) blocks formed at once.
CHUNK_CELLS = 2_000_000


def window_rows(step: np.ndarray, steps: int, gap: int) -> tuple[np.ndarray, np.ndarray, int]:
    """For each step u, the rows within ``gap`` steps of it, as a padded index array.

    Returns ``(rows, held, width)``: ``rows`` (steps, width) holds row numbers (-1 as padding),
    ``held`` (steps, width) marks the rows at step u itself, ``width`` the largest window.
    """
    order = np.argsort(step, kind="stable")
    upto = np.concatenate([[0], np.cumsum(np.bincount(step, minlength=steps))])
    u = np.arange(steps)
    lo = upto[np.clip(u - gap, 0, steps)]
    hi = upto[np.clip(u + gap + 1, 0, steps)]
    width = int((hi - lo).max())
    pos = lo[:, None] + np.arange(width)[None, :]
    valid = pos < hi[:, None]
    rows = np.where(valid, order[np.minimum(pos, step.size - 1)], -1)
    held = valid & (pos >= upto[u][:, None]) & (pos < upto[u + 1][:, None])
    return rows, held, width


def window_oof(
    y: np.ndarray,
    fitted: np.ndarray,
    folds: Folds,
    blocks: Callable[[np.ndarray], np.ndarray],
) -> np.ndarray:
    """Out-of-window predictions of every row for one smoother, on ``window`` folds.

    ``blocks(rows)`` returns the hat-matrix blocks H[rows_b][:, rows_b] for an index array
    ``rows`` (b, width) whose entries are valid row numbers (padding replaced by row 0; the
    padded entries are overwritten here). A window whose I - H_SS has an eigenvalue below
    SINGULAR (the fit without it is not determined) gives NaN for its held-out rows, which
    the scoring treats as an unbounded error.
    """
    assert folds.step is not None
    check = folds.check
    rows, held, width = window_rows(folds.step, folds.n_folds, folds.gap)
    out = np.full(y.shape, np.nan)
    r = y - fitted
    per = max(1, CHUNK_CELLS // max(width * width, 1))
    eye = np.eye(width)
    for start in range(0, folds.n_folds, per):
        check()
        idx = rows[start : start + per]
        valid = idx >= 0
        safe = np.where(valid, idx, 0)
        H = blocks(safe)
        pair = valid[:, :, None] & valid[:, None, :]
        A = np.where(pair, eye[None] - H, eye[None])
        rhs = np.where(valid, r[safe], 0.0)
        e = _solve(A, rhs)
        hold = held[start : start + per]
        out[idx[hold]] = y[idx[hold]] - e[hold]
    return out


#: I - H_SS is symmetric with eigenvalues in [0, 1]; below this smallest eigenvalue the fit
#: without the window is not determined (the leave-one-out guard h < 1 - 1e-10, for a set).
SINGULAR = 1e-10


def _solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Batched solves; a (numerically) singular system gives NaN for its window only."""
    low = np.linalg.eigvalsh(A)[:, 0] < SINGULAR
    A = np.where(low[:, None, None], np.eye(A.shape[1])[None], A)
    out = np.linalg.solve(A, b[..., None])[..., 0]
    out[low] = np.nan
    return out
