"""CV+ ends for many query rows: the bracket-and-select route equals the definition.

With more candidates than intervals.CHUNK_CELLS, `_kth_of_folds` brackets each query's
answer between the folds' shifted k-th pooled residuals, bisects until at most SELECT_AT
candidates remain and sorts those. Checked against the definition (every candidate formed
and partitioned, Barber et al. 2021, section 3), with ties, undefined residuals and spreads
that are not finite (those rows take the full bisection).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from nearwise.core import intervals


def _definition(mu, parts, spread, k, upper) -> np.ndarray:
    sign = 1.0 if upper else -1.0
    with np.errstate(invalid="ignore", over="ignore"):
        values = np.concatenate(
            [mu[f][None, :] + sign * spread * s[:, None] for f, s in enumerate(parts)]
        )
    return np.sort(values, axis=0)[k - 1]


def _case():
    rng = np.random.default_rng(4)
    folds, n, m = 4, 400, 300
    base = rng.normal(size=m)
    mu = base + rng.normal(0, 0.2, (folds, m))
    mu[:, :5] = base[:5]  # fold predictions that agree: a bracket of width 0
    resid = np.round(np.abs(rng.normal(size=n)), 2)  # ties among residuals
    resid[:3] = np.inf  # undefined residuals count as infinitely large
    parts = [np.sort(resid[f::folds]) for f in range(folds)]
    return mu, parts, rng.uniform(0.5, 2.0, m)


KS = {True: (4, 40, 200, 397), False: (4, 40, 200, 397)}


@pytest.mark.parametrize("upper", [True, False])
@pytest.mark.parametrize("select_at", [1, 32, 10_000])
def test_bracket_and_select_equals_the_definition(monkeypatch, upper, select_at) -> None:
    mu, parts, spread = _case()
    spread[10:13] = np.inf  # no local spread: an unbounded end
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 0)  # never form every candidate
    monkeypatch.setattr(intervals, "SELECT_AT", select_at)
    fine = np.isfinite(spread)
    for k in KS[upper]:
        got = intervals._kth_of_folds(mu, parts, spread, k, upper)
        want = _definition(mu[:, fine], parts, spread[fine], k, upper)
        # a candidate formed as in the definition; where tied candidates stop the bisection,
        # the value reached (the terms are near 1: rounding is about 1e-16)
        assert_allclose(got[fine], want, rtol=0, atol=1e-15)
        assert np.all(got[~fine] == (np.inf if upper else -np.inf))


@pytest.mark.parametrize("upper", [True, False])
def test_the_full_bisection_equals_the_definition(monkeypatch, upper) -> None:
    mu, parts, spread = _case()
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 0)
    # as when rounding breaks every bracket: all rows take the bisection to full precision
    monkeypatch.setattr(
        intervals,
        "_narrow_and_select",
        lambda mu, *a: (np.zeros(mu.shape[1]), np.zeros(mu.shape[1], dtype=bool)),
    )
    for k in KS[upper]:
        got = intervals._kth_of_folds(mu, parts, spread, k, upper)
        # the smallest float with k candidates at or below it: the same to rounding
        assert_allclose(got, _definition(mu, parts, spread, k, upper), rtol=1e-13, atol=1e-13)


@pytest.mark.parametrize(("upper", "k"), [(True, 18_000), (False, 2_000)])
@pytest.mark.parametrize("differ", [0.05, 0.0])  # 0: the folds agree, the bracket is exact
def test_the_bracket_needs_few_counting_passes(monkeypatch, upper, k, differ) -> None:
    rng = np.random.default_rng(5)
    n = m = 20_000
    mu = rng.normal(size=m) + rng.normal(0, differ, (5, m))
    resid = np.abs(rng.normal(size=n))
    parts = [np.sort(resid[f::5]) for f in range(5)]
    calls = []
    count = intervals._count
    monkeypatch.setattr(intervals, "_count", lambda *a: calls.append(1) or count(*a))
    got = intervals._kth_of_folds(mu, parts, np.ones(m), k, upper)
    # 2 passes for the bracket's ends and 6 steps when the folds' predictions differ by about
    # 0.05 (none when they agree), where a bisection to full precision takes about 60
    assert len(calls) <= 12, len(calls)
    want = _definition(mu[:, :50], parts, np.ones(50), k, upper)
    assert_allclose(got[:50], want, rtol=0, atol=1e-15)
