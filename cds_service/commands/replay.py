"""`tonicity replay DIR --url BASE_URL [--key KEY --issuer ISS --kid KID]`: acceptance test.

Posts every sample listed in ``DIR/manifest.json`` to a running deployment, one call per
sample, and checks each response against the manifest (codes it must and must not produce).
Progress goes to stderr; a table of file, service, HTTP status, cards (finding codes) and
latency goes to stdout. Exit status 0 when every sample matched, 1 on any mismatch or HTTP
error, 2 (one line on stderr) when the manifest is unreadable or the URL cannot be reached.

The samples were written for a fixed evaluation time (the manifest's ``now``); a deployment
evaluates at its own clock, so every date-time in a request (and ``birthDate``, by whole
days) is moved by the same offset, keeping each patient's timeline and age as written.
``--no-time-shift`` posts the files unchanged.

With ``--key`` every call carries a fresh JWT (new ``jti``) signed with that private key (PEM
or JWK), ``iss`` = ``--issuer`` and ``aud`` = the endpoint URL, as CDS Hooks 2.0 asks.
Samples that are Bundles (not hook requests) are posted as the ``patient-view`` request the
service's own Bundle helper builds; without that helper they are skipped and reported.

Every call carries ``X-Tonicity-Replay: <call id>``: the deployment logs it as replay traffic
(never suppressed as a repeat, left out of the quality figures unless asked for). When
discovery says a service is silent, or some of its findings are silent or off
(``extension["tonicity.alerts"]``), a silent finding is expected in the card log, not in the
response: replay reads what the call logged from ``/quality/calls/<call id>`` (same
authentication) and checks the manifest against cards shown plus findings logged silent. When
that cannot be read, the sample fails saying so; a finding switched off is reported, not
checked.
"""

from __future__ import annotations

import argparse
import json
import re
import sys
import time
import uuid
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from cds_service.commands._inputs import read_json_file
from cds_service.errors import UserError
from cds_service.hooks.timeshift import shift_times

SERVICE_FOR_HOOK = {
    "patient-view": "sodium-workup",
    "order-select": "sodium-order-select",
    "order-sign": "sodium-order-sign",
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("dir", metavar="DIR", help="sample folder with manifest.json")
    parser.add_argument(
        "--url", required=True, help="base URL of the deployment, e.g. https://cds.example.org"
    )
    parser.add_argument("--key", help="private key (PEM or JWK file) to sign a JWT per call")
    parser.add_argument("--issuer", help="JWT iss: the client issuer registered in the config")
    parser.add_argument(
        "--kid", help="JWT kid (default: the JWK's kid, else the key's RFC 7638 thumbprint)"
    )
    parser.add_argument("--tenant", help="JWT tenant claim, when the deployment uses one")
    parser.add_argument("--timeout", type=float, default=30.0, help="seconds per call (default 30)")
    parser.add_argument(
        "--no-time-shift",
        action="store_true",
        help="post the samples as written instead of moving them to the current time",
    )


# ---- samples --------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Expectation:
    file: str
    hook: str
    service: str
    now: datetime
    must: frozenset[str]
    must_not: frozenset[str]


@dataclass(slots=True)
class Outcome:
    expectation: Expectation
    status: int | None = None
    codes: list[str] = field(default_factory=list)
    latency_ms: float | None = None
    problems: list[str] = field(default_factory=list)
    skipped: str | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.skipped is not None or not self.problems


def _parse_time(value: object, where: str) -> datetime:
    if not isinstance(value, str):
        raise UserError(f"{where}: 'now' must be an ISO date-time")
    try:
        t = datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        raise UserError(f"{where}: 'now' {value!r} is not an ISO date-time") from None
    if t.tzinfo is None:
        raise UserError(f"{where}: 'now' {value!r} needs a time zone")
    return t


def _codes(value: object, where: str) -> frozenset[str]:
    if not isinstance(value, list) or not all(isinstance(c, str) for c in value):
        raise UserError(f"{where}: must be a list of finding codes")
    return frozenset(value)


def read_manifest(folder: Path) -> list[Expectation]:
    """The manifest's samples; UserError when it is missing or malformed."""
    path = folder / "manifest.json"
    data = read_json_file(path)
    samples = data.get("samples") if isinstance(data, dict) else None
    if not isinstance(samples, list) or not samples:
        raise UserError(f"{path} lists no samples (expected a 'samples' array)")
    out: list[Expectation] = []
    for n, item in enumerate(samples, start=1):
        where = f"{path.name} sample {n}"
        if not isinstance(item, dict) or not isinstance(item.get("file"), str):
            raise UserError(f"{where}: needs a 'file'")
        hook = item.get("hook", "patient-view")
        service = item.get("service") or SERVICE_FOR_HOOK.get(hook)
        if not isinstance(service, str):
            raise UserError(f"{where}: unknown hook {hook!r} and no 'service'")
        out.append(
            Expectation(
                file=item["file"],
                hook=str(hook),
                service=service,
                now=_parse_time(item.get("now", data.get("now")), where),
                must=_codes(item.get("must", []), f"{where} 'must'"),
                must_not=_codes(item.get("must_not", []), f"{where} 'must_not'"),
            )
        )
    return out


def _load_request(folder: Path, exp: Expectation) -> tuple[dict[str, Any] | None, str | None]:
    """(request body, None) or (None, why it is skipped); UserError for an unreadable file."""
    path = folder / exp.file
    body = read_json_file(path, "sample")
    if not isinstance(body, dict):
        raise UserError(f"sample {path} is not a JSON object")
    if isinstance(body.get("hook"), str):
        return body, None
    from cds_service.hooks.client import build_request  # heavy: only when a Bundle is replayed

    try:
        return build_request(body, exp.hook), None
    except (UserError, ValueError) as exc:
        return None, f"cannot build a {exp.hook} request: {exc}"


# ---- signing -------------------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Signer:
    """Signs one fresh token per call (the deployment refuses a reused ``jti``)."""

    material: str | dict[str, Any]
    issuer: str
    kid: str
    tenant: str | None = None

    @classmethod
    def from_args(cls, key: str, issuer: str | None, kid: str | None, tenant: str | None) -> Signer:
        if not issuer:
            raise UserError("--issuer is required with --key")
        try:
            text = Path(key).read_text(encoding="utf-8")
        except OSError as exc:
            raise UserError(f"cannot read key file {key}: {exc.strerror}") from None
        material: str | dict[str, Any] = text
        if text.lstrip().startswith("{"):
            try:
                material = json.loads(text)
            except ValueError:
                raise UserError(f"key file {key} is neither PEM nor a JSON JWK") from None
            if isinstance(material, dict) and isinstance(material.get("keys"), list):
                private = [k for k in material["keys"] if isinstance(k, dict) and "d" in k]
                if len(private) != 1:
                    raise UserError(f"key file {key} must hold exactly one private JWK")
                material = private[0]
            if not isinstance(material, dict):
                raise UserError(f"key file {key} is not a JWK object")
            kid = kid or material.get("kid")
        if not kid:  # as `tonicity keys` does: the RFC 7638 thumbprint of the public key
            from cds_service.commands.keys import public_jwk
            from cds_service.hooks.auth import load_private_key

            try:
                private, alg = load_private_key(material)
            except ValueError as exc:
                raise UserError(f"key file {key}: {exc}") from None
            kid = public_jwk(private, alg)["kid"]
        signer = cls(material, issuer, str(kid), tenant)
        signer.token("https://check.invalid/")  # fail now, once, on an unusable key
        return signer

    def token(self, audience: str) -> str:
        from cds_service.hooks.auth import sign_token

        try:
            return sign_token(self.material, self.issuer, audience, self.kid, tenant=self.tenant)
        except ValueError as exc:
            raise UserError(f"cannot sign with the key: {exc}") from None


# ---- the run -------------------------------------------------------------------------------


def _card_codes(body: Any) -> list[str] | None:
    if not isinstance(body, dict) or not isinstance(body.get("cards"), list):
        return None
    codes: list[str] = []
    for card in body["cards"]:
        topic = (card.get("source") or {}).get("topic") if isinstance(card, dict) else None
        code = topic.get("code") if isinstance(topic, dict) else None
        codes.append(code if isinstance(code, str) else "?")
    return codes


REPLAY_HEADER = "X-Tonicity-Replay"
ALERTS_EXTENSION = "tonicity.alerts"


@dataclass(frozen=True, slots=True)
class Quiet:
    """What discovery says a service keeps back: the whole service, or some findings."""

    silent_service: bool = False
    silent: frozenset[str] = frozenset()
    off: frozenset[str] = frozenset()

    @property
    def any(self) -> bool:
        return self.silent_service or bool(self.silent) or bool(self.off)

    @classmethod
    def of(cls, service: dict[str, Any]) -> Quiet:
        info = (service.get("extension") or {}).get(ALERTS_EXTENSION)
        if not isinstance(info, dict):
            return cls()
        return cls(
            silent_service=info.get("silent") is True,
            silent=frozenset(c for c in info.get("silentFindings", []) if isinstance(c, str)),
            off=frozenset(c for c in info.get("offFindings", []) if isinstance(c, str)),
        )


def check(
    outcome: Outcome, quiet: Quiet | None = None, logged_silent: set[str] = frozenset()
) -> None:
    """Compare the cards with the manifest; record every difference as a problem. With a
    ``quiet`` service, findings logged silent count as produced, and none may be a card."""
    exp = outcome.expectation
    got = set(outcome.codes)
    if quiet is not None and quiet.any:
        if quiet.silent_service and outcome.codes:
            outcome.problems.append("silent service returned cards")
        for code in sorted(got & quiet.silent):
            outcome.problems.append(f"{code} is silent but was returned")
        got |= set(logged_silent)
        for code in sorted(exp.must & quiet.off):
            outcome.notes.append(f"{code} is off here: not checked")
        exp = Expectation(
            exp.file, exp.hook, exp.service, exp.now, exp.must - quiet.off, exp.must_not
        )
        if logged_silent:
            outcome.notes.append("silent in the log: " + ",".join(sorted(logged_silent)))
    for code in sorted(exp.must - got):
        outcome.problems.append(f"missing {code}")
    for code in sorted(exp.must_not & got):
        outcome.problems.append(f"unexpected {code}")
    repeated = sorted({c for c in outcome.codes if outcome.codes.count(c) > 1})
    for code in repeated:
        outcome.problems.append(f"more than one card for {code}")


def replay_one(
    client: Any,
    base_url: str,
    folder: Path,
    exp: Expectation,
    signer: Signer | None,
    shift: bool,
    quiet: Quiet | None = None,
) -> Outcome:
    import httpx

    outcome = Outcome(exp)
    call_id = uuid.uuid4().hex
    body, skipped = _load_request(folder, exp)
    if body is None:
        outcome.skipped = skipped
        return outcome
    if shift:
        body = shift_times(body, datetime.now(UTC) - exp.now)
    url = f"{base_url}/cds-services/{exp.service}"
    headers = {
        "Content-Type": "application/json",
        "Accept": "application/json",
        REPLAY_HEADER: call_id,
    }
    if signer is not None:
        headers["Authorization"] = f"Bearer {signer.token(url)}"
    started = time.perf_counter()
    try:
        response = client.post(url, content=json.dumps(body), headers=headers)
    except httpx.HTTPError as exc:
        outcome.problems.append(f"HTTP error: {type(exc).__name__}: {exc}")
        return outcome
    outcome.latency_ms = (time.perf_counter() - started) * 1000
    outcome.status = response.status_code
    try:
        payload = response.json()
    except ValueError:
        payload = None
    if response.status_code != 200:
        outcome.problems.append(f"HTTP {response.status_code}: {_diagnostics(payload)}")
        return outcome
    codes = _card_codes(payload)
    if codes is None:
        outcome.problems.append("response has no 'cards' array")
        return outcome
    outcome.codes = codes
    logged: set[str] = set()
    if quiet is not None and quiet.any:
        logged_or_why = _logged_silent(client, base_url, call_id, signer)
        if isinstance(logged_or_why, str):
            outcome.problems.append(f"cannot check the silent findings: {logged_or_why}")
            return outcome
        logged = logged_or_why
    check(outcome, quiet, logged)
    return outcome


def _logged_silent(
    client: Any, base_url: str, call_id: str, signer: Signer | None
) -> set[str] | str:
    """Finding codes the call logged as silent, or why they cannot be read."""
    import httpx

    url = f"{base_url}/quality/calls/{call_id}"
    headers = {"Accept": "application/json"}
    if signer is not None:
        headers["Authorization"] = f"Bearer {signer.token(url)}"
    try:
        response = client.get(url, headers=headers)
    except httpx.HTTPError as exc:
        return f"{url}: {type(exc).__name__}"
    if response.status_code != 200:
        try:
            why = _diagnostics(response.json())
        except ValueError:
            why = "no OperationOutcome"
        return f"{url} answered HTTP {response.status_code}: {why}"
    try:
        decisions = response.json()["decisions"]
        return {d["code"] for d in decisions if d.get("action") == "silent"}
    except (ValueError, KeyError, TypeError, AttributeError):
        return f"{url} did not answer with the call's decisions"


def _diagnostics(payload: Any) -> str:
    if isinstance(payload, dict) and payload.get("resourceType") == "OperationOutcome":
        issues = payload.get("issue") or [{}]
        first = issues[0] if isinstance(issues[0], dict) else {}
        return str(first.get("diagnostics") or first.get("code") or "error")[:200]
    return "no OperationOutcome"


def _probe(client: Any, base_url: str, signer: Signer | None) -> dict[str, Quiet]:
    """Service ids the deployment lists, with what each keeps back; UserError (one line)
    when it cannot be reached."""
    import httpx

    url = f"{base_url}/cds-services"
    headers = {"Authorization": f"Bearer {signer.token(url)}"} if signer else {}
    try:
        response = client.get(url, headers=headers)
    except httpx.HTTPError as exc:
        raise UserError(f"cannot reach {base_url}: {type(exc).__name__}: {exc}") from None
    if response.status_code != 200:
        raise UserError(f"{base_url}/cds-services answered HTTP {response.status_code}")
    try:
        services = response.json().get("services", [])
        return {s["id"]: Quiet.of(s) for s in services if isinstance(s, dict) and "id" in s}
    except (ValueError, AttributeError, TypeError):
        raise UserError(f"{base_url}/cds-services is not a CDS Hooks discovery document") from None


def format_table(outcomes: list[Outcome]) -> str:
    header = ("file", "service", "status", "cards", "ms", "result")
    rows = [header]
    for o in outcomes:
        result = f"skipped: {o.skipped}" if o.skipped else "ok" if o.ok else "; ".join(o.problems)
        if o.notes:
            result += f" ({'; '.join(o.notes)})"
        rows.append(
            (
                o.expectation.file,
                o.expectation.service,
                "-" if o.status is None else str(o.status),
                ",".join(o.codes) or "-",
                "-" if o.latency_ms is None else f"{o.latency_ms:.0f}",
                result,
            )
        )
    widths = [max(len(r[i]) for r in rows) for i in range(len(header) - 1)]
    lines = [
        "  ".join(cell.ljust(w) for cell, w in zip(r[:-1], widths, strict=True)) + "  " + r[-1]
        for r in rows
    ]
    return "\n".join(line.rstrip() for line in lines)


def run(args: argparse.Namespace) -> int:
    import httpx

    base_url = str(args.url).rstrip("/")
    if not re.match(r"^https?://[^/\s]+", base_url):
        raise UserError(f"--url {args.url!r} is not an http(s) URL")
    if args.timeout <= 0:
        raise UserError("--timeout must be positive")
    folder = Path(args.dir)
    expectations = read_manifest(folder)
    signer = Signer.from_args(args.key, args.issuer, args.kid, args.tenant) if args.key else None

    outcomes: list[Outcome] = []
    with httpx.Client(timeout=args.timeout, follow_redirects=False) as client:
        listed = _probe(client, base_url, signer)
        total = len(expectations)
        for n, exp in enumerate(expectations, start=1):
            if exp.service not in listed:
                outcome = Outcome(exp, problems=[f"service {exp.service} not offered"])
            else:
                outcome = replay_one(
                    client,
                    base_url,
                    folder,
                    exp,
                    signer,
                    shift=not args.no_time_shift,
                    quiet=listed[exp.service],
                )
            outcomes.append(outcome)
            state = "skipped" if outcome.skipped else "ok" if outcome.ok else "MISMATCH"
            print(f"[{n}/{total}] {exp.file}: {state}", file=sys.stderr, flush=True)

    print(format_table(outcomes))
    failed = [o for o in outcomes if not o.ok]
    skipped = [o for o in outcomes if o.skipped]
    latencies = sorted(o.latency_ms for o in outcomes if o.latency_ms is not None)
    median = f", median {latencies[len(latencies) // 2]:.0f} ms" if latencies else ""
    print(
        f"{len(outcomes) - len(failed) - len(skipped)} matched, {len(failed)} failed, "
        f"{len(skipped)} skipped of {len(outcomes)}{median}"
    )
    if len(skipped) == len(outcomes):
        print("tonicity replay: nothing was posted (every sample skipped)", file=sys.stderr)
        return 1
    return 1 if failed else 0
