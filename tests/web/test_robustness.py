"""No input reaches a 500: odd bodies, odd values and seeded random mutations of valid ones."""

from __future__ import annotations

import copy
import json
import random
from typing import Any

import pytest
from webhelpers import body

ODD_JSON = {
    "deep": b"[" * 100_000 + b"]" * 100_000,
    "deep-cell": b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,'
    + b"[" * 900
    + b"]" * 900
    + b"]]}}",
    "long-int-cell": b'{"method":"knn","target":"y","train":{"columns":["x","y"],"rows":[[1,'
    + b"1" * 5000
    + b"]]}}",
    "long-int-param": b'{"method":"knn","target":"y","params":{"k":'
    + b"9" * 5000
    + b'},"train":{"columns":["x","y"],"rows":[[1,2]]}}',
    "lone-surrogate": b'{"method":"\\ud800","target":"y","train":{"columns":["x","y"],'
    b'"rows":[[1,2]]}}',
    "nul-in-name": b'{"method":"knn","target":"y\\u0000","train":{"columns":["x","y"],'
    b'"rows":[[1,2]]}}',
}


@pytest.mark.parametrize("case", ODD_JSON)
def test_odd_json_bodies_are_answered_below_500(client, case: str) -> None:
    resp = client.post("/v1/predict", data=ODD_JSON[case], content_type="application/json")
    assert 400 <= resp.status_code < 500, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"


ODD_QUERIES = [
    "method=knn&target=y&grid.k=" + "[" * 100_000 + "]" * 100_000,
    "method=knn&target=y&params.k=" + "[" * 5000,
    "method=knn&target=y&tuning.folds=" + "9" * 5000,
    "method=knn&target=y&features=%FF%FE",
    "method=knn&target=y&tuning.folds=NaN&interval.level=Infinity",
    "method=knn&target=y&.=1&..=2&tuning.=3",
]


@pytest.mark.parametrize("query", ODD_QUERIES)
def test_odd_query_strings_are_answered_below_500(client, query: str) -> None:
    resp = client.post(f"/v1/predict?{query}", data=b"x,y\n1,2\n2,3\n", content_type="text/csv")
    assert 400 <= resp.status_code < 500, resp.get_data(as_text=True)


POOL: list[Any] = [
    None,
    True,
    False,
    0,
    -1,
    1,
    2,
    3,
    7,
    2.5,
    -0.0,
    1e-320,
    10**20,
    "",
    "x",
    "knn",
    "spline",
    "linear",
    [],
    [1],
    [[1, 2]],
    {},
    {"a": 1},
    "kfold",
    "loo",
    "gcv",
    "min",
    "mae",
    "y",
    "x",
    0.5,
    50,
    51,
]


def leaves(node: Any, path: tuple = ()) -> list[tuple]:
    if isinstance(node, dict):
        return [path] + [p for k, v in node.items() for p in leaves(v, (*path, k))]
    if isinstance(node, list):
        return [path] + [p for i, v in enumerate(node) for p in leaves(v, (*path, i))]
    return [path]


def mutate(doc: dict[str, Any], rng: random.Random) -> dict[str, Any]:
    doc = copy.deepcopy(doc)
    for _ in range(rng.randint(1, 3)):
        path = rng.choice([p for p in leaves(doc) if p])
        parent = doc
        for key in path[:-1]:
            parent = parent[key]
        if rng.random() < 0.15 and isinstance(parent, dict):
            del parent[path[-1]]
        else:
            parent[path[-1]] = copy.deepcopy(rng.choice(POOL))
    return doc


SEEDS = range(150)


@pytest.mark.parametrize("seed", SEEDS)
def test_mutated_requests_never_500(client, seed: int) -> None:
    rng = random.Random(seed)
    method = ["knn", "linear", "spline"][seed % 3]
    rows = [[x / 3.0, (x % 7) / 2.0, float(x % 5)] for x in range(24)]
    base = body(
        method,
        train={"columns": ["x", "z", "y"], "rows": rows},
        query={"columns": ["x", "z"], "rows": [[1.0, 2.0], [3.5, 0.5]]},
        features=["x"],
        params={},
        grid={},
        tuning={"folds": 4, "seed": 1},
    )
    doc = mutate(base, rng)
    resp = client.post("/v1/predict", data=json.dumps(doc), content_type="application/json")
    assert resp.status_code < 500, (doc, resp.get_data(as_text=True))


@pytest.mark.parametrize("method", ["knn", "linear", "spline"])
def test_extreme_magnitudes_never_500(client, method: str) -> None:
    rows = [[x / 3.0, float(x % 5)] for x in range(24)]
    rows[3][1] = 1e308
    resp = client.post(
        "/v1/predict", json=body(method, train={"columns": ["x", "y"], "rows": rows})
    )
    assert resp.status_code == 422, resp.get_data(as_text=True)
    assert resp.get_json()["errors"][0]["pointer"] == "/train/rows/3/1"


@pytest.mark.parametrize("seed", range(100))
def test_mutated_csv_never_500(client, seed: int) -> None:
    rng = random.Random(seed)
    text = bytearray(b"x,g,y\n" + b"".join(b"%d.5,a%d,%d\n" % (i, i % 3, i % 4) for i in range(20)))
    for _ in range(rng.randint(1, 4)):
        text[rng.randrange(len(text))] = rng.choice(b',"\n\r\x00\xff .-eE9a_')
    url = "/v1/predict?method=knn&target=y&tuning.group_by=g&tuning.folds=3"
    resp = client.post(url, data=bytes(text), content_type="text/csv")
    assert resp.status_code < 500, (bytes(text), resp.get_data(as_text=True))
