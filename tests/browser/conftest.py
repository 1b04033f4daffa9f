"""Fixtures for the browser tests: a real Voila server on the bundled notebook, and headless Chromium.

* ``voila_server`` (session): starts Voila on a free port with :func:`widgets.serve.voila_command` (the
  command ``contrast-aid serve`` runs), waits until it answers, and stops it at the end.
* ``browser`` (session): Debian's Chromium (``/usr/bin/chromium``) driven by Playwright for Python; no
  browser is ever downloaded. Missing Chromium skips the browser tests on a workstation but FAILS them
  when the environment variable ``CI`` is set, so CI can never pass without running them.
* ``page``: a fresh browser context and page that records every request it makes (``page.requests``).

Screenshots go to ``test-artifacts/screenshots/`` (gitignored).
"""

from __future__ import annotations

import contextlib
import os
import shutil
import site
import socket
import subprocess
from pathlib import Path
from typing import Callable, Iterator

import pytest

from widgets import serve

from .chromium import CHROMIUM, CHROMIUM_ARGS

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "test-artifacts"
SCREENSHOTS = ARTIFACTS / "screenshots"
LOCAL_PREFIXES = ("http://127.0.0.1:", "http://localhost:", "ws://127.0.0.1:", "ws://localhost:", "data:", "blob:")
#: kernel start + first render of the dashboard, with room for a loaded CI machine
LOAD_TIMEOUT_MS = 90_000
UPDATE_TIMEOUT_MS = 20_000


def _unavailable(reason: str) -> None:
    if os.environ.get("CI"):
        pytest.fail(f"browser tests cannot run in CI: {reason}", pytrace=False)
    pytest.skip(reason)


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextlib.contextmanager
def isolated_server(root: Path, command: Callable[[int], list[str]]
                    ) -> Iterator[tuple[subprocess.Popen, int, Path]]:
    """A server of its own: ``command(port)`` run on a free port with its own HOME, TMPDIR and working directory
    under ``root`` (the user's site-packages, if any, stay where they are), its output in ``root/server.log``.
    Yields (process, port, log) once it answers; stopped on exit. Fails with the log's tail if it never
    answers."""
    home, tmp, cwd = root / "home", root / "tmp", root / "cwd"
    for d in (home, tmp, cwd):
        d.mkdir()
    env = serve.voila_environment(None)
    env.update(HOME=str(home), TMPDIR=str(tmp), PYTHONUSERBASE=site.getuserbase())
    port = free_port()
    proc, log = start_voila(command(port), port, env, root / "server.log", cwd=cwd)
    try:
        yield proc, port, log
    finally:
        serve.stop(proc)


def start_voila(cmd: list[str], port: int, env: dict[str, str], log_name: str | Path,
                cwd: Path = ROOT) -> tuple[subprocess.Popen, Path]:
    """Start a Voila command in ``cwd``, its output in ``log_name`` (a name in test-artifacts/, or a path); wait
    until it answers; fail with the tail of its log if it does not."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    log_path = ARTIFACTS / log_name  # an absolute path stays itself
    log = log_path.open("w", encoding="utf-8")
    proc = subprocess.Popen(cmd, env=env, stdout=log, stderr=subprocess.STDOUT, cwd=cwd)
    log.close()
    if not serve.wait_until_ready(port, proc, timeout=120):
        serve.stop(proc)
        tail = "\n".join(log_path.read_text(encoding="utf-8", errors="replace").splitlines()[-30:])
        pytest.fail(f"Voila did not start on port {port}: {' '.join(cmd)}\n{tail}", pytrace=False)
    return proc, log_path


class Server:
    def __init__(self, port: int, log: Path):
        self.port = port
        self.url = serve.url_for(port)
        self.log = log


@pytest.fixture(scope="session")
def voila_server():
    port = free_port()
    cmd, env = serve.voila_command(port, None), serve.voila_environment(None)
    proc, log = start_voila(cmd, port, env, "voila.log")
    try:
        yield Server(port, log)
    finally:
        serve.stop(proc)


@pytest.fixture(scope="session")
def browser():
    if not CHROMIUM.exists():
        _unavailable(f"{CHROMIUM} is missing: install the Debian package chromium (apt-get install -y chromium)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("Playwright for Python is not installed: pip install -e '.[test]'")
    profile = ARTIFACTS / "chromium-profile"
    shutil.rmtree(profile, ignore_errors=True)
    with sync_playwright() as p:
        # A persistent context is how Playwright passes a fresh --user-data-dir to Chromium.
        context = p.chromium.launch_persistent_context(
            str(profile),
            executable_path=str(CHROMIUM),
            args=CHROMIUM_ARGS,
            headless=True,
            viewport={"width": 1400, "height": 1000},
            accept_downloads=True,
        )
        try:
            yield context
        finally:
            context.close()
            shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture
def page(browser):
    """A new page that records every URL it requests (``page.requests``), closed after the test."""
    pg = browser.new_page()
    requests: list[str] = []
    pg.on("request", lambda r: requests.append(r.url))
    pg.on("websocket", lambda ws: requests.append(ws.url))
    pg.requests = requests
    pg.set_default_timeout(UPDATE_TIMEOUT_MS)
    try:
        yield pg
    finally:
        pg.close(run_before_unload=True)


def external(requests: list[str]) -> list[str]:
    return [u for u in requests if not u.startswith(LOCAL_PREFIXES)]


_PAGE_HEIGHT_JS = """() => Math.max(document.documentElement.scrollHeight, document.body.scrollHeight,
  ...Array.from(document.querySelectorAll('#rendered_cells, .jp-Notebook, .ca-app')).map(e => e.scrollHeight))"""


def screenshot(page, name: str) -> Path:
    """Save the whole dashboard: Voila scrolls an inner element, so grow the viewport to its height first."""
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    path = SCREENSHOTS / f"{name}.png"
    size = page.viewport_size
    height = min(int(page.evaluate(_PAGE_HEIGHT_JS)) + 40, 12_000)
    page.set_viewport_size({"width": size["width"], "height": max(height, size["height"])})
    page.wait_for_timeout(300)  # let plotly relayout to the new size
    page.screenshot(path=str(path), full_page=True)
    page.set_viewport_size(size)
    return path
