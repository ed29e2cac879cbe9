"""Fitted smoothing splines and their error figures (both the one-feature and the thin-plate
kind), kept apart from the method class so that each file reads at once."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nearwise.core.data import Scaler
from nearwise.core.methods import spline1d, thinplate
from nearwise.core.methods.posterior import BayesianBand, Posterior, cubic_phi
from nearwise.core.results import Notice


@dataclass(frozen=True)
class FoldSpline1D:
    """Knot values and second derivatives of one training fold, for every candidate."""

    knots: spline1d.Knots
    fits: tuple[tuple[np.ndarray, np.ndarray], ...]

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        g, gam = self.fits[c]
        return self.knots.evaluate(g, gam, Xq[:, 0])


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
VARIANCE_NODES = 7  # a polynomial of degree 6 between two knots is fixed by 7 values
CROSS_CELLS = 2_000_000  # entries of a points x knots block of the 1-D posterior


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


class _Bayes(BayesianBand):
    """Error figures shared by both spline fits, from their posterior (Wahba 1983).

    Subclasses set ``y`` (rows), ``fit_rows`` (the smoother's fit at the rows), ``column``
    (each row's column in the smoother: its knot, or itself), ``count`` (the weight of each
    column: rows per knot, or the sum of their weights), ``row_w`` (row weights, None for 1),
    ``df`` and ``smoothing``, and provide ``_posterior()``, ``_cross(Xq)`` and ``_diag()``.

    A row of weight w_i enters its column's weighted mean with the share w_i / count, so its
    smoother weight at x0 is omega_column(x0) w_i / count and its leverage A_column w_i /
    count. sigma^2 = sum w_i e_i^2 / (n - df) is the noise variance of a row of weight 1.
    """

    _post: Posterior | None = None

    @property
    def _row_w(self) -> np.ndarray:
        return np.ones(self.y.size) if self.row_w is None else self.row_w

    def posterior(self) -> Posterior:
        if self._post is None:
            self._post = self._posterior()
        return self._post

    def sigma2(self) -> float:
        """sigma^2 = RSS / (n - df), the residual variance of a linear smoother."""
        n = self.y.size
        if self.df is None or n - self.df <= 1e-9:
            return float("nan")
        return float(np.sum(self._row_w * (self.y - self.fit_rows) ** 2) / (n - self.df))

    def variance(self, Xq: np.ndarray) -> np.ndarray:
        """Posterior variance of f(x0) in units of sigma^2 (in blocks of CROSS_CELLS)."""
        out = np.empty(Xq.shape[0])
        step = max(1, CROSS_CELLS // max(self.y.size, 1))
        for start in range(0, Xq.shape[0], step):
            Phi0, P0 = self._cross(Xq[start : start + step])
            out[start : start + step] = self.posterior().variance(Phi0, P0, np.zeros(len(P0)))
        return out

    def loo_residuals(self) -> np.ndarray:
        h = self._diag()[self.column] * self._row_w / self.count[self.column]
        with np.errstate(divide="ignore", invalid="ignore"):
            return (self.y - self.fit_rows) / (1.0 - h)

    def loo_predictions(self, Xq: np.ndarray):
        """mu_{-i}(x0) = mu(x0) - s_i(x0) r_i with s_i the smoother weight of row i at x0 and
        r_i the leave-one-out residual (the leave-one-out lemma of penalized least squares,
        Green & Silverman 1994, section 3.2)."""
        base = self.predict(Xq)
        step = self.loo_residuals() * self._row_w / self.count[self.column]

        def block(rows: np.ndarray) -> np.ndarray:
            omega, _ = self.posterior().weights(*self._cross(Xq[rows]))
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
    row_w: np.ndarray | None = None

    @property
    def fit_rows(self) -> np.ndarray:
        return self.g[self.column]

    @property
    def count(self) -> np.ndarray:
        return self.knots.w

    def _posterior(self) -> Posterior:
        # On the knots' unit scale u, where the penalty weight is lam / span^3.
        u, lam = self.knots.u, self.knots.lam_u(self.smoothing)
        P = np.column_stack([np.ones_like(u), u])
        return Posterior(cubic_phi(u, u), P, lam / self.knots.w, lam)

    def _cross(self, Xq):
        x = (Xq[:, 0] - self.knots.t0) / self.knots.span
        return cubic_phi(x, self.knots.u), np.column_stack([np.ones_like(x), x])

    def variance(self, Xq: np.ndarray) -> np.ndarray:
        """Posterior variance of f(x0) in units of sigma^2, for any number of points.

        Between two knots the smoother weights are cubic in x0, so the variance is a
        polynomial of degree 6 there: it is evaluated directly at 7 Chebyshev points of each
        knot interval and interpolated (barycentric form) at every point inside the knots,
        which costs the same for 1,000 points as for 1,000,000. Points outside the knots, and
        requests with fewer points than that, are evaluated directly in blocks.
        """
        x = Xq[:, 0]
        u = self.knots.t0 + self.knots.span * self.knots.u  # the knots on the data's scale
        inside = (x >= u[0]) & (x <= u[-1])
        intervals = u.size - 1
        if np.count_nonzero(inside) <= VARIANCE_NODES * intervals:
            return self._variance_direct(x)
        out = np.empty(x.size)
        out[~inside] = self._variance_direct(x[~inside])
        # Chebyshev points of the second kind on [-1, 1] and their barycentric weights.
        k = np.arange(VARIANCE_NODES)
        nodes = np.cos(np.pi * k / (VARIANCE_NODES - 1))[::-1]
        weights = (-1.0) ** k * np.where((k == 0) | (k == VARIANCE_NODES - 1), 0.5, 1.0)
        lo, hi = u[:-1], u[1:]
        at = 0.5 * (lo + hi)[:, None] + 0.5 * (hi - lo)[:, None] * nodes[None, :]
        at[:, 0], at[:, -1] = lo, hi
        values = self._variance_direct(at.ravel()).reshape(at.shape)
        xi = x[inside]
        j = np.clip(np.searchsorted(u, xi, side="right") - 1, 0, intervals - 1)
        s = (2.0 * xi - lo[j] - hi[j]) / (hi[j] - lo[j])  # on [-1, 1]
        diff = s[:, None] - nodes[None, :]
        exact = diff == 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            terms = weights[None, :] / diff
            interp = (terms * values[j]).sum(axis=1) / terms.sum(axis=1)
        hit = exact.any(axis=1)
        interp[hit] = values[j[hit], exact[hit].argmax(axis=1)]
        out[inside] = np.maximum(interp, 0.0)
        return out

    def _variance_direct(self, x: np.ndarray) -> np.ndarray:
        """The posterior variance at ``x`` by solving the augmented system, in blocks of
        about CROSS_CELLS cross-covariance entries."""
        out = np.empty(x.size)
        step = max(1, CROSS_CELLS // max(self.knots.u.size, 1))
        for start in range(0, x.size, step):
            block = x[start : start + step, None]
            Phi0, P0 = self._cross(block)
            out[start : start + step] = self.posterior().variance(
                Phi0, P0, np.zeros(block.shape[0])
            )
        return out

    def _diag(self) -> np.ndarray:
        return self.knots.diag_smoother(self.smoothing)

    def predict(self, Xq):
        return self.knots.evaluate(self.g, self.gam, Xq[:, 0])

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
    row_w: np.ndarray | None = None

    @property
    def fit_rows(self) -> np.ndarray:
        return self.fitted

    @property
    def column(self) -> np.ndarray:
        return np.arange(self.y.size)

    @property
    def count(self) -> np.ndarray:
        return self._row_w

    def _posterior(self) -> Posterior:
        K = thinplate.kernel(self.Xs, self.Xs)
        lam = self.smoothing
        return Posterior(K, thinplate.poly(self.Xs), lam / self._row_w, lam)

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
