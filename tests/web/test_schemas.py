"""The request envelope: unknown fields, strict types and pointers to each fault."""

from __future__ import annotations

import pytest
from webhelpers import body, pointers, problem


@pytest.mark.parametrize(
    ("changes", "pointer"),
    [
        ({"bogus": 1}, "/bogus"),
        ({"tuning": {"fold": 3}}, "/tuning/fold"),
        ({"interval": {"level": 0.9, "width": 2}}, "/interval/width"),
        ({"train": {"columns": ["x", "y"], "rows": [], "extra": 1}}, "/train/extra"),
        ({"method": 3}, "/method"),
        ({"method": None}, "/method"),
        ({"target": ["y"]}, "/target"),
        ({"features": []}, "/features"),
        ({"features": ["x", 2]}, "/features/1"),
        ({"tuning": {"folds": True}}, "/tuning/folds"),
        ({"tuning": {"folds": 5.0}}, "/tuning/folds"),
        ({"tuning": {"folds": "5"}}, "/tuning/folds"),
        ({"tuning": {"folds": 1}}, "/tuning/folds"),
        ({"tuning": {"repeats": 21}}, "/tuning/repeats"),
        ({"tuning": {"seed": -1}}, "/tuning/seed"),
        ({"tuning": {"seed": 2**32}}, "/tuning/seed"),
        ({"tuning": {"scheme": "bootstrap"}}, "/tuning/scheme"),
        ({"tuning": {"rule": "max"}}, "/tuning/rule"),
        ({"tuning": {"metric": "mse"}}, "/tuning/metric"),
        ({"tuning": "kfold"}, "/tuning"),
        ({"interval": {"level": 1}}, "/interval/level"),
        ({"interval": {"level": 0}}, "/interval/level"),
        ({"interval": {"level": True}}, "/interval/level"),
        ({"interval": {"kind": "bayes"}}, "/interval/kind"),
        ({"params": {"k": [3]}}, "/params/k"),
        ({"params": {"k": None}}, "/params/k"),
        ({"params": {"k": {"a": 1}}}, "/params/k"),
        ({"params": []}, "/params"),
        ({"grid": {"k": []}}, "/grid/k"),
        ({"grid": {"k": [1, True]}}, "/grid/k/1"),
        ({"grid": {"k": [1, "3"]}}, "/grid/k/1"),
        ({"grid": {"k": list(range(1, 202))}}, "/grid/k"),
        ({"grid": {"k": 3}}, "/grid/k"),
        ({"train": {"columns": "x,y", "rows": []}}, "/train/columns"),
        ({"train": {"columns": [], "rows": []}}, "/train/columns"),
        ({"train": {"rows": []}}, "/train/columns"),
        ({"train": None}, "/train"),
        ({"query": {"columns": ["x"]}}, "/query/rows"),
    ],
)
def test_envelope_faults_are_422_with_pointer(client, changes: dict, pointer: str) -> None:
    doc = problem(client.post("/v1/predict", json=body(**changes)), 422)
    assert pointer in pointers(doc), doc


@pytest.mark.parametrize("missing", ["method", "target", "train"])
def test_required_fields(client, missing: str) -> None:
    doc = body()
    del doc[missing]
    assert f"/{missing}" in pointers(problem(client.post("/v1/predict", json=doc), 422))


def test_all_faults_are_listed(client) -> None:
    doc = problem(client.post("/v1/predict", json=body(bogus=1, tuning={"folds": 0})), 422)
    assert set(pointers(doc)) == {"/bogus", "/tuning/folds"}


@pytest.mark.parametrize(
    ("changes", "pointer"),
    [
        ({"method": "forest"}, "/method"),
        ({"params": {"kk": 3}}, "/params/kk"),
        ({"target": "z"}, "/target"),
        ({"features": ["w"]}, "/features/0"),
        ({"interval": {"kind": "model"}}, "/interval/kind"),
    ],
)
def test_core_faults_are_422_with_the_core_pointer(client, changes: dict, pointer: str) -> None:
    doc = problem(client.post("/v1/predict", json=body(**changes)), 422)
    assert pointer in pointers(doc), doc


def test_large_and_deep_values_never_500(client) -> None:
    deep: object = 1
    for _ in range(50):
        deep = [deep]
    for changes in (
        {"params": {"k": 10**30}},
        {"params": {"k": 1e308}},
        {"grid": {"k": [1e300]}},
        {"train": {"columns": ["x", "y"], "rows": [deep]}},
        {"params": {"": 1}},
    ):
        resp = client.post("/v1/predict", json=body(**changes))
        assert resp.status_code < 500, (changes, resp.get_data(as_text=True))
