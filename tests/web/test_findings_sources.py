"""The finding pages (``/findings/{code}``) print sources as cards do: full references, the
locator of a checked figure, a plain mark on an unchecked one, and never "from memory"."""

from __future__ import annotations

from fastapi.testclient import TestClient

from cds_service.clinical._data import UNCHECKED_MARK
from cds_service.clinical.findings import FindingCode
from cds_service.clinical.thresholds import threshold_entries


def test_no_finding_page_says_from_memory(client: TestClient) -> None:
    texts = []
    for code in FindingCode:
        page = client.get(f"/findings/{code.value}")
        assert page.status_code == 200, code
        assert "from memory" not in page.text.lower(), code
        texts.append(page.text)
    # Hillier et al. 1999, Am J Med 106:399-403, Abstract: 2.4 per 100 mg/dL, a checked figure;
    # its page shows the reference with the locator, not the unchecked mark.
    hillier = threshold_entries()["hillier_factor"]
    joined = "\n".join(texts)
    assert "Am J Med 1999;106(4):399-403" in joined and hillier.locator in joined
    assert UNCHECKED_MARK in joined  # unchecked figures stay visible, marked plainly
