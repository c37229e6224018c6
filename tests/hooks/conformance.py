"""Checks every CDS Hooks response must pass (HL7 CDS Hooks 2.0, open standard, and the card
contract of DESIGN.md)."""

from __future__ import annotations

from typing import Any

from fhir.resources.R4B import get_fhir_model_class

from cds_service.clinical.findings import FindingCode
from cds_service.hooks.cards import CAUTION

CODES = {c.value for c in FindingCode}


def empties(value: Any, path: str = "$") -> list[str]:
    """Paths of nulls and empty strings, arrays or objects (CDS Hooks 2.0 JSON rules)."""
    if value is None:
        return [path]
    if isinstance(value, (str, list, dict)) and len(value) == 0:
        return [path]
    found: list[str] = []
    if isinstance(value, dict):
        for key, item in value.items():
            found += empties(item, f"{path}.{key}")
    elif isinstance(value, list):
        for i, item in enumerate(value):
            found += empties(item, f"{path}[{i}]")
    return found


def check_response(body: dict[str, Any]) -> None:
    assert set(body) <= {"cards", "systemActions"}, body.keys()
    assert isinstance(body.get("cards"), list)
    problems = [p for k, v in body.items() if k != "cards" for p in empties(v, f"$.{k}")]
    problems += [p for i, c in enumerate(body["cards"]) for p in empties(c, f"$.cards[{i}]")]
    assert not problems, problems
    codes = []
    for card in body["cards"]:
        check_card(card)
        codes.append(card["source"]["topic"]["code"])
    assert len(codes) == len(set(codes)), f"more than one card per code: {codes}"


def check_card(card: dict[str, Any]) -> None:
    assert card["uuid"] and len(card["summary"]) < 140
    assert card["indicator"] in ("info", "warning", "critical")
    assert card["source"]["label"] == "Tonicity"
    assert card["source"]["topic"]["code"] in CODES
    assert CAUTION in card["detail"]
    if card["indicator"] in ("warning", "critical"):
        assert card["overrideReasons"], "warning and critical cards offer override reasons"
    for value in (card.get("extension") or {}).get("tonicity.values", []):
        assert set(value) == {"name", "value", "unit"}
    for suggestion in card.get("suggestions", []):
        assert suggestion["label"] and suggestion["actions"]
        for action in suggestion["actions"]:
            assert action["type"] in ("create", "update", "delete") and action["description"]
            if action["type"] == "delete":
                assert "/" in action["resourceId"]
            else:
                resource = action["resource"]
                # fhir.resources (R4B models) validates the suggested resource
                get_fhir_model_class(resource["resourceType"]).model_validate(resource)


def post_cards(
    client: Any, body: dict[str, Any], path: str = "/cds-services/sodium-workup"
) -> list:
    """POST a hook call that must succeed; the cards of its conformant response."""
    response = client.post(path, json=body)
    assert response.status_code == 200, response.text[:300]
    check_response(response.json())
    return response.json()["cards"]
