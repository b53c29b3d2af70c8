"""The package's layers import one way only (see STYLE.md, "The shape of the package").

The checks run in a fresh interpreter, since this test process may already have
imported matplotlib or ipywidgets for other tests. One interpreter serves all
stages (importing takes ~1-3 s): each stage only adds imports, so a module
missing after a later stage was missing after the earlier ones too.
"""

import json
import subprocess
import sys

import pytest

HEAVY = ("matplotlib", "ipywidgets", "ipympl", "traitlets", "IPython", "jax", "jaxlib", "torch",
         # scipy's parts cost several times ``import numpy`` each (measured for issue 13:
         # scipy.special ~0.3 s, scipy.fft ~0.35 s, scipy.stats ~0.8 s on the 2-core CI
         # machine); the core imports them inside the functions that use them
         "scipy.stats", "scipy.fft", "scipy.special")

_STAGES = {
    "core": "import phaseglass.core",
    "top": "import phaseglass",
    # a whole sampling run plus its digest, as a plain script would do it
    "used": ("run = phaseglass.sample(phaseglass.demos.correlated_gaussian(), phaseglass.HMC(0.3, 5),"
             " n_draws=20, seed=0); str(run.summary())"),
}


@pytest.fixture(scope="module")
def loaded():
    """{stage: set of the HEAVY names in sys.modules after that stage}.

    A name counts as loaded when the module itself or any of its submodules is
    (``matplotlib`` for ``matplotlib.pyplot``, ``scipy.stats`` for ``scipy.stats._stats_py``).
    """
    lines = ["import json, sys", "seen = {}"]
    for stage, statement in _STAGES.items():
        lines.append(statement)
        lines.append(f"seen[{stage!r}] = sorted(h for h in {HEAVY!r} "
                     "if any(m == h or m.startswith(h + '.') for m in sys.modules))")
    lines.append("print(json.dumps(seen))")
    out = subprocess.run([sys.executable, "-c", "\n".join(lines)], capture_output=True, text=True,
                         timeout=120)
    assert out.returncode == 0, out.stderr
    return {k: set(v) for k, v in json.loads(out.stdout.strip().splitlines()[-1]).items()}


def test_core_imports_neither_matplotlib_nor_ipywidgets(loaded):
    assert "matplotlib" not in loaded["core"]
    assert "ipywidgets" not in loaded["core"]


def test_top_level_package_does_not_import_ipywidgets(loaded):
    assert "ipywidgets" not in loaded["top"]
    assert "matplotlib" not in loaded["top"]  # nothing in the top level needs drawing either


def test_top_level_package_leaves_scipy_stats_and_fft_for_first_use(loaded):
    # `import phaseglass` should cost at most about twice `import numpy` (issue 13; measured by
    # benchmarks/startup.py): scipy's statistics, FFT and special functions load when a
    # diagnostic first needs them
    assert not loaded["core"] & {"scipy.stats", "scipy.fft", "scipy.special"}
    assert not loaded["top"] & {"scipy.stats", "scipy.fft", "scipy.special"}


def test_diagnostics_load_scipy_when_first_used(loaded):
    # the other side of the check above: the staged subprocess does see these modules once a
    # run's summary computes ESS and R-hat (so the check is not blind to scipy submodules)
    assert {"scipy.stats", "scipy.fft", "scipy.special"} <= loaded["used"]


def test_using_the_core_stays_light(loaded):
    assert not loaded["used"] & {"matplotlib", "ipywidgets"}


def test_autodiff_libraries_load_only_when_asked(loaded):
    # Target.from_jax imports JAX when called; nothing else in phaseglass may
    for stage in ("core", "top", "used"):
        assert not loaded[stage] & {"jax", "jaxlib", "torch"}, stage


@pytest.mark.parametrize("name", ["TrajectoryView", "ChainView", "DivergenceView"])
def test_widget_names_are_listed_but_resolved_lazily(name):
    import phaseglass

    assert name in phaseglass.__all__
    assert name not in vars(phaseglass)  # resolved by module __getattr__ on first use


# ----------------------------------------------------------------------------------
# Static checks on the source: which package imports which, and no cycles in the core

import ast  # noqa: E402
import pathlib  # noqa: E402

_PACKAGE = pathlib.Path(__file__).resolve().parents[2] / "widgets" / "phaseglass"


def _imports(path):
    """Absolute dotted names of every module ``path`` imports (function-level imports too)."""
    module = ".".join(path.relative_to(_PACKAGE.parent).with_suffix("").parts)
    package = module.rsplit(".", 1)[0] if path.name != "__init__.py" else module[:-len(".__init__")]
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                stem = ".".join(base + ([node.module] if node.module else []))
            else:
                stem = node.module
            found.add(stem)
            found.update(f"{stem}.{a.name}" for a in node.names)
    return found


def _layer_imports(layer):
    return {p.name: _imports(p) for p in sorted((_PACKAGE / layer).glob("*.py"))}


@pytest.mark.parametrize("layer, forbidden", [
    ("core", ("phaseglass.draw", "phaseglass.ui", "phaseglass.report")),
    ("draw", ("phaseglass.ui", "phaseglass.report")),
])
def test_lower_layers_never_import_higher_ones(layer, forbidden):
    for name, imported in _layer_imports(layer).items():
        bad = sorted(m for m in imported if m.startswith(forbidden))
        assert not bad, f"{layer}/{name} imports {bad}"


def test_the_static_check_sees_relative_imports():
    # the check above is not blind: ui/chain_view.py imports draw and core relatively
    seen = _imports(_PACKAGE / "ui" / "chain_view.py")
    assert any(m.startswith("phaseglass.draw") for m in seen)
    assert any(m.startswith("phaseglass.core") for m in seen)


def test_core_modules_import_no_cycle():
    # issue 12: kernels.py imported gibbs.py inside kernel_from_settings while gibbs.py
    # imported kernels.py; the registry now holds kernel_from_settings
    graph = {}
    for name, imported in _layer_imports("core").items():
        if name == "__init__.py":
            continue
        mod = "phaseglass.core." + name[:-3]
        graph[mod] = {m for m in imported if m.startswith("phaseglass.core.")
                      and m.count(".") == 2 and m != mod and m != "phaseglass.core.__init__"}
    graph = {m: {d for d in deps if d in graph} for m, deps in graph.items()}
    state = {}

    def visit(m, path):
        state[m] = "open"
        for d in graph[m]:
            assert state.get(d) != "open", "import cycle: " + " -> ".join(path + [m, d])
            if d not in state:
                visit(d, path + [m])
        state[m] = "done"

    for m in graph:
        if m not in state:
            visit(m, [])
    assert "phaseglass.core.gibbs" in graph["phaseglass.core.registry"]
