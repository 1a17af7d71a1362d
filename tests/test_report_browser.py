"""A real browser opens report.html from disk: it renders, logs no console error, and is not blank.

Headless Chromium (Debian packages chromium and chromium-driver, installed by .ci/run) is
driven through selenium with the system's chromedriver (never a downloaded one).  Skipped,
with the reason, where either is missing.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np
import pytest

import samplewright

pytestmark = pytest.mark.browser

CHROMIUM = next(
    (shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome") if shutil.which(n)), None
)
DRIVER = shutil.which("chromedriver")
FLAGS = [
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--window-size=1200,1600",
    "--hide-scrollbars",
]


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    if CHROMIUM is None or DRIVER is None:
        pytest.skip(
            "no headless browser here: install the Debian packages chromium and chromium-driver "
            "(.ci/run does) to run the report's browser test"
        )
    webdriver = pytest.importorskip(
        "selenium.webdriver", reason="selenium is not installed (pip install -e '.[test]')"
    )
    from selenium.webdriver.chrome.service import Service

    os.environ.setdefault("SE_AVOID_STATS", "true")
    opts = webdriver.ChromeOptions()
    opts.binary_location = CHROMIUM
    for f in FLAGS:
        opts.add_argument(f)
    opts.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    opts.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(options=opts, service=Service(executable_path=DRIVER))
    driver.set_page_load_timeout(60)
    yield driver
    driver.quit()


def _open(driver, path: Path):
    driver.get(path.resolve().as_uri())
    assert driver.execute_script("return document.readyState") == "complete"
    return [e for e in driver.get_log("browser") if e.get("level") in ("SEVERE", "ERROR")]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    sc = samplewright.scenario_from_dict(
        {
            "title": "Harbour crane inspection audit (browser test)",
            "frame": {
                "synthetic": {
                    "units": 2000,
                    "seed": 8,
                    "target": "defects",
                    "skew": "gamma",
                    "strata": [
                        {"name": "east quay", "share": 0.6, "mean": 12, "sd": 3},
                        {"name": "west quay", "share": 0.4, "mean": 20, "sd": 6},
                    ],
                    "clusters": {"mean_size": 25, "icc": 0.1},
                },
                "target": "defects",
            },
            "design": [
                {"label": "simple random", "method": "srs", "n": [50, 100]},
                {"label": "by quay", "method": "stratified", "n": 100, "allocation": "neyman"},
                {"label": "whole cranes", "method": "cluster", "clusters": 4},
            ],
            "goal": {"moe": 1.0, "budget": 2000.0},
            "cost": {"fixed": 300.0, "per_unit": 5.0, "per_cluster": 80.0},
        }
    )
    res = samplewright.run(sc, replicates=200, seed=5)
    return res.write(tmp_path_factory.mktemp("browser") / "run", report=True) / "report.html"


def test_report_renders_offline_without_console_errors(browser, report, tmp_path):
    errors = _open(browser, report)
    assert errors == [], errors
    for sid in ("verdict", "comparison", "scenario", "recommendation", "summary", "figures", "warnings", "metadata",
                "cautions"):
        assert browser.execute_script(f"return document.getElementById('{sid}').offsetHeight") > 0, sid
    imgs = browser.execute_script(
        "return Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])"
    )
    n_png = len(list((report.parent / "figures").glob("*.png")))
    assert len(imgs) == n_png >= 6
    assert all(ok and w == 975 and h > 300 for ok, w, h in imgs), imgs  # every embedded figure decoded
    height = browser.execute_script("return document.documentElement.scrollHeight")
    assert height > 3000  # the whole story, not an empty shell
    shot = tmp_path / "report.png"
    assert browser.save_screenshot(str(shot))
    import matplotlib.image as mpimg

    px = mpimg.imread(shot)[..., :3]
    assert px.shape[1] >= 1000
    ink = np.mean(px.min(axis=2) < 0.9)  # share of pixels that are not (near) white
    assert ink > 0.02, f"screenshot looks blank ({ink:.2%} ink)"
    assert px.std() > 0.05


def test_the_console_check_sees_a_blocked_request(browser, report, tmp_path):
    # negative control: the same page with one external image; the report's content security
    # policy blocks it (no network needed) and Chromium logs the refusal as a console error
    page = tmp_path / "with-external.html"
    text = report.read_text(encoding="utf-8")
    page.write_text(
        text.replace("</main>", '<img src="https://example.invalid/x.png" alt="x"></main>'), encoding="utf-8"
    )
    errors = _open(browser, page)
    assert errors, "a blocked external image should have logged a console error"
    assert any("Content Security Policy" in e.get("message", "") for e in errors), errors


def test_on_a_phone_width_the_summary_scrolls_and_the_page_does_not(browser, report):
    # 375 CSS pixels: the width of a common phone screen (from memory)
    browser.set_window_size(375, 800)
    try:
        _open(browser, report)
        page = browser.execute_script(
            "return [document.documentElement.scrollWidth, document.documentElement.clientWidth]"
        )
        table = browser.execute_script(
            "document.querySelectorAll('details').forEach(d => d.open = true);"  # the full table is collapsible
            "const w = document.querySelector('#summary .wide');"
            "return [w.scrollWidth, w.clientWidth, getComputedStyle(w).overflowX]"
        )
        page_open = browser.execute_script(
            "return [document.documentElement.scrollWidth, document.documentElement.clientWidth]"
        )
    finally:
        browser.set_window_size(1200, 1600)
    assert page[0] <= page[1] + 1, page  # nothing cut off at the page's edge
    assert page_open[0] <= page_open[1] + 1, page_open  # nor with every table opened
    assert table[2] == "auto" and table[0] > table[1], table  # the table scrolls inside its wrapper


def test_the_verdict_card_comes_above_every_table(browser, report):
    for width in (1200, 375):  # a desktop window and a phone (375 CSS pixels, from memory)
        browser.set_window_size(width, 1600)
        try:
            _open(browser, report)
            card, tops = browser.execute_script(
                "document.querySelectorAll('details').forEach(d => d.open = true);"
                "const c = document.getElementById('verdict').getBoundingClientRect();"
                "const t = Array.from(document.querySelectorAll('table')).map(x => x.getBoundingClientRect().top);"
                "return [[c.top, c.bottom, c.height], t]"
            )
            sentence = browser.execute_script("return document.querySelector('#verdict .sentence').innerText")
        finally:
            browser.set_window_size(1200, 1600)
        assert card[2] > 100 and sentence.startswith(("Use '", "No rehearsed design")), (card, sentence)
        assert len(tops) >= 4 and all(card[1] <= t for t in tops), (width, card, tops)


def test_printed_on_a4_every_table_fits_the_text_width(browser, report):
    # A4 is 21 cm wide; less the 2 cm margins of the page's @page rule that leaves 17 cm = 643 CSS pixels
    # at 96 pixels per inch (CSS Values and Units, 1 in = 96 px)
    browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
    browser.set_window_size(643, 1200)
    try:
        _open(browser, report)
        widths = browser.execute_script(
            "return [document.documentElement.clientWidth,"
            " Array.from(document.querySelectorAll('table')).map(t => t.getBoundingClientRect().width),"
            " document.querySelector('#summary table').getBoundingClientRect().height]"
        )
    finally:
        browser.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": ""})
        browser.set_window_size(1200, 1600)
    page, tables, full = widths
    assert page <= 643 and all(w <= page + 1 for w in tables), widths
    assert full > 0  # the collapsible full table is printed too
