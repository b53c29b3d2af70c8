"""Optional dependencies in tests: skip with the install command, fail under CI."""

import os

import pytest


def optional_module(name, extra):
    """Import ``name``; skip (with the install command) when missing, fail under CI.

    The test extra installs every optional dependency, so under CI (``CI=true``) a
    missing one is a broken install, not a reason to skip.
    """
    import importlib

    try:
        return importlib.import_module(name)
    except ImportError:
        if os.environ.get("CI", "").lower() in ("true", "1"):
            pytest.fail(f"{name} is missing under CI: the test extra installs it "
                        f"(pip install -e \".[test]\")")
        pytest.skip(f"{name} is not installed (pip install \"phaseglass[{extra}]\")",
                    allow_module_level=True)
