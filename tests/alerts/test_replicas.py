"""Two replicas (two app instances) on one PostgreSQL: the suppression state is the database's,
so a chart opened five times, alternately through each replica, shows each unchanged card once
(issue 15, "Done when"). Skipped, saying why, without ``TONICITY_TEST_POSTGRES_URL``."""

from __future__ import annotations

from fastapi.testclient import TestClient

from cds_service.app import create_app
from cds_service.config import load_settings
from tests.hooks.fhirdata import hook_request, sodium_series

WORKUP = "/cds-services/sodium-workup"


def test_two_replicas_share_repeat_suppression(postgres_url: str) -> None:
    settings = load_settings(
        None, storage={"url": postgres_url}, auth={"required": False}, local_trial=True
    )
    body = hook_request(observations=sodium_series(127))
    with TestClient(create_app(settings)) as a, TestClient(create_app(settings)) as b:
        assert a.app.state.store is not b.app.state.store  # two engines, two pools
        shown = [
            [c["source"]["topic"]["code"] for c in r.post(WORKUP, json=body).json()["cards"]]
            for r in (a, b, a, b, a)
        ]
        digests = {r.get("/readyz").json()["alertSettingsDigest"] for r in (a, b)}
    assert shown[0] and shown[1:] == [[], [], [], []], shown
    assert len(digests) == 1
