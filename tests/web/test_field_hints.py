"""Unknown fields point to where a field of that name belongs (issue 15, item 3).

Each case is a common misplacement: a field sent at the wrong level, a method parameter
outside `params`, a compare body sent to predict and back, a misspelt or wrongly cased
name. The answer is a 422 whose entry at the field's pointer names the right path; the
request itself is never repaired (nothing is fitted with the moved value).
"""

from __future__ import annotations

import pytest
from webhelpers import body, problem

from nearwise.web import field_hints

COMPARE = {"methods": ["knn", "linear"], "target": "y", "train": body()["train"]}


def _entry(doc: dict, pointer: str) -> str:
    found = [e["message"] for e in doc["errors"] if e.get("pointer") == pointer]
    assert found, doc
    return found[0]


@pytest.mark.parametrize(
    ("route", "sent", "pointer", "expected"),
    [
        # a tuning field at the top level
        ("/v1/predict", body(folds=3), "/folds", "`tuning.folds`"),
        ("/v1/predict", body(scheme="loo"), "/scheme", "`tuning.scheme`"),
        ("/v1/predict", body(seed=7), "/seed", "`tuning.seed`"),
        ("/v1/predict", body(order_by="t"), "/order_by", "`tuning.order_by`"),
        # an interval field at the top level, and inside `tuning`
        ("/v1/predict", body(level=0.9), "/level", "`interval.level`"),
        ("/v1/predict", body(tuning={"level": 0.9}), "/tuning/level", "`interval.level`"),
        # a tuning field inside `interval`
        ("/v1/predict", body(interval={"folds": 5}), "/interval/folds", "`tuning.folds`"),
        # method parameters outside `params`; a list of a tuned one belongs in `grid`
        ("/v1/predict", body(k=10), "/k", "`params.k` (a parameter of `knn`)"),
        ("/v1/predict", body(k=[5, 10]), "/k", "`grid.k`"),
        ("/v1/predict", body("linear", degree=2), "/degree", "`params.degree`"),
        ("/v1/predict", body(tuning={"k": 5}), "/tuning/k", "`params.k`"),
        ("/v1/predict", body("spline", smoothing=1.0), "/smoothing", "`params.smoothing`"),
        # predict and compare point to each other's field
        ("/v1/compare", {**COMPARE, "method": "knn"}, "/method", "compare takes `methods`"),
        ("/v1/predict", body(methods=["knn"]), "/methods", "predict takes one `method`"),
        # misspelt and wrongly cased names
        ("/v1/predict", body(taget="y"), "/taget", "`target`"),
        ("/v1/predict", body(tuning={"fold": 3}), "/tuning/fold", "`tuning.folds`"),
        ("/v1/predict", body(Features=["x"]), "/Features", "`features`"),
        ("/v1/predict", body(intervals={"level": 0.9}), "/intervals", "`interval`"),
    ],
)
def test_a_misplaced_field_names_the_right_path(client, route, sent, pointer, expected) -> None:
    doc = problem(client.post(route, json=sent), 422)
    message = _entry(doc, pointer)
    assert message.startswith("unknown field; ")
    assert expected in message, message
    assert expected in doc["detail"], doc["detail"]  # the only fault: the detail names it


def test_every_misplacement_is_reported_at_once(client) -> None:
    doc = problem(client.post("/v1/predict", json=body(folds=3, k=10, taget="y")), 422)
    assert "3 problem(s)" in doc["detail"]
    messages = {e["pointer"]: e["message"] for e in doc["errors"]}
    assert "`tuning.folds`" in messages["/folds"]
    assert "`params.k`" in messages["/k"]
    assert "`target`" in messages["/taget"]


def test_a_name_with_no_likely_place_keeps_the_plain_message(client) -> None:
    doc = problem(client.post("/v1/predict", json=body(zzqx=1)), 422)
    assert _entry(doc, "/zzqx") == (
        "unknown field; see the OpenAPI document for the fields offered"
    )


def test_an_unknown_method_parameter_is_left_to_the_core(client) -> None:
    # Inside `params` the method itself names what it takes (core/methods/base.py).
    doc = problem(client.post("/v1/predict", json=body(params={"kk": 3})), 422)
    assert "did you mean" not in _entry(doc, "/params/kk")


def test_the_spelling_threshold_just_inside_and_just_outside() -> None:
    # difflib's ratio: "targt" against "target" is 2*5/11 = 0.909 (inside); "tgt" against
    # "target" is 2*3/9 = 0.667, under CLOSE = 0.8 (outside).
    from nearwise.web.schemas import PredictRequest

    schema = PredictRequest()
    assert field_hints.hint(schema, ("targt",), {}) == "did you mean `target`?"
    assert field_hints.hint(schema, ("tgt",), {}) == ""
    # Among `tuning`'s fields: "fold" against "folds" is 2*4/9 = 0.889 (above); "fo" 2*2/7 = 0.571.
    assert field_hints.hint(schema, ("tuning", "fo"), {}) == ""
