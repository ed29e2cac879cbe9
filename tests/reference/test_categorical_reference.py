"""Categorical features against outside references.

- linear: statsmodels' formula OLS with ``C(...)`` (treatment coding, the same reference
  level): coefficients, standard errors, predictions, their standard errors and the
  prediction interval for a new observation;
- linear with a ridge penalty: scikit-learn's ``OneHotEncoder(drop="first")`` then
  ``StandardScaler`` then ``Ridge``, the documented meaning of ``alpha`` on dummies;
- additive: statsmodels' ``GLMGam`` with the dummies as parametric exog columns, at the same
  knots and penalty (set up as in test_additive_reference.py);
- knn: the mixed distance (squared scaled numeric differences + gamma^2 per differing level)
  computed directly with numpy, and the neighbors averaged by scikit-learn's
  ``KNeighborsRegressor(metric="precomputed")``.

Data: invented here, with known level effects.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from numpy.testing import assert_allclose
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import Ridge
from sklearn.neighbors import KNeighborsRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from statsmodels.gam.api import BSplines, GLMGam

from nearwise.core import pipeline
from nearwise.core.data import Table
from nearwise.core.methods.additive import Additive
from nearwise.core.spec import IntervalSpec, Job

SITES = np.array(["east", "north", "south"])
SHIFTS = np.array(["day", "night"])


def _frame(n=90, seed=4):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    x2 = rng.uniform(-1, 1, n)
    site = SITES[rng.integers(0, 3, n)]
    shift = SHIFTS[rng.integers(0, 2, n)]
    effect = {"east": 0.0, "north": 1.5, "south": -2.0}
    y = (
        1.0
        + 0.4 * x
        - 0.8 * x2
        + np.array([effect[s] for s in site])
        + 0.7 * (shift == "night")
        + rng.normal(0, 0.5, n)
    )
    return pd.DataFrame({"x": x, "x2": x2, "site": site, "shift": shift, "y": y})


def _table(df: pd.DataFrame, name: str = "train") -> Table:
    """A core table as the web layer builds it: numbers in ``values``, text in ``labels``."""
    cols = tuple(df.columns)
    values = np.full((len(df), len(cols)), np.nan)
    labels = {}
    for j, c in enumerate(cols):
        if not pd.api.types.is_numeric_dtype(df[c]):
            labels[j] = df[c].to_numpy(dtype=object)
        else:
            values[:, j] = df[c].to_numpy(dtype=float)
    return Table(name, cols, values, labels)


QUERY = pd.DataFrame(
    {
        "x": [0.5, 5.0, 9.5, 3.3],
        "x2": [0.1, -0.5, 0.9, 0.0],
        "site": ["south", "east", "north", "north"],
        "shift": ["night", "day", "day", "night"],
    }
)


def _run(df, features, categorical, reference=None, **job):
    return pipeline.run(
        Job(
            method=job.pop("method", "linear"),
            train=_table(df[[*features, "y"]]),
            target="y",
            features=features,
            query=_table(QUERY[features], "query"),
            categorical=categorical,
            categorical_reference=reference or {},
            **job,
        )
    )


@pytest.mark.parametrize(
    ("formula", "features", "categorical", "reference", "degree"),
    [
        ("y ~ x + C(site)", ["x", "site"], ["site"], None, 1),
        (
            "y ~ C(site, Treatment('south')) + C(shift) + x + x2",
            ["x", "site", "shift", "x2"],
            ["site", "shift"],
            {"site": "south"},
            1,
        ),
        ("y ~ C(site) + x + I(x ** 2)", ["x", "site"], ["site"], None, 2),
        ("y ~ C(site) + C(shift)", ["site", "shift"], ["site", "shift"], None, 1),
    ],
)
def test_linear_equals_statsmodels_formula_ols(formula, features, categorical, reference, degree):
    """Reference: statsmodels ``ols(formula)`` with ``C()`` (treatment coding, its reference
    the first level in sorted order unless ``Treatment(...)`` names one): the same design."""
    df = _frame()
    ours = _run(
        df,
        features,
        categorical,
        reference,
        params={"degree": degree},
        interval=IntervalSpec(level=0.9, kind="model"),
    )
    ref = smf.ols(formula, df).fit()
    terms = {t["name"]: t for t in ours.model["terms"]}
    assert len(terms) == len(ref.params)
    for name, est in ref.params.items():
        mine = terms[_our_name(name)]
        # Same least squares by QR; the raw-unit expansion of the standardized polynomial
        # costs a few digits: 1e-8 relative, as the brief asks.
        assert_allclose(mine["estimate"], est, rtol=1e-8, atol=1e-10)
        assert_allclose(mine["std_error"], ref.bse[name], rtol=1e-8)
        assert_allclose(mine["p_value"], ref.pvalues[name], rtol=1e-6, atol=1e-12)
    frame = ref.get_prediction(QUERY).summary_frame(alpha=0.1)
    preds = ours.predictions
    assert_allclose(preds.value, frame["mean"], rtol=1e-8)
    assert_allclose(preds.std_error, frame["mean_se"], rtol=1e-8)
    assert_allclose(preds.lower, frame["obs_ci_lower"], rtol=1e-8)
    assert_allclose(preds.upper, frame["obs_ci_upper"], rtol=1e-8)


def _our_name(name: str) -> str:
    """statsmodels' term name -> ours: ``C(site)[T.north]`` -> ``site[north]``."""
    if name == "Intercept":
        return "intercept"
    if name.startswith("C("):
        column = name[2:].split(")")[0].split(",")[0]
        return f"{column}[{name.split('[T.')[1][:-1]}]"
    return {"I(x ** 2)": "x^2"}.get(name, name)


def test_ridge_dummies_are_standardized_as_scikit_learn_does():
    """Reference: scikit-learn ``OneHotEncoder(drop="first")`` + ``StandardScaler`` +
    ``Ridge(alpha)``: the dummies are penalized on the unit-variance scale, as documented."""
    df = _frame()
    features = ["x", "site", "shift"]
    ours = _run(df, features, ["site", "shift"], params={"penalty": "ridge", "alpha": 7.0})
    coder = ColumnTransformer(
        [
            ("levels", OneHotEncoder(drop="first"), ["site", "shift"]),
            ("numbers", "passthrough", ["x"]),
        ],
        sparse_threshold=0,
    )
    ref = make_pipeline(coder, StandardScaler(), Ridge(alpha=7.0)).fit(df[features], df["y"])
    # The same ridge problem solved by SVD on both sides: rounding.
    assert_allclose(ours.predictions.value, ref.predict(QUERY[features]), rtol=1e-9)
    slopes = {t["name"]: t["estimate"] for t in ours.model["terms"]}
    sd = ref[1].scale_
    raw = ref[2].coef_ / sd  # back to 0/1 dummies and x in its units
    assert_allclose(
        [slopes["site[north]"], slopes["site[south]"], slopes["shift[night]"], slopes["x"]],
        raw,
        rtol=1e-9,
    )


@pytest.mark.parametrize("smoothing", [1.0, 6.0])  # REML's own choice, and a smoother fit
def test_additive_level_effects_equal_glmgam(smoothing):
    """Reference: statsmodels ``GLMGam`` with exog = [1, the dummies] and the smooth terms
    at our knots and our lambdas (alpha = lambda / 2; see test_additive_reference.py)."""
    rng = np.random.default_rng(7)
    n = 400
    X = rng.uniform(0, 1, (n, 2)) * np.array([1.0, 2.0])
    site = rng.integers(0, 3, n)
    y = (
        1.5
        + np.sin(2 * np.pi * X[:, 0])
        + (X[:, 1] - 1) ** 2
        + np.array([0.0, 0.8, -0.5])[site]
        + rng.normal(0, 0.2, n)
    )
    df = pd.DataFrame({"x0": X[:, 0], "site": SITES[site], "x1": X[:, 1], "y": y})
    work = {}
    job = Job(
        method="additive",
        train=_table(df),
        target="y",
        categorical=["site"],
        params={"smoothing": 1.0},
    )
    ctx = pipeline.setup(job)
    work = {"features": ctx.data.features, "categories": ctx.data.categories}
    model = Additive().fit(ctx.X, ctx.y, {}, smoothing, work)
    feats = model.basis.features
    inner = [f.lo + f.span * f.knots[1:-1] for f in feats]
    Xn = ctx.X[:, [0, 2]]
    bs = BSplines(
        Xn,
        df=[f.knots.size + 2 for f in feats],
        degree=[3, 3],
        constraints="center",
        knot_kwds=[{"knots": k} for k in inner],
    )
    codes = ctx.X[:, 1]
    exog = np.column_stack([np.ones(n), codes == 1, codes == 2]).astype(float)
    res = GLMGam(ctx.y, exog=exog, smoother=bs, alpha=[lam / 2 for lam in model.lambdas()]).fit()
    terms = model.summary(ctx.data.features)["terms"]
    assert [t["name"] for t in terms] == ["site[north]", "site[south]"]
    est = np.array([t["estimate"] for t in terms])
    se = np.array([t["std_error"] for t in terms])
    # The bases differ only in their ends (natural splines against B-splines with two more
    # functions per feature; see test_additive_reference.py), which moves the fitted values by
    # at most 5e-3 there. Measured here: level effects at most 2.4e-5 apart, standard errors
    # at most 1e-4 relative. Allowed: the additive reference's fitted-value tolerance for the
    # effects; for the errors 1e-3, ten times the measured gap (that test's 2% would not
    # notice a standard error taken at the wrong smoothing, 1.1% off at smoothing 6).
    assert np.abs(est - res.params[1:3]).max() < 5e-3
    assert np.abs(se / res.bse[1:3] - 1).max() < 1e-3
    assert np.abs(model.fitted - res.fittedvalues).max() < 5e-3
    # The level effects are near the truth (0.8, -0.5): within 4 standard errors.
    assert np.all(np.abs(est - [0.8, -0.5]) < 4 * se)


def _mixed_distances(Zn, cat, Zqn, catq, gamma):
    """sqrt(sum of squared numeric differences + gamma^2 x the number of differing levels),
    computed directly (Gower 1971, squared Euclidean form)."""
    d2 = ((Zqn[:, None, :] - Zn[None, :, :]) ** 2).sum(axis=2)
    d2 = d2 + gamma**2 * (catq[:, None, :] != cat[None, :, :]).sum(axis=2)
    return np.sqrt(d2)


@pytest.mark.parametrize(
    ("gamma", "weights"), [(None, "uniform"), (0.4, "distance"), (3.0, "uniform")]
)
def test_knn_mixed_distance_equals_precomputed_neighbors(gamma, weights):
    """Reference: the distance rule computed directly with numpy, and scikit-learn's
    ``KNeighborsRegressor(metric="precomputed")`` averaging the k nearest."""
    df = _frame(n=120, seed=9)
    features = ["x", "site", "x2", "shift"]
    params = {"k": 6, "weights": weights}
    if gamma is not None:
        params["mismatch"] = gamma
    ours = _run(df, features, ["site", "shift"], method="knn", params=params)
    num = df[["x", "x2"]].to_numpy()
    mean, sd = num.mean(axis=0), num.std(axis=0)  # `standard` scaling (ddof 0)
    Zn, Zqn = (num - mean) / sd, (QUERY[["x", "x2"]].to_numpy() - mean) / sd
    cat = df[["site", "shift"]].to_numpy()
    catq = QUERY[["site", "shift"]].to_numpy()
    g = 1.0 if gamma is None else gamma
    D = _mixed_distances(Zn, cat, Zqn, catq, g)
    train_D = _mixed_distances(Zn, cat, Zn, cat, g)
    ref = KNeighborsRegressor(n_neighbors=6, metric="precomputed", weights=weights)
    ref.fit(train_D, df["y"])
    # Continuous features: no ties at the 6th distance. Rounding only.
    assert_allclose(ours.predictions.value, ref.predict(D), rtol=1e-12)
    assert ours.params["mismatch"] == g
