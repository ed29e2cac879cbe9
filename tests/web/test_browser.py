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


def _by() -> Any:
    from selenium.webdriver.common.by import By

    return By


def _wait(where: Any) -> Any:
    from selenium.webdriver.support.ui import WebDriverWait

    return WebDriverWait(where, WAIT_S)


def _open_docs(browser: Any, origin: str) -> set[str]:
    """Load /docs and wait for the operations; the paths the page shows."""
    by = _by()
    browser.get(f"{origin}/docs")
    _wait(browser).until(lambda b: b.find_elements(by.CSS_SELECTOR, ".opblock-summary-path"))
    return {
        e.get_attribute("data-path")
        for e in browser.find_elements(by.CSS_SELECTOR, ".opblock-summary-path")
    }


def _try_out(browser: Any, verb: str, path: str) -> Any:
    """Expand one operation and press "Try it out"; its block."""
    by = _by()
    summary = browser.find_element(
        by.CSS_SELECTOR, f'.opblock-{verb} .opblock-summary-path[data-path="{path}"]'
    )
    block = summary.find_element(by.XPATH, f"ancestor::div[contains(@class,'opblock-{verb}')]")
    summary.click()
    _wait(block).until(lambda b: b.find_element(by.CSS_SELECTOR, "button.try-out__btn")).click()
    return block


def _execute(block: Any, status: str) -> str:
    """Press Execute and wait for the answer with ``status``; the answer's text."""
    by = _by()
    block.find_element(by.CSS_SELECTOR, "button.execute").click()
    live = ".live-responses-table .response "

    def answered(b: Any) -> bool:
        cells = b.find_elements(by.CSS_SELECTOR, live + ".response-col_status")
        return bool(cells) and cells[0].text.strip() == status

    _wait(block).until(answered)
    return str(block.find_element(by.CSS_SELECTOR, live + ".response-col_description").text)


def test_docs_page_shows_every_path_and_runs_a_predict(browser: Any, tmp_path: Path) -> None:
    from selenium.webdriver.common.keys import Keys

    by = _by()
    with serving(tmp_path / "server.log") as port:
        origin = f"http://127.0.0.1:{port}"
        status, raw = request(port, "GET", "/openapi.json")
        assert status == 200
        assert _open_docs(browser, origin) == set(json.loads(raw)["paths"])

        block = _try_out(browser, "post", "/v1/predict")
        editor = _wait(block).until(
            lambda b: b.find_element(by.CSS_SELECTOR, "textarea.body-param__text")
        )
        # typing the body key by key re-renders the page on every key (tens of seconds):
        # set it as a paste would, then type one key so the page takes it as an edit
        browser.execute_script(_SET_VALUE, editor, _example_body())
        editor.send_keys(Keys.END, " ")
        answer = _execute(block, "200")
        assert '"predictions"' in answer
        assert '"n_train": 30' in answer  # the body sent is the one typed in

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


def test_docs_page_is_open_and_sends_the_key_given_to_authorize(
    browser: Any, tmp_path: Path
) -> None:
    by = _by()
    with serving(tmp_path / "server.log", env={"NEARWISE_API_KEYS": "s3cret"}) as port:
        origin = f"http://127.0.0.1:{port}"
        assert "/v1/methods" in _open_docs(browser, origin)
        block = _try_out(browser, "get", "/v1/methods")
        assert "Authorization: Bearer" in _execute(block, "401")

        browser.find_element(by.CSS_SELECTOR, ".auth-wrapper button.authorize").click()
        dialog = _wait(browser).until(
            lambda b: b.find_element(by.CSS_SELECTOR, ".modal-ux .auth-container")
        )
        dialog.find_element(by.CSS_SELECTOR, "input").send_keys("s3cret")
        dialog.find_element(by.CSS_SELECTOR, "button.authorize").click()
        browser.find_element(by.CSS_SELECTOR, ".modal-ux button.btn-done").click()

        assert '"methods"' in _execute(block, "200")


def test_a_missing_browser_is_named_with_how_to_install_it(monkeypatch, tmp_path: Path) -> None:
    monkeypatch.setitem(globals(), "CHROMIUM", tmp_path / "no-chromium")
    reason = _missing()
    assert reason is not None and str(tmp_path / "no-chromium") in reason
    assert "apt-get install -y chromium chromium-driver" in reason
