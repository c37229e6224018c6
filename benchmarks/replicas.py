"""Two replicas on one PostgreSQL: replay protection and one feedback report across both.

Starts two ``tonicity serve`` processes on loopback, with authentication on, sharing one
PostgreSQL database (a fresh schema, dropped afterwards) and one public base URL, as behind a
load balancer. A client key pair comes from ``tonicity keys generate``; tokens are signed with
``cds_service.hooks.auth.sign_token`` (what ``tonicity keys sign`` prints). Checks:

- a token used once on replica A is refused on replica B (401), and the other way round;
- a token replayed on the same replica is refused (401);
- feedback on cards from A sent to A, and on cards from B sent to B, all appear in the one
  ``tonicity feedback-report`` (run against either replica's config).

    python -m benchmarks.replicas [--postgres-url URL]   (default: $TONICITY_TEST_POSTGRES_URL)
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path
from typing import Any

import httpx

from benchmarks import _servers
from benchmarks import requests as rq
from benchmarks.durability import POSTGRES_ENV, _drop_schema, _fresh_schema

ISSUER = "https://ehr.larkspur.test"
PUBLIC_BASE = "https://cds.larkspur.test"
KID = "lvh-ehr-bench-key"


def _keys(folder: Path) -> tuple[Path, Path]:
    subprocess.run(
        [
            sys.executable,
            "-m",
            "cds_service.cli",
            "keys",
            "generate",
            "--out-dir",
            str(folder),
            "--kid",
            KID,
        ],
        check=True,
        cwd=_servers.ROOT,
        capture_output=True,
    )
    return folder / f"{KID}.private.pem", folder / f"{KID}.jwks.json"


def _token(private_pem: Path, path: str) -> str:
    from cds_service.hooks.auth import sign_token

    return sign_token(private_pem.read_bytes(), ISSUER, PUBLIC_BASE + path, KID)


def _post(base: str, path: str, token: str, body: dict[str, Any]) -> httpx.Response:
    return httpx.post(
        base + path, json=body, headers={"Authorization": f"Bearer {token}"}, timeout=60
    )


def _report(config: Path) -> dict[str, Any]:
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "cds_service.cli",
            "feedback-report",
            "--config",
            str(config),
            "--json",
        ],
        capture_output=True,
        text=True,
        cwd=_servers.ROOT,
        check=True,
    )
    return dict(json.loads(out.stdout))


def _run(url: str, folder: Path) -> dict[str, Any]:
    private_pem, jwks = _keys(folder)
    client = f'[[auth.clients]]\nissuer = "{ISSUER}"\njwks_file = "{jwks}"\nfhir_servers = []\n'
    servers, configs = [], []
    for name in ("A", "B"):
        port = _servers.free_port()
        config = _servers.write_config(
            folder,
            storage_url=url,
            port=port,
            auth_required=True,
            public_base_url=PUBLIC_BASE,
            extra=client,
        )
        configs.append(config)
        servers.append(
            _servers.Server(f"replica-{name}", _servers.tonicity_argv(config, port), port, folder)
        )
    a, b = servers
    hook_path = "/cds-services/sodium-workup"
    body = rq.hook_request("patient-view", 60)
    checks: dict[str, Any] = {}
    with a, b:
        t1 = _token(private_pem, hook_path)
        first_a = _post(a.base_url, hook_path, t1, body)
        checks["token_1_on_A"] = first_a.status_code
        checks["token_1_replayed_on_B"] = _post(b.base_url, hook_path, t1, body).status_code
        checks["token_1_replayed_on_A"] = _post(a.base_url, hook_path, t1, body).status_code
        t2 = _token(private_pem, hook_path)
        first_b = _post(b.base_url, hook_path, t2, body)
        checks["token_2_on_B"] = first_b.status_code
        checks["token_2_replayed_on_A"] = _post(a.base_url, hook_path, t2, body).status_code
        replay_answer = _post(a.base_url, hook_path, t2, body)
        checks["replay_answer_is_outcome"] = replay_answer.json().get(
            "resourceType"
        ) == "OperationOutcome" and replay_answer.headers.get("www-authenticate", "").startswith(
            "Bearer"
        )
        issues = replay_answer.json().get("issue") or [{}]
        checks["replay_diagnostics"] = issues[0].get("diagnostics")
        cards_a = first_a.json().get("cards", []) if first_a.status_code == 200 else []
        cards_b = first_b.json().get("cards", []) if first_b.status_code == 200 else []
        fb_path = hook_path + "/feedback"
        fb_a = _post(a.base_url, fb_path, _token(private_pem, fb_path), rq.feedback_body(cards_a))
        fb_b = _post(b.base_url, fb_path, _token(private_pem, fb_path), rq.feedback_body(cards_b))
        checks["feedback_A"] = fb_a.status_code
        checks["feedback_B"] = fb_b.status_code
    report = _report(configs[0])
    same_report = report == _report(configs[1])
    rows = report.get("findings", [])
    answered = sum(r["accepted"] + r["overridden"] + r["ignored"] for r in rows)
    shown = sum(r["shown"] for r in rows)
    sent = len(cards_a) + len(cards_b)
    goals = [
        ("a token used on A is refused on B (401)", checks["token_1_replayed_on_B"] == 401),
        ("a token used on B is refused on A (401)", checks["token_2_replayed_on_A"] == 401),
        (
            "a token replayed on the same replica is refused (401)",
            checks["token_1_replayed_on_A"] == 401,
        ),
        (
            "first use of each token accepted (200)",
            checks["token_1_on_A"] == 200 and checks["token_2_on_B"] == 200,
        ),
        (
            "feedback sent to A and to B all in one feedback-report",
            sent > 0 and answered == sent and shown == sent and same_report,
        ),
    ]
    return {
        "checks": checks,
        "cards_from_A": len(cards_a),
        "cards_from_B": len(cards_b),
        "report_cards_shown": shown,
        "report_feedback_items": answered,
        "report_identical_from_both_configs": same_report,
        "goals": [{"goal": g, "pass": ok} for g, ok in goals],
    }


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m benchmarks.replicas", description=__doc__)
    p.add_argument("--postgres-url", default=os.environ.get(POSTGRES_ENV))
    args = p.parse_args(argv)
    if not args.postgres_url:
        print(f"replicas: needs --postgres-url or {POSTGRES_ENV}", file=sys.stderr)
        return 2
    result: dict[str, Any] = {
        "benchmark": "replicas",
        "command": "python -m benchmarks.replicas " + " ".join(sys.argv[1:]),
        "machine": _servers.machine(),
    }
    schema, scoped = _fresh_schema(args.postgres_url)
    try:
        with tempfile.TemporaryDirectory(prefix="tonicity-replicas-") as tmp:
            result.update(_run(scoped, Path(tmp)))
    finally:
        _drop_schema(args.postgres_url, schema)
    print(json.dumps(result, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
