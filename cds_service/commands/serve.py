"""`tonicity serve [--config FILE] [--host H] [--port P]`: run the CDS Hooks service.

Defaults: 127.0.0.1:8080 and a SQLite store ``tonicity.db`` in the working folder. Without a
config file the service runs as a local trial: authentication off, allowed only on a loopback
address, announced loudly at start and in a header on every response. Serving without
authentication on any other address needs
``--i-understand-this-exposes-unauthenticated-patient-data``.
"""

from __future__ import annotations

import argparse
import errno
import ipaddress
import socket
import sys

from cds_service.errors import UserError

UNSAFE_FLAG = "--i-understand-this-exposes-unauthenticated-patient-data"
GRACEFUL_SHUTDOWN_SECONDS = 15


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--config", metavar="FILE", default=None, help="TOML configuration")
    parser.add_argument("--host", default=None, help="address to bind (default 127.0.0.1)")
    parser.add_argument("--port", type=int, default=None, help="port (default 8080)")
    parser.add_argument(
        UNSAFE_FLAG,
        dest="allow_unauthenticated",
        action="store_true",
        help="allow serving without authentication on a non-loopback address (never with "
        "real patient data)",
    )


def is_loopback(host: str) -> bool:
    if host.strip("[]").lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def warning_text(host: str, port: int) -> str:
    bar = "!" * 78
    return "\n".join(
        [
            bar,
            "!! TONICITY LOCAL TRIAL: AUTHENTICATION IS OFF",
            f"!! Anyone who can reach http://{host}:{port} can call the service and read",
            "!! what it stores. Do not use with real patient data. Start with --config and",
            "!! [auth] required = true for any real deployment.",
            bar,
        ]
    )


def resolve(args: argparse.Namespace):  # type: ignore[no-untyped-def]
    """Settings, host and port for these arguments; refuses unsafe combinations."""
    from cds_service.config import load_settings

    if args.port is not None and not 1 <= args.port <= 65535:
        raise UserError(f"--port {args.port} is not a port number (1-65535)")
    if args.config:
        settings = load_settings(args.config)
    else:
        settings = load_settings(None, local_trial=True, auth={"required": False})
    host = args.host or settings.server.host
    port = args.port or settings.server.port
    overrides: dict[str, object] = {"host": host, "port": port}
    if not args.config:
        overrides["public_base_url"] = f"http://{host}:{port}"
    settings = settings.model_copy(update={"server": settings.server.model_copy(update=overrides)})
    if not settings.auth.required:
        if not is_loopback(host) and not args.allow_unauthenticated:
            raise UserError(
                f"refusing to serve without authentication on {host}: bind 127.0.0.1, "
                f"configure [auth], or pass {UNSAFE_FLAG}"
            )
        settings = settings.model_copy(update={"local_trial": True})
    return settings, host, port


def preflight(settings) -> None:  # type: ignore[no-untyped-def]
    """Check the clinical overrides, open the store and check the auth clients before binding,
    so that a bad configuration is a one-line message rather than a failed start-up."""
    from cds_service.clinical.thresholds import load_thresholds
    from cds_service.hooks.auth import Authenticator
    from cds_service.store import Store

    try:
        load_thresholds(settings.clinical)
    except ValueError as exc:
        raise UserError(f"invalid [clinical] threshold override: {exc}") from None

    try:
        store = Store(settings.storage.url, migrate=settings.storage.migrate_at_start)
    except Exception as exc:
        detail = str(exc).splitlines()[0][:200] if str(exc) else ""
        raise UserError(f"cannot open the store: {type(exc).__name__}: {detail}") from None
    try:
        Authenticator(settings, store, None)  # type: ignore[arg-type]
    except ValueError as exc:
        raise UserError(f"invalid configuration: {exc}") from None
    finally:
        store.close()


def bind(host: str, port: int, what: str = "serve") -> socket.socket:
    """A listening socket on ``host:port``, or one line saying why not (a busy port above
    all: the usual mistake, a second ``tonicity serve``)."""
    family = socket.AF_INET6 if ":" in host.strip("[]") else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    try:
        sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        sock.bind((host.strip("[]"), port))
        sock.listen(2048)
    except OSError as exc:
        sock.close()
        if exc.errno == errno.EADDRINUSE:
            raise UserError(
                f"cannot {what} on {host}:{port}: the port is in use (is another tonicity "
                "serve running?); stop it or choose another --port"
            ) from None
        raise UserError(f"cannot {what} on {host}:{port}: {exc.strerror or exc}") from None
    sock.set_inheritable(True)
    return sock


def url_of(host: str, port: int) -> str:
    shown = f"[{host.strip('[]')}]" if ":" in host.strip("[]") else host
    return f"http://{shown}:{port}"


def run(args: argparse.Namespace) -> int:
    import uvicorn

    from cds_service import logs, ops
    from cds_service.app import create_app

    settings, host, port = resolve(args)
    preflight(settings)
    logs.configure_logging(settings)
    sock = bind(host, port)
    metrics = None
    try:
        if settings.server.metrics_port is not None:
            probe = bind(host, settings.server.metrics_port, "serve /metrics")
            probe.close()
            metrics = ops.start_metrics_server(host, settings.server.metrics_port)
        if not settings.auth.required:
            print(warning_text(host, port), file=sys.stderr, flush=True)
        base = url_of(host, port)
        where = (
            f"; /metrics on port {settings.server.metrics_port}"
            if settings.server.metrics_port is not None
            else ""
        )
        print(
            f"tonicity serving on {base} - workbench: {base}/ - "
            f"authentication {'on' if settings.auth.required else 'OFF'}{where}",
            file=sys.stderr,
            flush=True,
        )
        config = uvicorn.Config(
            create_app(settings),
            timeout_graceful_shutdown=GRACEFUL_SHUTDOWN_SECONDS,
            log_config=None,
            server_header=False,
        )
        uvicorn.Server(config).run(sockets=[sock])
    finally:
        sock.close()
        if metrics is not None:
            metrics.shutdown()
    return 0
