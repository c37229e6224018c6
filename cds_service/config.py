"""Settings: a TOML file (keys of DESIGN.md) overridden by ``TONICITY_*`` environment variables.

Environment names follow the TOML path with ``__`` between levels, for example
``TONICITY_STORAGE__URL=postgresql+psycopg://...`` or ``TONICITY_AUTH__REQUIRED=false``.
Relative file paths in the TOML file (``jwks_file``) are resolved against the file's folder.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator
from pydantic_settings import BaseSettings, PydanticBaseSettingsSource, SettingsConfigDict

from cds_service.errors import UserError


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ServerSettings(_Section):
    public_base_url: str = "http://127.0.0.1:8080"
    host: str = "127.0.0.1"
    port: int = Field(8080, ge=1, le=65535)
    max_body_bytes: int = Field(5_000_000, ge=1024)
    trend_link_ttl_hours: float = Field(12.0, gt=0)

    @field_validator("public_base_url")
    @classmethod
    def _strip_slash(cls, v: str) -> str:
        return v.rstrip("/")


class StorageSettings(_Section):
    url: str = "sqlite:///tonicity.db"


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
    #: Overrides of clinical thresholds by key (see clinical/data/thresholds.toml).
    clinical: dict[str, float] = Field(default_factory=dict)
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
    except ValueError as exc:  # pydantic ValidationError is a ValueError
        first = str(exc).splitlines()
        detail = " ".join(first[1:3]).strip() if len(first) > 1 else str(exc)
        raise UserError(f"invalid configuration: {detail}") from None
