"""Single-use JWT ids (``jti``), shared by every replica that uses the same database.

The unique constraint on ``(issuer, jti)`` decides races: when two replicas see the same token
at once, both try to insert, the database lets exactly one commit, and the other gets an
IntegrityError, which here means "already seen".
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import delete
from sqlalchemy.exc import IntegrityError

from cds_service.store.database import Store, as_utc
from cds_service.store.schema import SeenToken

MAX_FIELD = 300  # column width of issuer, jti and tenant


def remember_jti(
    store: Store,
    issuer: str,
    jti: str,
    expires_at: datetime,
    tenant: str | None,
    now: datetime,
) -> bool:
    """Record ``jti`` as used until ``expires_at``. False when it was already seen.

    A row for the same id whose time has passed is dropped first, so an id may come back
    once the token that first carried it can no longer be accepted anyway.
    """
    for name, value in (("issuer", issuer), ("jti", jti), ("tenant", tenant or "")):
        if len(value) > MAX_FIELD:
            raise ValueError(f"{name} is longer than {MAX_FIELD} characters")
    if not issuer or not jti:
        raise ValueError("issuer and jti must be non-empty")
    now_utc = as_utc(now)
    try:
        with store.session() as s:
            s.execute(
                delete(SeenToken).where(
                    SeenToken.issuer == issuer,
                    SeenToken.jti == jti,
                    SeenToken.expires_at < now_utc,
                )
            )
            s.add(
                SeenToken(
                    issuer=issuer,
                    jti=jti,
                    tenant=tenant or None,
                    expires_at=as_utc(expires_at),
                    seen_at=now_utc,
                )
            )
    except IntegrityError:
        return False
    return True


def purge_expired(store: Store, now: datetime) -> int:
    """Forget ids whose tokens have expired; returns how many rows went."""
    with store.session() as s:
        result = s.execute(delete(SeenToken).where(SeenToken.expires_at < as_utc(now)))
    return int(result.rowcount or 0)  # type: ignore[attr-defined]
