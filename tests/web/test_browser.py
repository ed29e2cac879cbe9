"""/docs in a real headless browser: Debian's Chromium driven by selenium, against a real server.

The page must show every path of /openapi.json and run a predict with "Try it out", loading
nothing from any other origin. Nothing is downloaded: the browser is /usr/bin/chromium and the
driver /usr/bin/chromedriver (Debian's packages chromium and chromium-driver, which .ci/run
installs). Where they are missing the test is skipped, except when NEARWISE_BROWSER_REQUIRED
is set (.ci/run sets it), where it fails instead.
"""

from __future__ import annotations

import json
import os
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from webhelpers import curve, request, serving

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
WAIT_S = 30  # for any one thing to appear on the page
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-dev-shm-usage",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-quic",
    "--no-first-run",
    "--window-size=1400,1000",
)


def _missing() -> str | None:
    absent = [str(p) for p in (CHROMIUM, CHROMEDRIVER) if not p.exists()]
    if absent:
        return (
            f"{' and '.join(absent)} not installed; install Debian's browser with "
            "`apt-get install -y chromium chromium-driver` (as root; .ci/run does)"
        )
    try:
        import selenium  # noqa: F401
    except ImportError:
        return "selenium is not installed: pip install -e '.[test]'"
    return None


@pytest.fixture
def browser(tmp_path: Path) -> Iterator[Any]:
    reason = _missing()
    if reason:
        if os.environ.get("NEARWISE_BROWSER_REQUIRED"):
            pytest.fail(f"the browser test must run here: {reason}")
        pytest.skip(reason)
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", category=DeprecationWarning, module=r"selenium(\.|$)")
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service

        options = webdriver.ChromeOptions()
        options.binary_location = str(CHROMIUM)
        for flag in FLAGS:
            options.add_argument(flag)
        options.add_argument(f"--user-data-dir={tmp_path / 'chromium-profile'}")
        options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
        service = Service(
            executable_path=str(CHROMEDRIVER), log_output=str(tmp_path / "chromedriver.log")
        )
        driver = webdriver.Chrome(service=service, options=options)
    driver.set_page_load_timeout(WAIT_S)
    driver.set_script_timeout(WAIT_S)
    try:
        yield driver
    finally:
        try:
            driver.save_screenshot(str(tmp_path / "last-page.png"))
        finally:
            driver.quit()


_SET_VALUE = """
const [area, text] = arguments;
Object.getOwnPropertyDescriptor(HTMLTextAreaElement.prototype, "value").set.call(area, text);
area.dispatchEvent(new Event("input", {bubbles: true}));
"""


def _example_body() -> str:
    rows = [[round(x, 3), round(y, 3)] for x, y in curve(30)]
    return json.dumps(
        {
            "method": "knn",
            "target": "y",
            "train": {"columns": ["x", "y"], "rows": rows},
            "query": {"columns": ["x"], "rows": [[2.5], [7.5]]},
            "tuning": {"folds": 5},
        }
    )


def test_docs_page_shows_every_path_and_runs_a_predict(browser: Any, tmp_path: Path) -> None:
    from selenium.webdriver.common.by import By
    from selenium.webdriver.common.keys import Keys
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    wait = WebDriverWait(browser, WAIT_S)
    with serving(tmp_path / "server.log") as port:
        origin = f"http://127.0.0.1:{port}"
        status, raw = request(port, "GET", "/openapi.json")
        assert status == 200
        paths = set(json.loads(raw)["paths"])

        browser.get(f"{origin}/docs")
        wait.until(ec.presence_of_element_located((By.CSS_SELECTOR, ".opblock-summary-path")))
        shown = {
            e.get_attribute("data-path")
            for e in browser.find_elements(By.CSS_SELECTOR, ".opblock-summary-path")
        }
        assert shown == paths

        # open POST /v1/predict, try it out with a JSON body, execute
        summary = browser.find_element(
            By.CSS_SELECTOR, '.opblock-post .opblock-summary-path[data-path="/v1/predict"]'
        )
        block = summary.find_element(By.XPATH, "ancestor::div[contains(@class,'opblock-post')]")
        summary.click()
        try_out = WebDriverWait(block, WAIT_S).until(
            lambda b: b.find_element(By.CSS_SELECTOR, "button.try-out__btn")
        )
        try_out.click()
        editor = WebDriverWait(block, WAIT_S).until(
            lambda b: b.find_element(By.CSS_SELECTOR, "textarea.body-param__text")
        )
        # typing the body key by key re-renders the page on every key (tens of seconds):
        # set it as a paste would, then type one key so the page takes it as an edit
        browser.execute_script(_SET_VALUE, editor, _example_body())
        editor.send_keys(Keys.END, " ")
        block.find_element(By.CSS_SELECTOR, "button.execute").click()

        status_cell = WebDriverWait(block, WAIT_S).until(
            lambda b: b.find_element(
                By.CSS_SELECTOR, ".live-responses-table .response .response-col_status"
            )
        )
        answer = block.find_element(
            By.CSS_SELECTOR, ".live-responses-table .response .response-col_description"
        )
        assert status_cell.text.strip() == "200", answer.text
        WebDriverWait(block, WAIT_S).until(lambda _: '"predictions"' in answer.text)
        assert '"n_train": 30' in answer.text  # the body sent is the one typed in

        # everything the page loaded or fetched came from this origin
        loaded = browser.execute_script(
            "return performance.getEntriesByType('resource').map(e => e.name)"
        )
        assert any(u.endswith("/openapi.json") for u in loaded)
        assert any(u.endswith("/v1/predict") for u in loaded)
        outside = [u for u in loaded if not u.startswith(origin + "/")]
        assert outside == []
        problems = [
            entry["message"]
            for entry in browser.get_log("browser")
            if entry["level"] == "SEVERE" or "Content Security Policy" in entry["message"]
        ]
        assert problems == []
