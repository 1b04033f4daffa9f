"""Time to interactive of the served dashboard against a one-slider Voila notebook, same machine, one run.

Target (issue): the dashboard's time to interactive is within 1.5x that of a one-slider notebook.

Each server is started once; each page load opens a fresh browser context (no cache, a new kernel) in
headless Debian Chromium and is timed from navigation start until

  * the one-slider notebook: the slider is rendered (``.widget-slider``) and Voila's spinner is gone;
  * the dashboard: the exam picker (``.ca-exam``) is rendered and Voila's spinner is gone,

i.e. until the user can operate the first control. The first load of each server is a warm-up (it pays
for the operating system's cold file cache) and is not counted; the figures are medians of the rest,
loads of the two servers alternating (each dashboard load once the server's pool of started kernels is
full again, as for a page opened after a quiet moment). The slider notebook is served by plain Voila
with its default template; the browser aborts requests off the machine for both pages so a missing
internet connection (its CDN font stylesheet) costs neither page time.

    python benchmarks/bench_tti.py [--loads N]
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from widgets import serve  # noqa: E402

from tests.browser.chromium import CHROMIUM, CHROMIUM_ARGS  # noqa: E402
SLIDER_NOTEBOOK = {
    "cells": [
        {
            "cell_type": "code",
            "execution_count": None,
            "id": "slider",
            "metadata": {},
            "outputs": [],
            "source": ["import ipywidgets as widgets\n", "widgets.IntSlider(value=5, min=0, max=10)"],
        }
    ],
    "metadata": {"kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"}},
    "nbformat": 4,
    "nbformat_minor": 5,
}
READY_JS = """(sel) => {
  const cells = document.querySelector('#rendered_cells');
  const el = document.querySelector(sel);
  return !!el && !!cells && cells.style.display !== 'none' && el.getBoundingClientRect().height > 0;
}"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start(cmd: list[str], port: int, env: dict[str, str]) -> subprocess.Popen:
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    if not serve.wait_until_ready(port, proc):
        serve.stop(proc)
        raise SystemExit(f"server on port {port} did not start: {' '.join(cmd)}")
    return proc


@contextlib.contextmanager
def dashboard_page(query: str, viewport: dict[str, int]):
    """A served dashboard (its own Voila on a free port) open in headless Chromium at ``?query``, with the
    agent cards drawn; the server and the browser are stopped on exit."""
    from playwright.sync_api import sync_playwright

    port = free_port()
    proc = start(serve.voila_command(port, None), port, serve.voila_environment(None))
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
            page = browser.new_page(viewport=viewport)
            page.goto(serve.url_for(port) + "?" + query)
            page.wait_for_selector(".ca-option", timeout=120_000)
            try:
                yield page
            finally:
                page.close(run_before_unload=True)
                browser.close()
    finally:
        serve.stop(proc)


def wait_for_pool(port: int, timeout: float = 60.0) -> None:
    """Wait until the dashboard server's pool holds ``serve.POOL_SIZE`` started kernels (its health check)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with urllib.request.urlopen(serve.url_for(port) + serve.READY_PROBE, timeout=5) as resp:
            if json.loads(resp.read()).get("pooled", 0) >= serve.POOL_SIZE:
                return
        time.sleep(0.2)


def time_load(browser, url: str, selector: str, plot_selector: str | None = None) -> tuple[float, float | None]:
    """Seconds to interactive, and (with ``plot_selector``) seconds until the first plot is drawn."""
    context = browser.new_context(viewport={"width": 1280, "height": 900})
    page = context.new_page()
    page.route(
        "**/*",
        lambda route: route.continue_()
        if route.request.url.startswith(("http://127.0.0.1", "http://localhost", "data:", "blob:"))
        else route.abort(),
    )
    t0 = time.perf_counter()
    page.goto(url, wait_until="commit")
    page.wait_for_function(READY_JS, arg=selector, timeout=120_000, polling=20)
    elapsed = time.perf_counter() - t0
    plots = None
    if plot_selector:
        page.wait_for_selector(plot_selector, timeout=120_000)
        plots = time.perf_counter() - t0
    page.close(run_before_unload=True)
    context.close()
    return elapsed, plots


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--loads", type=int, default=7, help="timed page loads per server (default 7)")
    args = parser.parse_args(argv)
    if not CHROMIUM.exists():
        print(f"{CHROMIUM} not found: install the Debian package chromium", file=sys.stderr)
        return 2
    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory(prefix="bench-tti-") as tmp:
        slider_nb = Path(tmp) / "slider.ipynb"
        slider_nb.write_text(json.dumps(SLIDER_NOTEBOOK), encoding="utf-8")
        slider_port, app_port = free_port(), free_port()
        slider_cmd = [
            sys.executable, "-m", "voila", str(slider_nb), "--no-browser",
            f"--port={slider_port}", "--Voila.ip=127.0.0.1", "--Voila.port_retries=0",
        ]  # fmt: skip
        serve.prepare()  # as `contrast-aid serve` does before it starts the server
        procs = [
            start(slider_cmd, slider_port, dict(os.environ)),
            start(serve.voila_command(app_port, None), app_port, serve.voila_environment(None)),
        ]
        try:
            with sync_playwright() as p:
                browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
                targets = {
                    "one-slider notebook": (serve.url_for(slider_port), ".widget-slider", None),
                    "contrast-aid dashboard": (serve.url_for(app_port), ".ca-exam", ".js-plotly-plot .main-svg"),
                }
                times: dict[str, list[float]] = {name: [] for name in targets}
                plot_times: list[float] = []
                for name, (url, sel, plot_sel) in targets.items():
                    time_load(browser, url, sel, plot_sel)  # warm-up, not counted
                for _ in range(args.loads):
                    for name, (url, sel, plot_sel) in targets.items():
                        if plot_sel:  # each dashboard load finds the server's pool full, as after a quiet moment
                            wait_for_pool(app_port)
                        tti, plots = time_load(browser, url, sel, plot_sel)
                        times[name].append(tti)
                        if plots is not None:
                            plot_times.append(plots)
                browser.close()
        finally:
            for proc in procs:
                serve.stop(proc)

    medians = {name: statistics.median(t) for name, t in times.items()}
    for name, t in times.items():
        print(f"{name:24s} median {medians[name]:.2f} s   (loads: {', '.join(f'{x:.2f}' for x in t)})")
    print(f"{'dashboard, first plot':24s} median {statistics.median(plot_times):.2f} s   "
          "(plots are drawn once the page is interactive)")
    ratio = medians["contrast-aid dashboard"] / medians["one-slider notebook"]
    print(f"ratio dashboard / one-slider: {ratio:.2f}  (target <= 1.50: {'met' if ratio <= 1.5 else 'NOT met'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
