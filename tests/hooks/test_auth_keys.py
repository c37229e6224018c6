"""Key sets (jwks_url fetch, cache, one refetch for an unknown kid), the fhirServer allowlist,
token signing and the `tonicity keys` command."""

from __future__ import annotations

import json
import stat

import httpx
import jwt
import pytest
import respx
from hypothesis import given
from hypothesis import strategies as st

from cds_service.cli import main
from cds_service.commands.keys import thumbprint
from cds_service.config import ClientSettings
from cds_service.hooks.auth import (
    AuthError,
    Caller,
    fhir_server_allowed,
    normalise_base_url,
    sign_token,
)
from cds_service.store import Store
from tests.fixtures.auth_kit import (
    ENDPOINT,
    FHIR,
    ISSUER,
    NOW,
    Clock,
    authenticator,
    claims,
    new_key,
    run,
    settings_for,
    sign,
)

JWKS_URL = "https://ehr.larkspur-valley.example/.well-known/jwks.json"


def _jti(n: int) -> str:
    return f"00000000-0000-4000-8000-{n:012d}"


def test_jwks_url_fetched_cached_and_refetched_once_for_unknown_kid(tmp_path, sqlite_url):
    old, rotated = new_key("larkspur-old"), new_key("larkspur-new")
    both = {"keys": old.jwks()["keys"] + rotated.jwks()["keys"]}
    config = settings_for(tmp_path, None, client={"jwks_url": JWKS_URL})
    clock, store = Clock(), Store(sqlite_url)
    with respx.mock() as router:
        route = router.get(JWKS_URL).mock(
            side_effect=[
                httpx.Response(200, json=old.jwks()),
                httpx.Response(200, json=both),
                httpx.Response(200, json=both),
                httpx.Response(200, json=both),
            ]
        )
        auth = authenticator(config, store, clock=clock)

        def call(key, n):
            return run(auth.authenticate(f"Bearer {sign(key, claims(jti=_jti(n)))}", ENDPOINT))

        call(old, 1)
        call(old, 2)
        assert route.call_count == 1  # cached
        clock.t += 20
        call(rotated, 3)  # unknown kid: one refetch finds the rotated key
        assert route.call_count == 2
        clock.t += 5
        with pytest.raises(AuthError, match="unknown key id"):
            run(
                auth.authenticate(
                    f"Bearer {sign(new_key('nobody'), claims(jti=_jti(4)))}", ENDPOINT
                )
            )
        assert route.call_count == 2  # refetched 5 s ago: no second fetch
        clock.t += 20
        with pytest.raises(AuthError, match="unknown key id"):
            run(
                auth.authenticate(
                    f"Bearer {sign(new_key('nobody'), claims(jti=_jti(5)))}", ENDPOINT
                )
            )
        assert route.call_count == 3  # exactly one refetch per unknown kid
        clock.t += config.auth.jwks_cache_seconds + 1
        call(old, 6)
        assert route.call_count == 4  # cache lifetime over
    store.close()


@pytest.mark.parametrize(
    "failure",
    [httpx.Response(500), httpx.Response(200, text="not json"), httpx.ConnectTimeout("slow")],
    ids=["500", "not json", "timeout"],
)
def test_key_set_unavailable(failure, tmp_path, sqlite_url):
    config = settings_for(tmp_path, None, client={"jwks_url": JWKS_URL})
    store = Store(sqlite_url)
    with respx.mock() as router:
        router.get(JWKS_URL).mock(side_effect=[failure])
        with pytest.raises(AuthError) as info:
            run(
                authenticator(config, store).authenticate(
                    f"Bearer {sign(new_key(), claims())}", ENDPOINT
                )
            )
    store.close()
    assert info.value.reason == "key set unavailable"


def test_last_good_key_set_kept_when_refresh_fails(tmp_path, sqlite_url):
    key = new_key()
    config = settings_for(tmp_path, None, client={"jwks_url": JWKS_URL})
    clock, store = Clock(), Store(sqlite_url)
    with respx.mock() as router:
        router.get(JWKS_URL).mock(
            side_effect=[httpx.Response(200, json=key.jwks()), httpx.Response(503)]
        )
        auth = authenticator(config, store, clock=clock)
        run(auth.authenticate(f"Bearer {sign(key, claims(jti=_jti(1)))}", ENDPOINT))
        clock.t += config.auth.jwks_cache_seconds + 1
        caller = run(auth.authenticate(f"Bearer {sign(key, claims(jti=_jti(2)))}", ENDPOINT))
    store.close()
    assert caller.issuer == ISSUER


def test_symmetric_and_private_keys_in_jwks_are_ignored(tmp_path, sqlite_url):
    """A key set that also publishes an 'oct' key or a private key under our kid does not
    make them usable (RFC 7517 key types; publishing 'd' is a client error)."""
    key = new_key()
    (public,) = key.jwks()["keys"]
    hostile = {"keys": [{"kty": "oct", "kid": key.kid, "k": "c2VjcmV0"}, public | {"d": "AAAA"}]}
    config = settings_for(tmp_path, None, client={"jwks_url": JWKS_URL})
    store = Store(sqlite_url)
    with respx.mock() as router:
        router.get(JWKS_URL).mock(return_value=httpx.Response(200, json=hostile))
        with pytest.raises(AuthError, match="unknown key id"):
            run(
                authenticator(config, store).authenticate(f"Bearer {sign(key, claims())}", ENDPOINT)
            )
    store.close()


# --- fhirServer allowlist -----------------------------------------------------------------


def _caller(tmp_path) -> Caller:
    config = settings_for(tmp_path, new_key())
    return Caller(ISSUER, None, config.auth.clients[0])


@pytest.mark.parametrize(
    ("server", "allowed"),
    [
        (FHIR, True),
        (FHIR + "/", True),
        ("HTTPS://EHR.larkspur-valley.example/fhir/R4", True),
        ("https://ehr.larkspur-valley.example/fhir", False),
        ("https://ehr.larkspur-valley.example/fhir/R4/../../admin", False),
        ("https://ehr.larkspur-valley.example/fhir/R4?x=1", False),
        ("https://ehr.larkspur-valley.example@evil.example/fhir/R4", False),
        ("https://evil.example/fhir/R4", False),
        ("file:///etc/passwd", False),
        ("", False),
    ],
)
def test_fhir_server_allowlist(server, allowed, tmp_path):
    assert fhir_server_allowed(_caller(tmp_path), server) is allowed


@given(
    path=st.from_regex(r"(/[a-z0-9]{1,8}){0,3}", fullmatch=True),
    slashes=st.integers(0, 3),
    extra=st.from_regex(r"/[a-z0-9]{1,8}", fullmatch=True),
)
def test_allowlist_laws(path, slashes, extra):
    """Laws of the allowlist: normalising is idempotent; trailing slashes never matter; a
    base is never a prefix grant (a longer path below an allowed base is not allowed)."""
    base = f"https://ehr.larkspur-valley.example{path}"
    once = normalise_base_url(base + "/" * slashes)
    assert once is not None and normalise_base_url(once) == once
    client = ClientSettings(issuer=ISSUER, jwks_url=JWKS_URL, fhir_servers=[base])
    caller = Caller(ISSUER, None, client)
    assert fhir_server_allowed(caller, base + "/" * slashes)
    assert not fhir_server_allowed(caller, base + extra)


def test_anonymous_caller_only_in_local_trial():
    assert fhir_server_allowed(Caller(None, None, None, any_fhir_server=True), FHIR)
    assert not fhir_server_allowed(Caller(None, None, None), FHIR)
    assert not fhir_server_allowed(Caller(None, None, None, any_fhir_server=True), "ftp://x")


# --- signing and `tonicity keys` ------------------------------------------------------------


def test_thumbprint_matches_rfc7638_example():
    """RFC 7638 (Jones & Sakimura, 2015) section 3.1: the RSA key and its thumbprint."""
    jwk = {
        "kty": "RSA",
        "n": (
            "0vx7agoebGcQSuuPiLJXZptN9nndrQmbXEps2aiAFbWhM78LhWx4cbbfAAtVT86zwu1RK7aPFFxuhDR1"
            "L6tSoc_BJECPebWKRXjBZCiFV4n3oknjhMstn64tZ_2W-5JsGY4Hc5n9yBXArwl93lqt7_RN5w6Cf0h4"
            "QyQ5v-65YGjQR0_FDW2QvzqY368QQMicAtaSqzs8KJZgnYb9c7d0zgdAZHzu6qMQvRL5hajrn1n91CbO"
            "pbISD08qNLyrdkt-bFTWhAI4vMQFh6WeZu0fM4lFd2NcRwr3XPksINHaQ-G_xBniIqbw0Ls1jF44-csF"
            "Cur-kEgU8awapJzKnqDKgw"
        ),
        "e": "AQAB",
        "alg": "RS256",
        "kid": "2011-04-29",
    }
    assert thumbprint(jwk) == "NzbLsXh8uDCcd-6MNwXF4W_7noWXFZAfHkxZsRGC9Xs"


def test_sign_token_round_trip_with_pem(tmp_path, sqlite_url):
    key = new_key()
    token = sign_token(
        key.private_pem, ISSUER, ENDPOINT, key.kid, lifetime=60, now=NOW, tenant="larkspur-east"
    )
    header = jwt.get_unverified_header(token)
    assert (header["alg"], header["typ"], header["kid"]) == ("ES384", "JWT", key.kid)
    store = Store(sqlite_url)
    caller = run(
        authenticator(settings_for(tmp_path, key), store).authenticate(f"Bearer {token}", ENDPOINT)
    )
    store.close()
    assert caller.tenant == "larkspur-east"
    second = sign_token(key.private_pem, ISSUER, ENDPOINT, key.kid, now=NOW)
    assert (
        jwt.decode(second, options={"verify_signature": False})["jti"]
        != jwt.decode(token, options={"verify_signature": False})["jti"]
    )


@pytest.mark.parametrize(
    "bad", [b"not a key", "-----BEGIN PUBLIC KEY-----\nAAAA\n-----END PUBLIC KEY-----\n"]
)
def test_sign_token_refuses_unusable_keys(bad):
    with pytest.raises(ValueError):
        sign_token(bad, ISSUER, ENDPOINT, "k")


def test_sign_token_refuses_symmetric_alg():
    with pytest.raises(ValueError, match="not allowed"):
        sign_token(new_key().private_pem, ISSUER, ENDPOINT, "k", alg="HS256")


@pytest.mark.parametrize("alg", ["ES384", "ES256", "EdDSA", "PS384"])
def test_keys_generate_then_sign_is_accepted(alg, tmp_path, sqlite_url, capsys):
    out = tmp_path / "keys"
    assert main(["keys", "generate", "--out-dir", str(out), "--alg", alg, "--kid", "lv-1"]) == 0
    pem, jwks_path = out / "lv-1.private.pem", out / "lv-1.jwks.json"
    assert stat.S_IMODE(pem.stat().st_mode) == 0o600
    jwks = json.loads(jwks_path.read_text())
    assert "d" not in jwks["keys"][0] and jwks["keys"][0]["alg"] == alg
    capsys.readouterr()
    assert (
        main(
            [
                "keys",
                "sign",
                "--key",
                str(pem),
                "--issuer",
                ISSUER,
                "--aud",
                ENDPOINT,
                "--kid",
                "lv-1",
                "--alg",
                alg,
                "--lifetime",
                "120",
                "--tenant",
                "lv",
            ]
        )
        == 0
    )
    token = capsys.readouterr().out.strip()
    config = settings_for(tmp_path, None, client={"jwks_file": jwks_path})
    store = Store(sqlite_url)
    from datetime import UTC, datetime

    auth = authenticator(config, store, now=datetime.now(UTC))
    caller = run(auth.authenticate(f"Bearer {token}", ENDPOINT))
    store.close()
    assert (caller.issuer, caller.tenant) == (ISSUER, "lv")


def test_keys_generate_default_kid_is_thumbprint_and_sign_finds_it(tmp_path, capsys):
    out = tmp_path / "keys"
    assert main(["keys", "generate", "--out-dir", str(out)]) == 0
    (jwks_path,) = out.glob("*.jwks.json")
    (jwk,) = json.loads(jwks_path.read_text())["keys"]
    assert jwk["kid"] == thumbprint(jwk) and jwks_path.name == f"{jwk['kid']}.jwks.json"
    capsys.readouterr()
    pem = out / f"{jwk['kid']}.private.pem"
    assert main(["keys", "sign", "--key", str(pem), "--issuer", ISSUER, "--aud", ENDPOINT]) == 0
    token = capsys.readouterr().out.strip()
    assert jwt.get_unverified_header(token)["kid"] == jwk["kid"]


def test_keys_generate_refuses_to_overwrite(tmp_path, capsys):
    args = ["keys", "generate", "--out-dir", str(tmp_path), "--kid", "lv-1"]
    assert main(args) == 0
    assert main(args) == 2
    assert "exists" in capsys.readouterr().err
    assert main([*args, "--force"]) == 0


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["keys", "sign", "--key", "missing.pem", "--issuer", "i", "--aud", "a"], "cannot read"),
        (["keys", "generate", "--out-dir", ".", "--kid", "../escape"], "--kid"),
    ],
)
def test_keys_user_errors_are_one_line(argv, message, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err and err.count("\n") == 1


def test_short_rsa_key_refused(tmp_path, sqlite_url):
    """RSA keys under 2048 bits are refused (NIST SP 800-131A, as PyJWT enforces on request)."""
    import warnings

    from cryptography.hazmat.primitives.asymmetric import rsa

    weak = rsa.generate_private_key(public_exponent=65537, key_size=1024)  # noqa: S505 (the point)
    jwk = jwt.algorithms.RSAAlgorithm.to_jwk(weak.public_key(), as_dict=True)
    jwks = {"keys": [jwk | {"kid": "weak", "use": "sig"}]}
    config = settings_for(tmp_path, None, client={"jwks_url": JWKS_URL})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        token = jwt.encode(claims(), weak, algorithm="RS256", headers={"kid": "weak", "typ": "JWT"})
    store = Store(sqlite_url)
    with respx.mock() as router:
        router.get(JWKS_URL).mock(return_value=httpx.Response(200, json=jwks))
        with pytest.raises(AuthError, match="key too weak"):
            run(authenticator(config, store).authenticate(f"Bearer {token}", ENDPOINT))
    store.close()
