"""Rendered pictures: not blank, and different when the data differ. Plus the shared style."""

import subprocess
import sys

import numpy as np
import pytest
from matplotlib.figure import Figure

import phaseglass as pg
from phaseglass.core.slices import log_density_grid
from phaseglass.draw import (draw_autocorrelation, draw_chain_spread, draw_energy_error,
                             draw_energy_jumps, draw_ess_per_gradient, draw_gibbs_paths,
                             draw_knob_grid, draw_log_density, draw_pair, draw_pair_grid,
                             draw_running_ess, draw_traces, draw_trajectory,
                             draw_uniform_sequence, style)

RNG = np.random.default_rng(2024)
DRAWS_A = np.cumsum(RNG.normal(size=(2, 120, 2)), axis=1) * 0.1
DRAWS_B = RNG.normal(size=(2, 120, 2)) * 2.0
U_A, ACC_A = RNG.random(80), RNG.random(80) < 0.7
U_B, ACC_B = np.linspace(0, 1, 80), np.arange(80) % 5 != 0


def _traj(variant):
    t = pg.demos.correlated_gaussian()
    p = [0.3, 1.2] if variant == "a" else [-1.0, 0.2]
    return pg.leapfrog(t, [1.0, -0.5], p, 0.2, 12)


def _grid(variant):
    t = pg.demos.correlated_gaussian() if variant == "a" else pg.demos.glaze_ridge()
    return log_density_grid(t, (0, 1), xlim=(-3, 3), ylim=(-3, 3), n=30)


# each entry draws variant "a" or "b" into a fresh Axes and returns the drawing
VIEWS = {
    "log_density": lambda ax, v: draw_log_density(ax, _grid(v)),
    "trajectory": lambda ax, v: draw_trajectory(ax, _traj(v), accepted=v == "a"),
    "energy_error": lambda ax, v: draw_energy_error(ax, _traj(v)),
    "uniforms": lambda ax, v: draw_uniform_sequence(
        ax, *((U_A, ACC_A) if v == "a" else (U_B, ACC_B))),
    "traces": lambda ax, v: draw_traces(ax, DRAWS_A if v == "a" else DRAWS_B),
    "autocorrelation": lambda ax, v: draw_autocorrelation(ax, DRAWS_A if v == "a" else DRAWS_B),
    "running_ess": lambda ax, v: draw_running_ess(ax, DRAWS_A if v == "a" else DRAWS_B, n_points=5),
    "ess_per_gradient": lambda ax, v: draw_ess_per_gradient(ax, [1.0, 2.0] if v == "a" else [3.0, 0.5]),
    "energy": lambda ax, v: draw_energy_jumps(ax, (DRAWS_A if v == "a" else DRAWS_B)[:, :, 0]),
    "pair": lambda ax, v: draw_pair(ax, DRAWS_A if v == "a" else DRAWS_B,
                                    divergent=np.arange(240).reshape(2, 120) % 40 == 0),
    "gibbs_paths": lambda ax, v: draw_gibbs_paths(ax, DRAWS_A if v == "a" else DRAWS_B, last=15),
    "chain_spread": lambda ax, v: draw_chain_spread(ax, DRAWS_A if v == "a" else DRAWS_B),
    "knob_grid": lambda ax, v: draw_knob_grid(
        ax, np.arange(6.0).reshape(2, 3) if v == "a" else np.arange(6.0)[::-1].reshape(2, 3),
        [1, 2, 3], [4, 5]),
}


def _render(pixels, name, variant):
    fig = Figure(figsize=(3, 2.2), dpi=40)
    VIEWS[name](fig.add_subplot(), variant)
    return pixels(fig)


@pytest.mark.parametrize("name", sorted(VIEWS))
def test_pictures_are_not_blank_and_follow_the_data(name, pixels, blank_fraction):
    a, b = _render(pixels, name, "a"), _render(pixels, name, "b")
    empty = pixels(_empty_fig())
    assert blank_fraction(a) < 0.97
    assert np.any(a != empty)
    assert np.mean(np.any(a != b, axis=-1)) > 0.002  # more than a few stray pixels differ


def _empty_fig():
    fig = Figure(figsize=(3, 2.2), dpi=40)
    style.dress(fig.add_subplot())
    return fig


@pytest.mark.parametrize("name", ["trajectory", "traces", "pair", "knob_grid", "uniforms"])
def test_update_draws_the_same_picture_as_a_fresh_draw(name, pixels):
    """Drawing b fresh and updating a drawing of a into b give the same pixels."""
    fig = Figure(figsize=(3, 2.2), dpi=40)
    ax = fig.add_subplot()
    drawing = VIEWS[name](ax, "a")
    fresh_fig = Figure(figsize=(3, 2.2), dpi=40)
    fresh = VIEWS[name](fresh_fig.add_subplot(), "b")
    args = {
        "trajectory": lambda: (_traj("b"), False),
        "traces": lambda: (DRAWS_B,),
        "pair": lambda: (DRAWS_B, np.arange(240).reshape(2, 120) % 40 == 0),
        "knob_grid": lambda: (np.arange(6.0)[::-1].reshape(2, 3),),
        "uniforms": lambda: (U_B, ACC_B),
    }[name]()
    drawing.update(*args)
    assert fresh is not drawing
    assert np.array_equal(pixels(fig), pixels(fresh_fig))


def test_pair_grid_renders(funnel_run, pixels, blank_fraction):
    fig = Figure(figsize=(4, 4), dpi=40)
    draw_pair_grid(fig, funnel_run, [0, 1])
    img = pixels(fig)
    assert blank_fraction(img) < 0.95


def test_palette_is_okabe_ito():
    # Okabe & Ito (2008), "Color Universal Design": the published sRGB values
    published = {"black": (0, 0, 0), "orange": (230, 159, 0), "sky_blue": (86, 180, 233),
                 "bluish_green": (0, 158, 115), "yellow": (240, 228, 66),
                 "blue": (0, 114, 178), "vermillion": (213, 94, 0),
                 "reddish_purple": (204, 121, 167)}
    for name, rgb in published.items():
        assert style.OKABE_ITO[name] == "#{:02X}{:02X}{:02X}".format(*rgb)
    assert set(style.CHAIN_COLOURS) <= set(style.OKABE_ITO.values())


def test_roles_never_rely_on_colour_alone():
    assert style.REJECTED["markerfacecolor"] == "none"
    assert style.ACCEPTED["markerfacecolor"] != "none"
    shapes = {style.START["marker"], style.ACCEPTED["marker"], style.DIVERGENT["marker"]}
    assert len(shapes) == 3
    assert style.DIVERGENT["linestyle"] != style.PATH["linestyle"]
    # chains: every pair of the first four differs in line style, not only colour
    assert len({style.chain_style(i)["linestyle"] for i in range(4)}) == 4
    assert len({style.chain_style(i, markers=True)["marker"] for i in range(6)}) == 6


def test_drawing_never_touches_pyplot_and_slices_stay_light():
    code = (
        "import sys; import phaseglass.core.slices;"
        "light = 'matplotlib' not in sys.modules;"
        "import matplotlib; matplotlib.use('Agg'); import numpy as np;"
        "from matplotlib.figure import Figure;"
        "import phaseglass as pg, phaseglass.draw as d, phaseglass.report, phaseglass.cli;"
        "ax = Figure().add_subplot();"
        "d.draw_trajectory(ax, pg.leapfrog(pg.demos.correlated_gaussian(), [0., 0.], [1., 0.], .2, 5));"
        "d.draw_traces(ax, np.zeros((2, 10, 2)));"
        "print(light, 'matplotlib.pyplot' in sys.modules, 'ipywidgets' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["True", "False", "False"]
