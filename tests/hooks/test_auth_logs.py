"""PHI-safe structured logs (issue 5): JSON lines with a request id, salted patient hashes,
the audit line, and nothing secret or identifying in any of them."""

from __future__ import annotations

import io
import json
import logging
from collections.abc import Iterator

import pytest
from hypothesis import given
from hypothesis import strategies as st

from cds_service.config import Settings
from cds_service.logs import (
    JsonFormatter,
    audit,
    configure_logging,
    hash_patient_id,
    log_event,
    reset_request_id,
    set_request_id,
)
from tests.fixtures.auth_kit import ISSUER, claims, new_key, sign

SALT = "larkspur-valley-test-salt"
PATIENT = "LV-PAT-000731"


@pytest.fixture
def captured() -> Iterator[io.StringIO]:
    """Route the root logger through our JSON formatter into a buffer; restore afterwards."""
    root = logging.getLogger()
    saved = (list(root.handlers), root.level)
    buffer = io.StringIO()
    configure_logging(Settings(logging={"level": "DEBUG", "patient_id_salt": SALT}))
    root.handlers[0].setStream(buffer)
    try:
        yield buffer
    finally:
        root.handlers[:] = saved[0]
        root.setLevel(saved[1])


def _lines(buffer: io.StringIO) -> list[dict]:
    return [json.loads(line) for line in buffer.getvalue().splitlines() if line.strip()]


def test_hash_is_hmac_sha256_truncated_rfc4231():
    """RFC 4231 (Nystrom, 2005) test case 2: HMAC-SHA256 of "what do ya want for nothing?"
    under key "Jefe"; we keep the first 32 hex characters."""
    assert hash_patient_id("Jefe", "what do ya want for nothing?") == (
        "5bdcc146bf60754e6a042426089575c7"
    )


def test_hash_depends_on_salt_and_refuses_empty_salt():
    assert hash_patient_id(SALT, PATIENT) != hash_patient_id(SALT + "x", PATIENT)
    with pytest.raises(ValueError):
        hash_patient_id("", PATIENT)


def test_audit_line_has_fields_and_no_raw_id_or_token(captured):
    token = sign(new_key(), claims())
    rid, reset = set_request_id("req-42")
    try:
        audit(
            client=ISSUER,
            service="sodium-workup",
            finding_codes=["siadh-pattern", "hypotonic-hyponatremia", "siadh-pattern"],
            latency_ms=12.345,
            status=200,
            patient_hash=hash_patient_id(SALT, PATIENT),
        )
        logging.getLogger("tonicity.fetch").info("fetched with Authorization: Bearer %s", token)
    finally:
        reset_request_id(reset)
    text = captured.getvalue()
    assert PATIENT not in text and token not in text and token.split(".")[1] not in text
    line = next(x for x in _lines(captured) if x.get("audit"))
    assert line["request_id"] == rid == "req-42"
    assert line["event"] == "hook call" and line["service"] == "sodium-workup"
    assert line["finding_codes"] == ["hypotonic-hyponatremia", "siadh-pattern"]
    assert (line["status"], line["latency_ms"], line["client"]) == (200, 12.3, ISSUER)
    assert line["patient_hash"] == hash_patient_id(SALT, PATIENT)


def test_audit_refuses_what_is_not_a_hash(captured):
    audit(None, "sodium-order-sign", [], 1.0, 200, PATIENT)
    (line,) = [x for x in _lines(captured) if x.get("audit")]
    assert PATIENT not in captured.getvalue()
    assert line["patient_hash"] == "[not-a-hash]" and line["client"] == "anonymous"


def test_exception_message_is_not_logged(captured):
    try:
        raise ValueError(f"sodium 118 mmol/L for {PATIENT}")
    except ValueError:
        logging.getLogger("tonicity").exception("evaluation failed")
    (line,) = _lines(captured)
    assert line["exception"] == "ValueError" and "stack" in line
    assert PATIENT not in captured.getvalue() and "118" not in captured.getvalue()


def test_trend_link_tokens_and_bare_jwts_are_masked(captured):
    token = sign(new_key(), claims())
    log_event(logging.getLogger("uvicorn.access"), f"GET /trend/AbC123_secret-x {token}")
    text = captured.getvalue()
    assert "AbC123_secret-x" not in text and token not in text
    assert "/trend/[redacted]" in text and "[redacted-jwt]" in text


def test_request_id_scoped_and_sanitised(captured):
    rid, reset = set_request_id("bad id with spaces\n{")
    logging.getLogger("tonicity").info("inside")
    reset_request_id(reset)
    logging.getLogger("tonicity").info("outside")
    inside, outside = _lines(captured)
    assert inside["request_id"] == rid and len(rid) == 32 and " " not in rid
    assert outside["request_id"] is None


def test_every_line_is_one_json_object():
    record = logging.LogRecord("tonicity", logging.WARNING, __file__, 1, "a\nb", None, None)
    out = JsonFormatter().format(record)
    assert "\n" not in out and json.loads(out)["event"] == "a\nb"


@given(pid=st.from_regex(r"LV-[A-Za-z0-9]{6,20}", fullmatch=True))
def test_audit_never_carries_the_raw_id(pid):
    """Property: whatever the id, the audit line written for it does not contain it."""
    buffer = io.StringIO()
    handler = logging.StreamHandler(buffer)
    handler.setFormatter(JsonFormatter())
    logger = logging.getLogger("tonicity.audit")
    logger.addHandler(handler)
    old = logger.level
    logger.setLevel(logging.INFO)
    try:
        audit(ISSUER, "sodium-workup", ["out-of-scope"], 3.0, 200, hash_patient_id(SALT, pid))
    finally:
        logger.removeHandler(handler)
        logger.setLevel(old)
    assert buffer.getvalue() and pid not in buffer.getvalue()


def test_unknown_log_level_is_a_user_error():
    from cds_service.errors import UserError

    with pytest.raises(UserError, match=r"logging\.level"):
        configure_logging(Settings(logging={"level": "chatty"}))
