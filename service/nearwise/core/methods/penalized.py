"""Ridge and lasso on a standardized polynomial basis, with the whole alpha path per fold.

The basis is the one of ``linear``: monomials of the standardized features, ordered by total
degree. With a penalty, every column but the intercept is then centered and scaled to unit
variance on the rows being fitted (a column constant on those rows is set to zero), and the
intercept is not penalized. ``alpha`` means what it means in scikit-learn on those columns Z:

- ridge minimizes ||y - b0 - Z w||^2 + alpha ||w||^2 (``sklearn.linear_model.Ridge``);
- lasso minimizes ||y - b0 - Z w||^2 / (2 n) + alpha ||w||_1 (``sklearn.linear_model.Lasso``),
  n the number of rows being fitted.

With row weights w_i the squares are weighted, as scikit-learn's ``sample_weight`` does:
ridge minimizes sum_i w_i (y_i - b0 - z_i'b)^2 + alpha ||b||^2 (``Ridge``, weights as given)
and lasso sum_i w_i (y_i - b0 - z_i'b)^2 / (2 sum_i w_i) + alpha ||b||_1 (``Lasso``, which
rescales the weights to sum to n). The standardizations (of the features, then of the basis
columns) use the weighted mean and sd, as ``StandardScaler().fit(X, sample_weight=w)``; the
solvers run on the centered rows times sqrt(w_i), where the algebra below is unweighted.

Ridge's whole path comes from one SVD of the centered basis per fold, w = V diag(d / (d^2 +
alpha)) U'y, and its leave-one-out and GCV scores from the hat matrix of the full-data SVD.
Lasso's path is scikit-learn's coordinate-descent ``lasso_path`` per fold, warm-started along
the shared alpha grid; lasso is tuned by K-fold only (it has no exact leave-one-out update).

References
----------
Hoerl, A. E. & Kennard, R. W. (1970). Ridge regression: biased estimation for nonorthogonal
problems. *Technometrics* 12, 55-67.
Tibshirani, R. (1996). Regression shrinkage and selection via the lasso. *JRSS B* 58, 267-288.
Friedman, J., Hastie, T. & Tibshirani, R. (2010). Regularization paths for generalized linear
models via coordinate descent. *Journal of Statistical Software* 33(1).
Golub, G. H., Heath, M. & Wahba, G. (1979). Generalized cross-validation as a method for
choosing a good ridge parameter. *Technometrics* 21, 215-223.
Zou, H., Hastie, T. & Tibshirani, R. (2007). On the "degrees of freedom" of the lasso. *Annals
of Statistics* 35, 2173-2192.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import linalg
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import lasso_path

from nearwise.core import windows
from nearwise.core.data import Scaler
from nearwise.core.errors import InvalidValue, NotApplicable, Where
from nearwise.core.methods.base import PathResult, row_weights
from nearwise.core.methods.coding import categories_of, design_scaler, linear_terms
from nearwise.core.methods.penalized_fit import FittedPenalized
from nearwise.core.methods.polynomial import design

PENALTIES = ("ridge", "lasso")
GRID_SIZE = 30
GRID_SPAN = 1e-4  # the default path runs from alpha_max down to alpha_max * GRID_SPAN
RIDGE_TOP = 100.0  # ridge alpha_max = RIDGE_TOP * d_max^2: every shrinkage factor <= 1/101
MAX_TERMS = 1000
RANK_TOL = 1e-9  # singular values below this share of the largest are null directions
CONSTANT_TOL = 1e-12  # a column whose sd is below this share of its largest |value| is constant
LASSO_TOL = 1e-10  # scikit-learn's dual-gap tolerance (relative to ||y||^2)
LASSO_MAX_ITER = 100_000

GRID_DOC = (
    f"with a penalty: {GRID_SIZE} values of alpha spaced evenly on a log scale from alpha_max "
    f"down to alpha_max * {GRID_SPAN:g}, largest (simplest) first, fixed from all rows before "
    "the folds; lasso: alpha_max = max_j |z_j'(y - mean y)| / n, the smallest alpha at which "
    f"every penalized coefficient is zero; ridge: alpha_max = {RIDGE_TOP:g} d_max^2 (d_max the "
    f"largest singular value of the centered basis), where every direction is shrunk by a "
    f"factor of at most 1/{RIDGE_TOP + 1:g} and the fit is within 1% of the mean"
)


@dataclass(frozen=True)
class Basis:
    """Monomials of the standardized features, each column then scaled to unit variance.

    With categorical features the treatment dummies are basis columns too (after the
    intercept; :mod:`nearwise.core.methods.coding`), and are centered and scaled to unit
    variance like every other column before the penalty applies, as a scikit-learn
    ``StandardScaler`` after a ``OneHotEncoder(drop="first")`` would: a level's penalty
    weighs its coefficient times the dummy's sd, sqrt(f (1 - f)) for a level held by a share
    f of the rows, so a rare level is shrunk more. Coefficients are reported as plain
    differences from the reference level.
    """

    scaler: Scaler  # or coding.Design, with categorical features
    terms: list[tuple[int, ...]]  # terms[0] is the intercept
    mean: np.ndarray
    sd: np.ndarray
    constant: np.ndarray

    @classmethod
    def fit(
        cls, X: np.ndarray, terms: list[tuple[int, ...]], w: np.ndarray | None = None, cats=None
    ) -> Basis:
        """Standardizations learned from the rows ``X`` (weighted by ``w`` if given)."""
        scaler = design_scaler(X, cats, w)
        B = design(scaler.transform(X), terms)[:, 1:]
        if w is None:
            mean, sd = B.mean(axis=0), B.std(axis=0)
        else:
            mean = np.average(B, axis=0, weights=w)
            sd = np.sqrt(np.average((B - mean) ** 2, axis=0, weights=w))
        constant = (np.ptp(B, axis=0) == 0) | (sd <= CONSTANT_TOL * np.max(np.abs(B), axis=0))
        return cls(scaler, terms, mean, np.where(constant, 1.0, sd), constant)

    def transform(self, X: np.ndarray) -> np.ndarray:
        Z = (design(self.scaler.transform(X), self.terms)[:, 1:] - self.mean) / self.sd
        Z[:, self.constant] = 0.0
        return Z


@dataclass(frozen=True)
class RidgeSVD:
    """The SVD of the centered basis, Zc = U diag(d) V', and U'(y - mean y)."""

    U: np.ndarray
    d: np.ndarray
    V: np.ndarray
    uty: np.ndarray

    @classmethod
    def of(cls, Zc: np.ndarray, yc: np.ndarray) -> RidgeSVD:
        if Zc.shape[1] == 0:  # nothing kept: the fit is the mean
            return cls(np.zeros((Zc.shape[0], 0)), np.zeros(0), np.zeros((0, 0)), np.zeros(0))
        try:
            U, d, Vt = linalg.svd(Zc, full_matrices=False, lapack_driver="gesdd")
        except linalg.LinAlgError:  # pragma: no cover - divide and conquer rarely fails
            U, d, Vt = linalg.svd(Zc, full_matrices=False, lapack_driver="gesvd")
        return cls(U, d, Vt.T, U.T @ yc)

    def gain(self, alphas) -> np.ndarray:
        """1 / (d^2 + alpha) per direction and alpha; 0 on null directions."""
        d = self.d
        null = d <= RANK_TOL * (d[0] if d.size else 0.0)
        with np.errstate(divide="ignore"):
            g = 1.0 / (d[:, None] ** 2 + np.asarray(alphas, dtype=float)[None, :])
        return np.where(null[:, None], 0.0, g)

    def shrink(self, alphas) -> np.ndarray:
        """d^2 / (d^2 + alpha): the share of each direction kept (the ridge df per direction)."""
        return self.d[:, None] ** 2 * self.gain(alphas)

    def coefs(self, alphas) -> np.ndarray:
        return self.V @ (self.gain(alphas) * (self.d * self.uty)[:, None])


def lasso_coefs(Zc: np.ndarray, yc: np.ndarray, alphas) -> tuple[np.ndarray, np.ndarray]:
    """Lasso coefficients (columns of W, one per alpha) on centered data, and convergence flags.

    Positive alphas are solved by scikit-learn's ``lasso_path`` from the largest down (warm
    starts); alpha 0 is least squares (minimum norm where columns are aliased).
    """
    alphas = np.asarray(alphas, dtype=float)
    W = np.zeros((Zc.shape[1], alphas.size))
    converged = np.ones(alphas.size, dtype=bool)
    pos = np.flatnonzero(alphas > 0)
    if pos.size:
        pos = pos[np.argsort(-alphas[pos], kind="stable")]  # lasso_path's order
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)  # reported as `converged`
            _, coefs, _, iters = lasso_path(
                Zc,
                yc,
                alphas=alphas[pos],
                tol=LASSO_TOL,
                max_iter=LASSO_MAX_ITER,
                return_n_iter=True,
            )
        W[:, pos] = coefs
        converged[pos] = np.asarray(iters) < LASSO_MAX_ITER
    zero = np.flatnonzero(alphas == 0)
    if zero.size:
        W[:, zero] = RidgeSVD.of(Zc, yc).coefs([0.0])
    return W, converged


def centered(Z, y, w):
    """(weighted) column means, mean of y, and the centered rows times sqrt(w)."""
    if w is None:
        zbar, ybar = Z.mean(axis=0), float(y.mean())
        return zbar, ybar, Z - zbar, y - ybar
    zbar, ybar = np.average(Z, axis=0, weights=w), float(np.average(y, weights=w))
    sw = np.sqrt(w)
    return zbar, ybar, (Z - zbar) * sw[:, None], (y - ybar) * sw


def lasso_scale(w, n: int) -> float:
    """The factor on alpha for the scaled rows r~ = sqrt(w) r: sum w r^2 / (2 sum w) + alpha
    |b|_1 is (n / sum w) (|r~|^2 / (2 n) + alpha (sum w / n) |b|_1), lasso_path's objective
    at alpha sum w / n."""
    return 1.0 if w is None else float(np.sum(w)) / n


def solve(Z, y, penalty, alphas, w=None):
    """Intercepts (one per alpha), coefficients W (columns per alpha) and convergence flags.

    ``Z`` is the basis on the rows being fitted; it is centered here, so the intercept is the
    unpenalized b0 = mean y - mean(Z) w (weighted means with weights ``w``).
    """
    zbar, ybar, Zc, yc = centered(Z, y, w)
    converged = np.ones(len(alphas), dtype=bool)
    if penalty == "ridge":
        W = RidgeSVD.of(Zc, yc).coefs(alphas)
    else:
        scaled = np.asarray(alphas, dtype=float) * lasso_scale(w, y.size)
        W, converged = lasso_coefs(Zc, yc, scaled)
    return ybar - zbar @ W, W, converged


@dataclass(frozen=True)
class FoldPenalized:
    """Every alpha's coefficients on one training fold, with that fold's standardization."""

    basis: Basis
    b0: np.ndarray
    W: np.ndarray

    def predict(self, Xq: np.ndarray, c: int) -> np.ndarray:
        return self.b0[c] + self.basis.transform(Xq) @ self.W[:, c]


def terms_for(p: int, settings, cats=None) -> list[tuple[int, ...]]:
    degree = settings.get("degree", 1)
    inter = settings.get("interactions")
    terms = linear_terms(cats, p, degree, degree > 1 if inter is None else inter)
    if len(terms) - 1 > MAX_TERMS:
        raise InvalidValue(
            f"degree {degree} on {p} features makes {len(terms) - 1} terms; a penalized fit "
            f"takes at most {MAX_TERMS}. Use a lower degree or `interactions: false`.",
            [Where(("params", "degree"), "too many terms")],
        )
    return terms


def _full(X, y, terms, penalty, work) -> tuple[Basis, np.ndarray, RidgeSVD | None]:
    """The basis, Z and (ridge) the SVD on all rows, kept in ``work`` for the later steps."""
    w = row_weights(work)
    key = (id(X), id(y), id(w), X.shape, tuple(terms), penalty)
    cached = (work or {}).get("penalized_full")
    if cached is not None and cached[0] == key:
        return cached[1]
    basis = Basis.fit(X, terms, w, categories_of(work))
    Z = basis.transform(X)
    svd = RidgeSVD.of(*centered(Z, y, w)[2:]) if penalty == "ridge" else None
    full = (basis, Z, svd)
    if work is not None:
        work["penalized_full"] = (key, full)
    return full


def default_grid(
    penalty: str, Z: np.ndarray, y: np.ndarray, svd: RidgeSVD | None, w=None
) -> list[float]:
    if penalty == "lasso" or svd is None:
        _, _, Zc, yc = centered(Z, y, w)
        top = float(np.max(np.abs(Zc.T @ yc))) / (y.size if w is None else float(np.sum(w)))
    else:
        top = RIDGE_TOP * float(svd.d[0]) ** 2 if svd.d.size else 0.0
    if not top > 0:  # constant target or constant features: every alpha gives the mean
        top = 1.0
    return (top * np.logspace(0.0, np.log10(GRID_SPAN), GRID_SIZE)).tolist()


def candidates(X, y, folds, settings, grid, order, work) -> list[float]:
    penalty = settings.get("penalty")
    if penalty == "lasso" and not folds.folded:
        raise NotApplicable(
            f"`tuning.scheme` {folds.scheme} does not apply to the lasso: it has no exact "
            "leave-one-out update. Use `tuning.scheme` kfold, window or blocks, or "
            "`penalty: ridge`.",
            [Where(("tuning", "scheme"), "lasso is tuned by kfold only")],
        )
    terms = terms_for(X.shape[1], settings, categories_of(work))
    _, Z, svd = _full(X, y, terms, penalty, work)
    if "alpha" in settings:
        values = [float(settings["alpha"])]
    elif grid is not None:
        values = order([float(v) for v in grid])
    else:
        values = default_grid(penalty, Z, y, svd, row_weights(work))
    if work is not None and penalty == "lasso":
        work["lasso_alpha_max"] = default_grid("lasso", Z, y, None, row_weights(work))[0]
    return values


def path(X, y, folds, settings, values, work=None) -> PathResult:
    n = X.shape[0]
    penalty = settings.get("penalty")
    cats = categories_of(work)
    terms = terms_for(X.shape[1], settings, cats)
    _, Z, svd = _full(X, y, terms, penalty, work)
    w = row_weights(work)
    # On the rows times sqrt(w): the intercept's column is sqrt(w), its hat matrix
    # sqrt(w) sqrt(w)' / sum w (1/n without weights).
    sw = np.ones(n) if w is None else np.sqrt(w)
    total = float(np.sum(sw**2))
    ybar = float(np.sum(sw**2 * y) / total)
    if folds.scheme == "window" and svd is not None:
        # Ridge: leave-a-window-out from the hat matrix 1/n + U diag(shrink) U' of all rows.
        S = svd.shrink(values)
        fitted = ybar + (svd.U @ (S * svd.uty[:, None])).T / sw[None, :]
        oof = np.empty((len(values), 1, n))
        for c in range(len(values)):
            Us = np.column_stack([sw / np.sqrt(total), svd.U * np.sqrt(S[:, c])[None, :]])
            oof[c, 0] = (
                windows.window_oof(
                    y * sw,
                    fitted[c] * sw,
                    folds,
                    lambda rows, Us=Us: np.einsum("bik,bjk->bij", Us[rows], Us[rows]),
                )
                / sw
            )
        return PathResult(oof, 1.0 + S.sum(axis=0))
    if folds.folded:
        oof = np.empty((len(values), folds.repeats, n))
        models = []
        for r, _f, train, test in folds.splits():
            wt = None if w is None else w[train]
            fold = Basis.fit(X[train], terms, wt, cats)
            b0, W, _ = solve(fold.transform(X[train]), y[train], penalty, values, wt)
            oof[:, r, test] = b0[:, None] + (fold.transform(X[test]) @ W).T
            if r == 0 and folds.keep_models:
                models.append(FoldPenalized(fold, b0, W))
        if svd is not None:
            df = 1.0 + svd.shrink(values).sum(axis=0)
        else:
            _, W, converged = solve(Z, y, penalty, values, w)
            if work is not None:
                work["lasso_full"] = (dict(zip(values, W.T, strict=True)), converged)
            df = 1.0 + np.count_nonzero(W, axis=0)
        return PathResult(oof, df.astype(float), fold_models=tuple(models))
    assert svd is not None  # ridge only: candidates refuse lasso with loo and gcv
    S = svd.shrink(values)
    fitted = ybar + (svd.U @ (S * svd.uty[:, None])).T / sw[None, :]
    df = 1.0 + S.sum(axis=0)
    if folds.scheme == "gcv":
        return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
    h = ((sw**2 / total)[:, None] + svd.U**2 @ S).T
    with np.errstate(divide="ignore", invalid="ignore"):
        loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
    loo = np.where(h < 1 - 1e-10, loo, np.nan)
    return PathResult(loo[:, None, :], df)


def fit(X, y, settings, alpha, names, work=None) -> FittedPenalized:
    penalty = settings.get("penalty")
    terms = terms_for(X.shape[1], settings, categories_of(work))
    basis, Z, svd = _full(X, y, terms, penalty, work)
    lasso = (work or {}).get("lasso_full")
    return fit_with(basis, Z, y, penalty, float(alpha), names, svd, lasso, row_weights(work))


def fit_with(basis, Z, y, penalty, alpha, names, svd=None, lasso=None, w=None) -> FittedPenalized:
    """The fit on rows whose basis ``Z`` was computed with ``basis`` (fixed standardization),
    weighted by ``w`` if given."""
    zbar, ybar, Zc, yc = centered(Z, y, w)
    if penalty == "ridge":
        svd = svd or RidgeSVD.of(Zc, yc)
        coef = svd.coefs([alpha])[:, 0]
        U, d, V, g_hat = svd.U, svd.d, svd.V, svd.gain([alpha])[:, 0]
        g_var = d**2 * g_hat**2
        converged = True
    else:
        if lasso is not None and alpha in lasso[0]:
            coef = lasso[0][alpha]
            converged = bool(lasso[1][list(lasso[0]).index(alpha)])
        else:
            W, conv = lasso_coefs(Zc, yc, [alpha * lasso_scale(w, y.size)])
            coef, converged = W[:, 0], bool(conv[0])
        active = np.flatnonzero(coef)
        sub = RidgeSVD.of(Zc[:, active], yc)
        U, d = sub.U, sub.d
        V = np.zeros((coef.size, d.size))
        V[active] = sub.V
        g_hat = g_var = sub.gain([0.0])[:, 0]  # least squares on the kept terms
    b0 = ybar - zbar @ coef
    return FittedPenalized(
        basis=basis,
        penalty=penalty,
        alpha=alpha,
        b0=float(b0),
        w=coef,
        zbar=zbar,
        U=U,
        d=d,
        V=V,
        g_hat=g_hat,
        g_var=g_var,
        y=y,
        fitted=b0 + Z @ coef,
        names=names,
        converged=converged,
        row_w=w,
    )
