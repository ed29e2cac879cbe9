"""The thin-plate spline past the exact solve's size: the low-rank path, the final fit and its
error figures (the numerics are in ``thinplate_lowrank``).

Every fold shares the scaler learned from all rows and the knots chosen from them (feature
values only), so a fold's fit differs from the final fit only in its rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from nearwise.core.budget import checkpoint
from nearwise.core.data import Scaler
from nearwise.core.methods import thinplate_lowrank as lr
from nearwise.core.methods.base import PathResult, row_weights
from nearwise.core.methods.posterior import BayesianBand
from nearwise.core.results import Notice
from nearwise.core.tuning import Folds

#: Rows per QR block: each block's R factor is stacked with the others' (TSQR).
QR_BLOCK_ROWS = 8192


@dataclass
class Setup:
    """What one run shares: the all-rows scaler, the knots and the design of every row."""

    scaler: Scaler
    Z: np.ndarray
    basis: lr.Basis
    A: np.ndarray
    sw: np.ndarray | None
    w: np.ndarray | None
    _full: lr.Path | None = field(default=None, repr=False)

    @classmethod
    def of(cls, X: np.ndarray, scale: str, w: np.ndarray | None) -> Setup:
        scaler = Scaler.fit(X, scale)
        Z = scaler.transform(X)
        distinct = np.unique(Z, axis=0).shape[0]
        idx = lr.choose_knots(Z, lr.knot_count(distinct, X.shape[1]))
        basis = lr.Basis(Z[np.sort(idx)])
        checkpoint()
        return cls(scaler, Z, basis, basis.design(Z), None if w is None else np.sqrt(w), w)

    def r_of(self, y: np.ndarray, rows: np.ndarray | None = None) -> np.ndarray:
        """The R factor of the weighted design and targets of ``rows`` (all by default), by
        blocks of QR_BLOCK_ROWS stacked."""
        rows = np.arange(self.A.shape[0]) if rows is None else rows
        parts = []
        for s in range(0, rows.size, QR_BLOCK_ROWS):
            checkpoint()
            at = rows[s : s + QR_BLOCK_ROWS]
            parts.append(lr.r_factor(self.A[at], y[at], None if self.sw is None else self.sw[at]))
        return parts[0] if len(parts) == 1 else lr.stack(parts)

    def full(self, y: np.ndarray) -> lr.Path:
        if self._full is None:
            self._full = lr.Path.of(self.basis, self.r_of(y))
        return self._full


def setup(X: np.ndarray, scale: str, work: dict | None) -> Setup:
    """The run's Setup, built once (kept in ``work``)."""
    if work is None:
        return Setup.of(X, scale, None)
    if "lowrank" not in work:
        work["lowrank"] = Setup.of(X, scale, row_weights(work))
    return work["lowrank"]


def _predict_rows(A: np.ndarray, path: lr.Path, lams: np.ndarray) -> np.ndarray:
    u, b = path.whitened(lams)
    return A @ np.vstack([b, u])  # (rows, L)


def path(X, y, folds: Folds, lams: np.ndarray, scale: str, work) -> PathResult:
    """Out-of-fold predictions for every smoothing value (see thinplate_lowrank, Path)."""
    st = setup(X, scale, work)
    n = X.shape[0]
    full = st.full(y)
    df = full.df(lams)
    if work is not None:
        work["df"] = dict(zip(lams.tolist(), df.tolist(), strict=True))
    if folds.folded:
        oof = np.empty((lams.size, folds.repeats, n))
        models = []
        # K-fold: every training set is the other folds, so each fold's R factor is made once.
        by_fold = folds.scheme == "kfold" and folds.step is None
        parts: dict[tuple[int, int], np.ndarray] = {}
        if by_fold:
            assert folds.fold_id is not None
            for r in range(folds.repeats):
                for f in range(folds.n_folds):
                    parts[r, f] = st.r_of(y, np.flatnonzero(folds.fold_id[r] == f))
        for r, f, train, test in folds.splits():
            if by_fold:
                others = [parts[r, g] for g in range(folds.n_folds) if g != f]
                R = lr.stack(others)
            else:
                R = st.r_of(y, train)
            fold = lr.Path.of(st.basis, R)
            oof[:, r, test] = _predict_rows(st.A[test], fold, lams).T
            if r == 0 and folds.keep_models:
                C, B = fold.coefficients(lams)
                models.append(FoldLowRank(st.scaler, st.basis, C, B))
        return PathResult(oof, df, fold_models=tuple(models))
    fitted = _predict_rows(st.A, full, lams).T
    if folds.scheme == "gcv":
        return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
    h = np.empty((lams.size, n))
    step = max(1, lr.BLOCK_CELLS // st.basis.rank)
    for s in range(0, n, step):
        checkpoint()
        sw = None if st.sw is None else st.sw[s : s + step]
        h[:, s : s + step] = full.leverages(st.A[s : s + step], sw, lams)
    with np.errstate(divide="ignore", invalid="ignore"):
        loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
    loo = np.where(h < 1 - 1e-10, loo, np.nan)
    return PathResult(loo[:, None, :], df)


def fit(X, y, lam: float, scale: str, work, df: float | None) -> FittedLowRank:
    st = setup(X, scale, work)
    full = st.full(y)
    lams = np.array([lam])
    if df is None:
        df = float(full.df(lams)[0])
    C, B = full.coefficients(lams)
    fitted = _predict_rows(st.A, full, lams)[:, 0]
    return FittedLowRank(
        st.scaler, st.basis, full, C[:, 0], B[:, 0], lam, fitted, df, y, st.w, st.A
    )


@dataclass(frozen=True)
class FoldLowRank:
    """One training fold's knot weights and polynomial coefficients, for every candidate."""

    scaler: Scaler
    basis: lr.Basis
    C: np.ndarray
    B: np.ndarray

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        Z = self.scaler.transform(Xq)
        return self.basis.predict(self.C[:, [c]], self.B[:, [c]], Z)[:, 0]


@dataclass
class FittedLowRank(BayesianBand):
    """The low-rank thin-plate fit to all rows. Its posterior is that of the m-knot model
    (thinplate_lowrank, Posterior): at a row it equals sigma^2 A_ii / w_i."""

    scaler: Scaler
    basis: lr.Basis
    full: lr.Path
    c: np.ndarray
    b: np.ndarray
    smoothing: float
    fitted: np.ndarray
    df: float | None
    y: np.ndarray
    row_w: np.ndarray | None
    A: np.ndarray = field(repr=False)

    def _design(self, Xq: np.ndarray) -> np.ndarray:
        return self.basis.design(self.scaler.transform(Xq))

    def predict(self, Xq: np.ndarray) -> np.ndarray:
        Z = self.scaler.transform(Xq)
        return self.basis.predict(self.c[:, None], self.b[:, None], Z)[:, 0]

    def sigma2(self) -> float:
        """sigma^2 = sum w e^2 / (n - df), the residual variance of a linear smoother."""
        n = self.y.size
        if self.df is None or n - self.df <= 1e-9:
            return float("nan")
        w = np.ones(n) if self.row_w is None else self.row_w
        return float(np.sum(w * (self.y - self.fitted) ** 2) / (n - self.df))

    def variance(self, Xq: np.ndarray) -> np.ndarray:
        """a0' (A'WA + lam J)^-1 a0 at each query row, in blocks."""
        out = np.empty(Xq.shape[0])
        step = max(1, lr.BLOCK_CELLS // self.basis.m)
        for s in range(0, Xq.shape[0], step):
            checkpoint()
            out[s : s + step] = self.full.variance(self._design(Xq[s : s + step]), self.smoothing)
        return out

    def _leverages(self) -> np.ndarray:
        sw = None if self.row_w is None else np.sqrt(self.row_w)
        lams = np.array([self.smoothing])
        out = np.empty(self.y.size)
        step = max(1, lr.BLOCK_CELLS // self.basis.rank)
        for s in range(0, self.y.size, step):
            checkpoint()
            part = None if sw is None else sw[s : s + step]
            out[s : s + step] = self.full.leverages(self.A[s : s + step], part, lams)[0]
        return out

    def loo_residuals(self) -> np.ndarray:
        h = self._leverages()
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.y - self.fitted) / (1.0 - h)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - omega_i(x0) r_i (Green & Silverman 1994, section 3.2),
        omega the smoother weights of the m-knot fit."""
        base = self.predict(Xq)
        r = self.loo_residuals()

        G = self.full.g(self.A)  # rank x rows, once for every block of query rows

        def block(rows: np.ndarray) -> np.ndarray:
            omega = self.full.weights(self._design(Xq[rows]), G, self.row_w, self.smoothing)
            return base[rows, None] - omega * r[None, :]

        return block

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        return []

    def notices(self) -> list[Notice]:
        return []

    def summary(self, names):
        return {
            "smoothing": self.smoothing,
            "df": self.df,
            "kind": "thin-plate regression spline (low rank)",
            "knots": int(self.basis.m),
            "rank": int(self.basis.rank),
            "knot_rule": lr.KNOT_RULE,
            "scale_shift": self.scaler.shift.tolist(),
            "scale_factor": self.scaler.scale.tolist(),
        }
