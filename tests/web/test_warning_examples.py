"""The request bodies of samples/warning_examples.py show their warning codes.

The README's Warnings section is built from these examples; these tests keep it honest: each
body, posted to /v1/predict, must carry its code, on exactly the rows the example names (none
for a code about the data set as a whole), and the saved copies in samples/warnings/ must
match what the builders make now.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

from nearwise.core.catalogue import describe

SAMPLES = Path(__file__).resolve().parents[2] / "samples"
sys.path.insert(0, str(SAMPLES))

import warning_examples  # noqa: E402

EXAMPLES = warning_examples.EXAMPLES

#: Codes with no example, and why.
NOT_SHOWN = {
    "df_unavailable": "a safety net: the knot placement and the arithmetic on x mapped to "
    "[0, 1] keep the smoother's band computable for data on any scale",
}


def test_every_code_has_an_example_or_a_reason() -> None:
    codes = {w["code"] for w in describe()["warnings"]}
    assert set(EXAMPLES) | set(NOT_SHOWN) == codes
    assert not set(EXAMPLES) & set(NOT_SHOWN)


@pytest.mark.parametrize("code", list(EXAMPLES))
def test_example_shows_its_code(client, code: str) -> None:
    example = EXAMPLES[code]
    resp = client.post("/v1/predict", json=example.build())
    assert resp.status_code == 200, resp.get_data(as_text=True)
    answer = resp.get_json()
    found = [w for w in answer["warnings"] if w["code"] == code]
    assert len(found) == 1, [w["code"] for w in answer["warnings"]]
    assert found[0]["message"]
    assert found[0]["rows"] == list(example.rows)
    flagged = [i for i, p in enumerate(answer["predictions"]) if code in p["flags"]]
    assert flagged == list(example.rows)


@pytest.mark.parametrize("code", list(EXAMPLES))
def test_saved_body_is_current(code: str) -> None:
    path = SAMPLES / "warnings" / f"{code}.json"
    assert path.is_file(), f"missing {path}; run: python3 samples/warning_examples.py --write"
    saved = json.loads(path.read_text(encoding="utf-8"))
    assert saved == EXAMPLES[code].build(), (
        f"{path.name} is stale; run: python3 samples/warning_examples.py --write"
    )


def test_summary_line_names_rows_and_flags() -> None:
    answer = {
        "predictions": [{"flags": []}, {"flags": ["outside_hull", "far_from_data"]}],
        "warnings": [
            {"code": "outside_hull", "message": "…", "rows": [1]},
            {"code": "far_from_data", "message": "…", "rows": [1]},
        ],
    }
    line = warning_examples.summary("outside_hull", answer)
    assert "rows [1]" in line and "outside_hull far_from_data" in line
    assert "also: far_from_data" in line
    assert "MISSING" in warning_examples.summary("few_rows", answer)
