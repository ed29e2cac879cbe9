"""Missing-value tokens in CSV tables (issue 13, item 3).

The default tokens are pandas ``read_csv``'s (checked against pandas itself, a test dependency
through statsmodels); ``na`` replaces them; JSON keeps ``null`` only. The reference for every
answer is the same request as JSON with ``null`` in the missing cells.

R is not installed here, so the R-style text (``write.csv(df, row.names = FALSE)``: header
and text quoted, numbers bare, missing values ``NA``; ``write.csv2``: semicolons and decimal
commas) is written by hand in :func:`r_style`, following R's documentation of
``write.table``. The pandas-style text is written by pandas itself
(``to_csv(index=False, na_rep="")``).
"""

from __future__ import annotations

import io
import json
from typing import Any

import numpy as np
import pandas as pd
import pytest
from webhelpers import problem

from nearwise.web.csv_cells import PANDAS_NA

COLUMNS = ["x1", "x2", "y", "site"]
FIELDS = "method=knn&target=y&tuning.group_by=site"
MISSING = (3, 11, 17, 28)
SITES = ("north", "south", "east", "west", "dock", "yard")


def make_rows(n: int = 40, seed: int = 3) -> list[list[Any]]:
    """Invented readings: two inputs with two decimals, a response with three, six sites."""
    rng = np.random.default_rng(seed)
    x1 = np.round(rng.uniform(0.0, 10.0, n), 2)
    x2 = np.round(rng.uniform(-1.0, 1.0, n), 2)
    y = np.round(np.sin(x1) + x2 + rng.normal(0.0, 0.1, n), 3)
    site = [SITES[i % len(SITES)] for i in range(n)]
    return [[float(a), float(b), float(c), s] for a, b, c, s in zip(x1, x2, y, site, strict=True)]


def with_missing(rows: list[list[Any]], at: tuple[int, ...] = MISSING, col: int = 2):
    return [
        [None if (i in at and j == col) else c for j, c in enumerate(r)] for i, r in enumerate(rows)
    ]


QUERY = [[2.5, 0.1, "north"], [7.25, -0.5, "south"]]


def r_style(columns: list[str], rows: list[list[Any]], sep: str = ",", dec: str = ".") -> str:
    """A table as R's ``write.csv`` (``write.csv2`` with ``sep=";", dec=","``) writes it with
    ``row.names = FALSE``: quoted column names and text, numbers bare with up to 15
    significant digits, a missing value as ``NA`` (unquoted), LF line ends."""

    def cell(c: Any) -> str:
        if c is None:
            return "NA"
        if isinstance(c, str):
            return '"' + c.replace('"', '""') + '"'
        return format(c, ".15g").replace(".", dec)

    lines = [sep.join(f'"{c}"' for c in columns), *(sep.join(map(cell, r)) for r in rows)]
    return "\n".join(lines) + "\n"


def pandas_style(columns: list[str], rows: list[list[Any]]) -> str:
    return pd.DataFrame(rows, columns=columns).to_csv(index=False, na_rep="")


def json_answer(client, rows: list[list[Any]], query: list[list[Any]] | None = None) -> dict:
    doc: dict[str, Any] = {
        "method": "knn",
        "target": "y",
        "tuning": {"group_by": "site"},
        "train": {"columns": COLUMNS, "rows": rows},
    }
    if query is not None:
        doc["query"] = {"columns": ["x1", "x2", "site"], "rows": query}
    resp = client.post("/v1/predict", json=doc)
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


def post_csv(client, text: str, channel: str, query: str | None = None, fields: str = FIELDS):
    url = f"/v1/predict?{fields}"
    if channel == "multipart":
        data: dict[str, Any] = {"train": (io.BytesIO(text.encode()), "train.csv", "text/csv")}
        if query is not None:
            data["query"] = (io.BytesIO(query.encode()), "query.csv", "text/csv")
        return client.post(url, data=data, content_type="multipart/form-data")
    assert query is None
    return client.post(url, data=text.encode(), content_type=channel)


def answer(resp) -> dict:
    assert resp.status_code == 200, resp.get_data(as_text=True)
    return resp.get_json()


# -- the default set ---------------------------------------------------------------------------


def test_the_default_tokens_are_pandas_read_csv_defaults() -> None:
    # pandas documents its default na_values in read_csv; its parser holds them as
    # STR_NA_VALUES (the empty cell included).
    from pandas._libs.parsers import STR_NA_VALUES

    assert set(PANDAS_NA) | {""} == set(STR_NA_VALUES)
    assert len(PANDAS_NA) == len(set(PANDAS_NA)) == 18
    # ... and through pandas' public reader: each token, alone in a cell, is read as NaN.
    text = "a,b\n" + "".join(f'"{t}",1\n' for t in PANDAS_NA)
    assert pd.read_csv(io.StringIO(text))["a"].isna().all()


@pytest.mark.parametrize("channel", ["text/csv", "text/plain", "multipart"])
def test_r_and_pandas_style_csv_give_the_json_null_answer(client, channel: str) -> None:
    rows = with_missing(make_rows())
    r_text = r_style(COLUMNS, rows)
    # The hand-written R text reads, in pandas, as the table meant.
    read = pd.read_csv(io.StringIO(r_text))
    assert read["y"].isna().sum() == len(MISSING)
    assert list(read.columns) == COLUMNS and read["site"].tolist() == [r[3] for r in rows]
    if channel == "multipart":
        want = json_answer(client, rows, QUERY)
        r_query = r_style(["x1", "x2", "site"], QUERY)
        pd_query = pandas_style(["x1", "x2", "site"], QUERY)
        got_r = answer(post_csv(client, r_text, channel, r_query))
        got_pd = answer(post_csv(client, pandas_style(COLUMNS, rows), channel, pd_query))
    else:
        want = json_answer(client, rows)
        got_r = answer(post_csv(client, r_text, channel))
        got_pd = answer(post_csv(client, pandas_style(COLUMNS, rows), channel))
    assert want["fit"]["rows_dropped"] == len(MISSING)
    assert got_r == want
    assert got_pd == want


def test_every_default_token_marks_a_missing_target(client) -> None:
    rows = make_rows()
    at = tuple(range(0, 2 * len(PANDAS_NA), 2))  # rows 0, 2, ..., 34
    tokens = dict(zip(at, PANDAS_NA, strict=True))
    lines = ["x1,x2,y,site"] + [
        ",".join([repr(r[0]), repr(r[1]), tokens.get(i, repr(r[2])), r[3]])
        for i, r in enumerate(rows)
    ]
    got = answer(post_csv(client, "\n".join(lines) + "\n", "text/csv"))
    want = json_answer(client, with_missing(rows, at))
    assert got == want
    assert got["fit"]["rows_dropped"] == len(PANDAS_NA)


def test_nan_tokens_numpy_reads_as_numbers_are_missing(client) -> None:
    # numpy reads nan, NaN, -nan and -NaN as floats: they must still be missing, not NaN
    # numbers refused as non-finite.
    rows = make_rows()
    spelled = dict(zip(MISSING, ("nan", "NaN", "-nan", "-NaN"), strict=True))
    got = answer(post_csv(client, sentinel_text(rows, spelled), "text/csv"))
    assert got == json_answer(client, with_missing(rows))


def test_a_token_in_a_feature_is_the_error_an_empty_cell_is(client) -> None:
    rows = make_rows()
    as_na = r_style(COLUMNS, with_missing(rows, (4,), col=0))
    as_empty = pandas_style(COLUMNS, with_missing(rows, (4,), col=0))
    doc_na = problem(post_csv(client, as_na, "text/csv"), 422)
    doc_empty = problem(post_csv(client, as_empty, "text/csv"), 422)
    assert doc_na["errors"] == doc_empty["errors"]
    assert {"part": "train", "line": 6, "column": "x1"}.items() <= doc_na["errors"][0].items()


def test_decimal_comma_files_with_na(client) -> None:
    # R's write.csv2: semicolons, decimal commas, NA.
    rows = with_missing(make_rows())
    text = r_style(COLUMNS, rows, sep=";", dec=",")
    got = answer(post_csv(client, text, "text/csv", fields=FIELDS + "&decimal=comma"))
    assert got == json_answer(client, rows)


# -- `na` replaces the set ---------------------------------------------------------------------


def sentinel_text(rows: list[list[Any]], tokens: dict[int, str]) -> str:
    """Plain CSV with the target of row i written as tokens[i]."""
    lines = ["x1,x2,y,site"] + [
        ",".join([repr(r[0]), repr(r[1]), tokens.get(i, repr(r[2])), r[3]])
        for i, r in enumerate(rows)
    ]
    return "\n".join(lines) + "\n"


NA_FORMS = {
    "comma-separated": "na=NA,-999",
    "repeated": "na=NA&na=-999",
    "json-array": "na=" + json.dumps(["NA", "-999"]),
}


@pytest.mark.parametrize("form", list(NA_FORMS))
def test_na_in_the_query_string_replaces_the_set(client, form: str) -> None:
    rows = make_rows()
    text = sentinel_text(rows, {3: "NA", 11: "-999", 17: "", 28: "-999"})
    got = answer(post_csv(client, text, "text/csv", fields=f"{FIELDS}&{NA_FORMS[form]}"))
    assert got == json_answer(client, with_missing(rows))


def test_na_as_a_form_field(client) -> None:
    rows = make_rows()
    text = sentinel_text(rows, {3: "-999", 11: "-999", 17: "-999", 28: "-999"})
    data = {"train": (io.BytesIO(text.encode()), "train.csv", "text/csv"), "na": "-999"}
    resp = client.post(f"/v1/predict?{FIELDS}", data=data, content_type="multipart/form-data")
    assert answer(resp) == json_answer(client, with_missing(rows))


def test_a_numeric_token_in_a_column_of_numbers(client) -> None:
    # Every cell of y reads as a number; -999 is missing only because `na` says so.
    rows = make_rows()
    text = sentinel_text(rows, dict.fromkeys(MISSING, "-999"))
    got = answer(post_csv(client, text, "text/csv", fields=FIELDS + "&na=-999"))
    assert got == json_answer(client, with_missing(rows))
    # Without `na`, -999 is a number: a different fit.
    assert answer(post_csv(client, text, "text/csv")) != got


def test_a_token_with_a_point_under_decimal_commas(client) -> None:
    rows = with_missing(make_rows())
    text = r_style(COLUMNS, rows, sep=";", dec=",").replace("NA", "-9.99")
    fields = FIELDS + "&decimal=comma&na=-9.99"
    assert answer(post_csv(client, text, "text/csv", fields=fields)) == json_answer(client, rows)
    doc = problem(post_csv(client, text, "text/csv", fields=FIELDS + "&decimal=comma"), 400)
    assert doc["code"] == "csv_format_undeclared"


@pytest.mark.parametrize(
    ("na", "cell"),
    [
        ("-999", "NA"),  # a default token outside the set given is text
        ("", "NA"),  # na= : only empty cells are missing
        ("-999", "nan"),  # nan outside the set is a non-finite number again
    ],
)
def test_with_na_given_only_its_tokens_are_missing(client, na: str, cell: str) -> None:
    rows = make_rows()
    text = sentinel_text(rows, {5: cell, 9: ""})
    doc = problem(post_csv(client, text, "text/csv", fields=f"{FIELDS}&na={na}"), 422)
    assert {"part": "train", "line": 7, "column": "y"}.items() <= doc["errors"][0].items()
    # the same file with that cell empty: the empty cell stays missing whatever `na` says
    fixed = sentinel_text(rows, {5: "", 9: ""})
    got = answer(post_csv(client, fixed, "text/csv", fields=f"{FIELDS}&na={na}"))
    assert got == json_answer(client, with_missing(rows, (5, 9)))


# -- JSON keeps null only ----------------------------------------------------------------------


def test_json_text_na_stays_text(client) -> None:
    rows = make_rows()
    rows[6][2] = "NA"
    doc = {"method": "knn", "target": "y", "train": {"columns": COLUMNS, "rows": rows}}
    doc["tuning"] = {"group_by": "site"}
    resp = problem(client.post("/v1/predict", json=doc), 422)
    assert resp["errors"][0]["pointer"] == "/train/rows/6/2"


def test_na_in_a_json_body_is_refused(client) -> None:
    doc = {
        "method": "knn",
        "target": "y",
        "na": ["NA"],
        "train": {"columns": COLUMNS, "rows": make_rows()},
    }
    resp = problem(client.post("/v1/predict", json=doc), 422)
    assert resp["errors"][0]["pointer"] == "/na"
    assert "null" in resp["detail"]


# -- answers and other endpoints ---------------------------------------------------------------


def test_the_csv_answer_echoes_cells_as_sent(client) -> None:
    rows = with_missing(make_rows())
    r_text = r_style(COLUMNS, rows)
    url = f"/v1/predict?{FIELDS}"
    with_na = client.post(url, data=r_text, content_type="text/csv", headers={"Accept": "text/csv"})
    empty = client.post(
        url,
        data=pandas_style(COLUMNS, rows),
        content_type="text/csv",
        headers={"Accept": "text/csv"},
    )
    assert with_na.status_code == empty.status_code == 200
    na_lines = with_na.get_data(as_text=True).splitlines()
    empty_lines = empty.get_data(as_text=True).splitlines()
    for i in MISSING:
        assert na_lines[i + 1].split(",")[2] == "NA"  # as sent
        assert empty_lines[i + 1].split(",")[2] == ""
    # The predicted columns are the same; only the echoed input cells differ.
    tail = [line.split(",")[4:] for line in na_lines[1:]]
    assert tail == [line.split(",")[4:] for line in empty_lines[1:]]


def test_locality_reads_tokens_and_na(client) -> None:
    rows = make_rows()
    train = "x1,x2\n" + "".join(f"{r[0]!r},{r[1]!r}\n" for r in rows)
    query = "x1,x2\n2.5,0.1\n"
    data = {
        "train": (io.BytesIO(train.encode()), "train.csv", "text/csv"),
        "query": (io.BytesIO(query.encode()), "query.csv", "text/csv"),
        "na": "-999",
    }
    resp = client.post("/v1/locality?k=5", data=data, content_type="multipart/form-data")
    assert resp.status_code == 200, resp.get_data(as_text=True)
    # NA in a measured column is missing, which locality refuses at the cell
    bad = train.replace(f"{rows[2][0]!r},", "NA,", 1)
    data = {
        "train": (io.BytesIO(bad.encode()), "train.csv", "text/csv"),
        "query": (io.BytesIO(query.encode()), "query.csv", "text/csv"),
    }
    doc = problem(
        client.post("/v1/locality?k=5", data=data, content_type="multipart/form-data"), 422
    )
    assert {"part": "train", "line": 4, "column": "x1"}.items() <= doc["errors"][0].items()
    assert "missing" in doc["detail"] or "NaN" in doc["detail"] or "not" in doc["detail"]
