"""The deployment files agree with the service: ports, probe paths, settings and timeouts.

Everything here reads files; nothing runs Docker (tests/deploy/test_container.py does).
"""

from __future__ import annotations

import importlib.util
import json
import re
import tomllib
from dataclasses import fields
from pathlib import Path
from typing import Any

import pytest
import yaml
from packaging.requirements import Requirement

from nearwise.web.app import create_app
from nearwise.web.settings import PREFIX, Settings

ROOT = Path(__file__).resolve().parents[2]
DOCKER = ROOT / "docker"
KUBE = DOCKER / "kubernetes"
SETTING_NAMES = {PREFIX + f.name.upper() for f in fields(Settings)}


# ---- helpers ----


def dockerfile(path: Path) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) pairs, continuation lines joined and comments dropped."""
    out: list[tuple[str, str]] = []
    pending = ""
    for raw in path.read_text(encoding="utf-8").splitlines():
        line = raw.strip()
        if not pending and (not line or line.startswith("#")):
            continue
        if line.startswith("#"):
            continue
        if line.endswith("\\"):
            pending += line[:-1] + " "
            continue
        line = pending + line
        pending = ""
        word, _, rest = line.partition(" ")
        out.append((word.upper(), rest.strip()))
    assert not pending, f"{path}: a continuation line ends the file"
    return out


def stages(instructions: list[tuple[str, str]]) -> list[list[tuple[str, str]]]:
    """The instructions split into build stages, each starting with its FROM."""
    result: list[list[tuple[str, str]]] = []
    for word, rest in instructions:
        if word == "FROM":
            result.append([])
        assert result, "the Dockerfile must start with FROM"
        result[-1].append((word, rest))
    return result


def env_pairs(instructions: list[tuple[str, str]]) -> dict[str, str]:
    """Every ENV KEY=VALUE of the instructions (the form the Dockerfiles use)."""
    env: dict[str, str] = {}
    for word, rest in instructions:
        if word == "ENV":
            for pair in rest.split():
                key, sep, value = pair.partition("=")
                assert sep, f"ENV {rest!r}: use KEY=VALUE"
                env[key] = value
    return env


def port_of(bind: str) -> int:
    return int(bind.rpartition(":")[2])


def docs(path: Path) -> list[dict[str, Any]]:
    return [d for d in yaml.safe_load_all(path.read_text(encoding="utf-8")) if d]


def one(kind: str) -> dict[str, Any]:
    found = [d for p in sorted(KUBE.glob("*.yaml")) for d in docs(p) if d["kind"] == kind]
    assert len(found) == 1, f"expected one {kind} in {KUBE}, found {len(found)}"
    return found[0]


def env_list(container: dict[str, Any]) -> dict[str, str | None]:
    """A container's env as name -> literal value (None for values from secrets)."""
    return {e["name"]: e.get("value") for e in container.get("env", [])}


def settings_from(env: dict[str, Any]) -> Settings:
    """The settings a process with these variables would run with (secrets left unset)."""
    return Settings.from_env({k: str(v) for k, v in env.items() if v is not None})


def quantity(text: str | int) -> float:
    """A Kubernetes CPU or memory quantity as a number (cores or bytes)."""
    units = {"m": 1e-3, "Ki": 2**10, "Mi": 2**20, "Gi": 2**30, "k": 1e3, "M": 1e6, "G": 1e9}
    match = re.fullmatch(r"([0-9.]+)([A-Za-z]*)", str(text))
    assert match, f"not a quantity: {text!r}"
    number, unit = match.groups()
    return float(number) * units.get(unit, 1.0)


def sleep_seconds(command: list[str]) -> float:
    """Seconds a preStop command sleeps: ``sleep N`` or a python3 ``time.sleep(N)``."""
    if Path(command[0]).name == "sleep":
        return float(command[1])
    match = re.search(r"time\.sleep\(([0-9.]+)\)", " ".join(command))
    assert match, f"preStop command {command!r} does not sleep"
    return float(match.group(1))


def nginx_directives(text: str) -> list[tuple[str, list[str]]]:
    """Every (directive, arguments) of an nginx configuration, blocks flattened."""
    out: list[tuple[str, list[str]]] = []
    words: list[str] = []
    token = re.compile(r"#[^\n]*|'[^']*'|\"[^\"]*\"|[;{}]|[^\s;{}]+")
    for match in token.finditer(text):
        word = match.group()
        if word.startswith("#"):
            continue
        if word in (";", "{", "}"):
            if words:
                out.append((words[0], words[1:]))
            words = []
        else:
            words.append(word)
    assert not words, "a directive without its ;"
    return out


def nginx_seconds(value: str) -> float:
    match = re.fullmatch(r"([0-9]+)(ms|s|m)?", value)
    assert match, value
    scale = {"ms": 1e-3, "s": 1.0, "m": 60.0, None: 1.0}[match.group(2)]
    return int(match.group(1)) * scale


def nginx_size(value: str) -> int:
    match = re.fullmatch(r"([0-9]+)([kKmMgG]?)", value)
    assert match, value
    return int(match.group(1)) * {"": 1, "k": 2**10, "m": 2**20, "g": 2**30}[match.group(2).lower()]


@pytest.fixture(scope="module")
def routes() -> set[str]:
    return {rule.rule for rule in create_app(Settings()).url_map.iter_rules()}


# ---- the service image ----

IMAGE = dockerfile(DOCKER / "Dockerfile")
RUNTIME = stages(IMAGE)[-1]
IMAGE_ENV = env_pairs(RUNTIME)


def test_every_stage_starts_from_debian_trixie_slim() -> None:
    froms = [rest.split()[0] for word, rest in IMAGE if word == "FROM"]
    assert len(froms) >= 2, "a build stage and a runtime stage"
    assert set(froms) == {"debian:trixie-slim"}


def test_apt_installs_without_recommends_and_keeps_no_lists() -> None:
    runs = [rest for word, rest in IMAGE if word == "RUN" and "apt-get install" in rest]
    assert len(runs) == 2
    for run in runs:
        assert "--no-install-recommends" in run
        assert "rm -rf /var/lib/apt/lists/*" in run
    assert "python3-venv" in runs[0]
    assert "python3" in runs[1].split() and "python3-venv" not in runs[1]


def test_runtime_user_is_not_root() -> None:
    users = [rest for word, rest in RUNTIME if word == "USER"]
    assert users, "the runtime stage must set USER"
    user, _, group = users[-1].partition(":")
    assert user not in ("0", "root", "") and group not in ("0", "root")


def test_entrypoint_is_exec_form_and_serves() -> None:
    entry = [rest for word, rest in RUNTIME if word == "ENTRYPOINT"]
    assert len(entry) == 1
    argv = json.loads(entry[0])  # exec form is a JSON array; shell form is not
    assert argv == ["nearwise", "serve", "--bind", "0.0.0.0:8080"]
    assert not [rest for word, rest in RUNTIME if word == "CMD"], "arguments are appended"


#: The bind of the image's entrypoint: reachable from outside the container.
IMAGE_BIND = json.loads(next(rest for word, rest in RUNTIME if word == "ENTRYPOINT"))[-1]


def test_runtime_environment() -> None:
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        assert IMAGE_ENV.get(var) == "1", var
    assert IMAGE_ENV.get("PYTHONDONTWRITEBYTECODE") == "1"
    assert IMAGE_ENV.get("MPLCONFIGDIR", "").startswith("/tmp/"), "the one writable place"
    names = {k for k in IMAGE_ENV if k.startswith(PREFIX)}
    assert names <= SETTING_NAMES, names - SETTING_NAMES
    settings_from({k: IMAGE_ENV[k] for k in names})  # each value is one the service accepts
    assert "NEARWISE_BIND" not in names, "the entrypoint's --bind would override it"


def test_exposed_port_and_healthcheck_follow_the_bind() -> None:
    port = port_of(IMAGE_BIND)
    exposed = [int(rest.split("/")[0]) for word, rest in RUNTIME if word == "EXPOSE"]
    assert exposed == [port]
    health = [rest for word, rest in RUNTIME if word == "HEALTHCHECK"]
    assert len(health) == 1
    argv = json.loads(health[0].partition(" CMD ")[2])
    assert argv[-1] == "/opt/nearwise/healthcheck.py"
    copied = [rest.split() for word, rest in RUNTIME if word == "COPY"]
    assert ["docker/healthcheck.py", "/opt/nearwise/healthcheck.py"] in copied


def test_healthcheck_script_reads_the_port_from_the_bind() -> None:
    spec = importlib.util.spec_from_file_location("healthcheck", DOCKER / "healthcheck.py")
    assert spec and spec.loader
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.health_url("0.0.0.0:8080") == "http://127.0.0.1:8080/healthz"
    assert module.health_url("127.0.0.1:18431") == "http://127.0.0.1:18431/healthz"
    assert module.health_url("[::]:9000") == "http://[::1]:9000/healthz"
    assert module.DEFAULT_BIND == IMAGE_BIND
    # The bind the server runs with: the last --bind of its command line, else the variable.
    entry = [
        "/opt/nearwise/bin/python",
        "/opt/nearwise/bin/nearwise",
        "serve",
        "--bind",
        IMAGE_BIND,
    ]
    assert module.effective_bind(entry, {}) == IMAGE_BIND
    assert module.effective_bind([*entry, "--bind", "127.0.0.1:9001"], {}) == "127.0.0.1:9001"
    assert module.effective_bind([*entry, "--bind=127.0.0.1:9002"], {}) == "127.0.0.1:9002"
    assert module.effective_bind([], {"NEARWISE_BIND": "127.0.0.1:9003"}) == "127.0.0.1:9003"
    # A key is sent only when /healthz needs one.
    assert module.headers({}) == {}
    assert module.headers({"NEARWISE_API_KEYS": "a,b"}) == {}
    closed = {"NEARWISE_API_KEYS": "a,b", "NEARWISE_OPEN_ENDPOINTS": "/metrics"}
    assert module.headers(closed) == {"Authorization": "Bearer a"}
    assert Settings.from_env(closed).open_endpoints == ("/metrics",)
    assert "/healthz" in {r.rule for r in create_app(Settings()).url_map.iter_rules()}


def test_pins_cover_every_dependency() -> None:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    pins: dict[str, str] = {}
    for line in (DOCKER / "constraints.txt").read_text(encoding="utf-8").splitlines():
        if line.strip() and not line.startswith("#"):
            name, sep, version = line.strip().partition("==")
            assert sep, f"constraints.txt: {line!r} is not an exact pin"
            pins[name.lower().replace("_", "-")] = version
    wanted = [Requirement(r) for r in project["project"]["dependencies"]]
    wanted += [Requirement(r) for r in project["build-system"]["requires"]]
    for req in wanted:
        name = req.name.lower().replace("_", "-")
        assert name in pins, f"{req.name} is not pinned: run docker/update-constraints.sh"
        assert req.specifier.contains(pins[name], prereleases=True), (req, pins[name])
    build = stages(IMAGE)[0]
    assert env_pairs(build).get("PIP_CONSTRAINT") == "/build/constraints.txt"
    assert ["docker/constraints.txt", "/build/constraints.txt"] in [
        rest.split() for word, rest in build if word == "COPY"
    ]


def test_dockerignore_sends_only_what_the_image_copies() -> None:
    lines = [
        line.strip()
        for line in (ROOT / ".dockerignore").read_text(encoding="utf-8").splitlines()
        if line.strip() and not line.startswith("#")
    ]
    assert lines[0] == "*", "start from nothing, then allow"
    allowed = {line[1:].rstrip("/") for line in lines if line.startswith("!")}
    sources = set()
    for word, rest in IMAGE:
        if word == "COPY" and not rest.startswith("--from"):
            sources.update(rest.split()[:-1])
    assert sources == allowed, "every COPY source allowed, nothing else"
    for cache in ("**/__pycache__", "**/*.egg-info"):
        assert cache in lines


# ---- Kubernetes ----

DEPLOYMENT = one("Deployment")
POD = DEPLOYMENT["spec"]["template"]["spec"]
CONTAINER = POD["containers"][0]
KUBE_ENV = env_list(CONTAINER)
KUBE_SETTINGS = settings_from(KUBE_ENV)


def test_kubernetes_env_names_are_settings() -> None:
    names = {n for n in KUBE_ENV if n.startswith(PREFIX)}
    assert names, "the Deployment sets the service's variables"
    assert names <= SETTING_NAMES, names - SETTING_NAMES
    assert set(KUBE_ENV) == names, "only NEARWISE_* variables"


def test_kubernetes_port_matches_the_bind() -> None:
    (port,) = CONTAINER["ports"]
    assert port["containerPort"] == port_of(IMAGE_BIND)
    assert "NEARWISE_BIND" not in KUBE_ENV, "the entrypoint's --bind would override it"
    annotations = DEPLOYMENT["spec"]["template"]["metadata"].get("annotations", {})
    if "prometheus.io/port" in annotations:
        assert int(annotations["prometheus.io/port"]) == port["containerPort"]


def test_probes_use_existing_routes(routes: set[str]) -> None:
    (port,) = CONTAINER["ports"]
    probes = {k: CONTAINER[k] for k in ("startupProbe", "readinessProbe", "livenessProbe")}
    for name, probe in probes.items():
        assert probe["httpGet"]["path"] in routes, name
        assert probe["httpGet"]["port"] in (port["name"], port["containerPort"]), name
        assert probe["timeoutSeconds"] <= probe["periodSeconds"], name
    assert probes["readinessProbe"]["httpGet"]["path"] == "/readyz"
    assert probes["livenessProbe"]["httpGet"]["path"] == "/healthz"
    assert probes["livenessProbe"]["timeoutSeconds"] == 1
    free = KUBE_SETTINGS.threads - KUBE_SETTINGS.worker_fit_cap
    assert free >= 2, "threads stay free for probes while every fit slot is busy"


def test_grace_period_covers_pre_stop_and_graceful_timeout() -> None:
    pre_stop = sleep_seconds(CONTAINER["lifecycle"]["preStop"]["exec"]["command"])
    graceful = KUBE_SETTINGS.graceful_timeout_s
    assert pre_stop > 0
    assert POD["terminationGracePeriodSeconds"] > pre_stop + graceful
    assert KUBE_SETTINGS.time_budget_s < graceful, "a fit in flight ends before the workers stop"


def test_pre_stop_binary_is_in_the_image() -> None:
    command = CONTAINER["lifecycle"]["preStop"]["exec"]["command"]
    # sleep is coreutils (essential in every Debian image); python3 is installed explicitly.
    assert command[0] in ("sleep", "/bin/sleep", "/usr/bin/sleep", "python3", "/usr/bin/python3")


def test_pod_runs_read_only_and_not_as_root() -> None:
    user = next(rest for word, rest in RUNTIME if word == "USER").partition(":")[0]
    pod_security = POD["securityContext"]
    assert pod_security["runAsNonRoot"] is True
    assert pod_security["runAsUser"] == int(user)
    security = CONTAINER["securityContext"]
    assert security["readOnlyRootFilesystem"] is True
    assert security["allowPrivilegeEscalation"] is False
    (mount,) = [m for m in CONTAINER["volumeMounts"] if m["mountPath"] == "/tmp"]
    (volume,) = [v for v in POD["volumes"] if v["name"] == mount["name"]]
    assert "emptyDir" in volume


def test_resources_have_requests_and_limits() -> None:
    resources = CONTAINER["resources"]
    for kind in ("cpu", "memory"):
        request = quantity(resources["requests"][kind])
        limit = quantity(resources["limits"][kind])
        assert 0 < request <= limit, kind


#: Peak memory of one fit at the row limit and of an idle worker, in GiB, as measured by
#: tests/benchmarks/report.py (the README's Performance section): the worst case is kNN on
#: 250,000 rows, 0.70 GiB for the whole worker (counted here per fit, idle part included).
PEAK_FIT_GIB = 0.7
WORKER_GIB = 0.2


def test_memory_limit_holds_every_fit_slot_at_the_row_limit() -> None:
    limit = quantity(CONTAINER["resources"]["limits"]["memory"]) / 2**30
    s = KUBE_SETTINGS
    assert s.max_rows == Settings().max_rows, "the measured peak is for the default row limit"
    assert s.workers * WORKER_GIB + s.fit_slots * PEAK_FIT_GIB <= limit


def test_service_hpa_and_budget_point_at_the_deployment() -> None:
    labels = DEPLOYMENT["spec"]["template"]["metadata"]["labels"]
    assert DEPLOYMENT["spec"]["selector"]["matchLabels"].items() <= labels.items()
    service = one("Service")
    assert service["spec"]["selector"].items() <= labels.items()
    (port,) = service["spec"]["ports"]
    assert port["targetPort"] in (
        CONTAINER["ports"][0]["name"],
        CONTAINER["ports"][0]["containerPort"],
    )

    hpa = one("HorizontalPodAutoscaler")
    assert hpa["apiVersion"] == "autoscaling/v2"
    target = hpa["spec"]["scaleTargetRef"]
    assert (target["kind"], target["name"]) == ("Deployment", DEPLOYMENT["metadata"]["name"])
    (metric,) = hpa["spec"]["metrics"]
    assert metric["type"] == "Resource" and metric["resource"]["name"] == "cpu"
    assert 0 < metric["resource"]["target"]["averageUtilization"] <= 100
    assert "cpu" in CONTAINER["resources"]["requests"], "utilization is relative to the request"

    pdb = one("PodDisruptionBudget")
    assert pdb["apiVersion"] == "policy/v1"
    assert pdb["spec"]["selector"]["matchLabels"].items() <= labels.items()
    assert pdb["spec"]["minAvailable"] < hpa["spec"]["minReplicas"], "drains stay possible"


# ---- compose and nginx ----

COMPOSE = yaml.safe_load((DOCKER / "compose.yaml").read_text(encoding="utf-8"))
NGINX = nginx_directives((DOCKER / "nginx" / "nginx.conf").read_text(encoding="utf-8"))


def nginx_values(name: str) -> list[list[str]]:
    return [args for directive, args in NGINX if directive == name]


def compose_settings() -> Settings:
    env = COMPOSE["services"]["nearwise"]["environment"]
    names = {n for n in env if n.startswith(PREFIX)}
    assert names <= SETTING_NAMES, names - SETTING_NAMES
    return settings_from(env)


def test_compose_service_builds_the_image_and_runs_read_only() -> None:
    service = COMPOSE["services"]["nearwise"]
    assert service["build"] == {"context": "..", "dockerfile": "docker/Dockerfile"}
    assert service["read_only"] is True
    assert "/tmp" in service["tmpfs"]
    assert service["deploy"]["replicas"] >= 2
    settings = compose_settings()
    assert "NEARWISE_BIND" not in service["environment"], "the entrypoint's --bind wins"
    assert [int(p) for p in service["expose"]] == [port_of(IMAGE_BIND)]
    grace = float(service["stop_grace_period"].removesuffix("s"))
    assert grace > settings.graceful_timeout_s
    nginx_dockerfile = dockerfile(DOCKER / "nginx" / "Dockerfile")
    assert [r for w, r in nginx_dockerfile if w == "FROM"] == ["debian:trixie-slim"]
    user = [r for w, r in nginx_dockerfile if w == "USER"][-1]
    assert user not in ("root", "0")
    assert json.loads(next(r for w, r in nginx_dockerfile if w == "ENTRYPOINT"))[0] == "nginx"


def test_nginx_upstream_and_listen_agree_with_compose() -> None:
    settings = compose_settings()
    servers = nginx_values("server")
    upstream_servers = [args[0] for args in servers if args and ":" in args[0]]
    assert upstream_servers == [f"nearwise:{port_of(IMAGE_BIND)}"]
    assert settings.fit_slots >= 1
    assert "nearwise" in COMPOSE["services"]
    (listen,) = nginx_values("listen")
    nginx = COMPOSE["services"]["nginx"]
    published = [p.rsplit(":", 1)[1] for p in nginx["ports"]]
    assert published == listen
    assert nginx["ports"][0].startswith("127.0.0.1:"), "published on the loopback only"
    nginx_expose = [r for w, r in dockerfile(DOCKER / "nginx" / "Dockerfile") if w == "EXPOSE"]
    assert nginx_expose == listen
    assert nginx["depends_on"]["nearwise"]["condition"] == "service_healthy"
    assert [["http://nearwise"]] == nginx_values("proxy_pass")


def test_nginx_passes_request_id_and_keeps_the_service_limits() -> None:
    settings = compose_settings()
    headers = {args[0].lower(): args[1] for args in nginx_values("proxy_set_header")}
    assert headers["x-request-id"] == "$nearwise_request_id"
    assert ["$http_x_request_id", "$nearwise_request_id"] in nginx_values("map")
    (body,) = nginx_values("client_max_body_size")
    assert nginx_size(body[0]) == settings.max_body_bytes
    for name in ("proxy_read_timeout", "proxy_send_timeout"):
        (value,) = nginx_values(name)
        assert nginx_seconds(value[0]) > settings.time_budget_s, name
    (page,) = nginx_values("error_page")
    assert page == ["413", "@too_large"]
    (answer,) = [args for args in nginx_values("return") if args[0] == "413"]
    problem = json.loads(answer[1].strip("'").replace("\\n", ""))
    assert problem["status"] == 413 and problem["code"] == "body_too_large"
    assert str(settings.max_body_bytes) in problem["detail"]
