"""The review page in a real browser: headless Chromium (Debian's chromium and chromium-driver)
driven by selenium, against the app served on 127.0.0.1 in a thread.

Skipped when /usr/bin/chromium is absent, unless COMPQUANT_REQUIRE_BROWSER=1 (CI sets it after
installing chromium), when a missing browser fails the test.  Checks: every main page loads with
no error in the browser's console log and every image on it decodes; a release typed into the
page lands in the record's audit trail and in the released certificate JSON; a form posted
without the token is refused; a path-traversal URL gets 404.  Screenshots of the main pages go to
a temporary folder, or to docs/images/ when COMPQUANT_SCREENSHOTS=1 (how the docs' images are made).
Outside references: the browser itself (its console log, its image decoder) and the record.
"""

from __future__ import annotations

import json
import os
import re
import sys
import threading
from contextlib import contextmanager
from pathlib import Path

import pytest
from pypdf import PdfReader

sys.path.insert(0, str(Path(__file__).resolve().parent))

from test_web import REVIEWER, audit_rows, fill_record, state_of

from compquant.record import open_record
from compquant.web.app import create_app

CHROMIUM, DRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")
REQUIRED = os.environ.get("COMPQUANT_REQUIRE_BROWSER") == "1"
DOCS_IMAGES = Path(__file__).resolve().parent.parent / "docs" / "images"

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-dev-shm-usage",
         "--window-size=1200,900"]


def need_browser() -> None:
    """Skip without the browser or selenium, unless COMPQUANT_REQUIRE_BROWSER=1: then fail."""
    missing = [str(p) for p in (CHROMIUM, DRIVER) if not p.exists()]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("selenium (pip install 'compquant[test]')")
    if missing:
        why = f"missing {', '.join(missing)} (apt-get install chromium chromium-driver)"
        if REQUIRED:
            pytest.fail(f"COMPQUANT_REQUIRE_BROWSER=1 but {why}")
        pytest.skip(why)


@contextmanager
def browser_on(rec, folder: Path, *, page_timeout: float):
    """The review page of record ``rec`` served on a free local port, and headless Chromium
    (profile under ``folder``): yields ``(driver, base_url, screenshot_folder)``; the browser,
    the server and the record are closed on exit."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    from werkzeug.serving import make_server

    server = make_server("127.0.0.1", 0, create_app(rec), threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    opts = webdriver.ChromeOptions()
    opts.binary_location = str(CHROMIUM)
    for f in [*FLAGS, f"--user-data-dir={folder / 'profile'}"]:
        opts.add_argument(f)
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=str(DRIVER)), options=opts)
    driver.set_page_load_timeout(page_timeout)
    shots = DOCS_IMAGES if os.environ.get("COMPQUANT_SCREENSHOTS") == "1" else folder / "shots"
    shots.mkdir(parents=True, exist_ok=True)
    try:
        yield driver, f"http://127.0.0.1:{server.server_port}", shots
    finally:
        driver.quit()
        server.shutdown()
        thread.join(5)
        rec.dispose()


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    need_browser()

    d = tmp_path_factory.mktemp("webbrowser")
    db = str(d / "record.sqlite")
    numbers = fill_record(db, d)
    rec = open_record(db)
    with browser_on(rec, d, page_timeout=20) as (driver, url, shots):
        yield driver, url, rec, numbers, d, shots


def console_errors(driver) -> list[str]:
    return [e["message"] for e in driver.get_log("browser") if e["level"] in ("SEVERE", "ERROR")]


def images_ok(driver) -> bool:
    return driver.execute_script(
        "return Array.from(document.images).every(i => i.complete && i.naturalWidth > 0);")


def wait_for_charts(driver) -> None:
    """Until every interactive chart is drawn (BokehJS fetched its JSON item and rendered it)."""
    from selenium.webdriver.support.ui import WebDriverWait

    WebDriverWait(driver, 15).until(lambda d: d.execute_script(
        "const c = document.querySelectorAll('.bk-chart');"
        "return c.length > 0 && Array.from(c).every(e => e.children.length > 0);"))


def test_main_pages_load_without_console_errors(served):
    from selenium.webdriver.common.by import By

    driver, base, _, numbers, _, shots = served
    driver.get(base + "/")
    run_b = driver.find_element(By.LINK_TEXT, "RUN-B.h5").get_attribute("href")
    pages = {"review-runs": base + "/", "review-run": run_b, "review-certificate": f"{base}/certificate/{numbers[0]}",
             "review-charts": base + "/charts", "review-pending": base + "/pending"}
    for name, url in pages.items():
        driver.get(url)
        if name == "review-charts":
            wait_for_charts(driver)
        assert driver.find_element(By.TAG_NAME, "h1").text, name
        assert images_ok(driver), name
        assert console_errors(driver) == [], name
        driver.save_screenshot(str(shots / f"{name}.png"))
    driver.get(pages["review-certificate"])
    assert len(driver.find_elements(By.CSS_SELECTOR, "figure img")) == 1  # the recorded spectrum figure


def test_release_typed_into_the_page_lands_in_the_record(served):
    from selenium.webdriver.common.by import By

    driver, base, rec, numbers, d, _ = served
    driver.get(f"{base}/certificate/{numbers[0]}")
    driver.find_element(By.ID, "reviewer").send_keys(REVIEWER)
    driver.find_element(By.ID, "role").send_keys("Quality manager")
    driver.find_element(By.ID, "statement").send_keys("Checked in the browser.")
    driver.find_element(By.ID, "release").click()
    assert f"released {numbers[0]}" in driver.find_element(By.CSS_SELECTOR, ".flash.ok").text
    assert console_errors(driver) == []
    last = audit_rows(rec)[-1]
    assert (last["action"], last["subject"], last["who"], last["why"]) == (
        "release", numbers[0], REVIEWER, "Checked in the browser.")
    assert json.loads(last["detail"])["role"] == "Quality manager"
    doc = json.loads((d / "b" / "RUN-B-S000.json").read_text("utf-8"))
    assert doc["review"]["state"] == "released" and doc["authorised_by"]["name"] == REVIEWER
    # the re-rendered PDF carries the authorisation and no DRAFT watermark (text read back with pypdf)
    text = "".join(p.extract_text() for p in PdfReader(str(d / "b" / "RUN-B-S000.pdf")).pages)
    assert REVIEWER in text and "Quality manager" in text and "DRAFT" not in text


def test_control_chart_zooms_with_the_mouse_wheel(served):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.actions.wheel_input import ScrollOrigin
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    driver, base = served[:2]
    driver.get(base + "/charts")
    wait_for_charts(driver)
    spans = "return Bokeh.documents.map(d => { const r = d.roots()[0].x_range; return r.end - r.start; });"
    before = driver.execute_script(spans)
    chart = driver.find_element(By.ID, "chart-1")
    ActionChains(driver).scroll_from_origin(ScrollOrigin.from_element(chart), 0, -300).perform()
    WebDriverWait(driver, 5).until(lambda d: d.execute_script(spans) != before)
    after = driver.execute_script(spans)
    zoomed = [(b, a) for b, a in zip(before, after) if a != b]
    assert len(zoomed) == 1 and zoomed[0][1] < zoomed[0][0]  # one chart, narrower x range: zoomed in
    assert console_errors(driver) == []


def test_forged_form_and_path_traversal_are_refused_in_the_browser(served):
    driver, base, rec, numbers, _, _ = served
    before = audit_rows(rec)
    driver.get(f"{base}/certificate/{numbers[2]}")
    driver.get_log("browser")  # clear
    # a form built without the token (as another site's page would post it)
    driver.execute_script(
        "const f = document.createElement('form'); f.method = 'post'; f.action = arguments[0];"
        "for (const [k, v] of [['reviewer', 'mallory']]) { const i = document.createElement('input');"
        " i.name = k; i.value = v; f.appendChild(i); } document.body.appendChild(f); f.submit();",
        f"/certificate/{numbers[2]}/release")
    assert "Bad Request" in driver.page_source
    assert audit_rows(rec) == before and state_of(rec, numbers[2]) == "draft"
    for url in ("/file/..%2F..%2F..%2Fetc%2Fpasswd", "/static/..%2F..%2Fapp.py", "/figure/1/..%2F..%2Fdata.py.png"):
        driver.get(base + url)
        assert "Not Found" in driver.page_source and "root:" not in driver.page_source, url
    assert all(re.search(r" 40[04] ", m) for m in console_errors(driver))  # only the refusals themselves
