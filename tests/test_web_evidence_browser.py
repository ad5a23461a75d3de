"""The sample's analysis page in a real browser: headless Chromium (Debian's chromium and
chromium-driver) driven by selenium, against the app served on 127.0.0.1 (a free port) in a thread,
over a record filled by two real analyses of a simulated run (calibrated and calibration-free).

Checks: the page loads with no error in the browser's console and every image decodes; the
spectrum zooms with the mouse wheel and its line labels are laid out again without overlap; the
line-fit panels with their residual panels are drawn; the calibration curves have residual panels
and switch to logarithmic axes; the calibration-free sample shows its Boltzmann plot; a form posted
without the token is refused and path-traversal URLs get 404.  Screenshots of the pages go to a
temporary folder, or to docs/images/ when COMPQUANT_SCREENSHOTS=1 (how the docs' images are made).
Outside references: the browser itself (console log, image decoder, BokehJS's document models).
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import pytest
import sqlalchemy as sa

sys.path.insert(0, str(Path(__file__).resolve().parent))

from record_helpers import real_analyses
from test_web_browser import browser_on, console_errors, images_ok, need_browser

from compquant.record import open_record
from compquant.record import schema as S
from compquant.web.labels import CHAR_PX


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    need_browser()

    d = tmp_path_factory.mktemp("webevbrowser")
    db = str(d / "record.sqlite")
    out = real_analyses(d, db)
    rec = open_record(db)
    with rec.transaction() as conn:
        rows = {(r.run_id, r.sample_id): r.id for r in conn.execute(sa.select(S.samples)).all()}
    with browser_on(rec, d, page_timeout=30) as (driver, url, shots):
        yield driver, url, rows, out, shots


def wait_drawn(driver, selector: str = ".bk-chart") -> None:
    """Until every interactive plot matching ``selector`` is drawn by BokehJS."""
    from selenium.webdriver.support.ui import WebDriverWait

    WebDriverWait(driver, 30).until(lambda d: d.execute_script(
        "const c = document.querySelectorAll(arguments[0]);"
        "return c.length > 0 && Array.from(c).every(e => e.children.length > 0);", selector))


HAS_MODEL = ("return Bokeh.documents.some(d => Array.from(d.all_models).some("
             "m => m[arguments[0]] === arguments[1]));")


def _shoot(driver, path: Path, height: int | None = None) -> None:
    h = height or driver.execute_script("return document.body.scrollHeight")
    driver.set_window_size(1200, min(int(h) + 40, 4000))
    driver.save_screenshot(str(path))
    driver.set_window_size(1200, 900)


def test_sample_page_loads_and_shows_spectrum_fits_and_curves(served):
    from selenium.webdriver.common.by import By

    driver, base, rows, _, shots = served
    driver.get(f"{base}/analysis/{rows[(1, 'LOT-1')]}")
    wait_drawn(driver)
    assert driver.find_element(By.TAG_NAME, "h1").text == "Sample LOT-1"
    assert images_ok(driver)
    assert console_errors(driver) == []
    assert driver.execute_script(HAS_MODEL, "name", "spectrum")
    # the line-fit panels: a fitted line's panel and a residual axis under it
    titles = driver.execute_script("return Bokeh.documents.flatMap(d => Array.from(d.all_models))"
                                   ".filter(m => m.type === 'Title' || (m.text !== undefined && m.align !== undefined))"
                                   ".map(m => m.text);")
    assert any("Zn I 472.215 (fit)" in t for t in titles)
    assert driver.execute_script(HAS_MODEL, "axis_label", "residual")
    assert driver.execute_script(HAS_MODEL, "axis_label", "residual (response)")  # the curve's residual panel
    _shoot(driver, shots / "review-sample.png")


def test_spectrum_zooms_and_labels_stay_apart(served):
    from selenium.webdriver.common.action_chains import ActionChains
    from selenium.webdriver.common.actions.wheel_input import ScrollOrigin
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    driver, base, rows, _, shots = served
    driver.get(f"{base}/analysis/{rows[(1, 'LOT-1')]}")
    wait_drawn(driver, "#ev-spectrum")
    span = ("const f = Bokeh.documents.map(d => d.get_model_by_name('spectrum')).find(m => m);"
            "return f.x_range.end - f.x_range.start;")
    before = driver.execute_script(span)
    el = driver.find_element(By.ID, "ev-spectrum")
    ActionChains(driver).scroll_from_origin(ScrollOrigin.from_element(el), 0, -400).perform()
    WebDriverWait(driver, 10).until(lambda d: d.execute_script(span) < before)
    # zoomed out until the two labelled lines (Zn I 481.053, Cu I 510.554: 29.5 nm apart) are closer on
    # screen than a label is wide: the page must put them in two rows
    WebDriverWait(driver, 10).until(lambda d: d.execute_script(
        "return document.getElementById('ev-spectrum').dataset.labelsLaidOut === '1';"))
    for _ in range(12):
        if driver.execute_script(span) > 1000:
            break
        ActionChains(driver).scroll_from_origin(ScrollOrigin.from_element(el), 0, 600).perform()
        WebDriverWait(driver, 5).until(lambda d, b=before: d.execute_script(span) != b)
        before = driver.execute_script(span)
    assert driver.execute_script(span) > 1000
    rows_js = ("const d = Bokeh.documents.find(x => x.get_model_by_name('line-labels'));"
               "return Array.from(d.get_model_by_name('line-labels').data.row);")
    WebDriverWait(driver, 5).until(lambda d: len(set(d.execute_script(rows_js))) == 2)
    lab = driver.execute_script(
        "const doc = Bokeh.documents.find(d => d.get_model_by_name('line-labels'));"
        "const s = doc.get_model_by_name('line-labels').data, r = doc.get_model_by_name('spectrum').x_range;"
        "return {x: Array.from(s.x), text: Array.from(s.text), row: Array.from(s.row), start: r.start, end: r.end,"
        " width: Math.max(200, document.getElementById('ev-spectrum').clientWidth - 70)};")
    px = [(x - lab["start"]) / (lab["end"] - lab["start"]) * lab["width"] for x in lab["x"]]
    seen = [i for i, x in enumerate(lab["x"]) if lab["start"] <= x <= lab["end"]]
    assert len(seen) == 2 and abs(px[seen[0]] - px[seen[1]]) < len(lab["text"][seen[0]]) * CHAR_PX
    el.screenshot(str(shots / "review-spectrum-labels.png"))
    for i in seen:
        for j in seen:
            if i != j and lab["row"][i] == lab["row"][j] and px[i] <= px[j]:
                assert px[i] + len(lab["text"][i]) * CHAR_PX + 4 <= px[j] + 1e-6
    assert console_errors(driver) == []


def test_calibration_curves_switch_to_log_axes(served):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import WebDriverWait

    driver, base, rows, _, shots = served
    driver.get(f"{base}/analysis/{rows[(1, 'LOT-1')]}")
    wait_drawn(driver, ".curve-chart")
    assert driver.execute_script(HAS_MODEL, "name", "curve-linear")
    driver.find_element(By.ID, "log-toggle").click()
    WebDriverWait(driver, 20).until(lambda d: d.execute_script(HAS_MODEL, "name", "curve-log"))
    wait_drawn(driver, ".curve-chart")
    assert driver.find_element(By.ID, "log-toggle").text == "Linear axes"
    assert console_errors(driver) == []
    curves = driver.find_element(By.ID, "curves")
    driver.execute_script("arguments[0].scrollIntoView();", curves)
    driver.save_screenshot(str(shots / "review-curves-log.png"))


def test_boltzmann_plot_of_the_calibration_free_run(served):
    driver, base, rows, _, shots = served
    driver.get(f"{base}/analysis/{rows[(2, 'LOT-1')]}")
    wait_drawn(driver)
    assert driver.execute_script(HAS_MODEL, "name", "boltzmann")
    assert images_ok(driver) and console_errors(driver) == []
    driver.execute_script("document.getElementById('boltzmann').scrollIntoView();")
    driver.save_screenshot(str(shots / "review-boltzmann.png"))


def test_forged_post_and_traversal_refused_on_the_analysis_pages(served):
    driver, base, rows, out, _ = served
    number = out["cal"].certificates[0].number
    driver.get(f"{base}/analysis/{rows[(1, 'LOT-1')]}")
    driver.get_log("browser")  # clear
    driver.execute_script(
        "const f = document.createElement('form'); f.method = 'post'; f.action = arguments[0];"
        "const i = document.createElement('input'); i.name = 'reviewer'; i.value = 'mallory'; f.appendChild(i);"
        "document.body.appendChild(f); f.submit();", f"/certificate/{number}/release")
    assert "Bad Request" in driver.page_source
    for url in ("/analysis/..%2F..%2Fapp.py", f"/analysis/{rows[(1, 'LOT-1')]}/..%2F..%2F..%2Fetc%2Fpasswd",
                "/analysis/1/spectrum.json/..%2F..%2Fdata.py"):
        driver.get(base + url)
        assert "Not Found" in driver.page_source and "root:" not in driver.page_source, url
    assert all(re.search(r" 40[04] ", m) for m in console_errors(driver))
