"""Client authentication (HL7 CDS Hooks 2.0, "Security and Safety"): the specification's own
worked example, then an attack matrix in which every forged or misused token is refused."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator

import httpx
import jwt
import pytest
import respx
from hypothesis import given, settings
from hypothesis import strategies as st

from cds_service.hooks.auth import Authenticator, AuthError, Caller, _verify
from cds_service.store import Store
from tests.fixtures.auth_kit import (
    ENDPOINT,
    ISSUER,
    NOW,
    KeyPair,
    authenticator,
    claims,
    forge,
    hs256_with_secret,
    new_key,
    run,
    settings_for,
    sign,
    spec_example,
)

# --- the worked example of the CDS Hooks 2.0 specification (Security section) ----------------


def test_spec_example_signature_verifies_with_published_jwks() -> None:
    """HL7 CDS Hooks 2.0 security example: its signed JWT verifies with its public JWKS
    (PyJWT as the reference verifier, expiry off because exp lies in 2015)."""
    ex = spec_example()
    (public,) = ex["public_jwks"]["keys"]
    decoded = jwt.decode(
        ex["signed_jwt"],
        jwt.PyJWK(public),
        algorithms=["ES384"],
        audience=ex["jwt_payload"]["aud"],
        options={"verify_exp": False},
    )
    assert decoded == ex["jwt_payload"]
    assert jwt.get_unverified_header(ex["signed_jwt"]) == ex["jwt_header"]
    # Our own verification step reads the same claims from the same token and key.
    assert _verify(ex["signed_jwt"], public, "ES384") == ex["jwt_payload"]


def test_spec_example_private_key_pairs_with_public_key() -> None:
    """Sign with the example's private JWK, verify with its public JWKS (same source)."""
    ex = spec_example()
    token = jwt.encode({"probe": "larkspur"}, jwt.PyJWK(ex["private_jwk"]).key, algorithm="ES384")
    (public,) = ex["public_jwks"]["keys"]
    assert jwt.decode(token, jwt.PyJWK(public), algorithms=["ES384"]) == {"probe": "larkspur"}


def _spec_settings(tmp_path):
    ex = spec_example()
    return settings_for(
        tmp_path,
        None,
        client={
            "issuer": ex["jwt_payload"]["iss"],
            "jku_allowlist": [ex["jwt_header"]["jku"]],
        },
    )


def test_fresh_claims_signed_with_spec_key_are_accepted(tmp_path, sqlite_url) -> None:
    """Fresh claims signed with the example's private key pass the whole authenticator; the
    key set comes from the token's allowlisted jku (served here by respx)."""
    from cds_service.hooks.auth import sign_token

    ex = spec_example()
    jku = ex["jwt_header"]["jku"]
    token = sign_token(
        ex["private_jwk"],
        ex["jwt_payload"]["iss"],
        ENDPOINT,
        ex["jwt_header"]["kid"],
        lifetime=120,
        now=NOW,
        tenant=ex["jwt_payload"]["tenant"],
        jku=jku,
    )
    store = Store(sqlite_url)
    with respx.mock() as router:
        route = router.get(jku).mock(return_value=httpx.Response(200, json=ex["public_jwks"]))
        caller = run(
            authenticator(_spec_settings(tmp_path), store).authenticate(f"Bearer {token}", ENDPOINT)
        )
    store.close()
    assert route.call_count == 1
    assert caller == Caller(
        issuer=ex["jwt_payload"]["iss"],
        tenant=ex["jwt_payload"]["tenant"],
        client=caller.client,
    )
    assert caller.client is not None and not caller.anonymous


def test_spec_token_itself_is_refused_for_its_lifetime(tmp_path, sqlite_url) -> None:
    """The example token lives from 2011 to 2015: far beyond our 5-minute maximum, so it is
    refused even at a moment inside its validity window."""
    from datetime import UTC, datetime

    ex = spec_example()
    store = Store(sqlite_url)
    auth = authenticator(_spec_settings(tmp_path), store, now=datetime(2014, 1, 1, tzinfo=UTC))
    with respx.mock() as router:
        router.get(ex["jwt_header"]["jku"]).mock(
            return_value=httpx.Response(200, json=ex["public_jwks"])
        )
        with pytest.raises(AuthError, match="lifetime too long"):
            run(auth.authenticate(f"Bearer {ex['signed_jwt']}", ex["jwt_payload"]["aud"]))
    store.close()


# --- attack matrix (issue 5): each answered with AuthError ------------------------------------

Forger = Callable[[KeyPair], str]
NOW_S = int(NOW.timestamp())

ATTACKS: dict[str, tuple[Forger, str]] = {
    "alg none": (
        lambda k: forge({"alg": "none", "typ": "JWT", "kid": k.kid}, claims()),
        "algorithm not allowed",
    ),
    "HS256 with the public key as secret": (
        lambda k: hs256_with_secret(
            {"alg": "HS256", "typ": "JWT", "kid": k.kid}, claims(), k.public_pem
        ),
        "algorithm not allowed",
    ),
    "expired": (
        lambda k: sign(k, claims(iat=NOW_S - 400, exp=NOW_S - 100)),
        "token expired",
    ),
    "issued in the future": (
        lambda k: sign(k, claims(iat=NOW_S + 200, exp=NOW_S + 400)),
        "token issued in the future",
    ),
    "lifetime too long": (
        lambda k: sign(k, claims(exp=NOW_S + 3600)),
        "token lifetime too long",
    ),
    "wrong aud": (
        lambda k: sign(k, claims(aud="https://cds.larkspur-valley.example/cds-services/other")),
        "audience mismatch",
    ),
    "aud array without us": (
        lambda k: sign(k, claims(aud=["https://elsewhere.example/cds-services/sodium-workup"])),
        "audience mismatch",
    ),
    "unknown iss": (
        lambda k: sign(k, claims(iss="https://ehr.unregistered.example")),
        "unknown issuer",
    ),
    "unknown kid": (
        lambda k: sign(k, claims(), kid="not-in-the-jwks"),
        "unknown key id",
    ),
    "signed by another key with our kid": (
        lambda k: sign(new_key(k.kid), claims()),
        "token signature invalid",
    ),
    "tampered payload": (
        lambda k: _tamper(sign(k, claims()), tenant="larkspur-admin"),
        "token signature invalid",
    ),
    "RS384 header against an EC key": (
        lambda k: forge({"alg": "RS384", "typ": "JWT", "kid": k.kid}, claims(), b"x" * 384),
        "algorithm does not match key",
    ),
    "no exp": (lambda k: sign(k, claims(exp=None)), "missing claim: exp"),
    "no iat": (lambda k: sign(k, claims(iat=None)), "missing claim: iat"),
    "no jti": (lambda k: sign(k, claims(jti=None)), "missing claim: jti"),
    "no kid": (lambda k: jwt.encode(claims(), k.private, algorithm="ES384"), "missing key id"),
    "alg as a list": (
        lambda k: forge({"alg": ["ES384"], "typ": "JWT", "kid": k.kid}, claims()),
        "algorithm not allowed",
    ),
    "not a JWT": (lambda k: "larkspur.not-a-token", "malformed token"),
    "typ not JWT": (lambda k: sign(k, claims(), typ="at+jwt"), "token type is not JWT"),
}


def _tamper(token: str, **changes: object) -> str:
    head, body, sig = token.split(".")
    from tests.fixtures.auth_kit import b64

    data = json.loads(jwt.utils.base64url_decode(body))
    data.update(changes)
    return f"{head}.{b64(json.dumps(data).encode())}.{sig}"


@pytest.fixture
def key() -> KeyPair:
    return new_key()


@pytest.mark.parametrize("attack", list(ATTACKS), ids=list(ATTACKS))
def test_attack_refused(attack: str, key: KeyPair, tmp_path, sqlite_url) -> None:
    forger, reason = ATTACKS[attack]
    store = Store(sqlite_url)
    auth = authenticator(settings_for(tmp_path, key), store)
    with pytest.raises(AuthError) as info:
        run(auth.authenticate(f"Bearer {forger(key)}", ENDPOINT))
    store.close()
    assert info.value.reason == reason
    assert "eyJ" not in info.value.reason and len(info.value.reason) < 40


def test_valid_token_passes_and_records_tenant(key, tmp_path, sqlite_url) -> None:
    """The control for the matrix: the same key and claims, unspoiled, are accepted."""
    store = Store(sqlite_url)
    caller = run(
        authenticator(settings_for(tmp_path, key), store).authenticate(
            f"Bearer {sign(key, claims())}", ENDPOINT
        )
    )
    store.close()
    assert (caller.issuer, caller.tenant) == (ISSUER, "larkspur-main")


def test_aud_array_containing_endpoint_passes(key, tmp_path, sqlite_url) -> None:
    store = Store(sqlite_url)
    token = sign(key, claims(aud=["https://other.example/x", ENDPOINT]))
    caller = run(
        authenticator(settings_for(tmp_path, key), store).authenticate(f"Bearer {token}", ENDPOINT)
    )
    store.close()
    assert caller.issuer == ISSUER


@pytest.mark.parametrize("header", [None, "", "Bearer", "Bearer   ", "Basic bGFya3NwdXI6eA=="])
def test_missing_bearer(header, key, tmp_path, sqlite_url) -> None:
    store = Store(sqlite_url)
    with pytest.raises(AuthError, match="missing bearer token"):
        run(authenticator(settings_for(tmp_path, key), store).authenticate(header, ENDPOINT))
    store.close()


def test_jku_not_allowlisted_is_never_fetched(key, tmp_path, sqlite_url) -> None:
    evil = "https://attacker.example/jwks.json"
    store = Store(sqlite_url)
    auth = authenticator(settings_for(tmp_path, key), store)
    with respx.mock(assert_all_called=False) as router:
        route = router.get(evil).mock(return_value=httpx.Response(200, json=key.jwks()))
        with pytest.raises(AuthError, match="jku not allowed"):
            run(auth.authenticate(f"Bearer {sign(key, claims(), jku=evil)}", ENDPOINT))
    store.close()
    assert not route.called
    assert router.calls.call_count == 0


def test_replay_on_same_instance(key, tmp_path, sqlite_url) -> None:
    store = Store(sqlite_url)
    auth = authenticator(settings_for(tmp_path, key), store)
    header = f"Bearer {sign(key, claims())}"
    run(auth.authenticate(header, ENDPOINT))
    with pytest.raises(AuthError, match="token replayed"):
        run(auth.authenticate(header, ENDPOINT))
    store.close()


def test_replay_across_two_instances_sharing_one_database(key, tmp_path, store_url) -> None:
    """Two replicas (own Authenticator, own Store, own key cache) on one database: SQLite file
    and PostgreSQL. The token used at the first is refused at the second."""
    config = settings_for(tmp_path, key)
    store_a, store_b = Store(store_url), Store(store_url)
    first, second = authenticator(config, store_a), authenticator(config, store_b)
    header = f"Bearer {sign(key, claims())}"
    try:
        assert run(first.authenticate(header, ENDPOINT)).issuer == ISSUER
        with pytest.raises(AuthError, match="token replayed"):
            run(second.authenticate(header, ENDPOINT))
        fresh = f"Bearer {sign(key, claims(jti='c0ffee00-1111-4222-8333-444455556666'))}"
        assert run(second.authenticate(fresh, ENDPOINT)).issuer == ISSUER
    finally:
        store_a.close()
        store_b.close()


def test_refused_token_does_not_burn_its_jti(key, tmp_path, sqlite_url) -> None:
    """Replay ids are recorded only for tokens that passed every other check."""
    store = Store(sqlite_url)
    auth = authenticator(settings_for(tmp_path, key), store)
    with pytest.raises(AuthError, match="audience"):
        run(auth.authenticate(f"Bearer {sign(key, claims(aud='https://x.example'))}", ENDPOINT))
    assert run(auth.authenticate(f"Bearer {sign(key, claims())}", ENDPOINT)).issuer == ISSUER
    store.close()


def test_required_without_clients_refuses_every_call(key, tmp_path, sqlite_url) -> None:
    from cds_service.config import Settings

    config = Settings(auth={"required": True, "clients": []})
    store = Store(sqlite_url)
    auth = authenticator(config, store)
    for header in (None, f"Bearer {sign(key, claims())}", "Bearer garbage"):
        with pytest.raises(AuthError):
            run(auth.authenticate(header, ENDPOINT))
    store.close()


@pytest.mark.parametrize("local_trial", [True, False])
def test_auth_off_gives_anonymous_caller(local_trial, tmp_path, sqlite_url) -> None:
    from cds_service.config import Settings

    config = Settings(auth={"required": False}, local_trial=local_trial)
    store = Store(sqlite_url)
    caller = run(authenticator(config, store).authenticate(None, ENDPOINT))
    store.close()
    assert caller.anonymous and caller.issuer is None
    assert caller.any_fhir_server is local_trial


def test_skew_tolerated_within_setting(key, tmp_path, sqlite_url) -> None:
    """iat 30 s ahead of our clock passes with the default 60 s skew (common practice)."""
    store = Store(sqlite_url)
    token = sign(key, claims(iat=NOW_S + 30, exp=NOW_S + 150))
    caller = run(
        authenticator(settings_for(tmp_path, key), store).authenticate(f"Bearer {token}", ENDPOINT)
    )
    store.close()
    assert caller.issuer == ISSUER


@pytest.mark.parametrize(
    ("clients", "message"),
    [
        (
            f'[[auth.clients]]\nissuer = "{ISSUER}"\njwks_url = "https://a.example/j"\n'
            f'[[auth.clients]]\nissuer = "{ISSUER}/"\njwks_url = "https://b.example/j"\n',
            "same issuer twice",
        ),
        (f'[[auth.clients]]\nissuer = "{ISSUER}"\n', "needs jwks_file"),
    ],
)
def test_misconfigured_clients_refused_at_load(clients, message, tmp_path) -> None:
    """A client that cannot be verified, or an issuer named twice, stops start-up with a
    one-line configuration error instead of failing every call later."""
    from cds_service.config import load_settings
    from cds_service.errors import UserError

    path = tmp_path / "tonicity.toml"
    path.write_text(clients, encoding="utf-8")
    with pytest.raises(UserError, match=message):
        load_settings(path)


def test_authenticator_rechecks_clients_it_is_given(tmp_path, sqlite_url) -> None:
    """Settings built without validation (model_construct) are still refused when the
    Authenticator is built."""
    from cds_service.config import AuthSettings, ClientSettings, Settings

    keyless = ClientSettings.model_construct(
        issuer=ISSUER, jwks_file=None, jwks_url=None, jku_allowlist=[], fhir_servers=[]
    )
    config = Settings(auth=AuthSettings.model_construct(required=True, clients=[keyless]))
    store = Store(sqlite_url)
    with pytest.raises(ValueError, match="jwks_file"):
        authenticator(config, store)
    store.close()


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=8),
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=5), inner, max_size=3)
    ),
    max_leaves=8,
)
header_fields = st.fixed_dictionaries(
    {},
    optional={
        "alg": st.sampled_from(["ES384", "none", "HS256"]) | json_values,
        "typ": json_values,
        "kid": json_values,
        "jku": json_values,
    },
)


def _far_from_now(value: object) -> bool:
    return not (isinstance(value, int | float) and abs(value - NOW_S) < 10**6)


claim_fields = st.fixed_dictionaries(
    {
        "iss": st.just(ISSUER) | json_values,
        "aud": st.just(ENDPOINT) | json_values,
        "exp": json_values.filter(_far_from_now),  # so no generated token can be valid
    },
    optional={name: json_values for name in ("iat", "jti", "tenant", "nbf")},
)


@pytest.fixture(scope="module")
def fuzz_target(tmp_path_factory) -> Iterator[tuple[Authenticator, KeyPair]]:
    folder = tmp_path_factory.mktemp("fuzz")
    store = Store(f"sqlite:///{folder / 'fuzz.db'}")
    key = new_key()
    yield authenticator(settings_for(folder, key), store), key
    store.close()


@settings(max_examples=150, deadline=None)
@given(header=header_fields, body=claim_fields, raw=st.text(max_size=60))
def test_any_input_is_refused_with_auth_error_only(header, body, raw, fuzz_target) -> None:
    """Property: whatever arrives in the Authorization header - even well signed claims of
    any JSON type - the answer is an AuthError (a 401), never another exception (a 500).
    Signed claims without a valid exp/iat/jti/aud can never pass."""
    auth, key = fuzz_target
    payload = json.dumps(body).encode()  # PyJWS signs any payload, without claim type checks
    signed = jwt.PyJWS().encode(
        payload, key.private, algorithm="ES384", headers={"kid": key.kid, "typ": "JWT"}
    )
    for value in (
        raw,
        f"Bearer {raw}",
        f"Bearer {forge(header, body, b'sig')}",
        f"Bearer {signed}",
    ):
        with pytest.raises(AuthError):
            run(auth.authenticate(value, ENDPOINT))
