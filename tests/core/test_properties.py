"""Property tests of the core with hypothesis: small generated tables, every method.

Each property runs a bounded, derandomized search (the same examples on every run), so CI is
deterministic and fast. A ``NearwiseError`` is an acceptable answer to odd generated data (too
few distinct values, a degree a fold cannot fit, ...); any other exception, and any numpy
warning (the suite runs with warnings as errors), is a bug.

A property checked only on refused examples proves nothing, so each property also asserts a
floor on the share of requests answered (:func:`answering`). The floors sit under the shares
observed with these derandomized examples, stated beside each test; the examples drawn vary a
little between a run of one file and a run of the whole suite, hence the ranges.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable

import numpy as np
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from numpy.testing import assert_allclose

from nearwise.core.data import Table
from nearwise.core.errors import NearwiseError
from nearwise.core.pipeline import run
from nearwise.core.spec import IntervalSpec, Job, TuningSpec

FAST = settings(
    max_examples=30,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)

METHODS = ("knn", "linear", "spline", "additive")
BOUND = 1e3
# Tiny magnitudes included: a constant column of 5.12007491e-110 once got a rounding-noise
# spread from Scaler.fit and overflowed a polynomial query (fixed; see test_hard_inputs.py).
finite = st.floats(-BOUND, BOUND, allow_nan=False, allow_infinity=False)
# Small integers as floats: affine maps with a power-of-two factor and an integer shift are
# then exact, so the data a transformed job sees is exactly the transformed data.
whole = st.integers(-50, 50).map(float)


@st.composite
def tables(draw, max_features=3, x=finite, min_rows=12, max_rows=60):
    """(X, y, Xq): 12-60 training rows, 1-3 features, 1-5 query rows."""
    n = draw(st.integers(min_rows, max_rows))
    p = draw(st.integers(1, max_features))
    X = draw(arrays(np.float64, (n, p), elements=x))
    y = draw(arrays(np.float64, n, elements=finite))
    Xq = draw(arrays(np.float64, (draw(st.integers(1, 5)), p), elements=x))
    return X, y, Xq


def job(method, X, y, Xq=None, **kw) -> Job:
    cols = (*[f"x{j}" for j in range(X.shape[1])], "y")
    query = None if Xq is None else Table("query", cols[:-1], Xq)
    return Job(method, Table("train", cols, np.column_stack([X, y])), "y", query=query, **kw)


#: Requests answered and refused by the property being run (see ``answering``).
TALLY: Counter = Counter()


def attempt(j: Job):
    """The result, or the NearwiseError class for a request the core refuses."""
    try:
        result = run(j)
    except NearwiseError as e:
        event(f"refused: {type(e).__name__}")  # shown by pytest --hypothesis-show-statistics
        TALLY["refused"] += 1
        return type(e)
    event("answered")
    TALLY["answered"] += 1
    return result


def answering(floor: float) -> Callable[[Callable[[], None]], Callable[[], None]]:
    """Run a hypothesis property and fail unless at least ``floor`` of its requests were
    answered (not refused with a NearwiseError)."""

    def wrap(prop: Callable[[], None]) -> Callable[[], None]:
        def test() -> None:
            TALLY.clear()
            prop()
            total = TALLY["answered"] + TALLY["refused"]
            share = TALLY["answered"] / max(total, 1)
            assert share >= floor, f"{TALLY['answered']} of {total} answered, under {floor:.0%}"

        test.__name__, test.__doc__ = prop.__name__, prop.__doc__
        return test

    return wrap


def same_outcome(a, b) -> bool:
    """Both refused with the same error class (True), or both answered (False); else fail."""
    if isinstance(a, type) or isinstance(b, type):
        assert a is b, (a, b)
        return True
    return False


def scale_of(y) -> float:
    return float(np.max(np.abs(y))) + 1.0


# -- row order ------------------------------------------------------------------------------


@answering(0.65)  # observed: 48 to 54 of 60 requests answered (80 to 90 %)
@FAST
@given(data=tables(), method=st.sampled_from(METHODS), seed=st.integers(0, 10**6))
def test_row_order_does_not_matter(data, method, seed):
    X, y, Xq = data
    perm = np.random.default_rng(seed).permutation(y.size)
    a = attempt(job(method, X, y, Xq))
    b = attempt(job(method, X[perm], y[perm], Xq))
    if same_outcome(a, b):
        return
    assert a.params == b.params
    # Rows are sorted by content before anything else, so both runs do the same arithmetic:
    # equal to a few ulps of the data scale (1e-9 relative leaves room for summation order).
    tol = 1e-9 * scale_of(y)
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-9, atol=tol)
    assert_allclose(a.predictions.lower, b.predictions.lower, rtol=1e-9, atol=tol)
    assert_allclose(a.predictions.upper, b.predictions.upper, rtol=1e-9, atol=tol)


# -- scaling promises -----------------------------------------------------------------------


@answering(0.90)  # observed: 60 of 60 (100 %)
@FAST
@given(
    data=tables(x=whole),
    kind=st.sampled_from(["standard", "range"]),
    weights=st.sampled_from(["uniform", "distance"]),
    j=st.integers(0, 2),
    power=st.integers(-4, 6),
    shift=st.integers(-1000, 1000),
)
def test_knn_scaled_features_ignore_units(data, kind, weights, j, power, shift):
    X, y, Xq = data
    j = j % X.shape[1]
    c = 2.0**power
    X2, Xq2 = X.copy(), Xq.copy()
    X2[:, j] = c * X[:, j] + shift
    Xq2[:, j] = c * Xq[:, j] + shift
    params = {"scale": kind, "weights": weights}
    a = attempt(job("knn", X, y, Xq, params=params))
    b = attempt(job("knn", X2, y, Xq2, params=params))
    if same_outcome(a, b):
        return
    assert a.params == b.params
    # Scaled features agree to a few ulps; the averages of the same neighbors then agree to
    # about 1e-12 of the target scale.
    tol = 1e-9 * scale_of(y)
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-9, atol=tol)


@answering(0.85)  # observed: 54 of 60 (90 %)
@FAST
@given(data=tables(max_features=1, x=whole), shift=st.integers(-1000, 1000))
def test_one_feature_spline_ignores_a_shift_of_x(data, shift):
    X, y, Xq = data
    a = attempt(job("spline", X, y, Xq))
    b = attempt(job("spline", X + shift, y, Xq + shift))
    if same_outcome(a, b):
        return
    assert a.params.keys() == b.params.keys()
    # The spline works on differences of x, which are exact here; its solves are well
    # conditioned at the chosen smoothing, so the fits agree to about 1e-8 of the target scale.
    tol = 1e-7 * scale_of(y)
    assert_allclose(a.params["smoothing"], b.params["smoothing"], rtol=1e-6)
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-7, atol=tol)


@answering(0.70)  # observed: 46 of 60 (77 %)
@FAST
@given(
    data=tables(x=whole),
    j=st.integers(0, 2),
    power=st.integers(-4, 6),
    sign=st.sampled_from([-1.0, 1.0]),
    shift=st.integers(-1000, 1000),
    degree=st.integers(1, 3),
)
def test_linear_is_affine_invariant(data, j, power, sign, shift, degree):
    X, y, Xq = data
    j = j % X.shape[1]
    c = sign * 2.0**power
    X2, Xq2 = X.copy(), Xq.copy()
    X2[:, j] = c * X[:, j] + shift
    Xq2[:, j] = c * Xq[:, j] + shift
    # Folds are dealt to the rows sorted by content, so a reflection (c < 0) deals other folds
    # and may tune another degree; the fit at a given degree must still agree. An increasing
    # map keeps the order, the folds and so the tuned degree too.
    params = {} if sign > 0 else {"degree": degree}
    a = attempt(job("linear", X, y, Xq, params=params))
    b = attempt(job("linear", X2, y, Xq2, params=params))
    if same_outcome(a, b):
        return
    assert a.params == b.params
    # The polynomial space of a total degree is closed under an affine change of one feature;
    # least squares on standardized columns of a degree <= 3 basis on |x| <= 50 loses a few
    # digits to conditioning.
    tol = 1e-7 * scale_of(y)
    assert_allclose(a.predictions.value, b.predictions.value, rtol=1e-7, atol=tol)


# -- lower <= value <= upper ----------------------------------------------------------------

OPTIONS = [
    ("knn", {}, "cv_plus", "kfold"),
    ("knn", {"weights": "distance"}, "cv_plus", "loo"),
    ("linear", {}, "cv_plus", "kfold"),
    ("linear", {}, "model", "gcv"),
    ("linear", {}, "cv_plus", "loo"),
    ("linear", {"penalty": "ridge"}, "cv_plus", "gcv"),
    ("linear", {"penalty": "lasso"}, "cv_plus", "kfold"),
    ("spline", {}, "cv_plus", "kfold"),
    ("spline", {}, "model", "gcv"),
    ("spline", {}, "cv_plus", "loo"),
    ("additive", {}, "cv_plus", "kfold"),
    ("additive", {}, "model", "gcv"),
    ("additive", {}, "cv_plus", "loo"),
]


@answering(0.70)  # observed: 30 of 38 (79 %)
@FAST
@given(
    data=tables(),
    option=st.sampled_from(OPTIONS),
    level=st.floats(0.5, 0.99),
    adaptive=st.booleans(),
    at_query=st.booleans(),
)
def test_bounds_enclose_the_prediction(data, option, level, adaptive, at_query):
    X, y, Xq = data
    method, params, kind, scheme = option
    spec = IntervalSpec(level=level, kind=kind, adaptive=adaptive and kind == "cv_plus")
    r = attempt(
        job(
            method,
            X,
            y,
            Xq if at_query else None,
            params=params,
            interval=spec,
            tuning=TuningSpec(scheme=scheme),
        )
    )
    assume(not isinstance(r, type))
    p = r.predictions
    assert np.isfinite(p.value).all()
    assert not np.isnan(p.lower).any() and not np.isnan(p.upper).any()
    lo = np.isfinite(p.lower)
    hi = np.isfinite(p.upper)
    assert (p.lower[lo] <= p.value[lo]).all()
    assert (p.value[hi] <= p.upper[hi]).all()
    assert (p.lower[~lo] == -np.inf).all() and (p.upper[~hi] == np.inf).all()


# -- tuning stays on the grid ---------------------------------------------------------------


def some(values):
    return st.lists(values, min_size=1, max_size=6, unique=True)


@st.composite
def grids(draw):
    """(method, params, grid): a user grid for the method's tuned parameter."""
    method = draw(st.sampled_from(["knn", "linear", "linear-ridge", "spline", "additive"]))
    if method == "knn":  # with 12+ rows and 5 folds every k <= 8 is allowed
        return "knn", {}, {"k": draw(some(st.integers(1, 8)))}
    if method == "linear":
        return "linear", {}, {"degree": draw(some(st.integers(1, 3)))}
    values = draw(some(st.floats(1e-4, 1e4, allow_nan=False)))
    if method == "linear-ridge":
        return "linear", {"penalty": "ridge"}, {"alpha": values}
    return method, {}, {"smoothing": values}


# observed: 30 answered of 31 to 38 run alone (79 to 97 %), 30 of 52 (58 %) in a whole-suite
# run; the refused examples are replaced (assume), so the share measures the refusals only
@answering(0.5)
@FAST
@given(data=tables(), choice=grids(), rule=st.sampled_from(["one_se", "min"]))
def test_tuning_chooses_from_the_grid(data, choice, rule):
    X, y, _ = data
    method, params, grid = choice
    r = attempt(job(method, X, y, params=params, grid=grid, tuning=TuningSpec(rule=rule)))
    assume(not isinstance(r, type))
    ((name, values),) = grid.items()
    assert r.params[name] in values
    assert r.tuning.best[name] in values
    path = [e.params[name] for e in r.tuning.path]
    assert sorted(path) == sorted(values)
    assert r.tuning.best[name] in path
    assert r.params[name] in path


# -- determinism ----------------------------------------------------------------------------


@answering(0.65)  # observed: 48 to 58 of 60 (80 to 97 %)
@FAST
@given(
    data=tables(),
    method=st.sampled_from(METHODS),
    seed=st.integers(0, 2**31 - 1),
    repeats=st.integers(1, 2),
)
def test_same_seed_same_answer(data, method, seed, repeats):
    X, y, Xq = data
    j = job(method, X, y, Xq, tuning=TuningSpec(seed=seed, repeats=repeats))
    a, b = attempt(j), attempt(j)
    if same_outcome(a, b):
        return
    assert a.params == b.params
    for field in ("value", "lower", "upper", "std_error"):
        u, v = getattr(a.predictions, field), getattr(b.predictions, field)
        assert np.array_equal(u, v, equal_nan=True), field
    errors = [(e.error, e.error_se) for e in a.tuning.path]
    assert errors == [(e.error, e.error_se) for e in b.tuning.path]
