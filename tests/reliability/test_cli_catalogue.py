"""Bad input for both command-line tools, `phaseglass report` and `phaseglass demo`.

Every case asserts the behaviour a user sees: the exit code, one line on stderr that names the
option at fault (no traceback), and that nothing on disk changed (every file under the working
folder byte-identical, nothing created). Cases that need a real process (signals, a locale, the
console script) run one in a subprocess with a timeout and check that no process is left behind.
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from _processes import alive

from phaseglass import cli, launch

FAST = ["--draws", "12", "--warmup", "0", "--chains", "1", "--seed", "2", "--no-grid", "--dpi", "20",
        "--quiet", "--kernel", "walk"]

MODEL = textwrap.dedent('''
    import numpy as np
    import phaseglass as pg


    def build():
        return pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), lambda x: -x, dim=2,
                         vectorized=True)


    VALUE = 3
''')


def snapshot(folder):
    """{relative path: bytes or '<dir>'} of everything under ``folder``."""
    return {str(p.relative_to(folder)): (p.read_bytes() if p.is_file() else "<dir>")
            for p in sorted(Path(folder).rglob("*"))}


@pytest.fixture
def work(tmp_path, monkeypatch):
    """A working folder, the current directory, holding the user's files of every kind."""
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    (cwd / "notes.txt").write_text("field notes\n")
    (cwd / "model.py").write_text(MODEL)
    (cwd / "broken_model.py").write_text("raise ImportError('half-written module')\n")
    (cwd / "data.txt").write_text("1 2 3\n")
    mine = cwd / "mine"  # a folder of the user's, with files named like report files
    mine.mkdir()
    (mine / "summary.json").write_text('{"mine": true}\n')
    (mine / "report.html").write_text("<p>my page</p>\n")
    (mine / "traces.png").write_bytes(b"my traces")
    earlier = cwd / "earlier"  # an earlier report (its manifest) plus a user file named like a figure
    earlier.mkdir()
    (earlier / "summary.json").write_text(json.dumps(
        {"written_by": "phaseglass report", "files": ["summary.json", "report.html"]}))
    (earlier / "report.html").write_text("<p>old report</p>\n")
    (earlier / "pairs.png").write_bytes(b"the user's pairs picture")
    odd = cwd / "odd"  # a folder where a report file name is taken by a folder
    (odd / "report.html").mkdir(parents=True)
    (cwd / "a_file").write_text("not a folder\n")
    monkeypatch.chdir(cwd)
    return cwd


# (id, argv, exit code, text every stderr line must hold...). Run in-process from the `work` folder.
REFUSED = [
    ("report-out-empty", ["report", "--out", ""], 2, "--out must name a folder"),
    ("report-out-dot", ["report", "--out", "."], 2, "--out '.' is not empty", "--replace"),
    ("report-out-user-folder", ["report", "--out", "mine"], 2, "--out 'mine'",
     "holds no earlier phaseglass report"),
    ("report-out-is-a-file", ["report", "--out", "a_file"], 2, "--out 'a_file' exists and is not a folder"),
    ("report-out-user-file-beside-report", ["report", "--out", "earlier"], 2, "--out 'earlier'",
     "pairs.png", "--replace"),
    ("report-out-folder-named-like-a-file", ["report", "--out", "odd", "--replace"], 2, "--out 'odd'",
     "report.html"),
    ("report-dpi-huge", ["report", "--dpi", "1e6"], 2, "argument --dpi", "from 10 to 600"),
    ("report-dpi-negative", ["report", "--dpi", "-3"], 2, "argument --dpi"),
    ("report-draws-zero", ["report", "--draws", "0"], 2, "argument --draws"),
    ("report-chains-zero", ["report", "--chains", "0"], 2, "argument --chains"),
    ("report-warmup-negative", ["report", "--warmup", "-5"], 2, "argument --warmup"),
    ("report-seed-negative", ["report", "--seed", "-1"], 2, "argument --seed"),
    ("report-steps-zero", ["report", "--n-steps", "0"], 2, "argument --n-steps"),
    ("report-steps-huge", ["report", "--n-steps", "1000000000"], 2, "argument --n-steps", "100000"),
    ("report-former-steps-zero", ["report", "--steps", "0"], 2, "argument --steps"),
    ("report-max-depth-zero", ["report", "--kernel", "nuts", "--max-depth", "0"], 2,
     "argument --max-depth"),
    ("report-scale-negative", ["report", "--kernel", "walk", "--scale", "-1"], 2, "argument --scale"),
    ("report-step-size-inf", ["report", "--step-size", "inf"], 2, "argument --step-size"),
    ("report-step-size-text", ["report", "--step-size", "small"], 2, "argument --step-size"),
    ("report-persistence-one", ["report", "--kernel", "partial", "--persistence", "1"], 2,
     "argument --persistence"),
    ("report-drift-too-big", ["report", "--uniform", "drifting", "--drift", "3"], 2, "--drift:"),
    ("report-kernel-unknown", ["report", "--kernel", "slice"], 2, "argument --kernel"),
    ("report-uniform-unknown", ["report", "--uniform", "banana"], 2, "argument --uniform"),
    ("report-coords-one", ["report", "--coords", "0"], 2, "argument --coords"),
    ("report-coords-same", ["report", "--coords", "0,0"], 2, "--coords"),
    ("report-coords-unknown", ["report", "--coords", "0,nope"], 2, "--coords", "nope"),
    ("report-model-unknown", ["report", "--model", "nope"], 2, "unknown --model 'nope'"),
    ("report-model-missing-file", ["report", "--model", "./gone.py:build"], 2, "--model './gone.py:build'",
     "does not exist"),
    ("report-model-file-without-callable", ["report", "--model", "model.py"], 2, "--model 'model.py'",
     "model.py:build"),
    ("report-model-not-python", ["report", "--model", "./data.txt:build"], 2, "not a .py file"),
    ("report-model-relative-module", ["report", "--model", ".model:build"], 2, "--model '.model:build'",
     "relative module"),
    ("report-model-module-missing", ["report", "--model", "nowhere_pg_mod:build"], 2,
     "cannot import module 'nowhere_pg_mod'"),
    ("report-model-import-raises", ["report", "--model", "./broken_model.py:build"], 2,
     "raised ImportError: half-written module"),
    ("report-model-not-callable", ["report", "--model", "./model.py:VALUE"], 2, "is not callable"),
    ("report-model-no-attribute", ["report", "--model", "./model.py:missing"], 2,
     "has no attribute 'missing'"),
    ("report-unknown-option", ["report", "--bogus"], 2, "--bogus"),
    ("no-command", [], 2, "COMMAND"),
    ("demo-port-zero", ["demo", "--port", "0"], 2, "--port must be between 1 and 65535"),
    ("demo-port-huge", ["demo", "--port", "70000"], 2, "--port must be between 1 and 65535"),
    ("demo-port-text", ["demo", "--port", "eighty"], 2, "argument --port"),
    ("demo-dir-empty", ["demo", "--dir", "", "--copy-only"], 2, "--dir must name a folder"),
    ("demo-dir-is-a-file", ["demo", "--dir", "a_file", "--copy-only"], 2, "--dir 'a_file' exists and is "
     "not a folder"),
    ("demo-dir-under-a-file", ["demo", "--dir", "a_file/sub", "--copy-only"], 2, "--dir 'a_file/sub'",
     "cannot"),
]


@pytest.mark.parametrize("argv, code, needles", [(c[1], c[2], c[3:]) for c in REFUSED],
                         ids=[c[0] for c in REFUSED])
def test_refused_input_changes_nothing(argv, code, needles, work, capsys):
    before = snapshot(work)
    assert cli.main(argv) == code
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    last = err.strip().splitlines()[-1]  # argparse prints its usage above the one error line
    assert last.startswith(("phaseglass report: error: ", "phaseglass demo: error: ",
                            "phaseglass: error: ")), err
    for needle in needles:
        assert needle in last, err
    from_argparse = any(w in last for w in ("argument ", "unrecognized arguments", "required"))
    if not from_argparse:  # argparse prints usage lines above its error; ours is one line alone
        assert len(err.strip().splitlines()) == 1, err
    assert snapshot(work) == before  # nothing written, replaced, removed or created


def test_demo_dir_that_cannot_be_written_is_one_line(work, monkeypatch, capsys):
    def refuse(folder, **kw):
        raise PermissionError(13, "Permission denied", str(folder))

    monkeypatch.setattr(launch, "copy_notebooks", refuse)
    before = snapshot(work)
    assert cli.main(["demo", "--dir", "locked", "--copy-only"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["phaseglass demo: error: --dir 'locked': cannot write the notebooks there "
                   "(Permission denied); name a folder you can write to"]
    assert snapshot(work) == before


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root may write anywhere")
def test_demo_dir_without_write_permission_is_one_line(work, capsys):
    locked = work / "locked"
    locked.mkdir(mode=0o500)
    try:
        assert cli.main(["demo", "--dir", "locked", "--copy-only"]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and err[0].startswith("phaseglass demo: error: --dir 'locked'")
    finally:
        locked.chmod(0o700)


def test_demo_without_jupyterlab_copies_then_says_how_to_install(work, monkeypatch, capsys):
    monkeypatch.setattr(launch, "_lab_available", lambda: False)
    assert cli.main(["demo", "--dir", "tour"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "pip install 'phaseglass[lab]'" in err[0]


def test_demo_keeps_the_users_notebooks_byte_identical(work, capsys):
    (work / "tour").mkdir()
    mine = work / "tour" / launch.TOUR
    mine.write_bytes(b'{"cells": [], "edited": "by me"}')
    assert cli.main(["demo", "--dir", "tour", "--copy-only"]) == 0
    assert mine.read_bytes() == b'{"cells": [], "edited": "by me"}'
    assert not [p for p in (work / "tour").iterdir() if p.name.startswith(".")]  # no temp copies


def test_report_with_replace_touches_only_report_files(work, capsys):
    before = snapshot(work / "mine")
    assert cli.main(["report", *FAST, "--out", "mine", "--replace"]) == 0
    own = set(json.loads((work / "mine" / "summary.json").read_text())["files"])
    after = snapshot(work / "mine")
    assert set(after) == set(before) | own
    assert all(after[name] == data for name, data in before.items() if name not in own)


def test_report_believes_no_manifest_entry_outside_its_own_names(work, capsys):
    (work / "outside.txt").write_text("keep me\n")
    folder = work / "tampered"
    folder.mkdir()
    (folder / "summary.json").write_text(json.dumps({"written_by": "phaseglass report", "files": [
        "summary.json", "../outside.txt", "notes.md", "/etc/hostname"]}))
    (folder / "notes.md").write_text("mine\n")
    assert cli.main(["report", *FAST, "--out", "tampered"]) == 0
    assert (work / "outside.txt").read_text() == "keep me\n"
    assert (folder / "notes.md").read_text() == "mine\n"


# ------------------------------------------------------------------ real processes

def _env():
    return dict(os.environ, MPLBACKEND="Agg")


# the CLI with SIGINT restored to Python's default (a background CI shell starts us with it ignored)
CLI_WITH_SIGINT = ("import signal, sys; signal.signal(signal.SIGINT, signal.default_int_handler); "
                   "from phaseglass.cli import main; sys.exit(main(sys.argv[1:]))")


def test_ctrl_c_while_sampling_says_what_was_done_and_writes_nothing(work):
    before = snapshot(work)
    proc = subprocess.Popen([sys.executable, "-c", CLI_WITH_SIGINT, "report", "--draws", "1000000",
                             "--warmup", "0", "--out", "big"], cwd=work, env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().startswith("sampling gaussian")
        time.sleep(0.5)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err
    assert lines[0].startswith("phaseglass report: interrupted after ")
    assert "of 1000000 draws per chain; no report written" in lines[0]
    assert snapshot(work) == before


FAKE_SERVER = """
import os, signal, sys, time
marker = sys.argv[1]
def on_term(signum, frame):
    open(marker, "a").write(signal.Signals(signum).name + "\\n")
    sys.exit(0)
signal.signal(signal.SIGTERM, on_term)
signal.signal(signal.SIGHUP, on_term)
open(marker + ".pid", "w").write(str(os.getpid()))
while True:
    time.sleep(0.05)
"""

DEMO_WITH_STAND_IN = """
import sys
from phaseglass import cli, launch
fake, marker = sys.argv[1], sys.argv[2]
launch._lab_available = lambda: True
launch.lab_command = lambda folder, **kw: [sys.executable, fake, marker]
sys.exit(cli.main(["demo", "--dir", "tour", "--no-browser"]))
"""


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP], ids=["SIGTERM", "SIGHUP"])
def test_demo_killed_leaves_no_server(sig, work):
    """`phaseglass demo` receiving SIGTERM/SIGHUP stops the server it started (a stand-in here:
    tests/test_demo_cli.py does the same with JupyterLab itself)."""
    fake = work / "fake_server.py"
    fake.write_text(FAKE_SERVER)
    marker = work / "signals.txt"
    proc = subprocess.Popen([sys.executable, "-c", DEMO_WITH_STAND_IN, str(fake), str(marker)], cwd=work,
                            env=_env(), stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    server = None
    try:
        pid_file = Path(str(marker) + ".pid")
        deadline = time.monotonic() + 30
        while not (pid_file.exists() and pid_file.read_text()) and time.monotonic() < deadline:
            assert proc.poll() is None, proc.stdout.read()
            time.sleep(0.05)
        server = int(pid_file.read_text())
        assert alive(server)
        proc.send_signal(sig)
        out, _ = proc.communicate(timeout=30)
        assert proc.returncode == 128 + sig
        assert marker.read_text().split() == ["SIGTERM"]
        assert not alive(server)
        assert f"stopping JupyterLab (pid {server}) after {sig.name}" in out
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if server is not None and alive(server):
            os.kill(server, signal.SIGKILL)


def test_console_refusal_is_one_line_without_traceback(work):
    before = snapshot(work)
    proc = subprocess.run([sys.executable, "-m", "phaseglass", "report", "--out", "mine"], cwd=work,
                          env=_env(), capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    assert proc.stderr.strip().splitlines() == [
        "phaseglass report: error: --out 'mine' is not empty and holds no earlier phaseglass report; "
        "name a new or empty folder, or pass --replace to write the report's files there (other files "
        "are kept)"]
    assert proc.stdout == ""  # refused before any sampling
    assert snapshot(work) == before
