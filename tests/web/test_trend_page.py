"""GET /trend/{token}: the clinician's page, and its plain 404 and 410 answers."""

from __future__ import annotations

import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

from fastapi.testclient import TestClient

from cds_service.clinical.thresholds import load_thresholds
from cds_service.hooks.snapshots import save_snapshot, snapshot_payload
from cds_service.store import Store
from cds_service.web.pages import CAUTION
from tests.web.conftest import SODIUM, make_context, make_findings


def _save(store: Store, now: datetime | None = None, ttl: float = 12) -> str:
    payload = snapshot_payload(make_context(), make_findings(), load_thresholds())
    return save_snapshot(store, payload, ttl_hours=ttl, now=now or datetime.now(UTC))


def _inline_svg(html: str) -> ET.Element:
    m = re.search(r"<svg\b.*?</svg>", html, re.S)
    assert m, "no inline SVG on the page"
    return ET.fromstring(m.group(0))  # noqa: S314 - our own page


def test_trend_page_shows_chart_table_findings_and_caution(client: TestClient, store: Store):
    token = _save(store)
    r = client.get(f"/trend/{token}")
    assert r.status_code == 200
    html = r.text
    svg = _inline_svg(html)
    ids = [e.get("id") for e in svg.iter() if e.get("id")]
    assert len([i for i in ids if i.startswith("sodium-point-")]) == len(SODIUM)
    assert "limit-band" in ids
    assert svg.get("role") == "img" and svg.get("aria-describedby") == "chart-desc"
    assert 'id="chart-desc"' in html
    # Text alternative: one table row per sodium result, values as numbers.
    table = html[html.index("Serum sodium results") : html.index("</table>")]
    assert table.count("<tr") == len(SODIUM) + 1  # + header
    for _, value, _, _ in SODIUM:
        assert f">{value:g}<" in table
    # 118 -> 129 (+11) within 24 h is above the 10 mmol/L limit (thresholds.toml, Verbalis 2013).
    assert table.count("(exceeded)") == 1
    assert table.count('class="over-row"') == 1  # the row is highlighted, not only the cell
    # Findings with their numbers; card text is escaped, never markup.
    assert "Sodium rose 11 mmol/L in 24 h" in html
    assert "Sodium change in 24 h" in html
    assert "&lt;script&gt;" in html and "<script>alert" not in html
    assert CAUTION in html
    assert "lvh-pt-0042" not in html  # no patient identifier
    assert r.headers["referrer-policy"] == "no-referrer"
    assert r.headers["cache-control"] == "no-store"


def test_unknown_token_is_a_plain_404(client: TestClient) -> None:
    r = client.get("/trend/" + "A" * 43)
    assert r.status_code == 404
    assert "Trend not found" in r.text and "<svg" not in r.text


def test_expired_token_is_a_plain_410(client: TestClient, store: Store) -> None:
    token = _save(store, now=datetime.now(UTC) - timedelta(hours=13), ttl=12)
    r = client.get(f"/trend/{token}")
    assert r.status_code == 410
    assert "expired" in r.text and "<svg" not in r.text
    assert token not in r.text


def test_app_import_does_not_load_matplotlib() -> None:
    code = "import sys, cds_service.web as w; w.create_router(); print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_trend_page_shows_local_time_with_utc_on_hover(store: Store, tmp_path) -> None:
    """``server.time_zone`` sets the times a clinician reads; the UTC instant stays in the
    title (hover) of each table cell. 2026-03-12 17:30 UTC is 18:30 in Vienna (CET, UTC+1
    before the 29 March 2026 change: IANA tz database)."""
    from cds_service.config import Settings
    from tests.web.conftest import make_app

    settings = Settings(local_trial=True, server={"time_zone": "Europe/Vienna"})
    client = TestClient(make_app(store, None, settings))
    html = client.get(f"/trend/{_save(store)}").text
    assert "Time (Europe/Vienna)" in html
    assert '<span title="12 Mar 2026 17:30 UTC">12 Mar 2026 18:30 CET</span>' in html
    assert "Time (UTC)" not in html


def test_unknown_time_zone_is_refused_when_settings_are_built() -> None:
    import pytest
    from pydantic import ValidationError

    from cds_service.config import Settings

    with pytest.raises(ValidationError, match="unknown time zone"):
        Settings(server={"time_zone": "Mars/Olympus_Mons"})


def test_whole_stay_view_is_one_click_away(client: TestClient, store: Store) -> None:
    token = _save(store)
    episode = client.get(f"/trend/{token}").text
    assert 'href="?view=stay"' in episode and "Showing the current episode" in episode
    stay = client.get(f"/trend/{token}?view=stay").text
    assert 'href="?view=episode"' in stay
    assert client.get(f"/trend/{token}?view=bogus").status_code == 200  # falls back, no 500
