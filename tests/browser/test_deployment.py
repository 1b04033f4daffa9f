"""The served app as a department runs it all day: sessions end, one page starts kernels, locked down.

One server for the module, started as ``contrast-aid serve`` starts it (``serve.voila_command``) but with
no pool of started kernels (``tests/browser/test_pool.py`` tests the pool), short cull times (a kernel
with no browser connected is culled after CULL_IDLE_S idle, checked every second) and its own HOME,
TMPDIR and working directory under the test's temporary folder, so every
file the server and its kernels write can be searched for case values afterwards. Kernels are counted
and measured from /proc (tests/browser/procs.py): the app exposes no kernel list.
"""

from __future__ import annotations

import json
import re
import subprocess
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from widgets import serve, server

from . import procs
from .conftest import LOAD_TIMEOUT_MS, isolated_server, screenshot

pytestmark = pytest.mark.browser

CULL_IDLE_S = 8
CULL_INTERVAL_S = 1
#: culled by: idle time + one check + the kernel's shutdown, with room for a loaded 2-core machine
CULL_DEADLINE_S = CULL_IDLE_S + 20
#: a closed tab's beacon: the shutdown request and the kernel's exit
BEACON_DEADLINE_S = 10
CASE_QUERY = "exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male&weight=80"
#: a case value no page, file or log line has for another reason
DISTINCTIVE = "7.77"
UUID = re.compile(r"[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}")


class Deployed:
    def __init__(self, proc: subprocess.Popen, port: int, root: Path, log: Path):
        self.proc, self.port, self.root, self.log = proc, port, root, log
        self.url = serve.url_for(port)
        self.kernel_ids: set[str] = set()  # every kernel id seen, to look for in the log afterwards

    def kernels(self) -> dict[int, str]:
        found = procs.kernels(self.proc.pid)
        self.kernel_ids.update(k for k in found.values() if k)
        return found

    def wait_for_kernels(self, count: int, timeout: float) -> tuple[int, float]:
        self.kernels()
        return procs.wait_for_kernels(self.proc.pid, count, timeout)

    def log_text(self) -> str:
        return self.log.read_text(encoding="utf-8", errors="replace")


@pytest.fixture(scope="module")
def deployed(tmp_path_factory):
    root = tmp_path_factory.mktemp("deployed")

    # No pool of started kernels (tests/browser/test_pool.py runs one): every kernel counted here is a page's.
    # The kernel of a page fetched without a browser (urllib, below) is culled after CULL_IDLE_S like any
    # other, not after the grace a loading page gets (test_serve.py tests that grace).
    def command(port: int) -> list[str]:
        return serve.voila_command(port, None, cull_idle_seconds=CULL_IDLE_S, cull_interval_seconds=CULL_INTERVAL_S,
                                   pool_size=0) + [f"--ContrastAidKernelManager.connect_grace_seconds={CULL_IDLE_S}"]

    d = None
    try:
        with isolated_server(root, command) as (proc, port, log):
            d = Deployed(proc, port, root, log)
            yield d
    finally:
        if d is not None:  # the server has stopped: its whole log
            d.log.with_name("server-log-copy.txt").write_text(d.log_text(), encoding="utf-8")


def fetch(url: str, method: str = "GET", data: bytes | None = None):
    """(status, headers, body) without raising on 4xx/5xx."""
    req = urllib.request.Request(url, method=method, data=data)
    try:
        with urllib.request.urlopen(req, timeout=60) as resp:
            return resp.status, resp.headers, resp.read()
    except urllib.error.HTTPError as err:
        return err.code, err.headers, err.read()


def open_page(browser, url: str):
    page = browser.new_page()
    page.set_default_timeout(20_000)
    violations: list[str] = []
    page.on("console", lambda m: violations.append(m.text) if m.text.startswith("CSP-VIOLATION") else None)
    page.add_init_script("document.addEventListener('securitypolicyviolation', e => "
                         "console.log('CSP-VIOLATION ' + e.violatedDirective + ' ' + e.blockedURI))")
    page.csp_violations = violations
    page.goto(url)
    page.wait_for_selector(".ca-option", state="visible", timeout=LOAD_TIMEOUT_MS)
    return page


# ---------------------------------------------------------------- sessions that end
def test_closed_tab_ends_its_kernel_and_memory_returns_to_baseline(deployed, browser):
    """Voila's tab-close beacon now carries a valid XSRF token: the kernel ends within seconds."""
    assert deployed.wait_for_kernels(0, CULL_DEADLINE_S)[0] == 0
    baseline_rss = procs.kernels_rss_mb(deployed.proc.pid)
    page = open_page(browser, deployed.url + "?" + CASE_QUERY)
    running = deployed.kernels()
    assert len(running) == 1
    per_kernel = procs.kernels_rss_mb(deployed.proc.pid)
    assert per_kernel > 40  # a Python kernel with the app loaded: tens of MB
    page.close(run_before_unload=True)
    n, waited = deployed.wait_for_kernels(0, BEACON_DEADLINE_S)
    assert n == 0, f"kernel still running {waited:.1f} s after its tab closed"
    assert waited < CULL_IDLE_S, "the kernel was culled, not shut down by the page"
    assert procs.kernels_rss_mb(deployed.proc.pid) == baseline_rss == 0
    # the kernel can end before tornado writes the request's access-log line: wait for that line
    deadline = time.monotonic() + BEACON_DEADLINE_S
    while "204 POST /voila/api/shutdown/<kernel>" not in deployed.log_text() and time.monotonic() < deadline:
        time.sleep(0.2)
    log = deployed.log_text()
    assert "204 POST /voila/api/shutdown/<kernel>" in log
    assert not re.search(r"\b403 (GET|POST)", log)


@pytest.mark.parametrize("how", ["closed without unload handlers", "shutdown request lost"])
def test_kernel_of_a_vanished_page_is_culled(deployed, browser, how):
    """A page that goes without its shutdown request (a killed browser, a lost network) is culled."""
    assert deployed.wait_for_kernels(0, CULL_DEADLINE_S)[0] == 0
    page = open_page(browser, deployed.url + "?" + CASE_QUERY)
    assert len(deployed.kernels()) == 1
    t0 = time.monotonic()
    if how == "shutdown request lost":
        page.evaluate("() => { navigator.sendBeacon = () => true; }")  # the request never arrives
        page.close(run_before_unload=True)
    else:
        page.close()  # Playwright's default: beforeunload handlers do not run
    time.sleep(2)
    assert len(deployed.kernels()) == 1, "the kernel ended before the idle time: not by culling"
    n, _ = deployed.wait_for_kernels(0, CULL_DEADLINE_S)
    gone_after = time.monotonic() - t0
    assert n == 0, f"kernel not culled {gone_after:.0f} s after its page went"
    assert gone_after >= CULL_IDLE_S - 1
    assert procs.kernels_rss_mb(deployed.proc.pid) == 0
    assert "Culling 'idle' kernel" in deployed.log_text()


def test_thirty_page_views_leave_no_kernel(deployed, browser):
    """The issue's run, shortened: page views opened and closed in turn, half of them without the
    unload handlers; afterwards the server holds no kernel and no kernel memory."""
    assert deployed.wait_for_kernels(0, CULL_DEADLINE_S)[0] == 0
    peak = 0
    for i in range(6):
        page = open_page(browser, deployed.url + "?" + CASE_QUERY)
        peak = max(peak, len(deployed.kernels()))
        page.close(run_before_unload=(i % 2 == 0))
    assert peak >= 1
    n, waited = deployed.wait_for_kernels(0, CULL_DEADLINE_S)
    assert n == 0, f"{n} kernels left {waited:.0f} s after the last page closed"
    assert procs.kernels_rss_mb(deployed.proc.pid) == 0


def test_connected_idle_page_is_never_culled(deployed, browser):
    """A page left open (a browser connected) keeps its kernel past the idle time and still works."""
    page = open_page(browser, deployed.url + "?" + CASE_QUERY)
    try:
        before = set(deployed.kernels().values())
        time.sleep(CULL_IDLE_S + 4 * CULL_INTERVAL_S + 2)
        assert before <= set(deployed.kernels().values())
        box = page.get_by_placeholder("serum creatinine")
        old = page.locator(".ca-egfr").inner_text()
        box.fill("2.5")
        box.press("Enter")
        page.wait_for_function("(t) => document.querySelector('.ca-egfr').innerText !== t", arg=old)
    finally:
        page.close(run_before_unload=True)


# ---------------------------------------------------------------- one page starts kernels
UNSERVED = ["voila/render/other.ipynb", "voila/tree", "voila/tree/", "anything", "contrast-aid.ipynb",
            "voila/render/contrast-aid.ipynb", "api/kernels", "api/sessions", "voila/api/contents/",
            "voila/templates/x", "voila/templates/lab/x/y", "logout", "login", "tree", "lab",
            "voila/files/contrast-aid.ipynb", "index.html"]


def test_health_check_is_200_tiny_and_starts_no_kernel(deployed):
    assert deployed.wait_for_kernels(0, CULL_DEADLINE_S)[0] == 0
    deadline = time.monotonic() + 10  # the kernel manager forgets a kernel just after its process exits
    while json.loads(fetch(deployed.url + server.HEALTH_PATH)[2])["kernels"] and time.monotonic() < deadline:
        time.sleep(0.2)
    for _ in range(5):
        status, headers, body = fetch(deployed.url + server.HEALTH_PATH)
        assert status == 200 and len(body) < 64
        assert json.loads(body) == {"status": "ok", "kernels": 0, "pooled": 0}
        assert headers["Cache-Control"] == "no-store"
    assert fetch(deployed.url + server.HEALTH_PATH, method="HEAD")[0] == 200
    assert deployed.kernels() == {}


def test_no_other_path_starts_a_kernel_and_none_answers_500(deployed):
    deployed.wait_for_kernels(0, CULL_DEADLINE_S)
    mark = len(deployed.log_text())
    for path in UNSERVED:
        status, _, body = fetch(deployed.url + path)
        assert status == 404, f"/{path} answered {status}"
        assert b"Traceback" not in body
    assert fetch(deployed.url + "voila/files/notebooks/__init__.py")[0] == 404
    assert fetch(deployed.url + "voila/api/shutdown/00000000-0000-0000-0000-000000000000", "POST", b"")[0] == 403
    assert deployed.kernels() == {}
    new_log = deployed.log_text()[mark:]
    assert "Traceback" not in new_log and not re.search(r"\b500 (GET|POST)", new_log)
    assert "Kernel started" not in new_log


def test_template_and_theme_cannot_be_changed_from_the_url(deployed):
    _, _, plain = fetch(deployed.url)
    _, _, overridden = fetch(deployed.url + "?template=lab&theme=dark&voila-template=lab&voila-theme=dark")
    for body in (plain, overridden):
        assert b"contrast-aid/static" in body  # our template's own assets
        assert b"theme-dark" not in body and b'"jupyterLabTheme": "dark"' not in body
    assert b"theme-light" in overridden or b'"light"' in overridden


# ---------------------------------------------------------------- headers and cookies
def test_every_response_has_the_security_headers_and_no_server_version(deployed):
    responses = [
        fetch(deployed.url),
        fetch(deployed.url + "voila/static/voila.js"),
        fetch(deployed.url + server.HEALTH_PATH),
        fetch(deployed.url + "no/such/page"),
        fetch(deployed.url + "voila/api/shutdown/x", "POST", b""),
    ]
    for status, headers, _ in responses:
        csp = headers["Content-Security-Policy"]
        assert "frame-ancestors 'self'" in csp and "default-src 'self'" in csp, (status, csp)
        assert "http:" not in csp and "https:" not in csp and "*" not in csp
        assert "'unsafe-eval'" not in csp
        assert headers["X-Content-Type-Options"] == "nosniff"
        assert headers["Referrer-Policy"] == "no-referrer"
        assert "Server" not in headers, headers.get("Server")


def test_cookies_are_samesite_strict(deployed):
    _, headers, _ = fetch(deployed.url)
    cookies = headers.get_all("Set-Cookie")
    names = {c.split("=", 1)[0] for c in cookies}
    assert "_xsrf" in names and any(n.startswith("username-") for n in names)
    for c in cookies:
        assert "SameSite=Strict" in c, c
        assert "Secure" not in c  # plain HTTP on loopback; --secure-cookies behind TLS
    assert "--ContrastAidVoila.secure_cookies=True" in serve.voila_arguments(1, secure_cookies=True)


def test_page_renders_under_the_policy_and_the_chart_toolbar_sends_nothing(deployed, browser):
    page = open_page(browser, deployed.url + "?" + CASE_QUERY)
    try:
        page.wait_for_selector(".js-plotly-plot .main-svg", timeout=LOAD_TIMEOUT_MS)
        box = page.get_by_placeholder("serum creatinine")
        old = page.locator(".ca-egfr").inner_text()
        box.fill("2.2")
        box.press("Enter")
        page.wait_for_function("(t) => document.querySelector('.ca-egfr').innerText !== t", arg=old)
        assert page.csp_violations == []
        # the verdict badges keep their styles (CSP style-src): a bordered, rounded badge
        assert page.locator(".ca-option").count() >= 4
        page.hover(".js-plotly-plot")
        buttons = page.locator(".js-plotly-plot .modebar-btn")
        assert buttons.count() >= 1  # the toolbar is there ...
        titles = buttons.evaluate_all("bs => bs.map(b => b.getAttribute('data-title') || '')")
        for title in titles:
            assert "cloud" not in title.lower() and "chart studio" not in title.lower(), title
        assert page.locator(".modebar-btn--logo, a[href*='plot.ly'], a[href*='plotly.com']").count() == 0
        # ... and out of the tab order
        tab_stops = buttons.evaluate_all("bs => bs.filter(b => b.tabIndex >= 0).length")
        assert tab_stops == 0
        path = screenshot(page, "deployment-under-csp")
        assert path.stat().st_size > 20_000
    finally:
        page.close(run_before_unload=True)


# ---------------------------------------------------------------- nothing of a case is kept
def test_no_case_value_or_kernel_id_reaches_the_log_or_the_disk(deployed, browser):
    """A session enters a distinctive creatinine (typed, and in a shared link); afterwards neither the
    server log nor any file under the server's HOME, TMPDIR or working directory holds it, and the log
    holds no kernel id."""
    page = open_page(browser, deployed.url + "?" + CASE_QUERY.replace("creatinine=1.4", f"creatinine={DISTINCTIVE}"))
    assert page.get_by_placeholder("serum creatinine").input_value() == DISTINCTIVE
    box = page.get_by_placeholder("serum creatinine")
    old = page.locator(".ca-egfr").inner_text()
    box.fill("6.66")
    box.press("Enter")
    page.wait_for_function("(t) => document.querySelector('.ca-egfr').innerText !== t", arg=old)
    box.fill(DISTINCTIVE)
    box.press("Enter")
    page.wait_for_function("(t) => document.querySelector('.ca-egfr').innerText === t", arg=old)
    page.close(run_before_unload=True)
    assert deployed.wait_for_kernels(0, CULL_DEADLINE_S)[0] == 0
    log = deployed.log_text()
    assert DISTINCTIVE not in log and "6.66" not in log
    assert "creatinine=" not in log  # no query string is logged
    assert deployed.kernel_ids, "no kernel id was seen"
    for kid in deployed.kernel_ids:
        assert kid not in log
    assert not UUID.search(log), UUID.search(log)
    written = [p for p in deployed.root.rglob("*") if p.is_file() and p != deployed.log]
    for path in written:
        data = path.read_bytes()
        assert DISTINCTIVE.encode() not in data and b"6.66" not in data, path
