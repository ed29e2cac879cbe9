"""SVG pictures: the expected elements are there, found by their ids, and output is stable."""

from __future__ import annotations

import os
import subprocess
import sys
import time
import xml.etree.ElementTree as ET
from concurrent.futures import ThreadPoolExecutor
from dataclasses import replace

import matplotlib
import numpy as np
import pytest

from nearwise.core.compare import compare
from nearwise.core.data import Table
from nearwise.core.pipeline import run
from nearwise.core.results import PathEntry
from nearwise.core.spec import Job, TuningSpec
from nearwise.web.pictures import MEDIA_TYPE, compare_svg, predict_svg

SVG = "{http://www.w3.org/2000/svg}"
METHODS = ["knn", "linear", "spline", "additive"]
QUERY = np.array([[2.0], [5.0], [12.5], [-3.0]])  # the last two lie beyond the data


def _job(X, y, Xq=None, method="spline", names=("x", "y"), **kw):
    cols = (*[f"{names[0]}{j}" if X.shape[1] > 1 else names[0] for j in range(X.shape[1])],)
    cols = (*cols, names[1])
    query = None if Xq is None else Table("query", cols[:-1], Xq)
    return Job(method, Table("train", cols, np.column_stack([X, y])), names[1], query=query, **kw)


def _wave(n=60, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 10, (n, 1))
    return X, np.sin(X[:, 0]) + rng.normal(0, 0.2, n)


def _parse(svg: str) -> ET.Element:
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG}svg"
    return root


def _ids(root: ET.Element) -> dict[str, ET.Element]:
    return {el.get("id"): el for el in root.iter() if el.get("id")}


def _texts(root: ET.Element) -> list[str]:
    return ["".join(t.itertext()).strip() for t in root.iter(f"{SVG}text")]


def _marks(group: ET.Element) -> int:
    """Markers drawn in a collection's group: <use> references, or plain paths outside <defs>."""
    uses = list(group.iter(f"{SVG}use"))
    if uses:
        return len(uses)
    in_defs = {id(p) for d in group.iter(f"{SVG}defs") for p in d.iter(f"{SVG}path")}
    return sum(1 for p in group.iter(f"{SVG}path") if id(p) not in in_defs)


def _marker_shape(group: ET.Element) -> str:
    """The path data of the marker a scatter group draws."""
    defs = [p.get("d") for d in group.iter(f"{SVG}defs") for p in d.iter(f"{SVG}path")]
    assert defs, "expected a marker definition"
    return " ".join(defs[0].split())


@pytest.fixture(scope="module")
def wave():
    return _wave()


@pytest.mark.parametrize("method", METHODS)
def test_one_feature_predict_draws_data_fit_band_queries_and_tuning(method, wave):
    X, y = wave
    result = run(_job(X, y, QUERY, method=method, curve_points=80))
    svg = predict_svg(result, X[:, 0], y, QUERY[:, 0])
    root = _parse(svg)
    ids = _ids(root)
    for gid in (
        "title", "fit-panel", "cv-panel", "data", "fit", "band", "query", "query-bars",
        "flagged", "flagged-bars", "cv-path", "cv-se", "best", "chosen", "chosen-note",
        "legend-fit", "legend-cv", "warnings",
    ):  # fmt: skip
        assert gid in ids, gid
    assert ids["fit"].find(f"{SVG}path") is not None  # the curve is one path
    band_paths = list(ids["band"].iter(f"{SVG}path"))
    assert band_paths and any("fill: #1f5fa8" in (p.get("style") or "") for p in ids["band"].iter())
    assert _marks(ids["data"]) == X.shape[0]
    flagged = [bool(f) for f in result.predictions.flags]
    assert flagged == [False, False, True, True]
    assert _marks(ids["query"]) == 2 and _marks(ids["flagged"]) == 2
    assert len(list(ids["query-bars"].iter(f"{SVG}path"))) == 2
    assert _marker_shape(ids["query"]) != _marker_shape(ids["flagged"])  # a distinct marker
    texts = _texts(root)
    for label in (
        "x", "y", "effective degrees of freedom", "CV error (rmse)", "training data",
        "90% interval", f"fit ({method})", "query with interval", "lowest error",
        "chosen (one-SE rule)", "CV error ± 1 SE",
    ):  # fmt: skip
        assert label in texts, label
    codes = sorted({c for f in result.predictions.flags for c in f})
    legend = next(t for t in texts if t.startswith("flagged query: "))
    assert sorted(legend.removeprefix("flagged query: ").split(", ")) == codes
    assert any(t.startswith("query row 2: ") and "outside_range" in t for t in texts)
    assert f"{method} fit of y against x" in texts
    assert root.find(f"{SVG}title").text == f"{method} fit of y against x"


def test_the_chosen_and_best_marks_sit_on_their_candidates(wave):
    X, y = wave
    result = run(_job(X, y, method="spline", curve_points=40))
    root = _parse(predict_svg(result, X[:, 0], y, None))
    texts = _texts(root)
    assert f"smoothing = {result.params['smoothing']:.4g}" in texts
    assert "lowest error + 1 SE" in texts  # the one-standard-error rule's threshold
    assert "one-se-line" in _ids(root)
    chosen = run(_job(X, y, method="spline", tuning=TuningSpec(rule="min")))
    ids = _ids(_parse(predict_svg(chosen, X[:, 0], y, None)))
    assert "one-se-line" not in ids and {"best", "chosen"} <= set(ids)


def test_two_features_get_the_tuning_chart_only():
    rng = np.random.default_rng(3)
    X = rng.uniform(0, 1, (80, 2))
    y = X.sum(axis=1) + rng.normal(0, 0.1, 80)
    for method in METHODS:
        result = run(_job(X, y, X[:3], method=method, curve_points=50))
        assert result.curve is None
        root = _parse(predict_svg(result, None, None, None))
        ids = _ids(root)
        assert {"cv-panel", "cv-path", "best", "chosen"} <= set(ids), method
        assert not {"fit-panel", "data", "fit", "band", "query"} & set(ids), method
        texts = _texts(root)
        assert "effective degrees of freedom" in texts and "CV error (rmse)" in texts
        assert f"{method} fit of y on 2 features" in texts


def test_output_is_deterministic_and_leaves_matplotlib_settings_alone(wave):
    X, y = wave
    result = run(_job(X, y, QUERY, method="knn", curve_points=60))
    salt = matplotlib.rcParams["svg.hashsalt"]
    first = predict_svg(result, X[:, 0], y, QUERY[:, 0])
    with ThreadPoolExecutor(4) as pool:
        again = list(pool.map(lambda _: predict_svg(result, X[:, 0], y, QUERY[:, 0]), range(3)))
    assert all(a == first for a in again)
    assert "<dc:date>" not in first
    assert matplotlib.rcParams["svg.hashsalt"] == salt
    many = compare(_job(X, y, curve_points=60))
    assert compare_svg(many, X[:, 0], y) == compare_svg(many, X[:, 0], y)


def test_compare_draws_every_method_on_one_chart(wave):
    X, y = wave
    result = compare(_job(X, y, curve_points=60))
    methods = [r.method for r in result.ranking]
    assert set(methods) == set(METHODS)
    root = _parse(compare_svg(result, X[:, 0], y))
    ids = _ids(root)
    assert {"fit-panel", "cv-panel", "data", "recommended", "legend-fit", "legend-cv"} <= set(ids)
    for m in methods:
        assert ids[f"fit-{m}"].find(f"{SVG}path") is not None, m
        assert ids[f"cv-path-{m}"].find(f"{SVG}path") is not None, m
        assert f"chosen-{m}" in ids, m
    texts = _texts(root)
    assert f"{result.recommended} (recommended)" in texts
    assert f"recommended: {result.recommended}" in texts
    assert "effective degrees of freedom" in texts and "CV error (rmse)" in texts
    assert "each method's choice" in texts


def test_compare_in_two_dimensions_draws_the_paths_only():
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 1, (90, 2))
    result = compare(_job(X, X[:, 0] ** 2 + rng.normal(0, 0.1, 90), curve_points=30))
    ids = _ids(_parse(compare_svg(result, None, None)))
    assert "fit-panel" not in ids and "recommended" in ids
    assert all(f"cv-path-{r.method}" in ids for r in result.ranking)


def test_flagged_training_rows_are_circled_when_there_is_no_query():
    X, y = _wave(seed=5)
    y = y.copy()
    y[7] += 6.0  # one wild reading
    result = run(_job(X, y, method="spline", curve_points=40))
    assert "unusual_response" in result.predictions.flags[7]
    root = _parse(predict_svg(result, X[:, 0], y, None))
    ids = _ids(root)
    assert _marks(ids["flagged"]) >= 1 and "query" not in ids
    texts = _texts(root)
    assert any(t.startswith("flagged training row: ") and "unusual_response" in t for t in texts)
    assert any(t.startswith("row 7: unusual_response") for t in texts)


def test_dropped_rows_are_matched_by_row_number():
    X, y = _wave(seed=6)
    y = y.copy()
    y[3] = np.nan  # no target: left out of the fit, still predicted
    y[9] += 6.0
    result = run(_job(X, y, method="spline", curve_points=40))
    kept = np.flatnonzero(np.isfinite(y))
    svg = predict_svg(result, X[kept, 0], y[kept], None, train_rows=kept)
    assert any(t.startswith("row 9: unusual_response") for t in _texts(_parse(svg)))


def test_unbounded_intervals_are_clipped_to_the_panel():
    X, y = _wave(n=8, seed=7)  # too few rows to bound a 90 % interval on both sides
    result = run(_job(X, y, QUERY, method="linear", curve_points=30))
    assert any(w.code == "interval_unbounded" for w in result.warnings)
    root = _parse(predict_svg(result, X[:, 0], y, QUERY[:, 0]))
    for el in root.iter(f"{SVG}path"):
        assert "inf" not in (el.get("d") or "").lower() and "nan" not in (el.get("d") or "")
    assert "interval_unbounded" in " ".join(_texts(root))


def test_names_are_shown_as_written_never_as_formulas(wave):
    X, y = wave
    names = ("price $ per <kWh> & more $", "cost_$total$")
    result = run(_job(X, y, QUERY, method="linear", names=names, curve_points=30))
    texts = _texts(_parse(predict_svg(result, X[:, 0], y, QUERY[:, 0])))
    assert "cost_$total$" in texts
    assert any(t.startswith("price $ per <kWh>") for t in texts)


def test_candidates_without_df_fall_back_to_their_order(wave):
    X, y = wave
    result = run(_job(X, y, method="spline", tuning=TuningSpec(metric="mae")))
    path = tuple(PathEntry(e.params, e.error, e.error_se, None) for e in result.tuning.path)
    result = replace(result, tuning=replace(result.tuning, path=path))
    root = _parse(predict_svg(result, X[:, 0], y, None))
    texts = _texts(root)
    assert "candidate (simplest first)" in texts and "CV error (mae)" in texts
    assert {"cv-path", "best", "chosen"} <= set(_ids(root))


@pytest.mark.parametrize("scheme", ["loo", "gcv"])
def test_tuning_scheme_is_named(scheme, wave):
    X, y = wave
    result = run(_job(X, y, method="spline", tuning=TuningSpec(scheme=scheme)))
    words = {"loo": "leave-one-out", "gcv": "generalized"}[scheme]
    texts = _texts(_parse(predict_svg(result, X[:, 0], y, None)))
    assert any(t.startswith("Tuning smoothing by " + words) for t in texts)


def test_pictures_need_no_pyplot_and_no_display():
    code = (
        "import sys, nearwise.web.pictures\n"
        "assert 'matplotlib.pyplot' not in sys.modules\n"
        "import matplotlib\n"
        "assert nearwise.web.pictures.MEDIA_TYPE == 'image/svg+xml'\n"
    )
    env = {k: v for k, v in os.environ.items() if k not in ("MPLBACKEND", "DISPLAY")}
    subprocess.run([sys.executable, "-c", code], check=True, env=env)
    assert MEDIA_TYPE == "image/svg+xml"


def test_missing_flags_or_a_mismatched_query_column_still_draw(wave):
    X, y = wave
    result = run(_job(X, y, QUERY, method="knn", curve_points=30))
    bare = replace(result, predictions=replace(result.predictions, flags=()))
    ids = _ids(_parse(predict_svg(bare, X[:, 0], y, QUERY[:, 0])))
    assert _marks(ids["query"]) == 4 and "flagged" not in ids
    ids = _ids(_parse(predict_svg(result, X[:, 0], y, QUERY[:2, 0])))
    assert "query" not in ids and {"data", "fit", "band"} <= set(ids)


def test_predict_and_compare_answer_svg_over_http(client) -> None:
    """Accept: image/svg+xml or format=svg on the routes; a one-feature fit draws its curve."""
    import xml.etree.ElementTree as ET

    from webhelpers import body

    for kwargs in ({"headers": {"Accept": "image/svg+xml"}}, {"query_string": {"format": "svg"}}):
        resp = client.post("/v1/predict", json=body("spline"), **kwargs)
        assert resp.status_code == 200 and resp.mimetype == "image/svg+xml"
        gids = {e.get("id") for e in ET.fromstring(resp.data).iter()}
        assert {"data", "fit", "band", "cv-path"} <= gids
    request = body()
    request.pop("method")
    resp = client.post("/v1/compare", json=request, query_string={"format": "svg"})
    assert resp.status_code == 200 and resp.mimetype == "image/svg+xml"
    assert b"fit-linear" in resp.data
    bad = client.post("/v1/predict", json=body(), query_string={"format": "png"})
    assert bad.status_code == 422


# --------------------------------------------------------------------------- order_by


def _timed_body(kind: str, scheme: str | None, n: int = 120, seed: int = 11) -> dict:
    """A predict request on rows placed in time by ``t`` (numbers or ISO dates): a smooth curve
    of ``x`` plus AR(1) noise; one row has no target and is left out of the fit."""
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 10, n))
    noise = np.zeros(n)
    for i in range(1, n):
        noise[i] = 0.7 * noise[i - 1] + rng.normal(0, 0.2)
    y = [float(v) for v in np.sin(x) + noise]
    y[17] = None
    day = np.datetime64("2026-01-01")
    t = [float(i) for i in range(n)] if kind == "number" else [str(day + i) for i in range(n)]
    rows = [[a, float(b), c] for a, b, c in zip(t, x, y, strict=True)]
    tuning = {"order_by": "t"} if scheme is None else {"order_by": "t", "scheme": scheme}
    return {
        "method": "spline",
        "target": "y",
        "features": ["x"],
        "train": {"columns": ["t", "x", "y"], "rows": rows},
        "tuning": tuning,
    }


def _group_texts(group: ET.Element) -> list[str]:
    return ["".join(t.itertext()).strip() for t in group.iter(f"{SVG}text")]


@pytest.mark.parametrize(
    ("kind", "scheme"), [("number", "window"), ("date", "blocks"), ("date", None)]
)
def test_order_by_adds_the_residuals_over_time(client, kind, scheme) -> None:
    request = _timed_body(kind, scheme)
    answer = client.post("/v1/predict", json=request)
    assert answer.status_code == 200, answer.get_data(as_text=True)
    doc = answer.get_json()
    resp = client.post("/v1/predict", json=request, headers={"Accept": "image/svg+xml"})
    assert resp.status_code == 200 and resp.mimetype == "image/svg+xml"
    root = _parse(resp.get_data(as_text=True))
    ids = _ids(root)
    for gid in ("fit-panel", "cv-panel", "residuals-over-time", "residual-zero", "lag1-note"):
        assert gid in ids, gid
    # one point per training row with a finite out-of-fold residual (not the row without y)
    finite = [p["cv_residual"] for p in doc["predictions"] if p.get("cv_residual") is not None]
    assert len(finite) == len(request["train"]["rows"]) - 1
    assert _marks(ids["residual-points"]) == len(finite)
    panel = _group_texts(ids["residuals-over-time"])
    assert "t" in panel and "out-of-fold residual" in panel
    tuning = doc["tuning"]
    note = _group_texts(ids["lag1-note"])
    assert note[0] == f"lag-1 autocorrelation {tuning['dependence']['lag1']:.2f}"
    if scheme is None:
        assert len(note) == 1  # kfold: no gap to tell
    else:
        words = "window" if scheme == "window" else f"{tuning['folds']} blocks"
        assert note[1].startswith(f"{words}, gap {tuning['gap']} step")
    assert not any("None" in t for t in _texts(root))  # the scheme is named in the tuning title
    if kind == "date":
        assert {"Jan", "Feb", "Mar", "Apr"} <= set(panel)  # dates, not seconds since 1970
        assert any(t.startswith("2026") for t in panel)  # the year, once, as the axis offset


def test_residuals_over_time_skip_rows_without_a_residual(wave) -> None:
    X, y = wave
    t = np.arange(X.shape[0], dtype=float)[:, None]
    job = _job(np.column_stack([X, t]), y, method="linear")
    job = replace(job, features=("x0",), tuning=TuningSpec(order_by="x1", scheme="window"))
    result = run(job)
    assert result.series is not None and result.series["kind"] == "number"
    resid = np.asarray(result.series["residual"], dtype=float).copy()
    assert np.isfinite(resid).all()
    resid[[0, 5, 9]] = np.nan
    holed = replace(result, series={**result.series, "residual": resid, "lag1": None})
    ids = _ids(_parse(predict_svg(holed, None, None, None)))
    assert _marks(ids["residual-points"]) == resid.size - 3
    assert "fit-panel" not in ids and "cv-panel" in ids
    note = _group_texts(ids["lag1-note"])
    assert note[0] == "lag-1 autocorrelation: too few time steps"
    assert note[1].startswith("window, gap ")


def test_without_order_by_there_is_no_residuals_panel(client, wave) -> None:
    from webhelpers import body

    resp = client.post("/v1/predict", json=body("spline"), headers={"Accept": "image/svg+xml"})
    root = _parse(resp.get_data(as_text=True))
    ids = _ids(root)
    assert {"fit-panel", "cv-panel"} <= set(ids)
    assert not {"residuals-over-time", "residual-points", "lag1-note"} & set(ids)
    assert (root.get("width"), root.get("height")) == ("792pt", "403.2pt")  # 11 x 5.6 inches
    X, y = wave
    result = run(_job(X, y, method="knn"))
    assert result.series is None
    assert "residuals-over-time" not in _ids(_parse(predict_svg(result, X[:, 0], y, None)))


def test_dates_are_drawn_in_utc_whatever_the_machine_zone(client, monkeypatch) -> None:
    request = _timed_body("date", "window", n=40)
    headers = {"Accept": "image/svg+xml"}
    first = client.post("/v1/predict", json=request, headers=headers).get_data()
    monkeypatch.setenv("TZ", "Pacific/Kiritimati")  # UTC+14: any local reading shows
    time.tzset()
    try:
        again = client.post("/v1/predict", json=request, headers=headers).get_data()
    finally:
        monkeypatch.undo()
        time.tzset()
    assert again == first
