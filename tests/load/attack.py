"""The service's own attacker: issue 12's hostile requests replayed against a real server on
127.0.0.1, bounded in count and time. Run by hand:

    .venv/bin/python tests/load/attack.py                  # a few minutes on 2 cores
    .venv/bin/python tests/load/attack.py --quick          # under a minute
    .venv/bin/python tests/load/attack.py --groups slow inputs --json /tmp/attack.json
    .venv/bin/python tests/load/attack.py --url http://127.0.0.1:8080 --budget 30

Without ``--url`` it starts ``nearwise serve`` (2 workers) on a free loopback port with a short
time budget and a cost limit high enough that over-budget work is accepted, so the budget
itself is what stops it (``--env NAME=VALUE`` adds settings). ``--url`` must name 127.0.0.1:
any other host is refused. The groups, each followed by a check that /healthz answers again and
that no worker died (the same worker pids before and after):

- ``stall``: 8 predicts send headers with ``Content-Length: 1000`` and one byte of body, and stay
  open, while normal predicts run. Expected: every normal predict 200, each stalled body 408.
- ``slow``: 200 connections send request headers one byte every 3 s and 50 send a predict body
  one byte every 3 s, while /healthz is polled from another process and normal predicts run.
  Goal: /healthz under 100 ms, normal predicts unaffected.
- ``budget``: 8 concurrent kNN predicts without a query (intervals at every training row) sized
  past the time budget. Goal: none runs more than 1.2 x the budget.
- ``locality``: /v1/locality with training rows on a sphere and many query rows (a degenerate
  k-d tree and a hull of many facets). Goals: 1.2 x the budget, no worker above 2 GiB.
- ``abandon``: an over-budget kNN predict whose client closes the connection after 0.3 s.
  Expected: the work stops at the next check, within half the budget (CPU time of the workers).
- ``hull``: kNN predict on the sphere with many query rows (the hull facet test). Goal: no
  worker above 2 GiB, measured as VmHWM of every worker (reset before the group).
- ``inputs``: the malformed inputs of ``hostile.py`` (blank-line and over-limit CSV, a 1 MB
  field name, formula cells, control characters in names, Content-Encoding, a hostile Host,
  an over-long URL and header, duplicate Content-Length).

Prints a Markdown table of figures and writes a JSON summary (``--json``); the exit status is 1
when a check fails. ``test_attack_short.py`` runs the quick groups in the test suite and
``tests/benchmarks/report.py`` puts the headline figures in the benchmark report.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import hostile
import procs
import run_load
import slowconn
from attacking import (
    BUDGET_FACTOR,
    GIB,
    HEALTH_MAX_MS,
    WALL_SLACK_S,
    WORKER_MAX_BYTES,
    Group,
    Run,
    Target,
    guarded,
    ms,
    normal_load,
    parallel,
    post,
    wait_quiet,
)

#: Settings of a server started here: a short time budget (``budget_s`` below), so that the
#: attack groups are over it within seconds; a cost limit no shape here reaches (the budget
#: must stop them); a body deadline (``body_timeout_s``) the stalled bodies reach while held.
SERVER_ENV = {"NEARWISE_MAX_COST_S": "100000", "NEARWISE_LOG_LEVEL": "WARNING"}
#: Shapes and holds, (quick, full).
SIZES = {
    "budget_s": (4.0, 10.0),  # NEARWISE_TIME_BUDGET_S of a server started here
    "body_timeout_s": (4.0, 10.0),  # its NEARWISE_BODY_TIMEOUT_S, under stall_s
    "stall_s": (6.0, 20.0),  # seconds the stalled bodies are held (and 2 more to hear them)
    "slow_s": (8.0, 30.0),  # seconds the slow connections are held
    "slow_headers": (200, 200),
    "slow_bodies": (50, 50),
    "budget_rows": (20_000, 100_000),  # kNN predict without a query, 1 feature
    "locality": ((20_000, 5_000), (40_000, 10_000)),  # training and query rows on a sphere
    "hull": ((20_000, 4_000), (50_000, 2_000)),
    "abandon_rows": (60_000, 200_000),  # kNN predict without a query, abandoned after 0.3 s
    "blank_bytes": (8_000_000, 30_000_000),  # the blank-line CSV
    "over_rows": (1_000_000, 7_000_000),  # rows of the over-limit CSV
}
GROUPS = ("stall", "slow", "budget", "locality", "abandon", "hull", "inputs")


def sizes_for(quick: bool) -> dict:
    return {k: v[0 if quick else 1] for k, v in SIZES.items()}


# -- checks shared by the groups -----------------------------------------------------------
def over_budget(t: Target, group: Group, answers: list[hostile.Answer], label: str) -> float:
    """Figures and checks shared by the over-budget groups; returns the worst wall / budget."""
    worst = round(max(a.seconds for a in answers) / t.budget_s, 2)
    group.figures[f"{label} answers"] = dict(Counter(a.outcome for a in answers))
    group.figures["worst wall / budget"] = worst
    allowed = {"200", "503 time_budget_exceeded", "422 over_limit"}
    bad = [a.brief() for a in answers if a.outcome not in allowed]
    group.check(
        f"{label}.status",
        f"{label}: 200, 503 time_budget_exceeded or 422 over_limit",
        not bad,
        "; ".join(bad[:3]) or "all expected",
    )
    group.check(
        f"{label}.wall",
        f"{label}: wall time at most {BUDGET_FACTOR} x the budget ({t.budget_s:g} s) "
        f"+ {WALL_SLACK_S:g} s",
        worst * t.budget_s <= BUDGET_FACTOR * t.budget_s + WALL_SLACK_S,
        f"worst {worst:.2f} x",
    )
    return worst


def memory_check(group: Group) -> None:
    peak = float(group.figures.get("worker peak RSS (GiB)", 0.0))
    group.check(
        "memory",
        "no worker above 2 GiB (VmHWM)",
        peak * GIB <= WORKER_MAX_BYTES,
        f"worker peak {peak:.2f} GiB",
    )


# -- the groups -------------------------------------------------------------------------------
def group_stall(t: Target) -> Group:
    g = Group("stall")
    hold = t.left(t.sizes["stall_s"])
    with guarded(t, g):
        stalled = slowconn.stalled_bodies(t.port, 8, hold + 2.0)
        time.sleep(0.5)
        answers, _ = normal_load(t, hold - 1.0, 4)
        heard = slowconn.finish(stalled)
    _normal_predicts(g, answers)
    outcomes = Counter(a.outcome + ("" if closed else ", kept open") for a, closed in heard)
    g.figures["stalled bodies"] = dict(outcomes)
    g.figures["stalled bodies answered after (s)"] = sorted({round(a.seconds, 1) for a, _ in heard})
    g.check(
        "408",
        "each stalled body gets 408 and its connection closed",
        all(a.status == 408 and closed for a, closed in heard),
        f"{dict(outcomes)}, held up to {hold + 2.0:.0f} s",
    )
    return g


def _normal_predicts(g: Group, answers: list[hostile.Answer]) -> None:
    outs = Counter(a.outcome for a in answers)
    ok = [a.seconds for a in answers if a.status == 200]
    g.figures["normal predicts"] = dict(outs)
    g.figures["normal predict p50 / p99 / max (ms)"] = [ms(ok, 50), ms(ok, 99), ms(ok, 100)]
    g.check(
        "predicts",
        "normal predicts all answer 200 (no 503 busy)",
        outs.get("200", 0) > 0 and set(outs) == {"200"},
        f"{dict(outs)}",
    )


def group_slow(t: Target) -> Group:
    g = Group("slow")
    hold = t.left(t.sizes["slow_s"])
    with guarded(t, g):
        pool = slowconn.SlowPool(t.port, t.sizes["slow_headers"], t.sizes["slow_bodies"])
        try:
            time.sleep(1.0)  # every connection has sent its first byte
            answers, h = normal_load(t, hold, 2, during=pool.drive, health=True)
        finally:
            pool.close()
    assert h is not None
    g.figures |= pool.figures()
    g.figures["healthz p50 / p99 / max (ms)"] = [
        ms(h.latencies, 50),
        ms(h.latencies, 99),
        ms(h.latencies, 100),
    ]
    g.figures["healthz max (ms)"] = ms(h.latencies, 100)
    g.figures["healthz failures"] = dict(h.failures)
    g.check(
        "healthz_fast",
        f"/healthz under {HEALTH_MAX_MS:g} ms with every probe answered",
        h.max_ms < HEALTH_MAX_MS and not h.failures and len(h.latencies) >= 5,
        f"max {h.max_ms:.0f} ms over {len(h.latencies)} polls, failures {dict(h.failures)}",
    )
    _normal_predicts(g, answers)
    body = {k: v for k, v in pool.answers["body"].items() if k != "408"}
    head = {k: v for k, v in pool.answers["header"].items() if k not in ("408", "closed")}
    g.check(
        "answers",
        "the server answers a slow body with 408 (a slow header: 408 or a close)",
        not body and not head,
        f"{ {k: dict(v) for k, v in pool.answers.items()} }",
    )
    return g


def group_budget(t: Target) -> Group:
    g = Group("budget")
    # k fixed: tuning takes a small part of the budget, and the intervals at every training
    # row (CV+) are what runs past it, as in the finding.
    doc = json.loads(run_load.predict_body("knn", t.sizes["budget_rows"], 1, q=0, seed=9))
    body = json.dumps({**doc, "params": {"k": 10}}).encode()
    with guarded(t, g):
        answers = parallel([lambda: post(t, "/v1/predict", body, 20 * t.budget_s + 60)] * 8)
    g.figures["shape"] = (
        f"8 x kNN predict, k = 10, {t.sizes['budget_rows']:,} rows x 1 feature, no query"
    )
    over_budget(t, g, answers, "predicts")
    memory_check(g)
    return g


def group_locality(t: Target) -> Group:
    g = Group("locality")
    n, q = t.sizes["locality"]
    body = hostile.sphere_body(n, q, target=False)
    g.figures["shape"] = f"{n:,} rows on a sphere, {q:,} query rows"
    with guarded(t, g):
        a = post(t, "/v1/locality", body, 20 * t.budget_s + 60)
    over_budget(t, g, [a], "locality")
    memory_check(g)
    return g


def group_abandon(t: Target) -> Group:
    """An over-budget kNN predict sent whole, its connection closed 0.3 s later: the work
    must stop at the next check, long before the budget would stop it."""
    g = Group("abandon")
    n = t.sizes["abandon_rows"]
    body = run_load.predict_body("knn", n, 1, q=0, seed=10)
    g.figures["shape"] = f"kNN predict, {n:,} rows x 1 feature, no query, closed after 0.3 s"
    with guarded(t, g):
        slowconn.abandon(t.port, "/v1/predict", body, 0.3)
        gone = wait_quiet(t, 3 * t.budget_s + 20)
    g.figures["worker busy after the client left (s)"] = round(gone, 2)
    g.check(
        "stops",
        "an abandoned request stops at the next check: within half the budget of the close",
        gone <= 0.5 * t.budget_s,
        f"the workers were busy {gone:.2f} s after the client left (budget {t.budget_s:g} s)",
    )
    return g


def group_hull(t: Target) -> Group:
    g = Group("hull")
    n, q = t.sizes["hull"]
    body = hostile.sphere_body(n, q, target=True)
    g.figures["shape"] = f"kNN predict, {n:,} rows on a sphere, {q:,} query rows"
    with guarded(t, g):
        a = post(t, "/v1/predict", body, 20 * t.budget_s + 60)
    over_budget(t, g, [a], "predict")
    memory_check(g)
    return g


def group_inputs(t: Target) -> Group:
    g = Group("inputs")
    with guarded(t, g):
        for case in hostile.CASES:
            if t.deadline - time.monotonic() < 2:
                g.check(case.key, case.what, False, "not sent: past the global deadline")
                continue
            answer, fault = case.run(t.port, t.left(60.0), t.sizes)
            t.seen(answer)
            g.figures[case.key] = answer.brief()
            g.check(case.key, case.what, not fault, fault or answer.brief())
    memory_check(g)
    return g


KINDS = run_load.standard_kinds()
RUNNERS: dict[str, Callable[[Target], Group]] = {
    "stall": group_stall,
    "slow": group_slow,
    "budget": group_budget,
    "locality": group_locality,
    "abandon": group_abandon,
    "hull": group_hull,
    "inputs": group_inputs,
}


def attack(t: Target, groups: Sequence[str]) -> list[Group]:
    done = []
    for name in groups:
        if time.monotonic() > t.deadline:
            g = Group(name)
            g.check("run", "the group ran", False, "skipped: past the global deadline")
        else:
            print(f"[attack] {name}", file=sys.stderr, flush=True)
            g = RUNNERS[name](t)
        done.append(g)
    return done


def run_own(
    log_dir: Path,
    quick: bool,
    groups: Sequence[str] = GROUPS,
    env: Mapping[str, str] | None = None,
    deadline_s: float = 600.0,
) -> Run:
    """Start ``nearwise serve`` on a free loopback port and attack it."""
    sizes = sizes_for(quick)
    env = {
        **SERVER_ENV,
        "NEARWISE_TIME_BUDGET_S": f"{sizes['budget_s']:g}",
        "NEARWISE_BODY_TIMEOUT_S": f"{sizes['body_timeout_s']:g}",
        **(env or {}),
    }
    budget = float(env["NEARWISE_TIME_BUDGET_S"])
    with run_load.serving(log_dir / "attack-server.log", workers=2, env=env) as server:
        server.warm([KINDS["small"]], rounds=1)
        t = Target(server.port, server.pid, budget, sizes, time.monotonic() + deadline_s)
        return Run(attack(t, groups), t.statuses, budget, quick)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller shapes and shorter holds")
    ap.add_argument("--url", help="attack a running server at http://127.0.0.1:PORT")
    ap.add_argument(
        "--budget",
        type=float,
        default=30.0,
        help="with --url: the server's NEARWISE_TIME_BUDGET_S (30)",
    )
    ap.add_argument(
        "--stall-s",
        type=float,
        help="seconds the stalled bodies are held "
        "(6 quick, 20 full; with --url, longer than its NEARWISE_BODY_TIMEOUT_S)",
    )
    ap.add_argument("--groups", nargs="+", choices=GROUPS, default=list(GROUPS))
    ap.add_argument(
        "--env",
        action="append",
        default=[],
        metavar="NAME=VALUE",
        help="a NEARWISE_* setting for the server started here (repeatable)",
    )
    ap.add_argument(
        "--deadline",
        type=float,
        default=None,
        help="global seconds after which no group starts (120 quick, 600 full)",
    )
    ap.add_argument("--json", type=Path, help="write the JSON summary here")
    args = ap.parse_args(argv)
    deadline_s = args.deadline or (120.0 if args.quick else 600.0)
    env = dict(item.split("=", 1) for item in args.env)
    if any(not k.startswith("NEARWISE_") for k in env):
        ap.error("--env takes NEARWISE_* settings only")
    if args.stall_s:
        SIZES["stall_s"] = (args.stall_s, args.stall_s)
    if args.url:
        port = procs.loopback_port(args.url)
        sizes = sizes_for(args.quick)
        t = Target(
            port, procs.listening_master(port), args.budget, sizes, time.monotonic() + deadline_s
        )
        run = Run(attack(t, args.groups), t.statuses, args.budget, args.quick)
    else:
        with tempfile.TemporaryDirectory(prefix="nearwise-attack-") as tmp:
            run = run_own(Path(tmp), args.quick, args.groups, env, deadline_s)
    print(run.markdown())
    text = json.dumps(run.summary(), indent=2, default=str)
    if args.json:
        args.json.write_text(text + "\n", encoding="utf-8")
    else:
        print("```json\n" + text + "\n```")
    return 0 if all(c.passed for c in run.checks()) else 1


if __name__ == "__main__":
    sys.exit(main())
