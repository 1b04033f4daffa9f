"""The served dashboard in headless Chromium: load, pick, toggle, validate, share, download, offline.

Runs against a real Voila server on the bundled notebook (fixture ``voila_server``, conftest.py).
Screenshots of the main states are written to test-artifacts/screenshots/.
"""

from __future__ import annotations

import json
import sys
from urllib.parse import urlencode

import pytest

from widgets import serve

from .conftest import LOAD_TIMEOUT_MS, external, free_port, screenshot, start_voila

pytestmark = pytest.mark.browser

ESOPHAGRAM = "fluoro-esophagram"
PERFORATION = "Perforation or leak suspected"
_CARDS_JS = "() => Array.from(document.querySelectorAll('.ca-option')).map(e => e.innerText).join('\\n---\\n')"


def open_dashboard(page, server, query: dict[str, str] | None = None) -> None:
    url = server.url + (("?" + urlencode(query)) if query else "")
    page.goto(url)
    page.wait_for_selector(".ca-exam select", state="visible", timeout=LOAD_TIMEOUT_MS)
    page.wait_for_selector(".ca-option", state="visible", timeout=LOAD_TIMEOUT_MS)


def pick_exam(page, words: str) -> str:
    """Select the first exam whose label contains ``words``; returns the label."""
    value = page.locator(".ca-exam select option").evaluate_all(
        "(os, w) => (os.find(o => o.value.includes(w)) || {}).value", words
    )
    assert value, f"no exam option contains {words!r}"
    page.locator(".ca-exam select").select_option(value=value)
    page.wait_for_function(
        "(w) => Array.from(document.querySelectorAll('.ca-decision')).some(e => e.innerText.includes(w))",
        arg=words.split(" (")[0],
    )
    return value


def cards_text(page) -> str:
    return page.evaluate(_CARDS_JS)


def wait_cards_change(page, before: str) -> str:
    page.wait_for_function(f"(b) => ({_CARDS_JS})() !== b", arg=before)
    return cards_text(page)


def card(page, agent_name: str):
    return page.locator(".ca-option", has=page.locator("b", has_text=agent_name)).first


def test_page_loads_and_makes_no_request_off_the_server(page, voila_server):
    open_dashboard(page, voila_server)
    pick_exam(page, "Oesophagram")
    # plotly's JavaScript ran (from the local jupyterlab-plotly extension): a figure is drawn
    page.wait_for_selector(".js-plotly-plot .main-svg", state="attached")
    page.wait_for_load_state("networkidle")
    screenshot(page, "01-loaded-esophagram")
    assert any("jupyterlab-plotly" in u for u in page.requests), "plotly's extension was not loaded"
    assert page.requests, "no request was recorded"
    offending = external(page.requests)
    assert offending == [], f"the page requested resources off the server: {offending}"


def test_request_recorder_sees_voila_default_cdn_links(page, tmp_path):
    """Control for the test above: Voila's stock lab template DOES fetch from a CDN, and we see it."""
    nb = tmp_path / "slider.ipynb"
    nb.write_text(json.dumps({
        "cells": [{"cell_type": "code", "execution_count": None, "id": "s", "metadata": {}, "outputs": [],
                   "source": ["import ipywidgets as w\n", "w.IntSlider()"]}],
        "metadata": {"kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"}},
        "nbformat": 4, "nbformat_minor": 5}))  # fmt: skip
    port = free_port()
    cmd = [sys.executable, "-m", "voila", str(nb), "--no-browser", f"--port={port}", "--Voila.ip=127.0.0.1",
           "--Voila.port_retries=0"]  # fmt: skip
    proc, _ = start_voila(cmd, port, serve.voila_environment(None), "voila-stock-template.log")
    try:
        page.route("**/*", lambda route: route.abort() if "127.0.0.1" not in route.request.url else route.continue_())
        page.goto(serve.url_for(port))
        page.wait_for_selector(".widget-slider", timeout=LOAD_TIMEOUT_MS)
    finally:
        serve.stop(proc)
    assert any("cdn.jsdelivr.net" in u for u in external(page.requests)), page.requests


def test_perforation_changes_the_verdicts(page, voila_server):
    open_dashboard(page, voila_server)
    pick_exam(page, "Oesophagram")
    before = cards_text(page)
    thin = card(page, "Thin barium sulfate suspension")
    assert "suitable" in thin.inner_text() and "contraindicated" not in thin.inner_text()
    page.get_by_label(PERFORATION).click()  # click(): fails if anything (a plot) covers the box
    wait_cards_change(page, before)
    page.wait_for_function(
        "() => Array.from(document.querySelectorAll('.ca-option')).some(e => e.innerText.includes('contraindicated'))")
    # Barium leaking into the mediastinum or peritoneum is the reason a water-soluble agent is used when a
    # perforation is suspected (common practice; rule barium-perforation names no checked source).
    assert "contraindicated" in card(page, "Thin barium sulfate suspension").inner_text()
    assert "suitable" in card(page, "Iohexol").inner_text()
    screenshot(page, "02-perforation-suspected")
    page.get_by_label(PERFORATION).click()
    # unticking restores barium (cards update in place, so wait for the final text)
    page.wait_for_function(
        """() => Array.from(document.querySelectorAll('.ca-option')).some(e =>
             e.innerText.startsWith('Thin barium sulfate suspension') && e.innerText.includes('suitable')
             && !e.innerText.includes('contraindicated'))""")


def test_bad_creatinine_shows_a_validation_message(page, voila_server):
    open_dashboard(page, voila_server)
    box = page.get_by_placeholder("serum creatinine")
    box.click()
    box.fill("abc")
    error = page.locator(".ca-error", has_text="abc").first
    error.wait_for(state="visible")
    assert "creatinine" in error.inner_text().lower()
    page.locator(".ca-stale-banner").first.wait_for(state="visible")
    screenshot(page, "03-validation-error")
    box.fill("1.0")
    error.wait_for(state="detached")


def test_shared_link_prefills_the_case(page, voila_server):
    query = {"exam": ESOPHAGRAM, "creatinine": "1.4", "unit": "mg/dL", "age": "60", "sex": "male"}
    open_dashboard(page, voila_server, query)
    assert "Oesophagram" in page.locator(".ca-exam select").input_value()
    assert page.get_by_placeholder("serum creatinine").input_value() == "1.4"
    # CKD-EPI 2021 creatinine equation ("New Creatinine- and Cystatin C-Based Equations to Estimate GFR
    # without Race", NEJM 2021), male, 60 years, 1.4 mg/dL:
    # 142 x (1.4/0.9)^-1.200 x 0.9938^60 = 57.54 -> 57.5 mL/min/1.73 m2, KDIGO 2012 category G3a (45-59).
    expected = 142 * (1.4 / 0.9) ** -1.200 * 0.9938**60
    readout = page.locator(".ca-egfr")
    page.wait_for_function("() => document.querySelector('.ca-egfr').innerText.includes('G3a')")
    assert f"{expected:.1f}" == "57.5" and "57.5" in readout.inner_text()
    screenshot(page, "04-shared-link")


def test_shared_link_with_an_unknown_exam_says_so(page, voila_server):
    open_dashboard(page, voila_server, {"exam": "no-such-exam"})
    page.locator(".ca-error", has_text="no-such-exam").first.wait_for(state="visible")


def test_protocol_note_downloads(page, voila_server, tmp_path):
    open_dashboard(page, voila_server, {"exam": ESOPHAGRAM})
    with page.expect_download() as info:
        page.locator("a.ca-download-md").click()
    md = info.value
    assert md.suggested_filename == "protocol-note.md"
    md.save_as(tmp_path / md.suggested_filename)
    text = (tmp_path / md.suggested_filename).read_text(encoding="utf-8")
    assert "Oesophagram" in text and "Thin barium sulfate suspension" in text
    with page.expect_download() as info:
        page.locator("a.ca-download-html").click()
    doc = info.value
    assert doc.suggested_filename == "protocol-note.html"
    doc.save_as(tmp_path / doc.suggested_filename)
    html_text = (tmp_path / doc.suggested_filename).read_text(encoding="utf-8")
    assert "<html" in html_text.lower() and "Oesophagram" in html_text
    screenshot(page, "05-protocol-note")


def test_ct_angiography_plan_with_times_dose_and_plots(page, voila_server):
    # Invented patient. Prior moderate allergic-like reaction -> premedication (ACR Manual elective 13-hour
    # prednisone regimen: 50 mg at 13, 7 and 1 h before); exam at 09:00 -> first dose at 20:00 the evening
    # before. 4 mL/s through a hand vein: the ACR Manual limits hand/wrist veins to 1.5 mL/s.
    query = {"exam": "ct-angiography-aorta", "at": "2026-12-02T09:00", "asof": "2026-12-01T15:00",
             "creatinine": "1.9", "unit": "mg/dL",
             "age": "64", "sex": "male", "weight": "82", "height": "178", "metformin": "1",
             "iv_gauge": "22", "iv_site": "hand_or_wrist", "reaction": "iodinated:allergic_like:moderate"}
    open_dashboard(page, voila_server, query)
    page.wait_for_function("() => document.querySelectorAll('.js-plotly-plot .main-svg').length >= 3",
                           timeout=LOAD_TIMEOUT_MS)
    text = page.locator(".ca-app").inner_text()
    assert "Premedication indicated" in text
    assert "Hand or wrist vein: at most 1.5 mL/s" in text
    note = page.locator(".ca-short-note").inner_text()  # the note to paste: at most 12 lines
    assert "prednisone 50 mg" in note and "20:00" in note and len(note.splitlines()) <= 12
    full = page.locator(".ca-full-note pre").text_content()  # the full note (folded)
    assert "prednisone 50 mg" in full and "20:00" in full
    screenshot(page, "06-ct-angiography-plan")
