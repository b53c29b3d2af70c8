"""`phaseglass demo`: copies the notebooks without overwriting, then starts JupyterLab."""

import json
import os
import socket
import subprocess
import sys
import time
import urllib.request

import pytest

from phaseglass import cli, launch


def test_copies_every_example_notebook(tmp_path, capsys):
    code = cli.main(["demo", "--dir", str(tmp_path / "work"), "--copy-only"])
    assert code == 0
    names = sorted(p.name for p in (tmp_path / "work").glob("*.ipynb"))
    shipped = sorted(p.name for p in launch.notebooks_folder().glob("*.ipynb"))
    assert names == shipped and launch.TOUR in names
    tour = json.loads((tmp_path / "work" / launch.TOUR).read_text())
    assert tour["cells"], "the tour must have cells"


def test_help_names_every_notebook_it_copies(capsys):
    assert cli.main(["demo", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    for nb in launch.notebooks_folder().glob("*.ipynb"):
        assert nb.stem in text, nb.stem
    assert "the tour notebook into" not in text  # it copies all of them, not one


def test_never_overwrites_the_users_edits(tmp_path, capsys):
    work = tmp_path / "work"
    work.mkdir()
    mine = work / launch.TOUR
    mine.write_text("my edits")
    assert cli.main(["demo", "--dir", str(work), "--copy-only"]) == 0
    assert mine.read_text() == "my edits"
    assert "not overwritten" in capsys.readouterr().out


def test_clear_message_without_jupyterlab(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(launch, "_lab_available", lambda: False)
    code = cli.main(["demo", "--dir", str(tmp_path / "w")])
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "JupyterLab is not installed" in err[0] and "phaseglass[lab]" in err[0]


def test_bad_options_exit_2(tmp_path, capsys):
    assert cli.main(["demo", "--port", "0"]) == 2
    f = tmp_path / "file"
    f.write_text("x")
    assert cli.main(["demo", "--dir", str(f), "--copy-only"]) == 2
    assert "not a folder" in capsys.readouterr().err


def test_lab_command_points_at_the_tour(tmp_path):
    cmd = launch.lab_command(tmp_path, port=8899, no_browser=True, extra=["--", "--ServerApp.token=x"])
    assert cmd[:3] == [sys.executable, "-m", "jupyterlab"]
    assert str(tmp_path / launch.TOUR) in cmd and "--port=8899" in cmd and "--no-browser" in cmd
    assert cmd[-1] == "--ServerApp.token=x" and "--" not in cmd
    assert ("--allow-root" in cmd) == (os.geteuid() == 0)


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_demo_starts_a_server_that_serves_the_tour(tmp_path):
    pytest.importorskip("jupyterlab", reason="the lab extra is not installed")
    port = _free_port()
    env = dict(os.environ)
    home = tmp_path / "home"
    home.mkdir()
    for var, sub in (("HOME", "home"), ("JUPYTER_CONFIG_DIR", "cfg"), ("JUPYTER_RUNTIME_DIR", "rt"),
                     ("IPYTHONDIR", "ipy"), ("JUPYTERLAB_SETTINGS_DIR", "settings"),
                     ("JUPYTERLAB_WORKSPACES_DIR", "ws")):
        (tmp_path / sub).mkdir(exist_ok=True)
        env[var] = str(tmp_path / sub)
    cmd = [sys.executable, "-m", "phaseglass", "demo", "--dir", str(tmp_path / "work"), "--no-browser",
           "--port", str(port), "--", "--ServerApp.token=demo-test", "--ServerApp.ip=127.0.0.1"]
    proc = subprocess.Popen(cmd, cwd=home, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                            text=True)
    try:
        url = f"http://127.0.0.1:{port}/api/contents/{launch.TOUR}?token=demo-test&content=0"
        deadline = time.monotonic() + 60
        last = None
        while time.monotonic() < deadline:
            try:
                with urllib.request.urlopen(url, timeout=2) as r:
                    info = json.loads(r.read())
                break
            except Exception as exc:  # server not up yet
                last = exc
                if proc.poll() is not None:
                    pytest.fail(f"phaseglass demo exited early: {proc.stdout.read()}")
                time.sleep(0.5)
        else:
            pytest.fail(f"JupyterLab did not answer within 60 s: {last}")
        assert info["name"] == launch.TOUR and info["type"] == "notebook"
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
