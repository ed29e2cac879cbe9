"""Fuzzing every operation of the OpenAPI document the app serves, in-process (WSGI).

Each operation gets schemathesis' explicit examples, its coverage cases (boundary and
just-out-of-bounds values of every field) and ``MAX_EXAMPLES`` drawn cases, about half of
the JSON bodies repaired into well-formed tables so the fits run (see ``fuzzing.py``). Every
response must be free of server errors and match the document: a documented status, a
documented media type and a body valid against its schema. Generation is derandomized, so a
run is reproducible; ``tests/fuzz/run_long.py`` runs many more cases against a live server.

The app under test has small limits (rows, cells, time budget) to keep fits cheap; its
document is the one every app serves (generated with the default settings), so a request
within the document's bounds but over these limits gets a documented 413, 422 or 503.
"""

from __future__ import annotations

from collections import Counter

import pytest
import schemathesis
from fuzzing import CHECKS, repair_case
from hypothesis import HealthCheck, settings

from nearwise.web.app import create_app
from nearwise.web.settings import Settings

MAX_EXAMPLES = 50
LIMITS = Settings(max_rows=60, max_query_rows=60, max_cells=2_000, time_budget_s=5.0)

app = create_app(LIMITS)
schema = schemathesis.openapi.from_wsgi("/openapi.json", app)
schema.hook("flatmap_case")(repair_case)

#: (operation, phase, status) -> responses seen, for the test below that checks that fits
#: were reached.
SEEN: Counter[tuple[str, str, int]] = Counter()


@schema.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    derandomize=True,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
def test_responses_conform_to_the_document(case: schemathesis.Case) -> None:
    # schemathesis asks for gzip but does not decompress in-process: ask for the answer as it
    # is (compressed answers are checked in tests/web/test_compression.py)
    response = case.call_and_validate(checks=CHECKS, headers={"Accept-Encoding": "identity"})
    phase = case.meta.phase.name.value if case.meta else ""
    SEEN[(case.operation.label, phase, response.status_code)] += 1


@pytest.mark.parametrize("label", ["POST /v1/predict", "POST /v1/compare", "POST /v1/locality"])
def test_fuzzing_reaches_the_fits(label: str) -> None:
    """The repaired bodies get past the envelope checks: drawn cases of each fitting
    operation were answered 200 (run with the fuzz test above, in the same session)."""
    if not SEEN:
        pytest.skip("the fuzz test did not run in this session")
    assert SEEN[(label, "fuzzing", 200)] >= 3, {k: v for k, v in SEEN.items() if k[0] == label}
