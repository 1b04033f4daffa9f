"""Serve the contrast-aid dashboard with Voila, offline and on one fixed port.

``contrast-aid serve [--port N] [--policy FILE]`` calls :func:`serve`. The dashboard is the notebook
``contrast-aid.ipynb`` of the package ``contrast_aid_notebooks`` (the folder ``notebooks/``), found
through :mod:`importlib.resources`, so an installed wheel works outside the checkout.

Offline: the page uses our Voila template ``contrast-aid`` (``notebooks/templates/voila/templates/``),
which is Voila's ``lab`` template without its CDN stylesheets; every other asset (Voila's JavaScript,
the widget manager, plotly's bundle) is served by Voila from the local installation. The template
directory reaches Voila through ``JUPYTER_PATH``, which is how Voila looks templates up.

The department policy reaches the kernel (``ContrastAidApp.from_environment()``) through the
environment variable ``CONTRAST_AID_POLICY``; it is validated here before the server starts.

This module never imports ipywidgets or voila at import time: the CLI imports it lazily and must stay
fast. ``python -m widgets.serve [--policy FILE] -- VOILA-ARGS`` is the launcher that
:func:`voila_command` builds: it sets the environment, then runs Voila in the same process.
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from importlib import resources
from pathlib import Path

PACKAGE = "contrast_aid_notebooks"
NOTEBOOK = "contrast-aid.ipynb"
TEMPLATE = "contrast-aid"
HOST = "127.0.0.1"
POLICY_ENV = "CONTRAST_AID_POLICY"
READY_TIMEOUT_S = 120.0
# A static file Voila always serves; fetching it proves the server answers without starting a kernel.
READY_PROBE = "voila/static/voila.js"


def _package_dir() -> Path:
    root = resources.files(PACKAGE)
    path = Path(str(root))
    if not path.is_dir():  # e.g. a zipped install: Voila needs real files
        raise RuntimeError(f"package {PACKAGE} is not installed as plain files ({root})")
    return path


def notebook_path() -> Path:
    """The bundled dashboard notebook, as a real file path."""
    return _package_dir() / NOTEBOOK


def template_root() -> Path:
    """The directory to put on ``JUPYTER_PATH``: it holds ``voila/templates/contrast-aid/``."""
    return _package_dir() / "templates"


def url_for(port: int) -> str:
    return f"http://{HOST}:{port}/"


def voila_arguments(port: int) -> list[str]:
    """Voila's own command-line arguments: fixed port, local only, no browser, our offline template."""
    return [
        str(notebook_path()),
        "--no-browser",
        f"--port={int(port)}",
        f"--Voila.ip={HOST}",
        # A busy port must fail, not silently move to another one the user was not told about.
        "--Voila.port_retries=0",
        f"--template={TEMPLATE}",
        "--theme=light",
        "--VoilaConfiguration.show_tracebacks=False",
    ]


def voila_environment(policy: str | os.PathLike | None, base: dict[str, str] | None = None) -> dict[str, str]:
    """The environment of the Voila process: our template on JUPYTER_PATH, the policy path set."""
    env = dict(os.environ if base is None else base)
    paths = [str(template_root())]
    if env.get("JUPYTER_PATH"):
        paths.append(env["JUPYTER_PATH"])
    env["JUPYTER_PATH"] = os.pathsep.join(paths)
    if policy:
        env[POLICY_ENV] = str(Path(policy).resolve())
    else:
        env.pop(POLICY_ENV, None)
    # The kernel's debugger otherwise warns on every start about frozen modules.
    env.setdefault("PYDEVD_DISABLE_FILE_VALIDATION", "1")
    return env


def voila_command(port: int, policy: str | os.PathLike | None) -> list[str]:
    """The command that runs Voila on the dashboard: ``python -m widgets.serve [--policy P] -- ...``.

    The launcher sets the environment itself (template path, policy), so the command runs the same
    server whatever environment it is started from; it does not validate the policy (:func:`serve`
    does, before it builds this command).
    """
    cmd = [sys.executable, "-m", "widgets.serve"]
    if policy:
        cmd += ["--policy", str(Path(policy).resolve())]
    return cmd + ["--", *voila_arguments(port)]


def check_policy(policy: str | os.PathLike | None) -> str | None:
    """None when the policy file (a plain policy or a department overlay) loads, else the one-line message
    of its KnowledgeError. An overlay is checked against the tables too (its agents, exams, strengths)."""
    if not policy:
        return None
    from knowledge.errors import KnowledgeError
    from knowledge.tables.loader import load_knowledge

    try:
        load_knowledge(policy=policy)
    except KnowledgeError as exc:
        return str(exc)
    return None


def wait_until_ready(port: int, proc: subprocess.Popen | None = None, timeout: float = READY_TIMEOUT_S) -> bool:
    """Poll the server until it answers (True), the process exits or the timeout passes (False)."""
    probe = url_for(port) + READY_PROBE
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc is not None and proc.poll() is not None:
            return False
        try:
            with urllib.request.urlopen(probe, timeout=2) as resp:
                if resp.status == 200:
                    return True
        except (urllib.error.URLError, ConnectionError, TimeoutError, OSError):
            pass
        time.sleep(0.1)
    return False


def stop(proc: subprocess.Popen, timeout: float = 15.0) -> None:
    """Ask Voila to stop (it shuts its kernels down), then kill it if it does not."""
    if proc.poll() is not None:
        return
    proc.terminate()
    try:
        proc.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


def _port_free(port: int) -> bool:
    import socket

    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        try:
            s.bind((HOST, port))
        except OSError:
            return False
    return True


def serve(port: int, policy: str | None, open_browser: bool = False) -> int:
    """Run the dashboard until interrupted. Prints the URL once the server answers. Returns an exit code.

    2: the policy file does not load, or the port is not usable; 1: Voila failed to start or stopped
    with an error; 0: stopped by the user (Ctrl-C) or Voila exited cleanly.
    """
    if not (0 < int(port) < 65536):
        print(f"port: {port} is not a TCP port; allowed 1-65535", file=sys.stderr)
        return 2
    policy = policy or os.environ.get(POLICY_ENV) or None
    problem = check_policy(policy)
    if problem:
        print(problem, file=sys.stderr)
        return 2
    if not _port_free(port):
        print(f"port: {port} is already in use on {HOST}; choose another with --port", file=sys.stderr)
        return 2
    try:
        cmd = voila_command(port, policy)
    except RuntimeError as exc:
        print(str(exc), file=sys.stderr)
        return 1
    proc = subprocess.Popen(cmd, env=voila_environment(policy))
    previous = _stop_on_sigterm()
    try:
        if not wait_until_ready(port, proc):
            code = proc.poll()
            stop(proc)
            print(
                f"the dashboard server did not start on port {port}"
                + (f" (Voila exited with code {code})" if code is not None else " within the time allowed"),
                file=sys.stderr,
            )
            return 1
        url = url_for(port)
        print(f"contrast-aid dashboard: {url}  (Ctrl-C stops it)", flush=True)
        if open_browser:
            import webbrowser

            webbrowser.open(url)
        code = proc.wait()
        return 0 if code in (0, -15) else 1
    except (KeyboardInterrupt, _Stopped):
        stop(proc)
        return 0
    finally:
        stop(proc)
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


class _Stopped(Exception):
    """SIGTERM arrived: stop Voila (and its kernels) rather than leave it running without us."""


def _stop_on_sigterm():
    if threading.current_thread() is not threading.main_thread():
        return None

    def handler(signum, frame):
        raise _Stopped()

    return signal.signal(signal.SIGTERM, handler)


def _launch(argv: list[str]) -> int:
    """``python -m widgets.serve [--policy FILE] -- VOILA-ARGS``: set the environment, run Voila here."""
    parser = argparse.ArgumentParser(prog="python -m widgets.serve", description=_launch.__doc__)
    parser.add_argument("--policy", default=None)
    parser.add_argument("voila_args", nargs=argparse.REMAINDER)
    ns = parser.parse_args(argv)
    args = ns.voila_args[1:] if ns.voila_args[:1] == ["--"] else ns.voila_args
    env = voila_environment(ns.policy)
    os.environ.update(env)
    if POLICY_ENV not in env:
        os.environ.pop(POLICY_ENV, None)
    from voila.app import main

    sys.argv = ["voila", *args]
    return main(argv=args) or 0


if __name__ == "__main__":
    sys.exit(_launch(sys.argv[1:]))
