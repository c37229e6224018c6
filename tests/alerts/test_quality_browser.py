"""The quality page in a real headless Chromium (as tests/web/test_browser.py runs the
workbench): seeded with six invented weeks, it renders its charts and tables without
JavaScript, the filter form works, and a screenshot is saved to
``test-artifacts/quality.png`` (and ``quality-filtered.png``) for a person to look at."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator

import pytest

from tests.alerts.seed import seed
from tests.web.test_browser import ARTIFACTS, _free_port, driver  # noqa: F401 - fixture

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def quality_url(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    import uvicorn

    from cds_service.app import create_app
    from cds_service.config import Settings
    from cds_service.store import Store

    port = _free_port()
    db = tmp_path_factory.mktemp("quality") / "tonicity.db"
    store = Store(f"sqlite:///{db}")
    seed(store)
    store.close()
    settings = Settings(
        local_trial=True,
        auth={"required": False},
        storage={"url": f"sqlite:///{db}"},
        server={"public_base_url": f"http://127.0.0.1:{port}", "port": port},
    )
    server = uvicorn.Server(
        uvicorn.Config(create_app(settings), host="127.0.0.1", port=port, log_level="warning")
    )
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        if time.monotonic() > deadline or not thread.is_alive():
            pytest.fail("uvicorn did not start")
        time.sleep(0.05)
    yield f"http://127.0.0.1:{port}"
    server.should_exit = True
    thread.join(timeout=10)


def test_quality_page_renders_charts_and_tables_in_chromium(quality_url: str, driver) -> None:  # noqa: F811
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    ARTIFACTS.mkdir(exist_ok=True)
    driver.execute_cdp_cmd("Emulation.setScriptExecutionDisabled", {"value": True})
    try:
        driver.get(f"{quality_url}/quality")
        charts = driver.find_elements(By.CSS_SELECTOR, "figure svg")
        assert len(charts) == 5
        for svg in charts:
            assert svg.size["width"] > 300 and svg.size["height"] > 120  # drawn at a readable size
        tables = driver.find_elements(By.CSS_SELECTOR, "table")
        assert len(tables) == 5
        assert "Week of" in tables[0].text and "All weeks" in tables[0].text
        driver.save_screenshot(str(ARTIFACTS / "quality.png"))
        Select(driver.find_element(By.NAME, "service")).select_by_value("sodium-order-sign")
        driver.find_element(By.CSS_SELECTOR, "form.filters button").click()
        assert "service=sodium-order-sign" in driver.current_url
        blocks = driver.find_elements(By.CSS_SELECTOR, "section.finding-block h2")
        assert [b.text for b in blocks] == ["hypotonic-fluid-order"]
        driver.save_screenshot(str(ARTIFACTS / "quality-filtered.png"))
    finally:
        driver.execute_cdp_cmd("Emulation.setScriptExecutionDisabled", {"value": False})
