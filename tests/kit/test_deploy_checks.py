"""Deployment files checked as an operations team would before applying them (issue 14):

- every Kubernetes manifest against the Kubernetes API's own schemas (``kubernetes-validate``,
  offline schemas shipped in the package, strict: unknown fields refused);
- what a security review asks of them: no service-account token, a NetworkPolicy, an Ingress
  with TLS, an HPA, the migration before the pods serve, images that name their registry,
  the example Secret outside the applied folder;
- the compose file: its header sets every variable it needs, the password is a secret file,
  nginx re-resolves the service name, /metrics is not published; ``docker compose config``
  when the client has the compose plugin.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import kubernetes_validate
import pytest
import yaml

from .conftest import DOCKER

K8S = DOCKER / "k8s"
MANIFESTS = sorted(K8S.glob("*.yaml")) + sorted((DOCKER / "k8s-examples").glob("*.yaml"))


def _docs(path: Path) -> list[dict[str, Any]]:
    return [d for d in yaml.safe_load_all(path.read_text(encoding="utf-8")) if d]


def _by_kind() -> dict[str, dict[str, Any]]:
    return {d["kind"]: d for p in sorted(K8S.glob("*.yaml")) for d in _docs(p)}


@pytest.mark.parametrize("path", MANIFESTS, ids=[p.name for p in MANIFESTS])
def test_every_manifest_passes_the_kubernetes_schema(path: Path) -> None:
    for doc in _docs(path):
        kubernetes_validate.validate(doc, kubernetes_validate.latest_version(), strict=True)


def test_the_schema_check_can_fail() -> None:
    (dep,) = [d for d in _docs(K8S / "deployment.yaml") if d["kind"] == "Deployment"]
    dep["spec"]["template"]["spec"]["containers"][0]["livenessProbe"]["httpGet"]["paht"] = "/"
    with pytest.raises(kubernetes_validate.ValidationError):
        kubernetes_validate.validate(dep, kubernetes_validate.latest_version(), strict=True)


def test_applying_the_folder_applies_no_secret() -> None:
    assert "Secret" not in _by_kind()
    (example,) = _docs(DOCKER / "k8s-examples" / "secret.example.yaml")
    assert example["kind"] == "Secret"


def test_pods_carry_no_token_and_migrate_before_serving() -> None:
    k = _by_kind()
    pod = k["Deployment"]["spec"]["template"]["spec"]
    assert pod["automountServiceAccountToken"] is False
    (init,) = pod["initContainers"]
    assert init["args"][:3] == ["tonicity", "db", "upgrade"]
    (main,) = pod["containers"]
    assert init["image"] == main["image"]
    conf = k["ConfigMap"]["data"]["config.toml"]
    assert re.search(r"^\s*migrate_at_start = false", conf, re.M)
    for container in (init, main):
        # registry host / path / name : tag: where the image comes from
        assert re.fullmatch(r"[a-z0-9.-]+\.[a-z]+(:\d+)?/[a-z0-9/_-]+:[\w.-]+", container["image"])
        assert container["securityContext"]["readOnlyRootFilesystem"] is True


def test_network_policy_admits_the_proxy_and_scraper_and_egresses_to_db_fhir_dns() -> None:
    k = _by_kind()
    policy, dep = k["NetworkPolicy"], k["Deployment"]
    labels = dep["spec"]["template"]["metadata"]["labels"]
    assert policy["spec"]["podSelector"]["matchLabels"].items() <= labels.items()
    assert set(policy["spec"]["policyTypes"]) == {"Ingress", "Egress"}
    ingress_ports = {p["port"] for rule in policy["spec"]["ingress"] for p in rule["ports"]}
    assert ingress_ports == {"http", "metrics"}
    egress_ports = {p["port"] for rule in policy["spec"]["egress"] for p in rule["ports"]}
    assert egress_ports == {53, 5432, 443}


def test_ingress_is_tls_and_routes_to_the_service() -> None:
    k = _by_kind()
    ingress, svc = k["Ingress"], k["Service"]
    (tls,) = ingress["spec"]["tls"]
    (rule,) = ingress["spec"]["rules"]
    assert rule["host"] in tls["hosts"] and tls["secretName"]
    backend = rule["http"]["paths"][0]["backend"]["service"]
    assert backend["name"] == svc["metadata"]["name"]
    public = re.search(r'public_base_url = "([^"]+)"', k["ConfigMap"]["data"]["config.toml"])
    assert public and public.group(1) == f"https://{rule['host']}"


def test_hpa_scales_the_deployment_above_the_disruption_budget() -> None:
    k = _by_kind()
    hpa = k["HorizontalPodAutoscaler"]
    assert hpa["spec"]["scaleTargetRef"]["name"] == k["Deployment"]["metadata"]["name"]
    assert hpa["spec"]["minReplicas"] > k["PodDisruptionBudget"]["spec"]["minAvailable"]


def test_metrics_are_on_the_internal_port_only() -> None:
    k = _by_kind()
    (main,) = k["Deployment"]["spec"]["template"]["spec"]["containers"]
    ports = {p["name"]: p["containerPort"] for p in main["ports"]}
    assert re.search(
        rf"^\s*metrics_port = {ports['metrics']}", k["ConfigMap"]["data"]["config.toml"], re.M
    )
    assert [p["targetPort"] for p in k["Service"]["spec"]["ports"]] == ["http"]


# ---- compose -------------------------------------------------------------------------------

COMPOSE = DOCKER / "compose.yaml"


def _variables(text: str) -> set[str]:
    body = "\n".join(line for line in text.splitlines() if not line.lstrip().startswith("#"))
    return set(re.findall(r"\$\{([A-Z_][A-Z0-9_]*)", body))


def test_the_compose_header_sets_every_variable_and_secret_file() -> None:
    text = COMPOSE.read_text(encoding="utf-8")
    header = "\n".join(line for line in text.splitlines() if line.startswith("#"))
    needed = _variables(text)
    assert needed  # the salt at least
    for name in needed:
        assert re.search(rf"export {name}=|{name}=\S", header), name
    compose = yaml.safe_load(text)
    for secret in compose["secrets"].values():
        assert secret["file"].removeprefix("./") in header  # the header writes it
    assert "POSTGRES_PASSWORD" not in _variables(text)


def test_the_password_is_a_secret_file_and_migration_runs_first() -> None:
    compose = yaml.safe_load(COMPOSE.read_text(encoding="utf-8"))
    services = compose["services"]
    app, db, migrate = services["tonicity"], services["postgres"], services["migrate"]
    assert db["environment"]["POSTGRES_PASSWORD_FILE"] == "/run/secrets/db_password"
    for service in (app, migrate):
        env = service["environment"]
        assert env["TONICITY_STORAGE__PASSWORD_FILE"] == "/run/secrets/db_password"
        assert ":" not in env["TONICITY_STORAGE__URL"].split("//")[1].split("@")[0]
        assert "db_password" in service["secrets"]
    assert migrate["command"][:3] == ["tonicity", "db", "upgrade"]
    assert app["depends_on"]["migrate"]["condition"] == "service_completed_successfully"
    assert app["environment"]["TONICITY_STORAGE__MIGRATE_AT_START"] == "false"
    assert "9090" in app["expose"] and "ports" not in app


@pytest.mark.parametrize("conf", ["nginx.conf", "nginx-tls.conf"])
def test_nginx_re_resolves_the_service_name(conf: str) -> None:
    text = (DOCKER / conf).read_text(encoding="utf-8")
    assert re.search(r"^\s*resolver 127\.0\.0\.11 valid=\d+s", text, re.M)
    assert "upstream tonicity" not in text  # an upstream block resolves once, at start
    assert "proxy_pass $tonicity_upstream;" in text
    assert re.search(r"location = /metrics \{\s*return 404;", text)
    if conf == "nginx-tls.conf":
        assert re.search(r"listen \d+ ssl;", text) and "ssl_certificate " in text


def _compose_plugin() -> bool:
    docker = shutil.which("docker")
    if docker is None:
        return False
    done = subprocess.run([docker, "compose", "version"], capture_output=True, check=False)
    return done.returncode == 0


@pytest.mark.skipif(not _compose_plugin(), reason="no docker client with the compose plugin")
def test_docker_compose_config_accepts_the_file(tmp_path: Path) -> None:
    env = {"TONICITY_PATIENT_ID_SALT": "x" * 64, "PATH": "/usr/bin:/bin:/usr/local/bin"}
    done = subprocess.run(
        ["docker", "compose", "-f", str(COMPOSE), "config", "--quiet"],
        capture_output=True,
        text=True,
        env=env,
        check=False,
    )
    assert done.returncode == 0, done.stderr
