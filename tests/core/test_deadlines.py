"""The time budget is checked inside every loop that can run long.

Each test runs one stage under a Deadline whose fake clock advances one second per reading,
so that it expires after a known number of checks (:func:`after`). A stage that checks in its
loop raises OverBudget; one whose loop check is removed runs to its end and the test fails.
The stages are given enough work for several blocks and no more, so the file stays fast.
"""

from __future__ import annotations

import sys
from collections import Counter
from itertools import pairwise
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from nearwise.core import budget, hull, hull_simplex, intervals, locality, pipeline, uncertainty
from nearwise.core.budget import Deadline, blocks, checkpoint
from nearwise.core.data import Table
from nearwise.core.errors import Abandoned, OverBudget
from nearwise.core.methods.knn import KNN
from nearwise.core.methods.posterior import SOLVE_COLUMNS, Posterior, cubic_phi
from nearwise.core.neighbors import Nearest
from nearwise.core.spec import Job, TuningSpec
from nearwise.core.tuning import make_folds

RNG = np.random.default_rng(3)


class Ticks:
    """A fake monotonic clock: each reading is ``step`` seconds after the previous one."""

    def __init__(self, step: float = 1.0) -> None:
        self.now = 0.0
        self.step = step
        self.readings = 0

    def __call__(self) -> float:
        self.now += self.step
        self.readings += 1
        return self.now


def after(checks: int, abandoned=None) -> Deadline:
    """A deadline that lets ``checks`` checks pass and raises at the next one."""
    return Deadline(checks + 0.5, abandoned, clock=Ticks())


def raises_within(checks: int, run) -> None:
    """``run()`` raises OverBudget under a deadline that allows ``checks`` checks, and runs to
    its end when it allows 10,000 (so the raise comes from its own checks, not an error)."""
    with after(10_000).scope():
        run()
    with pytest.raises(OverBudget), after(checks).scope():
        run()


# --------------------------------------------------------------------------- the Deadline


def test_a_deadline_expires_after_its_seconds_and_not_before() -> None:
    d = after(3)
    for _ in range(3):
        d.check()
    with pytest.raises(OverBudget, match=r"time budget of 3\.5 s"):
        d.check()
    Deadline(None, clock=Ticks()).check()  # no budget: never expires


def test_checkpoint_checks_the_deadline_in_force_and_nothing_outside() -> None:
    checkpoint()  # none in force
    d = after(0)
    with pytest.raises(OverBudget), d.scope():
        checkpoint()
    checkpoint()  # the scope ended
    assert budget.in_force() is None


def test_an_abandoned_request_stops_with_its_own_error_polled_every_fifth_second() -> None:
    calls = []

    def gone() -> bool:
        calls.append(1)
        return len(calls) >= 2

    d = Deadline(None, gone, clock=Ticks(budget.ABANDON_POLL_S / 4))  # 4 checks per poll
    for _ in range(3):
        d.check()  # up to 0.2 s after the start: not polled yet
    assert calls == []
    for _ in range(4):
        d.check()  # at 0.2 s: polled once (still there)
    assert calls == [1]
    with pytest.raises(Abandoned) as info:
        for _ in range(4):
            d.check()  # at 0.4 s: polled again, gone
    assert len(calls) == 2
    assert info.value.code == "client_closed_request"
    assert isinstance(info.value, OverBudget)  # every overrun handler stops it too
    with pytest.raises(Abandoned):
        d.check()  # stays gone without asking again
    assert len(calls) == 2


def test_blocks_cover_the_rows_once_bounded_and_check_before_each() -> None:
    seen = []
    with after(10_000).scope():
        for at in blocks(1000, most=300, first=50):
            seen.append((at.start, at.stop))
    assert seen[0] == (0, 50) and seen[-1][1] == 1000
    assert all(b == c for (_, b), (c, _) in pairwise(seen))
    assert max(b - a for a, b in seen) == 300  # grows fast work by 4x, never above most
    with pytest.raises(OverBudget), after(2).scope():
        for _ in blocks(1000, most=300, first=50):
            pass


# --------------------------------------------------------------------------- intervals


def test_cv_plus_bisection_checks_every_step(monkeypatch) -> None:
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 10)  # force the bisection
    mu = RNG.normal(size=(3, 40))
    fold = np.arange(60) % 3
    resid = np.abs(RNG.normal(size=60))
    raises_within(10, lambda: intervals.cv_plus(mu, fold, resid, 0.9))


def test_jackknife_plus_checks_between_blocks(monkeypatch) -> None:
    monkeypatch.setattr(intervals, "CHUNK_CELLS", 50)  # one query row per block
    resid = np.abs(RNG.normal(size=50))
    loo = lambda rows: np.zeros((rows.size, 50))  # noqa: E731
    raises_within(5, lambda: intervals.jackknife_plus(loo, 20, resid, 0.9))


def test_local_spread_checks_between_blocks_of_rows() -> None:
    X = RNG.uniform(size=(3000, 2))
    resid = np.abs(RNG.normal(size=3000))
    raises_within(2, lambda: intervals.local_spread(X, resid, X[:10]))


def test_fold_predictions_check_per_fold_and_block() -> None:
    class Fold:
        def predict(self, Xq, c):
            return Xq[:, 0]

    Xq = RNG.uniform(size=(100, 1))
    raises_within(4, lambda: uncertainty.fold_predictions([Fold()] * 5, Xq, 0, 100))


# --------------------------------------------------------------------------- kNN


def _knn(n: int = 3000):
    X = RNG.uniform(size=(n, 2))
    y = X.sum(1) + RNG.normal(0, 0.1, n)
    return X, y


def test_knn_final_fit_checks_between_row_blocks(monkeypatch) -> None:
    from nearwise.core.methods import knn

    monkeypatch.setattr(knn, "FIT_BLOCK_CELLS", 100)  # 10 rows per block at k = 9
    X, y = _knn(200)
    settings = {"weights": "uniform", "scale": "standard"}
    raises_within(5, lambda: KNN().fit(X, y, settings, 9))


def test_knn_predictions_and_neighborhood_notices_check_between_blocks() -> None:
    X, y = _knn()
    with after(10_000).scope():
        model = KNN().fit(X, y, {"weights": "uniform", "scale": "standard"}, 5)
    Xq = RNG.uniform(size=(2000, 2))
    raises_within(2, lambda: model.predict(Xq))
    raises_within(2, lambda: model.query_notices(Xq))


def test_knn_kfold_path_checks_inside_a_fold() -> None:
    X, y = _knn(4000)
    folds = make_folds(4000, TuningSpec(folds=2), None)  # no check of its own between folds
    settings = {"weights": "uniform", "scale": "standard"}
    raises_within(3, lambda: KNN().path(X, y, folds, settings, [3, 2, 1]))


def test_final_predictions_check_between_blocks() -> None:
    class Slow:
        def predict(self, Xq):
            return Xq[:, 0]

    Xq = RNG.uniform(size=(40_000, 1))  # blocks of 1,024, 4,096 and 16,384 rows (n = 1)
    raises_within(3, lambda: pipeline.predict_rows(Slow(), Xq))


# --------------------------------------------------------------------------- spline posterior


def test_posterior_variance_checks_between_blocks_of_points() -> None:
    u = np.linspace(0, 1, 30)
    post = Posterior(cubic_phi(u, u), np.column_stack([np.ones(30), u]), np.full(30, 0.1), 0.1)
    x = np.linspace(0, 1, 3 * SOLVE_COLUMNS)
    Phi0, P0 = cubic_phi(x, u), np.column_stack([np.ones_like(x), x])
    raises_within(2, lambda: post.variance(Phi0, P0, np.zeros(x.size)))


# --------------------------------------------------------------------------- locality and hull


def test_thin_plate_on_knots_checks_between_blocks_of_rows(monkeypatch) -> None:
    from nearwise.core.methods import spline_lowrank
    from nearwise.core.methods import thinplate_lowrank as lr

    Z = RNG.uniform(size=(400, 2))
    y = Z[:, 0] + RNG.normal(0, 0.1, 400)
    basis = lr.Basis(Z[lr.choose_knots(Z, 600)[:300]])  # 300 knots: checks every 256 picks
    raises_within(0, lambda: lr.choose_knots(Z, 300))
    monkeypatch.setattr(lr, "BLOCK_CELLS", 300 * 50)  # 50 rows per block
    raises_within(3, lambda: basis.design(Z))
    raises_within(3, lambda: basis.predict(np.ones((300, 1)), np.ones((3, 1)), Z))
    st = spline_lowrank.Setup(None, Z, basis, basis.design(Z), None, None)
    monkeypatch.setattr(spline_lowrank, "QR_BLOCK_ROWS", 50)
    raises_within(3, lambda: st.r_of(y))


def test_nearest_search_checks_between_blocks() -> None:
    Z = RNG.uniform(size=(2000, 3))
    near = Nearest(Z)
    raises_within(2, lambda: near.distances(RNG.uniform(size=(5000, 3)), 1))
    wide = Nearest(RNG.uniform(size=(500, 14)))  # brute force
    raises_within(2, lambda: wide.distances(RNG.uniform(size=(5000, 14)), 1))


def test_neighborhood_radii_check_between_blocks() -> None:
    Z = RNG.uniform(size=(20_000, 2))  # 100 sampled rows per block of 2,000,000 distances
    raises_within(2, lambda: locality.neighborhood_radii(Z, [1, 5]))


def test_the_facet_test_checks_between_chunks(monkeypatch) -> None:
    monkeypatch.setattr(hull, "FACET_CELLS", 1000)
    Z = _sphere(2000, 3)
    raises_within(5, lambda: hull.hull_test(Z, 0.9 * _sphere(300, 3)))


def test_the_linear_programs_price_in_chunks_and_check_between_them(monkeypatch) -> None:
    monkeypatch.setattr(hull, "FACET_CELLS", 40 * 64)  # at least 64 training rows per chunk
    Z = _sphere(3000, 6)  # every row a vertex: several pricing rounds per query row
    Zq = 0.9 * _sphere(40, 6)  # near the surface: outside the extremes' hull
    raises_within(30, lambda: hull.hull_test(Z, Zq))


def test_the_linear_programs_check_between_blocks_of_query_rows(monkeypatch) -> None:
    monkeypatch.setattr(hull_simplex, "QUERY_BLOCK", 1)
    Z = RNG.uniform(size=(3000, 6))
    Zq = RNG.uniform(0.45, 0.55, size=(40, 6))  # inside the extremes' hull: no pricing
    raises_within(10, lambda: hull.hull_test(Z, Zq))


def test_the_highs_programs_check_between_batches(monkeypatch) -> None:
    monkeypatch.setattr(hull_simplex, "MAX_PIVOTS", 0)  # every row goes to HiGHS
    monkeypatch.setattr(hull, "BATCH", 5)
    Z = RNG.uniform(size=(300, 5))
    Zq = RNG.uniform(0.2, 0.8, size=(30, 5))
    raises_within(3, lambda: hull.hull_test(Z, Zq))


def test_locality_summary_runs_under_its_deadline() -> None:
    X = RNG.uniform(size=(3000, 2))
    names = ("a", "b")
    with pytest.raises(OverBudget):
        locality.summary(X, names, Xq=RNG.uniform(size=(5000, 2)), deadline=after(3))
    doc = locality.summary(X, names, Xq=X[:5], deadline=after(10_000))
    assert doc["n"] == 3000


# --------------------------------------------------------------------------- the whole run


class Recording(Deadline):
    """A deadline without a budget that counts its checks by the module that made them."""

    def __init__(self) -> None:
        super().__init__(None)
        self.where: Counter[str] = Counter()

    def check(self) -> None:
        frame = sys._getframe(1)
        while frame.f_code.co_filename.endswith("budget.py"):  # checkpoint(), blocks()
            frame = frame.f_back
        self.where[Path(frame.f_code.co_filename).name] += 1
        super().check()


def test_a_predict_checks_in_every_stage_with_the_jobs_deadline() -> None:
    X, y = _knn(3000)
    train = Table("train", ("a", "b", "y"), np.column_stack([X, y]))
    query = Table("query", ("a", "b"), RNG.uniform(-0.1, 1.1, (500, 2)))
    seen: Counter[str] = Counter()
    for q in (None, query):  # intervals at every training row; then at query rows
        clock = Recording()
        pipeline.run(Job("knn", train, "y", query=q, deadline=clock))
        seen += clock.where
    stages = {"tuning.py", "knn.py", "pipeline.py", "uncertainty.py", "order_stats.py"}
    stages |= {"neighbors.py", "hull.py"}  # the query's locality flags
    assert stages <= set(seen), seen
    with pytest.raises(OverBudget):
        pipeline.run(Job("knn", train, "y", deadline=after(sum(seen.values()) // 4)))


def _sphere(n: int, p: int) -> np.ndarray:
    Z = RNG.standard_normal((n, p))
    return Z / np.linalg.norm(Z, axis=1)[:, None]


def test_chunked_facet_verdicts_equal_the_whole_computation(monkeypatch) -> None:
    Z = _sphere(400, 3)
    Zq = np.vstack([0.97 * _sphere(300, 3), 1.03 * _sphere(300, 3), RNG.uniform(-1, 1, (300, 3))])
    whole = hull.hull_test(Z, Zq)
    monkeypatch.setattr(hull, "FACET_CELLS", 64)  # 1 query row per chunk
    chunked = hull.hull_test(Z, Zq)
    assert whole.route == chunked.route == "facets"
    assert_array_equal(whole.outside, chunked.outside)
