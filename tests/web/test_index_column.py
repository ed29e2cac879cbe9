"""A saved index is never used silently (issue 13, item 4), through the HTTP layer.

The files are written by pandas itself (``DataFrame.to_csv()`` keeps the index as a first,
unnamed column by default; pandas documentation, ``to_csv(index=True)``). R is not installed
here: its ``write.csv`` with the default ``row.names = TRUE`` (an unnamed first column holding
"1", "2", ..., quoted) is written by hand in :func:`r_with_row_names`.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest
from webhelpers import problem

URL = "/v1/predict?method=linear&target=y"


def frame(n: int = 30, seed: int = 5) -> pd.DataFrame:
    """Invented readings with two inputs."""
    rng = np.random.default_rng(seed)
    x1 = np.round(rng.uniform(0.0, 10.0, n), 2)
    x2 = np.round(rng.uniform(-1.0, 1.0, n), 2)
    y = np.round(1.5 * x1 - 2.0 * x2 + rng.normal(0.0, 0.5, n), 3)
    return pd.DataFrame({"x1": x1, "x2": x2, "y": y})


def r_with_row_names(df: pd.DataFrame) -> str:
    lines = ['"","x1","x2","y"']
    lines += [f'"{i + 1}",{a:.15g},{b:.15g},{c:.15g}' for i, (a, b, c) in enumerate(df.values)]
    return "\n".join(lines) + "\n"


def post(client, text: str, url: str = URL, **headers: str):
    return client.post(url, data=text.encode(), content_type="text/csv", headers=headers)


@pytest.mark.parametrize("writer", ["pandas", "r"])
def test_a_saved_index_is_refused_with_a_hint(client, writer: str) -> None:
    df = frame()
    text = df.to_csv() if writer == "pandas" else r_with_row_names(df)
    assert text.startswith(",x1" if writer == "pandas" else '"",')
    doc = problem(post(client, text), 422)
    assert doc["code"] == "bad_table"
    entry = doc["errors"][0]
    assert entry["part"] == "train" and entry["line"] == 1 and entry["column"] == ""
    assert "column 0" in entry["message"]
    assert "index=False" in doc["detail"] and "`features`" in doc["detail"]


def test_with_features_the_unnamed_column_is_left_out(client) -> None:
    df = frame()
    listed = post(client, df.to_csv(), URL + "&features=x1,x2")
    clean = post(client, df.to_csv(index=False))
    assert listed.status_code == clean.status_code == 200, listed.get_data(as_text=True)
    assert listed.get_json() == clean.get_json()


def test_json_unnamed_column_is_refused_at_its_position(client) -> None:
    df = frame()
    rows = [[i, *r] for i, r in enumerate(df.values.tolist())]
    doc = {"method": "linear", "target": "y", "train": {"columns": ["", "x1", "x2", "y"]}}
    doc["train"]["rows"] = rows
    refused = problem(client.post("/v1/predict", json=doc), 422)
    assert refused["errors"][0]["pointer"] == "/train/columns/0"
    ok = client.post("/v1/predict", json={**doc, "features": ["x1", "x2"]})
    assert ok.status_code == 200, ok.get_data(as_text=True)


def test_compare_and_locality_refuse_it_too(client) -> None:
    text = frame().to_csv()
    compare = problem(post(client, text, "/v1/compare?target=y"), 422)
    assert compare["errors"][0]["line"] == 1
    data = {
        "train": (io.BytesIO(text.encode()), "train.csv", "text/csv"),
        "query": (io.BytesIO(b"x1,x2,y\n1,0,1\n"), "query.csv", "text/csv"),
    }
    resp = client.post("/v1/locality?k=5", data=data, content_type="multipart/form-data")
    assert problem(resp, 422)["errors"][0]["column"] == ""


def test_a_kept_index_is_warned_about_unless_listed(client) -> None:
    df = frame().reset_index()  # the index becomes a column named `index`, 0..n-1
    text = df.to_csv(index=False)
    warned = post(client, text).get_json()
    found = [w for w in warned["warnings"] if w["code"] == "index_like_feature"]
    assert len(found) == 1 and "`index`" in found[0]["message"] and found[0]["rows"] == []
    assert "index_like_feature" not in warned["predictions"][0]["flags"]
    listed = post(client, text, URL + "&features=index,x1,x2").get_json()
    assert "index_like_feature" not in [w["code"] for w in listed["warnings"]]
    # In a CSV answer the code goes in the data-set header.
    resp = post(client, text, Accept="text/csv")
    assert "index_like_feature" in resp.headers["Nearwise-Warnings"]
