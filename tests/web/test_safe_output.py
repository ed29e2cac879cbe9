"""Answers meant for spreadsheets never carry a live formula, and names that cannot be written
back (control characters, lone surrogates) are refused at the column.

The neutralization is the common practice for CSV written for spreadsheets: a text cell or a
name starting with = + - @, tab or carriage return gets a leading apostrophe. Numbers are
written as numbers (a negative number is not text).
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pytest

from nearwise.web.csvio import neutral
from nearwise.web.serialize import header_name

FORMULAS = ["=1+2", "+1", "-cmd", "@SUM(A1)", "\tx", "\rx"]


@pytest.mark.parametrize("text", FORMULAS)
def test_formula_starts_get_an_apostrophe(text: str) -> None:
    assert neutral(text) == "'" + text


@pytest.mark.parametrize("text", ["x", "1=1", "a-b", " =x", "'=x", ""])
def test_other_text_is_unchanged(text: str) -> None:
    assert neutral(text) == text


def _rows(text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(text)))


def _body(names: tuple[str, str, str], site: str | None = None) -> dict:
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 1, 40)
    y = x + rng.normal(0, 0.1, 40)
    rows = [[i % 8, float(a), float(b)] for i, (a, b) in enumerate(zip(x, y, strict=True))]
    if site is not None:
        rows = [[site if i % 8 == 0 else f"s{i % 8}", a, b] for i, (_, a, b) in enumerate(rows)]
    query = [[site if site is not None else 0, 0.5], ["s1" if site else 1, -0.25]]
    return {
        "method": "knn",
        "target": names[2],
        "features": [names[1]],
        "train": {"columns": list(names), "rows": rows},
        "query": {"columns": [names[0], names[1]], "rows": query},
        "tuning": {"group_by": names[0]},
    }


def test_predict_csv_neutralizes_names_and_text_cells_but_not_numbers(client) -> None:
    names = ("=site", "-x", "@y")
    resp = client.post(
        "/v1/predict", json=_body(names, site="=HYPERLINK(1)"), headers={"Accept": "text/csv"}
    )
    assert resp.status_code == 200, resp.get_data(as_text=True)
    rows = _rows(resp.get_data(as_text=True))
    assert rows[0][:2] == ["'=site", "'-x"]
    assert rows[1][0] == "'=HYPERLINK(1)"
    assert rows[2][1] == "-0.25"  # a number stays a number
    for row in rows:
        for cell in row:
            assert not cell.startswith(("=", "+", "@", "\t", "\r")), cell


def test_locality_csv_and_its_header_are_safe(client) -> None:
    rng = np.random.default_rng(1)
    x = rng.uniform(0, 1, (30, 1))
    body = {
        "train": {"columns": ["=température"], "rows": x.tolist()},
        "query": {"columns": ["=température"], "rows": [[0.5]]},
    }
    resp = client.post("/v1/locality", json=body, headers={"Accept": "text/csv"})
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert resp.headers["Nearwise-Features"] == "'=temp%C3%A9rature"
    assert _rows(resp.get_data(as_text=True))[0][0] == "'=température"
    assert header_name("a,b") == "a%2Cb" and header_name("50%") == "50%25"


@pytest.mark.parametrize(
    ("name", "code"),
    [("a\nb", "U+000A"), ("a\tb", "U+0009"), ("x\x7f", "U+007F"), ("\ud800x", "U+D800")],
)
def test_unwritable_names_are_refused_at_the_column(client, name: str, code: str) -> None:
    body = {
        "method": "knn",
        "target": "y",
        "train": {"columns": [name, "y"], "rows": [[float(i), float(i)] for i in range(20)]},
    }
    resp = client.post("/v1/predict", json=body)
    assert resp.status_code == 422
    problem = resp.get_json()
    assert problem["errors"][0]["pointer"] == "/train/columns/0"
    assert code in problem["detail"]


def test_csv_header_names_are_checked_too(client) -> None:
    data = "x\x01,y\n" + "".join(f"{i},{i}\n" for i in range(20))
    resp = client.post(
        "/v1/predict?method=knn&target=y", data=data, headers={"Content-Type": "text/csv"}
    )
    assert resp.status_code == 422
    problem = resp.get_json()
    assert problem["errors"][0]["part"] == "train" and problem["errors"][0]["line"] == 1
    assert "U+0001" in problem["detail"]


def test_a_byte_order_mark_is_accepted_on_json_as_on_csv(client) -> None:
    import json

    body = {
        "method": "knn",
        "target": "y",
        "train": {"columns": ["x", "y"], "rows": [[float(i), float(i)] for i in range(20)]},
    }
    plain = client.post(
        "/v1/predict", data=json.dumps(body), headers={"Content-Type": "application/json"}
    )
    marked = client.post(
        "/v1/predict",
        data=b"\xef\xbb\xbf" + json.dumps(body).encode(),
        headers={"Content-Type": "application/json"},
    )
    assert marked.status_code == 200 and marked.get_data() == plain.get_data()
