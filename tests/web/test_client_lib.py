"""The Python client ``nearwise.client`` (issue 15, item 1), against a live ``nearwise serve``.

Checks: DataFrames in and out (predictions equal scikit-learn's ``KNeighborsRegressor`` on
``StandardScaler``-scaled features at the tuned k); the three table shapes and the two
encodings (JSON, CSV) give the same answer; a 503 with ``Retry-After`` is tried again, bounded
in count and in total wait; refusals raise ``ProblemError`` with the problem's status, code,
detail and places; and a query scored in chunks gives the numbers of one request.
"""

from __future__ import annotations

import http.server
import json
import sys
import threading
from collections.abc import Iterator
from typing import Any

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.neighbors import KNeighborsRegressor
from sklearn.preprocessing import StandardScaler
from webhelpers import serving

from nearwise.client import Client, ProblemError, Result
from nearwise.client.tables import table
from nearwise.client.transport import Transport


@pytest.fixture(scope="module")
def url(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    with serving(tmp_path_factory.mktemp("serve") / "serve.log") as port:
        yield f"http://127.0.0.1:{port}"


def frames(n: int = 120, m: int = 100, seed: int = 3) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Invented data: y = sin(a) + b/4 + noise, and a query that reaches past the data."""
    rng = np.random.default_rng(seed)
    train = pd.DataFrame({"a": rng.uniform(0, 10, n), "b": rng.uniform(0, 4, n)})
    train["y"] = np.sin(train.a) + train.b / 4 + rng.normal(0, 0.1, n)
    query = pd.DataFrame(
        {"a": rng.uniform(-2, 12, m), "b": rng.uniform(0, 4, m)},
        index=pd.Index([f"q{i}" for i in range(m)], name="id"),
    )
    return train, query


# -- frames in and out


def test_frames_in_and_out_match_scikit_learn(url: str) -> None:
    train, query = frames()
    result = Client(url).predict(train, "y", query, method="knn")
    out = result.predictions
    assert list(out.columns) == ["a", "b", "value", "std_error", "lower", "upper", "flags"]
    assert out.index.equals(query.index)  # the query's own labels come back
    assert_allclose(out[["a", "b"]].to_numpy(), query.to_numpy(), rtol=0, atol=0)
    k = result.params["k"]
    scaler = StandardScaler().fit(train[["a", "b"]])
    reference = KNeighborsRegressor(n_neighbors=k).fit(scaler.transform(train[["a", "b"]]), train.y)
    expected = reference.predict(scaler.transform(query))
    assert_allclose(out.value.to_numpy(), expected, rtol=1e-12)  # sums in another order
    assert (out.lower <= out.value).all() and (out.value <= out.upper).all()
    assert result.tuning["best"] and result.method == "knn"
    flagged = {w["code"]: w["rows"] for w in result.warnings}["outside_range"]
    assert [i for i, f in enumerate(out["flags"]) if "outside_range" in f] == flagged


def test_the_table_shapes_and_encodings_give_the_same_answer(url: str) -> None:
    train, query = frames(60, 9)
    train["dock"] = ["A", "B", "NA"] * 20  # `NA` is a level here, not a missing value
    train.loc[5, "y"] = np.nan  # a missing cell (the target may have them)
    query["dock"] = ["B", "NA", "A"] * 3
    fields = {"categorical": ["dock"], "tuning": {"folds": 4}}
    answers = {}
    for name, enc, tr, q in [
        ("frame-json", "json", train, query),
        ("frame-csv", "csv", train, query),
        ("records", "auto", train.to_dict("records"), query.to_dict("records")),
        ("rows", "auto", _rows(train), _rows(query)),
        ("split", "auto", train.to_dict(orient="split"), _rows(query)),
    ]:
        client = Client(url, encoding=enc)
        answers[name] = client.predict(tr, "y", q, method="linear", **fields).answer
        sent = client.sent[-1]
        assert sent == ("multipart/form-data" if enc == "csv" else sent), (name, sent)
    first = answers["frame-json"]
    for name, answer in answers.items():
        assert answer == first, name


def _rows(frame: pd.DataFrame) -> dict[str, Any]:
    return {"columns": list(frame.columns), "rows": frame.astype(object).to_numpy().tolist()}


def test_the_smaller_encoding_is_sent(url: str) -> None:
    train, query = frames(2000, 5)
    client = Client(url)
    client.predict(train, "y", query, method="knn")  # many short numeric rows: CSV is smaller
    client.predict(train.head(30), "y", query, method="knn")  # small: the multipart head weighs
    assert client.sent == ["multipart/form-data", "application/json"]
    body = table(train, "train")
    assert len(body.as_csv()) < len(json.dumps(body.as_json()))


def test_text_that_csv_would_misread_goes_as_json(url: str) -> None:
    train, _ = frames(40)
    train["g"] = ["1", "x"] * 20  # "1" would be read as the number 1 from CSV
    client = Client(url, encoding="csv")
    client.predict(train, "y", method="knn", tuning={"group_by": "g", "folds": 2})
    assert client.sent == ["application/json"]
    assert not table(train, "train").csv_safe()


def test_without_pandas_records_still_work(url: str, monkeypatch: pytest.MonkeyPatch) -> None:
    train, query = frames(40, 3)
    result = Client(url).predict(train, "y", query, method="knn")
    monkeypatch.setitem(sys.modules, "pandas", None)  # as if pandas were not installed
    with pytest.raises(ImportError, match=r"records\(\).*answer"):
        _ = result.predictions
    assert [r["value"] for r in result.records()] == [
        p["value"] for p in result.answer["predictions"]
    ]


def test_cells_that_cannot_be_sent_are_refused_naming_row_and_column() -> None:
    with pytest.raises(ValueError, match=r"row 2, column `a` is infinite"):
        table({"columns": ["a"], "rows": [[1.0], [2.0], [float("inf")]]}, "train")
    with pytest.raises(ValueError, match=r"row 1 has the keys"):
        table([{"a": 1}, {"b": 2}], "query")


# -- errors and retries


def test_a_refusal_raises_problem_error_with_its_places(url: str) -> None:
    train, _ = frames(30)
    train["y"] = train.y.astype(object)
    train.loc[3, "y"] = "n/a"
    with pytest.raises(ProblemError) as caught:
        Client(url).predict(train, "y", method="knn")
    err = caught.value
    assert (err.status, err.code) == (422, "bad_cell")
    assert "'n/a'" in err.detail
    assert err.errors[0]["pointer"] == "/train/rows/3/2"  # columns a, b, y
    assert err.problem["status"] == 422 and "/train/rows/3/2" in str(err)


def test_a_csv_refusal_names_part_line_and_column(url: str) -> None:
    train, _ = frames(30)
    with pytest.raises(ProblemError) as caught:
        Client(url, encoding="csv").predict(train, "nope", method="knn")
    assert caught.value.status == 422
    assert caught.value.code == "unknown_name"


@pytest.fixture(scope="module")
def budget_url(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A server whose time budget no fit meets: every fit is a 503 with Retry-After."""
    env = {"NEARWISE_TIME_BUDGET_S": "0.001"}
    with serving(tmp_path_factory.mktemp("budget") / "serve.log", env=env) as port:
        yield f"http://127.0.0.1:{port}"


@pytest.mark.parametrize(("retries", "max_wait", "tries"), [(2, 100.0, 3), (5, 15.0, 2)])
def test_503_is_retried_after_retry_after_within_bounds(
    budget_url: str, retries: int, max_wait: float, tries: int
) -> None:
    slept: list[float] = []
    client = Client(budget_url, retries=retries, max_wait=max_wait)
    client.transport.sleep = slept.append  # record the waits instead of waiting
    train, _ = frames(2000)
    with pytest.raises(ProblemError) as caught:
        client.predict(train, "y", method="spline", tuning={"scheme": "loo"})
    assert caught.value.status == 503
    wait = float(caught.value.headers["retry-after"])
    assert client.transport.attempts == tries  # retries, or fewer once max_wait would pass
    assert slept == [wait] * (tries - 1)


class _Busy(http.server.BaseHTTPRequestHandler):
    """Answers 503 busy (Retry-After: 2) to the first ``busy`` requests, then an answer."""

    busy = 2
    seen = 0

    def do_POST(self) -> None:
        self.rfile.read(int(self.headers["Content-Length"]))
        type(self).seen += 1
        if type(self).seen <= self.busy:
            body = json.dumps({"status": 503, "code": "busy", "detail": "busy", "errors": []})
            self.send_response(503)
            self.send_header("Content-Type", "application/problem+json")
            self.send_header("Retry-After", "2")
        else:
            body = json.dumps({"ok": True})
            self.send_response(200)
            self.send_header("Content-Type", "application/json")
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body.encode())

    def log_message(self, *args: Any) -> None:
        pass


@pytest.mark.parametrize(("retries", "answered"), [(2, True), (1, False)])
def test_a_busy_server_is_tried_again_until_it_answers(retries: int, answered: bool) -> None:
    _Busy.seen = 0
    with http.server.ThreadingHTTPServer(("127.0.0.1", 0), _Busy) as server:
        threading.Thread(target=server.serve_forever, daemon=True).start()
        slept: list[float] = []
        t = Transport(
            f"http://127.0.0.1:{server.server_address[1]}", None, 10, retries, 60, slept.append
        )
        try:
            if answered:  # two busy answers, then the answer: within two retries
                assert t.send("POST", "/v1/predict", b"{}", "application/json") == {"ok": True}
            else:
                with pytest.raises(ProblemError, match="busy"):
                    t.send("POST", "/v1/predict", b"{}", "application/json")
        finally:
            server.shutdown()
    assert slept == [2.0] * retries


# -- chunks


def _check_same(chunked: Result, whole: Result, bounds_exact: bool) -> None:
    a, b = chunked.records(), whole.records()
    assert len(a) == len(b)
    for key in ("value", "std_error", "flags"):
        assert [r[key] for r in a] == [r[key] for r in b], key  # identical
    assert chunked.warnings == whole.warnings
    for key in ("lower", "upper"):
        x = np.array([r[key] for r in a], dtype=float)
        y = np.array([r[key] for r in b], dtype=float)
        if bounds_exact:
            assert np.array_equal(x, y), key
        else:  # rounding only: residuals of the one fixed candidate (nearwise.client.session)
            assert_allclose(x, y, rtol=0, atol=1e-12, err_msg=key)


CHUNKED = [
    ("knn", {}),
    ("knn", {"interval": {"adaptive": True}}),
    ("linear", {"grid": {"degree": [1, 2, 3]}}),
    ("spline", {}),
    ("additive", {}),
    ("auto", {"tuning": {"folds": 4, "seed": 7}}),
]


@pytest.mark.parametrize("chunks", ["fixed", "exact"])
@pytest.mark.parametrize(("method", "fields"), CHUNKED)
def test_a_query_in_chunks_gives_the_numbers_of_one_request(
    url: str, method: str, fields: dict[str, Any], chunks: str
) -> None:
    train, query = frames(m=200)
    whole = Client(url).predict(train, "y", query, method=method, **fields)
    client = Client(url, chunk_rows=64, chunks=chunks)
    chunked = client.predict(train, "y", query, method=method, **fields)
    assert len(chunked.answers) == 4 and len(whole.answers) == 1  # 64 + 64 + 64 + 8 rows
    for later in chunked.answers[1:]:  # tuned once: the method and parameters were fixed
        assert later["method"] == whole.method and later["params"] == whole.params
        path = later["tuning"]["path"]
        assert path == (whole.tuning["path"] if chunks == "exact" else path[:1])
    assert chunked.tuning == whole.tuning and chunked.params == whole.params
    _check_same(chunked, whole, bounds_exact=chunks == "exact" or whole.method == "knn")
    assert chunked.predictions.index.equals(query.index)


def test_compare_and_locality_in_chunks(url: str) -> None:
    train, query = frames(m=200)
    whole = Client(url).compare(train, "y", query, methods=["knn", "linear"])
    client = Client(url, chunk_rows=64, chunks="exact")
    chunked = client.compare(train, "y", query, methods=["knn", "linear"])
    assert len(chunked.answers) == 4
    assert chunked.answer["ranking"] == whole.answer["ranking"]
    _check_same(chunked, whole, bounds_exact=True)
    whole = Client(url).locality(train, query, features=["a", "b"])
    chunked = Client(url, chunk_rows=64).locality(train, query, features=["a", "b"])
    assert len(chunked.answers) == 4
    assert chunked.answer == whole.answer
