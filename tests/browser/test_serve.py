"""widgets.serve: the command `contrast-aid serve` runs, policy validation, the bundled notebook.

No browser needed; the served page itself is tested in test_dashboard.py.
"""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request

import pytest

from widgets import serve

from .conftest import free_port


def test_notebook_and_template_are_package_data():
    nb = serve.notebook_path()
    assert nb.name == "contrast-aid.ipynb" and nb.is_file()
    code = [c for c in json.loads(nb.read_text(encoding="utf-8"))["cells"] if c["cell_type"] == "code"]
    assert len(code) == 1 and "ContrastAidApp.from_environment()" in "".join(code[0]["source"])
    template = serve.template_root() / "voila" / "templates" / serve.TEMPLATE
    assert (template / "index.html.j2").is_file() and (template / "conf.json").is_file()
    assert json.loads((template / "conf.json").read_text())["base_template"] == "lab"


def test_voila_command_is_fixed_port_local_offline_and_browserless():
    cmd = serve.voila_command(8123, None)
    assert cmd[:3] == [sys.executable, "-m", "widgets.serve"]
    args = cmd[cmd.index("--") + 1:]
    assert args[0] == str(serve.notebook_path())
    for flag in ("--no-browser", "--port=8123", "--Voila.port_retries=0", "--Voila.ip=127.0.0.1",
                 f"--template={serve.TEMPLATE}"):
        assert flag in args


def test_policy_reaches_the_voila_environment(tmp_path):
    policy = tmp_path / "dept.yaml"
    cmd = serve.voila_command(8123, policy)
    assert cmd[cmd.index("--policy") + 1] == str(policy.resolve())
    env = serve.voila_environment(policy, base={"JUPYTER_PATH": "/elsewhere"})
    assert env["CONTRAST_AID_POLICY"] == str(policy.resolve())
    assert env["JUPYTER_PATH"].split(":")[:2] == [str(serve.template_root()), "/elsewhere"]
    assert "CONTRAST_AID_POLICY" not in serve.voila_environment(None, base={"CONTRAST_AID_POLICY": "x"})


def test_bad_policy_exits_2_with_one_line_before_starting(tmp_path, capsys):
    bad = tmp_path / "broken.yaml"
    bad.write_text("id: [unclosed\n", encoding="utf-8")
    assert serve.serve(free_port(), str(bad)) == 2
    err = capsys.readouterr().err.strip()
    assert err and "\n" not in err and "broken.yaml" in err
    assert serve.serve(free_port(), str(tmp_path / "missing.yaml")) == 2
    assert "file not found" in capsys.readouterr().err


def test_busy_port_exits_2(capsys):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        s.listen()
        port = s.getsockname()[1]
        assert serve.serve(port, None) == 2
    assert f"port: {port} is already in use" in capsys.readouterr().err


def test_serve_module_does_not_import_ipywidgets():
    code = "import sys, widgets.serve; print('ipywidgets' in sys.modules, 'voila' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]


@pytest.mark.browser
def test_serve_prints_the_url_and_answers(tmp_path):
    """serve() end to end in a child process: prints the URL once Voila answers, stops on SIGTERM."""
    port = free_port()
    code = f"import sys; from widgets.serve import serve; sys.exit(serve({port}, None))"
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
                            text=True)
    try:
        line = proc.stdout.readline()
        assert f"http://127.0.0.1:{port}/" in line
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/{serve.READY_PROBE}", timeout=10) as resp:
            assert resp.status == 200
    finally:
        proc.terminate()
        proc.wait(timeout=30)
    # SIGTERM to serve() stops Voila too: the port is released, no server is left behind
    deadline = time.monotonic() + 20
    while not serve._port_free(port) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert serve._port_free(port), f"Voila still holds port {port} after serve() was stopped"


def test_voila_arguments_cull_lock_down_and_base_url():
    args = serve.voila_arguments(8123)
    for flag in (f"--MappingKernelManager.cull_idle_timeout={serve.CULL_IDLE_S}",
                 f"--MappingKernelManager.cull_interval={serve.CULL_INTERVAL_S}",
                 "--MappingKernelManager.cull_connected=False",
                 "--VoilaConfiguration.allow_template_override=NO",
                 "--VoilaConfiguration.allow_theme_override=NO",
                 "--VoilaConfiguration.multi_kernel_manager_class=widgets.server.ContrastAidKernelManager",
                 "--Voila.base_url=/", "--ContrastAidVoila.secure_cookies=False"):
        assert flag in args
    args = serve.voila_arguments(8123, cull_idle_seconds=60, cull_interval_seconds=5, base_url="dept/contrast")
    assert "--MappingKernelManager.cull_idle_timeout=60" in args
    assert "--MappingKernelManager.cull_interval=5" in args
    assert "--Voila.base_url=/dept/contrast/" in args
    assert serve.url_for(8123, "/dept/contrast") == "http://127.0.0.1:8123/dept/contrast/"


@pytest.mark.parametrize("given, expected", [("", "/"), ("/", "/"), ("app", "/app/"), ("/a/b/", "/a/b/"),
                                             ("//a//b", "/a/b/")])
def test_base_url_is_normalised(given, expected):
    assert serve.normal_base_url(given) == expected


@pytest.mark.parametrize("bad", ["/a/../b", "/a b/", "/a?x=1", "http://x/"])
def test_bad_base_url_or_cull_time_exits_2_with_one_line(bad, capsys):
    assert serve.serve(free_port(), None, base_url=bad) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("base-url:") and "\n" not in err
    assert serve.serve(free_port(), None, cull_idle_seconds=0) == 2
    assert "cull-idle-seconds: 0 is out of range" in capsys.readouterr().err


def test_cli_passes_the_serve_options(monkeypatch):
    from knowledge import cli

    seen = {}
    monkeypatch.setattr(serve, "serve", lambda port, policy, **kw: seen.update(port=port, policy=policy, **kw) or 0)
    assert cli.main(["serve", "--port", "9001", "--cull-idle-seconds", "300", "--cull-interval-seconds", "10",
                     "--base-url", "/dept/", "--secure-cookies", "--pool-size", "0"]) == 0
    assert seen == {"port": 9001, "policy": None, "cull_idle_seconds": 300, "cull_interval_seconds": 10,
                    "base_url": "/dept/", "secure_cookies": True, "pool_size": 0}
    assert cli.main(["serve"]) == 0
    assert (seen["cull_idle_seconds"], seen["cull_interval_seconds"], seen["base_url"], seen["secure_cookies"],
            seen["pool_size"]) == (serve.CULL_IDLE_S, serve.CULL_INTERVAL_S, "/", False, serve.POOL_SIZE)


@pytest.mark.browser
def test_served_under_a_base_url_behind_a_proxy(browser):
    """--base-url /dept/contrast/: the page, its assets, its websocket and the health check live under it;
    nothing is served at the root."""
    from .conftest import LOAD_TIMEOUT_MS, start_voila

    port = free_port()
    cmd = serve.voila_command(port, None, base_url="/dept/contrast/")
    proc, _ = start_voila(cmd, port, serve.voila_environment(None), "voila-base-url.log")
    try:
        base = serve.url_for(port, "/dept/contrast/")
        with urllib.request.urlopen(base + serve.READY_PROBE, timeout=10) as resp:
            assert resp.status == 200
        with pytest.raises(urllib.error.HTTPError) as err:
            urllib.request.urlopen(serve.url_for(port), timeout=10)
        assert err.value.code == 404
        page = browser.new_page()
        try:
            page.goto(base + "?exam=ct-abdomen-pelvis")
            page.wait_for_selector(".ca-option", state="visible", timeout=LOAD_TIMEOUT_MS)
        finally:
            page.close(run_before_unload=True)
    finally:
        serve.stop(proc)


def test_server_log_lines_lose_kernel_ids_and_query_strings():
    """Kernel ids and a shared link's query string (the case) never reach the server's log, even in a
    traceback; tornado writes the full URI into its warnings and uncaught-exception reports."""
    import io
    import logging

    from widgets import server

    kid = "10a9ca11-9860-4023-8d1d-2b5b1454cd53"
    stream = io.StringIO()
    log = logging.getLogger("test.redaction")
    handler = logging.StreamHandler(stream)
    log.addHandler(handler)
    log.propagate = False
    previous = logging.getLogRecordFactory()
    server.install_log_redaction()
    try:
        log.warning("Kernel started: %s", kid)
        log.warning("400 GET /?exam=ct-abdomen-pelvis&creatinine=7.77 (127.0.0.1)")
        try:
            raise KeyError(kid)
        except KeyError:
            log.exception("while culling %s", kid)
    finally:
        logging.setLogRecordFactory(previous)
        log.removeHandler(handler)
    text = stream.getvalue()
    assert kid not in text and "7.77" not in text and "creatinine" not in text
    assert text.count("<kernel>") == 3 and "GET /?<query> (127.0.0.1)" in text
    assert "KeyError" in text  # the traceback itself is kept


def test_voila_arguments_set_the_pool_and_nbclient_waits_for_the_output():
    args = serve.voila_arguments(8123)
    assert f"--ContrastAidKernelManager.pool_size={serve.POOL_SIZE}" in args and serve.POOL_SIZE == 2
    assert "--ContrastAidKernelManager.pool_preload=import widgets.app" in args
    # nbclient's default of 4 s lost the dashboard's output with 8 pages opening at once on 2 cores
    assert "--VoilaExecutor.iopub_timeout=60" in args and "--VoilaExecutor.store_widget_state=False" in args
    assert "--ContrastAidKernelManager.pool_size=0" in serve.voila_arguments(8123, pool_size=0)


def test_bad_pool_size_exits_2_with_one_line(capsys):
    assert serve.serve(free_port(), None, pool_size=-1) == 2
    assert "pool-size: -1 is out of range; allowed 0-32" in capsys.readouterr().err


def test_prepare_byte_compiles_and_stores_the_parse_cache(tmp_path):
    from knowledge.tables import cache, loader

    entry = cache.entry_path(loader.DEFAULT_POLICY, loader.DEFAULT_POLICY.read_bytes())
    entry.unlink(missing_ok=True)
    compiled = serve.Path(serve.__file__).parent / "__pycache__" / f"server.{sys.implementation.cache_tag}.pyc"
    compiled.unlink(missing_ok=True)
    serve.prepare()
    assert entry.is_file() and compiled.is_file()


def test_the_environment_code_sets_only_what_differs_as_literals(monkeypatch):
    import enum
    import os

    from widgets import server

    class Key(str, enum.Enum):  # as Voila's ENV_VARIABLE
        QUERY_STRING = "QUERY_STRING"

    query = "exam=ct-abdomen-pelvis&creatinine=7.77'); import shutil; ('"
    env = {Key.QUERY_STRING: query, "SAME": "1", "SERVER_PORT": "8866"}
    code = server.environment_code(env, {"SAME": "1"})
    assert "SAME" not in code and code.count("'QUERY_STRING'") == 1
    for key in ("QUERY_STRING", "SERVER_PORT"):
        monkeypatch.delenv(key, raising=False)
    exec(compile(code, "<pool>", "exec"), {})
    assert os.environ["QUERY_STRING"] == query and os.environ["SERVER_PORT"] == "8866"  # (monkeypatch unsets them)


def test_the_cull_check_spares_a_starting_a_pooled_and_a_not_yet_connected_kernel(monkeypatch):
    """jupyter_server culls any kernel with no browser connected once idle; a page whose script has not
    connected yet (a busy machine) lost its kernel that way, and a kernel still starting made the check
    log a TraitError traceback."""
    import asyncio
    import concurrent.futures
    import datetime as dt
    import types

    from jupyter_server._tz import utcnow
    from jupyter_server.services.kernels.kernelmanager import AsyncMappingKernelManager

    from widgets import server

    culled: list[str] = []

    async def parent_cull(self, kernel_id):
        culled.append(kernel_id)

    monkeypatch.setattr(AsyncMappingKernelManager, "cull_kernel_if_idle", parent_cull)
    km = server.ContrastAidKernelManager(cull_idle_timeout=10)

    def kernel(idle_s):
        last = None if idle_s is None else utcnow() - dt.timedelta(seconds=idle_s)
        return types.SimpleNamespace(_trait_values={"last_activity": last})

    assert km.connect_grace_seconds == server.CONNECT_GRACE_S == serve.CULL_IDLE_S
    km._kernels.update(starting=kernel(None), loading=kernel(30), lost=kernel(server.CONNECT_GRACE_S + 5),
                       used=kernel(30), pooled=kernel(10_000))
    km._kernel_connections.update(dict.fromkeys(km._kernels, 0))
    km.notify_connect("used")
    km.notify_disconnect("used")  # its page has gone
    km._pooled.add("pooled")
    with concurrent.futures.ThreadPoolExecutor(1) as pool:  # its own event loop (Playwright may run one here)
        for kid in list(km._kernels) + ["already-shut-down"]:
            pool.submit(asyncio.run, km.cull_kernel_if_idle(kid)).result()
    assert culled == ["lost", "used"]
    assert km.session_count() == 4  # the pooled kernel is not a session
