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
                 "--VoilaConfiguration.multi_kernel_manager_class=widgets.server.KernelManager",
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
                     "--base-url", "/dept/", "--secure-cookies"]) == 0
    assert seen == {"port": 9001, "policy": None, "cull_idle_seconds": 300, "cull_interval_seconds": 10,
                    "base_url": "/dept/", "secure_cookies": True}
    assert cli.main(["serve"]) == 0
    assert (seen["cull_idle_seconds"], seen["cull_interval_seconds"], seen["base_url"], seen["secure_cookies"]) == (
        serve.CULL_IDLE_S, serve.CULL_INTERVAL_S, "/", False)


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
