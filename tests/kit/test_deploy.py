"""Deployment files, parse-checked (Docker cannot run here): compose, Kubernetes, Dockerfile,
nginx and the example configuration. Field names follow the Compose Specification and the
Kubernetes API reference (apps/v1 Deployment, v1 Service/ConfigMap/Secret)."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any

import pytest
import yaml

from cds_service.config import Settings

from .conftest import DOCKER


def _docs(path: Path) -> list[dict[str, Any]]:
    return [d for d in yaml.safe_load_all(path.read_text(encoding="utf-8")) if d]


def _k8s() -> dict[str, dict[str, Any]]:
    out: dict[str, dict[str, Any]] = {}
    for path in sorted((DOCKER / "k8s").glob("*.yaml")):
        for doc in _docs(path):
            assert doc["apiVersion"] and doc["metadata"]["name"], path
            out[doc["kind"]] = doc
    return out


# ---- compose -------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def compose() -> dict[str, Any]:
    return yaml.safe_load((DOCKER / "compose.yaml").read_text(encoding="utf-8"))


def test_compose_runs_several_replicas_behind_a_proxy(compose: dict[str, Any]) -> None:
    services = compose["services"]
    app = services["tonicity"]
    assert app["deploy"]["replicas"] >= 2
    assert "ports" not in app  # only the proxy is published
    proxy = services["proxy"]
    assert proxy["image"].startswith("nginx")
    assert "./nginx.conf:/etc/nginx/nginx.conf:ro" in proxy["volumes"]
    conf = (DOCKER / "nginx.conf").read_text(encoding="utf-8")
    assert re.search(r"set\s+\$tonicity_upstream\s+http://tonicity:8080;", conf)
    assert "proxy_pass $tonicity_upstream;" in conf


def test_compose_has_postgresql_with_a_named_volume(compose: dict[str, Any]) -> None:
    db = compose["services"]["postgres"]
    assert db["image"].startswith("postgres:16")
    mounts = [v.split(":") for v in db["volumes"]]
    assert any(
        src in compose["volumes"] and dst == "/var/lib/postgresql/data" for src, dst, *_ in mounts
    )
    assert "pg_isready" in " ".join(db["healthcheck"]["test"])
    app = compose["services"]["tonicity"]
    assert app["depends_on"]["postgres"]["condition"] == "service_healthy"
    url = app["environment"]["TONICITY_STORAGE__URL"]
    assert url.startswith("postgresql+psycopg://") and "@postgres:5432/" in url


def test_compose_has_health_checks_and_a_read_only_config(compose: dict[str, Any]) -> None:
    app = compose["services"]["tonicity"]
    check = " ".join(app["healthcheck"]["test"])
    assert "/readyz" in check or "/healthz" in check
    assert "./config.toml:/etc/tonicity/config.toml:ro" in app["volumes"]
    assert compose["services"]["proxy"]["depends_on"]["tonicity"]["condition"] == (
        "service_healthy"
    )
    assert app["stop_grace_period"]  # time for in-flight requests on shutdown


# ---- Dockerfile ----------------------------------------------------------------------------


def test_dockerfile_is_multi_stage_slim_non_root_with_health_check() -> None:
    text = (DOCKER / "Dockerfile").read_text(encoding="utf-8")
    stages = re.findall(r"^FROM\s+(\S+)(?:\s+AS\s+(\S+))?", text, flags=re.M)
    assert len(stages) >= 2
    assert stages[-1][0] == "python:3.11-slim"
    final = text[text.rindex("\nFROM ") :]
    assert "--from=builder" in final
    assert not re.search(r"apt-get install|build-essential|gcc", final)
    user = re.findall(r"^USER\s+(\S+)", final, flags=re.M)
    assert user and not user[-1].startswith(("root", "0"))
    assert re.search(r"^HEALTHCHECK .*\n?.*/healthz", final, flags=re.M)
    assert "urllib.request" in final
    cmd = re.search(r"^CMD\s+(\[.*\])", final, flags=re.M)
    assert cmd and yaml.safe_load(cmd.group(1)) == [
        "tonicity",
        "serve",
        "--config",
        "/etc/tonicity/config.toml",
        "--host",
        "0.0.0.0",
        "--port",
        "8080",
    ]


def test_build_context_filter_ships_the_package_and_samples_only() -> None:
    lines = (DOCKER / "Dockerfile.dockerignore").read_text(encoding="utf-8").splitlines()
    assert "**" in lines and "!cds_service/**" in lines and "!sample_bundles/**" in lines


# ---- Kubernetes ----------------------------------------------------------------------------


def test_k8s_deployment_is_scaled_with_probes_and_limits() -> None:
    k = _k8s()
    dep = k["Deployment"]
    assert dep["spec"]["replicas"] >= 2
    labels = dep["spec"]["selector"]["matchLabels"]
    assert labels.items() <= dep["spec"]["template"]["metadata"]["labels"].items()
    pod = dep["spec"]["template"]["spec"]
    assert pod["securityContext"]["runAsNonRoot"] is True
    (container,) = pod["containers"]
    assert container["livenessProbe"]["httpGet"]["path"] == "/healthz"
    assert container["readinessProbe"]["httpGet"]["path"] == "/readyz"
    limits = container["resources"]["limits"]
    assert limits["cpu"] and limits["memory"]
    assert container["resources"]["requests"]["memory"]
    assert pod["terminationGracePeriodSeconds"] >= 15
    port = container["ports"][0]["containerPort"]
    assert "--port" in container["args"] and str(port) in container["args"]


def test_k8s_takes_secrets_from_the_secret_and_config_from_the_map() -> None:
    k = _k8s()
    (secret,) = _docs(DOCKER / "k8s-examples" / "secret.example.yaml")
    config_map = k["ConfigMap"]
    pod = k["Deployment"]["spec"]["template"]["spec"]
    (container,) = pod["containers"]
    env = {e["name"]: e for e in container["env"]}
    ref = env["TONICITY_LOGGING__PATIENT_ID_SALT"]["valueFrom"]["secretKeyRef"]
    assert ref["name"] == secret["metadata"]["name"] and ref["key"] in secret["stringData"]
    assert "TONICITY_STORAGE__URL" not in env  # the URL holds no password: in the ConfigMap
    volumes = {v["name"]: v for v in pod["volumes"]}
    assert any(
        v.get("configMap", {}).get("name") == config_map["metadata"]["name"]
        for v in volumes.values()
    )
    password = volumes["db-password"]["secret"]
    assert password["secretName"] == secret["metadata"]["name"]
    assert [i["key"] for i in password["items"]] == ["db-password"]
    assert "db-password" in secret["stringData"]
    mounts = {m["mountPath"] for m in container["volumeMounts"]}
    assert "/etc/tonicity/config.toml" in mounts and "/etc/tonicity/secrets" in mounts
    conf = tomllib.loads(config_map["data"]["config.toml"])
    assert conf["storage"]["password_file"] == "/etc/tonicity/secrets/db-password"
    assert (
        "@" in conf["storage"]["url"]
        and ":" not in conf["storage"]["url"].split("//")[1].split("@")[0]
    )


def test_k8s_service_selects_the_deployment_pods() -> None:
    k = _k8s()
    svc, dep = k["Service"], k["Deployment"]
    assert svc["spec"]["selector"].items() <= dep["spec"]["template"]["metadata"]["labels"].items()
    assert svc["spec"]["ports"][0]["targetPort"] in ("http", 8080)


# ---- configuration files -------------------------------------------------------------------


def _configs() -> list[Any]:
    example = tomllib.loads((DOCKER / "config.example.toml").read_text(encoding="utf-8"))
    in_map = tomllib.loads(_k8s()["ConfigMap"]["data"]["config.toml"])
    return [
        pytest.param("config.example.toml", example, id="example"),
        pytest.param("configmap config.toml", in_map, id="configmap"),
    ]


@pytest.mark.parametrize(("name", "data"), _configs())
def test_shipped_configs_are_valid_settings(
    name: str, data: dict[str, Any], tmp_path: Path
) -> None:
    storage = data.get("storage", {})
    if "password_file" in storage:  # the secret file exists only where it is deployed
        (tmp_path / "db-password").write_text("example", encoding="utf-8")
        storage["password_file"] = str(tmp_path / "db-password")
    settings = Settings(**data)
    assert settings.auth.required is True, name
    assert settings.server.public_base_url.startswith("https://"), name
    assert all(c.fhir_servers for c in settings.auth.clients), name
