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

HEAVY = ("matplotlib", "ipywidgets", "ipympl", "traitlets", "IPython", "jax", "jaxlib", "torch")

_STAGES = {
    "core": "import phaseglass.core",
    "top": "import phaseglass",
    # a whole sampling run plus its digest, as a plain script would do it
    "used": ("run = phaseglass.sample(phaseglass.demos.correlated_gaussian(), phaseglass.HMC(0.3, 5),"
             " n_draws=20, seed=0); str(run.summary())"),
}


@pytest.fixture(scope="module")
def loaded():
    """{stage: set of heavy top-level modules in sys.modules after that stage}."""
    lines = ["import json, sys", "seen = {}"]
    for stage, statement in _STAGES.items():
        lines.append(statement)
        lines.append(f"seen[{stage!r}] = sorted({{m.split('.')[0] for m in sys.modules}} & set({HEAVY!r}))")
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
