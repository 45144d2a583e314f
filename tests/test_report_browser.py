"""The HTML report in a real browser: headless Chromium loads it, counts bars, takes a picture.

Driven through Selenium and chromedriver rather than Chromium's own command line: only the
WebDriver protocol gives both the console log (to fail on page errors) and live DOM queries
(to count what was actually rendered); `--dump-dom`/`--screenshot` give neither reliably.
Chromium comes from the Debian packages `chromium` and `chromium-driver` (`make browser`).
"""

from __future__ import annotations

import io
import os
from dataclasses import replace
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

from assignplan.check import check_plan
from assignplan.expand import load_batch
from assignplan.plan import to_plan_doc
from assignplan.report.html import page_budget, write_html_report
from tests.test_report_html import BUDGET_10K, WEEK, large_plan, sequential_plan, week

CHROMIUM = Path("/usr/bin/chromium")
CHROMEDRIVER = Path("/usr/bin/chromedriver")
FLAGS = (
    "--headless=new", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-quic", "--no-first-run", "--disable-component-update", "--disable-sync",
    "--disable-extensions", "--disable-default-apps", "--hide-scrollbars",
    "--window-size=1280,1000",
)
COUNT_BARS = "return document.querySelectorAll('svg#timeline rect[data-job]').length"
# Pairs of text boxes in a chart that intersect (as laid out by the browser's own fonts).
OVERLAPPING_TEXT = """
const boxes = [...document.querySelectorAll('svg.chart text')].map(t => t.getBoundingClientRect());
let pairs = 0;
for (let a = 0; a < boxes.length; a++) for (let b = a + 1; b < boxes.length; b++) {
  const p = boxes[a], q = boxes[b];
  if (p.left < q.right - 1 && q.left < p.right - 1 && p.top < q.bottom - 1 && q.top < p.bottom - 1)
    pairs++;
}
return [boxes.length, pairs];
"""
DISTINCT_BARS = (
    "return new Set([...document.querySelectorAll('svg#timeline rect[data-job]')]"
    ".map(e => e.dataset.job)).size"
)


def _missing_browser() -> str | None:
    missing = [str(p) for p in (CHROMIUM, CHROMEDRIVER) if not p.exists()]
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("the selenium package (pip install -e '.[test]')")
    return ", ".join(missing) or None


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    missing = _missing_browser()
    if missing:
        # CI and root can install it (`make browser`, which `make test` runs): there a missing
        # browser is a broken set-up, not a reason to skip the check.
        if os.environ.get("CI") == "true" or os.geteuid() == 0:
            pytest.fail(f"browser test needs {missing}: run `make browser`")
        pytest.skip(f"not in CI and not root, and {missing} is not installed (`make browser`)")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in FLAGS:
        options.add_argument(flag)
    options.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SE_OFFLINE", "true")  # the driver is given: Selenium Manager must not go online
        driver = webdriver.Chrome(service=Service(str(CHROMEDRIVER)), options=options)
    driver.set_page_load_timeout(60)
    yield driver
    driver.quit()


def _load(driver, path: Path) -> list[dict]:
    """Open the page and return its console messages (the log is drained on every read)."""
    driver.get_log("browser")
    driver.get(path.resolve().as_uri())
    assert driver.execute_script("return document.readyState") == "complete"
    return driver.get_log("browser")


def _errors(log: list[dict]) -> list[str]:
    return [entry["message"] for entry in log if entry["level"] in ("SEVERE", "ERROR")]


def screenshot(driver, height: int) -> bytes:
    """A PNG of the top `height` CSS pixels of the current page, 1280 pixels wide."""
    driver.set_window_size(1280, height)
    return driver.get_screenshot_as_png()


def _check_not_blank(png: bytes) -> None:
    image = mpimg.imread(io.BytesIO(png), format="png")[..., :3]
    colours = np.unique((image * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert len(colours) > 50, "a page of a few flat colours: charts did not render"
    inked = (image.min(axis=2) < 0.92).mean()
    assert 0.03 < inked < 0.9, f"{inked:.1%} of the pixels are not near-white"


def test_the_console_check_sees_page_errors(browser, tmp_path):
    # Guards the check below: a page that throws must show up as an error in the log.
    page = tmp_path / "broken.html"
    page.write_text("<!DOCTYPE html><p>x</p><script>undefinedFunction()</script>")
    assert any("undefinedFunction" in m for m in _errors(_load(browser, page)))


def _variant(name: str):
    """The bundled week's greedy plan; a plan running past the window; one ending at it."""
    inst, result = week()
    if name == "past-window":
        result = sequential_plan(inst)
        assert result.makespan > inst.window_minutes
    elif name == "ends-at-window":
        inst = replace(inst, window_minutes=result.makespan)
    return inst, result


@pytest.mark.parametrize("variant", ["week", "past-window", "ends-at-window"])
def test_week_report_renders(browser, tmp_path, variant):
    inst, result = _variant(variant)
    page = tmp_path / "week.html"
    # The sequential plan ignores maintenance: its page opens with the failed check.
    violations = check_plan(load_batch(WEEK), to_plan_doc(inst, result))
    write_html_report(page, inst, result, violations)
    log = _load(browser, page)
    assert _errors(log) == []
    banner = browser.execute_script(
        "const b = document.getElementById('check');"
        "return [b.className, b.getBoundingClientRect().top, b.textContent];")
    assert banner[0] == ("banner fail" if violations else "banner ok")
    assert banner[1] < 150  # the first thing under the title
    assert browser.execute_script(COUNT_BARS) == inst.n_jobs
    assert browser.execute_script(DISTINCT_BARS) == inst.n_jobs
    box = browser.execute_script(
        "const r = document.getElementById('timeline').getBoundingClientRect();"
        "return [r.width, r.height];")
    assert box[0] > 800 and box[1] > 400  # drawn at a readable size, not collapsed
    n_texts, overlaps = browser.execute_script(OVERLAPPING_TEXT)
    assert n_texts > inst.n_nodes and overlaps == 0
    tip = browser.execute_script(
        "return document.querySelector('svg#timeline rect[data-job=\"0\"] title').textContent")
    assert tip.startswith(f"{inst.job_names[0]} on {inst.node_names[result.assign[0]]} ")
    _check_not_blank(screenshot(browser, 1800))


@pytest.mark.slow
def test_ten_thousand_job_report_renders(browser, tmp_path):
    inst, result = large_plan()
    page = tmp_path / "large.html"
    size = write_html_report(page, inst, result, [])
    assert size <= min(BUDGET_10K, page_budget(inst.n_jobs, inst.n_nodes))
    assert _errors(_load(browser, page)) == []
    assert browser.execute_script(COUNT_BARS) == inst.n_jobs == 10_000
    assert browser.execute_script(DISTINCT_BARS) == inst.n_jobs
    _check_not_blank(screenshot(browser, 1400))
