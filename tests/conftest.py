"""Fixtures shared by every test folder: a real Dask cluster for the executor tests."""

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
        pytest.skip(f"{name} is not installed (pip install \"phaseglass[{extra}]\")")


@pytest.fixture(scope="session")
def dask_client():
    """A client of a real LocalCluster: 2 worker processes, 1 thread each, loopback only.

    One cluster for the whole session (starting one takes seconds on two cores).
    """
    distributed = optional_module("dask.distributed", "dask")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    client = distributed.Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()
