"""GET /v1/cell: plain-text answers for spreadsheet formulas, equal to the JSON answers."""

from __future__ import annotations

import pytest
from webhelpers import curve, problem

ROWS = curve(30)
X = [r[0] for r in ROWS]
Y = [r[1] for r in ROWS]
AT = [0.5, 4.25, 12.0]


def joined(values, sep: str = ",", comma: bool = False) -> str:
    texts = ["" if v is None else repr(v) for v in values]
    return sep.join(t.replace(".", ",") for t in texts) if comma else sep.join(texts)


def predict_json(client, method: str, at=AT, rows=ROWS, **more) -> dict:
    doc = {
        "method": method,
        "target": "y",
        "train": {"columns": ["x", "y"], "rows": rows},
        "query": {"columns": ["x"], "rows": [[a] for a in at]},
        **more,
    }
    resp = client.post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


def cell(client, query: str):
    resp = client.get("/v1/cell?" + query)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    assert resp.content_type == "text/plain; charset=utf-8"
    return resp


def numbers(text: str) -> list[float | None]:
    return [float(t.replace(",", ".")) if t else None for t in text.split("\n")]


@pytest.mark.parametrize("part", ["value", "lower", "upper", "std_error"])
def test_each_part_equals_the_json_answer(client, part: str) -> None:
    want = predict_json(client, "spline")["predictions"]
    resp = cell(client, f"x={joined(X)}&y={joined(Y)}&at={joined(AT)}&part={part}")
    assert numbers(resp.get_data(as_text=True)) == [p[part] for p in want]
    assert resp.headers["Nearwise-Method"] == "spline"  # the default with >= 5 distinct x


def test_flags_one_line_per_value_and_warnings_in_a_header(client) -> None:
    doc = predict_json(client, "spline")
    resp = cell(client, f"x={joined(X)}&y={joined(Y)}&at={joined(AT)}&part=flags")
    assert resp.get_data(as_text=True).split("\n") == [
        " ".join(p["flags"]) for p in doc["predictions"]
    ]
    assert "outside_range" in resp.get_data(as_text=True).split("\n")[2]
    codes = [w["code"] for w in doc["warnings"] if not w["rows"]]
    assert resp.headers.get("Nearwise-Warnings", "") == ", ".join(codes)


def test_one_value_is_the_bare_number(client) -> None:
    want = predict_json(client, "knn", at=[4.25], interval={"level": 0.8})["predictions"][0]
    text = cell(client, f"x={joined(X)}&y={joined(Y)}&at=4.25&method=knn&level=0.8&part=upper")
    assert text.get_data(as_text=True) == repr(want["upper"])


def test_semicolons_and_decimal_commas_give_the_same_numbers(client) -> None:
    plain = cell(client, f"x={joined(X)}&y={joined(Y)}&at={joined(AT)}").get_data(as_text=True)
    semi = cell(client, f"x={joined(X, ';')}&y={joined(Y, ';')}&at={joined(AT, ';')}")
    assert semi.get_data(as_text=True) == plain
    local = cell(
        client,
        f"x={joined(X, ';', True)}&y={joined(Y, ';', True)}&at={joined(AT, ';', True)}"
        "&decimal=comma",
    )
    assert local.get_data(as_text=True) == plain.replace(".", ",")
    assert numbers(local.get_data(as_text=True)) == numbers(plain)


def test_default_is_linear_below_five_distinct_x(client) -> None:
    rows = [[float(i % 3), float(i % 3) * 2 + 0.1 * i] for i in range(10)]
    want = predict_json(client, "linear", at=[1.5], rows=rows)["predictions"][0]["value"]
    xs, ys = joined([r[0] for r in rows]), joined([r[1] for r in rows])
    resp = cell(client, f"x={xs}&y={ys}&at=1.5")
    assert resp.headers["Nearwise-Method"] == "linear"
    assert float(resp.get_data(as_text=True)) == want


def test_an_empty_item_is_missing_as_json_null(client) -> None:
    rows = [list(r) for r in ROWS]
    rows[3][1] = None
    want = predict_json(client, "spline", rows=rows)["predictions"]
    ys = joined([r[1] for r in rows])
    resp = cell(client, f"x={joined(X)}&y={ys}&at={joined(AT)}")
    assert numbers(resp.get_data(as_text=True)) == [p["value"] for p in want]


def test_tuning_parameters_match_predict(client) -> None:
    want = predict_json(client, "knn", tuning={"folds": 3, "scheme": "kfold"})["predictions"]
    resp = cell(client, f"x={joined(X)}&y={joined(Y)}&at={joined(AT)}&method=knn&folds=3")
    assert numbers(resp.get_data(as_text=True)) == [p["value"] for p in want]


@pytest.mark.parametrize(
    ("query", "status", "parameter"),
    [
        ("x=1,2,3&y=1,2&at=1", 422, "y"),
        ("x=1,2,3,4,5&y=1,2,a,4,5&at=1", 422, "y"),
        ("x=1,2,3,4,5&y=1,2,3,4,5", 422, "at"),
        ("x=1,5;2,5;3;4;5&y=1;2;3;4;5&at=1", 400, "x"),
        ("x=1.5;2;3;4;5&y=1;2;3;4;5&at=1&decimal=comma", 400, "x"),
        ("x=1,2,3,4,5&y=1,2,3,4,5&at=1&part=median", 422, "part"),
        ("x=1,2,3,4,5&y=1,2,3,4,5&at=1&level=90", 422, "level"),
        ("x=1,2,3,4,5&y=1,2,3,4,5&at=1&k=3", 422, "k"),
        ("x=1,2,3&y=1,2,3&at=1", 422, "folds"),
        ("x=1,2,3,4,5&y=1,2,3,4,5&at=1&method=magic", 422, "method"),
        ("x=1,2,3,4,5&y=1,2,3,4,5&at=1&at=2", 422, "at"),
    ],
    ids=[
        "lengths",
        "text",
        "no-at",
        "undeclared-comma",
        "point-with-comma",
        "part",
        "level",
        "unknown",
        "too-few-rows",
        "method",
        "twice",
    ],
)
def test_errors_are_problems_naming_the_parameter(
    client, query: str, status: int, parameter: str
) -> None:
    doc = problem(client.get("/v1/cell?" + query), status)
    assert doc["errors"][0]["parameter"] == parameter, doc
    if parameter == "x" and status == 400:
        assert "decimal" in doc["detail"]


def test_core_errors_name_the_item(client) -> None:
    doc = problem(client.get("/v1/cell?x=1,2,,4,5,6&y=1,2,3,4,5,6&at=1"), 422)
    assert doc["errors"][0]["parameter"] == "x"
    assert doc["errors"][0]["message"].startswith("item 3")
