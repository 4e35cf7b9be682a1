"""The run report rendered in real headless Chromium (Debian's chromium, driven by Playwright):
summary and contents first, no horizontal overflow at 1400 and 800 px, nothing fetched, and
hostile values from the exports inert (escaped, and no script allowed by the page's CSP)."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest

from integrate import run

from .conftest import copy_workspace

CHROMIUM = Path("/usr/bin/chromium")
ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run"]

if not CHROMIUM.exists():
    if os.environ.get("INTEGRATE_REQUIRE_BROWSER"):  # set by .ci/run: there a missing browser is a failure
        raise RuntimeError(f"{CHROMIUM} is missing: install the Debian package 'chromium'")
    pytest.skip("needs the Debian package 'chromium' at /usr/bin/chromium", allow_module_level=True)
sync_api = pytest.importorskip("playwright.sync_api")

# values of the kinds OWASP's XSS filter-evasion cheat sheet lists: a script element, an attribute
# breakout into an element with an event handler, a javascript: URL
SCRIPT = "<script>window.__pwned = 1</script>"
BREAKOUT = '"><img src=x onerror="window.__pwned = 2">'
JS_URL = "javascript:window.__pwned = 3"


@pytest.fixture(scope="module")
def hostile_report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = copy_workspace(tmp_path_factory.mktemp("hostile"))
    shop = root / "demo_sources" / "webshop.csv"
    frame = pd.read_csv(shop, dtype=str, keep_default_na=False, sep=";")
    frame.loc[0, "first_name"] = BREAKOUT
    frame.loc[1, "last_name"] = SCRIPT
    frame.loc[2, "email"] = JS_URL
    frame.loc[3, "customer_id"] = "W" + SCRIPT
    frame[SCRIPT] = "x"  # an unmapped column: its name is quoted in the report's warnings
    frame.to_csv(shop, index=False, sep=";")
    result = run(root)
    assert result.report_path is not None
    return result.report_path


@pytest.fixture(scope="module")
def browser():  # noqa: ANN201 - a Playwright Browser
    with sync_api.sync_playwright() as p:
        chromium = p.chromium.launch(executable_path=str(CHROMIUM), args=ARGS, headless=True)
        yield chromium
        chromium.close()


@pytest.mark.parametrize("width", [1400, 800])
def test_report_reads_at_both_widths(hostile_report: Path, browser, width: int) -> None:  # noqa: ANN001
    page = browser.new_page(viewport={"width": width, "height": 900})
    requests: list[str] = []
    page.on("request", lambda r: requests.append(r.url))
    page.goto(hostile_report.as_uri())
    # the summary and the contents come before the first section
    assert page.locator("#summary .summary > div").count() == 6
    assert "records in" in page.locator("#summary").inner_text()
    links = page.locator("nav.toc a")
    assert links.count() >= 6
    for k in range(links.count()):  # every entry leads to a heading of the page
        target = links.nth(k).get_attribute("href")
        assert page.locator(f"h2{target}").count() == 1
    box_summary = page.locator("#summary").bounding_box()
    box_first = page.locator("h2#s1").bounding_box()
    assert box_summary["y"] < box_first["y"]
    # no horizontal scrolling of the page (wide tables scroll inside their own box)
    assert page.evaluate("document.documentElement.scrollWidth") <= width + 1
    # charts carry axes and tick labels; the thresholds are drawn on the weight histogram
    weight_chart = page.locator("svg[aria-label='Candidate pairs by log odds of a match']")
    assert weight_chart.locator("text", has_text="link 0.8").count() == 1
    assert weight_chart.locator("text", has_text="review 0.2").count() == 1
    assert weight_chart.locator("text", has_text="total weight + prior weight (bits)").count() == 1
    assert page.locator("svg[aria-label='Candidate pairs by match probability']").count() == 1
    # self-contained: the page fetched nothing but itself
    assert requests == [hostile_report.as_uri()]
    page.close()


def test_hostile_values_are_inert(hostile_report: Path, browser) -> None:  # noqa: ANN001
    text = hostile_report.read_text(encoding="utf-8")
    assert "<script" not in text.lower() and "<img" not in text.lower()
    head = text[: text.index("</head>")]
    assert "Content-Security-Policy" in head and "script-src" not in head  # default-src 'none' covers scripts
    page = browser.new_page()
    page.goto(hostile_report.as_uri())
    assert page.evaluate("window.__pwned") is None
    assert page.locator("script, img, iframe, object, embed").count() == 0
    assert page.locator("a[href^='javascript']").count() == 0
    # the hostile column name did reach the page, as text
    assert SCRIPT in page.locator("body").inner_text()
    page.close()
