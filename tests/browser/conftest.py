"""Fixtures for the real-browser tests (JupyterLab / Notebook 7 + Debian chromium).

The harness module is loaded under a unique name (``phaseglass_browser_harness``)
so it cannot clash with other test folders' helper modules.

Behaviour when chromium / playwright / jupyterlab are missing: the test FAILS when
``PHASEGLASS_BROWSER_TESTS=1`` (CI sets it) and is skipped with the reason otherwise.
"""

from __future__ import annotations

import importlib.util
import os
import sys
from pathlib import Path

import pytest

_HERE = Path(__file__).resolve().parent
_NAME = "phaseglass_browser_harness"
if _NAME not in sys.modules:
    _spec = importlib.util.spec_from_file_location(_NAME, _HERE / "harness.py")
    _mod = importlib.util.module_from_spec(_spec)
    sys.modules[_NAME] = _mod
    _spec.loader.exec_module(_mod)
harness = sys.modules[_NAME]

# the example notebooks' scenarios, shared by several test modules
_SCEN = "phaseglass_browser_scenarios"
if _SCEN not in sys.modules:
    _spec = importlib.util.spec_from_file_location(_SCEN, _HERE / "scenarios.py")
    _mod = importlib.util.module_from_spec(_spec)
    sys.modules[_SCEN] = _mod
    _spec.loader.exec_module(_mod)


def pytest_configure(config):
    config.addinivalue_line("markers", "browser: drives a real Chromium against a JupyterLab server")


def pytest_terminal_summary(terminalreporter):
    """Print the latency figures of every browser run (a benchmark figure, never asserted)."""
    if harness.SUMMARIES:
        terminalreporter.section("browser runs: input -> repainted canvas latency")
        for line in harness.SUMMARIES:
            terminalreporter.write_line(line)


def browser_tests_required() -> bool:
    return os.environ.get("PHASEGLASS_BROWSER_TESTS", "") == "1"


def require_browser_prerequisites(ui: str = "lab") -> None:
    missing = harness.missing_prerequisites(ui)
    if not missing:
        return
    msg = "; ".join(missing)
    if browser_tests_required():
        pytest.fail(f"PHASEGLASS_BROWSER_TESTS=1 but: {msg}", pytrace=False)
    pytest.skip(msg)


@pytest.fixture(scope="session")
def browser_artefacts_dir() -> Path:
    d = harness.DEFAULT_ARTEFACTS_DIR
    d.mkdir(parents=True, exist_ok=True)
    return d


@pytest.fixture(scope="session")
def jupyter_servers():
    """Factory ``(scenario) -> JupyterServer``, per session: one server per notebook folder + env
    for scenarios that copy the whole folder; one per notebook for those that copy only it."""
    servers: dict = {}

    def get(scenario):
        nb = Path(scenario.notebook).resolve()
        key = (str(nb.parent), tuple(sorted(scenario.extra_env.items())), scenario.copy_whole_folder,
               None if scenario.copy_whole_folder else nb.name)
        srv = servers.get(key)
        if srv is None or srv.proc is None or srv.proc.poll() is not None:
            srv = harness.JupyterServer(
                Path(scenario.notebook).resolve().parent, extra_env=scenario.extra_env,
                copy_whole_folder=scenario.copy_whole_folder,
                only_files=[Path(scenario.notebook).resolve()],
            ).start()
            servers[key] = srv
        return srv

    yield get
    for srv in servers.values():
        srv.stop()


@pytest.fixture(scope="session")
def _browser_results():
    """(scenario name, ui) -> RunResult or the exception of that run, for the whole session."""
    return {}


@pytest.fixture
def browser_run(jupyter_servers, browser_artefacts_dir, _browser_results):
    """``browser_run(scenario, ui, timeout_s=150, retries=1) -> RunResult``.

    ``ui`` is ``"lab"`` or ``"notebook"`` (Notebook 7 on the same server). Checks the
    prerequisites first (fail under PHASEGLASS_BROWSER_TESTS=1, else skip). A scenario runs
    once per session and ui (keyed by its name): a second test asking for it gets the same
    result (or the same failure), so two test modules can check one run of a notebook.
    """

    def run(scenario, ui: str, *, timeout_s: float = 150.0, retries: int = 1):
        require_browser_prerequisites(ui)
        key = (scenario.name, ui)
        if key in _browser_results:
            done = _browser_results[key]
            if isinstance(done, BaseException):
                pytest.fail(f"earlier run of {scenario.name}/{ui} in this session failed: {done}",
                            pytrace=False)
            return done
        server = jupyter_servers(scenario)
        try:
            res = harness.run_scenario_with_retry(
                server, scenario, ui, retries=retries, timeout_s=timeout_s,
                artefacts_dir=browser_artefacts_dir)
        except Exception as e:
            _browser_results[key] = e
            raise
        _browser_results[key] = res
        return res

    return run
