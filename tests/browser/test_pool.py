"""The pool of kernels ``contrast-aid serve`` keeps started ahead of page requests (widgets/server.py).

One server for the module, started as ``serve`` starts it (pool of ``serve.POOL_SIZE``), with a short cull
time and its own HOME, TMPDIR and working directory. Checked: the pool fills at start and is never culled;
a shared link opened on a pooled kernel fills the form with its own case (two at once, each its own), and
a page without a link gets nothing of an earlier one; requests while the pool is empty start their own
kernels and do not wait for it; closed pages end their kernels and the pool refills; nothing of a case
reaches the log or the disk.
"""

from __future__ import annotations

import json
import time
import urllib.request

import pytest

from widgets import serve, server

from . import procs
from .conftest import LOAD_TIMEOUT_MS, isolated_server

pytestmark = pytest.mark.browser

CULL_IDLE_S = 8
POOL = serve.POOL_SIZE
#: filling the pool: two kernel starts and the dashboard's imports, with room for a loaded 2-core machine
FILL_DEADLINE_S = 120
CASE = "exam=ct-abdomen-pelvis&unit=mg/dL&age=60&sex=male&weight=80&creatinine="
#: creatinine values no page, file or log line has for another reason (four decimals: a timestamp such as
#: 07:25:55.5512 in a kernel's history file must not match by chance)
VALUES = ("7.7731", "2.3457", "5.5519")


@pytest.fixture(scope="module")
def pooled(tmp_path_factory):
    root = tmp_path_factory.mktemp("pooled")

    def command(port: int) -> list[str]:
        cmd = serve.voila_command(port, None, cull_idle_seconds=CULL_IDLE_S, cull_interval_seconds=1)
        assert f"--ContrastAidKernelManager.pool_size={POOL}" in cmd and POOL >= 2
        return cmd

    with isolated_server(root, command) as (proc, port, log):
        yield proc, serve.url_for(port), root, log


def health(url: str) -> dict:
    with urllib.request.urlopen(url + server.HEALTH_PATH, timeout=30) as resp:
        return json.loads(resp.read())


def wait_for(url: str, kernels: int, pooled: int, timeout: float = FILL_DEADLINE_S) -> dict:
    deadline = time.monotonic() + timeout
    state = health(url)
    while (state["kernels"], state["pooled"]) != (kernels, pooled) and time.monotonic() < deadline:
        time.sleep(0.25)
        state = health(url)
    return state


def creatinine(page) -> str:
    return page.get_by_placeholder("serum creatinine").input_value()


def open_pages(browser, urls: list[str]) -> list:
    """Pages opened together: every request is sent before any page is awaited."""
    pages = []
    for url in urls:
        page = browser.new_page()
        page.goto(url, wait_until="commit", timeout=LOAD_TIMEOUT_MS)
        pages.append(page)
    for page in pages:
        page.wait_for_selector(".ca-option", state="visible", timeout=LOAD_TIMEOUT_MS)
    return pages


def test_the_pool_fills_at_start_and_is_never_culled(pooled):
    proc, url, _, log = pooled
    assert wait_for(url, 0, POOL) == {"status": "ok", "kernels": 0, "pooled": POOL}
    before = procs.kernels(proc.pid)
    assert len(before) == POOL
    time.sleep(CULL_IDLE_S + 4)  # idle, no browser connected: a page's kernel would be culled by now
    assert procs.kernels(proc.pid) == before
    assert health(url)["pooled"] == POOL and "Culling 'idle' kernel" not in log.read_text()


def test_shared_links_fill_the_form_from_pooled_kernels(pooled, browser):
    proc, url, _, log = pooled
    assert wait_for(url, 0, POOL)["pooled"] == POOL
    taken = log.read_text().count("Kernel taken from the pool")
    pages = open_pages(browser, [url + "?" + CASE + VALUES[0], url + "?" + CASE + VALUES[1]])
    assert [creatinine(p) for p in pages] == list(VALUES[:2])  # each page its own link
    assert log.read_text().count("Kernel taken from the pool") == taken + 2
    for page in pages:
        assert "eGFR" in page.locator(".ca-egfr").inner_text()
        page.close(run_before_unload=True)
    # the closed pages' kernels end; the pool refills; a page without a link gets nothing of theirs
    assert wait_for(url, 0, POOL)["pooled"] == POOL
    taken = log.read_text().count("Kernel taken from the pool")
    page = open_pages(browser, [url])[0]
    assert creatinine(page) == "" and log.read_text().count("Kernel taken from the pool") == taken + 1
    page.close(run_before_unload=True)


def test_requests_while_the_pool_is_empty_start_their_own_kernels(pooled, browser):
    proc, url, _, log = pooled
    assert wait_for(url, 0, POOL)["pooled"] == POOL
    taken = log.read_text().count("Kernel taken from the pool")
    urls = [url + "?" + CASE + VALUES[i % len(VALUES)] for i in range(POOL + 1)]
    t0 = time.monotonic()
    pages = open_pages(browser, urls)  # one more page than the pool holds: that one starts its own kernel
    assert [creatinine(p) for p in pages] == [VALUES[i % len(VALUES)] for i in range(POOL + 1)]
    assert log.read_text().count("Kernel taken from the pool") == taken + POOL
    late = open_pages(browser, [url + "?" + CASE + VALUES[2]])[0]  # and one at once, while the pool refills
    assert creatinine(late) == VALUES[2]
    print(f"{POOL + 2} pages, {POOL} of them from the pool, interactive within {time.monotonic() - t0:.1f} s")
    for page in pages + [late]:
        page.close(run_before_unload=True)
    state = wait_for(url, 0, POOL)
    assert state == {"status": "ok", "kernels": 0, "pooled": POOL}
    assert len(procs.kernels(proc.pid)) == POOL


def test_nothing_of_a_pooled_page_reaches_the_log_or_the_disk(pooled):
    proc, url, root, log = pooled
    text = log.read_text(encoding="utf-8", errors="replace")
    assert "Kernel taken from the pool" in text
    assert "creatinine=" not in text and not any(v in text for v in VALUES)
    for path in [p for p in root.rglob("*") if p.is_file() and p != log]:
        data = path.read_bytes()
        assert not [v for v in VALUES if v.encode() in data], path
