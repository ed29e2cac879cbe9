"""Tuned smoothing against an oracle that knows the true curve.

Worked example: y = sin(2 pi x) + N(0, 0.3^2) on 200 points in [0, 1] (the standard smoothing
test function of, e.g., Green & Silverman 1994, ch. 3). The oracle picks the smoothing value on
a fine grid that minimises the error against the truth; cross-validation does not see the
truth. Common practice (a rule of thumb, not a theorem): CV-tuned smoothing comes within a
modest factor of the oracle's error, though a single noisy CV curve can be flat over a wide
range. Over five data sets we require the mean ratio of root mean squared errors to the truth
to be at most 1.5 and every ratio at most 2.
"""

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.methods.spline import Spline
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec


def _ratio(scheme, seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 1, 200)
    y = np.sin(2 * np.pi * x) + rng.normal(0, 0.3, 200)
    xs = np.linspace(0.01, 0.99, 400)
    table = Table("train", ("x", "y"), np.column_stack([x, y]))
    query = Table("query", ("x",), xs[:, None])
    result = run(
        Job("spline", table, "y", query=query, tuning=TuningSpec(scheme=scheme, rule="min"))
    )
    tuned = np.sqrt(np.mean((result.predictions.value - np.sin(2 * np.pi * xs)) ** 2))
    oracle = min(
        np.sqrt(
            np.mean(
                (Spline().fit(x[:, None], y, {}, lam).predict(xs[:, None]) - np.sin(2 * np.pi * xs))
                ** 2
            )
        )
        for lam in np.geomspace(1e-8, 1e-1, 120)
    )
    return tuned / oracle


@pytest.mark.parametrize("scheme", ["kfold", "loo", "gcv"])
def test_tuned_spline_is_close_to_the_oracle(scheme):
    ratios = np.array([_ratio(scheme, seed) for seed in range(1, 6)])
    assert ratios.mean() <= 1.5
    assert ratios.max() <= 2.0
