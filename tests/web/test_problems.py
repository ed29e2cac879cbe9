"""Problem details: JSON Pointers, CSV places, and form-field decoding into the same paths."""

from __future__ import annotations

import pytest

from nearwise.core.errors import Where
from nearwise.web.csvio import CsvPart
from nearwise.web.forms import collect
from nearwise.web.problems import error_entry, pointer
from nearwise.web.schemas import PredictFields


@pytest.mark.parametrize(
    ("path", "expected"),
    [
        ((), ""),
        (("train", "rows", 12, 1), "/train/rows/12/1"),
        (("params", "a/b~c"), "/params/a~1b~0c"),
    ],
)
def test_pointer_follows_rfc_6901(path: tuple, expected: str) -> None:
    assert pointer(path) == expected


def test_csv_places_use_part_line_and_column() -> None:
    part = CsvPart("train", b'x,y\n1,2\n"multi\nline",3\n4,5\n', ("x", "y"))
    parts = {"train": part}
    assert error_entry(Where(("train", "rows", 2, 1), "bad"), parts) == {
        "part": "train",
        "line": 5,
        "column": "y",
        "message": "bad",
    }
    assert error_entry(Where(("train", "columns", 0), "dup"), parts) == {
        "part": "train",
        "line": 1,
        "column": "x",
        "message": "dup",
    }
    assert error_entry(Where(("train",), "big"), parts) == {"part": "train", "message": "big"}
    assert error_entry(Where(("params", "k"), "no"), parts) == {
        "pointer": "/params/k",
        "message": "no",
    }


@pytest.mark.parametrize(
    ("fields", "expected"),
    [
        ([("features", ["a,b"])], {"features": ["a", "b"]}),
        ([("features", ['["a,b", "c"]'])], {"features": ["a,b", "c"]}),
        ([("features", ["a,b", "c"])], {"features": ["a,b", "c"]}),
        ([("grid.k", ["1,3,5"])], {"grid": {"k": [1, 3, 5]}}),
        ([("grid.k", ["[1, 2.5]"])], {"grid": {"k": [1, 2.5]}}),
        (
            [("params.weights", ["distance"]), ("params.k", ["7"])],
            {"params": {"weights": "distance", "k": 7}},
        ),
        ([("params.interactions", ["false"])], {"params": {"interactions": False}}),
        ([("target", ["2020"]), ("method", ["knn"])], {"target": "2020", "method": "knn"}),
        (
            [("tuning.folds", ["5"]), ("tuning.scheme", ["loo"])],
            {"tuning": {"folds": 5, "scheme": "loo"}},
        ),
        ([("tuning.folds", ["five"])], {"tuning": {"folds": "five"}}),
        ([("interval.level", ["0.8"])], {"interval": {"level": 0.8}}),
    ],
)
def test_form_fields_decode_to_the_json_document(fields: list, expected: dict) -> None:
    assert collect(fields, PredictFields()) == expected


@pytest.mark.parametrize(
    "fields", [[("method", ["a", "b"])], [("tuning", ["x"]), ("tuning.folds", ["3"])]]
)
def test_form_fields_given_twice_are_refused(fields: list) -> None:
    from nearwise.core.errors import InvalidValue

    with pytest.raises(InvalidValue, match="more than once"):
        collect(fields, PredictFields())
