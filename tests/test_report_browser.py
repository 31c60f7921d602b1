"""report.html in headless Chromium (driven by playwright): every figure loads, no text runs
out of the page at 1280 px and at a 390 px phone width, and axe-core finds no accessibility
violation. Skips, saying why, when Chromium or the Python drivers are missing (CI has them:
scripts/test.sh installs Debian's chromium under CI=true)."""

from __future__ import annotations

import shutil

import pytest
from _plan_synth import stand_in_select_rows, write_study

from semisup.plan import PlanRequest, make_plan
from semisup.report import write_report

pytestmark = pytest.mark.slow

# Flags for a quiet, isolated headless run (no network, sync, updates or first-run pages).
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]

# Elements whose own text ends outside the viewport, or overflows its box sideways; text in a
# scrollable table wrapper (.scroll) may scroll, but the wrapper itself must fit.
OVERFLOW_JS = """() => {
  const vw = document.documentElement.clientWidth;
  const bad = [];
  if (document.documentElement.scrollWidth > vw + 1)
    bad.push("page scrolls sideways: " + document.documentElement.scrollWidth + " > " + vw);
  for (const el of document.querySelectorAll("body *")) {
    const own = [...el.childNodes].some(n => n.nodeType === 3 && n.textContent.trim());
    if (!own && el.tagName !== "IMG") continue;
    const box = el.closest(".scroll");
    const r = (box || el).getBoundingClientRect();
    const what = el.tagName + " '" + (el.textContent || el.alt || "").trim().slice(0, 50) + "'";
    if (r.right > vw + 1 || r.left < -1) bad.push("outside the page: " + what);
    if (!box && el.clientWidth > 0 && getComputedStyle(el).overflowX === "visible"
        && el.scrollWidth > el.clientWidth + 1)
      bad.push("text wider than its box: " + what);
  }
  return [...new Set(bad)];
}"""

IMAGES_JS = """() => [...document.images].map(i => ({
  src: i.src.slice(0, 30), ok: i.complete && i.naturalWidth > 0, alt: i.alt,
  cls: i.className, shown: i.getBoundingClientRect().width}))"""

# Figure text as shown: an image's smallest text (data-text-px, in image pixels) times its
# shown width over its natural width, in CSS px; every shown image must say it.
FIGURE_TEXT_JS = """() => [...document.images].filter(i => i.getBoundingClientRect().width > 0)
  .map(i => ({alt: i.alt, px: i.dataset.textPx ? parseFloat(i.dataset.textPx)
      * i.getBoundingClientRect().width / i.naturalWidth : null}))
  .filter(f => f.px === null || f.px < 9)"""

# The decisive columns of a table (th/td class "key": the option, its chance and its cost)
# must be on screen without scrolling the table sideways.
KEY_COLUMNS_JS = """() => {
  const vw = document.documentElement.clientWidth;
  const cells = [...document.querySelectorAll("th.key, td.key")]
    .filter(c => c.getBoundingClientRect().width > 0);
  return {n: cells.length, off: cells.filter(c => {
    const r = c.getBoundingClientRect(); return r.right > vw + 1 || r.left < -1;})
    .map(c => c.textContent.trim().slice(0, 40))};
}"""


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.fixture(scope="module")
def browser():
    path = _chromium()
    if path is None:
        pytest.skip("chromium is not installed (apt-get install -y chromium); CI installs it")
    sync_api = pytest.importorskip(
        "playwright.sync_api", reason="playwright is not installed (pip install -e '.[test]')")
    pytest.importorskip("axe_playwright_python",
                        reason="axe-playwright-python is not installed (pip install -e '.[test]')")
    with sync_api.sync_playwright() as p:
        # The system's Chromium: playwright's own browser download is never used.
        b = p.chromium.launch(executable_path=path, args=FLAGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = write_study(tmp_path_factory.mktemp("browser") / "s",
                         truth={"latent-logreg": (0.05, 1.2, 0.55),
                                "supervised-logreg": (0.08, 1.5, 0.5),
                                "label-spreading": (0.07, 1.4, 0.5)},
                         strategies=("random", "representative"), row_prefix="form-" * 12)
    make_plan(folder, PlanRequest("accuracy", 0.9, 1.25, labels_owned=100, n_next=20),
              select_rows=stand_in_select_rows, n_boot=30)
    return write_report(folder, currency="EUR")


def _page(browser, path, width):
    page = browser.new_page(viewport={"width": width, "height": 900})
    page.goto(path.resolve().as_uri())
    page.wait_for_load_state("load")
    return page


def test_every_figure_loads(browser, report):
    page = _page(browser, report, 1280)
    images = page.evaluate(IMAGES_JS)
    page.close()
    wide = [i for i in images if i["cls"] == "wide"]
    assert len(wide) == 3  # one figure per metric
    for img in images:
        assert img["ok"], img
        assert img["alt"]
    for img in wide:
        assert img["shown"] > 300, img
    # on a wide screen the one-panel images are hidden
    assert all(i["shown"] == 0 for i in images if i["cls"] == "panel")


@pytest.mark.parametrize("width", [1280, 390])
def test_figure_text_is_at_least_9_css_px(browser, report, width):
    # 9 CSS px: the smallest text size we accept (common practice, no source).
    page = _page(browser, report, width)
    small = page.evaluate(FIGURE_TEXT_JS)
    page.close()
    assert small == []


def test_figure_text_check_catches_a_shrunken_figure(browser, report, tmp_path):
    # Control: the report's own wide figure squeezed into 300 px has text below 9 px.
    html = report.read_text()
    start = html.index("<img class=\"wide\"")
    img = html[start:html.index(">", start) + 1].replace("<img ", "<img style='width:300px' ")
    bad_page = tmp_path / "small.html"
    bad_page.write_text("<!DOCTYPE html><html lang='en'><head><title>x</title></head><body>"
                        + img + "</body></html>")
    page = _page(browser, bad_page, 390)
    assert page.evaluate(FIGURE_TEXT_JS)
    page.close()


def test_decisive_columns_are_on_a_phone_screen(browser, report):
    page = _page(browser, report, 390)
    found = page.evaluate(KEY_COLUMNS_JS)
    page.close()
    assert found["n"] >= 3 and found["off"] == []


def test_decisive_column_check_catches_a_column_off_screen(browser, tmp_path):
    # Control: a key column after six wide columns lies beyond a 390 px screen.
    cells = "".join("<td>" + "x" * 20 + "</td>" for _ in range(6))
    bad_page = tmp_path / "wide.html"
    bad_page.write_text("<!DOCTYPE html><html lang='en'><head><title>x</title></head><body>"
                        "<div style='overflow-x:auto'><table><tr>" + cells
                        + "<td class='key'>80%</td></tr></table></div></body></html>")
    page = _page(browser, bad_page, 390)
    assert page.evaluate(KEY_COLUMNS_JS)["off"] == ["80%"]
    page.close()


@pytest.mark.parametrize("width", [1280, 390])
def test_no_text_overflows(browser, report, width):
    page = _page(browser, report, width)
    bad = page.evaluate(OVERFLOW_JS)
    page.close()
    assert not bad, bad


def test_overflow_check_catches_overflowing_text(browser, tmp_path):
    # Control: a long unbreakable word in a fixed-width box is reported.
    bad_page = tmp_path / "bad.html"
    bad_page.write_text("<!DOCTYPE html><html lang='en'><head><title>x</title></head><body>"
                        "<p style='width:200px'>" + "x" * 300 + "</p></body></html>")
    page = _page(browser, bad_page, 390)
    assert page.evaluate(OVERFLOW_JS)
    page.close()


def _axe(browser, path, width):
    from axe_playwright_python.sync_playwright import Axe

    page = _page(browser, path, width)
    result = Axe().run(page)
    page.close()
    return [(v["id"], v["help"], len(v["nodes"])) for v in result.response["violations"]]


@pytest.mark.parametrize("width", [1280, 390])
def test_axe_finds_no_accessibility_violation(browser, report, width):
    # axe-core (Deque's accessibility rules engine, bundled by axe-playwright-python).
    assert _axe(browser, report, width) == []


def test_axe_check_catches_a_bad_page(browser, tmp_path):
    # Control: an image without alt text and grey-on-white text are violations for axe-core.
    bad_page = tmp_path / "bad.html"
    bad_page.write_text("<!DOCTYPE html><html lang='en'><head><title>x</title></head><body>"
                        "<main><img src='data:image/png;base64,iVBORw0KGgo='>"
                        "<p style='color:#ccc'>faint</p></main></body></html>")
    ids = {v[0] for v in _axe(browser, bad_page, 1280)}
    assert {"image-alt", "color-contrast"} <= ids
