"""Every problem `type` URI resolves to a page, and every code has one title (issue 15).

The list of codes is checked against the source: every code a module can answer with (the
literal codes of ``Problem``, ``NearwiseError`` subclasses, gunicorn's parser errors and the
worker's refusals, and the codes by HTTP status) must have an entry in ``TYPES``; a new code
without a page fails here.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from webhelpers import body, problem

from nearwise.web import problems, worker_support
from nearwise.web.problem_types import TYPES

SOURCE = Path(problems.__file__).resolve().parents[1]
PATTERNS = (
    r'\bcode\s*=\s*"([a-z_]+)"',  # Problem(..., code="x") and NearwiseError.code = "x"
    r'_refuse\(\w+, \d{3}, "([a-z_]+)"',  # the worker's refusals
    r'raw_problem\(\s*\d{3}, "([a-z_]+)"',
    r'return \d{3}, "([a-z_]+)"',  # worker_support.error_answer
)


def _codes_in_source() -> set[str]:
    found: set[str] = set(problems.HTTP_CODES.values()) | {"http_error"}
    found |= {code for _, _, code, _ in worker_support._CLIENT_ERRORS}
    for path in [*SOURCE.joinpath("web").rglob("*.py"), SOURCE / "core" / "errors.py"]:
        text = path.read_text(encoding="utf-8")
        for pattern in PATTERNS:
            found |= set(re.findall(pattern, text))
    return found


def test_every_code_the_source_answers_with_has_a_type() -> None:
    codes = _codes_in_source()
    assert len(codes) >= 30  # the scan finds them (34 when written)
    assert codes - set(TYPES) == set()


@pytest.mark.parametrize("code", sorted(TYPES))
def test_each_type_uri_resolves_as_html_and_text(client, code: str) -> None:
    kind = TYPES[code]
    page = client.get(f"/problems/{code}")
    assert page.status_code == 200 and page.mimetype == "text/html"
    html = page.get_data(as_text=True)
    assert f"<h1>{kind.title}</h1>" in html.replace("&#x27;", "'")
    assert page.headers["Content-Security-Policy"].startswith("default-src 'none'")
    plain = client.get(f"/problems/{code}", headers={"Accept": "text/plain"})
    assert plain.status_code == 200 and plain.mimetype == "text/plain"
    assert plain.get_data(as_text=True).startswith(f"{kind.title} ({kind.status}, code {code})")
    assert kind.meaning and kind.fix


def test_an_unknown_code_is_a_404_whose_own_type_resolves(client) -> None:
    doc = problem(client.get("/problems/no_such_code"), 404)
    assert doc["type"] == "/problems/not_found" and doc["title"] == TYPES["not_found"].title
    assert client.get(doc["type"]).status_code == 200


def test_pages_need_no_api_key() -> None:
    from nearwise.web.app import create_app
    from nearwise.web.settings import Settings

    app = create_app(Settings(api_keys=("k" * 32,)))
    c = app.test_client()
    assert c.get("/problems/bad_cell").status_code == 200
    assert c.post("/v1/predict", json=body()).status_code == 401


def test_one_title_for_invalid_value_from_core_and_web(client) -> None:
    # The web layer's own invalid_value (a bad /v1/cell parameter) once said "Unprocessable
    # Entity" where the core's said "Invalid value".
    core = problem(client.post("/v1/predict", json=body(params={"k": 0})), 422)
    web = problem(client.get("/v1/cell?level=2"), 422)
    assert {core["code"], web["code"]} == {"invalid_value"}, (core, web)
    assert core["title"] == web["title"] == "Invalid value"
