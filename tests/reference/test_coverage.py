"""Coverage of the default 90 % intervals on fresh points, by simulation with fixed seeds.

Source of the expectation: the finite-sample guarantees of CV+ / jackknife+ (Barber, Candes,
Ramdas & Tibshirani 2021) and of locally weighted conformal intervals (Lei et al. 2018): for
exchangeable data, marginal coverage is at least 1 - 2 alpha and in practice close to
1 - alpha. The issue asks for coverage between 0.87 and 0.93 for every method, in one and two
dimensions, with constant noise and with noise that varies with x (adaptive intervals on).
Each case pools 15 training sets of 200 rows with 200 fresh points each (6,000 checks, so the
sampling error of the estimate is about 0.004 plus the spread between training sets).
"""

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.pipeline import run
from nearwise.core.spec import IntervalSpec, Job, TuningSpec


def _draw(rng, n, p, varying):
    X = rng.uniform(0, 3, size=(n, p))
    f = np.sin(2 * X[:, 0]) + (0.5 * X[:, 1] if p > 1 else 0.0)
    sd = 0.05 + 0.3 * X[:, 0] / 3 if varying else 0.3
    return X, f + rng.normal(0, 1, n) * sd


def coverage(method, p, varying, scheme="kfold", reps=15, n=200, m=200):
    seeds = {"knn": 1, "linear": 2, "spline": 3, "kfold": 4, "loo": 5}
    rng = np.random.default_rng([p, int(varying), seeds[method], seeds[scheme]])
    hits = []
    cols = (*[f"x{j}" for j in range(p)], "y")
    for _ in range(reps):
        X, y = _draw(rng, n, p, varying)
        Xq, yq = _draw(rng, m, p, varying)
        job = Job(
            method,
            Table("train", cols, np.column_stack([X, y])),
            "y",
            query=Table("query", cols[:-1], Xq),
            tuning=TuningSpec(scheme=scheme),
            interval=IntervalSpec(level=0.9, adaptive=varying),
        )
        pred = run(job).predictions
        hits.append((pred.lower <= yq) & (yq <= pred.upper))
    return float(np.mean(hits))


@pytest.mark.parametrize("varying", [False, True])
@pytest.mark.parametrize("p", [1, 2])
@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_cv_plus_covers_about_90_percent(method, p, varying):
    assert 0.87 <= coverage(method, p, varying) <= 0.93


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_jackknife_plus_covers_about_90_percent(method):
    assert 0.87 <= coverage(method, 1, False, scheme="loo", reps=10) <= 0.93


def test_adaptive_intervals_follow_the_noise():
    """With noise sd rising from 0.05 to 0.35 across x, adaptive intervals widen with it
    (the purpose of locally weighted conformal intervals, Lei et al. 2018, section 5.2)."""
    rng = np.random.default_rng(11)
    X, y = _draw(rng, 400, 1, varying=True)
    xq = np.array([[0.3], [2.7]])
    widths = {}
    for adaptive in (False, True):
        job = Job(
            "spline",
            Table("train", ("x0", "y"), np.column_stack([X, y])),
            "y",
            query=Table("query", ("x0",), xq),
            interval=IntervalSpec(adaptive=adaptive),
        )
        pred = run(job).predictions
        widths[adaptive] = pred.upper - pred.lower
    assert widths[True][1] > 3 * widths[True][0]  # true sd ratio there: 0.32 / 0.08 = 4
    assert widths[False][1] == pytest.approx(widths[False][0], rel=0.2)
