"""CDS client authentication (HL7 CDS Hooks 2.0, "Security and Safety": signed JWT bearer tokens).

Every call carries ``Authorization: Bearer <JWT>``. The token is accepted only when all of
these hold, checked in this order (the first failure answers; its reason names a class of
problem and never key material):

1. the header names an asymmetric algorithm we allow (never ``none``, never HMAC), a ``kid``,
   and ``typ`` ``JWT``;
2. ``iss`` is a configured client;
3. a ``jku``, when present, is in that client's ``jku_allowlist`` - checked before anything is
   fetched from it - and then names the key set; otherwise the client's ``jwks_file`` or
   ``jwks_url`` does (URLs fetched with a short timeout, cached for ``jwks_cache_seconds``,
   fetched again once for an unknown ``kid``, at most every ``REFETCH_MIN_SECONDS``);
4. the signature verifies with the key of that ``kid`` and the header's algorithm;
5. ``aud`` (string or array) holds the URL of the endpoint being invoked (on a feedback
   endpoint, its service's URL is accepted too: clients commonly reuse the service call's);
6. ``exp`` and ``iat`` are present, and they and ``nbf`` are whole seconds between 1970 and
   the year 9999 (no NaN, no infinity, no fraction); ``exp`` not passed and ``iat`` not in
   the future, both within ``clock_skew_seconds``; ``exp - iat`` at most
   ``max_token_lifetime_seconds``;
7. ``jti`` has not been seen before from this issuer by any replica sharing the database
   (remembered until ``exp`` plus the skew); ``tenant`` is recorded.

When ``auth.required`` is false nothing is checked and the caller is anonymous; an anonymous
caller may name any ``fhirServer`` only in a local trial (``settings.local_trial``), and none
otherwise, because then nobody vouches for the server the service would send requests to.
"""

from __future__ import annotations

import asyncio
import json
import logging
import math
import time
import uuid
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import jwt
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec, ed448, ed25519, rsa

from cds_service.config import ClientSettings, Settings
from cds_service.store.database import Store
from cds_service.store.tokens import MAX_FIELD, purge_expired, remember_jti

log = logging.getLogger("tonicity.auth")

#: Algorithms a client may sign with (asymmetric only) and the key each needs.
ALGORITHM_KEYS: Mapping[str, tuple[str, frozenset[str]]] = {
    "ES256": ("EC", frozenset({"P-256"})),
    "ES384": ("EC", frozenset({"P-384"})),
    "ES512": ("EC", frozenset({"P-521"})),
    "RS256": ("RSA", frozenset()),
    "RS384": ("RSA", frozenset()),
    "RS512": ("RSA", frozenset()),
    "PS256": ("RSA", frozenset()),
    "PS384": ("RSA", frozenset()),
    "PS512": ("RSA", frozenset()),
    "EdDSA": ("OKP", frozenset({"Ed25519", "Ed448"})),
}
MAX_TOKEN_CHARS = 16_384
MAX_JWKS_BYTES = 512 * 1024
REFETCH_MIN_SECONDS = 10.0
PURGE_EVERY_SECONDS = 600.0


class AuthError(Exception):
    """The caller could not be authenticated. ``reason`` is safe to show to the caller."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


@dataclass(frozen=True, slots=True)
class Caller:
    """Who is calling: a configured client (``client`` set) or anonymous (local trial)."""

    issuer: str | None
    tenant: str | None
    client: ClientSettings | None
    #: True only for an anonymous caller of a local trial: any fhirServer may be contacted.
    any_fhir_server: bool = False

    @property
    def anonymous(self) -> bool:
        return self.client is None


def normalise_base_url(url: str) -> str | None:
    """``scheme://host[:port]/path`` with scheme and host lower-cased and no trailing slash;
    None for anything that is not a plain http(s) base URL (query, fragment, user info)."""
    try:
        parts = urlsplit(url.strip())
    except ValueError:
        return None
    if parts.scheme.lower() not in ("http", "https") or not parts.hostname:
        return None
    if parts.query or parts.fragment or parts.username is not None or parts.password is not None:
        return None
    return f"{parts.scheme.lower()}://{parts.netloc.lower()}{parts.path.rstrip('/')}"


def fhir_server_allowed(caller: Caller, fhir_server: str) -> bool:
    """May the service send requests (with the client's access token) to ``fhir_server``?

    Exact match, after normalising case of scheme and host and a trailing slash, against the
    calling client's ``fhir_servers``. Anonymous callers: only in a local trial.
    """
    wanted = normalise_base_url(fhir_server)
    if wanted is None:
        return False
    if caller.client is None:
        return caller.any_fhir_server
    return any(normalise_base_url(allowed) == wanted for allowed in caller.client.fhir_servers)


@dataclass(frozen=True, slots=True)
class _KeySource:
    kind: str  # "file" | "url"
    location: str


@dataclass(slots=True)
class _KeySet:
    keys: dict[str, dict[str, Any]]
    loaded_at: float


class Authenticator:
    """Checks bearer tokens of CDS clients; one per app, shared by all requests."""

    def __init__(
        self,
        settings: Settings,
        store: Store,
        http: httpx.AsyncClient,
        *,
        clock: Callable[[], float] = time.monotonic,
        now: Callable[[], datetime] = lambda: datetime.now(UTC),
    ) -> None:
        self.settings = settings
        self.store = store
        self.http = http
        self._clock = clock
        self._now = now
        self._clients: dict[str, ClientSettings] = {}
        for client in settings.auth.clients:
            key = _issuer_key(client.issuer)
            if key in self._clients:
                raise ValueError(f"auth.clients: issuer {client.issuer!r} is configured twice")
            if not (client.jwks_file or client.jwks_url or client.jku_allowlist):
                raise ValueError(
                    f"auth.clients: issuer {client.issuer!r} needs jwks_file, jwks_url "
                    "or jku_allowlist"
                )
            self._clients[key] = client
        self._cache: dict[_KeySource, _KeySet] = {}
        self._locks: dict[_KeySource, asyncio.Lock] = {}
        self._last_purge = -PURGE_EVERY_SECONDS

    async def authenticate(
        self, authorization: str | None, endpoint_url: str, *also_accept: str
    ) -> Caller:
        """The caller behind ``authorization`` for a call to ``endpoint_url``
        (``{public_base_url}{path}``), or AuthError. ``also_accept``: further URLs the
        token's ``aud`` may name instead (the service URL, on its feedback endpoint)."""
        auth = self.settings.auth
        if not auth.required:
            return Caller(None, None, None, any_fhir_server=self.settings.local_trial)
        try:
            return await self._check(_bearer(authorization), (endpoint_url, *also_accept))
        except AuthError as exc:
            log.info("authentication refused", extra={"fields": {"reason": exc.reason}})
            raise

    def fhir_server_allowed(self, caller: Caller, fhir_server: str) -> bool:
        return fhir_server_allowed(caller, fhir_server)

    async def _check(self, token: str, audiences: tuple[str, ...]) -> Caller:
        try:
            header = jwt.get_unverified_header(token)
            unverified = jwt.decode(token, options={"verify_signature": False})
        except jwt.PyJWTError:
            raise AuthError("malformed token") from None
        alg = header.get("alg")
        if not isinstance(alg, str) or alg not in ALGORITHM_KEYS:
            raise AuthError("algorithm not allowed")
        if str(header.get("typ", "")).upper() != "JWT":
            raise AuthError("token type is not JWT")
        kid = header.get("kid")
        if not isinstance(kid, str) or not kid:
            raise AuthError("missing key id")
        issuer = unverified.get("iss")
        client = self._clients.get(_issuer_key(issuer)) if isinstance(issuer, str) else None
        if client is None:
            raise AuthError("unknown issuer")
        source = _source_for(client, header.get("jku", None))
        jwk = await self._find_key(source, kid)
        claims = _verify(token, jwk, alg)
        return await self._accept(client, claims, audiences)

    async def _accept(
        self, client: ClientSettings, claims: dict[str, Any], audiences: tuple[str, ...]
    ) -> Caller:
        auth = self.settings.auth
        if not any(_audience_matches(claims.get("aud"), url) for url in audiences):
            raise AuthError("audience mismatch")
        exp, iat = _numeric_date(claims.get("exp")), _numeric_date(claims.get("iat"))
        if exp is None or iat is None:
            raise AuthError("malformed token")
        now_dt = self._now()
        now, skew = now_dt.timestamp(), auth.clock_skew_seconds
        if exp <= now - skew:
            raise AuthError("token expired")
        if iat > now + skew:
            raise AuthError("token issued in the future")
        if "nbf" in claims:
            nbf = _numeric_date(claims["nbf"])
            if nbf is None:
                raise AuthError("malformed token")
            if nbf > now + skew:
                raise AuthError("token not yet valid")
        if exp <= iat:
            raise AuthError("token lifetime invalid")
        if exp - iat > auth.max_token_lifetime_seconds:
            raise AuthError("token lifetime too long")
        jti, tenant = claims.get("jti"), claims.get("tenant")
        if not isinstance(jti, str) or not jti or len(jti) > MAX_FIELD:
            raise AuthError("malformed token")
        if tenant is not None and (not isinstance(tenant, str) or len(tenant) > MAX_FIELD):
            raise AuthError("malformed token")
        keep_until = datetime.fromtimestamp(exp, UTC) + timedelta(seconds=skew)
        fresh = await asyncio.to_thread(
            remember_jti, self.store, client.issuer, jti, keep_until, tenant, now_dt
        )
        if not fresh:
            raise AuthError("token replayed")
        await self._maybe_purge(now_dt)
        return Caller(issuer=client.issuer, tenant=tenant or None, client=client)

    async def _maybe_purge(self, now: datetime) -> None:
        if self._clock() - self._last_purge < PURGE_EVERY_SECONDS:
            return
        self._last_purge = self._clock()
        try:
            await asyncio.to_thread(purge_expired, self.store, now)
        except Exception as exc:  # purging is housekeeping; a failure must not refuse a caller
            log.warning(
                "purge of expired token ids failed", extra={"fields": {"error": type(exc).__name__}}
            )

    async def _find_key(self, source: _KeySource, kid: str) -> dict[str, Any]:
        keys = await self._load(source, refresh=False)
        if kid not in keys.keys and self._clock() - keys.loaded_at >= REFETCH_MIN_SECONDS:
            keys = await self._load(source, refresh=True)
        jwk = keys.keys.get(kid)
        if jwk is None:
            raise AuthError("unknown key id")
        return jwk

    async def _load(self, source: _KeySource, *, refresh: bool) -> _KeySet:
        ttl = self.settings.auth.jwks_cache_seconds
        lock = self._locks.setdefault(source, asyncio.Lock())
        async with lock:
            cached = self._cache.get(source)
            now = self._clock()
            if cached is not None and not refresh and now - cached.loaded_at < ttl:
                return cached
            if cached is not None and refresh and now - cached.loaded_at < REFETCH_MIN_SECONDS:
                return cached  # another request refetched a moment ago
            try:
                keys = _usable_keys(await self._read(source))
            except AuthError:
                if cached is not None:  # keep serving the last good key set
                    return cached
                raise
            fresh = _KeySet(keys, now)
            self._cache[source] = fresh
            return fresh

    async def _read(self, source: _KeySource) -> object:
        if source.kind == "file":
            try:
                return json.loads(Path(source.location).read_bytes())
            except (OSError, ValueError) as exc:
                log.error(
                    "client key set file unreadable",
                    extra={"fields": {"file": source.location, "error": type(exc).__name__}},
                )
                raise AuthError("key set unavailable") from None
        try:
            response = await self.http.get(
                source.location,
                timeout=self.settings.auth.jwks_fetch_timeout_seconds,
                follow_redirects=False,
                headers={"Accept": "application/json"},
            )
            if response.status_code != 200 or len(response.content) > MAX_JWKS_BYTES:
                raise ValueError(f"status {response.status_code}")
            return response.json()
        except (httpx.HTTPError, ValueError) as exc:
            log.warning(
                "client key set fetch failed",
                extra={"fields": {"url": source.location, "error": type(exc).__name__}},
            )
            raise AuthError("key set unavailable") from None


def _bearer(authorization: str | None) -> str:
    if not authorization:
        raise AuthError("missing bearer token")
    scheme, _, token = authorization.strip().partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        raise AuthError("missing bearer token")
    if len(token) > MAX_TOKEN_CHARS:
        raise AuthError("malformed token")
    return token


def _issuer_key(issuer: str) -> str:
    return issuer.strip().rstrip("/")


def _source_for(client: ClientSettings, jku: object) -> _KeySource:
    if jku is not None:
        if not isinstance(jku, str) or jku not in client.jku_allowlist:
            raise AuthError("jku not allowed")
        return _KeySource("url", jku)
    if client.jwks_file is not None:
        return _KeySource("file", str(client.jwks_file))
    if client.jwks_url:
        return _KeySource("url", client.jwks_url)
    raise AuthError("jku required for this issuer")


def _usable_keys(document: object) -> dict[str, dict[str, Any]]:
    """Signature keys of an asymmetric type with a kid; everything else is left out."""
    if not isinstance(document, dict) or not isinstance(document.get("keys"), list):
        raise AuthError("key set unavailable")
    keys: dict[str, dict[str, Any]] = {}
    for jwk in document["keys"]:
        if not isinstance(jwk, dict) or jwk.get("kty") not in ("EC", "RSA", "OKP"):
            continue
        if jwk.get("use", "sig") != "sig" or "d" in jwk:  # never trust a published private key
            continue
        if isinstance(jwk.get("kid"), str) and jwk["kid"]:
            keys.setdefault(jwk["kid"], jwk)
    return keys


def _verify(token: str, jwk: dict[str, Any], alg: str) -> dict[str, Any]:
    kty, curves = ALGORITHM_KEYS[alg]
    if jwk.get("kty") != kty or (curves and jwk.get("crv") not in curves):
        raise AuthError("algorithm does not match key")
    if jwk.get("alg") not in (None, alg):
        raise AuthError("algorithm does not match key")
    try:
        key = jwt.PyJWK(jwk, algorithm=alg)
    except jwt.PyJWTError:
        raise AuthError("invalid key in key set") from None
    try:
        return jwt.decode(
            token,
            key,
            algorithms=[alg],
            options={
                "require": ["iss", "aud", "exp", "iat", "jti"],
                "verify_aud": False,
                "verify_iss": False,
                "verify_exp": False,
                "verify_iat": False,
                "verify_nbf": False,
                "enforce_minimum_key_length": True,
            },
        )
    except jwt.InvalidSignatureError:
        raise AuthError("token signature invalid") from None
    except jwt.MissingRequiredClaimError as exc:
        raise AuthError(f"missing claim: {exc.claim}") from None
    except jwt.InvalidKeyError:
        raise AuthError("key too weak") from None
    except jwt.PyJWTError:
        raise AuthError("malformed token") from None


def _audience_matches(aud: object, endpoint_url: str) -> bool:
    wanted = endpoint_url.rstrip("/")
    values = [aud] if isinstance(aud, str) else aud if isinstance(aud, list) else []
    return any(isinstance(v, str) and v.rstrip("/") == wanted for v in values)


#: 9999-12-31T23:59:59Z: the last second a datetime holds.
_LAST_NUMERIC_DATE = 253_402_300_799


def _numeric_date(value: object) -> int | None:
    """A NumericDate claim (RFC 7519 section 2) as whole seconds, or None.

    Refused: booleans, strings, NaN and infinities, values before 1970 or after year 9999,
    and fractions of a second. RFC 7519 allows fractions; we take only whole seconds (an
    integral float such as ``1700000000.0`` counts as whole), as CDS clients send them, so
    that no comparison meets a value no datetime can hold.
    """
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    if isinstance(value, float) and not (math.isfinite(value) and value.is_integer()):
        return None
    seconds = int(value)
    return seconds if 0 <= seconds <= _LAST_NUMERIC_DATE else None


# ---------------------------------------------------------------------------------------------
# Signing (the client side): `tonicity keys sign` and `tonicity replay --key` use this.

PrivateKey = (
    ec.EllipticCurvePrivateKey
    | rsa.RSAPrivateKey
    | ed25519.Ed25519PrivateKey
    | ed448.Ed448PrivateKey
)
_EC_ALGS = {"secp256r1": "ES256", "secp384r1": "ES384", "secp521r1": "ES512"}


def load_private_key(material: str | bytes | Mapping[str, Any]) -> tuple[PrivateKey, str]:
    """A private key from PEM text or a private JWK, with the algorithm it signs with
    (the JWK's ``alg``, else ES256/384/512 by curve, RS384 for RSA, EdDSA for Ed25519/Ed448)."""
    declared: str | None = None
    try:
        if isinstance(material, Mapping):
            declared = material.get("alg")
            key = jwt.PyJWK(dict(material)).key
        else:
            data = material.encode() if isinstance(material, str) else material
            key = serialization.load_pem_private_key(data, password=None)
    except (ValueError, TypeError, jwt.PyJWTError) as exc:
        raise ValueError(f"not a usable private key ({type(exc).__name__})") from None
    if isinstance(key, ec.EllipticCurvePrivateKey):
        alg = _EC_ALGS.get(key.curve.name)
    elif isinstance(key, rsa.RSAPrivateKey):
        alg = "RS384"
    elif isinstance(key, ed25519.Ed25519PrivateKey | ed448.Ed448PrivateKey):
        alg = "EdDSA"
    else:
        alg = None
    if alg is None:
        raise ValueError("the key is not a private EC (P-256/384/521), RSA or EdDSA key")
    if declared is not None:
        if declared not in ALGORITHM_KEYS or ALGORITHM_KEYS[declared][0] != ALGORITHM_KEYS[alg][0]:
            raise ValueError(f"the key's alg {declared!r} does not fit its type")
        alg = declared
    return key, alg  # type: ignore[return-value]


def sign_token(
    private_key: str | bytes | Mapping[str, Any],
    issuer: str,
    audience: str,
    kid: str,
    lifetime: int = 300,
    now: datetime | None = None,
    *,
    tenant: str | None = None,
    jku: str | None = None,
    alg: str | None = None,
) -> str:
    """A CDS client's bearer token for one call to ``audience`` (the endpoint URL)."""
    if lifetime <= 0:
        raise ValueError("lifetime must be positive")
    if not issuer or not audience or not kid:
        raise ValueError("issuer, audience and kid are required")
    key, key_alg = load_private_key(private_key)
    alg = alg or key_alg
    if alg not in ALGORITHM_KEYS or ALGORITHM_KEYS[alg][0] != ALGORITHM_KEYS[key_alg][0]:
        raise ValueError(f"algorithm {alg!r} is not allowed for this key")
    issued = int((now or datetime.now(UTC)).timestamp())
    claims: dict[str, Any] = {
        "iss": issuer,
        "aud": audience,
        "iat": issued,
        "exp": issued + int(lifetime),
        "jti": str(uuid.uuid4()),
    }
    if tenant:
        claims["tenant"] = tenant
    headers: dict[str, Any] = {"typ": "JWT", "kid": kid}
    if jku:
        headers["jku"] = jku
    return jwt.encode(claims, key, algorithm=alg, headers=headers)
