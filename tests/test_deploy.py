"""deploy/ checked offline: the Kubernetes manifests against the API schemas, what a schema
cannot see, and the compose file.

* **Schemas.** Every object under ``deploy/k8s`` is validated against the JSON Schemas that the
  PyPI package ``kubernetes-validate`` bundles per Kubernetes version (converted from the
  Kubernetes OpenAPI definitions), in their *strict* form, where an unknown field is an error.
  Versions: :data:`K8S_VERSIONS`. No network is used; the tests refuse any socket connection.
  ``kustomization.yaml`` files are kustomize's configuration, not API objects: no schema here.
* **References.** Selectors against pod labels, Secret and ConfigMap references, the
  autoscaler's target, the NetworkPolicies' pods and ports, the migration Job's command, the
  commands against the ``bandwright`` CLI, security contexts, resources and probes, and the CPU
  limits against the solver threads the settings allow.
* **Kustomize.** Every manifest file is in a kustomization; where kubectl is installed, its
  built-in kustomize (offline) must render the objects these tests read.
* **Compose.** Dependencies, the migration gate, health checks, the commands, the URLs' hosts.

Not exercised here (no container runtime daemon, no cluster): the image is not built, compose is
not started, nothing is applied. ``bandwright db`` is being written elsewhere; until
``service/cli.py`` has it, the test that parses ``bandwright db upgrade`` with the CLI skips and
says so, while the tests of the agreed command (``db upgrade``) run.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import shutil
import socket
import subprocess
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import kubernetes_validate
import pytest
import yaml

from service.cli import _parser
from service.schemas import MAX_TIME_LIMIT_S
from service.settings import Settings
from service.worker import SOFT_GRACE_S

ROOT = Path(__file__).resolve().parents[1]
DEPLOY = ROOT / "deploy"
K8S = DEPLOY / "k8s"
README = DEPLOY / "README.md"
KUSTOMIZATIONS = {"main": K8S, "migrate": K8S / "migrate"}

K8S_VERSIONS = ("1.33", "1.37")
"""Kubernetes versions whose schemas (bundled by kubernetes-validate) the manifests must pass:
an older minor still common on managed clusters, and the newest the package bundles."""

SHUTDOWN_MARGIN_S = 60
"""Time beyond a synchronous solve's longest limit for verification, storing and shutdown (an
estimate: verifying 1,170 carriers took under 9 s on the development machine)."""

WORKER_TASK_LIMIT_S = MAX_TIME_LIMIT_S + 2 * SOFT_GRACE_S
"""A worker task's hard time limit (service/worker.py, make_sender): it may run this long."""

PENDING_COMMANDS = {"db"}
"""Subcommands being written elsewhere: while service/cli.py lacks one, its commands skip."""

DNS_PORT = 53
_COMPONENT = "app.kubernetes.io/component"
LONG_RUNNING = ("Deployment",)
PROBES = ("startupProbe", "livenessProbe", "readinessProbe")
QUANTITY_SUFFIX = {"m": 1e-3, "k": 1e3, "M": 1e6, "G": 1e9, "Ki": 2**10, "Mi": 2**20, "Gi": 2**30}


@dataclass(frozen=True)
class Manifest:
    """One object of a YAML file under deploy/k8s."""

    path: Path
    doc: dict[str, Any]

    @property
    def kind(self) -> str:
        return str(self.doc["kind"])

    @property
    def name(self) -> str:
        return str(self.doc["metadata"]["name"])

    def __str__(self) -> str:
        return f"{self.path.relative_to(ROOT)}:{self.kind}/{self.name}"


def _documents(path: Path) -> list[dict[str, Any]]:
    return [doc for doc in yaml.safe_load_all(path.read_text(encoding="utf-8")) if doc]


def _kustomization(directory: Path) -> dict[str, Any]:
    return _documents(directory / "kustomization.yaml")[0]


def kustomize(directory: Path) -> list[Manifest]:
    """The objects a kustomization lists, directories (bases) followed, as kustomize renders
    them when the kustomization has nothing but ``resources`` (tested below)."""
    found: list[Manifest] = []
    for entry in _kustomization(directory)["resources"]:
        path = (directory / entry).resolve()
        if path.is_dir():
            found.extend(kustomize(path))
        else:
            found.extend(Manifest(path, doc) for doc in _documents(path))
    return found


RENDERED = {key: kustomize(directory) for key, directory in KUSTOMIZATIONS.items()}
ALL = list({(m.kind, m.name): m for ms in RENDERED.values() for m in ms}.values())
WORKLOADS = [m for m in ALL if m.kind in ("Deployment", "Job")]
CONTAINERS = [(w, c) for w in WORKLOADS for c in w.doc["spec"]["template"]["spec"]["containers"]]
CONTAINER_PARAMS = [pytest.param(w, c, id=f"{w.kind}/{w.name}/{c['name']}") for w, c in CONTAINERS]
COMPOSE = yaml.safe_load((DEPLOY / "compose.yaml").read_text(encoding="utf-8"))
DOCKERFILE = (DEPLOY / "Dockerfile").read_text(encoding="utf-8")


def _one(kind: str, component: str) -> Manifest:
    """The one workload of ``kind`` whose pods are labelled ``component``."""
    found = [m for m in WORKLOADS if m.kind == kind and _pod_labels(m).get(_COMPONENT) == component]
    assert len(found) == 1, f"expected one {kind} for {component}, found {found}"
    return found[0]


def _pod_labels(workload: Manifest) -> dict[str, str]:
    return dict(workload.doc["spec"]["template"]["metadata"]["labels"])


def _backing_services() -> list[Manifest]:
    return [m for m in ALL if m.kind == "Service" and m.doc["spec"].get("type") == "ExternalName"]


def _selects(match_labels: dict[str, str], labels: dict[str, str]) -> bool:
    return all(labels.get(k) == v for k, v in match_labels.items())


def _pods_selected(match_labels: dict[str, str], among: list[Manifest]) -> list[Manifest]:
    return [
        w
        for w in among
        if w.kind in ("Deployment", "Job") and _selects(match_labels, _pod_labels(w))
    ]


def _container(component: str) -> dict[str, Any]:
    workload = _one("Deployment" if component != "migrate" else "Job", component)
    return dict(workload.doc["spec"]["template"]["spec"]["containers"][0])


def _quantity(text: str | int) -> float:
    """A Kubernetes resource quantity ("250m", "2", "1Gi") as a number (cores or bytes)."""
    match = re.fullmatch(r"(\d+(?:\.\d+)?)([a-zA-Z]*)", str(text))
    assert match is not None, f"{text=} is not a quantity these tests read"
    number, suffix = match.groups()
    return float(number) * (QUANTITY_SUFFIX[suffix] if suffix else 1.0)


def _dockerfile_instruction(name: str) -> str:
    match = re.search(rf"^{name}\s+(.+)$", DOCKERFILE, re.MULTILINE)
    assert match is not None, f"no {name} in deploy/Dockerfile"
    return match.group(1).strip()


def _configmap_settings() -> dict[str, str]:
    (configmap,) = [m for m in ALL if m.kind == "ConfigMap" and m.name == "bandwright"]
    return dict(configmap.doc["data"])


# ----------------------------------------------------------------------------- schemas


@pytest.fixture
def no_network(monkeypatch: pytest.MonkeyPatch) -> None:
    """Any attempt to open a connection fails the test (schemas must come from the package)."""

    def refuse(*args: object, **kwargs: object) -> None:
        raise AssertionError(f"network use during validation: {args}")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)


def _manifest_files() -> list[Path]:
    return sorted(p for p in K8S.rglob("*.yaml") if p.name != "kustomization.yaml")


@pytest.mark.usefixtures("no_network")
@pytest.mark.parametrize("version", K8S_VERSIONS)
@pytest.mark.parametrize("path", _manifest_files(), ids=lambda p: str(p.relative_to(K8S)))
def test_every_object_passes_the_strict_kubernetes_schema(path: Path, version: str) -> None:
    docs = _documents(path)
    assert docs, f"{path} holds no object"
    for doc in docs:
        # raises kubernetes_validate.ValidationError (or SchemaNotFoundError) on failure
        assert kubernetes_validate.validate(doc, version, strict=True) == version


@pytest.mark.usefixtures("no_network")
def test_the_strict_schema_rejects_a_misspelt_field() -> None:
    """The validator is not vacuous: a field name with one wrong letter fails."""
    api = _one("Deployment", "api").doc
    broken = json.loads(json.dumps(api))
    broken["spec"]["template"]["spec"]["securityContext"]["runAsNonroot"] = True
    with pytest.raises(kubernetes_validate.ValidationError, match="runAsNonroot"):
        kubernetes_validate.validate(broken, K8S_VERSIONS[-1], strict=True)


# ----------------------------------------------------------------------------- kustomize


def test_kustomizations_list_resources_and_nothing_else() -> None:
    """With no patches or transformers, :func:`kustomize` sees what kustomize renders."""
    for directory in [*KUSTOMIZATIONS.values(), K8S / "backing"]:
        assert set(_kustomization(directory)) == {"apiVersion", "kind", "resources"}, directory


def test_every_manifest_file_is_in_a_kustomization() -> None:
    listed = {m.path for ms in RENDERED.values() for m in ms}
    assert set(_manifest_files()) == listed


def test_the_migration_job_is_applied_on_its_own() -> None:
    """`kubectl apply -k deploy/k8s` must not start a migration: it is a separate step."""
    assert [m.kind for m in RENDERED["main"] if m.kind == "Job"] == []
    assert [m.name for m in RENDERED["migrate"] if m.kind == "Job"] == ["bandwright-migrate"]


@pytest.mark.skipif(shutil.which("kubectl") is None, reason="kubectl is not installed here")
@pytest.mark.parametrize("key", KUSTOMIZATIONS)
def test_kubectl_kustomize_renders_the_same_objects(key: str) -> None:
    """kubectl's built-in kustomize (offline) renders what these tests read."""
    out = subprocess.run(
        ["kubectl", "kustomize", str(KUSTOMIZATIONS[key])],
        capture_output=True,
        text=True,
        check=True,
        timeout=60,
    ).stdout
    rendered = sorted(
        (d["kind"], d["metadata"]["name"], json.dumps(d, sort_keys=True))
        for d in yaml.safe_load_all(out)
        if d
    )
    ours = sorted((m.kind, m.name, json.dumps(m.doc, sort_keys=True)) for m in RENDERED[key])
    assert rendered == ours


# ----------------------------------------------------------------------------- selectors


@pytest.mark.parametrize("workload", WORKLOADS, ids=str)
def test_workload_selector_matches_its_pod_labels(workload: Manifest) -> None:
    selector = workload.doc["spec"].get("selector")
    if workload.kind == "Job":
        assert selector is None, "a Job's selector is generated; setting it invites mistakes"
        return
    assert selector["matchLabels"], workload
    assert _selects(selector["matchLabels"], _pod_labels(workload)), workload


def test_services_select_the_api_pods_by_a_named_port() -> None:
    services = [m for m in ALL if m.kind == "Service" and m.doc["spec"].get("selector")]
    assert services, "no Service selects pods"
    for service in services:
        (target,) = _pods_selected(service.doc["spec"]["selector"], ALL)
        assert target is _one("Deployment", "api"), service
        names = {
            p["name"]
            for c in target.doc["spec"]["template"]["spec"]["containers"]
            for p in c.get("ports", [])
        }
        for port in service.doc["spec"]["ports"]:
            assert port["targetPort"] in names, f"{service}: {port['targetPort']=} not in {names}"


def test_backing_services_are_names_for_the_operators_instances() -> None:
    """PostgreSQL and Redis are not shipped: ExternalName Services, no database workload."""
    assert {m.name for m in _backing_services()} == {"bandwright-postgres", "bandwright-redis"}
    for workload in WORKLOADS:
        for container in workload.doc["spec"]["template"]["spec"]["containers"]:
            assert not re.search(r"postgres|redis", container["image"]), workload


@pytest.mark.parametrize("pdb", [m for m in ALL if m.kind == "PodDisruptionBudget"], ids=str)
def test_disruption_budget_selects_one_deployment_and_allows_a_drain(pdb: Manifest) -> None:
    (target,) = _pods_selected(pdb.doc["spec"]["selector"]["matchLabels"], ALL)
    assert target.kind == "Deployment"
    spec = pdb.doc["spec"]
    if "minAvailable" in spec:
        # With minAvailable at the replica count, no node could ever be drained.
        assert spec["minAvailable"] < target.doc["spec"]["replicas"], pdb
    else:
        assert spec["maxUnavailable"] >= 1, pdb


def test_both_deployments_have_a_disruption_budget() -> None:
    covered = {
        _pods_selected(m.doc["spec"]["selector"]["matchLabels"], ALL)[0].name
        for m in ALL
        if m.kind == "PodDisruptionBudget"
    }
    assert covered == {m.name for m in ALL if m.kind == "Deployment"}


def test_autoscaler_targets_the_worker_deployment() -> None:
    (hpa,) = [m for m in ALL if m.kind == "HorizontalPodAutoscaler"]
    spec = hpa.doc["spec"]
    worker = _one("Deployment", "worker")
    ref = spec["scaleTargetRef"]
    assert (ref["apiVersion"], ref["kind"], ref["name"]) == ("apps/v1", "Deployment", worker.name)
    assert worker.doc["spec"]["template"]["spec"]["containers"][0]["command"][:2] == [
        "bandwright",
        "worker",
    ]
    assert 1 <= spec["minReplicas"] <= spec["maxReplicas"]
    # The autoscaler owns the count: a `replicas` in the Deployment would reset it on apply.
    assert "replicas" not in worker.doc["spec"]
    # CPU utilisation is measured against the request: every container needs one.
    for metric in spec["metrics"]:
        name = metric["resource"]["name"]
        for container in worker.doc["spec"]["template"]["spec"]["containers"]:
            assert name in container["resources"]["requests"], container["name"]


# ----------------------------------------------------------------------------- network


def _policies() -> list[Manifest]:
    return [m for m in ALL if m.kind == "NetworkPolicy"]


def _policy_for(workload: Manifest) -> Manifest:
    found = [
        p
        for p in _policies()
        if _selects(p.doc["spec"]["podSelector"]["matchLabels"], _pod_labels(workload))
    ]
    assert len(found) == 1, f"{workload}: policies {found}"
    return found[0]


@pytest.mark.parametrize("policy", _policies(), ids=str)
def test_network_policy_selects_real_pods_in_its_kustomization(policy: Manifest) -> None:
    homes = [ms for ms in RENDERED.values() if policy in ms]
    assert homes
    for objects in homes:
        assert _pods_selected(policy.doc["spec"]["podSelector"]["matchLabels"], objects), policy


@pytest.mark.parametrize("workload", WORKLOADS, ids=str)
def test_egress_reaches_only_dns_postgres_and_redis(workload: Manifest) -> None:
    policy = _policy_for(workload).doc["spec"]
    assert set(policy["policyTypes"]) == {"Ingress", "Egress"}
    backing_ports = {p["port"] for m in _backing_services() for p in m.doc["spec"]["ports"]}
    for rule in policy["egress"]:
        ports = {p["port"] for p in rule.get("ports", [])}
        assert ports, f"{workload}: an egress rule without ports allows every port"
        assert ports <= backing_ports | {DNS_PORT}, f"{workload}: egress to {ports}"
        if DNS_PORT in ports:
            # DNS goes to the cluster resolver only, over UDP and TCP
            assert {p["protocol"] for p in rule["ports"]} == {"UDP", "TCP"}
            assert rule["to"] and all("podSelector" in peer for peer in rule["to"])


def test_only_the_api_accepts_connections_and_only_on_its_port() -> None:
    for workload in WORKLOADS:
        rules = _policy_for(workload).doc["spec"].get("ingress", [])
        if _pod_labels(workload)[_COMPONENT] != "api":
            assert rules == [], workload
            continue
        container_ports = {p["containerPort"] for p in _container("api")["ports"]}
        allowed = {p["port"] for rule in rules for p in rule["ports"]}
        assert allowed == container_ports


# ----------------------------------------------------------------------------- references


def _readme_secrets() -> set[tuple[str, str]]:
    """(name, key) of every `kubectl create secret generic NAME --from-literal=KEY=…`."""
    text = README.read_text(encoding="utf-8").replace("\\\n", " ")
    made: set[tuple[str, str]] = set()
    for line in text.splitlines():
        match = re.search(r"kubectl create secret generic (\S+)(.*)", line)
        if match:
            made |= {
                (match.group(1), key)
                for key in re.findall(r"--from-literal=([\w.-]+)=", match.group(2))
            }
    return made


def _env_sources(container: dict[str, Any]) -> Iterator[tuple[str, dict[str, Any]]]:
    for entry in container.get("env", []):
        for kind, ref in entry.get("valueFrom", {}).items():
            yield kind, ref
    for entry in container.get("envFrom", []):
        for kind, ref in entry.items():
            if kind != "prefix":
                yield kind, ref


@pytest.mark.parametrize(("workload", "container"), CONTAINER_PARAMS)
def test_secret_references_are_created_by_the_readme(
    workload: Manifest, container: dict[str, Any]
) -> None:
    made = _readme_secrets()
    for kind, ref in _env_sources(container):
        if kind == "secretKeyRef":
            assert (ref["name"], ref["key"]) in made, f"{workload}: {ref} not in README"
        elif kind == "secretRef":
            assert ref["name"] in {name for name, _ in made}, f"{workload}: {ref}"


@pytest.mark.parametrize("key", KUSTOMIZATIONS)
def test_configmap_references_resolve_in_the_same_kustomization(key: str) -> None:
    """The migration runs before the main kustomization is applied: it may use none of it."""
    maps = {m.name: m for m in RENDERED[key] if m.kind == "ConfigMap"}
    for workload in (m for m in RENDERED[key] if m.kind in ("Deployment", "Job")):
        for container in workload.doc["spec"]["template"]["spec"]["containers"]:
            for kind, ref in _env_sources(container):
                if kind == "configMapRef":
                    assert ref["name"] in maps, f"{workload}: {ref}"
                elif kind == "configMapKeyRef":
                    assert ref["key"] in maps[ref["name"]].doc["data"], f"{workload}: {ref}"


def test_no_secret_is_committed() -> None:
    assert [str(m) for m in ALL if m.kind == "Secret"] == []


@pytest.mark.parametrize(
    ("component", "needed"),
    [
        ("api", {"BANDWRIGHT_DATABASE_URL", "BANDWRIGHT_BROKER_URL", "BANDWRIGHT_KEYS_PEPPER"}),
        ("worker", {"BANDWRIGHT_DATABASE_URL", "BANDWRIGHT_BROKER_URL"}),
        ("migrate", {"BANDWRIGHT_DATABASE_URL"}),
    ],
)
def test_credentials_come_from_secrets(component: str, needed: set[str]) -> None:
    from_secrets = {
        e["name"]
        for e in _container(component).get("env", [])
        if "secretKeyRef" in e.get("valueFrom", {})
    }
    assert needed <= from_secrets


def _bandwright_env_names() -> set[str]:
    names = set(_configmap_settings())
    names |= {e["name"] for _, c in CONTAINERS for e in c.get("env", [])}
    for service in COMPOSE["services"].values():
        names |= set(service.get("environment", {}))
    return {n for n in names if n.startswith("BANDWRIGHT_")}


def test_every_variable_is_a_setting() -> None:
    """Settings ignore unknown variables, so a misspelt name would pass silently."""
    fields = {f"BANDWRIGHT_{name.upper()}" for name in Settings.model_fields}
    assert _bandwright_env_names() - fields == set()


def test_configmap_values_are_accepted_by_the_settings(monkeypatch: pytest.MonkeyPatch) -> None:
    for name, value in _configmap_settings().items():
        monkeypatch.setenv(name, value)
    settings = Settings()
    assert settings.port == int(_configmap_settings()["BANDWRIGHT_PORT"])


# ----------------------------------------------------------------------------- containers


def test_the_image_user_is_the_one_the_manifests_run_as() -> None:
    user = int(_dockerfile_instruction("USER").split(":")[0])
    assert user != 0
    for workload in WORKLOADS:
        assert workload.doc["spec"]["template"]["spec"]["securityContext"]["runAsUser"] == user


@pytest.mark.parametrize("workload", WORKLOADS, ids=str)
def test_pod_runs_non_root_under_the_default_seccomp_profile(workload: Manifest) -> None:
    pod = workload.doc["spec"]["template"]["spec"]
    context = pod["securityContext"]
    assert context["runAsNonRoot"] is True
    assert context["runAsUser"] == 10001
    assert context["seccompProfile"] == {"type": "RuntimeDefault"}
    # nothing here talks to the Kubernetes API
    assert pod["automountServiceAccountToken"] is False


@pytest.mark.parametrize(("workload", "container"), CONTAINER_PARAMS)
def test_container_is_locked_down_and_bounded(
    workload: Manifest, container: dict[str, Any]
) -> None:
    context = container["securityContext"]
    assert context["allowPrivilegeEscalation"] is False
    assert context["readOnlyRootFilesystem"] is True
    assert context["capabilities"]["drop"] == ["ALL"]
    assert "add" not in context["capabilities"]
    resources = container["resources"]
    for resource in ("cpu", "memory"):
        request = _quantity(resources["requests"][resource])
        limit = _quantity(resources["limits"][resource])
        assert 0 < request <= limit, f"{workload}: {resource} {request=} {limit=}"


@pytest.mark.parametrize(
    ("workload", "container"), [p for p in CONTAINER_PARAMS if p.values[0].kind in LONG_RUNNING]
)
def test_long_running_container_has_every_probe(
    workload: Manifest, container: dict[str, Any]
) -> None:
    names = {p["name"] for p in container.get("ports", [])}
    for probe in PROBES:
        assert probe in container, f"{workload}: no {probe}"
        http = container[probe].get("httpGet")
        if http is not None:
            assert http["port"] in names, f"{workload}: {probe} port {http['port']!r}"
        else:
            assert container[probe]["exec"]["command"] == ["bandwright", "worker", "--check"]


def test_api_probes_ask_the_health_endpoints() -> None:
    api = _container("api")
    assert api["livenessProbe"]["httpGet"]["path"] == "/healthz"
    assert api["readinessProbe"]["httpGet"]["path"] == "/readyz"
    assert api["startupProbe"]["httpGet"]["path"] == "/healthz"


def test_every_container_runs_one_release() -> None:
    """The migration must come from the image the API and the workers will run."""
    assert len({c["image"] for _, c in CONTAINERS}) == 1


@pytest.mark.parametrize(
    ("component", "needed_s"),
    [("api", MAX_TIME_LIMIT_S + SHUTDOWN_MARGIN_S), ("worker", WORKER_TASK_LIMIT_S)],
)
def test_shutdown_lets_the_longest_solve_finish(component: str, needed_s: float) -> None:
    pod = _one("Deployment", component).doc["spec"]["template"]["spec"]
    assert pod["terminationGracePeriodSeconds"] >= needed_s
    grace = COMPOSE["services"][component]["stop_grace_period"]
    assert int(grace.removesuffix("s")) >= needed_s


def _heartbeat_file() -> str:
    default = Settings.model_fields["worker_heartbeat_file"].default
    return _configmap_settings().get("BANDWRIGHT_WORKER_HEARTBEAT_FILE", default)


def test_worker_heartbeat_file_is_on_a_writable_volume() -> None:
    """The root filesystem is read-only: `worker --check` needs the file on a mounted volume."""
    path = _heartbeat_file()
    mounts = [m["mountPath"] for m in _container("worker")["volumeMounts"]]
    assert any(path.startswith(f"{mount}/") for mount in mounts), f"{path=} {mounts=}"
    tmpfs = COMPOSE["services"]["worker"]["tmpfs"]
    assert any(path.startswith(f"{mount}/") for mount in tmpfs), f"{path=} {tmpfs=}"


def test_cpu_limits_cover_the_solver_threads() -> None:
    """API: (max_concurrent_solves + job_workers) × workers_per_solve; worker: concurrency ×
    workers_per_solve (service/settings.py states the budget)."""
    settings = {k: int(v) for k, v in _configmap_settings().items() if v.isdigit()}
    per_solve = settings["BANDWRIGHT_WORKERS_PER_SOLVE"]
    api_threads = (
        settings["BANDWRIGHT_MAX_CONCURRENT_SOLVES"] + settings["BANDWRIGHT_JOB_WORKERS"]
    ) * per_solve
    assert api_threads <= _quantity(_container("api")["resources"]["limits"]["cpu"])
    worker = _container("worker")
    concurrency = int(worker["command"][worker["command"].index("--concurrency") + 1])
    assert concurrency * per_solve <= _quantity(worker["resources"]["limits"]["cpu"])


# ----------------------------------------------------------------------------- commands


def test_migration_job_runs_the_upgrade_once() -> None:
    job = _one("Job", "migrate").doc["spec"]
    assert job["template"]["spec"]["containers"][0]["command"] == ["bandwright", "db", "upgrade"]
    assert job["template"]["spec"]["restartPolicy"] == "Never"
    # not at every replica start: no Deployment migrates, in a container or an init container
    for workload in (w for w in WORKLOADS if w.kind == "Deployment"):
        pod = workload.doc["spec"]["template"]["spec"]
        for container in [*pod["containers"], *pod.get("initContainers", [])]:
            assert container["command"][:2] != ["bandwright", "db"], workload


@pytest.mark.parametrize("where", ["k8s", "compose"])
def test_worker_command_follows_the_agreed_interface(where: str) -> None:
    """`bandwright worker --concurrency N` (N ≥ 1); its probes are checked above."""
    if where == "k8s":
        command = _container("worker")["command"]
    else:
        command = COMPOSE["services"]["worker"]["command"]
    assert command[:3] == ["bandwright", "worker", "--concurrency"]
    assert int(command[3]) >= 1 and len(command) == 4


def _commands() -> list[list[str]]:
    """Every `bandwright …` command line in the manifests, the compose file and the image."""
    found = [json.loads(_dockerfile_instruction("CMD"))]
    for _, container in CONTAINERS:
        found.append(container["command"])
        found.extend(
            container[p]["exec"]["command"] for p in PROBES if "exec" in container.get(p, {})
        )
    for service in COMPOSE["services"].values():
        found.append(service.get("command", []))
        test = service.get("healthcheck", {}).get("test", [])
        found.append(test[1:] if test[:1] == ["CMD"] else [])
    return [c for c in found if c[:1] == ["bandwright"]]


def _cli_has(command: str) -> bool:
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        try:
            _parser().parse_args([command, "--help"])
        except SystemExit as exc:
            return exc.code == 0
    return True


@pytest.mark.parametrize("argv", _commands(), ids=" ".join)
def test_command_is_one_the_cli_accepts(argv: list[str]) -> None:
    scripts = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"][
        "scripts"
    ]
    assert argv[0] in scripts
    if argv[1] in PENDING_COMMANDS and not _cli_has(argv[1]):
        pytest.skip(f"`bandwright {argv[1]}` is not in service/cli.py yet (being written)")
    errors = io.StringIO()
    # on a refusal argparse writes why to stderr and exits
    with (
        contextlib.redirect_stderr(errors),
        contextlib.redirect_stdout(io.StringIO()),
        contextlib.suppress(SystemExit),
    ):
        _parser().parse_args(argv[1:])
    assert errors.getvalue() == "", f"the CLI refuses {argv}"


def test_api_runs_the_image_command() -> None:
    command = json.loads(_dockerfile_instruction("CMD"))
    assert command == ["bandwright", "serve"]
    assert _container("api")["command"] == command
    assert COMPOSE["services"]["api"]["command"] == command


# ----------------------------------------------------------------------------- compose


def test_compose_dependencies_exist_with_known_conditions() -> None:
    services = COMPOSE["services"]
    conditions = {"service_started", "service_healthy", "service_completed_successfully"}
    for name, service in services.items():
        for needed, how in service.get("depends_on", {}).items():
            assert needed in services, f"{name} depends on missing {needed}"
            assert how["condition"] in conditions, name
            if how["condition"] == "service_healthy":
                assert not services[needed].get("healthcheck", {}).get("disable"), needed


def test_compose_api_and_worker_wait_for_the_migration() -> None:
    services = COMPOSE["services"]
    migrate = services["migrate"]
    assert migrate["command"] == ["bandwright", "db", "upgrade"]
    assert migrate["restart"] == "no"
    for name in ("api", "worker"):
        condition = services[name]["depends_on"]["migrate"]["condition"]
        assert condition == "service_completed_successfully", name


def test_compose_long_running_services_have_health_checks() -> None:
    for name, service in COMPOSE["services"].items():
        check = service.get("healthcheck", {})
        if name == "migrate":
            assert check == {"disable": True}
        else:
            assert check.get("test"), f"{name} has no health check"
    assert COMPOSE["services"]["worker"]["healthcheck"]["test"] == [
        "CMD",
        "bandwright",
        "worker",
        "--check",
    ]


def test_compose_urls_name_compose_services() -> None:
    services = COMPOSE["services"]
    for name, service in services.items():
        for variable, value in service.get("environment", {}).items():
            if variable.endswith("_URL"):
                # ${VAR:?message} interpolations hold characters a URL parser splits on
                host = urlsplit(re.sub(r"\$\{[^}]*\}", "x", value)).hostname
                assert host in services, f"{name}: {variable} points at {host}"


def test_compose_runs_the_image_as_its_user_read_only() -> None:
    user = _dockerfile_instruction("USER")
    for name in ("migrate", "api", "worker"):
        service = COMPOSE["services"][name]
        assert service["user"] == user and service["read_only"] is True, name
