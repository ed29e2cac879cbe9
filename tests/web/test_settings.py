"""Settings come from NEARWISE_* variables; a bad value names its variable."""

from __future__ import annotations

import pytest

from nearwise.web.app import create_app
from nearwise.web.settings import Settings, SettingsError


def test_defaults_need_no_variables() -> None:
    s = Settings.from_env({})
    assert s == Settings()
    assert s.bind == "127.0.0.1:8080"


def test_every_variable_is_read() -> None:
    env = {
        "NEARWISE_BIND": "0.0.0.0:9000",
        "NEARWISE_WORKERS": "3",
        "NEARWISE_THREADS": "8",
        "NEARWISE_MAX_BODY_BYTES": "1000",
        "NEARWISE_MAX_ROWS": "10",
        "NEARWISE_MAX_COLUMNS": "4",
        "NEARWISE_MAX_CELLS": "40",
        "NEARWISE_TIME_BUDGET_S": "2.5",
        "NEARWISE_API_KEYS": "a, b",
        "NEARWISE_CORS_ORIGINS": "*",
        "NEARWISE_LOG_LEVEL": "debug",
    }
    s = Settings.from_env(env)
    assert (s.bind, s.workers, s.threads) == ("0.0.0.0:9000", 3, 8)
    assert (s.max_body_bytes, s.max_rows, s.max_columns, s.max_cells) == (1000, 10, 4, 40)
    assert (s.time_budget_s, s.api_keys, s.cors_origins, s.log_level) == (
        2.5,
        ("a", "b"),
        ("*",),
        "DEBUG",
    )


@pytest.mark.parametrize(
    ("name", "value"),
    [
        ("NEARWISE_BIND", "8080"),
        ("NEARWISE_BIND", "localhost:0"),
        ("NEARWISE_BIND", "localhost:99999"),
        ("NEARWISE_BIND", "::1:80"),
        ("NEARWISE_WORKERS", "0"),
        ("NEARWISE_WORKERS", "two"),
        ("NEARWISE_THREADS", "-1"),
        ("NEARWISE_MAX_BODY_BYTES", "1e6"),
        ("NEARWISE_MAX_ROWS", ""),
        ("NEARWISE_MAX_COLUMNS", "4.0"),
        ("NEARWISE_MAX_CELLS", "1_000"),
        ("NEARWISE_TIME_BUDGET_S", "0"),
        ("NEARWISE_TIME_BUDGET_S", "inf"),
        ("NEARWISE_TIME_BUDGET_S", "nan"),
        ("NEARWISE_API_KEYS", "a,,b"),
        ("NEARWISE_CORS_ORIGINS", ","),
        ("NEARWISE_LOG_LEVEL", "loud"),
    ],
)
def test_bad_values_name_the_variable(name: str, value: str) -> None:
    with pytest.raises(SettingsError, match=name):
        Settings.from_env({name: value})


def test_create_app_fails_fast_on_a_bad_variable(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("NEARWISE_MAX_ROWS", "many")
    with pytest.raises(SettingsError, match="NEARWISE_MAX_ROWS"):
        create_app()


def test_ipv6_bind_is_accepted() -> None:
    assert Settings.from_env({"NEARWISE_BIND": "[::1]:8081"}).bind == "[::1]:8081"


def test_overrides_name_their_source() -> None:
    with pytest.raises(SettingsError, match="--workers"):
        Settings().with_overrides({"workers": "--workers"}, {"workers": "x"})


@pytest.mark.parametrize(
    ("name", "value"),
    [
        ("NEARWISE_FITS_PER_WORKER", "0"),
        ("NEARWISE_MAX_QUERY_ROWS", "-5"),
        ("NEARWISE_MAX_GRID", "lots"),
        ("NEARWISE_MAX_FOLD_FITS", "2.5"),
        ("NEARWISE_MAX_METHODS", ""),
        ("NEARWISE_MAX_COST_S", "-1"),
        ("NEARWISE_MAX_HULL_COST_S", "0"),
        ("NEARWISE_GRACEFUL_TIMEOUT_S", "10.5"),
        ("NEARWISE_OPEN_ENDPOINTS", "/v1/predict"),
        ("NEARWISE_METRICS_DIR", "relative/dir"),
    ],
)
def test_bad_limits_name_the_variable(name: str, value: str) -> None:
    with pytest.raises(SettingsError, match=name):
        Settings.from_env({name: value})


def test_the_hull_cost_cap_reaches_the_core_under_its_name() -> None:
    from nearwise.web.routes.predict import caps

    c = caps(Settings.from_env({"NEARWISE_MAX_HULL_COST_S": "2.5"}))
    assert c.hull_cost_s == 2.5 and c.label("hull_cost_s") == "NEARWISE_MAX_HULL_COST_S = 2.5"
    assert caps(Settings()).hull_cost_s == 5.0


def test_open_endpoints_may_be_emptied() -> None:
    assert Settings.from_env({"NEARWISE_OPEN_ENDPOINTS": ""}).open_endpoints == ()


def test_the_readme_documents_every_setting() -> None:
    from pathlib import Path

    readme = (Path(__file__).parents[2] / "README.md").read_text(encoding="utf-8")
    table = readme.split("## Settings", 1)[1].split("\n## ", 1)[0]
    documented = {
        line.split("`")[1] for line in table.splitlines() if line.startswith("| `NEARWISE_")
    }
    assert documented == set(Settings().variables())


def test_the_readme_cost_example_is_what_the_service_says() -> None:
    from pathlib import Path

    from nearwise.core import cost
    from nearwise.core.errors import OverLimit
    from nearwise.core.spec import TuningSpec
    from nearwise.web.routes.predict import caps

    shape = cost.Shape.of(250_000, 8, 100, TuningSpec())
    with pytest.raises(OverLimit) as info:
        cost.check([cost.Item("knn", {}, None)], shape, caps(Settings()))
    readme = (Path(__file__).parents[2] / "README.md").read_text(encoding="utf-8")
    assert " ".join(info.value.detail.split()) in " ".join(readme.split())
