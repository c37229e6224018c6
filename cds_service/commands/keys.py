"""`tonicity keys`: an integrator's helper to test a deployment with authentication on.

tonicity keys generate --out-dir DIR [--alg ES384] [--kid KID] [--force]
    writes DIR/KID.private.pem (mode 0600) and DIR/KID.jwks.json (the public JWKS to
    register under [[auth.clients]] jwks_file); KID defaults to the RFC 7638 thumbprint.
tonicity keys sign --key PRIVATE.pem --issuer ISS --aud URL [--kid KID] [--lifetime 300]
                   [--tenant T] [--jku URL]
    prints a bearer token (fresh jti) for one call to the endpoint URL ``--aud``.
"""

from __future__ import annotations

import argparse
import base64
import hashlib
import json
import os
import re
import shlex
from pathlib import Path
from typing import Any

GENERATABLE = (
    "ES256",
    "ES384",
    "ES512",
    "RS256",
    "RS384",
    "RS512",
    "PS256",
    "PS384",
    "PS512",
    "EdDSA",
)
#: A key id that is safe as a file name and a command-line word: never a leading '-'.
_KID_SHAPE = re.compile(r"^[A-Za-z0-9._][A-Za-z0-9._-]{0,63}$")
#: RFC 7638 section 3.2: the members that make up a key's thumbprint, per key type.
_THUMBPRINT_MEMBERS = {
    "EC": ("crv", "kty", "x", "y"),
    "RSA": ("e", "kty", "n"),
    "OKP": ("crv", "kty", "x"),
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="keys_command", required=True, metavar="ACTION")
    gen = sub.add_parser("generate", help="write a private key (PEM) and its public JWKS")
    gen.add_argument("--out-dir", required=True, metavar="DIR")
    gen.add_argument("--alg", default="ES384", choices=GENERATABLE)
    gen.add_argument("--kid", help="key id (default: the key's RFC 7638 thumbprint)")
    gen.add_argument("--force", action="store_true", help="overwrite existing files")
    sig = sub.add_parser("sign", help="print a bearer token for one endpoint URL")
    sig.add_argument("--key", required=True, metavar="FILE", help="private key: PEM or JWK JSON")
    sig.add_argument("--issuer", required=True, help="iss: the client's registered issuer")
    sig.add_argument("--aud", required=True, metavar="URL", help="the endpoint URL to call")
    sig.add_argument("--kid", help="key id (default: the key's RFC 7638 thumbprint)")
    sig.add_argument("--lifetime", type=int, default=300, help="seconds (default 300)")
    sig.add_argument("--tenant")
    sig.add_argument("--jku", metavar="URL", help="announce this JWKS URL in the header")
    sig.add_argument("--alg", choices=GENERATABLE, help="default: from the key type")


def run(args: argparse.Namespace) -> int:
    if args.keys_command == "generate":
        return _generate(args)
    return _sign(args)


def public_jwk(private_key: Any, alg: str, kid: str | None = None) -> dict[str, Any]:
    """The public half of ``private_key`` as a JWK with ``use``, ``alg`` and ``kid``
    (``kid`` defaults to the thumbprint)."""
    from jwt.algorithms import ECAlgorithm, OKPAlgorithm, RSAAlgorithm

    public = private_key.public_key()
    family = {"ES": ECAlgorithm, "RS": RSAAlgorithm, "PS": RSAAlgorithm, "Ed": OKPAlgorithm}[
        alg[:2]
    ]
    jwk: dict[str, Any] = family.to_jwk(public, as_dict=True)
    jwk.update(use="sig", alg=alg, kid=kid or thumbprint(jwk))
    return jwk


def thumbprint(jwk: dict[str, Any]) -> str:
    """RFC 7638 JWK thumbprint (SHA-256, base64url without padding)."""
    members = _THUMBPRINT_MEMBERS.get(jwk.get("kty", ""))
    if members is None:
        raise ValueError(f"no thumbprint for key type {jwk.get('kty')!r}")
    canonical = json.dumps({m: jwk[m] for m in members}, separators=(",", ":"), sort_keys=True)
    digest = hashlib.sha256(canonical.encode()).digest()
    return base64.urlsafe_b64encode(digest).rstrip(b"=").decode()


def new_private_key(alg: str) -> Any:
    from cryptography.hazmat.primitives.asymmetric import ec, ed25519, rsa

    curves = {"ES256": ec.SECP256R1, "ES384": ec.SECP384R1, "ES512": ec.SECP521R1}
    if alg in curves:
        return ec.generate_private_key(curves[alg]())
    if alg == "EdDSA":
        return ed25519.Ed25519PrivateKey.generate()
    return rsa.generate_private_key(public_exponent=65537, key_size=3072)


def _generate(args: argparse.Namespace) -> int:
    from cryptography.hazmat.primitives import serialization

    from cds_service.errors import UserError

    if args.kid is not None and not _KID_SHAPE.match(args.kid):
        raise UserError(
            "--kid may hold letters, digits, '.', '_' and '-' (at most 64), not starting with '-'"
        )
    key, jwk = _key_with_usable_kid(args.alg, args.kid)
    out = Path(args.out_dir)
    private_path, jwks_path = out / f"{jwk['kid']}.private.pem", out / f"{jwk['kid']}.jwks.json"
    pem = key.private_bytes(
        serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, serialization.NoEncryption()
    )
    try:
        out.mkdir(parents=True, exist_ok=True)
        if not args.force:
            for path in (private_path, jwks_path):
                if path.exists():
                    raise UserError(f"{path} exists (use --force to overwrite)")
        _write_private(private_path, pem)
        jwks_path.write_text(json.dumps({"keys": [jwk]}, indent=2) + "\n", encoding="utf-8")
    except OSError as exc:
        raise UserError(f"cannot write keys to {out}: {exc.strerror}") from None
    print(f"private key (keep secret, mode 0600): {private_path}")
    print(f"public JWKS (register as jwks_file):  {jwks_path}")
    print(f"kid: {jwk['kid']}  alg: {args.alg}")
    command = ["tonicity", "keys", "sign", "--key", str(private_path), "--kid", jwk["kid"]]
    command += ["--alg", args.alg, "--issuer", "ISSUER", "--aud", "ENDPOINT_URL"]
    print(f"test token: {shlex.join(command)}")
    return 0


def _key_with_usable_kid(alg: str, kid: str | None) -> tuple[Any, dict[str, Any]]:
    """A new key and its public JWK. Without ``kid`` the id is the RFC 7638 thumbprint,
    base64url, which starts with '-' for one key in 64: such a key is replaced by a new one,
    so the id stays the thumbprint and never reads as an option on a command line."""
    while True:
        key = new_private_key(alg)
        jwk = public_jwk(key, alg, kid)
        if _KID_SHAPE.match(jwk["kid"]):
            return key, jwk


def _write_private(path: Path, pem: bytes) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
    try:
        os.fchmod(fd, 0o600)  # O_CREAT's mode does not apply to a file that already existed
        os.write(fd, pem)
    finally:
        os.close(fd)


def _sign(args: argparse.Namespace) -> int:
    from cds_service.errors import UserError
    from cds_service.hooks.auth import load_private_key, sign_token

    try:
        raw = Path(args.key).read_bytes()
    except OSError as exc:
        raise UserError(f"cannot read key file {args.key}: {exc.strerror}") from None
    material: bytes | dict[str, Any] = raw
    if raw.lstrip().startswith(b"{"):
        try:
            material = json.loads(raw)
        except ValueError:
            raise UserError(f"{args.key} is neither a PEM key nor JWK JSON") from None
    if args.lifetime <= 0:
        raise UserError("--lifetime must be a positive number of seconds")
    try:
        key, key_alg = load_private_key(material)
        kid = (
            args.kid
            or (material.get("kid") if isinstance(material, dict) else None)
            or public_jwk(key, args.alg or key_alg)["kid"]
        )
        token = sign_token(
            material,
            args.issuer,
            args.aud,
            kid,
            lifetime=args.lifetime,
            tenant=args.tenant,
            jku=args.jku,
            alg=args.alg,
        )
    except ValueError as exc:
        raise UserError(str(exc)) from None
    print(token)
    return 0
