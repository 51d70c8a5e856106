"""The deploy files, parsed and cross-checked (no container engine or cluster runs here).

Dockerfile: multi-stage, non-root, a HEALTHCHECK on /healthz, `berth serve` with several workers.
deploy/compose.yaml: valid against the Compose specification's schema (the copy bundled in
check-jsonschema), two berth replicas on one PostgreSQL after a migration step.
deploy/kubernetes/*.yaml: each valid against the Kubernetes schemas bundled in kubernetes-validate
(strict: unknown fields are errors), and consistent with each other: probes on /healthz and /readyz,
selectors that select the Deployment's pods and not the migration Job's, the autoscaler's target,
the ConfigMap's keys real `Settings` fields, the database URL in a Secret."""

import base64
import copy
import importlib.resources
import io
import json
import shlex
import tomllib
from pathlib import Path
from typing import Any

import jsonschema
import pytest
import yaml
from dockerfile_parse import DockerfileParser
from kubernetes_validate import utils as kubernetes_validate
from pydantic import ValidationError
from sqlalchemy.engine import make_url

from service.config import Settings

REPO_ROOT = Path(__file__).resolve().parents[1]
DOCKERFILE = REPO_ROOT / "Dockerfile"
COMPOSE = REPO_ROOT / "deploy" / "compose.yaml"
KUBERNETES = REPO_ROOT / "deploy" / "kubernetes"
SETTINGS_KEYS = {f"BERTH_{name.upper()}": name for name in Settings.model_fields}
KINDS = {"Deployment", "Service", "ConfigMap", "Secret", "HorizontalPodAutoscaler", "PodDisruptionBudget", "Job"}

Json = dict[str, Any]


def check_settings(variables: dict[str, str], where: str) -> None:
    """Every BERTH_ variable names a Settings field, and its value parses as that field's type."""
    berth = {key: value for key, value in variables.items() if key.startswith("BERTH_")}
    unknown = sorted(set(berth) - set(SETTINGS_KEYS))
    assert unknown == [], f"{where}: not Settings fields (service/config.py): {unknown}"
    try:
        Settings(**{SETTINGS_KEYS[key]: value for key, value in berth.items()})
    except ValidationError as error:
        pytest.fail(f"{where}: a value does not parse as its Settings field:\n{error}")


def postgresql_url(value: str) -> Any:
    url = make_url(value)
    assert url.drivername == "postgresql+psycopg", value
    return url


# Dockerfile

def stages() -> list[list[dict[str, Any]]]:
    """The Dockerfile's instructions, one list per FROM."""
    parser = DockerfileParser(fileobj=io.BytesIO(DOCKERFILE.read_bytes()))
    result: list[list[dict[str, Any]]] = []
    for instruction in parser.structure:
        if instruction["instruction"] == "FROM":
            result.append([])
        if instruction["instruction"] != "COMMENT":
            assert result, "an instruction before the first FROM"
            result[-1].append(instruction)
    return result


def values(stage: list[dict[str, Any]], name: str) -> list[str]:
    return [str(i["value"]) for i in stage if i["instruction"] == name]


def final_environment() -> dict[str, str]:
    parser = DockerfileParser(fileobj=io.BytesIO(DOCKERFILE.read_bytes()))
    return dict(parser.envs)


def test_the_image_is_built_in_stages_and_runs_as_an_unprivileged_user() -> None:
    built = stages()
    assert len(built) >= 2, "a single-stage image"
    names = [values(stage, "FROM")[0].split() for stage in built]
    assert all(len(words) == 3 and words[1].upper() == "AS" for words in names), names
    runtime = built[-1]
    copied_from = [v.split()[0].removeprefix("--from=") for v in values(runtime, "COPY") if v.startswith("--from=")]
    assert copied_from and set(copied_from) <= {words[2] for words in names[:-1]}, \
        "the runtime stage copies nothing from an earlier stage"
    # The wheels are built with the PostgreSQL driver, which the replicas need.
    assert any('.[postgres]' in v for stage in built[:-1] for v in values(stage, "RUN"))
    extras = tomllib.loads((REPO_ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert any(dependency.startswith("psycopg") for dependency in extras["optional-dependencies"]["postgres"])

    users = values(runtime, "USER")
    assert users, "the runtime stage runs as root"
    user = users[-1].split(":")[0]
    assert user not in {"root", "0"}
    created = [shlex.split(v) for v in values(runtime, "RUN") if "useradd" in v]
    assert created, f"user {user!r} is never created in the runtime stage"
    words = created[0][created[0].index("useradd"):]
    assert words[-1] == user
    assert int(words[words.index("--uid") + 1]) >= 1000


def image_uid() -> int:
    words = next(shlex.split(v) for v in values(stages()[-1], "RUN") if "useradd" in v)
    return int(words[words.index("--uid") + 1])


def test_the_image_checks_its_health_on_healthz_and_serves_with_several_workers() -> None:
    runtime = stages()[-1]
    environment = final_environment()
    port = environment["BERTH_PORT"]
    assert values(runtime, "EXPOSE") == [port]

    (healthcheck,) = values(runtime, "HEALTHCHECK")
    options, _, probe = healthcheck.partition(" CMD ")
    assert "--interval=" in options and "--timeout=" in options, options
    assert f"http://127.0.0.1:{port}/healthz" in probe, probe

    (command,) = values(runtime, "CMD")
    argv = json.loads(command)  # exec form: signals reach berth, not a shell
    assert argv[:2] == ["berth", "serve"], argv
    assert int(argv[argv.index("--workers") + 1]) >= 2, argv
    scripts = tomllib.loads((REPO_ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]["scripts"]
    assert scripts["berth"] == "service.cli:main"


def test_the_image_environment_is_made_of_settings_and_its_copies_of_files_that_exist() -> None:
    environment = final_environment()
    check_settings(environment, "Dockerfile ENV")
    assert Path(environment["BERTH_DEMO_CATALOG"]).name == "catalog.json"
    for stage in stages():
        for value in values(stage, "COPY"):
            if value.startswith("--from="):
                continue
            *sources, _destination = value.split()
            missing = [source for source in sources if not (REPO_ROOT / source).exists()]
            assert missing == [], f"COPY of files the repository does not have: {missing}"


# deploy/compose.yaml

def compose() -> Json:
    loaded: Json = yaml.safe_load(COMPOSE.read_text(encoding="utf-8"))
    return loaded


def compose_schema_errors(document: Json) -> list[str]:
    vendored = importlib.resources.files("check_jsonschema.builtin_schemas.vendor")
    schema = json.loads(vendored.joinpath("compose-spec.json").read_text(encoding="utf-8"))
    validator = jsonschema.validators.validator_for(schema)(schema)
    return [f"{'/'.join(map(str, error.absolute_path))}: {error.message}" for error in validator.iter_errors(document)]


def test_the_compose_file_is_valid_against_the_compose_specification() -> None:
    assert compose_schema_errors(compose()) == []
    broken = copy.deepcopy(compose())
    broken["services"]["migrate"]["depends_on"]["database"]["condition"] = "service_finished"
    assert compose_schema_errors(broken), "the schema check accepts anything"


def test_compose_runs_two_berth_replicas_on_postgresql_after_a_migration_step() -> None:
    services = compose()["services"]
    databases = [name for name, service in services.items() if str(service.get("image", "")).startswith("postgres:")]
    assert len(databases) == 1, databases
    database = services[databases[0]]
    assert database.get("healthcheck", {}).get("test"), "the database has no health check to wait on"
    postgres = database["environment"]

    migrations = [name for name, service in services.items() if service.get("command") == ["berth", "migrate"]]
    assert len(migrations) == 1, migrations
    migrate = services[migrations[0]]
    assert migrate["depends_on"] == {databases[0]: {"condition": "service_healthy"}}

    replicas = {name: service for name, service in services.items()
                if "build" in service and name not in migrations}
    assert len(replicas) >= 2, sorted(replicas)
    published = []
    for name, replica in replicas.items():
        assert "command" not in replica, f"{name} does not run the image's `berth serve`"
        assert (COMPOSE.parent / replica["build"] / "Dockerfile").exists()
        environment = replica["environment"]
        check_settings(environment, f"compose service {name}")
        assert environment["BERTH_DATABASE_URL"] == migrate["environment"]["BERTH_DATABASE_URL"]
        assert environment["BERTH_MIGRATE_ON_START"] == "false", f"{name} would migrate too"
        assert replica["depends_on"] == {migrations[0]: {"condition": "service_completed_successfully"}}
        published += [port.split(":")[0] for port in replica["ports"]]
    assert len(published) == len(set(published)), f"two replicas publish one host port: {published}"

    url = postgresql_url(migrate["environment"]["BERTH_DATABASE_URL"])
    assert (url.host, url.username, url.password, url.database) == (
        databases[0], postgres["POSTGRES_USER"], postgres["POSTGRES_PASSWORD"], postgres["POSTGRES_DB"])
    check_settings(migrate["environment"], "compose service migrate")


# deploy/kubernetes/*.yaml

def manifests() -> list[tuple[str, Json]]:
    found = []
    for path in sorted(KUBERNETES.glob("*.yaml")):
        for document in yaml.safe_load_all(path.read_text(encoding="utf-8")):
            if document is not None:
                found.append((path.name, document))
    return found


def the(kind: str) -> Json:
    (document,) = [d for _, d in manifests() if d["kind"] == kind]
    return document


def selects(selector: dict[str, str], labels: dict[str, str]) -> bool:
    return all(labels.get(key) == value for key, value in selector.items())


def container(workload: Json) -> Json:
    (only,) = workload["spec"]["template"]["spec"]["containers"]
    return dict(only)


def argv(workload: Json) -> list[str]:
    spec = container(workload)
    return [*spec.get("command", []), *spec.get("args", [])]


@pytest.mark.parametrize(("name", "document"), manifests(), ids=[f"{n}:{d['kind']}" for n, d in manifests()])
def test_each_manifest_is_valid_against_the_bundled_kubernetes_schema(name: str, document: Json) -> None:
    version = kubernetes_validate.latest_version()
    try:
        kubernetes_validate.validate(document, version, strict=True)
    except kubernetes_validate.ValidationError as error:
        pytest.fail(f"{name} ({document['kind']}) is not valid Kubernetes {version}: {error}")


def test_the_schema_check_refuses_a_misspelt_field() -> None:
    broken = copy.deepcopy(the("Deployment"))
    spec = container(broken)
    spec["readinessprobe"] = spec.pop("readinessProbe")
    broken["spec"]["template"]["spec"]["containers"] = [spec]
    with pytest.raises(kubernetes_validate.ValidationError, match="readinessprobe"):
        kubernetes_validate.validate(broken, kubernetes_validate.latest_version(), strict=True)


def test_there_is_one_of_each_kind_and_names_are_unique() -> None:
    kinds = [d["kind"] for _, d in manifests()]
    assert sorted(kinds) == sorted(KINDS)
    assert all(d["metadata"]["labels"]["app.kubernetes.io/name"] == "berth" for _, d in manifests())


def test_the_deployment_serves_with_probes_on_healthz_and_readyz_and_asks_for_resources() -> None:
    deployment = the("Deployment")
    spec = container(deployment)
    assert argv(deployment)[:2] == ["berth", "serve"]
    ports = {port["name"]: port["containerPort"] for port in spec["ports"]}
    assert str(set(ports.values())) == "{" + the("ConfigMap")["data"]["BERTH_PORT"] + "}"
    for probe, path in (("livenessProbe", "/healthz"), ("readinessProbe", "/readyz")):
        get = spec[probe]["httpGet"]
        assert get["path"] == path, probe
        assert get["port"] in ports or get["port"] in ports.values(), f"{probe} port {get['port']} is not exposed"
    requests = spec["resources"]["requests"]
    assert {"cpu", "memory"} <= set(requests)
    assert {"cpu", "memory"} <= set(spec["resources"]["limits"])

    pod = deployment["spec"]["template"]
    assert selects(deployment["spec"]["selector"]["matchLabels"], pod["metadata"]["labels"])
    security = pod["spec"]["securityContext"]
    assert security["runAsNonRoot"] is True
    assert security["runAsUser"] == image_uid(), "the pod's user is not the one the image creates"
    # A read-only root file system: whatever the process writes goes to a mounted volume.
    if spec.get("securityContext", {}).get("readOnlyRootFilesystem"):
        mounts = [mount["mountPath"] for mount in spec.get("volumeMounts", [])]
        for variable in spec.get("env", []):
            if variable["name"] in {"PROMETHEUS_MULTIPROC_DIR", "MPLCONFIGDIR"}:
                assert any(variable["value"].startswith(m.rstrip("/") + "/") for m in mounts), variable


def test_the_deployment_and_the_job_read_the_configmap_and_secret_that_exist() -> None:
    names = {kind: the(kind)["metadata"]["name"] for kind in ("ConfigMap", "Secret")}
    deployment_refs = {(k, v["name"]) for ref in container(the("Deployment"))["envFrom"] for k, v in ref.items()}
    assert deployment_refs == {("configMapRef", names["ConfigMap"]), ("secretRef", names["Secret"])}
    job_refs = {(k, v["name"]) for ref in container(the("Job"))["envFrom"] for k, v in ref.items()}
    assert ("secretRef", names["Secret"]) in job_refs


def test_the_service_selects_the_api_pods_and_not_the_migration_pods() -> None:
    service, deployment, job = the("Service"), the("Deployment"), the("Job")
    selector = service["spec"]["selector"]
    assert selector and selects(selector, deployment["spec"]["template"]["metadata"]["labels"])
    assert not selects(selector, job["spec"]["template"]["metadata"]["labels"])
    named = {port["name"] for port in container(deployment)["ports"]}
    assert all(port["targetPort"] in named for port in service["spec"]["ports"])


def test_the_autoscaler_targets_the_deployment_on_resources_it_requests() -> None:
    autoscaler, deployment = the("HorizontalPodAutoscaler"), the("Deployment")
    assert autoscaler["spec"]["scaleTargetRef"] == {
        "apiVersion": deployment["apiVersion"], "kind": "Deployment", "name": deployment["metadata"]["name"]}
    low, high = autoscaler["spec"]["minReplicas"], autoscaler["spec"]["maxReplicas"]
    assert 2 <= low <= high
    requested = set(container(deployment)["resources"]["requests"])
    for metric in autoscaler["spec"]["metrics"]:
        if metric["type"] == "Resource" and metric["resource"]["target"]["type"] == "Utilization":
            assert metric["resource"]["name"] in requested, "utilisation of a resource the pods do not request"


def test_the_disruption_budget_covers_the_api_pods_and_lets_a_drain_proceed() -> None:
    budget, deployment, job = the("PodDisruptionBudget"), the("Deployment"), the("Job")
    selector = budget["spec"]["selector"]["matchLabels"]
    assert selects(selector, deployment["spec"]["template"]["metadata"]["labels"])
    assert not selects(selector, job["spec"]["template"]["metadata"]["labels"])
    minimum = budget["spec"]["minAvailable"]
    assert isinstance(minimum, int) and 1 <= minimum < the("HorizontalPodAutoscaler")["spec"]["minReplicas"]
    assert minimum < deployment["spec"]["replicas"]


def test_the_configmap_holds_only_settings_and_the_secret_holds_the_database_url() -> None:
    data = the("ConfigMap")["data"]
    check_settings(data, "ConfigMap berth")
    assert "BERTH_DATABASE_URL" not in data, "the database URL (with its password) belongs in the Secret"
    # The Job migrates once per release; replicas must not race it at start-up.
    assert data["BERTH_MIGRATE_ON_START"] == "false"

    secret = the("Secret")
    plain = dict(secret.get("stringData", {}))
    plain.update({k: base64.b64decode(v).decode() for k, v in secret.get("data", {}).items()})
    assert set(plain) == {"BERTH_DATABASE_URL"}
    check_settings(plain, "Secret")
    postgresql_url(plain["BERTH_DATABASE_URL"])


def test_the_migration_job_runs_berth_migrate_with_the_same_image() -> None:
    job, deployment = the("Job"), the("Deployment")
    assert argv(job) == ["berth", "migrate"]
    assert container(job)["image"] == container(deployment)["image"]
    pod = job["spec"]["template"]["spec"]
    assert pod["restartPolicy"] in {"Never", "OnFailure"}
    assert pod["securityContext"]["runAsUser"] == image_uid()
    assert job["spec"]["backoffLimit"] >= 1
