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
  shown: i.getBoundingClientRect().width}))"""


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
    assert len(images) == 3
    for img in images:
        assert img["ok"], img
        assert img["alt"] and img["shown"] > 300, img


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
