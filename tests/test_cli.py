"""The ``phaseglass`` command line: clear one-line errors with exit code 2, and a working report."""

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import phaseglass as pg
from phaseglass.cli import SUBCOMMANDS, build_parser, load_model, main

MODELS = textwrap.dedent('''
    """Invented models for the command-line tests."""
    import numpy as np
    import phaseglass as pg


    def good():
        return pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), lambda x: -x, dim=2,
                         vectorized=True, names=["left", "right"])


    def raises():
        raise RuntimeError("the tide table is missing\\nsecond line of detail")


    def not_target():
        return [1, 2, 3]


    def density_raises():
        def logp(x):
            raise FloatingPointError("cannot evaluate the ledger")
        return pg.Target(logp, lambda x: -x, dim=2, vectorized=True)


    count = 3
''')


@pytest.fixture(scope="module")
def model_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("models")
    (d / "pg_cli_models.py").write_text(MODELS)
    (d / "pg_cli_broken.py").write_text("raise ImportError('half-written module')\n")
    yield d
    for name in ("pg_cli_models", "pg_cli_broken"):
        sys.modules.pop(name, None)


def run_cli(args, cwd):
    """Run ``python -m phaseglass`` in a subprocess; returns CompletedProcess."""
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "phaseglass", *args], cwd=cwd,
                          capture_output=True, text=True, env=env, timeout=300)


BAD_MODELS = [
    ("no-such-demo", "unknown --model 'no-such-demo'"),
    ("pg_cli_nowhere:make", "cannot import module 'pg_cli_nowhere'"),
    ("pg_cli_models:missing", "has no attribute 'missing'"),
    ("pg_cli_models:raises", "raised RuntimeError: the tide table is missing"),
    ("pg_cli_models:not_target", "returned list, not a phaseglass Target"),
    ("pg_cli_models:count", "is not callable (got a value of type int)"),
    ("pg_cli_broken:make", "raised ImportError: half-written module"),
    (":make", "must look like package.module:callable"),
]


@pytest.mark.parametrize("spec, message", BAD_MODELS)
def test_bad_model_gives_one_line_and_exit_2(spec, message, model_dir, monkeypatch, capsys):
    monkeypatch.chdir(model_dir)
    code = main(["report", "--model", spec, "--out", str(model_dir / "never")])
    out, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("phaseglass report: error: ")
    assert message in lines[0]
    assert "Traceback" not in err
    assert not (model_dir / "never").exists()


@pytest.mark.parametrize("spec, message", [BAD_MODELS[3], BAD_MODELS[1]])
def test_bad_model_in_a_subprocess(spec, message, model_dir):
    proc = run_cli(["report", "--model", spec], cwd=model_dir)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0]
    assert "Traceback" not in proc.stderr


def test_model_that_fails_while_sampling_exits_1(model_dir, monkeypatch, capsys):
    monkeypatch.chdir(model_dir)
    code = main(["report", "--model", "pg_cli_models:density_raises", "--out", str(model_dir / "x")])
    err = capsys.readouterr().err
    assert code == 1
    assert err.strip().splitlines() == [
        "phaseglass report: error: sampling 'pg_cli_models:density_raises' failed: "
        "FloatingPointError: cannot evaluate the ledger"]


def test_bad_option_values_exit_2(capsys):
    assert main(["report", "--n-steps", "0"]) == 2
    assert "--n-steps" in capsys.readouterr().err
    assert main(["report", "--kernel", "slice"]) == 2
    assert "invalid choice" in capsys.readouterr().err
    assert main(["report", "--kernel", "nuts", "--max-depth", "21"]) == 2
    assert "--max-depth" in capsys.readouterr().err
    assert main(["report", "--coords", "one"]) == 2
    assert "--coords" in capsys.readouterr().err
    assert main([]) == 2
    assert "COMMAND" in capsys.readouterr().err


def test_unknown_coordinate_is_one_line(capsys, tmp_path):
    assert main(["report", "--coords", "clock_1,nope", "--out", str(tmp_path / "r")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "unknown coordinate 'nope'" in err[0]


def test_help_lists_every_option():
    proc = run_cli(["report", "--help"], cwd=None)
    assert proc.returncode == 0
    for flag in ("--model", "--kernel", "--step-size", "--scale", "--n-steps", "--max-depth",
                 "--persistence", "--uniform", "--drift", "--warmup", "--draws", "--chains",
                 "--seed", "--out"):
        assert flag in proc.stdout
    assert "--steps " not in proc.stdout  # the former name works but is not advertised
    assert "random-walk Metropolis" in proc.stdout  # titles from the kernel registry
    top = run_cli(["--help"], cwd=None)
    assert top.returncode == 0 and "report" in top.stdout
    assert "never prove convergence" in " ".join(top.stdout.split())


def test_subcommands_are_a_registry():
    assert "report" in SUBCOMMANDS
    for name, (help_line, add_arguments, run) in SUBCOMMANDS.items():
        assert help_line and callable(add_arguments) and callable(run), name
    parser = build_parser()
    args = parser.parse_args(["report", "--kernel", "partial", "--uniform", "drifting"])
    assert args.command == "report" and args.kernel == "partial"


def test_load_model_demo_and_module(model_dir, monkeypatch):
    assert load_model("glaze").names == ("base", "spray")
    monkeypatch.chdir(model_dir)
    assert load_model("pg_cli_models:good").names == ("left", "right")


def test_report_end_to_end(model_dir, monkeypatch, capsys, tmp_path):
    monkeypatch.chdir(model_dir)
    out = tmp_path / "rep"
    code = main(["report", "--model", "pg_cli_models:good", "--kernel", "partial", "--n-steps", "2",
                 "--uniform", "drifting", "--drift", "0.05", "--draws", "40", "--warmup", "20",
                 "--chains", "2", "--seed", "3", "--no-grid", "--dpi", "30", "--out", str(out)])
    stdout, err = capsys.readouterr()
    assert code == 0, err
    assert "report.html" in stdout
    names = {p.name for p in out.iterdir()}
    assert {"report.html", "summary.json", "trajectory.png", "traces.png", "uniforms.png"} <= names
    summary = json.loads((out / "summary.json").read_text())
    s = summary["settings"]
    assert s["kernel"] == "partial" and s["seed"] == 3 and s["drift"] == 0.05 and s["n_steps"] == 2
    assert summary["kernel_after_warmup"]["kernel"] == "PartialRefreshHMC"
    assert summary["kernel_after_warmup"]["uniform"]["kind"] == "drifting"
    assert summary["command"].startswith("phaseglass report --model pg_cli_models:good")


def test_same_seed_same_report_numbers(tmp_path, capsys):
    args = ["report", "--draws", "30", "--warmup", "10", "--chains", "2", "--seed", "9",
            "--no-grid", "--dpi", "20", "--quiet"]
    assert main(args + ["--out", str(tmp_path / "a")]) == 0
    assert main(args + ["--out", str(tmp_path / "b")]) == 0
    assert capsys.readouterr().out == ""  # --quiet
    a = json.loads((tmp_path / "a" / "summary.json").read_text())
    b = json.loads((tmp_path / "b" / "summary.json").read_text())
    assert a["diagnostics"] == b["diagnostics"]


def test_irrelevant_knobs_are_noted(tmp_path, capsys):
    assert main(["report", "--kernel", "walk", "--steps", "5", "--persistence", "0.5",
                 "--draws", "20", "--warmup", "0", "--chains", "2", "--seed", "1",
                 "--dpi", "20", "--quiet", "--out", str(tmp_path)]) == 0
    err = capsys.readouterr().err
    assert "--n-steps applies to --kernel hmc or partial only" in err
    assert "--persistence applies to --kernel partial only" in err


def test_kernel_knobs_have_their_own_options():
    from phaseglass.cli import _build_kernel

    parser = build_parser()
    kernel, notes = _build_kernel(parser.parse_args(["report", "--kernel", "walk", "--scale", "0.7"]))
    assert isinstance(kernel, pg.RandomWalk) and kernel.scale == 0.7 and notes == []
    # the former --steps still sets n_steps
    kernel, _ = _build_kernel(parser.parse_args(["report", "--steps", "7"]))
    assert isinstance(kernel, pg.HMC) and kernel.n_steps == 7
    # a walk's scale given as --step-size (before issue 12) is read, with a note naming --scale
    kernel, notes = _build_kernel(parser.parse_args(["report", "--kernel", "walk",
                                                     "--step-size", "0.3"]))
    assert kernel.scale == 0.3 and any("use --scale" in n for n in notes)
    kernel, notes = _build_kernel(parser.parse_args(["report", "--kernel", "nuts", "--max-depth",
                                                     "6", "--step-size", "0.2"]))
    assert isinstance(kernel, pg.NUTS) and (kernel.step_size, kernel.max_depth) == (0.2, 6)
    assert notes == []


def test_nuts_report_end_to_end(tmp_path, capsys):
    assert main(["report", *FAST, "--kernel", "nuts", "--max-depth", "4",
                 "--out", str(tmp_path / "r")]) == 0, capsys.readouterr().err
    summary = json.loads((tmp_path / "r" / "summary.json").read_text())
    assert summary["settings"]["max_depth"] == 4
    assert summary["kernel_after_warmup"]["kernel"] == "NUTS"


def test_console_script_is_installed():
    script = Path(sys.executable).with_name("phaseglass")
    if not script.exists():
        pytest.skip("console script not installed next to this interpreter")
    proc = subprocess.run([str(script), "report", "--model", "nope"], capture_output=True, text=True)
    assert proc.returncode == 2
    assert len(proc.stderr.strip().splitlines()) == 1


# ------------------------------------------------------------------ the --out folder is the user's

FAST = ["--draws", "12", "--warmup", "0", "--chains", "1", "--seed", "4", "--no-grid", "--dpi", "20",
        "--quiet"]


def snapshot(folder):
    """{relative path: bytes} of every file under ``folder``."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(Path(folder).rglob("*"))
            if p.is_file()}


def user_folder(path):
    """A folder of the user's holding, among other things, files named like report files."""
    path.mkdir()
    (path / "notes.txt").write_text("my notes\n")
    (path / "summary.json").write_text('{"mine": true}\n')
    (path / "report.html").write_text("<p>my own page</p>\n")
    (path / "traces.png").write_bytes(b"my traces")
    (path / "gibbs.png").write_bytes(b"not a figure this run makes")
    (path / "sub").mkdir()
    (path / "sub" / "data.csv").write_text("a,b\n1,2\n")
    return snapshot(path)


def test_a_folder_without_a_report_is_refused_and_left_alone(tmp_path, capsys):
    before = user_folder(tmp_path / "mine")
    assert main(["report", *FAST, "--out", str(tmp_path / "mine")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    assert err[0].startswith("phaseglass report: error: --out ")
    assert "holds no earlier phaseglass report" in err[0] and "--replace" in err[0]
    assert snapshot(tmp_path / "mine") == before


@pytest.mark.parametrize("out", [".", ""])
def test_dot_and_empty_out_are_refused(out, tmp_path, monkeypatch, capsys):
    before = user_folder(tmp_path / "cwd")
    monkeypatch.chdir(tmp_path / "cwd")
    assert main(["report", *FAST, "--out", out]) == 2
    err = capsys.readouterr().err
    assert f"--out {out!r}" in err or "--out must name a folder" in err
    assert snapshot(tmp_path / "cwd") == before


def test_replace_writes_only_the_reports_own_files(tmp_path, capsys):
    out = tmp_path / "mine"
    before = user_folder(out)
    assert main(["report", *FAST, "--kernel", "walk", "--out", str(out), "--replace"]) == 0
    after = snapshot(out)
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["written_by"] == "phaseglass report" and summary["complete"] is True
    own = set(summary["files"])
    assert {"summary.json", "report.html", "traces.png"} <= own and "gibbs.png" not in own
    for name, data in before.items():  # every file of the user's not named like ours: untouched
        if name not in own:
            assert after[name] == data, name
    assert set(after) == set(before) | own  # nothing of the user's removed, no temp files left


def test_a_later_report_replaces_and_removes_only_the_earlier_reports_files(tmp_path, capsys):
    out = tmp_path / "rep"
    assert main(["report", *FAST, "--out", str(out)]) == 0  # HMC: trajectory, energy, ...
    first = set(json.loads((out / "summary.json").read_text())["files"])
    assert {"trajectory.png", "energy.png"} <= first
    (out / "notes.txt").write_text("mine\n")
    assert main(["report", *FAST, "--kernel", "walk", "--out", str(out)]) == 0  # no --replace needed
    second = set(json.loads((out / "summary.json").read_text())["files"])
    assert "trajectory.png" not in second and not (out / "trajectory.png").exists()  # stale: removed
    assert {p.name for p in out.iterdir()} == second | {"notes.txt"}
    assert (out / "notes.txt").read_text() == "mine\n"

    # a file named like a report file that the earlier report did not write: refused, untouched
    (out / "trajectory.png").write_bytes(b"the user's own picture")
    before = snapshot(out)
    assert main(["report", *FAST, "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "trajectory.png" in err and "--replace" in err and "--out" in err
    assert snapshot(out) == before


def test_a_crash_midway_leaves_whole_files_and_a_folder_the_next_run_accepts(tmp_path, monkeypatch,
                                                                            capsys):
    from phaseglass.report import render

    out = tmp_path / "rep"
    assert main(["report", *FAST, "--kernel", "walk", "--out", str(out)]) == 0
    html_before = (out / "report.html").read_bytes()

    def broken(*a, **k):
        raise RuntimeError("the drawing code fell over")

    monkeypatch.setattr(render, "figure_energy", broken)  # HMC draws it after several new figures
    with pytest.raises(RuntimeError, match="fell over"):
        main(["report", *FAST, "--out", str(out)])
    assert (out / "report.html").read_bytes() == html_before  # the old page, whole
    stub = json.loads((out / "summary.json").read_text(encoding="utf-8"))  # valid JSON
    assert stub["written_by"] == "phaseglass report" and stub["complete"] is False
    assert {p.name for p in out.iterdir()} <= set(stub["files"])  # every file is claimed, no temps
    assert "trajectory.png" in stub["files"]  # written by the crashed run, so it is listed
    monkeypatch.undo()
    assert main(["report", *FAST, "--kernel", "walk", "--out", str(out)]) == 0  # still our folder
    assert not (out / "trajectory.png").exists()


def test_atomic_write_leaves_the_old_file_when_writing_fails(tmp_path, monkeypatch):
    from phaseglass import report
    from phaseglass.report import files

    target = tmp_path / "summary.json"
    target.write_text('{"old": 1}')

    def fail_fsync(fd):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(files.os, "fsync", fail_fsync)  # fails after the data went to the temp file
    with pytest.raises(OSError, match="No space left"):
        report.atomic_write(target, '{"new": "\u26a0"}')
    assert target.read_text() == '{"old": 1}'
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]  # the temp file is gone
    monkeypatch.undo()

    def fail_replace(src, dst):
        raise KeyboardInterrupt  # even Ctrl-C at the last moment

    monkeypatch.setattr(files.os, "replace", fail_replace)
    with pytest.raises(KeyboardInterrupt):
        report.atomic_write(target, b"new bytes")
    assert target.read_text() == '{"old": 1}'
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]
    monkeypatch.undo()
    report.atomic_write(target, "caf\u00e9 \u26a0")
    assert target.read_bytes() == "caf\u00e9 \u26a0".encode("utf-8")


UNICODE_MODEL = textwrap.dedent('''
    import numpy as np
    import phaseglass as pg


    def build():
        return pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), lambda x: -x, dim=2,
                         vectorized=True, names=["\u03bc", "\u03c3_\u00fc"])
''')


def test_report_under_a_non_utf8_locale_writes_utf8(tmp_path):
    (tmp_path / "model.py").write_text(UNICODE_MODEL, encoding="utf-8")
    env = {k: v for k, v in os.environ.items() if not k.startswith(("LC_", "PYTHONIOENCODING"))}
    # a C locale without Python's UTF-8 mode or locale coercion: the preferred encoding is ASCII,
    # as on a default Windows install it is cp1252 (PEP 538/540 would otherwise switch to UTF-8)
    env.update(LC_ALL="C", LANG="C", PYTHONUTF8="0", PYTHONCOERCECLOCALE="0", MPLBACKEND="Agg")
    probe = subprocess.run([sys.executable, "-c", "import locale; print(locale.getpreferredencoding(False))"],
                           env=env, capture_output=True, text=True, timeout=60)
    assert "utf" not in probe.stdout.lower(), probe.stdout  # else this test could not fail
    out = "rapport-\u00e9"
    proc = subprocess.run([sys.executable, "-m", "phaseglass", "report", "--model", "./model.py:build",
                           *FAST[:-1], "--out", out], cwd=tmp_path, env=env, capture_output=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stderr.decode("utf-8", "replace")
    page = (tmp_path / out / "report.html").read_bytes().decode("utf-8")  # strict: valid UTF-8
    assert "\u03c3_\u00fc" in page and ("\u26a0" in page or "\u2713" in page)
    summary = json.loads((tmp_path / out / "summary.json").read_bytes().decode("utf-8"))
    assert summary["model"]["names"] == ["\u03bc", "\u03c3_\u00fc"]


# ------------------------------------------------------------------ messages

@pytest.mark.parametrize("dpi", ["1e6", "601", "5", "0", "nan", "inf"])
def test_dpi_out_of_range_is_one_clear_line(dpi, capsys):
    assert main(["report", "--dpi", dpi, "--out", "never-written"]) == 2
    err = capsys.readouterr().err
    assert f"argument --dpi: expected a number from 10 to 600 (screen: 90, print: 300), got {dpi!r}" in err
    assert "Traceback" not in err and not Path("never-written").exists()


def test_model_given_as_a_file_path(tmp_path, monkeypatch, capsys):
    sub = tmp_path / "models"
    sub.mkdir()
    (sub / "helper_for_pg.py").write_text("SCALE = 2.0\n")
    (sub / "my model.py").write_text(textwrap.dedent('''
        import numpy as np
        import phaseglass as pg
        from helper_for_pg import SCALE   # a neighbour of the file imports fine


        def build():
            return pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1) / SCALE, lambda x: -x / SCALE,
                             dim=2, vectorized=True, names=["near", "far"])
    '''))
    monkeypatch.chdir(tmp_path)
    assert load_model("./models/my model.py:build").names == ("near", "far")
    assert load_model(str(sub / "my model.py") + ":build").names == ("near", "far")
    assert str(sub) not in sys.path  # the folder was on the path only while the file loaded
    assert main(["report", "--model", "models/my model.py:build", *FAST, "--out", "r"]) == 0
    assert json.loads((tmp_path / "r" / "summary.json").read_text())["model"]["names"] == ["near", "far"]


@pytest.mark.parametrize("spec, message", [
    ("./nowhere.py:build", "the file './nowhere.py' does not exist"),
    ("models:build", None),  # a folder given as a module is a module-path error, below
    ("./models:build", "the file './models' is a folder"),
    ("./data.txt:build", "'./data.txt' is not a .py file"),
    ("model.py", "name the function that builds the Target: model.py:build"),
    (".relative:build", "a relative module name cannot be imported"),
    ("./broken.py:build", "importing './broken.py' for --model './broken.py:build' raised "
                          "SyntaxError"),
])
def test_model_file_mistakes_are_one_line(spec, message, tmp_path, monkeypatch, capsys):
    (tmp_path / "models").mkdir()
    (tmp_path / "data.txt").write_text("x")
    (tmp_path / "broken.py").write_text("def build(:\n")
    monkeypatch.chdir(tmp_path)
    assert main(["report", "--model", spec, "--out", "never"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("phaseglass report: error: ")
    assert f"--model {spec!r}" in err[0] or f"unknown --model {spec!r}" in err[0]
    if message:
        assert message in err[0]
    assert not (tmp_path / "never").exists()
