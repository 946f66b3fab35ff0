"""The demo report in a headless Chromium with the network cut off (marker ``browser``).

Needs Debian's chromium and chromium-driver and the selenium package; the module skips, saying
which is missing, when they are absent. Selenium is given the system binaries, so it never
downloads a browser.
"""

from __future__ import annotations

import shutil
import time
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from report_demo import HOSTILE, build

from querygap.safe_csv import neutralize_cell

pytestmark = pytest.mark.browser

CHROMIUM, DRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")
if not (CHROMIUM.exists() and DRIVER.exists()):
    pytest.skip(
        f"needs {CHROMIUM} and {DRIVER} (apt-get install chromium chromium-driver)",
        allow_module_level=True,
    )
webdriver = pytest.importorskip("selenium.webdriver", reason="needs the selenium package")
from selenium.common.exceptions import NoAlertPresentException  # noqa: E402
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402

FLAGS = (
    "--headless=new --no-sandbox --disable-gpu --disable-background-networking "
    "--disable-component-update --disable-sync --no-first-run --window-size=1280,1000 "
    # Every fetch goes to a closed port, so the page would break if it needed the network.
    "--proxy-server=127.0.0.1:9 --proxy-bypass-list=<-loopback>"
).split()


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build(tmp_path_factory.mktemp("browser"))[1]


@pytest.fixture(scope="module")
def browser(report: Path) -> Iterator[object]:
    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in FLAGS:
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(str(DRIVER)), options=options)
    driver.get((report / "index.html").as_uri())
    deadline = time.monotonic() + 20
    while (
        time.monotonic() < deadline
        and driver.execute_script("return document.readyState") != "complete"
    ):
        time.sleep(0.1)
    time.sleep(1.0)  # plotly draws after load
    yield driver
    driver.quit()


def test_no_javascript_errors(browser: object) -> None:
    severe = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]  # type: ignore[attr-defined]
    assert severe == []


def test_every_chart_draws(browser: object) -> None:
    charts = browser.find_elements(By.CSS_SELECTOR, "div.chart")  # type: ignore[attr-defined]
    assert len(charts) >= 4
    for chart in charts:
        svg = chart.find_elements(By.CSS_SELECTOR, "svg.main-svg")
        assert svg, chart.get_attribute("data-chart")
        drawn = chart.find_elements(By.CSS_SELECTOR, "svg.main-svg g.trace, svg.main-svg path")
        assert len(drawn) > 3, chart.get_attribute("data-chart")


def test_failing_table_equals_the_csv(browser: object, report: Path) -> None:
    csv = pd.read_csv(report / "failing_queries.csv", keep_default_na=False)
    rows = browser.find_elements(By.CSS_SELECTOR, "#failing-table tbody tr")  # type: ignore[attr-defined]
    assert len(rows) == len(csv)
    got = browser.execute_script(  # type: ignore[attr-defined]
        "return Array.from(document.querySelectorAll('#failing-table tbody tr'))"
        ".map(r => [r.cells[0].textContent, r.cells[1].textContent,"
        " Number(r.cells[2].dataset.v)])"
    )
    # The CSV prefixes cells a spreadsheet would run as formulas with "'"; the page shows the text.
    assert [neutralize_cell(g[0]) for g in got] == csv["query"].astype(str).tolist()
    assert [neutralize_cell(g[1]) for g in got] == csv["example"].astype(str).tolist()
    assert [g[2] for g in got] == csv["searches"].tolist()
    card = browser.find_element(  # type: ignore[attr-defined]
        By.CSS_SELECTOR, 'div.card[data-figure="failing searches (zero or low)"]'
    )
    assert int(card.get_attribute("data-searches")) == csv["searches"].sum()


def test_hostile_queries_show_as_text_and_run_nothing(browser: object) -> None:
    with pytest.raises(NoAlertPresentException):
        browser.switch_to.alert.text  # type: ignore[attr-defined]  # noqa: B018
    assert browser.find_elements(By.CSS_SELECTOR, "img, #injected, b") == []  # type: ignore[attr-defined]
    text = browser.find_element(By.ID, "failing-table").get_attribute("textContent")  # type: ignore[attr-defined]
    for hostile in HOSTILE:
        assert hostile in text
    scripts = browser.execute_script(  # type: ignore[attr-defined]
        "return Array.from(document.scripts).map(s => s.textContent)"
    )
    assert not any("alert(1)" in s for s in scripts)


def test_sorting_by_a_header(browser: object) -> None:
    header = browser.find_elements(By.CSS_SELECTOR, "#failing-table th")[2]  # type: ignore[attr-defined]
    header.click()  # first click: most searches first
    header.click()  # second click: fewest first
    values = browser.execute_script(  # type: ignore[attr-defined]
        "return Array.from(document.querySelectorAll('#failing-table tbody tr'))"
        ".map(r => Number(r.cells[2].dataset.v))"
    )
    assert values == sorted(values)
    assert shutil.which("chromium") or CHROMIUM.exists()
