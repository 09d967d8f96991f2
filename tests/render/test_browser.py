"""report.html in a real browser: headless Chromium, driven over the DevTools protocol.

The report of a small run of the demo scenario (three recipes, a labelled
field sample) is opened at 1280 x 900 pixels, the first screen a reviewer
sees. Chromium's own layout decides what is on that screen, whether each
embedded image decodes and what a print keeps. A screenshot of the first
screen is kept as a test artefact and its path printed.
"""

import json
import os
from pathlib import Path

import pytest

from render._chromium import Browser, find_chromium
from augplan.cli import main
from augplan.demo import DEMO_RECIPE_DIR, make_demo_dataset

CHROMIUM = find_chromium()
pytestmark = pytest.mark.skipif(
    CHROMIUM is None,
    reason="SKIPPED the browser test of report.html: Chromium is not installed (apt-get install chromium)")

SCREEN = {"width": 1280, "height": 900}
RECIPES = ("naive-draft", "cautious", "light-and-pose")


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    root = tmp_path_factory.mktemp("browser")
    data = root / "data"
    # Small, to keep the suite fast: the layout, not the statistics, is under test.
    make_demo_dataset(data, n_train=8, n_val=4, n_field=6)
    out = root / "out"
    arguments = ["vet", str(data), "-o", str(out), "--repeats", "1", "--quiet",
                 "--ledger", str(root / "ledger.sqlite")]
    for name in RECIPES:
        arguments += ["--recipe", str(DEMO_RECIPE_DIR / f"{name}.yaml")]
    assert main(arguments) in (0, 1)
    return out / "report.html"


@pytest.fixture(scope="module")
def page(report):
    with Browser(CHROMIUM) as browser:
        for domain in ("Page", "Runtime", "Log", "Network"):
            browser.page(f"{domain}.enable")
        browser.page("Emulation.setDeviceMetricsOverride", deviceScaleFactor=1, mobile=False, **SCREEN)
        browser.page("Page.navigate", url=report.as_uri())
        browser.wait_for("Page.loadEventFired")
        # Decoding of data-URI images may finish after the load event.
        browser.evaluate("Promise.all([...document.images].map(i => i.decode().catch(() => null)))")
        yield browser


def _events(browser, *methods):
    return [event for event in browser.events if event.get("method") in methods]


def test_no_console_error_and_no_script_error(page):
    errors = [e["params"] for e in _events(page, "Runtime.exceptionThrown")]
    errors += [e["params"] for e in _events(page, "Runtime.consoleAPICalled")
               if e["params"].get("type") in ("error", "assert", "warning")]
    errors += [e["params"]["entry"] for e in _events(page, "Log.entryAdded")
               if e["params"]["entry"].get("level") in ("error", "warning")]
    assert errors == []


def test_no_request_leaves_the_file(page, report):
    urls = [e["params"]["request"]["url"] for e in _events(page, "Network.requestWillBeSent")]
    assert report.as_uri() in urls  # the network domain did watch the page load
    outside = [url for url in urls if not url.startswith(("file://", "data:"))]
    assert outside == []


@pytest.mark.parametrize("selector", ["#summary", "#verdict", "#decision", "#summary .box", "#signoff",
                                      "#cautions"],
                         ids=["summary", "recommendation", "decision", "changes", "sign-off", "cautions"])
def test_summary_block_is_within_the_first_screen(page, selector):
    box = page.evaluate(f"(() => {{ const r = document.querySelector({json.dumps(selector)})"
                        ".getBoundingClientRect(); return [r.top + scrollY, r.bottom + scrollY, r.height]; })()")
    top, bottom, height = box
    assert height > 0 and 0 <= top and bottom <= SCREEN["height"]


def test_every_sign_off_item_links_to_an_element_on_the_page(page):
    missing = page.evaluate("[...document.querySelectorAll('#signoff a')]"
                            ".filter(a => !document.getElementById(a.hash.slice(1))).map(a => a.hash)")
    assert missing == []


def test_every_image_is_decoded(page):
    sizes = page.evaluate("[...document.images].map(i => [i.complete, i.naturalWidth, i.naturalHeight])")
    assert len(sizes) >= 2 * len(RECIPES)  # at least a factor grid and a draws sheet per recipe
    assert all(complete and width > 0 and height > 0 for complete, width, height in sizes)


def test_first_screen_screenshot_is_kept(page, tmp_path_factory, capsys):
    from PIL import Image

    # AUGPLAN_TEST_ARTEFACTS names a folder that outlives pytest's rotating temporary folders.
    folder = os.environ.get("AUGPLAN_TEST_ARTEFACTS")
    folder = Path(folder) if folder else tmp_path_factory.mktemp("artefacts")
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "report-first-screen.png"
    path.write_bytes(page.screenshot())
    with Image.open(path) as image:
        assert image.size == (SCREEN["width"], SCREEN["height"])
        # A rendered page, not a blank one: the verdict's band and text differ from white.
        assert len(image.convert("L").getcolors(maxcolors=1 << 16) or range(1 << 16)) > 16
    with capsys.disabled():
        print(f"\nscreenshot of the report's first screen: {path}")


def test_print_keeps_every_table(page):
    # checkVisibility() is false for content a closed <details> skips; print must show every table.
    visible = "[...document.querySelectorAll('table')].map(t => t.checkVisibility())"
    heights = "[...document.querySelectorAll('table')].map(t => t.getBoundingClientRect().height)"
    on_screen = page.evaluate(visible)
    page.page("Emulation.setEmulatedMedia", media="print")
    try:
        printed, printed_heights = page.evaluate(visible), page.evaluate(heights)
        pdf = page.page("Page.printToPDF", printBackground=False)["data"]
    finally:
        page.page("Emulation.setEmulatedMedia", media="")
    assert on_screen and not all(on_screen)  # on screen the recipes' sections start closed
    assert all(printed) and all(height > 0 for height in printed_heights)
    assert len(printed) == len(on_screen)
    assert pdf.startswith("JVBERi")  # base64 of "%PDF"


def test_report_stays_within_the_size_budget(report):
    # The demo's budget is 800 KB; this smaller run embeds the same kinds of figure for three recipes.
    assert report.stat().st_size < 800_000
