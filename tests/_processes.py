"""Helpers for the tests that start real processes (``phaseglass demo``, a JupyterLab stand-in).

Importable as ``_processes`` from any test: pyproject.toml puts ``tests`` on pytest's
``pythonpath``, whatever the import mode.
"""

import os


def alive(pid):
    """True while ``pid`` is a running (not zombie) process."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return True
