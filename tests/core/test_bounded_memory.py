"""Memory stays bounded: the hull facet test works in chunks, and a fit at the row limits
stays under 2 GiB (issue 12; README, Limits).

The facet test is checked against scipy's Delaunay triangulation (``find_simplex`` is -1
outside the hull), an implementation independent of the facet equations, and against the
whole product computed at once. Peak memory is measured two ways: tracemalloc, which numpy
reports its arrays to, for the facet test alone; the peak resident set of a fresh process
(``ru_maxrss``) for whole requests at the row limits.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tracemalloc

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy.spatial import ConvexHull, Delaunay

from nearwise.core import hull

RNG = np.random.default_rng(11)
GIB = 1 << 30


def _sphere(n: int, p: int) -> np.ndarray:
    Z = RNG.standard_normal((n, p))
    return Z / np.linalg.norm(Z, axis=1)[:, None]


@pytest.mark.parametrize("p", [2, 3])
def test_chunked_facet_verdicts_match_delaunay_and_the_whole_product(monkeypatch, p) -> None:
    Z = _sphere(300, p)
    Zq = np.vstack([RNG.uniform(-1.1, 1.1, (600, p)), 0.999 * _sphere(200, p)])
    eq = ConvexHull(Z).equations
    margin = (Zq @ eq[:, :-1].T + eq[:, -1]).max(axis=1)
    clear = np.abs(margin) > 1e-6  # leave out rows within rounding of a facet
    whole = (Zq @ eq[:, :-1].T + eq[:, -1] > hull.HULL_TOL).any(axis=1)  # all at once
    monkeypatch.setattr(hull, "FACET_CELLS", 64)  # one query row per chunk
    test = hull.hull_test(Z, Zq)
    assert test.route == "facets" and test.tested.all()
    outside_delaunay = Delaunay(Z).find_simplex(Zq) < 0
    assert 100 < test.outside[clear].sum() < clear.sum() - 100  # both verdicts occur
    assert_array_equal(test.outside[clear], outside_delaunay[clear])
    assert_array_equal(test.outside[clear], whole[clear])


def test_the_facet_test_holds_one_chunk_at_a_time() -> None:
    # 40,000 facets x 5,000 query rows: 1.6 GB if formed at once; each chunk is 8 MB.
    eq = ConvexHull(_sphere(20_000, 3)).equations
    Wq = 0.5 * _sphere(5_000, 3)
    tracemalloc.start()
    try:
        inside = ~hull.beyond(Wq, eq[:, :-1], eq[:, -1])
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert inside.all()
    # one chunk (8 MB) and the planes (1.3 MB) at a time
    assert peak < 12e6, f"peak {peak / 1e6:.0f} MB"


def _lp_peak(Z: np.ndarray, Zq: np.ndarray) -> float:
    tracemalloc.start()
    try:
        test = hull.hull_test(Z, Zq)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert test.route == "lp" and test.tested.all()
    return peak


def test_the_linear_programs_hold_one_block_and_one_pricing_chunk_at_a_time() -> None:
    # Rows on a sphere in 6 dimensions, queries near it: several pricing rounds per row. The
    # query rows are solved in blocks of hull_simplex.QUERY_BLOCK and priced in chunks of
    # hull.FACET_CELLS entries, so three times the query rows take no more memory; a block
    # priced against all 20,000 rows at once would take 80 MB.
    Z = _sphere(20_000, 6)
    small, large = _lp_peak(Z, 0.97 * _sphere(520, 6)), _lp_peak(Z, 0.97 * _sphere(1560, 6))
    assert large < small + 2e6, (small, large)
    assert large < 40e6, f"peak {large / 1e6:.0f} MB"


CHILD = """
import json, os, resource, sys
for v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[v] = "1"
sys.path.insert(0, "tests/benchmarks")
from calibrate_cost import job
from nearwise.core import locality, pipeline
method, n, p, params = json.loads(sys.argv[1])
j = job(method, n, p, params)
if method == "locality":
    X = j.train.values[:, :-1]
    locality.summary(X, j.train.columns[:-1], Xq=j.query.values)
else:
    pipeline.run(j)
print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)
"""

#: Shapes at the row limit (250,000): kNN without a query (intervals at every row) and the
#: locality summary of rows on a sphere (500,000 hull facets) queried from inside it.
AT_LIMITS = [
    ("knn", 250_000, 1, {"_query": 0, "k": 10}),
    ("locality", 250_000, 3, {"_query": 2_000, "_shape": "ball"}),
]


def test_peak_memory_at_the_row_limits_stays_under_2_gib() -> None:
    children = [
        subprocess.Popen(
            [sys.executable, "-c", CHILD, json.dumps(shape)], stdout=subprocess.PIPE, text=True
        )
        for shape in AT_LIMITS
    ]
    peaks = {}
    for shape, child in zip(AT_LIMITS, children, strict=True):
        out, _ = child.communicate(timeout=240)
        assert child.returncode == 0, shape
        peaks[shape[0]] = int(out.split()[-1])
    assert all(peak < 2 * GIB for peak in peaks.values()), peaks
    print({k: f"{v / 2**20:.0f} MiB" for k, v in peaks.items()})
