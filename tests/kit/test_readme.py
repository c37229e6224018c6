"""The README's integration guide and configuration reference stay complete as code changes."""

from __future__ import annotations

from pathlib import Path
from typing import get_args, get_origin

from pydantic import BaseModel

from cds_service.clinical.findings import FindingCode
from cds_service.config import Settings

README = Path(__file__).resolve().parents[2] / "README.md"


def _section(title: str) -> str:
    text = README.read_text(encoding="utf-8")
    start = text.index(f"\n## {title}\n")
    end = text.find("\n## ", start + 1)
    return text[start : end if end != -1 else None]


def _keys(model: type[BaseModel], prefix: str = "") -> list[str]:
    """Every configuration key as the reference spells it (lists of tables with ``[]``)."""
    out: list[str] = []
    for name, field in model.model_fields.items():
        if name == "local_trial":  # set by `tonicity serve`, not a file key
            continue
        path = f"{prefix}{name}"
        annotation = field.annotation
        if get_origin(annotation) is list:  # a list of tables, e.g. [[auth.clients]]
            (item,) = get_args(annotation)
            if isinstance(item, type) and issubclass(item, BaseModel):
                out += _keys(item, f"{path}[].")
                continue
        if isinstance(annotation, type) and issubclass(annotation, BaseModel):
            out += _keys(annotation, f"{path}.")
        else:
            out.append(path)
    return out


def test_configuration_reference_names_every_key() -> None:
    reference = _section("Configuration reference")
    keys = _keys(Settings)
    assert "auth.clients[].issuer" in keys and "storage.url" in keys
    for key in keys:
        if key in ("clinical", "ingest.lookback_hours", "alerts.findings"):  # mappings: per entry
            assert f"`{key}.<" in reference, key
        else:
            assert f"`{key}`" in reference, key


def test_integration_guide_explains_every_card() -> None:
    guide = _section("Integration guide")
    for code in FindingCode:
        assert f"| `{code.value}` |" in guide, code


def test_readme_keeps_its_opening_commands_and_cautions() -> None:
    text = README.read_text(encoding="utf-8")
    assert ".venv/bin/pip install -e . && .venv/bin/tonicity serve" in text
    assert ".venv/bin/pip install -q -e '.[test]' && .venv/bin/pytest" in text
    assert text.index("## Cautions") < text.index("## Integration guide")
