"""widgets.serve: the command `contrast-aid serve` runs, policy validation, the bundled notebook.

No browser needed; the served page itself is tested in test_dashboard.py.
"""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
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
