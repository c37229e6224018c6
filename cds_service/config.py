"""Settings: a TOML file (keys of DESIGN.md) overridden by ``TONICITY_*`` environment variables.

Environment names follow the TOML path with ``__`` between levels, for example
``TONICITY_STORAGE__URL=postgresql+psycopg://...`` or ``TONICITY_AUTH__REQUIRED=false``.
Relative file paths in the TOML file (``jwks_file``) are resolved against the file's folder.
"""

from __future__ import annotations

import re
import tomllib
from datetime import UTC, tzinfo
from pathlib import Path
from typing import Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)
from pydantic_settings import BaseSettings, PydanticBaseSettingsSource, SettingsConfigDict

from cds_service.errors import UserError

#: A web origin for CSP ``frame-ancestors``: scheme, host and optional port, nothing else.
_ORIGIN = re.compile(r"https?://[A-Za-z0-9.-]+(:[0-9]{1,5})?")


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ServerSettings(_Section):
    public_base_url: str = "http://127.0.0.1:8080"
    host: str = "127.0.0.1"
    port: int = Field(8080, ge=1, le=65535)
    max_body_bytes: int = Field(5_000_000, ge=1024)
    trend_link_ttl_hours: float = Field(12.0, gt=0)
    #: IANA time zone in which pages show times to clinicians (UTC stays on hover and in
    #: the tables); checked at start.
    time_zone: str = "UTC"

    @field_validator("time_zone")
    @classmethod
    def _known_zone(cls, v: str) -> str:
        try:
            ZoneInfo(v)
        except (ZoneInfoNotFoundError, ValueError) as exc:
            raise ValueError(
                f"unknown time zone {v!r} (use an IANA name such as Europe/Vienna)"
            ) from exc
        return v

    @property
    def tz(self) -> tzinfo:
        return UTC if self.time_zone == "UTC" else ZoneInfo(self.time_zone)

    #: Threads that parse, ingest and evaluate hook calls off the event loop.
    evaluation_threads: int = Field(4, ge=2, le=64)
    #: A hook call whose body is larger counts as large (see max_large_calls).
    large_call_bytes: int = Field(1_000_000, ge=1024)
    #: Large calls evaluated at once by this process; the next gets 503 with Retry-After.
    max_large_calls: int = Field(2, ge=1)
    #: Seconds a refused large call is told to wait (Retry-After).
    busy_retry_after_seconds: int = Field(5, ge=1, le=600)

    @field_validator("public_base_url")
    @classmethod
    def _strip_slash(cls, v: str) -> str:
        return v.rstrip("/")

    #: Serve ``/metrics`` on this port only (same address), for a scraper on an internal
    #: network; none: on the service's own port, as every other route.
    metrics_port: int | None = Field(None, ge=1, le=65535)
    #: Origins (``https://host[:port]``) whose pages may show the trend page in a frame; empty:
    #: no page may frame it (CSP ``frame-ancestors 'none'``, ``X-Frame-Options: DENY``).
    trend_frame_ancestors: list[str] = Field(default_factory=list)

    @field_validator("trend_frame_ancestors")
    @classmethod
    def _origins(cls, values: list[str]) -> list[str]:
        for value in values:
            if not _ORIGIN.fullmatch(value):
                raise ValueError(
                    f"server.trend_frame_ancestors: {value[:80]!r} is not an origin such as "
                    "https://ehr.example.org or https://ehr.example.org:8443"
                )
        return values

    @model_validator(mode="after")
    def _room_for_small_calls(self) -> ServerSettings:
        if self.metrics_port is not None and self.metrics_port == self.port:
            raise ValueError("server.metrics_port must differ from server.port")
        if self.max_large_calls >= self.evaluation_threads:
            raise ValueError(
                "server.max_large_calls must be below server.evaluation_threads, so that "
                "small calls always find a thread without a large call"
            )
        return self


class StorageSettings(_Section):
    url: str = "sqlite:///tonicity.db"
    #: Bring the schema to this version's revision at start (under a lock); false when a
    #: separate `tonicity db upgrade` step does it and the service's role may not alter tables.
    migrate_at_start: bool = True
    #: A file holding the database password (a Docker or Kubernetes secret), so that the
    #: password is in neither the URL nor the environment; it replaces any password in ``url``.
    password_file: Path | None = None

    @model_validator(mode="after")
    def _password_from_file(self) -> StorageSettings:
        if self.password_file is None:
            return self
        from sqlalchemy import make_url
        from sqlalchemy.exc import ArgumentError

        try:
            password = self.password_file.read_text(encoding="utf-8").strip("\r\n")
        except (OSError, UnicodeDecodeError) as exc:
            reason = getattr(exc, "strerror", None) or type(exc).__name__
            raise ValueError(f"storage.password_file {self.password_file}: {reason}") from None
        if not password:
            raise ValueError(f"storage.password_file {self.password_file} is empty")
        try:
            url = make_url(self.url).set(password=password)
        except ArgumentError:
            raise ValueError("storage.url is not a database URL") from None
        self.url = url.render_as_string(hide_password=False)
        self.password_file = None  # read once: a copy of these settings must not read it again
        return self


class ClientSettings(_Section):
    issuer: str
    jwks_file: Path | None = None
    jwks_url: str | None = None
    jku_allowlist: list[str] = Field(default_factory=list)
    fhir_servers: list[str] = Field(default_factory=list)

    @model_validator(mode="after")
    def _has_key_source(self) -> ClientSettings:
        if not (self.jwks_file or self.jwks_url or self.jku_allowlist):
            raise ValueError(f"client {self.issuer!r} needs jwks_file, jwks_url or jku_allowlist")
        return self


class AuthSettings(_Section):
    required: bool = True
    clients: list[ClientSettings] = Field(default_factory=list)
    clock_skew_seconds: int = Field(60, ge=0, le=600)
    max_token_lifetime_seconds: int = Field(300, ge=10, le=3600)
    jwks_cache_seconds: int = Field(300, ge=0)
    jwks_fetch_timeout_seconds: float = Field(3.0, gt=0)

    @model_validator(mode="after")
    def _issuers_unique(self) -> AuthSettings:
        seen = [c.issuer.strip().rstrip("/") for c in self.clients]
        if len(seen) != len(set(seen)):
            raise ValueError("auth.clients names the same issuer twice")
        return self


class FhirSettings(_Section):
    time_budget_seconds: float = Field(8.0, gt=0)
    max_pages: int = Field(10, ge=1)
    connect_timeout_seconds: float = Field(3.0, gt=0)


class LoggingSettings(_Section):
    level: str = "INFO"
    #: ``json`` (one object per line, for collectors), ``text`` (for people), or ``auto``:
    #: text when standard error is a terminal, JSON otherwise.
    format: Literal["auto", "json", "text"] = "auto"
    patient_id_salt: str = "change-me-in-production"


class IngestSettings(_Section):
    """How the FHIR layer picks the 'current' result (hours)."""

    default_lookback_hours: float = Field(72.0, gt=0)
    lookback_hours: dict[str, float] = Field(default_factory=dict)  # per Analyte value
    pairing_hours: float = Field(2.0, gt=0)  # glucose/urea paired with the sodium draw


class FindingAlertSettings(_Section):
    """``[alerts.findings.<finding code>]``: one finding's alert settings."""

    mode: Literal["show", "silent", "off"] = "show"
    window_hours: float | None = Field(None, gt=0, le=24 * 31)
    raise_to: Literal["warning", "critical"] | None = None
    lower_to: Literal["info", "warning"] | None = None


class AlertsConfig(_Section):
    """``[alerts]``: repeat suppression, per-finding settings and silent go-live
    (``cds_service/alerts``; finding codes and service ids are checked there)."""

    suppression: bool = True
    scope: Literal["patient", "patient-and-user"] = "patient"
    silent_services: list[str] = Field(default_factory=list)
    findings: dict[str, FindingAlertSettings] = Field(default_factory=dict)
    managed_quiet_hours: float | None = Field(None, gt=0, le=24 * 7)
    critical_quiet_max_hours: float | None = Field(None, gt=0, le=24)
    unsafe_allow_silencing_critical: bool = False
    quality_page: bool = True


class Settings(BaseSettings):
    model_config = SettingsConfigDict(
        env_prefix="TONICITY_", env_nested_delimiter="__", extra="forbid"
    )

    server: ServerSettings = Field(default_factory=ServerSettings)
    storage: StorageSettings = Field(default_factory=StorageSettings)
    auth: AuthSettings = Field(default_factory=AuthSettings)
    fhir: FhirSettings = Field(default_factory=FhirSettings)
    logging: LoggingSettings = Field(default_factory=LoggingSettings)
    ingest: IngestSettings = Field(default_factory=IngestSettings)
    alerts: AlertsConfig = Field(default_factory=AlertsConfig)
    #: Overrides of clinical thresholds by key (see clinical/data/thresholds.toml), and
    #: ``correction_guideline`` ("stricter", "europe" or "us").
    clinical: dict[str, float | str] = Field(default_factory=dict)
    #: True when started without a config file: a local trial (auth off, loopback only).
    local_trial: bool = False

    @classmethod
    def settings_customise_sources(
        cls,
        settings_cls: type[BaseSettings],
        init_settings: PydanticBaseSettingsSource,
        env_settings: PydanticBaseSettingsSource,
        dotenv_settings: PydanticBaseSettingsSource,
        file_secret_settings: PydanticBaseSettingsSource,
    ) -> tuple[PydanticBaseSettingsSource, ...]:
        # Environment wins over the file (passed as init values).
        return (env_settings, init_settings)


def _resolve_paths(data: dict[str, Any], base: Path) -> dict[str, Any]:
    storage = data.get("storage")
    if isinstance(storage, dict) and isinstance(storage.get("password_file"), str):
        if not Path(storage["password_file"]).is_absolute():
            storage["password_file"] = str(base / storage["password_file"])
    for client in data.get("auth", {}).get("clients", []) or []:
        jwks = client.get("jwks_file")
        if isinstance(jwks, str) and not Path(jwks).is_absolute():
            client["jwks_file"] = str(base / jwks)
    return data


def load_settings(path: str | Path | None = None, **overrides: Any) -> Settings:
    """Read settings from a TOML file (or defaults), then environment, then ``overrides``."""
    data: dict[str, Any] = {}
    if path is not None:
        p = Path(path)
        try:
            raw = p.read_bytes()
        except OSError as exc:
            raise UserError(f"cannot read config file {p}: {exc.strerror}") from None
        try:
            data = tomllib.loads(raw.decode("utf-8"))
        except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
            raise UserError(f"config file {p} is not valid TOML: {exc}") from None
        data = _resolve_paths(data, p.resolve().parent)
    for key, value in overrides.items():
        data[key] = value
    try:
        return Settings(**data)
    except ValidationError as exc:
        # Location and message only: the input may hold a password (storage.url).
        err = exc.errors(include_url=False, include_input=False)[0]
        where = ".".join(str(p) for p in err.get("loc", ())) or "settings"
        msg = str(err.get("msg", "invalid")).removeprefix("Value error, ")
        raise UserError(f"invalid configuration: {where}: {msg}") from None
    except ValueError as exc:
        raise UserError(f"invalid configuration: {str(exc).splitlines()[0]}") from None
