"""Fixtures shared by every test folder: a demo target, a pixel check, a real Dask cluster."""

import numpy as np
import pytest
from _optional import optional_module


@pytest.fixture(scope="session")
def gaussian():
    """Correlated Gaussian (correlation 0.9): standard deviations sqrt(1.9) and sqrt(0.1)."""
    import phaseglass as pg

    return pg.demos.correlated_gaussian()


def _blank_fraction(img):
    """Share of the pixels equal to the most common colour (1.0 means an empty picture)."""
    flat = np.asarray(img)[..., :3].reshape(-1, 3)
    _, counts = np.unique(flat, axis=0, return_counts=True)
    return counts.max() / flat.shape[0]


@pytest.fixture(scope="session")
def blank_fraction():
    """``blank_fraction(rgb)``: share of the most common colour (1.0 is an empty picture)."""
    return _blank_fraction


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
