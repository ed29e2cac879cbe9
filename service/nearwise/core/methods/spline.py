"""Smoothing splines: cubic in one feature, thin-plate in two or three.

``smoothing`` is the lam of ``scipy.interpolate.make_smoothing_spline`` (one feature) or of
``scipy.interpolate.RBFInterpolator(kernel="thin_plate_spline")`` (two or three features, after
``scale``). Larger smoothing is simpler; 0 interpolates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg, stats

from nearwise.core.data import SCALES, Scaler
from nearwise.core.errors import NotApplicable, TooFewRows, UnsupportedDimension, Where
from nearwise.core.methods import spline1d, thinplate
from nearwise.core.methods.base import Method, Param, PathResult
from nearwise.core.methods.posterior import Posterior, cubic_phi
from nearwise.core.results import Notice

GRID_SIZE = 20
MIN_DISTINCT = 5
MAX_THIN_PLATE_ROWS = 3000


@dataclass(frozen=True)
class FoldSpline1D:
    """Knot values and second derivatives of one training fold, for every candidate."""

    t: np.ndarray
    fits: tuple[tuple[np.ndarray, np.ndarray], ...]

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        g, gam = self.fits[c]
        return spline1d.evaluate(self.t, g, gam, Xq[:, 0])


@dataclass(frozen=True)
class FoldThinPlate:
    """Scaled training rows and coefficients of one training fold, for every candidate."""

    scaler: Scaler
    Xs: np.ndarray
    C: np.ndarray
    B: np.ndarray

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        Z = self.scaler.transform(Xq)
        return thinplate.kernel(Z, self.Xs) @ self.C[:, c] + thinplate.poly(Z) @ self.B[:, c]


INTERPOLATING_SHARE = 0.9  # df above this share of the distinct rows: noise is being fitted


def _interpolating(df: float | None, distinct: int, smoothing: float) -> list[Notice]:
    if smoothing > 0 and (df is None or df < INTERPOLATING_SHARE * distinct):
        return []
    return [
        Notice(
            "interpolating",
            f"the fit uses {'all' if smoothing == 0 else f'{df:.0f} of the'} {distinct} degrees of "
            "freedom the distinct rows allow: it reproduces the training targets almost exactly, "
            "noise included. Prefer a larger smoothing.",
        )
    ]


class _Bayes:
    """Error figures shared by both spline fits, from their posterior (Wahba 1983).

    Subclasses set ``y`` (rows), ``fit_rows`` (the smoother's fit at the rows), ``column``
    (each row's column in the smoother: its knot, or itself), ``count`` (rows per column),
    ``df`` and ``smoothing``, and provide ``_posterior()``, ``_cross(Xq)`` and ``_diag()``.
    """

    _post: Posterior | None = None

    def posterior(self) -> Posterior:
        if self._post is None:
            self._post = self._posterior()
        return self._post

    def sigma2(self) -> float:
        """sigma^2 = RSS / (n - df), the residual variance of a linear smoother."""
        n = self.y.size
        if self.df is None or n - self.df <= 1e-9:
            return float("nan")
        return float(np.sum((self.y - self.fit_rows) ** 2) / (n - self.df))

    def variance(self, Xq: np.ndarray) -> np.ndarray:
        """Posterior variance of f(x0) in units of sigma^2."""
        Phi0, P0 = self._cross(Xq)
        return self.posterior().variance(Phi0, P0, np.zeros(Xq.shape[0]))

    def std_error(self, Xq: np.ndarray, sigma_cv: float) -> np.ndarray:
        """Posterior standard deviation of f(x0)."""
        with np.errstate(invalid="ignore"):
            return np.sqrt(self.sigma2() * self.variance(Xq))

    def model_interval(self, Xq: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
        """The Bayesian band for a new observation: f +/- z sqrt(sigma^2 (1 + v(x0)))."""
        z = stats.norm.ppf(0.5 + level / 2)
        with np.errstate(invalid="ignore"):
            half = z * np.sqrt(self.sigma2() * (1.0 + self.variance(Xq)))
        f = self.predict(Xq)
        return f - half, f + half

    def loo_residuals(self) -> np.ndarray:
        h = self._diag()[self.column] / self.count[self.column]
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.y - self.fit_rows) / (1.0 - h)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - s_i(x0) r_i with s_i the smoother weight of row i at x0 and
        r_i the leave-one-out residual (the leave-one-out lemma of penalized least squares,
        Green & Silverman 1994, section 3.2)."""
        Phi0, P0 = self._cross(Xq)
        base = self.predict(Xq)
        step = self.loo_residuals() / self.count[self.column]

        def block(rows: np.ndarray) -> np.ndarray:
            omega, _ = self.posterior().weights(Phi0[rows], P0[rows])
            return base[rows, None] - omega[:, self.column] * step[None, :]

        return block


@dataclass
class FittedSpline1D(_Bayes):
    knots: spline1d.Knots
    g: np.ndarray
    gam: np.ndarray
    smoothing: float
    fitted: np.ndarray
    df: float | None
    snap: spline1d.Snap
    y: np.ndarray
    column: np.ndarray

    @property
    def fit_rows(self) -> np.ndarray:
        return self.g[self.column]

    @property
    def count(self) -> np.ndarray:
        return self.knots.w

    def _posterior(self) -> Posterior:
        t, lam = self.knots.t, self.smoothing
        P = np.column_stack([np.ones_like(t), t])
        return Posterior(cubic_phi(t, t), P, lam / self.knots.w, lam)

    def _cross(self, Xq):
        x = Xq[:, 0]
        return cubic_phi(x, self.knots.t), np.column_stack([np.ones_like(x), x])

    def _diag(self) -> np.ndarray:
        return self.knots.diag_smoother(self.smoothing)

    def predict(self, Xq):
        return spline1d.evaluate(self.knots.t, self.g, self.gam, Xq[:, 0])

    def summary(self, names):
        return {
            "smoothing": self.smoothing,
            "df": self.df,
            "kind": "cubic smoothing spline",
            "knots": int(self.knots.t.size),
            "knot_placement": self.snap.how,
            "largest_x_shift": self.snap.shift,
        }

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        return []

    def notices(self) -> list[Notice]:
        out = _interpolating(self.df, self.knots.t.size, self.smoothing)
        if self.snap.how == "exact":
            return out
        how = (
            "x values closer than 1/10,000 of the range were merged"
            if self.snap.how == "merged"
            else f"x was rounded to {spline1d.MAX_KNOTS} evenly spaced knots"
        )
        return [
            *out,
            Notice(
                "x_rounded",
                f"to keep the spline's arithmetic accurate, {how}; the largest shift of any x is "
                f"{self.snap.shift:.3g}. The fit differs from the exact smoothing spline by about "
                "the change of the curve over that distance.",
            ),
        ]


@dataclass
class FittedThinPlate(_Bayes):
    scaler: Scaler
    Xs: np.ndarray
    c: np.ndarray
    b: np.ndarray
    smoothing: float
    fitted: np.ndarray
    df: float | None
    y: np.ndarray

    @property
    def fit_rows(self) -> np.ndarray:
        return self.fitted

    @property
    def column(self) -> np.ndarray:
        return np.arange(self.y.size)

    @property
    def count(self) -> np.ndarray:
        return np.ones(self.y.size)

    def _posterior(self) -> Posterior:
        n = self.y.size
        K = thinplate.kernel(self.Xs, self.Xs)
        lam = self.smoothing
        return Posterior(K, thinplate.poly(self.Xs), np.full(n, lam), lam)

    def _cross(self, Xq):
        Z = self.scaler.transform(Xq)
        return thinplate.kernel(Z, self.Xs), thinplate.poly(Z)

    def _diag(self) -> np.ndarray:
        omega, _ = self.posterior().weights(*self._cross(self.scaler.inverse(self.Xs)))
        return np.diag(omega).copy()

    def predict(self, Xq):
        Z = self.scaler.transform(Xq)
        return thinplate.kernel(Z, self.Xs) @ self.c + thinplate.poly(Z) @ self.b

    def query_notices(self, Xq: np.ndarray) -> list[Notice]:
        return []

    def notices(self) -> list[Notice]:
        return _interpolating(self.df, np.unique(self.Xs, axis=0).shape[0], self.smoothing)

    def summary(self, names):
        return {
            "smoothing": self.smoothing,
            "df": self.df,
            "kind": "thin-plate spline",
            "scale_shift": self.scaler.shift.tolist(),
            "scale_factor": self.scaler.scale.tolist(),
        }


class Spline(Method):
    """Smoothing spline in one to three features."""

    name = "spline"
    summary = (
        "Cubic smoothing spline (one feature) or thin-plate spline (two or three "
        "features) minimising squared error plus smoothing times roughness. Larger "
        "smoothing is simpler; 0 interpolates."
    )
    min_features = 1
    max_features = 3
    tuned = "smoothing"
    interval_kinds = ("cv_plus", "model")
    default_grid = (
        "20 values spaced evenly on a log scale, from about 2 (one feature) or p + 1.25 effective "
        "degrees of freedom to about half the distinct rows"
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
        "narrow where the curve bends sharply."
    )
    references = (
        "Green & Silverman (1994), Nonparametric Regression and Generalized Linear Models",
        "Wahba (1990), Spline Models for Observational Data",
    )

    def order(self, values):
        return sorted(values, reverse=True)

    def is_bound(self, value, folds):
        return value == 0

    def _check_shape(self, X, folds, settings):
        n, p = X.shape
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
        distinct = np.unique(X, axis=0).shape[0]
        if distinct < MIN_DISTINCT:
            raise TooFewRows(
                f"spline needs at least {MIN_DISTINCT} distinct feature values; found "
                f"{distinct}. Use `linear` (degree 1) or collect more distinct values.",
                [Where(("train", "rows"), f"{distinct} distinct values")],
            )
        if p > 1:
            if n > MAX_THIN_PLATE_ROWS:
                raise TooFewRows(
                    f"a thin-plate spline here takes at most {MAX_THIN_PLATE_ROWS} rows (its "
                    f"cost grows as n^3); got {n}. Use `knn`, or fit a sample.",
                    [Where(("train", "rows"), f"{n} rows")],
                )
            if np.linalg.matrix_rank(thinplate.poly(X - X.mean(axis=0))) < p + 1:
                raise TooFewRows(
                    "the feature rows lie on a line or plane, so a thin-plate spline is not "
                    "determined; drop a feature or use `linear`.",
                    [Where(("features",), "collinear features")],
                )
        if folds.scheme == "kfold":
            for _r, _f, train, _test in folds.splits():
                if np.unique(X[train], axis=0).shape[0] < max(4, p + 2):
                    raise TooFewRows(
                        "a training fold holds too few distinct feature values for a spline; "
                        "use fewer folds.",
                        [Where(("tuning", "folds"), "training fold too small")],
                    )

    def _scale(self, settings):
        return settings.get("scale") or "standard"

    def candidates(self, X, y, folds, settings, grid, work=None):
        self._check_shape(X, folds, settings)
        if "smoothing" in settings:
            return [settings["smoothing"]]
        if grid is not None:
            return self.order(grid)
        n = X.shape[0]
        if X.shape[1] == 1:
            t, _, w = spline1d.average_ties(self._snap(X[:, 0], work).x, y)
            top = max(t.size / 2, 4.0)
            targets = 2 + np.geomspace(0.25, top - 2, GRID_SIZE)
            return self.order(spline1d.lam_for_df(t, w, targets).tolist())
        eig = self._full_eigen(X, folds, settings, work)
        m = X.shape[1] + 1
        targets = m + np.geomspace(0.25, max(n / 2 - m, 1.0), GRID_SIZE)
        return self.order(thinplate.lam_for_df(eig.ev, m, targets).tolist())

    def _full_eigen(self, X, folds, settings, work) -> thinplate.Decomposition:
        """The thin-plate decomposition of all rows, built once per run (with eigenvectors
        only where leave-one-out needs them)."""
        work = {} if work is None else work
        if "eigen" not in work:
            Xs = Scaler.fit(X, self._scale(settings)).transform(X)
            kind = thinplate.Eigen if folds.scheme == "loo" else thinplate.Tridiagonal
            work["eigen"] = kind(Xs)
        return work["eigen"]

    # -- one feature ------------------------------------------------------------------
    @staticmethod
    def _snap(x, work) -> spline1d.Snap:
        """Knot placement for all rows, computed once per run."""
        if work is None:
            return spline1d.Snap.of(x)
        if "snap" not in work:
            work["snap"] = spline1d.Snap.of(x)
        return work["snap"]

    def _path_1d(self, x, y, folds, lams, work):
        """Every fold is fitted as the final fit is: its own knot placement, ties averaged;
        held-out rows are evaluated at their own x. Leave-one-out and GCV use the exact
        smoother diagonal of the fit to all rows."""
        n = x.size
        xs = self._snap(x, work).x
        t, ybar, w = spline1d.average_ties(xs, y)
        full = spline1d.Knots.build(t, w)
        diags = [full.diag_smoother(lam) for lam in lams]
        df = np.array([d.sum() for d in diags])
        if work is not None:
            work["df"] = dict(zip(lams.tolist(), df.tolist(), strict=True))
        if folds.scheme == "kfold":
            oof = np.empty((lams.size, folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                tt, yy, ww = spline1d.average_ties(spline1d.Snap.of(x[train]).x, y[train])
                kn = spline1d.Knots.build(tt, ww)
                fits = [kn.solve(yy, lam) for lam in lams]
                for c, (g, gam) in enumerate(fits):
                    oof[c, r, test] = spline1d.evaluate(tt, g, gam, x[test])
                if r == 0:
                    models.append(FoldSpline1D(tt, tuple(fits)))
            return PathResult(oof, df, fold_models=tuple(models))
        inv = np.searchsorted(t, xs)
        fitted = np.empty((lams.size, n))
        for c, lam in enumerate(lams):
            g, _ = full.solve(ybar, lam)
            fitted[c] = g[inv]
        if folds.scheme == "gcv":
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        h = np.array([d[inv] / w[inv] for d in diags])
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
        loo = np.where(h < 1 - 1e-10, loo, np.nan)
        return PathResult(loo[:, None, :], df)

    # -- two or three features ----------------------------------------------------------
    def _path_tps(self, X, y, folds, lams, scale, work):
        n = X.shape[0]
        full = self._full_eigen(X, folds, {"scale": scale}, work)
        df = full.df(lams)
        if work is not None:
            work["df"] = dict(zip(lams.tolist(), df.tolist(), strict=True))
        if folds.scheme == "kfold":
            oof = np.empty((lams.size, folds.repeats, n))
            models = []
            for r, _f, train, test in folds.splits():
                sc = Scaler.fit(X[train], scale)
                eig = thinplate.Tridiagonal(sc.transform(X[train]))
                C, B = eig.coefficients(y[train], lams)
                oof[:, r, test] = eig.predict(C, B, sc.transform(X[test])).T
                if r == 0:
                    models.append(FoldThinPlate(sc, eig.X, C, B))
            return PathResult(oof, df, fold_models=tuple(models))
        eig = full
        C, _ = eig.coefficients(y, lams)
        if folds.scheme == "gcv":
            fitted = (y[:, None] - lams[None, :] * C).T
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
        if X.shape[1] == 1:
            snap = self._snap(X[:, 0], work)
            t, ybar, w = spline1d.average_ties(snap.x, y)
            kn = spline1d.Knots.build(t, w)
            g, gam = kn.solve(ybar, lam)
            df = self._df(work, lam)
            if df is None:
                df = float(kn.diag_smoother(lam).sum())
            fitted = spline1d.evaluate(t, g, gam, X[:, 0])
            df = df if np.isfinite(df) else None
            column = np.searchsorted(t, snap.x)
            return FittedSpline1D(kn, g, gam, lam, fitted, df, snap, y, column)
        sc = Scaler.fit(X, self._scale(settings))
        Xs = sc.transform(X)
        try:
            c, b = thinplate.solve_direct(Xs, y, lam)
        except linalg.LinAlgError:
            raise TooFewRows(
                "smoothing 0 interpolates every row and needs distinct feature rows; some "
                "rows coincide. Use a positive smoothing.",
                [Where(("params", "smoothing"), "interpolation of repeated rows")],
            ) from None
        df = self._df(work, lam)
        if df is None:
            df = float(thinplate.Tridiagonal(Xs).df(np.array([lam]))[0])
        fitted = thinplate.kernel(Xs, Xs) @ c + thinplate.poly(Xs) @ b
        return FittedThinPlate(sc, Xs, c, b, lam, fitted, df, y)
