"""The worklist tab in headless Chromium, served with the example department overlay: upload the sample
list, filter it, open a row as a full decision in the main view, download the reviewed file, and an
unusable upload's message. Screenshots go to test-artifacts/screenshots/."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest

from widgets import serve

from .conftest import LOAD_TIMEOUT_MS, external, free_port, screenshot, start_voila

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "examples" / "worklist.csv"
OVERLAY = ROOT / "examples" / "department-overlay.yaml"
_TABLE_ROWS_JS = "() => Array.from(document.querySelectorAll('.ca-worklist-table tbody tr')).map(r => r.dataset.order)"


@pytest.fixture(scope="module")
def overlay_server():
    port = free_port()
    assert serve.check_policy(OVERLAY) is None
    proc, log = start_voila(serve.voila_command(port, str(OVERLAY)), port, serve.voila_environment(str(OVERLAY)),
                            "voila-overlay.log")
    try:
        yield serve.url_for(port)
    finally:
        serve.stop(proc)


def upload(page, path: Path) -> None:
    """ipywidgets' upload button opens a file chooser from a file input it does not attach to the page."""
    with page.expect_file_chooser() as chooser:
        page.locator(".ca-worklist-upload").click()
    chooser.value.set_files(str(path))


def open_tab(page, url: str) -> None:
    page.goto(url)
    page.wait_for_selector(".ca-option", state="visible", timeout=LOAD_TIMEOUT_MS)
    page.get_by_text("Worklist: review a list of orders").click()
    page.wait_for_selector(".ca-worklist-upload", state="visible")


def test_upload_filter_open_and_download(page, overlay_server, tmp_path):
    open_tab(page, overlay_server)
    # the on-call line of the overlay is on the decision shown
    page.wait_for_function("() => document.body.innerText.includes('extension 4417')")
    # a fixed "now" for the review (the main view's "Times as of"), never the machine's clock
    page.locator(".ca-as-of input").fill("2026-12-01 16:00")
    page.locator(".ca-as-of input").press("Enter")
    upload(page, SAMPLE)
    page.wait_for_function("() => document.querySelector('.ca-worklist-summary').innerText.includes('8 orders')")
    summary = page.locator(".ca-worklist-summary").inner_text()
    assert "8 orders: 1 ok, 5 flagged, 2 rejected" in summary
    assert "harbourside-radiology" in summary and "Reviewed as of 2026-12-01 16:00" in summary
    # premedication that must start tonight (methylprednisolone 12 h before the 10:15 exam, ACR Manual)
    assert "2026-12-01 22:15 order HS-1003: premedication (methylprednisolone-12h)" in summary
    # default view: flagged and rejected orders, in list order
    page.wait_for_function(f"() => ({_TABLE_ROWS_JS})().length === 7")
    assert page.evaluate(_TABLE_ROWS_JS) == ["HS-1001", "HS-1002", "HS-1003", "HS-1004", "HS-1006", "HS-1007",
                                              "HS-1008"]
    screenshot(page, "worklist-uploaded")
    # filter by a word of the flags
    page.locator(".ca-worklist-filter input").fill("premedication")
    page.wait_for_function(f"() => ({_TABLE_ROWS_JS})().length === 1")
    assert page.evaluate(_TABLE_ROWS_JS) == ["HS-1003"]
    # sort: rejected only, then by order id descending
    page.locator(".ca-worklist-filter input").fill("")
    page.locator(".ca-worklist-status select").select_option(label="Rejected")
    page.wait_for_function(f"() => ({_TABLE_ROWS_JS})().length === 2")
    assert page.evaluate(_TABLE_ROWS_JS) == ["HS-1006", "HS-1007"]
    assert "column creatinine_unit: 'mmol' is not allowed" in page.locator(".ca-worklist-table").inner_text()
    page.locator(".ca-worklist-status select").select_option(label="All orders")
    page.locator(".ca-worklist-sort select").select_option(label="order_id")
    page.get_by_text("descending").click()
    page.wait_for_function(f"() => ({_TABLE_ROWS_JS})()[0] === 'HS-1008'")
    # open an order: the main view shows its full decision (local code HSAN-RN is not used here; HS-1008
    # is visceral angiography)
    page.locator("select.ca-worklist-open, .ca-worklist-open select").first.select_option(label="HS-1008 · angio-visceral-renal · flagged")
    page.get_by_role("button", name="Open in the main view").click()
    page.wait_for_function(
        "() => Array.from(document.querySelectorAll('.ca-decision')).some(e => e.innerText.includes('Visceral'))")
    # metformin is held for this order (ACR Manual: first-pass arterial study, patient takes metformin)
    page.wait_for_function("() => document.body.innerText.toLowerCase().includes('metformin')")
    screenshot(page, "worklist-opened-row")
    # download the reviewed list
    with page.expect_download() as info:
        page.locator(".ca-worklist-download a").click()
    target = tmp_path / "reviewed.csv"
    info.value.save_as(target)
    rows = list(csv.DictReader(io.StringIO(target.read_text(encoding="utf-8"))))
    assert [r["order_id"] for r in rows] == [f"HS-10{i:02d}" for i in range(1, 9)]
    assert [r["status"] for r in rows].count("rejected") == 2
    assert info.value.suggested_filename == "worklist.reviewed.csv"
    assert external(page.requests) == []


def test_unusable_upload_says_why(page, overlay_server, tmp_path):
    open_tab(page, overlay_server)
    bad = tmp_path / "orders.csv"
    bad.write_text("patient,when\nA,tomorrow\n", encoding="utf-8")
    upload(page, bad)
    page.wait_for_function("() => document.querySelector('.ca-worklist-error').innerText.includes('required column')")
    assert "orders.csv: required column order_id, exam is missing" in page.locator(".ca-worklist-error").inner_text()
