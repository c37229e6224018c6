"""A loopback FHIR server for the tests: ``server.mjs`` (Medplum's FhirRouter over its
in-memory repository), loaded with sample Bundles (:data:`STORIES`), on an ephemeral port
of 127.0.0.1.

Skipped, with the reason, when Node.js or ``node_modules`` is absent (``.ci/run`` installs
them with ``npm ci`` in this folder).
"""

from __future__ import annotations

import json
import select
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest

HERE = Path(__file__).parent
SAMPLES = HERE.parent.parent / "sample_bundles" / "bundles"
START_SECONDS = 60
#: The samples served: between them every prefetch key has data (Medplum's in-memory search
#: scans every resource, so the long-stay record of 311 Observations is left out).
STORIES = (
    "p04-siadh-si-units.json",
    "p07-thiazide-ssri.json",
    "p09-pseudohyponatremia-lipemia.json",
    "p14-overcorrection.json",
)


def _node() -> str:
    node = shutil.which("node")
    if node is None:
        pytest.skip("Node.js is not installed: the loopback FHIR server needs it")
    if not (HERE / "node_modules" / "@medplum" / "fhir-router").is_dir():
        pytest.skip("tests/fhirserver/node_modules is absent: run `npm ci` in tests/fhirserver")
    return node


@pytest.fixture(scope="session")
def fhir_server() -> Iterator[str]:
    """The base URL (``http://127.0.0.1:PORT/fhir/R4``) of the running server."""
    node = _node()
    bundles = [str(SAMPLES / name) for name in STORIES]
    proc = subprocess.Popen(
        [node, str(HERE / "server.mjs"), *bundles],
        cwd=HERE,
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        assert proc.stdout is not None
        ready, _, _ = select.select([proc.stdout], [], [], START_SECONDS)
        line = proc.stdout.readline() if ready else ""  # one line once it listens
        if not line:
            err = proc.stderr.read() if proc.stderr else ""
            pytest.fail(f"the FHIR server did not start: {err[-500:]}")
        info = json.loads(line)
        assert info["loaded"] > 0
        yield str(info["base"])
    finally:
        if proc.stdin:
            proc.stdin.close()
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
