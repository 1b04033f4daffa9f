"""What one served session costs, in one run and one table: core speed, time to interactive, kernel memory
and time to interactive with several users at once.

    python benchmarks/bench_serve.py [--loads N] [--users 1,4,8] [--rounds N] [--pool N]

Rows (all measured here, now, on this machine):

* table load + validation (median of 15 warm loads), ``decide`` median and p95 over the scenario vectors
  (each call timed alone), server-side recompute p95 after a creatinine change (the app in this process);
* time to interactive (TTI) of the dashboard and of a bare one-slider Voila page, and their ratio: a fresh
  browser context per load (no cache, a new kernel), timed from navigation start until the first control
  is drawn and Voila's spinner is gone (benchmarks/bench_tti.py's definition); medians of ``--loads``
  loads after one warm-up, the two servers alternating;
* kernel memory (RSS, from /proc) per session for both pages, and the ratio: measured on each load once
  the page is interactive and its plots are drawn, median (the page's own kernel, found by the kernel id
  in its websocket's URL, not a kernel the pool started meanwhile);
* TTI with 1, 4 and 8 users opening the dashboard at the same moment (one browser, one context each):
  the median and the slowest of them, over two rounds.

The dashboard server runs as ``contrast-aid serve`` runs it (``serve.prepare()``, then the server with its
pool of ``--pool`` started kernels, default ``serve.POOL_SIZE``); before each measurement the benchmark
waits until the pool is full again (the health check's ``pooled``), so each starts from the same state.

The browser runs on the same two cores as the server, so the concurrent figures include Chromium's own
rendering work: they are a pessimistic bound for users on their own machines. Pages are closed with
their unload handlers and each load waits until the previous kernel has ended (the dashboard's ends on
its tab-close request; plain Voila refuses that request, so its server culls idle kernels after 5 s).
Prints figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import statistics
import sys
import re
import tempfile
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks.bench_tti import READY_JS, SLIDER_NOTEBOOK, free_port, start  # noqa: E402
from tests.browser import procs  # noqa: E402
from tests.browser.chromium import CHROMIUM, CHROMIUM_ARGS  # noqa: E402
from widgets import serve  # noqa: E402

CASE_QUERY = "exam=ct-abdomen-pelvis&creatinine=1.4&unit=mg/dL&age=60&sex=male&weight=80"
LOCAL = ("http://127.0.0.1", "http://localhost", "data:", "blob:")
TIMEOUT_MS = 90_000
KERNEL_WS = re.compile(r"/api/kernels/([0-9a-f-]{36})/channels")
#: a tab-close request that has not ended its kernel by then was lost (the cull ends that kernel later)
CLOSE_WAIT_S = 5.0


def log(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def p95(values: list[float]) -> float:
    s = sorted(values)
    return s[min(len(s) - 1, round(0.95 * (len(s) - 1)))]


# ------------------------------------------------------------------------------------------ core, in process
def core_figures(rounds: int) -> dict[str, float]:
    from knowledge import decide, load_knowledge
    from tests.scenarios import load_vectors

    load_knowledge()  # warm imports and the file cache
    loads = []
    for _ in range(15):
        t = time.perf_counter()
        k = load_knowledge()
        loads.append((time.perf_counter() - t) * 1000)
    cases = [v["case"] for v in load_vectors()]
    for c in cases:
        decide(c, k)
    decides = []
    for _ in range(5):
        for c in cases:
            t = time.perf_counter()
            decide(c, k)
            decides.append((time.perf_counter() - t) * 1000)

    from widgets.app import ContrastAidApp

    app = ContrastAidApp(query=CASE_QUERY)
    recomputes = []
    for i in range(rounds):
        t = time.perf_counter()
        app.patient.creatinine_value.value = f"{0.8 + (i % 40) * 0.05:.2f}"
        recomputes.append((time.perf_counter() - t) * 1000)
    return {"load": statistics.median(loads), "decide_median": statistics.median(decides),
            "decide_p95": p95(decides), "decide_n": len(decides), "recompute_p95": p95(recomputes),
            "recompute_median": statistics.median(recomputes), "recompute_n": len(recomputes)}


# ------------------------------------------------------------------------------------------ in the browser
async def _route_local(route):
    if route.request.url.startswith(LOCAL):
        await route.continue_()
    else:
        await route.abort()


async def load_once(browser, url: str, selector: str, server_pid: int | None = None,
                    plot_selector: str | None = None, close_times: list[float] | None = None,
                    ) -> tuple[float, float | None]:
    """(seconds to interactive, kernel RSS MB once interactive and plotted, or None); with
    ``close_times``, appends the seconds from closing the tab until its kernel process has ended."""
    context = await browser.new_context(viewport={"width": 1280, "height": 900})
    closed = False
    kernel_ids: list[str] = []  # the page's kernel, from its websocket's URL (…/api/kernels/<id>/channels)
    try:
        page = await context.new_page()
        page.on("websocket", lambda ws: kernel_ids.extend(KERNEL_WS.findall(ws.url)))
        await page.route("**/*", _route_local)
        t0 = time.perf_counter()
        await page.goto(url, wait_until="commit", timeout=TIMEOUT_MS)
        await page.wait_for_function(READY_JS, arg=selector, timeout=TIMEOUT_MS, polling=20)
        tti = time.perf_counter() - t0
        log(f"  {url.split('?')[0]} interactive in {tti:.2f} s")
        rss = None
        started: set[int] = set()
        if server_pid is not None:
            if plot_selector:
                await page.wait_for_selector(plot_selector, timeout=TIMEOUT_MS)
            await asyncio.sleep(1.0)  # let the kernel finish replying to the first round of widget messages
            # the page's own kernel (not one the pool started meanwhile)
            started = {pid for pid, kid in procs.kernels(server_pid).items() if kid in kernel_ids[:1]}
            rss = procs.rss_mb(next(iter(started))) if len(started) == 1 else None
        closed_at = time.perf_counter()
        await page.close(run_before_unload=True)
        # The tab is closed, the browser lives on (as a user's does): closing the whole context at once
        # would also cancel the tab-close request still in flight.
        await asyncio.sleep(0.5)
        await context.close()
        closed = True
    finally:
        if not closed:  # a page that timed out: close it, so that its kernel can be culled
            await context.close()
    if server_pid is not None and close_times is not None and len(started) == 1:
        pid = next(iter(started))
        while pid in procs.kernels(server_pid) and time.perf_counter() - closed_at < CLOSE_WAIT_S:
            await asyncio.sleep(0.05)
        close_times.append(time.perf_counter() - closed_at)
    return tti, rss


async def settle(server_pid: int, timeout: float = 60, health: str | None = None, pool: int = 0) -> None:
    """Wait until the server holds no page's kernel (the closed pages' kernels have ended) and, with
    ``health`` (the dashboard's health check URL), until its pool holds ``pool`` ready kernels."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if health is None:
            if not procs.kernels(server_pid):
                return
        else:
            with urllib.request.urlopen(health, timeout=5) as resp:
                state = json.loads(resp.read())
            if state["kernels"] == 0 and state.get("pooled", 0) >= pool:
                return
        await asyncio.sleep(0.2)


async def browser_figures(loads: int, users: list[int], app_port: int, app_pid: int, slider_port: int,
                          slider_pid: int, pool: int) -> dict:
    from playwright.async_api import async_playwright

    app_url = serve.url_for(app_port) + "?" + CASE_QUERY
    slider_url = serve.url_for(slider_port)
    health = serve.url_for(app_port) + serve.READY_PROBE

    async def settle_app() -> None:
        await settle(app_pid, health=health, pool=pool)

    out: dict = {"tti": {"app": [], "slider": []}, "rss": {"app": [], "slider": []}, "users": {}, "closed": []}
    async with async_playwright() as p:
        browser = await p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        await load_once(browser, slider_url, ".widget-slider")  # warm-ups, not counted
        await load_once(browser, app_url, ".ca-exam")
        for _ in range(loads):
            for name, url, sel, pid, plot in (("slider", slider_url, ".widget-slider", slider_pid, None),
                                              ("app", app_url, ".ca-exam", app_pid, ".js-plotly-plot .main-svg")):
                await (settle_app() if name == "app" else settle(pid))
                tti, rss = await load_once(browser, url, sel, pid, plot,
                                           out["closed"] if name == "app" else None)
                out["tti"][name].append(tti)
                if rss is not None:
                    out["rss"][name].append(rss)
        await browser.close()
        for n in users:
            times: list[float] = []
            for _ in range(2):
                await settle_app()
                # a fresh browser per round: one long-lived Chromium stopped sending the page requests of
                # later rounds here (its connections to the server stayed open, no request arrived)
                browser = await p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
                results = await asyncio.gather(*(load_once(browser, app_url, ".ca-exam") for _ in range(n)),
                                               return_exceptions=True)
                await browser.close()
                # a page not interactive within TIMEOUT_MS counts as that long (and is reported as such)
                times += [TIMEOUT_MS / 1000 if isinstance(r, BaseException) else r[0] for r in results]
            out["users"][n] = times
    return out


def _mem_gb() -> float:
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemTotal:"):
            return int(line.split()[1]) / 1024 / 1024
    return float("nan")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--loads", type=int, default=5, help="timed single-user loads per page (default 5)")
    parser.add_argument("--users", default="1,4,8", help="concurrent users to time (default 1,4,8)")
    parser.add_argument("--rounds", type=int, default=200, help="recompute rounds in process (default 200)")
    parser.add_argument("--pool", type=int, default=serve.POOL_SIZE,
                        help=f"the dashboard server's pool of started kernels (default {serve.POOL_SIZE}, as serve)")
    args = parser.parse_args(argv)
    users = [int(u) for u in args.users.split(",") if u.strip()]
    if not CHROMIUM.exists():
        print(f"{CHROMIUM} not found: install the Debian package chromium", file=sys.stderr)
        return 2
    load0 = os.getloadavg()[0]
    core = core_figures(args.rounds)
    with tempfile.TemporaryDirectory(prefix="bench-serve-") as tmp:
        slider_nb = Path(tmp) / "slider.ipynb"
        slider_nb.write_text(json.dumps(SLIDER_NOTEBOOK), encoding="utf-8")
        slider_port, app_port = free_port(), free_port()
        slider_cmd = [sys.executable, "-m", "voila", str(slider_nb), "--no-browser", f"--port={slider_port}",
                      "--Voila.ip=127.0.0.1", "--Voila.port_retries=0",
                      # plain Voila's tab-close request is refused (no XSRF cookie): cull its kernels instead
                      "--MappingKernelManager.cull_idle_timeout=5", "--MappingKernelManager.cull_interval=1"]
        slider = start(slider_cmd, slider_port, serve.voila_environment(None, base=dict(os.environ)))
        # contrast-aid serve as shipped (its preparation, then the server), but culling kernels whose
        # tab-close request was lost after 10 s (not 120 s), so that such a kernel cannot hold up the next
        # measurement (a kernel whose page has not connected yet is not culled that early: widgets/server.py)
        serve.prepare()
        app = start(serve.voila_command(app_port, None, cull_idle_seconds=10, cull_interval_seconds=2,
                                        pool_size=args.pool), app_port, serve.voila_environment(None))
        try:
            b = asyncio.run(browser_figures(args.loads, users, app_port, app.pid, slider_port, slider.pid,
                                            args.pool))
        finally:
            serve.stop(app)
            serve.stop(slider)

    tti_app, tti_slider = statistics.median(b["tti"]["app"]), statistics.median(b["tti"]["slider"])
    rss_app = statistics.median(b["rss"]["app"]) if b["rss"]["app"] else float("nan")
    rss_slider = statistics.median(b["rss"]["slider"]) if b["rss"]["slider"] else float("nan")
    rows = [
        ("table load + validation", f"{core['load']:.1f} ms", "median of 15 warm loads"),
        ("decide, median", f"{core['decide_median']:.3f} ms", f"{core['decide_n']} calls, scenario vectors"),
        ("decide, p95", f"{core['decide_p95']:.3f} ms", ""),
        ("recompute, p95 (server side)", f"{core['recompute_p95']:.1f} ms",
         f"median {core['recompute_median']:.1f} ms, {core['recompute_n']} creatinine changes"),
        ("TTI dashboard", f"{tti_app:.2f} s", "median of " + ", ".join(f"{t:.2f}" for t in b["tti"]["app"])),
        ("TTI one-slider page", f"{tti_slider:.2f} s",
         "median of " + ", ".join(f"{t:.2f}" for t in b["tti"]["slider"])),
        ("TTI ratio dashboard / slider", f"{tti_app / tti_slider:.2f}", ""),
        ("kernel RSS dashboard", f"{rss_app:.1f} MB", "per session, median of " + ", ".join(
            f"{r:.1f}" for r in b["rss"]["app"])),
        ("kernel RSS one-slider page", f"{rss_slider:.1f} MB", "per session, median of " + ", ".join(
            f"{r:.1f}" for r in b["rss"]["slider"])),
        ("kernel RSS ratio", f"{rss_app / rss_slider:.2f}", ""),
        ("dashboard tab closed -> kernel ended", f"{statistics.median(b['closed']):.2f} s" if b["closed"] else "-",
         f"median; ended within {CLOSE_WAIT_S:.0f} s: {sum(t < CLOSE_WAIT_S for t in b['closed'])} of "
         f"{len(b['closed'])} tabs"),
    ]
    for n, times in b["users"].items():
        late = sum(t >= TIMEOUT_MS / 1000 for t in times)
        rows.append((f"TTI, {n} concurrent user{'s' if n > 1 else ''}",
                     f"{statistics.median(times):.2f} s", f"slowest {max(times):.2f} s, {len(times)} loads, "
                     f"within 3 s: {sum(t <= 3.0 for t in times)}" + (f", {late} not interactive within "
                                                                      f"{TIMEOUT_MS // 1000} s" if late else "")))
    width = max(len(r[0]) for r in rows)
    print(f"{'figure':{width}s}  {'value':>10s}  notes")
    for name, value, note in rows:
        print(f"{name:{width}s}  {value:>10s}  {note}")
    load = os.getloadavg()
    print(f"dashboard server: pool of {args.pool} started kernel{'s' if args.pool != 1 else ''} (refilled between "
          "measurements)")
    print(f"machine: {os.cpu_count()} cores, {_mem_gb():.0f} GB; server, kernels and Chromium share them; "
          f"load average at the start {load0:.1f}, at the end {load[0]:.1f} / {load[1]:.1f} / {load[2]:.1f} (1 / 5 / 15 min)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
