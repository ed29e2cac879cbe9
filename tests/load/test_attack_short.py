"""Issue 12's attacks, quick sizes, against a real ``nearwise serve`` (``attack.py --quick``).

One server with 2 workers, a 4 s time budget and a 4 s body deadline (the header deadline keeps
its default, 10 s, so the 200 slow-header connections are held throughout their 8 s) goes
through every group of ``attack.py`` in about 40 s: stalled bodies, 200 slow-header and 50
slow-body connections, 8 concurrent over-budget kNN predicts, the degenerate locality shape,
an over-budget predict abandoned by its client, the hull facet test at 4,000 query rows, and
the malformed inputs. Each check of the run is one test: the answer the issue asks for,
/healthz answering after every group, the same worker processes before and after, no 5xx
other than 503 busy or over budget.

The bounds are the issue's goals: /healthz under 100 ms with every probe answered; every
request within 1.2 x the time budget, measured by the client, so it includes sending and
parsing the body (1 s more is allowed, ``attack.WALL_SLACK_S``); no worker's peak resident
set (VmHWM) above 2 GiB. Before issue 12 (commit c408a3b) the quick shapes broke them
clearly on this 2-core machine: every normal predict got 503 ``busy`` while 8 bodies stalled,
which were held unanswered; every /healthz probe under the slow connections timed out; the 8
over-budget predicts answered 200 after 5.6 x the budget and the locality shape after 5.8 x;
an abandoned predict ran on for 13.7 s; a worker peaked at 3.2 GiB (locality) and 2.8 GiB
(hull); and the server's own errors (414, 431, duplicate Content-Length) were HTML.
"""

from __future__ import annotations

from pathlib import Path

import attack
import pytest

#: Checks whose defense (issue 12) is not in the tree yet: key -> reason, marked
#: xfail(strict=False) until it lands. Every defense had landed at the last run: none.
PENDING: dict[str, str] = {}

KEYS = [
    *(f"{g}.{c}" for g in attack.GROUPS for c in ("recovers", "workers")),
    "stall.predicts",
    "stall.408",
    "slow.healthz_fast",
    "slow.predicts",
    "slow.answers",
    "budget.predicts.status",
    "budget.predicts.wall",
    "budget.memory",
    "locality.locality.status",
    "locality.locality.wall",
    "abandon.stops",
    "locality.memory",
    "hull.predict.status",
    "hull.predict.wall",
    "hull.memory",
    *(f"inputs.{case.key}" for case in attack.hostile.CASES),
    "inputs.memory",
    "all.no_500",
]


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> attack.Run:
    log_dir: Path = tmp_path_factory.mktemp("attack")
    return attack.run_own(log_dir, quick=True, deadline_s=90.0)


def test_every_check_ran(run: attack.Run) -> None:
    assert sorted(c.key for c in run.checks()) == sorted(KEYS)


@pytest.mark.parametrize(
    "key",
    [
        pytest.param(k, marks=pytest.mark.xfail(strict=False, reason=PENDING[k]))
        if k in PENDING
        else k
        for k in KEYS
    ],
)
def test_attack(run: attack.Run, key: str) -> None:
    check = run.check(key)
    assert check.passed, f"{check.what}: {check.detail}\n\n{run.markdown()}"
