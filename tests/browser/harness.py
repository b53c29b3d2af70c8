"""Real-browser harness: JupyterLab / Notebook 7 server + Debian chromium driven by Playwright.

Nothing here is specific to the fixture notebook. A notebook is described by a
:class:`Scenario` (path + a list of interaction steps that say which widgets to
poke and what must change); :func:`run_scenario_with_retry` opens it in ``"lab"``
or ``"notebook"`` (Notebook 7), runs all cells, waits for ipympl canvases to be
painted, performs the steps, asserts the expected changes, measures the
input -> repaint latency and writes screenshots into the artefacts folder.

Pointing it at another notebook (in a test module next to conftest.py)::

    from phaseglass_browser_harness import CanvasClick, Scenario, SliderStep

    TOUR = Scenario(
        name="tour",                                   # prefix of the artefact files
        notebook=REPO / "example_notebooks" / "tour.ipynb",   # its folder is copied to a temp root
        steps=(
            SliderStep(slider_class="pg-step-size", canvas_class="pg-canvas",
                       text_classes=("pg-readout",)),
            CanvasClick(canvas_class="pg-canvas", text_classes=("pg-click-readout",)),
        ),
        extra_env={"PYTHONPATH": str(REPO / "widgets")},   # if the package is not installed
    )

    @pytest.mark.browser
    @pytest.mark.parametrize("ui", ["lab", "notebook"])
    def test_tour(browser_run, ui):                   # fixture from conftest.py
        res = browser_run(TOUR, ui)                   # RunResult; raises on any failure
        assert res.final_text("pg-readout") != "..."

Checking every view of a notebook (``Scenario(check_views=True, view_names=(...))``): after
run-all, every top-level ``.pg-view`` is checked for a painted, non-flat canvas of a sensible
size, nothing past its output area's right edge, no widget error, no truncated text, and one
input on its ``pg-primary`` control repainting the canvas (:class:`ViewRecord`); screenshots
``<name>-<ui>-viewN-<view>-loaded.png`` / ``-moved.png``. The results are data in
``RunResult.views`` (never raised), so one run reports every view; console errors
(``RunResult.console_errors``, IGNORED_CONSOLE_ERRORS aside) and page errors are data too.
See test_notebooks_in_browser.py, and test_view_checks.py for a notebook of deliberate defects.

Facts this relies on:
* Playwright's own browser download cannot work on these machines; Debian's
  ``/usr/bin/chromium`` (a shell wrapper that ``exec``s ``/usr/lib/chromium/chromium``
  and prints a harmless "[: ... unexpected operator") is launched with
  ``launch_persistent_context(executable_path=...)`` and a fresh profile per run.
* Lab is opened at ``/lab`` + ``docmanager:open``, never ``/lab/tree/<nb>``:
  jupyterlab_server stores ``treePath`` in the ``page_config_data`` dict that
  Notebook 7 copies, so after one /lab/tree page every Notebook 7 page on that
  server raises "Command 'filebrowser:open-path' not registered".
* Notebook 7.6 raises "Cannot read properties of undefined (reading 'schema')"
  on every load; exactly that page error is ignored (Notebook 7 only).
* Notebook 7 swallows arrow keys on sliders, so the track is clicked there.

Environment knobs: PHASEGLASS_BROWSER_TESTS=1 (missing prerequisites fail
instead of skip), PHASEGLASS_CHROMIUM (default /usr/bin/chromium),
PHASEGLASS_ARTEFACTS_DIR (default <repo>/test-artefacts/browser),
PHASEGLASS_KEEP_TMP=1 (keep the throw-away server folder for debugging).
"""

from __future__ import annotations

import dataclasses
import importlib.util
import json
import os
import re
import secrets
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
import urllib.error
import urllib.parse
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence

REPO_ROOT = Path(__file__).resolve().parents[2]
CHROMIUM_PATH = os.environ.get("PHASEGLASS_CHROMIUM", "/usr/bin/chromium")
DEFAULT_ARTEFACTS_DIR = Path(
    os.environ.get("PHASEGLASS_ARTEFACTS_DIR", REPO_ROOT / "test-artefacts" / "browser")
)

#: Flags required on these machines (no sandbox as root, no GPU, no network chatter).
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
]
#: The setup of issue 9: a 1280 x 1000 window; in Lab the file browser stays open on the left,
#: which leaves an output column of about 800 px (measured and recorded in RunResult.layout).
VIEWPORT = {"width": 1280, "height": 1000}

#: Notebook 7.6 logs exactly this page error on load; it is harmless.
NOTEBOOK7_IGNORED_PAGE_ERRORS = (
    re.compile(r"Cannot read properties of undefined \(reading 'schema'\)"),
)

#: Console messages of type "error" that are harmless, as (ui, message pattern, pattern of the
#: message's source address). Any other console error in Lab or Notebook 7 (e.g. ipympl's
#: "Error setting state: ... drawImage ... 'broken' state" of issue 9) is recorded in
#: RunResult.console_errors and fails the notebook scenarios. Add an entry only with the reason.
IGNORED_CONSOLE_ERRORS: tuple[tuple[str, re.Pattern, re.Pattern], ...] = (
    # Notebook 7.6 asks for two .woff2 icon-font files under /static/notebook/ that the server
    # refuses ("... is not in root static directory", 403); the browser then loads the same
    # fonts from the next @font-face source (.woff), so button icons still show.
    ("notebook", re.compile(r"^Failed to load resource: the server responded with a status of 403"),
     re.compile(r"/static/notebook/[0-9a-f]+\.woff2(\?|$)")),
)

#: ipympl's console error when a frame it received is not an image, and what it has meant here
BROKEN_FRAME_ERROR = "The HTMLImageElement provided is in the 'broken' state"
BROKEN_FRAME_HINT = (
    "the console shows \"drawImage ... 'broken' state\": a frame sent before the front end was "
    "ready was not a PNG (ipympl 0.10's Canvas.send_binary, while it syncs _data_url, rebinds "
    "`data` to the raw RGBA buffer and sends that; a canvas drawn by a background thread during "
    "the cell hits it, and the canvas stays 0x0)")

#: Thresholds of the per-view checks (check_views).
MIN_CANVAS_CSS = (200, 150)      # canvas at least this wide x high, in CSS px
MAX_FLAT_SHARE = 0.95            # the most common colour covers less than this share of pixels
EDGE_TOLERANCE_PX = 1.0          # sub-pixel rounding allowed at the output area's right edge
PAINT_CAP_S = 20.0               # a view's canvas must show ink this long after the cells ran
CONTROL_CHANGE_CAP_S = 10.0      # "within a few seconds": one input, then the canvas must change
WIDGET_ERROR_TEXT = "Error displaying widget"
#: what ipywidgets' Lab renderer shows until a widget's model arrives; still there once the
#: run and the view checks are over = a widget that never rendered
WIDGET_LOADING_TEXT = "Loading widget..."

#: Lab user settings written into a throw-away settings dir (never into the venv).
LAB_USER_SETTINGS = {
    "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {
        "fetchNews": "false",
        "checkForUpdates": False,
    },
    # Attach every cell to the DOM so widgets below the fold exist and can be found.
    "@jupyterlab/notebook-extension/tracker.jupyterlab-settings": {"windowingMode": "none"},
    "@jupyterlab/extensionmanager-extension/plugin.jupyterlab-settings": {"enabled": False},
    "@jupyterlab/docmanager-extension/plugin.jupyterlab-settings": {"autosave": False},
}


#: One line per finished browser run (timings and input->repaint latency); conftest.py prints
#: them in pytest's terminal summary, so they show even when output is captured (as in CI).
SUMMARIES: list[str] = []


def log(msg: str) -> None:
    print(f"[browser] {msg}", flush=True)


# --------------------------------------------------------------------------- prerequisites


def install_hint() -> str:
    return f"run: sudo bash .ci/install-browser {sys.executable}"


def missing_prerequisites(ui: str = "lab") -> list[str]:
    """Human-readable list of what is missing to run a browser test in ``ui``."""
    missing = []
    if not (os.path.isfile(CHROMIUM_PATH) and os.access(CHROMIUM_PATH, os.X_OK)):
        missing.append(f"chromium not found at {CHROMIUM_PATH}; {install_hint()}")
    mods = ["playwright", "jupyterlab", "ipywidgets", "ipympl", "ipykernel"]
    if ui == "notebook":
        mods.append("notebook")
    for mod in mods:
        if importlib.util.find_spec(mod) is None:
            missing.append(f"python package '{mod}' not importable in {sys.executable}; {install_hint()}")
    return missing


# --------------------------------------------------------------------------- scenario description


@dataclass(frozen=True)
class SliderStep:
    """Move an ipywidgets slider (found by the CSS class given with ``.add_class``).

    In Lab the handle is focused and ``keys`` are pressed one at a time; in
    Notebook 7 (which swallows arrow keys) the track is clicked at the given
    fractions of its width, >= ``min_click_gap_s`` apart. After every single
    input the canvas with ``canvas_class`` (if any) must repaint with a
    different image and every element with a class in ``text_classes`` must
    show a different text.
    """

    slider_class: str
    canvas_class: str | None = None
    text_classes: tuple[str, ...] = ()
    keys: tuple[str, ...] = ("ArrowRight", "ArrowRight")
    track_fractions: tuple[float, ...] = (0.85, 0.15)
    mode: str = "auto"  # "auto" (lab: keys, notebook: track), "keys" or "track"
    min_click_gap_s: float = 0.35
    index: int = 0  # which match of the class, if the notebook shows several
    label: str = "slider"


@dataclass(frozen=True)
class CanvasClick:
    """Click an ipympl figure at fractions (fx, fy) of its image canvas (0,0 = top left)."""

    canvas_class: str
    points: tuple[tuple[float, float], ...] = ((0.3, 0.35), (0.7, 0.65))
    text_classes: tuple[str, ...] = ()
    expect_canvas_change: bool = True
    index: int = 0
    label: str = "canvas-click"


@dataclass(frozen=True)
class ButtonClick:
    """Click an ipywidgets button (found by its CSS class) ``clicks`` times.

    After every click the canvas (``canvas_class``, match ``canvas_index``) must
    repaint with a different image and every text class must change.
    """

    button_class: str
    canvas_class: str | None = None
    canvas_index: int = 0
    text_classes: tuple[str, ...] = ()
    clicks: int = 2
    index: int = 0
    label: str = "button"


Step = SliderStep | CanvasClick | ButtonClick

#: Names of the per-view checks, in the order they are reported.
VIEW_CHECKS = ("canvas", "fits", "no_widget_error", "labels", "control")


@dataclass(frozen=True)
class Scenario:
    name: str
    notebook: Path
    steps: tuple[Step, ...] = ()
    #: canvases (by class) that must be painted before interacting; defaults to
    #: every canvas class referenced by a step, else "any ipympl canvas".
    painted_canvas_classes: tuple[str, ...] | None = None
    #: extra CSS selectors that must be visible once the notebook has run
    ready_selectors: tuple[str, ...] = ()
    #: environment added to the server (and so to the kernel), e.g. PYTHONPATH
    extra_env: dict[str, str] = field(default_factory=dict)
    #: files/folders copied next to the notebook: default = the whole folder of the notebook
    copy_whole_folder: bool = True
    run_timeout_s: float = 90.0  # wait for all cells to finish
    #: after running all cells, check every ``.pg-view`` (see :meth:`_Run.check_views`)
    check_views: bool = False
    #: names of the views in notebook order (labels for reports and artefact files); when
    #: given, the number of ``.pg-view`` elements found must equal its length
    view_names: tuple[str, ...] = ()


@dataclass
class ViewRecord:
    """What :meth:`_Run.check_views` found for one ``.pg-view`` (in document order).

    ``checks`` maps each name in VIEW_CHECKS to ``{"ok": bool, "detail": str}``:

    * ``canvas``: exactly one ipympl image canvas, >= MIN_CANVAS_CSS, not one flat colour;
    * ``fits``: no descendant of the view (canvas, toolbar, widget boxes, labels, ...) reaches
      past the right edge of its output area (or cell); neither the view nor the output area
      scrolls horizontally;
    * ``no_widget_error``: no "Error displaying widget" in the view's output area;
    * ``labels``: no label, button, dropdown or number box in the view shows truncated text;
    * ``control``: one input on the view's ``pg-primary`` control (fallback: its first slider,
      toggle buttons or dropdown) changes the view's canvas within CONTROL_CHANGE_CAP_S.
    """

    index: int
    name: str
    control: str = ""
    primary_marked: bool = False
    latency_ms: float | None = None
    checks: dict[str, dict] = field(default_factory=dict)
    metrics: dict[str, Any] = field(default_factory=dict)
    screenshots: list[str] = field(default_factory=list)

    def set(self, check: str, ok: bool, detail: str = "") -> None:
        self.checks[check] = {"ok": bool(ok), "detail": detail}

    def failures(self) -> list[str]:
        return [f"{c}: {v['detail']}" for c, v in self.checks.items() if not v["ok"]]

    def line(self) -> str:
        order = [c for c in VIEW_CHECKS if c in self.checks] + [
            c for c in self.checks if c not in VIEW_CHECKS]
        marks = " ".join(f"{c}={'ok' if self.checks[c]['ok'] else 'FAIL'}" for c in order)
        return f"view {self.index + 1} {self.name}: {marks}; control: {self.control}"


@dataclass
class InputRecord:
    step: str
    what: str
    canvas_latency_ms: float | None
    text_latency_ms: dict[str, float]
    texts_before: dict[str, str]
    texts_after: dict[str, str]


@dataclass
class RunResult:
    scenario: str
    ui: str
    attempt: int
    seconds: float
    inputs: list[InputRecord] = field(default_factory=list)
    screenshots: list[str] = field(default_factory=list)
    page_errors: list[str] = field(default_factory=list)
    ignored_page_errors: list[str] = field(default_factory=list)
    console_errors: list[str] = field(default_factory=list)
    ignored_console_errors: list[str] = field(default_factory=list)
    #: "Error displaying widget" anywhere on the page (checked after the run and at the end),
    #: or "Loading widget..." still showing at the end
    widget_errors: list[str] = field(default_factory=list)
    #: window, left panel, output column width (px) as measured in the page
    layout: dict[str, Any] = field(default_factory=dict)
    views: list[ViewRecord] = field(default_factory=list)
    timings: dict[str, float] = field(default_factory=dict)

    def step_inputs(self, label: str) -> list[InputRecord]:
        return [r for r in self.inputs if r.step == label]

    def final_text(self, cls: str) -> str | None:
        for r in reversed(self.inputs):
            if cls in r.texts_after:
                return r.texts_after[cls]
        return None

    def view_failures(self) -> list[str]:
        return [f"view {v.index + 1} {v.name}: {f}" for v in self.views for f in v.failures()]

    def views_report(self) -> str:
        return "\n".join(v.line() for v in self.views)

    def latencies_ms(self) -> list[float]:
        return [r.canvas_latency_ms for r in self.inputs if r.canvas_latency_ms is not None]

    def summary(self) -> str:
        lat = self.latencies_ms()
        parts = [f"{self.scenario}/{self.ui}: attempt {self.attempt}, {self.seconds:.1f}s total"]
        parts += [f"{k}={v:.1f}s" for k, v in self.timings.items()]
        if lat:
            parts.append(
                f"input->repaint latency ms: median {statistics.median(lat):.0f}, "
                f"min {min(lat):.0f}, max {max(lat):.0f} (n={len(lat)})"
            )
        return "; ".join(parts)


class BrowserTestError(AssertionError):
    pass


# --------------------------------------------------------------------------- Jupyter server


def _http(method: str, url: str, token: str, timeout: float = 10.0) -> Any:
    req = urllib.request.Request(url, method=method, headers={"Authorization": f"token {token}"})
    with urllib.request.urlopen(req, timeout=timeout) as resp:
        body = resp.read()
    return json.loads(body) if body else None


class JupyterServer:
    """``python -m jupyterlab`` on 127.0.0.1 with everything user-level in a throw-away dir.

    HOME, JUPYTER_CONFIG_DIR, JUPYTER_DATA_DIR, JUPYTER_RUNTIME_DIR, IPYTHONDIR,
    MPLCONFIGDIR, TMPDIR and the Lab settings/workspaces dirs all point into it.
    Lab extensions (ipympl, ipywidgets) stay reachable because jupyter_core
    always keeps ``<sys.prefix>/share/jupyter`` on the data path, and server
    extensions because ``<sys.prefix>/etc/jupyter`` stays on the config path.
    """

    def __init__(self, notebook_dir: Path, extra_env: dict[str, str] | None = None,
                 copy_whole_folder: bool = True, only_files: Sequence[Path] = ()):
        self.source_dir = Path(notebook_dir).resolve()
        self.extra_env = dict(extra_env or {})
        self.copy_whole_folder = copy_whole_folder
        self.only_files = list(only_files)
        self.token = secrets.token_hex(16)
        self.base: Path | None = None
        self.root_dir: Path | None = None
        self.proc: subprocess.Popen | None = None
        self.port: int | None = None
        self.log_path: Path | None = None
        self._log_fh = None

    # -- lifecycle
    def start(self, timeout: float = 90.0) -> "JupyterServer":
        self.base = Path(tempfile.mkdtemp(prefix="pg-browser-"))
        d = {n: self.base / n for n in (
            "home", "config", "data", "runtime", "ipython", "mpl", "tmp", "lab-settings",
            "lab-workspaces", "root")}
        for n, p in d.items():
            if n != "root":
                p.mkdir(parents=True)
        if self.copy_whole_folder:
            shutil.copytree(self.source_dir, d["root"], ignore=shutil.ignore_patterns(
                "__pycache__", ".ipynb_checkpoints", "test-artefacts", ".pytest_cache"))
        else:
            d["root"].mkdir()
            for f in self.only_files:
                (shutil.copytree if Path(f).is_dir() else shutil.copy2)(f, d["root"] / Path(f).name)
        self.root_dir = d["root"]
        for rel, content in LAB_USER_SETTINGS.items():
            p = d["lab-settings"] / rel
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_text(json.dumps(content, indent=2))

        env = {k: v for k, v in os.environ.items() if not k.startswith(("JUPYTER", "JPY_"))}
        env.update(
            HOME=str(d["home"]),
            JUPYTER_CONFIG_DIR=str(d["config"]),
            JUPYTER_DATA_DIR=str(d["data"]),
            JUPYTER_RUNTIME_DIR=str(d["runtime"]),
            JUPYTERLAB_SETTINGS_DIR=str(d["lab-settings"]),
            JUPYTERLAB_WORKSPACES_DIR=str(d["lab-workspaces"]),
            IPYTHONDIR=str(d["ipython"]),
            MPLCONFIGDIR=str(d["mpl"]),
            TMPDIR=str(d["tmp"]),
            PYDEVD_DISABLE_FILE_VALIDATION="1",
            PYTHONUNBUFFERED="1",
        )
        # keep the venv's scripts first on PATH (kernels, jupyter subcommands)
        env["PATH"] = os.path.dirname(sys.executable) + os.pathsep + env.get("PATH", "")
        env.update(self.extra_env)

        cmd = [
            sys.executable, "-m", "jupyterlab",
            "--no-browser",
            "--ServerApp.ip=127.0.0.1",
            "--ServerApp.port=0",  # OS-assigned free port, read back from the runtime file
            "--ServerApp.port_retries=0",
            f"--IdentityProvider.token={self.token}",
            f"--ServerApp.root_dir={self.root_dir}",
            f"--LabApp.user_settings_dir={d['lab-settings']}",
            f"--LabApp.workspaces_dir={d['lab-workspaces']}",
            "--LabApp.expose_app_in_browser=True",
            "--JupyterNotebookApp.expose_app_in_browser=True",
            "--LabApp.news_url=",
            "--LabApp.check_for_updates_class=jupyterlab.handlers.announcements.NeverCheckForUpdate",
        ]
        if hasattr(os, "geteuid") and os.geteuid() == 0:
            cmd.append("--allow-root")
        self.log_path = self.base / "jupyter-server.log"
        self._log_fh = open(self.log_path, "wb")
        t0 = time.monotonic()
        self.proc = subprocess.Popen(cmd, cwd=self.root_dir, env=env, stdin=subprocess.DEVNULL,
                                     stdout=self._log_fh, stderr=subprocess.STDOUT,
                                     start_new_session=True)
        deadline = t0 + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"jupyter server exited with {self.proc.returncode}:\n{self.log_tail()}")
            if self.port is None:
                self.port = self._read_port(d["runtime"])
            if self.port is not None:
                try:
                    _http("GET", self.url("/api/status"), self.token, timeout=3)
                    log(f"jupyter server pid {self.proc.pid} on 127.0.0.1:{self.port} "
                        f"ready in {time.monotonic() - t0:.1f}s (root {self.root_dir})")
                    return self
                except (urllib.error.URLError, OSError, ValueError):
                    pass
            time.sleep(0.25)
        self.stop()
        raise RuntimeError(f"jupyter server not ready after {timeout}s:\n{self.log_tail()}")

    def _read_port(self, runtime_dir: Path) -> int | None:
        assert self.proc is not None
        for f in runtime_dir.glob(f"jpserver-{self.proc.pid}.json"):
            try:
                info = json.loads(f.read_text())
                return int(info["port"]) or None
            except (ValueError, KeyError, OSError):
                return None
        return None

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            try:
                _http("POST", self.url("/api/shutdown"), self.token, timeout=5)
            except Exception:
                pass
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                try:
                    os.killpg(self.proc.pid, signal.SIGTERM)  # our own session/process group
                    self.proc.wait(timeout=10)
                except (subprocess.TimeoutExpired, ProcessLookupError):
                    try:
                        os.killpg(self.proc.pid, signal.SIGKILL)
                    except ProcessLookupError:
                        pass
                    self.proc.wait(timeout=10)
        if self._log_fh:
            self._log_fh.close()
            self._log_fh = None
        if self.base is not None and os.environ.get("PHASEGLASS_KEEP_TMP") != "1":
            if self.log_path and self.log_path.exists():
                DEFAULT_ARTEFACTS_DIR.mkdir(parents=True, exist_ok=True)
                shutil.copy2(self.log_path, DEFAULT_ARTEFACTS_DIR / f"jupyter-server-{self.source_dir.name}.log")
            shutil.rmtree(self.base, ignore_errors=True)
            self.base = None

    # -- helpers
    def url(self, path: str, with_token: bool = False) -> str:
        u = f"http://127.0.0.1:{self.port}{path}"
        if with_token:
            u += ("&" if "?" in u else "?") + "token=" + self.token
        return u

    def page_url(self, rel_path: str, ui: str) -> str:
        quoted = urllib.parse.quote(rel_path)
        if ui == "lab":
            # Not /lab/tree/<path>: jupyterlab_server writes treePath into the page_config dict
            # it shares with Notebook 7, so every later /notebooks/ page on this server would
            # raise "Command 'filebrowser:open-path' not registered". The harness opens the
            # notebook with the docmanager:open command instead (see _Run.load_and_run).
            return self.url("/lab", with_token=True)
        if ui == "notebook":
            return self.url(f"/notebooks/{quoted}", with_token=True)
        raise ValueError(f"unknown ui {ui!r} (use 'lab' or 'notebook')")

    def sessions(self) -> list[dict]:
        return _http("GET", self.url("/api/sessions"), self.token) or []

    def kernel_for(self, rel_path: str) -> dict | None:
        for s in self.sessions():
            if s.get("path") == rel_path and s.get("kernel"):
                return _http("GET", self.url(f"/api/kernels/{s['kernel']['id']}"), self.token)
        return None

    def shutdown_sessions(self, rel_path: str) -> None:
        """Delete sessions (and their kernels) for a notebook so each run starts fresh."""
        for s in self.sessions():
            if s.get("path") == rel_path:
                try:
                    _http("DELETE", self.url(f"/api/sessions/{s['id']}"), self.token)
                except urllib.error.HTTPError:
                    pass

    def reset_workspaces(self) -> None:
        """Forget Lab's saved layout. A workspace saved by a Lab run makes a later Notebook 7
        page on the same server raise "Command 'filebrowser:open-path' not registered"."""
        if self.base is not None:
            for f in (self.base / "lab-workspaces").glob("*"):
                f.unlink()

    def log_tail(self, n: int = 40) -> str:
        if self._log_fh:
            self._log_fh.flush()
        if self.log_path and self.log_path.exists():
            return "\n".join(self.log_path.read_text(errors="replace").splitlines()[-n:])
        return "(no log)"


# --------------------------------------------------------------------------- in-page helpers

INIT_JS = r"""
(() => {
  const TOL = __EDGE_TOLERANCE__, WIDGET_ERROR = "__WIDGET_ERROR__", WIDGET_LOADING = "__WIDGET_LOADING__";
  if (window.__pg) return;
  const pg = window.__pg = {lastInput: null, watch: null, restored: false};
  const mark = (e) => { if (pg.lastInput === null) pg.lastInput = {type: e.type, t: performance.now()}; };
  window.addEventListener('keydown', mark, true);
  window.addEventListener('pointerdown', mark, true);
  pg.ink = (c) => {
    if (!c || !c.width || !c.height) return 0;
    const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
    let ink = 0;
    for (let i = 0; i < d.length; i += 4) {
      if (d[i + 3] > 16 && (d[i] < 235 || d[i + 1] < 235 || d[i + 2] < 235)) ink++;
    }
    return ink;
  };
  pg.text = (el) => (el.innerText || el.textContent || '').trim();
  pg.arm = (canvases, texts) => {
    pg.lastInput = null;
    pg.armedAt = performance.now();
    pg.watch = {
      canvases: canvases.map(c => ({el: c, base: c.toDataURL(), at: null})),
      texts: texts.map(t => ({el: t, base: pg.text(t), at: null})),
    };
    return pg.watch.texts.map(t => t.base);
  };
  pg.poll = () => {
    const w = pg.watch, now = performance.now();
    let done = true;
    for (const c of w.canvases) {
      if (c.at === null) { if (c.el.toDataURL() !== c.base) c.at = now; else done = false; }
    }
    for (const t of w.texts) {
      if (t.at === null) { if (pg.text(t.el) !== t.base) t.at = now; else done = false; }
    }
    return done;
  };
  pg.report = () => {
    // latency from the input event; from arming when the input fires no key/pointer event
    const w = pg.watch, t0 = pg.lastInput ? pg.lastInput.t : pg.armedAt;
    const rel = (at) => (at === null || t0 === null) ? null : at - t0;
    return {input: pg.lastInput,
            canvases: w.canvases.map(c => rel(c.at)),
            texts: w.texts.map(t => ({latency: rel(t.at), text: pg.text(t.el), before: t.base}))};
  };
  // Find the notebook panel for a path in Lab or Notebook 7.
  pg.panel = (path) => {
    const app = window.jupyterapp;
    if (!app || !app.shell) return null;
    const cw = app.shell.currentWidget;
    if (cw && cw.context && cw.context.path === path) return cw;
    try {
      for (const w of app.shell.widgets('main')) if (w.context && w.context.path === path) return w;
    } catch (e) {}
    return null;
  };
  pg.kernelState = (path) => {
    const p = pg.panel(path);
    if (!p) return 'no-panel';
    const k = p.sessionContext && p.sessionContext.session && p.sessionContext.session.kernel;
    if (!k) return 'no-kernel';
    return `${k.connectionStatus}/${k.status}`;
  };
  pg.progress = (path) => {
    const p = pg.panel(path);
    if (!p || !p.content || !p.content.model) return {error: 'no-panel'};
    const cells = p.content.model.cells;
    let n = 0, done = 0; const errors = [];
    for (let i = 0; i < cells.length; i++) {
      const c = cells.get(i);
      if (c.type !== 'code') continue;
      const src = c.sharedModel ? c.sharedModel.getSource() : (c.value ? c.value.text : 'x');
      if (!src.trim()) continue;
      n++;
      if (c.executionCount !== null && c.executionCount !== undefined) done++;
      for (let j = 0; j < c.outputs.length; j++) {
        const o = c.outputs.get(j);
        if (o.type === 'error') {
          const js = o.toJSON();
          errors.push(`cell ${i}: ${js.ename}: ${js.evalue}`);
        }
      }
    }
    return {n, done, errors, kernel: pg.kernelState(path)};
  };
  // ---- per-view checks (check_views)
  pg.describe = (el) => {
    const all = [...el.classList];
    const cls = [...all.filter(c => c.startsWith('pg-')),
                 ...all.filter(c => /^(widget-|jupyter-matplotlib|jp-|noUi-(target|base|handle)$)/.test(c))]
      .slice(0, 3).join('.');
    const txt = (el.innerText || el.value || '').trim().replace(/\s+/g, ' ').slice(0, 30);
    return el.tagName.toLowerCase() + (cls ? '.' + cls : '') + (txt ? ` "${txt}"` : '');
  };
  pg.visible = (el) => {
    const r = el.getBoundingClientRect();
    if (r.width < 1 || r.height < 1) return false;
    const cs = getComputedStyle(el);
    return cs.visibility !== 'hidden' && cs.display !== 'none';
  };
  // share of the most common colour among the canvas's pixels (1 = one flat colour)
  pg.flatShare = (c) => {
    if (!c || !c.width || !c.height) return 1;
    const d = new Uint32Array(c.getContext('2d').getImageData(0, 0, c.width, c.height).data.buffer);
    const counts = new Map();
    let best = 0;
    for (let i = 0; i < d.length; i++) {
      const n = (counts.get(d[i]) || 0) + 1;
      counts.set(d[i], n);
      if (n > best) best = n;
    }
    return best / d.length;
  };
  pg.viewCanvases = (view) => [...view.querySelectorAll('.jupyter-matplotlib-canvas-div > canvas:first-of-type')]
    .filter(c => c.closest('.pg-view') === view);
  pg.viewReport = (view) => {
    const out = view.closest('.jp-OutputArea-output');
    const cell = view.closest('.jp-Cell');
    const rep = {};
    const canvases = pg.viewCanvases(view);
    rep.n_canvases = canvases.length;
    const describe = (c) => {
      const r = c.getBoundingClientRect();
      return {css_w: Math.round(r.width), css_h: Math.round(r.height), px_w: c.width,
              px_h: c.height, flat_share: pg.flatShare(c)};
    };
    if (canvases.length) rep.canvas = describe(canvases[0]);
    // further canvases a view shows on request (e.g. a grid of ranked pairs)
    rep.more_canvases = canvases.slice(1).map(describe);
    const vr = view.getBoundingClientRect();
    rep.view = {left: vr.left, right: vr.right, width: vr.width, scroll_w: view.scrollWidth,
                client_w: view.clientWidth};
    if (out) {
      const orr = out.getBoundingClientRect();
      rep.output = {left: orr.left, right: orr.right, width: orr.width, scroll_w: out.scrollWidth,
                    client_w: out.clientWidth};
    }
    if (cell) rep.cell_right = cell.getBoundingClientRect().right;
    const limit = Math.min(out ? out.getBoundingClientRect().right : Infinity,
                           cell ? cell.getBoundingClientRect().right : Infinity);
    rep.limit = limit;
    const over = [];
    let maxRight = vr.right;
    for (const el of [view, ...view.querySelectorAll('*')]) {
      if (el.tagName === 'OPTION' || !pg.visible(el)) continue;
      const r = el.getBoundingClientRect();
      maxRight = Math.max(maxRight, r.right);
      // report the outermost offender only (its children are past the edge with it)
      if (r.right > limit + TOL && !(el.parentElement && el !== view &&
          el.parentElement.getBoundingClientRect().right > limit + TOL)) {
        over.push({what: pg.describe(el), by: Math.round(r.right - limit)});
      }
    }
    rep.max_right = maxRight;
    rep.overflow = over;
    // truncated text: ellipsis boxes narrower than their text; dropdowns narrower than the choice
    const cut = [];
    for (const el of view.querySelectorAll('*')) {
      if (!pg.visible(el)) continue;
      const cs = getComputedStyle(el);
      const isSelect = el.tagName === 'SELECT';
      const isBox = el.tagName === 'INPUT' && /^(text|number|)$/.test(el.type || '');
      if (isSelect || isBox) {
        // the shown text (the chosen option, or a number box's value) against the box's room
        const shown = isSelect ? (el.options[el.selectedIndex] || {}).text : el.value;
        if (!shown) continue;
        const ctx = (pg._measure = pg._measure || document.createElement('canvas').getContext('2d'));
        ctx.font = `${cs.fontWeight} ${cs.fontSize} ${cs.fontFamily}`;
        const pad = parseFloat(cs.paddingLeft) + parseFloat(cs.paddingRight);
        const room = el.clientWidth - pad;
        const need = ctx.measureText(shown).width;
        if (need > room + 1) cut.push({what: `${el.tagName.toLowerCase()} [${shown}]`, need: Math.round(need), room: Math.round(room)});
      } else if (cs.textOverflow === 'ellipsis' && el.scrollWidth > el.clientWidth + 1 &&
                 (el.innerText || '').trim()) {
        cut.push({what: pg.describe(el), need: el.scrollWidth, room: el.clientWidth});
      }
    }
    rep.truncated = cut;
    const otext = out ? (out.textContent || '') : '';
    rep.widget_error = otext.includes(WIDGET_ERROR) || !!(out && out.querySelector('.jupyter-widgets-error-widget'));
    return rep;
  };
  // output areas showing WIDGET_ERROR or ipywidgets' error widget (a view that failed to
  // render: "Click to show javascript error"), or, with loading=true, still "Loading widget..."
  pg.widgetErrors = (loading) => {
    const found = [];
    for (const el of document.querySelectorAll('.jp-OutputArea-output')) {
      const t = el.textContent || '';
      if (t.includes(WIDGET_ERROR) || el.querySelector('.jupyter-widgets-error-widget') ||
          (loading && t.includes(WIDGET_LOADING))) {
        const cell = el.closest('.jp-Cell');
        const cells = cell && cell.parentElement ? [...cell.parentElement.children].filter(
          c => c.classList.contains('jp-Cell')) : [];
        found.push(`cell ${cells.indexOf(cell)}: ${t.trim().replace(/\s+/g, ' ').slice(0, 160)}`);
      }
    }
    return found;
  };
})();
"""

INIT_JS = INIT_JS.replace("__EDGE_TOLERANCE__", repr(EDGE_TOLERANCE_PX)).replace(
    "__WIDGET_ERROR__", WIDGET_ERROR_TEXT).replace("__WIDGET_LOADING__", WIDGET_LOADING_TEXT)

# ipympl draws into the first <canvas> of the div; the second is the zoom/rubber-band overlay
MPL_IMAGE_CANVAS = ".jupyter-matplotlib-canvas-div > canvas:first-of-type"
#: views at the top level (a view may open another inside itself)
VIEW_SELECTOR = ".pg-view:not(.pg-view .pg-view)"


def canvas_selector(canvas_class: str | None) -> str:
    if canvas_class is None:
        return MPL_IMAGE_CANVAS
    # ipympl puts add_class() classes on the widget's root element (an ancestor of the canvases)
    return f".{canvas_class} {MPL_IMAGE_CANVAS}"


# --------------------------------------------------------------------------- watchdog


class _Watchdog:
    """Outer timeout for one browser run: kills *our* chromium (found by its unique profile dir)."""

    def __init__(self, seconds: float, profile_dir: Path):
        self.seconds = seconds
        self.profile_dir = str(profile_dir)
        self.fired = False
        self._timer = threading.Timer(seconds, self._fire)
        self._timer.daemon = True

    def __enter__(self):
        self._timer.start()
        return self

    def __exit__(self, *exc):
        self._timer.cancel()

    def _pids(self) -> list[int]:
        needle = self.profile_dir.encode()
        pids = []
        for d in os.listdir("/proc"):
            if not d.isdigit() or int(d) == os.getpid():
                continue
            try:
                with open(f"/proc/{d}/cmdline", "rb") as fh:
                    if needle in fh.read():
                        pids.append(int(d))
            except OSError:
                pass
        return pids

    def _fire(self):
        self.fired = True
        pids = self._pids()
        log(f"WATCHDOG: run exceeded {self.seconds:.0f}s, killing chromium pids {pids}")
        for pid in pids:
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass


# --------------------------------------------------------------------------- one browser run


class _Run:
    def __init__(self, server: JupyterServer, scenario: Scenario, ui: str, artefacts: Path,
                 attempt: int, deadline: float, profile: Path):
        self.profile = profile
        self.server, self.scenario, self.ui = server, scenario, ui
        self.artefacts, self.attempt, self.deadline = artefacts, attempt, deadline
        self.rel_path = scenario.notebook.name
        self.result = RunResult(scenario.name, ui, attempt, 0.0)
        self.console: list[str] = []
        self.shot_no = 0
        self.page = None
        self.t_start = time.monotonic()

    # -- utilities
    def remaining_ms(self, cap_s: float | None = None) -> float:
        rem = self.deadline - time.monotonic()
        if rem <= 0:
            raise BrowserTestError(f"{self.ui}: run deadline exceeded")
        return 1000.0 * (min(rem, cap_s) if cap_s else rem)

    def shot(self, tag: str, focus=None) -> Path:
        """Screenshot of the page (with ``focus``'s output area scrolled into view) and, if
        ``focus`` is given, a second picture of just that output area (``...-output.png``)."""
        self.shot_no += 1
        stem = f"{self.scenario.name}-{self.ui}-{self.shot_no:02d}-{tag}"
        path = self.artefacts / f"{stem}.png"
        area = None
        if focus is not None:
            try:
                area = focus.locator(
                    "xpath=ancestor::div[contains(concat(' ', @class, ' '), ' jp-OutputArea-output ')][1]")
                if not area.count():
                    area = focus
                area.scroll_into_view_if_needed(timeout=5000)
                area.evaluate("el => el.scrollIntoView({block: 'center'})")
            except Exception:
                area = None
        self.page.screenshot(path=str(path), timeout=15000)
        self.result.screenshots.append(str(path))
        if area is not None:
            try:
                out = self.artefacts / f"{stem}-output.png"
                area.screenshot(path=str(out), timeout=15000)
                self.result.screenshots.append(str(out))
            except Exception as e:
                log(f"{self.ui}: element screenshot failed: {e}")
        return path

    def fail(self, msg: str):
        raise BrowserTestError(f"{self.scenario.name}/{self.ui}: {msg}")

    def check_dialog(self):
        dlg = self.page.locator(".jp-Dialog")
        if dlg.count():
            self.fail(f"unexpected dialog: {dlg.first.inner_text()[:300]!r}")

    def wait_for(self, js: str, arg: Any = None, cap_s: float = 60.0, what: str = "", polling: Any = 100):
        from playwright.sync_api import TimeoutError as PWTimeout

        try:
            return self.page.wait_for_function(js, arg=arg, polling=polling,
                                               timeout=self.remaining_ms(cap_s))
        except PWTimeout:
            self.check_dialog()
            self.fail(f"timed out waiting for {what or js}")

    def locate(self, selector: str, index: int):
        loc = self.page.locator(selector)
        n = loc.count()
        if n <= index:
            self.fail(f"selector {selector!r} matched {n} element(s), need index {index}")
        return loc.nth(index)

    # -- phases
    def open(self, pw):
        ctx = pw.chromium.launch_persistent_context(
            str(self.profile), executable_path=CHROMIUM_PATH, headless=True, args=CHROMIUM_ARGS,
            viewport=VIEWPORT, device_scale_factor=1, timeout=60000,
        )
        self.ctx = ctx
        ctx.add_init_script(INIT_JS)
        self.page = ctx.pages[0] if ctx.pages else ctx.new_page()
        self.page.set_default_timeout(30000)
        self.page.on("pageerror", self._on_pageerror)
        self.page.on("console", self._on_console)
        # console errors say "Failed to load resource" without the address: log it here
        self.page.on("response", lambda r: r.status >= 400 and self.console.append(
            f"{self._stamp()} HTTP {r.status} {r.request.method} {r.url.split('?')[0]}"))
        return ctx

    def _on_console(self, m):
        self.console.append(f"{self._stamp()} {m.type}: {m.text}")
        if m.type != "error":
            return
        text = m.text
        try:
            source = (m.location or {}).get("url", "")
        except Exception:  # noqa: BLE001 - location is best effort
            source = ""
        ignored = any(ui == self.ui and pm.search(text) and pu.search(source)
                      for ui, pm, pu in IGNORED_CONSOLE_ERRORS)
        if self.ui == "notebook" and any(p.search(text) for p in NOTEBOOK7_IGNORED_PAGE_ERRORS):
            ignored = True
        if ignored:
            self.result.ignored_console_errors.append(f"{text} ({source})")
        else:
            self.result.console_errors.append(text + (f" ({source})" if source else ""))
            log(f"{self.ui}: CONSOLE ERROR {text[:400]}")

    def _stamp(self) -> str:
        return f"[{time.monotonic() - self.t_start:7.2f}s]"

    def _on_pageerror(self, err):
        text = f"{getattr(err, 'name', '')}: {getattr(err, 'message', err)}"
        self.console.append(f"{self._stamp()} PAGEERROR {text}")
        ignored = NOTEBOOK7_IGNORED_PAGE_ERRORS if self.ui == "notebook" else ()
        if any(p.search(text) for p in ignored):
            self.result.ignored_page_errors.append(text)
        else:
            self.result.page_errors.append(text)

    def load_and_run(self):
        t0 = time.monotonic()
        self.server.shutdown_sessions(self.rel_path)
        self.server.reset_workspaces()
        self.page.goto(self.server.page_url(self.rel_path, self.ui), wait_until="domcontentloaded",
                       timeout=self.remaining_ms(60))
        self.wait_for("() => !!(window.jupyterapp && window.jupyterapp.shell && window.__pg)",
                      what="window.jupyterapp (expose_app_in_browser)")
        self.page.evaluate("() => { window.jupyterapp.restored.then(() => { window.__pg.restored = true; }); }")
        self.wait_for("() => window.__pg.restored", what="app.restored")
        if self.ui == "lab":
            # issue 9's setup: file browser open on the left, right side bar closed
            self.page.evaluate(
                """() => { const s = window.jupyterapp.shell;
                     s.activateById('filebrowser'); s.expandLeft(); s.collapseRight(); }""")
            self.page.evaluate(
                """(p) => { window.jupyterapp.commands.execute('docmanager:open', {path: p})
                     .catch(e => { window.__pg.openError = String(e); }); return true; }""",
                self.rel_path)
            self.wait_for("(p) => !!window.__pg.panel(p) || !!window.__pg.openError", arg=self.rel_path,
                          what=f"notebook panel for {self.rel_path}")
            err = self.page.evaluate("() => window.__pg.openError || null")
            if err:
                self.fail(f"docmanager:open {self.rel_path!r} failed: {err}")
        self.wait_for("(p) => window.__pg.kernelState(p) === 'connected/idle'", arg=self.rel_path,
                      what="connected idle kernel", cap_s=90)
        # the page can report idle while the server still sees start-up traffic: poll the server
        deadline = time.monotonic() + min(30.0, self.remaining_ms(30) / 1000.0)
        k = self.server.kernel_for(self.rel_path)
        while (not k or k.get("execution_state") != "idle") and time.monotonic() < deadline:
            time.sleep(0.25)
            k = self.server.kernel_for(self.rel_path)
        if not k or k.get("execution_state") != "idle":
            self.fail(f"server reports kernel not idle: {k}")
        self.result.timings["load"] = time.monotonic() - t0
        log(f"{self.ui}: page + kernel ready in {self.result.timings['load']:.1f}s "
            f"(kernel {k['id'][:8]}, {k.get('connections')} connection(s))")

        t1 = time.monotonic()
        # clear outputs (also resets execution counts) then run all, fire-and-forget
        cleared = self.page.evaluate(
            """(p) => { const app = window.jupyterapp; const panel = window.__pg.panel(p);
                 if (panel) app.shell.activateById(panel.id);
                 app.commands.execute('notebook:clear-all-cell-outputs');
                 const after = window.__pg.progress(p);
                 app.commands.execute('notebook:run-all-cells')
                    .catch(e => { window.__pg.runError = String(e); });
                 return after; }""",
            self.rel_path,
        )
        if not cleared.get("n"):
            self.fail(f"notebook has no code cells to run (or no panel): {cleared}")
        if cleared.get("done"):
            # completion is detected by every code cell getting an execution count again
            self.fail(f"clear-all-cell-outputs did not reset execution counts: {cleared}")
        cap = self.scenario.run_timeout_s
        end = time.monotonic() + cap
        prog: dict = {}
        while True:
            prog = self.page.evaluate("(p) => window.__pg.progress(p)", self.rel_path)
            run_error = self.page.evaluate("() => window.__pg.runError || null")
            if run_error:
                self.fail(f"notebook:run-all-cells failed: {run_error}")
            if prog.get("errors"):
                self.shot("cell-error")
                self.fail("cell raised: " + "; ".join(prog["errors"]))
            if prog.get("n") and prog["done"] == prog["n"] and prog["kernel"] == "connected/idle":
                break
            if time.monotonic() > end:
                self.check_dialog()
                self.fail(f"cells did not finish within {cap}s: {prog}")
            self.remaining_ms()
            time.sleep(0.2)
        self.result.timings["run_all"] = time.monotonic() - t1
        self.result.layout = self.page.evaluate(
            """() => { const s = window.jupyterapp.shell;
                 const out = document.querySelector('.jp-Notebook .jp-OutputArea-output');
                 return {window: [window.innerWidth, window.innerHeight],
                         left_panel_open: s.leftCollapsed === undefined ? null : !s.leftCollapsed,
                         output_width: out ? Math.round(out.getBoundingClientRect().width) : null}; }""")
        log(f"{self.ui}: layout {self.result.layout}")
        log(f"{self.ui}: ran {prog['n']} code cells in {self.result.timings['run_all']:.1f}s")

        t2 = time.monotonic()
        for sel in self.scenario.ready_selectors:
            self.page.locator(sel).first.wait_for(state="visible", timeout=self.remaining_ms(30))
        classes = self.scenario.painted_canvas_classes
        if classes is None:
            classes = tuple(dict.fromkeys(
                s.canvas_class for s in self.scenario.steps if getattr(s, "canvas_class", None)))
        selectors = [canvas_selector(c) for c in classes] or [MPL_IMAGE_CANVAS]
        for sel in selectors:
            self.page.locator(sel).first.wait_for(state="attached", timeout=self.remaining_ms(30))
            self.wait_for(
                "(sel) => { const c = document.querySelector(sel); return !!c && window.__pg.ink(c) > 200; }",
                arg=sel, what=f"painted canvas {sel!r}", cap_s=30)
            self.wait_stable(self.page.locator(sel).first)
        self.result.timings["paint"] = time.monotonic() - t2
        self.shot("loaded", focus=self.page.locator(selectors[0]).first)

    def wait_stable(self, canvas, quiet_s: float = 0.4, cap_s: float = 10.0):
        """Wait until the canvas image (a locator or an element handle) has not changed for
        ``quiet_s``; False if it still changed after ``cap_s``."""
        h = canvas.element_handle() if hasattr(canvas, "element_handle") else canvas
        last = h.evaluate("c => c.toDataURL()")
        since = time.monotonic()
        end = time.monotonic() + cap_s
        while time.monotonic() < end:
            time.sleep(0.1)
            cur = h.evaluate("c => c.toDataURL()")
            if cur != last:
                last, since = cur, time.monotonic()
            elif time.monotonic() - since >= quiet_s:
                return True
        log(f"{self.ui}: canvas still changing after {cap_s}s (continuing)")
        return False

    def one_input(self, step_label: str, what: str, canvas, texts: dict[str, Any],
                  do_input: Callable[[], None], expect_canvas: bool, cap_s: float = 20.0):
        canvases = [canvas.element_handle()] if (canvas is not None and expect_canvas) else []
        text_handles = [loc.element_handle() for loc in texts.values()]
        before = self.page.evaluate("([cs, ts]) => window.__pg.arm(cs, ts)", [canvases, text_handles])
        do_input()
        from playwright.sync_api import TimeoutError as PWTimeout

        try:
            self.page.wait_for_function("() => window.__pg.poll()", polling="raf",
                                        timeout=self.remaining_ms(cap_s))
        except PWTimeout:
            rep = self.page.evaluate("() => window.__pg.report()")
            self.shot(f"{step_label}-no-change")
            missing = []
            if canvases and rep["canvases"][0] is None:
                missing.append("canvas image")
            for cls, t in zip(texts, rep["texts"]):
                if t["latency"] is None:
                    missing.append(f".{cls} text (still {t['text']!r})")
            self.fail(f"{step_label} {what}: no change within {cap_s}s of: {', '.join(missing)}"
                      f" (input seen by page: {rep['input']})")
        rep = self.page.evaluate("() => window.__pg.report()")
        if rep["input"] is None:
            self.fail(f"{step_label} {what}: page never saw the input event")
        if canvas is not None:
            self.wait_stable(canvas)
        rec = InputRecord(
            step=step_label, what=what,
            canvas_latency_ms=rep["canvases"][0] if canvases else None,
            text_latency_ms={cls: t["latency"] for cls, t in zip(texts, rep["texts"])},
            texts_before=dict(zip(texts, before)),
            texts_after={cls: t["text"] for cls, t in zip(texts, rep["texts"])},
        )
        self.result.inputs.append(rec)
        lat = f"{rec.canvas_latency_ms:.0f} ms" if rec.canvas_latency_ms is not None else "n/a"
        tl = ", ".join(f".{c} {v:.0f} ms" for c, v in rec.text_latency_ms.items() if v is not None)
        log(f"{self.ui}: {step_label} {what}: input->repaint {lat}"
            + (f"; text: {tl}" if tl else "")
            + "".join(f"; .{c}: {rec.texts_before[c]!r} -> {rec.texts_after[c]!r}" for c in texts))
        return rec

    def _texts(self, classes: Sequence[str]) -> dict[str, Any]:
        out = {}
        for cls in classes:
            loc = self.locate(f".{cls}", 0)
            loc.wait_for(state="visible", timeout=self.remaining_ms(20))
            out[cls] = loc
        return out

    def do_slider(self, step: SliderStep):
        slider = self.locate(f".{step.slider_class}", step.index)
        slider.scroll_into_view_if_needed(timeout=self.remaining_ms(15))
        canvas = self.locate(canvas_selector(step.canvas_class), 0) if step.canvas_class else None
        texts = self._texts(step.text_classes)
        mode = step.mode if step.mode != "auto" else ("keys" if self.ui == "lab" else "track")
        if mode == "keys":
            handle = slider.locator(".noUi-handle").first
            for key in step.keys:
                def press(key=key):
                    handle.focus()
                    self.page.keyboard.press(key)
                self.one_input(step.label, f"key {key}", canvas, texts, press, canvas is not None)
        elif mode == "track":
            track = slider.locator(".noUi-target").first
            last_click = 0.0
            for frac in step.track_fractions:
                def click(frac=frac):
                    nonlocal last_click
                    box = track.bounding_box()
                    if not box:
                        self.fail(f"slider .{step.slider_class} track has no bounding box")
                    gap = time.monotonic() - last_click
                    if gap < step.min_click_gap_s:
                        time.sleep(step.min_click_gap_s - gap)
                    self.page.mouse.click(box["x"] + frac * box["width"], box["y"] + box["height"] / 2)
                    last_click = time.monotonic()
                self.one_input(step.label, f"track click at {frac:.2f}", canvas, texts, click,
                               canvas is not None)
        else:
            raise ValueError(f"unknown slider mode {mode!r}")
        self.shot(f"after-{step.label}", focus=slider)

    def do_click(self, step: CanvasClick):
        canvas = self.locate(canvas_selector(step.canvas_class), step.index)
        canvas.scroll_into_view_if_needed(timeout=self.remaining_ms(15))
        texts = self._texts(step.text_classes)
        for fx, fy in step.points:
            def click(fx=fx, fy=fy):
                box = canvas.bounding_box()
                if not box:
                    self.fail(f"canvas .{step.canvas_class} has no bounding box")
                # lands on ipympl's overlay canvas, which sits exactly on top of the image
                self.page.mouse.click(box["x"] + fx * box["width"], box["y"] + fy * box["height"])
            self.one_input(step.label, f"click at ({fx:.2f}, {fy:.2f})", canvas, texts, click,
                           step.expect_canvas_change)
        self.shot(f"after-{step.label}", focus=canvas)

    def do_button(self, step: ButtonClick):
        button = self.locate(f".{step.button_class}", step.index)
        button.scroll_into_view_if_needed(timeout=self.remaining_ms(15))
        canvas = (self.locate(canvas_selector(step.canvas_class), step.canvas_index)
                  if step.canvas_class else None)
        texts = self._texts(step.text_classes)
        for i in range(step.clicks):
            self.one_input(step.label, f"click {i + 1}", canvas, texts, lambda: button.click(),
                           canvas is not None)
        self.shot(f"after-{step.label}", focus=canvas if canvas is not None else button)

    # -- per-view checks
    def _wait_true(self, js: str, arg: Any = None, cap_s: float = 30.0) -> bool:
        """Like wait_for, but returns False on timeout instead of failing the run."""
        from playwright.sync_api import TimeoutError as PWTimeout

        try:
            self.page.wait_for_function(js, arg=arg, polling=100, timeout=self.remaining_ms(cap_s))
            return True
        except PWTimeout:
            return False

    def shot_view(self, view, stem: str) -> str:
        """Picture of the output area holding ``view`` (the whole area, even if taller than
        the window)."""
        area = view.locator(
            "xpath=ancestor::div[contains(concat(' ', @class, ' '), ' jp-OutputArea-output ')][1]")
        if not area.count():
            area = view
        area.evaluate("el => el.scrollIntoView({block: 'center'})")
        path = self.artefacts / f"{self.scenario.name}-{self.ui}-{stem}.png"
        area.screenshot(path=str(path), timeout=15000)
        self.result.screenshots.append(str(path))
        return str(path)

    def check_views(self):
        """Check every top-level ``.pg-view`` on the page (see :class:`ViewRecord`).

        Failures are recorded in ``result.views``, never raised: a defect of one view must not
        hide the state of the others (and must not trigger a retry).
        """
        t0 = time.monotonic()
        self.result.widget_errors += self.page.evaluate("() => window.__pg.widgetErrors(false)")
        views = self.page.locator(VIEW_SELECTOR)
        n = views.count()
        names = self.scenario.view_names
        log(f"{self.ui}: {n} view(s) on the page" + (f", expected {len(names)}" if names else ""))
        for i in range(n):
            name = names[i] if i < len(names) else f"view{i + 1}"
            rec = ViewRecord(index=i, name=name)
            self.result.views.append(rec)
            try:
                self._check_view(views.nth(i), rec)
            except BrowserTestError:
                raise  # run deadline: the run is over
            except Exception as e:  # noqa: BLE001 - one view's trouble is recorded, the others go on
                rec.set("error", False, f"{type(e).__name__}: {str(e).splitlines()[0][:300]}")
            log(f"{self.ui}: {rec.line()}" + "".join(f"\n    {f}" for f in rec.failures()))
        self.result.timings["views"] = time.monotonic() - t0

    def _check_view(self, view, rec: ViewRecord):
        stem = f"view{rec.index + 1}-{rec.name}"
        view.scroll_into_view_if_needed(timeout=self.remaining_ms(15))
        painted = self._wait_true(
            "(v) => { const c = window.__pg.viewCanvases(v)[0]; return !!c && window.__pg.ink(c) > 200; }",
            arg=view.element_handle(), cap_s=PAINT_CAP_S)
        canvas = view.evaluate_handle("v => window.__pg.viewCanvases(v)[0] || null").as_element()
        if canvas is not None:
            self.wait_stable(canvas)
        rep = view.evaluate("v => window.__pg.viewReport(v)")
        rec.metrics = rep

        # a. a main canvas (plus any the view shows on request), not tiny, not one flat colour
        c = rep.get("canvas")
        if rep["n_canvases"] < 1 or not c:
            rec.set("canvas", False, "no image canvas in the view")
        else:
            problems = []
            for k, more in enumerate(rep.get("more_canvases") or (), start=2):
                if more["css_w"] < MIN_CANVAS_CSS[0] or more["css_h"] < MIN_CANVAS_CSS[1] \
                        or more["flat_share"] >= MAX_FLAT_SHARE:
                    problems.append(f"canvas {k}: {more['css_w']}x{more['css_h']} CSS px, "
                                    f"{more['flat_share']:.1%} of its pixels one colour")
            if c["css_w"] < MIN_CANVAS_CSS[0] or c["css_h"] < MIN_CANVAS_CSS[1]:
                problems.append(f"{c['css_w']}x{c['css_h']} CSS px < {MIN_CANVAS_CSS[0]}x{MIN_CANVAS_CSS[1]}")
            if c["flat_share"] >= MAX_FLAT_SHARE:
                problems.append(f"{c['flat_share']:.1%} of its pixels are one colour")
            if not painted:
                problems.append(f"never painted (< 200 inked pixels after {PAINT_CAP_S:.0f} s)")
            if c["css_w"] == 0 and any(BROKEN_FRAME_ERROR in e for e in self.result.console_errors):
                problems.append(BROKEN_FRAME_HINT)
            rec.set("canvas", not problems, "; ".join(problems) or
                    f"{c['css_w']}x{c['css_h']} px, most common colour {c['flat_share']:.1%}")

        # b. nothing past the output area's right edge, no horizontal scrolling
        problems = []
        if rep["overflow"]:
            worst = sorted(rep["overflow"], key=lambda o: -o["by"])
            problems.append(f"{len(worst)} element(s) past the right edge of the output area "
                            f"(right {rep['limit']:.0f} px): "
                            + ", ".join(f"{o['what']} by {o['by']} px" for o in worst[:6]))
        v, o = rep["view"], rep.get("output")
        if v["scroll_w"] > v["client_w"] + EDGE_TOLERANCE_PX:
            problems.append(f"the view scrolls horizontally ({v['scroll_w']} > {v['client_w']} px)")
        if o and o["scroll_w"] > o["client_w"] + EDGE_TOLERANCE_PX:
            problems.append(f"the output area scrolls horizontally ({o['scroll_w']} > {o['client_w']} px)")
        if not o:
            problems.append("view is not inside a .jp-OutputArea-output")
        rec.set("fits", not problems, "; ".join(problems) or
                f"widest element ends at {rep['max_right']:.0f} px, output area ends at {rep['limit']:.0f} px")

        # c. (page-wide errors are in result.widget_errors / console_errors)
        rec.set("no_widget_error", not rep["widget_error"],
                f"'{WIDGET_ERROR_TEXT}' in the output area" if rep["widget_error"] else "")

        # truncated labels (issue 9, item 6)
        cut = rep["truncated"]
        rec.set("labels", not cut, "; ".join(
            f"{t['what']} needs {t['need']} px, has {t['room']} px" for t in cut[:6]))

        rec.screenshots.append(self.shot_view(view, f"{stem}-loaded"))

        # d. one input on the primary control repaints the canvas
        if canvas is None:
            rec.set("control", False, "no canvas to watch")
            return
        self._move_control(view, canvas, rec)
        rec.screenshots.append(self.shot_view(view, f"{stem}-moved"))

    def _primary_control(self, view):
        """(locator, marked): the view's ``pg-primary`` control, else its first visible slider,
        toggle buttons or dropdown (a fallback, recorded as such)."""
        prim = view.locator(".pg-primary")
        if prim.count():
            return prim.first, True
        for sel in (".widget-slider", ".widget-toggle-buttons", ".widget-dropdown"):
            loc = view.locator(sel)
            for k in range(loc.count()):
                if loc.nth(k).is_visible():
                    return loc.nth(k), False
        return None, False

    def _move_control(self, view, canvas, rec: ViewRecord):
        el, marked = self._primary_control(view)
        rec.primary_marked = marked
        if el is None:
            rec.control = "none found"
            rec.set("control", False, "no .pg-primary control and no slider/toggle buttons/dropdown")
            return
        kind = el.evaluate("""e => {
            const c = e.classList;
            if (c.contains('widget-slider') || e.querySelector('.noUi-target')) return 'slider';
            if (c.contains('widget-toggle-buttons')) return 'toggle buttons';
            if (c.contains('widget-dropdown') || e.tagName === 'SELECT' || e.querySelector('select')) return 'dropdown';
            if (c.contains('widget-checkbox') || e.querySelector('input[type=checkbox]')) return 'checkbox';
            if (e.tagName === 'BUTTON' || c.contains('widget-toggle-button')) return 'button';
            return 'unknown'; }""")
        desc = el.evaluate("e => window.__pg.describe(e)")
        rec.control = f"{kind} {desc}" + ("" if marked else " (FALLBACK: no .pg-primary in this view)")
        el.scroll_into_view_if_needed(timeout=self.remaining_ms(15))

        action = None
        what = ""
        if kind == "slider":
            if self.ui == "lab":
                handle = el.locator(".noUi-handle").first
                aria = handle.evaluate("""h => ({now: parseFloat(h.getAttribute('aria-valuenow')),
                                            max: parseFloat(h.getAttribute('aria-valuemax')),
                                            disabled: !!h.closest('[disabled]')})""")
                if aria["disabled"]:
                    rec.set("control", False, f"slider is disabled: {desc}")
                    return
                key = "ArrowLeft" if aria["now"] >= aria["max"] else "ArrowRight"
                what = f"key {key} on the handle"

                def action():
                    handle.focus()
                    self.page.keyboard.press(key)
            else:  # Notebook 7 swallows arrow keys: click the track away from the handle
                track = el.locator(".noUi-target").first
                box = track.bounding_box()
                hbox = el.locator(".noUi-handle").first.bounding_box()
                pos = (hbox["x"] + hbox["width"] / 2 - box["x"]) / box["width"] if hbox else 0.5
                # a modest move (a fifth of the track) towards the middle
                frac = max(0.05, pos - 0.2) if pos > 0.5 else min(0.95, pos + 0.2)
                what = f"track click at {frac:.2f} (handle at {pos:.2f})"

                def action():
                    self.page.mouse.click(box["x"] + frac * box["width"], box["y"] + box["height"] / 2)
        elif kind == "toggle buttons":
            buttons = el.locator("button")
            pick = None
            for k in range(buttons.count()):
                b = buttons.nth(k)
                if b.is_enabled() and "mod-active" not in (b.get_attribute("class") or ""):
                    pick = b
                    break
            if pick is None:
                rec.set("control", False, f"no enabled, unselected button in {desc}")
                return
            what = f"click {pick.inner_text().strip()!r}"
            action = pick.click
        elif kind == "dropdown":
            sel = el if el.evaluate("e => e.tagName") == "SELECT" else el.locator("select").first
            n_opt, cur = sel.evaluate("s => [s.options.length, s.selectedIndex]")
            if n_opt < 2:
                rec.set("control", False, f"dropdown has {n_opt} option(s): {desc}")
                return
            new = (cur + 1) % n_opt
            what = f"select option {new}"

            def action():
                sel.select_option(index=new)
        elif kind in ("checkbox", "button"):
            target = el.locator("input[type=checkbox]").first if kind == "checkbox" and el.locator(
                "input[type=checkbox]").count() else el
            what = "click"
            action = target.click
        else:
            rec.set("control", False, f"cannot operate {desc}")
            return
        if not el.evaluate("e => !e.matches('[disabled], .mod-disabled') && !e.querySelector(':scope > [disabled]')"):
            rec.set("control", False, f"control is disabled: {desc}")
            return

        # a canvas still changing on its own (a background run, a timer) cannot show the input's effect
        if not self.wait_stable(canvas):
            rec.set("control", False, f"canvas kept changing without input; {what} not judged")
            return
        self.page.evaluate("([cs, ts]) => window.__pg.arm(cs, ts)", [[canvas], []])
        action()
        changed = self._wait_true("() => window.__pg.poll()", cap_s=CONTROL_CHANGE_CAP_S)
        lat = self.page.evaluate("() => window.__pg.report()")["canvases"][0]
        rec.latency_ms = lat
        if changed:
            self.wait_stable(canvas)
            rec.set("control", True, f"{what}: canvas repainted after {lat:.0f} ms")
        else:
            rec.set("control", False, f"{what}: canvas unchanged {CONTROL_CHANGE_CAP_S:.0f} s after the input")

    def execute(self):
        from playwright.sync_api import sync_playwright

        t0 = time.monotonic()
        with sync_playwright() as pw:
            ctx = self.open(pw)
            try:
                self.load_and_run()
                if self.scenario.check_views:
                    self.check_views()
                t1 = time.monotonic()
                for step in self.scenario.steps:
                    if isinstance(step, SliderStep):
                        self.do_slider(step)
                    elif isinstance(step, CanvasClick):
                        self.do_click(step)
                    elif isinstance(step, ButtonClick):
                        self.do_button(step)
                    else:
                        raise TypeError(f"unknown step {step!r}")
                self.result.timings["interact"] = time.monotonic() - t1
                for e in self.page.evaluate("() => window.__pg.widgetErrors(true)"):
                    if e not in self.result.widget_errors:
                        self.result.widget_errors.append(e)
                # page errors, console errors and view defects are asserted by the tests
                # (RunResult), so that one run reports all of them and is not retried for them
            except BaseException:
                try:
                    self.shot(f"FAILED-attempt{self.attempt}")
                except Exception:
                    pass
                raise
            finally:
                self._write_console_log()
                try:
                    ctx.close()
                except Exception:
                    pass
                try:
                    self.server.shutdown_sessions(self.rel_path)
                except Exception:
                    pass
        self.result.seconds = time.monotonic() - t0
        return self.result

    def _write_console_log(self):
        p = self.artefacts / f"{self.scenario.name}-{self.ui}-attempt{self.attempt}-console.log"
        p.write_text("\n".join(self.console) + "\n")


def run_scenario(server: JupyterServer, scenario: Scenario, ui: str, *, attempt: int = 1,
                 timeout_s: float = 150.0, artefacts_dir: Path | None = None) -> RunResult:
    """One browser run with an outer timeout (watchdog kills the browser when it is exceeded)."""
    artefacts = Path(artefacts_dir or DEFAULT_ARTEFACTS_DIR)
    artefacts.mkdir(parents=True, exist_ok=True)
    for old in artefacts.glob(f"{scenario.name}-{ui}-*"):
        if attempt == 1:
            old.unlink()
    deadline = time.monotonic() + timeout_s
    profile = Path(tempfile.mkdtemp(prefix="pg-chromium-profile-"))
    run = _Run(server, scenario, ui, artefacts, attempt, deadline, profile)
    # The watchdog fires a little after the cooperative deadline, for calls that hang.
    with _Watchdog(timeout_s + 15, profile) as wd:
        try:
            return run.execute()
        except Exception as e:
            if wd.fired:
                raise BrowserTestError(
                    f"{scenario.name}/{ui}: outer timeout {timeout_s + 15:.0f}s hit, browser killed ({e})"
                ) from e
            raise
        finally:
            shutil.rmtree(profile, ignore_errors=True)


def run_scenario_with_retry(server: JupyterServer, scenario: Scenario, ui: str, *,
                            retries: int = 1, timeout_s: float = 150.0,
                            artefacts_dir: Path | None = None) -> RunResult:
    """:func:`run_scenario`, retried ``retries`` times; a pass after a retry is reported loudly."""
    errors = []
    for attempt in range(1, retries + 2):
        try:
            res = run_scenario(server, scenario, ui, attempt=attempt, timeout_s=timeout_s,
                               artefacts_dir=artefacts_dir)
        except Exception as e:  # noqa: BLE001 - retried, then re-raised
            errors.append(f"attempt {attempt}: {type(e).__name__}: {e}")
            log(f"{scenario.name}/{ui}: attempt {attempt} FAILED: {type(e).__name__}: {e}")
            log("server log tail:\n" + server.log_tail(15))
            if attempt > retries:
                raise BrowserTestError("\n".join(errors)) from e
            continue
        if errors:
            log(f"FLAKY: {scenario.name}/{ui} passed on attempt {attempt} after: {errors}")
        log(res.summary())
        SUMMARIES.append(res.summary() + (f" (FLAKY: passed after {len(errors)} failed attempt(s))"
                                          if errors else ""))
        SUMMARIES.extend("    " + v.line() for v in res.views)
        out = Path(artefacts_dir or DEFAULT_ARTEFACTS_DIR) / f"{scenario.name}-{ui}-result.json"
        out.write_text(json.dumps(dataclasses.asdict(res), indent=2, default=str))
        return res
    raise AssertionError("unreachable")
