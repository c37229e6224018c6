"""A real browser runs the workbench: headless Chromium driven by Debian's chromedriver.

Starts the whole app (local trial, SQLite in a temporary folder) with uvicorn on a free
loopback port, opens ``/``, runs a sample and waits for its cards; saves a screenshot to
``test-artifacts/workbench.png`` (and the trend page it links to as ``trend.png``). Skipped,
with the reason, where Chromium or chromedriver is not installed (``.ci/run`` installs both).
"""

from __future__ import annotations

import shutil
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
#: A sample whose story gives work-up and correction-rate cards (sample_bundles/manifest.json).
SAMPLE = "requests/p14-overcorrection-patient-view.json"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="module")
def base_url(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    import uvicorn

    from cds_service.app import create_app
    from cds_service.config import Settings

    port = _free_port()
    db = tmp_path_factory.mktemp("browser") / "tonicity.db"
    settings = Settings(
        local_trial=True,
        auth={"required": False},
        storage={"url": f"sqlite:///{db}"},
        server={"public_base_url": f"http://127.0.0.1:{port}", "port": port},
    )
    config = uvicorn.Config(create_app(settings), host="127.0.0.1", port=port, log_level="warning")
    server = uvicorn.Server(config)
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


@pytest.fixture(scope="module")
def driver(tmp_path_factory: pytest.TempPathFactory) -> Iterator[object]:
    missing = [str(p) for p in (CHROMIUM, CHROMEDRIVER) if not p.exists()]
    if missing:
        pytest.skip(
            f"needs Chromium and chromedriver (apt-get install chromium chromium-driver); "
            f"missing: {', '.join(missing)}"
        )
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    profile = tmp_path_factory.mktemp("chromium-profile")
    for arg in (
        "--headless=new",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        "--window-size=1440,1500",
        f"--user-data-dir={profile}",
    ):
        options.add_argument(arg)
    # An explicit chromedriver path: selenium-manager never looks for (or downloads) one.
    browser = webdriver.Chrome(service=Service(executable_path=str(CHROMEDRIVER)), options=options)
    browser.set_page_load_timeout(30)
    yield browser
    browser.quit()
    shutil.rmtree(profile, ignore_errors=True)


def test_workbench_runs_a_sample_and_shows_its_cards(base_url: str, driver) -> None:
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    manifest = Path(__file__).resolve().parents[2] / "sample_bundles" / "manifest.json"
    if not manifest.exists() or SAMPLE not in manifest.read_text(encoding="utf-8"):
        pytest.skip(f"sample {SAMPLE} is not in sample_bundles/manifest.json")
    wait = WebDriverWait(driver, 30)
    driver.get(base_url + "/")
    assert "Not authenticated" in driver.find_element(By.CSS_SELECTOR, ".banner").text
    sample = wait.until(
        ec.element_to_be_clickable((By.CSS_SELECTOR, f'button[data-sample="{SAMPLE}"]'))
    )
    sample.send_keys("\n")  # keyboard, as a keyboard-only user would
    cards = wait.until(lambda d: d.find_elements(By.CSS_SELECTOR, "#cards article.card") or False)
    ARTIFACTS.mkdir(exist_ok=True)
    driver.save_screenshot(str(ARTIFACTS / "workbench.png"))
    topics = {c.get_attribute("data-topic") for c in cards}
    assert "correction-rate-exceeded" in topics
    for card in cards:  # indicator as a word, never colour alone; a summary
        badge = card.find_element(By.CSS_SELECTOR, ".indicator-badge").text
        assert badge.lower() in ("info", "warning", "critical")
        assert card.find_element(By.CSS_SELECTOR, "h3").text
    # The record as Tonicity read it: one row per result, used or ignored, with a lane picture.
    rows = wait.until(
        lambda d: d.find_elements(By.CSS_SELECTOR, "#record table.record-table tbody tr") or False
    )
    assert any("used" in r.text.lower() for r in rows)
    assert driver.find_elements(By.CSS_SELECTOR, "#record .timeline .chip.used")
    assert "Patient:" in driver.find_element(By.ID, "patient-facts").text
    # Details collapse under their summary; opening a card marks the results it rests on.
    first = cards[0].find_element(By.CSS_SELECTOR, "details.card-body")
    assert first.get_attribute("open") is None
    first.find_element(By.CSS_SELECTOR, "summary").click()
    wait.until(lambda d: first.get_attribute("open") is not None)
    marked = driver.find_elements(By.CSS_SELECTOR, "#record .rests-on")
    assert marked, "opening a card marks its results in the record"
    driver.save_screenshot(str(ARTIFACTS / "workbench-card-open.png"))
    # The raw exchange is behind a toggle for integrators, and complete.
    exchange = driver.find_element(By.ID, "exchange")
    assert exchange.get_attribute("open") is None
    assert "HTTP 200" in driver.find_element(By.ID, "timing").get_attribute("textContent")
    assert '"cards"' in driver.find_element(By.ID, "response-json").get_attribute("textContent")
    # Errors show at the top of the record panel, where the eye is.
    assert driver.find_element(By.ID, "problem").get_attribute("hidden") is not None
    # Follow the trend link the correction-rate card carries.
    link = driver.find_element(By.CSS_SELECTOR, "#cards .card-links a")  # present while closed
    driver.get(link.get_attribute("href"))
    points = driver.find_elements(By.CSS_SELECTOR, 'svg.trend-chart g[id^="sodium-point-"]')
    assert points
    assert driver.find_elements(By.CSS_SELECTOR, "svg.trend-chart #limit-band")
    driver.save_screenshot(str(ARTIFACTS / "trend.png"))
    # No script error and no Content-Security-Policy refusal on either page.
    severe = [e["message"] for e in driver.get_log("browser") if e["level"] == "SEVERE"]
    assert not severe, severe
