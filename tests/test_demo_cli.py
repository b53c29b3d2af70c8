"""`phaseglass demo`: copies the notebooks without overwriting, then starts JupyterLab."""

import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request

import pytest

from _optional import optional_module
from _processes import alive

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


def _server_pids(runtime_dir):
    """Pids of the Jupyter servers that wrote their runtime file (jpserver-<pid>.json) here."""
    pids = set()
    for f in runtime_dir.glob("jpserver-*.json"):
        try:
            pids.add(int(json.loads(f.read_text())["pid"]))
        except (ValueError, KeyError, OSError):
            pids.add(int(f.stem.split("-")[1]))
    return pids


def _isolated_env(tmp_path):
    env = dict(os.environ)
    for var, sub in (("HOME", "home"), ("JUPYTER_CONFIG_DIR", "cfg"), ("JUPYTER_RUNTIME_DIR", "rt"),
                     ("IPYTHONDIR", "ipy"), ("JUPYTERLAB_SETTINGS_DIR", "settings"),
                     ("JUPYTERLAB_WORKSPACES_DIR", "ws")):
        (tmp_path / sub).mkdir(exist_ok=True)
        env[var] = str(tmp_path / sub)
    return env


def test_demo_serves_the_tour_on_the_port_it_names_and_sigterm_stops_the_server(tmp_path):
    """The port asked for is busy: the terminal names the port actually used, the tour is served
    there, and SIGTERM to `phaseglass demo` stops JupyterLab too (its pid is gone afterwards)."""
    optional_module("jupyterlab", "lab")
    env = _isolated_env(tmp_path)
    runtime = tmp_path / "rt"
    busy = socket.socket()
    busy.bind(("127.0.0.1", 0))
    busy.listen()
    taken = busy.getsockname()[1]
    log = tmp_path / "demo.log"
    cmd = [sys.executable, "-m", "phaseglass", "demo", "--dir", str(tmp_path / "work"), "--no-browser",
           "--port", str(taken), "--", "--ServerApp.token=demo-test", "--ServerApp.ip=127.0.0.1"]
    with open(log, "w") as out:
        proc = subprocess.Popen(cmd, cwd=tmp_path / "home", env=env, stdout=out,
                                stderr=subprocess.STDOUT, text=True)
    servers = set()
    try:
        deadline = time.monotonic() + 90
        port = None
        while port is None and time.monotonic() < deadline:
            for line in log.read_text().splitlines():
                if line.startswith(f"port {taken} is in use, so JupyterLab will use port "):
                    port = int(line.rsplit("port ", 1)[1].split()[0])
            if proc.poll() is not None:
                pytest.fail(f"phaseglass demo exited early: {log.read_text()}")
            time.sleep(0.2)
        assert port is not None and port != taken, log.read_text()
        assert f"JupyterLab will be at http://localhost:{port}/lab" in log.read_text()
        url = f"http://127.0.0.1:{port}/api/contents/{launch.TOUR}?token=demo-test&content=0"
        last = None
        while time.monotonic() < deadline:
            try:
                with urllib.request.urlopen(url, timeout=2) as r:
                    info = json.loads(r.read())
                break
            except Exception as exc:  # server not up yet
                last = exc
                if proc.poll() is not None:
                    pytest.fail(f"phaseglass demo exited early: {log.read_text()}")
                time.sleep(0.5)
        else:
            pytest.fail(f"JupyterLab did not answer within 90 s: {last}\n{log.read_text()}")
        assert info["name"] == launch.TOUR and info["type"] == "notebook"
        servers = _server_pids(runtime)
        assert len(servers) == 1 and proc.pid not in servers
        (server,) = servers
        assert alive(server)

        proc.terminate()  # SIGTERM to phaseglass only, as a process manager or `kill` sends it
        assert proc.wait(timeout=60) == 128 + 15
        gone = time.monotonic() + 10
        while alive(server) and time.monotonic() < gone:  # normally gone already: we waited for it
            time.sleep(0.1)
        assert not alive(server), "JupyterLab outlived phaseglass demo"
        assert "stopping JupyterLab" in log.read_text()
        assert not list(runtime.glob("jpserver-*.json"))  # it shut down cleanly, not killed
    except AssertionError as exc:
        raise AssertionError(f"{exc}\n--- phaseglass demo output ---\n{log.read_text()}") from None
    finally:
        busy.close()
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        for pid in servers | _server_pids(runtime):  # never leave a server behind, even on failure
            if alive(pid):
                os.kill(pid, 9)


FAKE_SERVER = """
import signal, sys, time
mode, marker = sys.argv[1], sys.argv[2]
def on_term(signum, frame):
    open(marker, "a").write(signal.Signals(signum).name + "\\n")
    if mode == "polite":
        sys.exit(0)
signal.signal(signal.SIGTERM, on_term)
signal.signal(signal.SIGHUP, on_term)
open(marker + ".pid", "w").write(str(__import__("os").getpid()))
while True:
    time.sleep(0.05)
"""

RUN_SERVE = """
import sys
from phaseglass import launch
fake, mode, marker, grace = sys.argv[1:5]
sys.exit(launch.serve([sys.executable, fake, mode, marker], grace=float(grace)))
"""


def _serve_fake(tmp_path, mode, grace):
    """`launch.serve` in a subprocess, watching a stand-in server; returns (proc, marker, server pid)."""
    fake = tmp_path / "fake_server.py"
    fake.write_text(FAKE_SERVER)
    marker = tmp_path / "signals.txt"
    proc = subprocess.Popen([sys.executable, "-c", RUN_SERVE, str(fake), mode, str(marker), str(grace)],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    pid_file = tmp_path / "signals.txt.pid"
    deadline = time.monotonic() + 30
    while not (pid_file.exists() and pid_file.read_text()) and time.monotonic() < deadline:
        time.sleep(0.05)
    return proc, marker, int(pid_file.read_text())


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP, signal.SIGINT])
def test_a_stop_signal_is_passed_on_as_sigterm_and_waited_for(tmp_path, sig):
    proc, marker, server = _serve_fake(tmp_path, "polite", grace=20)
    try:
        proc.send_signal(sig)
        out, _ = proc.communicate(timeout=30)
        assert proc.returncode == (0 if sig == signal.SIGINT else 128 + sig)
        assert marker.read_text().split() == ["SIGTERM"]  # JupyterLab stops its kernels on this
        assert f"stopping JupyterLab (pid {server}) after {sig.name}" in out
        assert not alive(server)
    finally:
        if alive(server):
            os.kill(server, 9)


def test_a_server_that_ignores_sigterm_is_killed_after_the_grace(tmp_path):
    proc, marker, server = _serve_fake(tmp_path, "stubborn", grace=1)
    try:
        proc.send_signal(signal.SIGTERM)
        out, _ = proc.communicate(timeout=30)
        assert proc.returncode == 128 + signal.SIGTERM
        assert marker.read_text().split() == ["SIGTERM"]
        assert "did not stop within 1 s; killing it" in out
        assert not alive(server)
    finally:
        if alive(server):
            os.kill(server, 9)


def test_port_in_use_moves_to_a_free_one_and_says_so(monkeypatch):
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        taken = busy.getsockname()[1]
        assert not launch.port_is_free(taken)
        port, message = launch.choose_port(taken)
        assert port != taken and launch.port_is_free(port)
        assert message == f"port {taken} is in use, so JupyterLab will use port {port} instead"
    free = _free_port()
    assert launch.choose_port(free) == (free, None)


def test_demo_prints_the_port_it_uses_and_keeps_jupyterlab_on_it(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(launch, "_lab_available", lambda: True)
    seen = {}
    monkeypatch.setattr(launch, "serve", lambda cmd, **kw: seen.setdefault("cmd", cmd) and 0)
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        taken = busy.getsockname()[1]
        assert cli.main(["demo", "--dir", str(tmp_path / "w"), "--no-browser",
                         "--port", str(taken)]) == 0
    out = capsys.readouterr().out
    port = int(next(a for a in seen["cmd"] if a.startswith("--port=")).split("=")[1])
    assert port != taken
    assert f"port {taken} is in use, so JupyterLab will use port {port} instead." in out
    assert f"http://localhost:{port}/lab" in out
    assert "--ServerApp.port_retries=0" in seen["cmd"]  # it may not move again silently


def test_unwritable_dir_is_one_line_exit_2(tmp_path, monkeypatch, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    assert cli.main(["demo", "--dir", str(blocker / "sub"), "--copy-only"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("phaseglass demo: error: --dir ")
    assert "cannot" in err[0] and "Traceback" not in err[0]

    def refuse(folder, **kw):
        raise PermissionError(13, "Permission denied", str(folder))

    monkeypatch.setattr(launch, "copy_notebooks", refuse)
    assert cli.main(["demo", "--dir", str(tmp_path / "locked"), "--copy-only"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"phaseglass demo: error: --dir {str(tmp_path / 'locked')!r}: cannot write the "
                   "notebooks there (Permission denied); name a folder you can write to"]
