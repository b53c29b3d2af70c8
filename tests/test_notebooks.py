"""Every example notebook runs top to bottom, headless, without an error.

Each notebook is executed with nbclient in a fresh ipykernel. The kernel is pinned to the
Python running the tests (a kernelspec written to a temporary JUPYTER_PATH, which Jupyter
searches before the user's and the system's kernelspecs), so a ``python3`` kernel installed
elsewhere on the machine cannot run the notebooks against another environment. The
notebooks run in a temporary copy of ``example_notebooks/``, so whatever they write lands
outside the repository.
"""

import json
import shutil
import sys
from pathlib import Path

import pytest

from _optional import optional_module

nbformat = optional_module("nbformat", "test")
nbclient = optional_module("nbclient", "test")
optional_module("ipykernel", "test")

NOTEBOOKS_DIR = Path(__file__).resolve().parents[1] / "example_notebooks"
NOTEBOOKS = sorted(NOTEBOOKS_DIR.glob("*.ipynb"))
KERNEL_NAME = "python3"
CELL_TIMEOUT = 240  # seconds per cell; each notebook takes well under a minute on 2 cores

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def kernel_env(tmp_path_factory):
    """Environment for the kernel: a kernelspec bound to ``sys.executable``, Agg backend."""
    root = tmp_path_factory.mktemp("jupyter")
    spec = root / "kernels" / KERNEL_NAME
    spec.mkdir(parents=True)
    tmp = root / "tmp"
    tmp.mkdir()
    (spec / "kernel.json").write_text(json.dumps({
        "argv": [sys.executable, "-m", "ipykernel_launcher", "-f", "{connection_file}"],
        "display_name": "phaseglass tests",
        "language": "python",
    }))
    return {
        "JUPYTER_PATH": str(root),
        # the views make their own ipympl canvases; anything else drawn goes to Agg
        "MPLBACKEND": "Agg",
        # no stray runtime files in the user's folders
        "JUPYTER_RUNTIME_DIR": str(root / "runtime"),
        "IPYTHONDIR": str(root / "ipython"),
        # tempfile.mkdtemp() in a notebook lands here, not in the machine's /tmp
        "TMPDIR": str(tmp),
    }


def _execute(nb, cwd, env, monkeypatch):
    for key, value in env.items():
        monkeypatch.setenv(key, value)
    client = nbclient.NotebookClient(nb, kernel_name=KERNEL_NAME, timeout=CELL_TIMEOUT,
                                     resources={"metadata": {"path": str(cwd)}})
    client.execute()
    return nb


def _listing(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _outputs(nb):
    text = []
    for cell in nb.cells:
        for out in cell.get("outputs", []):
            if out.get("output_type") == "stream":
                text.append(out.get("text", ""))
            elif "data" in out:
                text.append(out["data"].get("text/plain", ""))
    return "\n".join(text)


def test_kernel_runs_the_tests_python(tmp_path, kernel_env, monkeypatch):
    nb = nbformat.v4.new_notebook(cells=[nbformat.v4.new_code_cell("import sys; print(sys.executable)")])
    _execute(nb, tmp_path, kernel_env, monkeypatch)
    assert _outputs(nb).strip() == sys.executable


def test_there_are_notebooks():
    names = {p.name for p in NOTEBOOKS}
    assert {"tour.ipynb", "many_parameters.ipynb"} <= names and len(names) >= 6, names


@pytest.mark.parametrize("path", NOTEBOOKS, ids=[p.stem for p in NOTEBOOKS])
def test_notebook_runs_without_error(path, tmp_path, kernel_env, monkeypatch):
    before = _listing(NOTEBOOKS_DIR)
    work = tmp_path / "example_notebooks"
    shutil.copytree(NOTEBOOKS_DIR, work)
    nb = nbformat.read(work / path.name, as_version=4)
    assert not any(c.get("outputs") for c in nb.cells if c.cell_type == "code"), (
        f"{path.name} is committed with outputs; clear them before committing")
    try:
        _execute(nb, work, kernel_env, monkeypatch)
    except nbclient.exceptions.CellExecutionError as err:
        pytest.fail(f"{path.name} failed:\n{err}", pytrace=False)
    errors = [o for c in nb.cells for o in c.get("outputs", []) if o.get("output_type") == "error"]
    assert not errors, f"{path.name}: {errors[0].get('ename')}: {errors[0].get('evalue')}"
    assert _listing(NOTEBOOKS_DIR) == before, f"{path.name} wrote into example_notebooks/"
