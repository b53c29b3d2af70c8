"""Shared fixtures for the headless widget tests: demo targets and synthetic mouse events.

``gaussian`` and ``blank_fraction`` come from tests/conftest.py.
"""

import numpy as np
import pytest
from matplotlib.backend_bases import MouseEvent

import phaseglass as pg


@pytest.fixture(scope="session")
def sigma_min(gaussian):
    """Smallest standard deviation of ``gaussian`` (along its narrow principal axis)."""
    return float(np.sqrt(np.linalg.eigvalsh(gaussian.cov).min()))


@pytest.fixture(scope="session")
def apiaries():
    """The small hierarchical demo, centred (12 apiaries, dim 14: mu, log_tau, apiary[0..11])."""
    return pg.demos.get("apiaries-12")


def _fire(figure, ax, name, x, y, button=1):
    """Send a matplotlib mouse event at data coordinates (x, y) of ``ax`` through the canvas."""
    px, py = ax.transData.transform((x, y))
    event = MouseEvent(name, figure.canvas, px, py, button=button)
    assert event.inaxes is ax, "the synthetic event missed the Axes"
    figure.canvas.callbacks.process(name, event)
    return event


@pytest.fixture(scope="session")
def fire():
    """``fire(figure, ax, name, x, y)``: a synthetic ``button_press_event`` (or motion, release)."""
    return _fire
