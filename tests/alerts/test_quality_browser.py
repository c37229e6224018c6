"""The quality page in a real headless Chromium (as tests/web/test_browser.py runs the
workbench): seeded with six invented weeks, it renders its charts and tables without
JavaScript, the filter form works, and a screenshot is saved to
``test-artifacts/quality.png`` (and ``quality-filtered.png``) for a person to look at."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from tests.alerts.seed import seed
from tests.kit.conftest import live_server
from tests.web.test_browser import ARTIFACTS, driver  # noqa: F401 - fixture

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def quality_url(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    from cds_service.store import Store

    folder = tmp_path_factory.mktemp("quality")
    store = Store(f"sqlite:///{(folder / 'tonicity.db').as_posix()}")  # the server's store
    seed(store)
    store.close()
    with live_server(folder, auth={"required": False}, local_trial=True) as url:
        yield url


def test_quality_page_renders_charts_and_tables_in_chromium(quality_url: str, driver) -> None:  # noqa: F811
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select, WebDriverWait

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
        WebDriverWait(driver, 20).until(lambda d: "service=sodium-order-sign" in d.current_url)
        blocks = driver.find_elements(By.CSS_SELECTOR, "section.finding-block h2")
        assert [b.text for b in blocks] == ["hypotonic-fluid-order"]
        driver.save_screenshot(str(ARTIFACTS / "quality-filtered.png"))
    finally:
        driver.execute_cdp_cmd("Emulation.setScriptExecutionDisabled", {"value": False})
