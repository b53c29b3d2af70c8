"""The ``phaseglass`` command line: clear one-line errors with exit code 2, and a working report."""

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

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
    assert main(["report", "--steps", "0"]) == 2
    assert "--steps" in capsys.readouterr().err
    assert main(["report", "--kernel", "nuts"]) == 2
    assert "invalid choice" in capsys.readouterr().err
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
    for flag in ("--model", "--kernel", "--step-size", "--steps", "--persistence", "--uniform",
                 "--drift", "--warmup", "--draws", "--chains", "--seed", "--out"):
        assert flag in proc.stdout
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
    code = main(["report", "--model", "pg_cli_models:good", "--kernel", "partial", "--steps", "2",
                 "--uniform", "drifting", "--drift", "0.05", "--draws", "40", "--warmup", "20",
                 "--chains", "2", "--seed", "3", "--no-grid", "--dpi", "30", "--out", str(out)])
    stdout, err = capsys.readouterr()
    assert code == 0, err
    assert "report.html" in stdout
    names = {p.name for p in out.iterdir()}
    assert {"report.html", "summary.json", "trajectory.png", "traces.png", "uniforms.png"} <= names
    summary = json.loads((out / "summary.json").read_text())
    s = summary["settings"]
    assert s["kernel"] == "partial" and s["seed"] == 3 and s["drift"] == 0.05 and s["steps"] == 2
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
    assert "--steps does not apply to --kernel walk" in err
    assert "--persistence applies to --kernel partial only" in err


def test_console_script_is_installed():
    script = Path(sys.executable).with_name("phaseglass")
    if not script.exists():
        pytest.skip("console script not installed next to this interpreter")
    proc = subprocess.run([str(script), "report", "--model", "nope"], capture_output=True, text=True)
    assert proc.returncode == 2
    assert len(proc.stderr.strip().splitlines()) == 1
