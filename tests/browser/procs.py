"""Kernels of a Voila server, read from /proc (Linux): which child processes are kernels, and their memory.

The served app exposes no kernel list (Voila's ``/api/kernels`` listing is not routed), so tests and
benchmarks count the server's ``ipykernel_launcher`` children themselves. Zombies (exited, not yet
reaped) are not counted.
"""

from __future__ import annotations

import os
import re
import time
from pathlib import Path

KERNEL_FILE = re.compile(r"kernel-([0-9a-f-]{36})\.json")


def _stat(pid: int) -> tuple[str, int]:
    """(state, parent pid) of ``pid``."""
    text = Path(f"/proc/{pid}/stat").read_text()
    fields = text.rsplit(")", 1)[1].split()
    return fields[0], int(fields[1])


def kernels(server_pid: int) -> dict[int, str]:
    """{pid: kernel id} of the live kernel processes the server ``server_pid`` started."""
    found = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        pid = int(entry)
        try:
            state, ppid = _stat(pid)
            if ppid != server_pid or state == "Z":
                continue
            argv = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
        except (OSError, ValueError, IndexError):
            continue  # exited while we looked
        if b"ipykernel_launcher" not in b" ".join(argv):
            continue
        match = KERNEL_FILE.search(b" ".join(argv).decode(errors="replace"))
        found[pid] = match.group(1) if match else ""
    return found


def rss_mb(pid: int) -> float:
    """Resident set size of ``pid`` in MB (0 when it has exited)."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    except OSError:
        pass
    return 0.0


def kernels_rss_mb(server_pid: int) -> float:
    return sum(rss_mb(pid) for pid in kernels(server_pid))


def wait_for_kernels(server_pid: int, count: int, timeout: float, poll: float = 0.25) -> tuple[int, float]:
    """Wait until the server has ``count`` kernels; returns (the last count seen, seconds waited)."""
    t0 = time.monotonic()
    n = len(kernels(server_pid))
    while n != count and time.monotonic() - t0 < timeout:
        time.sleep(poll)
        n = len(kernels(server_pid))
    return n, time.monotonic() - t0
