"""Smoothing splines: cubic in one feature, thin-plate in two or three.

``smoothing`` is the lam of ``scipy.interpolate.make_smoothing_spline`` (one feature) or of
``scipy.interpolate.RBFInterpolator(kernel="thin_plate_spline")`` (two or three features, after
``scale``). Larger smoothing is simpler; 0 interpolates.

With row weights w_i the criterion is sum_i w_i (y_i - f(x_i))^2 + lam J(f): the weights of
``make_smoothing_spline(x, y, w=w, lam=lam)``, and for thin-plate splines the system of
``RBFInterpolator(..., smoothing=lam / w)`` (the smoothing term scaled by 1 / w_i). Knot
placement and feature scaling do not use the weights.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg

from nearwise.core import windows
from nearwise.core.data import SCALES, Scaler
from nearwise.core.errors import NotApplicable, TooFewRows, UnsupportedDimension, Where
from nearwise.core.methods import spline1d, spline_lowrank, thinplate, thinplate_lowrank
from nearwise.core.methods.base import Method, Param, PathResult, row_weights
from nearwise.core.methods.spline_fits import (
    FittedSpline1D,
    FittedThinPlate,
    FoldSpline1D,
    FoldThinPlate,
)
from nearwise.core.tuning import Folds

GRID_SIZE = 20
MIN_DISTINCT = 5


def low_rank(X: np.ndarray) -> bool:
    """Whether a thin-plate fit goes on knots: two or three features and more rows than the
    exact solve affords (thinplate_lowrank.EXACT_ROWS)."""
    return X.shape[1] > 1 and X.shape[0] > thinplate_lowrank.EXACT_ROWS


class Spline(Method):
    """Smoothing spline in one to three features."""

    name = "spline"
    summary = (
        "Cubic smoothing spline (one feature) or thin-plate spline (two or three "
        "features) minimising squared error plus smoothing times roughness. Larger "
        "smoothing is simpler; 0 interpolates. Past 3,000 rows the thin-plate spline is "
        "fitted on knots (400 with two features, 600 with three, chosen by farthest-point "
        "selection from the scaled rows): `model` then reports `knots`, `rank` and "
        "`knot_rule`."
    )
    min_features = 1
    max_features = 3
    tuned = "smoothing"
    interval_kinds = ("cv_plus", "model")
    default_grid = (
        "20 values spaced evenly on a log scale, from about 2 (one feature) or p + 1.25 effective "
        "degrees of freedom to about half the distinct rows (thin-plate on knots: at most the "
        "rank of the knot basis)"
    )
    params = (
        Param(
            "smoothing",
            "number",
            None,
            "lam: weight of the roughness penalty integral f''^2 (one feature) or of the "
            "thin-plate penalty (two or three)",
            low=0.0,
            tunable=True,
            simpler="larger",
        ),
        Param(
            "scale",
            "choice",
            None,
            "feature scaling before a thin-plate fit (two or three features): `standard` "
            "(default), `range` or `none`; a one-feature spline works on x as given",
            choices=SCALES,
        ),
    )
    std_error_doc = (
        "posterior standard deviation sqrt(sigma^2 v(x0)), with sigma^2 = RSS / (n - df) and "
        "v(x0) the posterior variance of f in units of sigma^2 (A_ii at a data point; Wahba "
        "1983); null at smoothing 0, where there is no noise estimate"
    )
    model_interval_doc = (
        "Bayesian band f +/- z sqrt(sigma^2 (1 + v(x0))) (Wahba 1983). Its coverage holds on "
        "average across the design points, not at every point (Nychka 1988): it can be too "
        "narrow where the curve bends sharply. With `weight_by`, sigma^2 = sum w e^2 / (n - df) "
        "and the 1 becomes 1 / w0 for a new observation of weight w0."
    )
    categorical = False
    categorical_doc = (
        "a smoothing or thin-plate spline has no terms for levels; use additive, which adds "
        "one effect per level next to its smooth terms, or knn or linear"
    )
    references = (
        "Green & Silverman (1994), Nonparametric Regression and Generalized Linear Models",
        "Wahba (1990), Spline Models for Observational Data",
    )

    def order(self, values):
        return sorted(values, reverse=True)

    def is_bound(self, value, folds, work=None):
        return value == 0

    def _check_shape(self, X, folds, settings):
        p = X.shape[1]
        if p > 3:
            raise UnsupportedDimension(
                f"spline supports 1 to 3 features; got {p}. With more features use `knn` or "
                "`linear`, which accept any number of features.",
                [Where(("features",), f"{p} features")],
            )
        if p == 1 and settings.get("scale") is not None:
            raise NotApplicable(
                "`scale` applies to thin-plate splines (two or three features); a one-feature "
                "spline smooths x as given. Leave `scale` out.",
                [Where(("params", "scale"), "not used with one feature")],
            )
        need = max(MIN_DISTINCT, p + 4)  # each training fold then keeps p + 3 distinct rows
        distinct = self._distinct(X, settings)
        if distinct < need:
            merged = " (x values closer than 1/10,000 of the range count once)" if p == 1 else ""
            raise TooFewRows(
                f"spline needs at least {need} distinct feature values; found "
                f"{distinct}{merged}. Use `linear` (degree 1) or collect more distinct values.",
                [Where(("train", "rows"), f"{distinct} distinct values")],
            )
        if p > 1 and not self._spans(X, settings):
            raise TooFewRows(
                "the feature rows lie on a line or plane, so a thin-plate spline is not "
                "determined; drop a feature or use `linear`.",
                [Where(("features",), "collinear features")],
            )
        if folds.folded:
            for _r, _f, train, _test in self._check_splits(folds):
                if self._distinct(X[train], settings) < need - 1 or (
                    p > 1 and not self._spans(X[train], settings)
                ):
                    raise TooFewRows(
                        "a training fold holds too few distinct feature values for a spline, "
                        "or its rows lie on a line or plane; use fewer folds.",
                        [Where(("tuning", "folds"), "training fold too small")],
                    )

    @staticmethod
    def _check_splits(folds: Folds):
        """The training folds to check: all of them, or for ``window`` (a fold per step) the
        one with the fewest training rows."""
        if folds.scheme != "window":
            yield from folds.splits()
            return
        ids = folds.fold_id[0]
        f = folds.smallest()
        yield 0, f, np.flatnonzero(folds.train_mask(f, ids)), np.flatnonzero(ids == f)

    def _distinct(self, X, settings) -> int:
        if X.shape[1] == 1:
            return spline1d.Snap.of(X[:, 0]).knots
        return int(np.unique(X, axis=0).shape[0])

    def _spans(self, X, settings) -> bool:
        """Whether the scaled rows span the whole feature space (affine rank p)."""
        Z = Scaler.fit(X, self._scale(settings)).transform(X)
        Z = Z - Z.mean(axis=0)
        sv = np.linalg.svd(Z, compute_uv=False)
        return bool(sv[-1] > 1e-8 * max(sv[0], np.finfo(float).tiny))

    def _scale(self, settings):
        return settings.get("scale") or "standard"

    def candidates(self, X, y, folds, settings, grid, work=None):
        self._check_shape(X, folds, settings)
        if "smoothing" in settings:
            values = [settings["smoothing"]]
        elif grid is not None:
            values = self.order(grid)
        else:
            values = self._default_grid(X, y, folds, settings, work)
        repeated = X.shape[1] > 1 and np.unique(X, axis=0).shape[0] < X.shape[0]
        if repeated and 0 in values:
            where = ("params", "smoothing") if "smoothing" in settings else ("grid", "smoothing")
            raise TooFewRows(
                "smoothing 0 interpolates every row and needs distinct feature rows; some rows "
                "repeat. Use a positive smoothing (or average the repeated rows first).",
                [Where(where, "interpolation of repeated rows")],
            )
        return values

    def _default_grid(self, X, y, folds, settings, work):
        if X.shape[1] == 1:
            xs = self._snap(X[:, 0], work).x
            t, _, w = spline1d.average_ties(xs, y, row_weights(work))
            top = max(t.size / 2, 4.0)
            targets = 2 + np.geomspace(0.25, top - 2, GRID_SIZE)
            return self.order(spline1d.lam_for_df(t, w, targets).tolist())
        m = X.shape[1] + 1
        half = np.unique(X, axis=0).shape[0] / 2  # repeated rows add no flexibility
        if low_rank(X):
            # Up to the basis' rank: past it no smoothing value adds flexibility.
            full = spline_lowrank.setup(X, self._scale(settings), work).full(y)
            top = min(half, full.basis.rank - 0.5)
            targets = m + np.geomspace(0.25, max(top - m, 1.0), GRID_SIZE)
            return self.order(thinplate.lam_for_df(full.S**2, m, targets).tolist())
        eig = self._full_eigen(X, folds, settings, work)
        targets = m + np.geomspace(0.25, max(half - m, 1.0), GRID_SIZE)
        return self.order(thinplate.lam_for_df(eig.ev, m, targets).tolist())

    def _full_eigen(self, X, folds, settings, work) -> thinplate.Decomposition:
        """The thin-plate decomposition of all rows, built once per run (with eigenvectors
        only where leave-one-out needs them)."""
        work = {} if work is None else work
        if "eigen" not in work:
            Xs = Scaler.fit(X, self._scale(settings)).transform(X)
            kind = thinplate.Eigen if folds.scheme == "loo" else thinplate.Tridiagonal
            work["eigen"] = kind(Xs, row_weights(work))
        return work["eigen"]

    # -- one feature ------------------------------------------------------------------
    @staticmethod
    def _snap(x, work) -> spline1d.Snap:
        """Knot placement for all rows, computed once per run."""
        if work is None:
            return spline1d.Snap.of(x)
        if "snap" not in work:
            work["snap"] = spline1d.Snap.of(x, row_weights(work))
        return work["snap"]

    def _path_1d(self, x, y, folds, lams, work):
        """Every fold is fitted as the final fit is: its own knot placement, ties averaged;
        held-out rows are evaluated at their own x. Leave-one-out and GCV use the exact
        smoother diagonal of the fit to all rows."""
        n = x.size
        xs = self._snap(x, work).x
        rw = row_weights(work)
        t, ybar, w = spline1d.average_ties(xs, y, rw)
        full = spline1d.Knots.build(t, w)
        diags = [full.diag_smoother(lam) for lam in lams]
        df = np.array([d.sum() for d in diags])
        if work is not None:
            work["df"] = dict(zip(lams.tolist(), df.tolist(), strict=True))
        if folds.keep_models:
            oof = np.empty((lams.size, folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                wt = None if rw is None else rw[train]
                tt, yy, ww = spline1d.average_ties(spline1d.Snap.of(x[train], wt).x, y[train], wt)
                kn = spline1d.Knots.build(tt, ww)
                fits = [kn.solve(yy, lam) for lam in lams]
                for c, (g, gam) in enumerate(fits):
                    oof[c, r, test] = kn.evaluate(g, gam, x[test])
                if r == 0:
                    models.append(FoldSpline1D(kn, tuple(fits)))
            return PathResult(oof, df, fold_models=tuple(models))
        inv = np.searchsorted(t, xs)
        fitted = np.empty((lams.size, n))
        for c, lam in enumerate(lams):
            g, _ = full.solve(ybar, lam)
            fitted[c] = g[inv]
        # A row's weight (1 without weights) over its knot's: its share of the knot's mean.
        share = (np.ones(n) if rw is None else rw) / w[inv]
        if folds.scheme == "window":
            # Leave-a-window-out from the hat matrix of the fit to all rows (at their knots),
            # on the rows times sqrt(w), where it is the symmetric sqrt(w_i) Hk sqrt(w_j).
            sw = np.ones(n) if rw is None else np.sqrt(rw)
            oof = np.empty((lams.size, 1, n))
            for c, lam in enumerate(lams):
                Hk = full.hat(float(lam))
                oof[c, 0] = (
                    windows.window_oof(
                        y * sw,
                        fitted[c] * sw,
                        folds,
                        lambda rows, Hk=Hk: (
                            Hk[inv[rows][:, :, None], inv[rows][:, None, :]]
                            * (sw[rows][:, :, None] * sw[rows][:, None, :])
                        ),
                    )
                    / sw
                )
            return PathResult(oof, df)
        if folds.scheme == "gcv":
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        h = np.array([d[inv] * share for d in diags])
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
        loo = np.where(h < 1 - 1e-10, loo, np.nan)
        return PathResult(loo[:, None, :], df)

    # -- two or three features ----------------------------------------------------------
    def _path_tps(self, X, y, folds, lams, scale, work):
        if low_rank(X):
            return spline_lowrank.path(X, y, folds, lams, scale, work)
        n = X.shape[0]
        full = self._full_eigen(X, folds, {"scale": scale}, work)
        rw = row_weights(work)
        df = full.df(lams)
        if work is not None:
            work["df"] = dict(zip(lams.tolist(), df.tolist(), strict=True))
        if folds.folded:
            oof = np.empty((lams.size, folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                sc = Scaler.fit(X[train], scale)
                eig = thinplate.Tridiagonal(
                    sc.transform(X[train]), None if rw is None else rw[train]
                )
                C, B = eig.coefficients(y[train], lams)
                oof[:, r, test] = eig.predict(C, B, sc.transform(X[test])).T
                if r == 0 and folds.keep_models:
                    models.append(FoldThinPlate(sc, eig.X, C, B))
            return PathResult(oof, df, fold_models=tuple(models))
        eig = full
        C, _ = eig.coefficients(y, lams)
        if folds.scheme == "gcv":
            fitted = (y[:, None] - lams[None, :] * C / eig.w[:, None]).T
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        loo = (y[:, None] - eig.loo_residuals(C, lams)).T
        return PathResult(loo[:, None, :], df)

    def path(self, X, y, folds, settings, values, work=None):
        lams = np.asarray(values, dtype=float)
        if X.shape[1] == 1:
            return self._path_1d(X[:, 0], y, folds, lams, work)
        return self._path_tps(X, y, folds, lams, self._scale(settings), work)

    @staticmethod
    def _df(work, lam: float) -> float | None:
        return None if work is None else work.get("df", {}).get(lam)

    def fit(self, X, y, settings, value, work=None):
        lam = float(value)
        rw = row_weights(work)
        if X.shape[1] == 1:
            snap = self._snap(X[:, 0], work)
            t, ybar, w = spline1d.average_ties(snap.x, y, rw)
            kn = spline1d.Knots.build(t, w)
            g, gam = kn.solve(ybar, lam)
            df = self._df(work, lam)
            if df is None:
                df = float(kn.diag_smoother(lam).sum())
            fitted = kn.evaluate(g, gam, X[:, 0])
            df = df if np.isfinite(df) else None
            column = np.searchsorted(t, snap.x)
            return FittedSpline1D(kn, g, gam, lam, fitted, df, snap, y, column, rw)
        if low_rank(X):
            return spline_lowrank.fit(X, y, lam, self._scale(settings), work, self._df(work, lam))
        sc = Scaler.fit(X, self._scale(settings))
        Xs = sc.transform(X)
        try:
            c, b = thinplate.solve_direct(Xs, y, lam, rw)
        except linalg.LinAlgError:
            raise TooFewRows(
                "smoothing 0 interpolates every row and needs distinct feature rows; some "
                "rows coincide. Use a positive smoothing.",
                [Where(("params", "smoothing"), "interpolation of repeated rows")],
            ) from None
        df = self._df(work, lam)
        if df is None:
            df = float(thinplate.Tridiagonal(Xs, rw).df(np.array([lam]))[0])
        fitted = thinplate.kernel(Xs, Xs) @ c + thinplate.poly(Xs) @ b
        return FittedThinPlate(sc, Xs, c, b, lam, fitted, df, y, rw)
