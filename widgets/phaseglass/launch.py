"""``phaseglass demo``: copy the example notebooks into a working folder and open JupyterLab.

The user's edits are never overwritten: a notebook that already exists in the
folder is left as it is (say ``--fresh NAME`` to get a pristine copy beside it).
"""

import argparse
import os
import shutil
import subprocess
import sys
from pathlib import Path

__all__ = ["notebooks_folder", "copy_notebooks", "add_demo_arguments", "run_demo", "TOUR"]

TOUR = "tour.ipynb"
DEFAULT_DIR = "phaseglass-tour"


def notebooks_folder():
    """The folder holding the shipped example notebooks.

    Installed from a wheel they live in the package (``phaseglass.notebooks``);
    in a source checkout (editable install) they are ``example_notebooks/``.
    """
    try:
        from importlib.resources import files

        folder = files("phaseglass.notebooks")
        if (Path(str(folder)) / TOUR).exists():
            return Path(str(folder))
    except (ModuleNotFoundError, TypeError):
        pass
    here = Path(__file__).resolve().parent
    checkout = here.parents[1] / "example_notebooks"
    if (checkout / TOUR).exists():
        return checkout
    raise FileNotFoundError(
        "the example notebooks were not found in the installed package nor next to the source "
        "tree; reinstall phaseglass (pip install phaseglass[lab])"
    )


def copy_notebooks(folder, *, out=print):
    """Copy every example notebook into ``folder``; existing files are kept as they are.

    Returns
    -------
    list of Path
        The notebooks now in ``folder`` (copied or kept).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    kept = []
    for src in sorted(notebooks_folder().glob("*.ipynb")):
        dst = folder / src.name
        if dst.exists():
            out(f"keeping your {dst} (not overwritten)")
        else:
            shutil.copyfile(src, dst)
            out(f"copied {src.name} -> {dst}")
        kept.append(dst)
    return kept


def _notebook_names():
    try:
        return ", ".join(sorted(f.stem for f in notebooks_folder().glob("*.ipynb")))
    except FileNotFoundError:
        return "none found"


def add_demo_arguments(p):
    p.description = (f"Copy every example notebook ({_notebook_names()}) into a working folder "
                     "and open the tour in JupyterLab.")
    p.add_argument("--dir", default=DEFAULT_DIR,
                   help=f"working folder for the notebooks (default ./{DEFAULT_DIR}); existing "
                        "notebooks there are never overwritten")
    p.add_argument("--port", type=int, default=None, help="port for JupyterLab (default: its own choice)")
    p.add_argument("--no-browser", action="store_true", help="start the server without opening a browser")
    p.add_argument("--copy-only", action="store_true",
                   help="only copy the notebooks; do not start JupyterLab")
    p.add_argument("lab_args", nargs=argparse.REMAINDER,
                   help="anything after -- is passed on to JupyterLab (e.g. -- --ServerApp.token=...)")


def _lab_available():
    try:
        import jupyterlab  # noqa: F401
    except ImportError:
        return False
    return True


def lab_command(folder, *, port=None, no_browser=False, extra=()):
    """The command line that starts JupyterLab on the tour.

    As root (containers, CI machines) JupyterLab refuses to start without
    ``--allow-root``, so it is added there.
    """
    cmd = [sys.executable, "-m", "jupyterlab", f"--ServerApp.root_dir={folder}", str(Path(folder) / TOUR)]
    if port is not None:
        cmd.append(f"--port={port}")
    if no_browser:
        cmd.append("--no-browser")
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        cmd.append("--allow-root")
    cmd.extend(a for a in extra if a != "--")
    return cmd


def run_demo(args, *, usage_error):
    """Run ``phaseglass demo``; ``usage_error`` is the CLI's exception for one-line exit-2 errors."""
    if args.port is not None and not 0 < args.port < 65536:
        raise usage_error(f"--port must be between 1 and 65535, got {args.port}")
    folder = Path(args.dir).expanduser().resolve()
    if folder.exists() and not folder.is_dir():
        raise usage_error(f"--dir {args.dir!r} exists and is not a folder")
    try:
        copy_notebooks(folder)
    except FileNotFoundError as exc:
        raise usage_error(str(exc)) from None
    if args.copy_only:
        print(f"notebooks are in {folder}; open {TOUR} in Jupyter")
        return 0
    if not _lab_available():
        raise usage_error(
            "JupyterLab is not installed; install it with: pip install 'phaseglass[lab]' "
            f"(the notebooks were copied to {folder})"
        )
    cmd = lab_command(folder, port=args.port, no_browser=args.no_browser, extra=args.lab_args or ())
    print("starting JupyterLab on the tour (stop it with Ctrl-C):", " ".join(cmd))
    try:
        return subprocess.call(cmd, cwd=folder)
    except KeyboardInterrupt:
        return 0
