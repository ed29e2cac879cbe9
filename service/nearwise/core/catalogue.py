"""The method catalogue served at /v1/methods."""

from __future__ import annotations

from typing import Any

from nearwise.core.methods import METHODS
from nearwise.core.spec import METRICS, RULES, SCHEMES


def describe() -> dict[str, Any]:
    """Every method with its parameters, plus the tuning options they share."""
    return {
        "methods": [m.describe() for m in METHODS.values()],
        "tuning": {
            "schemes": list(SCHEMES),
            "rules": list(RULES),
            "metrics": list(METRICS),
            "defaults": {
                "scheme": "kfold",
                "folds": 5,
                "repeats": 1,
                "seed": 0,
                "rule": "one_se",
                "metric": "rmse",
            },
        },
    }
