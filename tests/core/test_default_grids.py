"""Audit of every method's default grid (issue 14, item 2): on the reference designs the choice
must not land at an end of the grid that is not the parameter's own limit (`tuning_at_edge`).

Designs: the turbine sample (samples/turbine_train.csv, 400 rows, wind speed and air density),
and surfaces on [0, 3]^p with noise sd 0.3, p = 1, 2, 3 and 300 or 3,000 rows: smooth,
sin(1.5 s), and rough, sin(6 s), with s the features' sum over sqrt(p) (common practice in
smoothing studies: one surface the methods can follow, one that strains them). Both rules
(one standard error, least error). The thin-plate spline (2 and 3 features) is audited by its
own tests; it is run here at 300 rows.

Grids known to put the choice at an edge on these designs are marked ``xfail(strict=True)``:
each names the edge, and the mark fails the day the grid is fixed, so that it is removed.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest

from nearwise.core.data import Table
from nearwise.core.pipeline import run
from nearwise.core.spec import Job, TuningSpec

ROOT = Path(__file__).resolve().parents[2]


def _turbine():
    with open(ROOT / "samples" / "turbine_train.csv", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))[1:]
    values = np.array([[float(c) for c in r[1:]] for r in rows])
    return Table("train", ("wind_ms", "air_density", "power_kw"), values), "power_kw"


def _surface(kind: str, n: int, p: int):
    rng = np.random.default_rng(3)
    X = rng.uniform(0, 3, (n, p))
    s = X.sum(axis=1) / np.sqrt(p)
    y = np.sin({"smooth": 1.5, "rough": 6.0}[kind] * s) + rng.normal(0, 0.3, n)
    return Table("train", (*[f"x{j}" for j in range(p)], "y"), np.column_stack([X, y])), "y"


DESIGNS = {"turbine": _turbine}
for _kind in ("smooth", "rough"):
    for _n in (300, 3000):
        for _p in (1, 2, 3):
            DESIGNS[f"{_kind}-{_n}-p{_p}"] = lambda k=_kind, n=_n, p=_p: _surface(k, n, p)

METHODS = {
    "knn": ("knn", {}),
    "linear": ("linear", {}),
    "ridge": ("linear", {"penalty": "ridge"}),
    "lasso": ("linear", {"penalty": "lasso"}),
    "spline": ("spline", {}),
    "additive": ("additive", {}),
}

DEGREES = "degrees 1..3 stop below a sine over this range: degree 3 is chosen"
RIDGE_LOW = "alpha_max / 10,000 is chosen: degree 1 wants least squares (alpha 0)"
RIDGE_TOP = "ridge's alpha_max (fit within 1 % of the mean) is not counted as a limit"
LASSO_LOW = "alpha_max / 10,000 is chosen: degree 1 wants least squares (alpha 0)"
ADD_TOP = "a sine of the sum is not additive: the simplest multiplier is chosen"
ADD_LOW = "the most flexible multiplier is chosen (1, at the basis's own limit)"
ADD_SMOOTH = "the simplest multiplier is chosen under the one-SE rule"
THIN_LOW = "thin-plate (helper A): the smallest lambda is chosen"

#: (design, method, rule) -> why the choice is at an edge (measured on these designs).
KNOWN = {
    **{(d, "linear", r): DEGREES for d in ("turbine",) for r in ("one_se", "min")},
    **{
        (f"smooth-{n}-p{p}", "linear", r): DEGREES
        for n in (300, 3000)
        for p in (1, 2, 3)
        for r in ("one_se", "min")
    },
    **{(f"rough-{n}-p1", "linear", r): DEGREES for n in (300, 3000) for r in ("one_se", "min")},
    ("rough-3000-p2", "linear", "min"): DEGREES,
    ("turbine", "ridge", "min"): RIDGE_LOW,
    **{(f"smooth-{n}-p{p}", "ridge", "min"): RIDGE_LOW for n in (300, 3000) for p in (1, 2, 3)},
    ("rough-3000-p1", "ridge", "min"): RIDGE_LOW,
    ("rough-300-p1", "ridge", "one_se"): RIDGE_TOP,
    ("rough-300-p2", "ridge", "one_se"): RIDGE_TOP,
    ("rough-300-p2", "ridge", "min"): RIDGE_TOP,
    ("rough-300-p3", "ridge", "one_se"): RIDGE_TOP,
    ("rough-3000-p2", "ridge", "one_se"): RIDGE_TOP,
    ("rough-3000-p3", "ridge", "one_se"): RIDGE_TOP,
    ("smooth-300-p1", "lasso", "min"): LASSO_LOW,
    ("rough-300-p1", "lasso", "min"): LASSO_LOW,
    ("rough-3000-p1", "lasso", "min"): LASSO_LOW,
    ("smooth-300-p2", "additive", "one_se"): ADD_SMOOTH,
    ("smooth-300-p3", "additive", "one_se"): ADD_SMOOTH,
    ("rough-300-p3", "additive", "one_se"): ADD_TOP,
    ("rough-300-p3", "additive", "min"): ADD_TOP,
    ("rough-3000-p3", "additive", "one_se"): ADD_TOP,
    ("rough-3000-p3", "additive", "min"): ADD_TOP,
    ("rough-3000-p1", "additive", "min"): ADD_LOW,
    ("rough-300-p2", "spline", "min"): THIN_LOW,
    ("rough-300-p3", "spline", "min"): THIN_LOW,
}


def _cases():
    for design in DESIGNS:
        for label in METHODS:
            if label == "spline" and "-3000-p1" not in design and "-300-" not in design:
                continue  # thin-plate above 300 rows: its own tests (an exact solve is slow)
            for rule in ("one_se", "min"):
                why = KNOWN.get((design, label, rule))
                marks = [pytest.mark.xfail(strict=True, reason=why)] if why else []
                yield pytest.param(design, label, rule, id=f"{design}-{label}-{rule}", marks=marks)


@pytest.mark.slow
@pytest.mark.parametrize(("design", "label", "rule"), list(_cases()))
def test_the_default_grid_does_not_put_the_choice_at_its_edge(design, label, rule) -> None:
    table, target = DESIGNS[design]()
    method, params = METHODS[label]
    result = run(Job(method, table, target, params=params, tuning=TuningSpec(rule=rule)))
    codes = [w.code for w in result.warnings]
    assert "tuning_at_edge" not in codes, (result.params, [e.params for e in result.tuning.path])
