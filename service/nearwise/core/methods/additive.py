"""Additive models: y = alpha + sum_j f_j(x_j), each f_j a penalized cubic regression spline.

Per-feature smoothing lambda-hat_j is chosen inside every fit by REML (``additive_solve``);
the one tuned parameter, ``smoothing``, multiplies all of them (1 keeps the REML choice, larger
is smoother, and a large value leaves every f_j a straight line: a linear model). Its grid is
scored by the shared cross-validation like any other method's, so ``compare`` can rank the
additive model by its effective degrees of freedom.

The basis (knots, feature scaling, centering) is built once from all rows of the run and
shared by the training folds; each fold chooses its own lambda-hat by REML on its rows. One QR
pass over the rows reduces every fold (``additive_basis``), and one SVD per fold scores every
candidate (``additive_solve``). Leave-one-out and GCV keep the basis and lambda-hat of all rows
and are exact for them (the leverages of the penalized least squares).

With row weights w_i the fit minimizes sum_i w_i (y_i - f(x_i))^2 plus the penalties: every
reduction runs on the rows times sqrt(w_i), where the algebra (and REML, up to a constant) is
the unweighted one. A training row's leverage is w_i x_i'(X'WX + S)^-1 x_i.

References
----------
Hastie, T. & Tibshirani, R. (1990). *Generalized Additive Models*, Chapman & Hall.
Wood, S. N. (2017). *Generalized Additive Models: An Introduction with R*, 2nd ed., CRC.
"""

from __future__ import annotations

import numpy as np

from nearwise.core import windows
from nearwise.core.errors import InvalidValue, NotApplicable, TooFewRows, Where
from nearwise.core.methods.additive_basis import (
    BLOCK,
    Basis,
    default_knots,
    evaluate,
    reduce_rows,
    stack,
)
from nearwise.core.methods.additive_model import FittedAdditive, FoldAdditive
from nearwise.core.methods.additive_solve import Reduced, Smoother
from nearwise.core.methods.base import Method, Param, PathResult, row_weights
from nearwise.core.methods.coding import categories_of

GRID_SIZE = 20
MAX_WIGGLY = 600  # penalized columns in all: each REML step factors a square system this size
TOP_SHARE = 0.9  # the default grid reaches this share of the basis's wiggly df


class Additive(Method):
    """Additive model of penalized cubic regression splines."""

    name = "additive"
    summary = (
        "Additive model y = alpha + sum of f_j(x_j), each f_j a penalized cubic regression "
        "spline in one feature with its own smoothing chosen by REML; `smoothing` multiplies "
        "them all. Larger smoothing is simpler; very large smoothing gives a linear model. "
        "Categorical features add an unpenalized effect per level (treatment coding)."
    )
    min_features = 1
    max_features = None
    tuned = "smoothing"
    interval_kinds = ("cv_plus", "model")
    default_grid = (
        "20 multipliers of the REML smoothing, spaced evenly on a log scale of effective "
        "degrees of freedom from about p + 1.25 (every f_j nearly straight; lower if REML "
        "itself chose less) to the smaller of half the distinct rows and 90% of what the "
        "basis allows; 1 (REML's choice) always among them"
    )
    params = (
        Param(
            "smoothing",
            "number",
            None,
            "positive multiplier of every feature's penalty weight lambda_j on the integral "
            "of f_j''^2, each lambda_j chosen by REML inside the fit (1 keeps that choice); "
            "`model.features[].lambda` gives the weights in force in each feature's units. "
            "Schemes loo and gcv keep the lambda_j and knots of all rows (exact for them); "
            "kfold lets each training fold choose its own lambda_j",
            low=0.0,
            tunable=True,
            simpler="larger",
        ),
        Param(
            "knots",
            "integer",
            None,
            "knots per feature (basis size), at quantiles of its distinct values; default 20, "
            "fewer past 12 features (about 240 penalized columns in all, at least 4 each), "
            "never more than the feature's distinct values",
            low=3,
            high=100,
        ),
    )
    std_error_doc = (
        "posterior standard deviation sqrt(sigma^2 x0'(X'X + S)^-1 x0) of the penalized least "
        "squares, with sigma^2 = RSS / (n - df) (Wahba 1983; Wood 2017, section 6.10)"
    )
    model_interval_doc = (
        "Bayesian band f +/- z sqrt(sigma^2 (1 + x0'(X'X + S)^-1 x0)); its coverage holds on "
        "average over the design points rather than at every point (Nychka 1988). With "
        "`weight_by`, X'X is X'WX, sigma^2 = sum w e^2 / (n - df) and the 1 becomes 1 / w0."
    )
    references = (
        "Hastie & Tibshirani (1990), Generalized Additive Models",
        "Wood (2017), Generalized Additive Models: An Introduction with R, 2nd ed.",
        "Wood (2011), Fast stable restricted maximum likelihood and marginal likelihood "
        "estimation of semiparametric generalized linear models, JRSS B 73",
    )

    def order(self, values):
        return sorted(values, reverse=True)

    def is_bound(self, value, folds, work=None):
        """At the simple end, a smoothing whose fit is already straight in every feature (less
        than 0.01 df beyond the lines) cannot be made simpler by widening the grid."""
        full = (work or {}).get("full")
        return full is not None and full.df(float(value)) - full.red.kept.size < 0.01

    # -- shared work --------------------------------------------------------------------
    def _basis(self, X, settings, work) -> Basis:
        if work is not None and "basis" in work:
            return work["basis"]
        cats = categories_of(work)
        knots = settings.get("knots") or default_knots(_numeric(X, cats))
        basis = Basis.build(X, knots, cats)
        if work is not None:
            work["basis"] = basis
        return basis

    @staticmethod
    def _fold_parts(basis, X, y, ids, k, check, w=None) -> list[np.ndarray]:
        """The R factor of each test fold's rows (their union is the training folds)."""
        return [
            reduce_rows(basis, X[ids == f], y[ids == f], check, None if w is None else w[ids == f])
            for f in range(k)
        ]

    def _full(self, X, y, folds, basis, work) -> Smoother:
        """lambda-hat and the SVD of all rows, computed once per run."""
        if work is not None and "full" in work:
            return work["full"]
        w = row_weights(work)
        if folds is not None and folds.scheme == "kfold":
            ids = folds.fold_id[0]
            parts = self._fold_parts(basis, X, y, ids, folds.n_folds, folds.check, w)
            if work is not None:
                work["fold_parts"] = parts
            aug = stack(parts)
        else:
            aug = reduce_rows(basis, X, y, lambda: None, w)
        smoother = Smoother.of(Reduced.of(aug, basis.k, X.shape[0]), [b for _, b in basis.blocks])
        if work is not None:
            work["full"] = smoother
        return smoother

    # -- the Method interface -----------------------------------------------------------
    def _check(self, X, folds, settings, cats=None):
        p = _numeric(X, cats)
        if p == 0:
            raise NotApplicable(
                "additive needs at least one numeric feature to smooth; with categorical "
                "features only, use linear (one effect per level) or knn.",
                [Where(("features",), "no numeric feature")],
            )
        if cats is None and np.all(X == X[:1]):
            raise TooFewRows(
                "every feature is constant over the training rows, so an additive model has "
                "nothing to fit; give features that vary.",
                [Where(("features",), "constant features")],
            )
        levels = 0 if cats is None else cats.n_dummies
        need = p + levels + 2
        if folds.min_train < need:
            if folds.folded:
                held, fix = "each training fold", "Use fewer folds or fewer features."
                where = Where(("tuning", "folds"), "training fold too small")
            else:
                held, fix = "each fit", "Use fewer features or more rows."
                where = Where(("train", "rows"), f"{folds.n} usable rows")
            also = f" and {levels} level effect(s)" if levels else ""
            raise TooFewRows(
                f"an additive model in {p} numeric feature(s){also} needs at least {need} rows "
                f"in {held} (an intercept, a slope per feature, an effect per level but the "
                f"reference and a residual); there are {folds.min_train}. {fix}",
                [where],
            )
        knots = settings.get("knots") or default_knots(p)
        wiggly = p * (knots - 2)
        if wiggly > MAX_WIGGLY:
            raise InvalidValue(
                f"`knots` = {knots} for {p} features gives {wiggly} penalized columns; at "
                f"most {MAX_WIGGLY} are allowed (each smoothing step factors a square system "
                f"of that size). Use at most {MAX_WIGGLY // p + 2} knots.",
                [Where(("params", "knots"), "too many knots for this many features")],
            )

    @staticmethod
    def _positive(values, where):
        for i, v in enumerate(values):
            if not v > 0:
                path = where if where[0] == "params" else (*where, i)
                raise InvalidValue(
                    f"`smoothing` multiplies the REML penalty weights and must be positive; got "
                    f"{v}. Use a small value such as 0.01 for a rougher fit.",
                    [Where(path, "must be positive")],
                )

    def candidates(self, X, y, folds, settings, grid, work=None):
        self._check(X, folds, settings, categories_of(work))
        if "smoothing" in settings:
            values = [settings["smoothing"]]
            self._positive(values, ("params", "smoothing"))
            return values
        if grid is not None:
            values = self.order(grid)
            self._positive(grid, ("grid", "smoothing"))
            return values
        return self._default_grid(X, y, folds, settings, work)

    def _default_grid(self, X, y, folds, settings, work):
        """Multipliers for df targets spaced on a log scale above the k straight-line columns,
        from 0.25 (or REML's own df, if smaller) to the top; 1 (REML's choice) is always one."""
        sm = self._full(X, y, folds, self._basis(X, settings, work), work)
        k = sm.red.kept.size
        rank = int(np.count_nonzero(sm.sig2 > 1e-12 * max(sm.sig2.max(initial=0.0), 1e-300)))
        half = np.unique(X, axis=0).shape[0] / 2
        top = min(half, k + TOP_SHARE * rank)
        if rank == 0 or top - k < 0.5:
            return [1.0]
        low = min(0.25, max(sm.df(1.0) - k, 1e-3))
        targets = k + np.geomspace(low, top - k, GRID_SIZE)
        pos = sm.sig2[sm.sig2 > 0]
        lo = np.full(targets.shape, np.log(pos.min()) - 30)
        hi = np.full(targets.shape, np.log(pos.max()) + 30)
        for _ in range(100):  # df falls as s grows: bisection on log s
            mid = (lo + hi) / 2
            rough = np.array([sm.df(np.exp(m)) for m in mid]) > targets
            lo = np.where(rough, mid, lo)
            hi = np.where(rough, hi, mid)
        values = np.array(sorted({float(f"{np.exp(m):.4g}") for m in (lo + hi) / 2}))
        if 1.0 not in values:  # REML's choice replaces the nearest value (on a log scale)
            values[int(np.argmin(np.abs(np.log(values))))] = 1.0
        return self.order(values.tolist())

    def path(self, X, y, folds, settings, values, work=None):
        n = X.shape[0]
        s = np.asarray(values, dtype=float)
        basis = self._basis(X, settings, work)
        full = self._full(X, y, folds, basis, work)
        df = np.array([full.df(v) for v in s])
        blocks = [b for _, b in basis.blocks]
        w = row_weights(work)
        if folds.scheme == "window":
            return PathResult(self._window(X, y, folds, basis, full, s, w), df)
        if folds.folded:
            oof = np.empty((s.size, folds.repeats, n))
            models = []
            k = folds.n_folds
            for r in range(folds.repeats):
                ids = folds.fold_id[r]
                gapped = folds.scheme != "kfold"
                if gapped:
                    parts = []  # each fold's training rows are reduced on their own
                elif r == 0 and work is not None and "fold_parts" in work:
                    parts = work["fold_parts"]
                else:
                    parts = self._fold_parts(basis, X, y, ids, k, folds.check, w)
                for f in range(k):
                    folds.check()
                    train, test = folds.train_mask(f, ids), ids == f
                    if gapped:
                        wt = None if w is None else w[train]
                        aug = reduce_rows(basis, X[train], y[train], folds.check, wt)
                    else:
                        aug = stack([parts[g] for g in range(k) if g != f])
                    sm = Smoother.of(Reduced.of(aug, basis.k, int(train.sum())), blocks)
                    coefs = sm.coefs(s)
                    oof[:, r, test] = evaluate(basis, X[test], sm.red.kept, coefs).T
                    if r == 0 and folds.keep_models:
                        models.append(FoldAdditive(basis, sm.red.kept, coefs))
            return PathResult(oof, df, fold_models=tuple(models))
        coefs = full.coefs(s)
        fitted = evaluate(basis, X, full.red.kept, coefs).T  # (candidates, n)
        if folds.scheme == "gcv":
            return PathResult(fitted[:, None, :], df, gcv_scale=1 - df / n)
        h = np.empty((s.size, n))
        for start in range(0, n, BLOCK):
            q1, g = full.pieces(*basis.design(X[start : start + BLOCK]))
            for c, v in enumerate(s):
                h[c, start : start + BLOCK] = full.quad(q1, g, v)
        if w is not None:
            h *= w[None, :]  # w_i x_i'(X'WX + S)^-1 x_i
        with np.errstate(divide="ignore", invalid="ignore"):
            loo = y[None, :] - (y[None, :] - fitted) / (1 - h)
        loo = np.where(h < 1 - 1e-10, loo, np.nan)
        return PathResult(loo[:, None, :], df)

    @staticmethod
    def _window(X, y, folds, basis, full: Smoother, s: np.ndarray, w=None) -> np.ndarray:
        """Leave-a-window-out predictions from the hat matrix of the fit to all rows, with the
        per-feature weights that REML chose on all rows held fixed (as for leave-one-out):
        H_ab = q1_a . q1_b + sum_j g_aj g_bj / (sig2_j + s), from :meth:`Smoother.pieces`
        (with row weights, on the rows times sqrt(w), where H is symmetric)."""
        n = X.shape[0]
        sw = np.ones(n) if w is None else np.sqrt(w)
        fitted = evaluate(basis, X, full.red.kept, full.coefs(s)).T
        q1 = np.empty((n, full.red.kept.size))
        g = np.empty((n, full.sig2.size))
        for start in range(0, n, BLOCK):
            q1[start : start + BLOCK], g[start : start + BLOCK] = full.pieces(
                *basis.design(X[start : start + BLOCK])
            )
        oof = np.empty((s.size, 1, n))
        for c, v in enumerate(s):
            G = g / np.sqrt(full.sig2 + v)[None, :]
            P = np.concatenate([q1, G], axis=1) * sw[:, None]
            oof[c, 0] = (
                windows.window_oof(
                    y * sw,
                    fitted[c] * sw,
                    folds,
                    lambda rows, P=P: np.einsum("bik,bjk->bij", P[rows], P[rows]),
                )
                / sw
            )
        return oof

    def fit(self, X, y, settings, value, work=None):
        basis = self._basis(X, settings, work)
        smoother = self._full(X, y, None, basis, work)
        names = tuple((work or {}).get("features") or (f"x{j}" for j in range(X.shape[1])))
        return FittedAdditive(basis, smoother, float(value), X, y, names, row_weights(work))


def _numeric(X: np.ndarray, cats) -> int:
    """The number of numeric features (columns of X that are not categorical)."""
    return X.shape[1] if cats is None else len(cats.numeric)
