"""``storage.password_file``: the database password from a secret file, not from the URL."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import make_url

from cds_service.config import load_settings
from cds_service.errors import UserError


def test_the_password_comes_from_the_file_next_to_the_config(tmp_path: Path) -> None:
    (tmp_path / "db-password").write_text("p@ss:/w0rd\n", encoding="utf-8")
    config = tmp_path / "config.toml"
    config.write_text(
        '[storage]\nurl = "postgresql+psycopg://tonicity@db:5432/tonicity"\n'
        'password_file = "db-password"\n',
        encoding="utf-8",
    )
    url = make_url(load_settings(config).storage.url)
    assert (url.username, url.password, url.host, url.database) == (
        "tonicity",
        "p@ss:/w0rd",  # trailing newline of the file dropped; special characters kept
        "db",
        "tonicity",
    )


def test_the_environment_names_the_file_and_a_url_password_is_replaced(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "pw").write_text("from-the-secret", encoding="utf-8")
    monkeypatch.setenv("TONICITY_STORAGE__URL", "postgresql+psycopg://t:old@db/t")
    monkeypatch.setenv("TONICITY_STORAGE__PASSWORD_FILE", str(tmp_path / "pw"))
    assert make_url(load_settings(None).storage.url).password == "from-the-secret"


@pytest.mark.parametrize("content", [None, ""])
def test_a_missing_or_empty_file_is_one_line_without_the_url(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, content: str | None
) -> None:
    if content is not None:
        (tmp_path / "pw").write_text(content, encoding="utf-8")
    monkeypatch.setenv("TONICITY_STORAGE__URL", "postgresql+psycopg://t:hunter2@db/t")
    monkeypatch.setenv("TONICITY_STORAGE__PASSWORD_FILE", str(tmp_path / "pw"))
    with pytest.raises(UserError, match=r"^invalid configuration: storage: storage.password_file"):
        load_settings(None)
    try:
        load_settings(None)
    except UserError as exc:
        assert "hunter2" not in str(exc) and "\n" not in str(exc)
