"""The plan on top, at three screen sizes: the summary in the first screen, "what changed" after a toggle,
no horizontal overflow, the copy buttons' text, and axe-core with no serious or critical violation.

axe-core (MPL-2.0) is third-party code and is not kept in this repository: the ``axe`` fixture installs the
pinned version from the npm registry with the machine's npm into ``test-artifacts/node/`` (gitignored)
the first time, and its ``axe.min.js`` is injected into the page from disk, never from a CDN.
Screenshots (the first screen and the whole page at each size) go to test-artifacts/screenshots/.
"""

from __future__ import annotations

import re
from pathlib import Path
from urllib.parse import urlencode

import pytest

from .conftest import ARTIFACTS, LOAD_TIMEOUT_MS, SCREENSHOTS, _unavailable, screenshot

pytestmark = pytest.mark.browser

AXE_VERSION = "4.14.1"
NODE_PREFIX = ARTIFACTS / "node"
AXE = NODE_PREFIX / "node_modules" / "axe-core" / "axe.min.js"
SIZES = [(1400, 900), (1024, 768), (390, 844)]
#: invented patient (Riverside Imaging demo case): CT abdomen and pelvis tomorrow 09:00
CT_CASE = {"exam": "ct-abdomen-pelvis", "at": "2026-12-02T09:00", "asof": "2026-12-01T15:00",
           "creatinine": "1.9", "unit": "mg/dL", "measured": "2026-11-28", "age": "71", "sex": "female",
           "weight": "68", "height": "162", "metformin": "1", "iv_gauge": "20", "iv_site": "antecubital"}

_OVERFLOW_JS = """() => {
  const w = document.documentElement.clientWidth;
  const wide = Array.from(document.querySelectorAll('.ca-app *')).filter(e => {
    const r = e.getBoundingClientRect(); return r.width > 0 && r.right > w + 1;
  }).map(e => e.className.toString().slice(0, 60));
  return {scroll: document.documentElement.scrollWidth, client: w, wide: wide.slice(0, 8)};
}"""

_AXE_JS = """async () => {
  const r = await axe.run(document, {resultTypes: ['violations']});
  return r.violations.filter(v => v.impact === 'serious' || v.impact === 'critical')
    .map(v => v.id + ' (' + v.impact + '): ' + v.nodes.slice(0, 3).map(n => n.target.join(' ')).join(' | '));
}"""


def _new_page(browser, width: int, height: int):
    page = browser.new_page()  # the session's persistent context: size each page itself
    page.set_viewport_size({"width": width, "height": height})
    page.set_default_timeout(20_000)
    return page


def _open(page, server, query: dict[str, str]) -> None:
    page.goto(server.url + "?" + urlencode(query))
    page.wait_for_selector(".ca-summary", state="visible", timeout=LOAD_TIMEOUT_MS)
    page.wait_for_selector(".ca-option", state="attached", timeout=LOAD_TIMEOUT_MS)


@pytest.fixture(scope="session", autouse=True)
def axe_script() -> Path:
    """axe-core's axe.min.js, installed once from the npm registry by npm (never a CDN, never a browser)."""
    import json
    import shutil
    import subprocess

    installed = AXE.parent / "package.json"
    if AXE.is_file() and installed.is_file() and json.loads(installed.read_text())["version"] == AXE_VERSION:
        return AXE
    npm = shutil.which("npm")
    if npm is None:
        _unavailable("npm is missing: axe-core is installed with npm (Debian package npm, or Node.js)")
    NODE_PREFIX.mkdir(parents=True, exist_ok=True)
    done = subprocess.run([npm, "install", "--prefix", str(NODE_PREFIX), "--no-audit", "--no-fund",
                           "--no-save", f"axe-core@{AXE_VERSION}"], capture_output=True, text=True, timeout=300)
    if done.returncode != 0 or not AXE.is_file():
        _unavailable(f"npm could not install axe-core@{AXE_VERSION}: {done.stderr.strip()[-300:]}")
    return AXE


def _axe(page) -> list[str]:
    page.add_script_tag(path=str(AXE))  # the file's text goes inline: no request leaves the page
    return page.evaluate(_AXE_JS)


@pytest.mark.parametrize("width,height", SIZES, ids=[f"{w}x{h}" for w, h in SIZES])
def test_summary_first_screen_changes_copy_and_axe(browser, voila_server, width, height):
    page = _new_page(browser, width, height)
    try:
        _open(page, voila_server, CT_CASE)
        page.wait_for_timeout(500)
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        page.screenshot(path=str(SCREENSHOTS / f"first-screen-{width}x{height}.png"))
        # the summary's heading and its first lines are inside the first screen, without scrolling
        box = page.locator(".ca-summary").bounding_box()
        assert box is not None and box["y"] >= 0 and box["y"] + 120 <= height, box
        summary = page.locator(".ca-summary").inner_text()
        # CKD-EPI 2021 creatinine, female 71 y, 1.9 mg/dL: eGFR 27.9 (G4) < the default policy's 30 ->
        # hydration (ACR-NKF 2020 consensus); weight-based plan 1 mL/kg/h for 68 kg = 68 mL/h, from 1 h before
        # the 09:00 exam to 6 h after (policy hydration_hours_before / _after).
        assert "Plan: CT abdomen and pelvis" in summary
        assert "68 mL/h from 08:00 to 15:00" in summary, summary
        assert "Metformin: hold from 09:00" in summary
        # no horizontal overflow (the phone especially: nothing wider than the screen)
        over = page.evaluate(_OVERFLOW_JS)
        assert over["scroll"] <= over["client"], over
        if width < 500:
            assert not over["wide"], over
            # on a phone the plan follows the user (sticky) while the inputs scroll under it
            page.get_by_label("Takes metformin").scroll_into_view_if_needed()
            page.wait_for_timeout(200)
            top = page.locator(".ca-summary-box").bounding_box()["y"]
            assert -1 <= top <= 40, top
            page.screenshot(path=str(SCREENSHOTS / f"scrolled-{width}x{height}.png"))
        # the copy buttons: the text each would copy (and, where the browser lets us, the clipboard)
        copy = page.locator(".ca-copy-summary")
        assert copy.get_attribute("data-ca-copy").startswith("Plan: CT abdomen and pelvis")
        copy.click()
        page.wait_for_function("() => document.querySelector('.ca-copy-summary').hasAttribute('data-ca-copied')")
        assert "68 mL/h from 08:00 to 15:00" in copy.get_attribute("data-ca-copied")
        link = page.locator(".ca-copy-link")
        link.click()
        page.wait_for_function("() => document.querySelector('.ca-copy-link').hasAttribute('data-ca-copied')")
        copied = link.get_attribute("data-ca-copied")
        assert copied.startswith(voila_server.url.rstrip("/")) and "exam=ct-abdomen-pelvis" in copied
        assert "creatinine=1.9" in copied and "asof=2026-12-01T15:00" in copied
        assert _axe(page) == []
        # "what changed" after a toggle: heart failure changes the hydration plan's warnings at least
        page.get_by_label("Perforation or leak suspected").check()
        changes = page.locator(".ca-changes")
        changes.wait_for(state="visible")
        assert "What changed" in changes.inner_text()
        screenshot(page, f"layout-{width}x{height}")
        assert _axe(page) == []
    finally:
        page.close()


def test_what_changed_names_the_verdict_that_changed(browser, voila_server):
    page = _new_page(browser, 1024, 768)
    try:
        _open(page, voila_server, {"exam": "fluoro-esophagram"})
        assert page.locator(".ca-changes").count() == 0  # nothing to compare on the first view
        page.get_by_label("Perforation or leak suspected").check()
        page.wait_for_function("() => (document.querySelector('.ca-changes') || {}).innerText"
                               " && document.querySelector('.ca-changes').innerText.includes('→')")
        text = page.locator(".ca-changes").inner_text()
        # barium is contraindicated when a perforation or leak is suspected (rule barium-perforation,
        # common practice)
        assert "Thin barium sulfate suspension (oral): suitable → contraindicated" in text, text
        page.locator(".ca-summary-box").screenshot(path=str(SCREENSHOTS / "what-changed.png"))
        # an error state: announced (role=alert), the control marked aria-invalid, still no serious violation
        box = page.get_by_placeholder("serum creatinine")
        box.fill("99")
        page.locator(".ca-error", has_text="did you mean µmol/L").first.wait_for(state="visible")
        page.wait_for_function("() => document.querySelector('[aria-invalid=true]') !== null")
        assert page.locator(".ca-error[role=alert]").count() >= 1
        assert _axe(page) == []
    finally:
        page.close()


def test_one_h1_and_chart_toolbars_out_of_the_tab_order(browser, voila_server):
    page = _new_page(browser, 1400, 900)
    try:
        _open(page, voila_server, CT_CASE)
        page.wait_for_function("() => document.querySelectorAll('.js-plotly-plot .main-svg').length >= 2",
                               timeout=LOAD_TIMEOUT_MS)
        assert page.locator("h1").count() == 1
        assert page.locator("h2").count() >= 3
        focusable = page.evaluate("""() => Array.from(document.querySelectorAll('.modebar *')).filter(e =>
            e.tabIndex >= 0 && (e.matches('a[href], button, input, select, textarea') || e.hasAttribute('tabindex'))
          ).length""")
        assert focusable == 0
        # the loading screen is gone; its words were ours
        assert page.locator("#loading").count() == 0
    finally:
        page.close()


def test_print_layout_has_the_plan_and_note_without_controls(browser, voila_server):
    page = _new_page(browser, 1024, 768)
    try:
        _open(page, voila_server, CT_CASE)
        page.emulate_media(media="print")
        shown = page.evaluate("""() => Object.fromEntries(['.ca-inputs', '.ca-copy', '.ca-plots', '.ca-summary',
            '.ca-decision', '.ca-short-note'].map(s => [s, !!document.querySelector(s) &&
            getComputedStyle(document.querySelector(s)).display !== 'none']))""")
        assert shown == {".ca-inputs": False, ".ca-copy": False, ".ca-plots": False, ".ca-summary": True,
                         ".ca-decision": True, ".ca-short-note": True}, shown
        SCREENSHOTS.mkdir(parents=True, exist_ok=True)
        pdf = SCREENSHOTS.parent / "print-a4.pdf"
        page.pdf(path=str(pdf), format="A4", print_background=True)
        assert pdf.stat().st_size > 10_000
        pages = int(re.findall(rb"/Count (\d+)", pdf.read_bytes())[0])
        assert pages >= 2, "the printout was cut to one sheet"
        page.set_viewport_size({"width": 794, "height": 1123})  # A4 at 96 dpi, for a look
        page.screenshot(path=str(SCREENSHOTS / "print-a4.png"), full_page=True)
    finally:
        page.close()


def test_loading_screen_says_what_is_loading(browser, voila_server):
    page = _new_page(browser, 1024, 768)
    try:
        page.goto(voila_server.url + "?exam=fluoro-esophagram", wait_until="commit")
        words = page.locator("#loading_text")
        words.wait_for(state="attached", timeout=LOAD_TIMEOUT_MS)
        text = words.text_content()
        assert text in ("Opening contrast-aid: loading the knowledge tables and the department policy…",
                        "Working out the first decision…"), text
        page.wait_for_selector(".ca-summary", state="visible", timeout=LOAD_TIMEOUT_MS)
    finally:
        page.close()
