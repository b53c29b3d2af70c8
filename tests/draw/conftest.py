"""Shared fixtures for the drawing tests: Agg backend, small runs and trajectories, pixels.

``gaussian`` and ``blank_fraction`` come from tests/conftest.py.
"""

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402
from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

import phaseglass as pg  # noqa: E402


@pytest.fixture
def ax():
    """A fresh Axes on an Agg canvas (no pyplot)."""
    fig = Figure(figsize=(4, 3), dpi=50)
    FigureCanvasAgg(fig)
    return fig.add_subplot()


def _pixels(fig):
    """Render ``fig`` with Agg and return its RGB pixels, shape (h, w, 3)."""
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return np.asarray(canvas.buffer_rgba())[..., :3].copy()


@pytest.fixture(scope="session")
def pixels():
    """``pixels(fig)``: render with Agg, return RGB pixels (h, w, 3)."""
    return _pixels


@pytest.fixture(scope="session")
def stiff():
    """A narrow Gaussian (sd 0.01): leapfrog with step > 0.02 is unstable and must diverge."""
    return pg.Target(lambda x: -0.5 * 1e4 * np.sum(x * x, axis=-1), lambda x: -1e4 * x,
                     dim=2, vectorized=True, names=["a", "b"])


@pytest.fixture(scope="session")
def smooth_traj(gaussian):
    return pg.leapfrog(gaussian, [1.0, -0.5], [0.3, 1.2], 0.2, 12)


@pytest.fixture(scope="session")
def divergent_traj(stiff):
    tr = pg.leapfrog(stiff, [0.01, 0.02], [1.0, 0.5], 0.0205, 30)
    assert tr.divergent and tr.divergence_step >= 4  # a few safe steps, then the blow-up
    return tr


@pytest.fixture(scope="session")
def funnel_run():
    """A short run on the centred 12-apiary funnel that has divergences (checked)."""
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.1, 8), n_draws=120, n_chains=3,
                    warmup=0, seed=11)
    assert run.n_divergent > 0
    return run


@pytest.fixture(scope="session")
def small_run(gaussian):
    return pg.sample(gaussian, pg.HMC(0.3, 6), n_draws=80, n_chains=3, warmup=40, seed=5)
