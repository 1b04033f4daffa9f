"""Debian's Chromium as the browser tests, the benchmarks and the screenshot script start it (never a
downloaded browser): the flags keep it off the network and quiet on a closed machine."""

from __future__ import annotations

from pathlib import Path

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
