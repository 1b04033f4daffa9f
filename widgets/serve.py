"""Serve the contrast-aid dashboard with Voila, offline and on one fixed port.

``contrast-aid serve [--port N] [--policy FILE] [--cull-idle-seconds N] [--cull-interval-seconds N]
[--base-url PATH] [--secure-cookies]`` calls :func:`serve`. The server itself is
:class:`widgets.server.ContrastAidVoila` (Voila, locked down to the one page, with a health check,
security headers and kernel ids kept out of its log); a kernel no browser is connected to is shut down
after ``--cull-idle-seconds`` idle (default 120 s, checked every 30 s), one a browser is connected to never. The dashboard is the notebook
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
:func:`voila_command` builds: it sets the environment, then runs the server in the same process.
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
# The health check (widgets/server.py): fetching it proves the server answers without starting a kernel.
READY_PROBE = "contrast-aid/health"
#: Defaults of ``contrast-aid serve``: a kernel with no browser connected is shut down once it has been
#: idle this long (checked every CULL_INTERVAL_S); one a browser is connected to is never culled.
CULL_IDLE_S = 120
CULL_INTERVAL_S = 30
BASE_URL = "/"
#: Kernels ``serve`` keeps started ahead of page requests (widgets/server.py), and what each one runs
#: while it waits: the dashboard's imports, nothing of any user (the app is built when a page asks).
POOL_SIZE = 2
POOL_PRELOAD = "import widgets.app"
MAX_POOL = 32
#: seconds nbclient waits for a cell's output messages after the kernel's reply (its default is 4)
IOPUB_TIMEOUT_S = 60


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


def url_for(port: int, base_url: str = BASE_URL) -> str:
    return f"http://{HOST}:{port}{normal_base_url(base_url)}"


def normal_base_url(base_url: str | None) -> str:
    """``app``, ``/app`` or ``/app/`` -> ``/app/``; empty -> ``/``."""
    parts = [p for p in (base_url or "/").split("/") if p]
    for p in parts:
        if p in (".", "..") or not all(c.isalnum() or c in "-_.~" for c in p):
            raise ValueError(f"base-url: {base_url!r} is not a URL path; allowed letters, digits, - _ . ~ and /")
    return "/" + "".join(p + "/" for p in parts)


def voila_arguments(port: int, cull_idle_seconds: int = CULL_IDLE_S, cull_interval_seconds: int = CULL_INTERVAL_S,
                    base_url: str = BASE_URL, secure_cookies: bool = False, pool_size: int = POOL_SIZE) -> list[str]:
    """Voila's own command-line arguments: fixed port, local only, no browser, our offline template,
    idle kernels without a browser culled, no template or theme from the URL."""
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
        # ?template= / ?theme= on the URL must not change what the department serves
        "--VoilaConfiguration.allow_template_override=NO",
        "--VoilaConfiguration.allow_theme_override=NO",
        f"--Voila.base_url={normal_base_url(base_url)}",
        # Sessions end: a kernel no browser is connected to is shut down after this idle time.
        f"--MappingKernelManager.cull_idle_timeout={int(cull_idle_seconds)}",
        f"--MappingKernelManager.cull_interval={int(cull_interval_seconds)}",
        "--MappingKernelManager.cull_connected=False",
        "--MappingKernelManager.cull_busy=False",
        "--VoilaConfiguration.multi_kernel_manager_class=widgets.server.ContrastAidKernelManager",
        # Voila runs the notebook with nbclient, which takes the cell's output only until IOPub_TIMEOUT_S
        # after the kernel's reply: with 8 pages opening at once on 2 cores the server read the kernels'
        # messages too slowly, nbclient's default 4 s passed, and the page came without the dashboard.
        f"--VoilaExecutor.iopub_timeout={IOPUB_TIMEOUT_S}",
        # nbclient keeps a copy of every widget's state for the notebook file; Voila's page never uses it
        "--VoilaExecutor.store_widget_state=False",
        f"--ContrastAidKernelManager.pool_size={int(pool_size)}",
        f"--ContrastAidKernelManager.pool_preload={POOL_PRELOAD}",
        f"--ContrastAidVoila.secure_cookies={bool(secure_cookies)}",
    ]


def _voila_data_dirs() -> list[str]:
    """Voila's own data folder (its base templates, labextensions) when Jupyter would not look there.

    Jupyter searches ``sys.prefix/share/jupyter``; in a virtual environment made with
    ``--system-site-packages`` Voila's files are under the base interpreter's prefix instead, and the
    page fails with ``TemplateNotFound: lab/index.html.j2``.
    """
    if sys.prefix == sys.base_prefix:
        return []
    base = Path(sys.base_prefix) / "share" / "jupyter"
    if (base / "voila" / "templates" / "lab").is_dir() and not (
            Path(sys.prefix) / "share" / "jupyter" / "voila" / "templates" / "lab").is_dir():
        return [str(base)]
    return []


def voila_environment(policy: str | os.PathLike | None, base: dict[str, str] | None = None) -> dict[str, str]:
    """The environment of the Voila process: our template on JUPYTER_PATH, the policy path set."""
    env = dict(os.environ if base is None else base)
    paths = [str(template_root())]
    if env.get("JUPYTER_PATH"):
        paths.append(env["JUPYTER_PATH"])
    paths += _voila_data_dirs()
    env["JUPYTER_PATH"] = os.pathsep.join(paths)
    if policy:
        env[POLICY_ENV] = str(Path(policy).resolve())
    else:
        env.pop(POLICY_ENV, None)
    # The kernel's debugger otherwise warns on every start about frozen modules.
    env.setdefault("PYDEVD_DISABLE_FILE_VALIDATION", "1")
    # glibc gives each thread that allocates its own heap ("arena"); a kernel's message threads then kept
    # about 3.5 MB more resident in about half the sessions measured here (README, capacity). One arena
    # for the server and its kernels (they run Python code on one thread at a time anyway).
    env.setdefault("MALLOC_ARENA_MAX", "1")
    return env


def voila_command(port: int, policy: str | os.PathLike | None, **options) -> list[str]:
    """The command that runs Voila on the dashboard: ``python -m widgets.serve [--policy P] -- ...``.

    The launcher sets the environment itself (template path, policy), so the command runs the same
    server whatever environment it is started from; it does not validate the policy (:func:`serve`
    does, before it builds this command).
    """
    cmd = [sys.executable, "-m", "widgets.serve"]
    if policy:
        cmd += ["--policy", str(Path(policy).resolve())]
    return cmd + ["--", *voila_arguments(port, **options)]


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


#: the packages a dashboard kernel imports from this project
PACKAGES = ("knowledge", "widgets", PACKAGE)


def prepare(timeout: float = 120.0) -> None:
    """What pip does at install and an editable install or a checkout lacks: byte-compile the project's
    modules and store the bundled tables' parse cache (``knowledge/tables/cache.py``), in a short-lived
    process, so that no dashboard kernel compiles sources or parses YAML itself (Python only reads
    ``__pycache__``; under ``PYTHONDONTWRITEBYTECODE`` every kernel compiled every module, about 0.2 s of
    CPU a page here). Best effort: a read-only install, or any failure, changes nothing but speed."""
    try:
        subprocess.run([sys.executable, "-m", "widgets.serve", "--prepare"], timeout=timeout, check=False,
                       stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    except (OSError, subprocess.SubprocessError):
        pass


def _prepare_here() -> int:
    import compileall
    import importlib.util

    for name in PACKAGES:
        spec = importlib.util.find_spec(name)
        for folder in (spec.submodule_search_locations or []) if spec else []:
            compileall.compile_dir(folder, quiet=2, workers=1)
    from knowledge.errors import KnowledgeError
    from knowledge.tables.loader import write_parse_cache

    try:
        write_parse_cache()
    except KnowledgeError:
        pass
    return 0


def wait_until_ready(port: int, proc: subprocess.Popen | None = None, timeout: float = READY_TIMEOUT_S,
                     base_url: str = BASE_URL) -> bool:
    """Poll the server until it answers (True), the process exits or the timeout passes (False)."""
    probe = url_for(port, base_url) + READY_PROBE
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if proc is not None and proc.poll() is not None:
            return False
        try:
            with urllib.request.urlopen(probe, timeout=2) as resp:
                if resp.status == 200:
                    return True
        except urllib.error.HTTPError:
            return True  # it answers (a plain Voila, as the benchmarks start one, has no health check)
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
        # As tornado binds its listening socket: connections of a stopped server still in TIME_WAIT (the
        # server closes after answering a probe) do not make the port busy; a listening socket does.
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            s.bind((HOST, port))
        except OSError:
            return False
    return True


def serve(port: int, policy: str | None, open_browser: bool = False, *, cull_idle_seconds: int = CULL_IDLE_S,
          cull_interval_seconds: int = CULL_INTERVAL_S, base_url: str = BASE_URL, secure_cookies: bool = False,
          pool_size: int = POOL_SIZE) -> int:
    """Run the dashboard until interrupted. Prints the URL once the server answers. Returns an exit code.

    2: the policy file does not load, the port is not usable or an option is out of range; 1: Voila failed
    to start or stopped with an error; 0: stopped by the user (Ctrl-C) or Voila exited cleanly.
    """
    problem = _option_problem(port, cull_idle_seconds, cull_interval_seconds, pool_size)
    if problem:
        print(problem, file=sys.stderr)
        return 2
    try:
        base_url = normal_base_url(base_url)
    except ValueError as exc:
        print(str(exc), file=sys.stderr)
        return 2
    options = dict(cull_idle_seconds=int(cull_idle_seconds), cull_interval_seconds=int(cull_interval_seconds),
                   base_url=base_url, secure_cookies=bool(secure_cookies), pool_size=int(pool_size))
    policy = policy or os.environ.get(POLICY_ENV) or None
    problem = check_policy(policy)
    if problem:
        print(problem, file=sys.stderr)
        return 2
    if not _port_free(port):
        print(f"port: {port} is already in use on {HOST}; choose another with --port", file=sys.stderr)
        return 2
    try:
        cmd = voila_command(port, policy, **options)
    except RuntimeError as exc:
        print(str(exc), file=sys.stderr)
        return 1
    return _run_voila(cmd, policy, port, base_url, open_browser)


def _option_problem(port: int, cull_idle_seconds: int, cull_interval_seconds: int, pool_size: int) -> str | None:
    """The message for a port, cull time or pool size out of range, or None."""
    if not (0 < int(port) < 65536):
        return f"port: {port} is not a TCP port; allowed 1-65535"
    for name, value, low in (("cull-idle-seconds", cull_idle_seconds, 10),
                             ("cull-interval-seconds", cull_interval_seconds, 1)):
        if not (low <= int(value) <= 86_400):
            return f"{name}: {value} is out of range; allowed {low}-86400 seconds"
    if not (0 <= int(pool_size) <= MAX_POOL):
        return f"pool-size: {pool_size} is out of range; allowed 0-{MAX_POOL} kernels"
    return None


def _run_voila(cmd: list[str], policy: str | None, port: int, base_url: str, open_browser: bool) -> int:
    """Start Voila, print the URL once it answers, and wait for it; Voila (and its kernels) is stopped on
    the way out, whatever the way (Ctrl-C, SIGTERM, a failed start)."""
    prepare()
    proc = subprocess.Popen(cmd, env=voila_environment(policy))
    previous = _stop_on_sigterm()
    try:
        if not wait_until_ready(port, proc, base_url=base_url):
            code = proc.poll()
            stop(proc)
            print(
                f"the dashboard server did not start on port {port}"
                + (f" (Voila exited with code {code})" if code is not None else " within the time allowed"),
                file=sys.stderr,
            )
            return 1
        url = url_for(port, base_url)
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
    parser.add_argument("--prepare", action="store_true", help="byte-compile and store the parse cache, then exit")
    parser.add_argument("voila_args", nargs=argparse.REMAINDER)
    ns = parser.parse_args(argv)
    if ns.prepare:
        return _prepare_here()
    args = ns.voila_args[1:] if ns.voila_args[:1] == ["--"] else ns.voila_args
    env = voila_environment(ns.policy)
    os.environ.update(env)
    if POLICY_ENV not in env:
        os.environ.pop(POLICY_ENV, None)
    from widgets.server import main

    sys.argv = ["voila", *args]
    return main(argv=args) or 0


if __name__ == "__main__":
    sys.exit(_launch(sys.argv[1:]))
