"""ShiftGibbsView, headless: set traits, step, then check the run and the artists' data."""

import json

import numpy as np
import pytest
import traitlets
from scipy import special, stats

import phaseglass as pg
from phaseglass.draw.gibbs import chain_spread, staircase
from phaseglass.ui._base import number
from phaseglass.ui.gibbs_view import ShiftGibbsView, spread_out_starts

# An invented bivariate normal: means, standard deviations and correlation of our own choosing.
MEAN = np.array([1.0, -0.5])
SD = np.array([1.5, 0.8])
RHO = 0.7
COV = np.array([[SD[0] ** 2, RHO * SD[0] * SD[1]], [RHO * SD[0] * SD[1], SD[1] ** 2]])
PREC = np.linalg.inv(COV)


def exact_conditionals(i, x):
    """x[i] given the other coordinate, exactly.

    Conditional of a bivariate normal: mean mu_i + rho (sd_i / sd_j) (x_j - mu_j), variance
    sd_i^2 (1 - rho^2) -- the standard result, e.g. C. M. Bishop (2006), Pattern Recognition
    and Machine Learning, sec. 2.3.1, eqs. (2.81)-(2.82).
    """
    j = 1 - i
    loc = MEAN[i] + RHO * SD[i] / SD[j] * (x[j] - MEAN[j])
    return stats.norm(loc, SD[i] * np.sqrt(1.0 - RHO**2))


def _log_density(x):
    d = x - MEAN
    return -0.5 * np.einsum("...i,ij,...j->...", d, PREC, d)


@pytest.fixture(scope="module")
def target():
    return pg.Target(_log_density, lambda x: -(x - MEAN) @ PREC, dim=2, vectorized=True,
                     names=["pressure", "flow"])


def make(target, **kw):
    kw.setdefault("n_chains", 4)
    return ShiftGibbsView(target, exact_conditionals, **kw)


def level(run):
    """Per chain and draw, x' S^-1 x + sum_i Phi^-1(u_i)^2 of the extended state (x, u).

    ``run.u[:, t + 1]`` are the uniforms in the chain's state after draw ``t`` (each
    coordinate's uniform is read before it is replaced), so the pairs line up.
    With shift 0 this quadratic form is conserved (pg.Gibbs Notes, "Why a shift").
    """
    d = run.draws[:, :-1] - MEAN
    quad = np.einsum("ctj,jk,ctk->ct", d, PREC, d)
    return quad + np.sum(special.ndtri(run.u[:, 1:]) ** 2, axis=-1)


# ------------------------------------------------------------------ the science
def test_ordinary_gibbs_on_a_shared_stream_coalesces(target):
    view = make(target, ordinary=True)
    assert view.kernel.shift is None and view.kernel.shared_stream
    start = view.sampler.state.position.copy()
    assert chain_spread(start[:, None, :])[0] > 1.0  # started apart
    view.step(70)
    spread = chain_spread(view.run.draws)
    assert spread[0] > 1e-3
    assert spread[-1] < 1e-12 and view.spread < 1e-12
    assert view.met_at is not None and view.met_at < 70
    assert "all chains met" in view._readout.value
    # the drawn spread is the computed one (zeros shown at the drawing's floor)
    y = view._spread.spread.get_ydata()
    np.testing.assert_allclose(y, np.maximum(spread, 1e-12))
    assert view._spread.met.get_xdata()[0] == view.met_at


def test_a_shift_keeps_the_chains_apart(target):
    view = make(target, shift=0.1)
    view.step(50)
    spread = chain_spread(view.run.draws)
    assert spread.min() > 0.05
    assert view.spread > 0.05 and view.met_at is None
    # one definition: the readout's spread is the last drawn one (chain_spread of the states)
    assert view.spread == pytest.approx(spread[-1], rel=1e-12)
    assert f"chain spread {number(view.spread, 3)}" in view._readout.value
    with pytest.warns(DeprecationWarning, match="use `spread`"):
        assert view.distance == view.spread
    # ... while every chain still moves about the target
    assert np.all(np.ptp(view.run.draws[:, :, 0], axis=1) > SD[0])


def test_shift_zero_fails_visibly_each_chain_stays_on_one_level_set(target):
    view = make(target, shift=0.0, n_chains=3)
    view.step(40)
    q = level(view.run)
    assert np.all(np.ptp(q, axis=1) < 1e-8 * np.max(q))  # conserved: the chain cannot explore
    assert "shift 0" in view._readout.value
    # the same view with a shift leaves the level set at once
    view.shift = 0.1
    view.reset()
    view.step(40)
    q = level(view.run)
    assert np.all(np.ptp(q, axis=1) > 1.0)


def test_random_shift_is_shared_and_keeps_chains_apart(target):
    view = make(target, random_shift=True, n_chains=3)
    assert view.kernel.shift == "random"
    assert view._shift_slider.disabled
    view.step(20)
    assert chain_spread(view.run.draws).min() > 0.05


# ------------------------------------------------------------ artists = data
def test_artist_data_equals_run_data_after_steps(target):
    view = make(target, trail=10)
    view.step(25)
    run = view.run
    z = run.unconstrained
    assert run.draws.shape == (4, 25, 2) and run.u.shape == (4, 25, 2)
    pts = view.path_points
    np.testing.assert_array_equal(pts, z[:, -11:])
    for c in range(4):
        np.testing.assert_allclose(view._paths.paths[c].get_xydata(), staircase(pts[c]))
        np.testing.assert_allclose(view._paths.heads[c].get_xydata(), z[c, -1:])
        for drawing, coord in ((view._trace_x, 0), (view._trace_y, 1)):
            line = drawing.lines[c]
            np.testing.assert_array_equal(line.get_xdata(), np.arange(25))
            np.testing.assert_array_equal(line.get_ydata(), z[c, :, coord])
    np.testing.assert_allclose(view._starts_line.get_xydata(), view.sampler.initial)
    # a short run shows the start too: trail 0 means everything kept
    view.trail = 0
    np.testing.assert_allclose(view._paths.paths[0].get_xydata(),
                               staircase(np.vstack([view.sampler.initial[0], z[0]])))
    img = view.render()
    assert img.shape[2] == 4 and img.std() > 10  # something was drawn


def test_ring_buffer_bounds_memory_and_axes_follow(target):
    view = make(target, capacity=30, n_chains=2)
    view.step(50)
    run = view.run
    assert run.n_draws == 30 and run.first_draw == 20 and view.n_sweeps == 50
    line = view._trace_x.lines[0]
    np.testing.assert_array_equal(line.get_xdata(), 20 + np.arange(30))
    lo, hi = view._ax_spread.get_xlim()
    assert lo <= 20 and hi >= 49


def test_spread_out_starts_are_far_apart():
    pts = np.array([[0.0, 0.0], [0.1, 0.1], [3.0, 0.0], [-3.0, 0.0], [0.0, 3.0]])
    got = spread_out_starts(pts, 3, scale=np.ones(2))
    assert {tuple(p) for p in got} == {(3.0, 0.0), (-3.0, 0.0), (0.0, 3.0)}


# ------------------------------------------------------------------ the knobs
def test_a_shift_change_replays_the_shown_sweeps_at_once(target):
    view = make(target, trail=30)
    view.step(5)
    starts = view.sampler.initial.copy()
    paths = [p.get_xydata().copy() for p in view._paths.paths]
    view.figure.canvas.syncing_data_url = False
    picture = view.render()
    view._shift_slider.value = 0.25  # what a drag does; no step() or play
    assert view.shift == 0.25 and view.kernel.shift == 0.25 and view.n_sweeps == 5
    # the same five sweeps from the same starts on the same stream, now with c = 0.25
    again = pg.Sampler(target, pg.Gibbs(exact_conditionals, shift=0.25, shared_stream=True),
                       starts, n_chains=4, seed=0)
    again.step(5)
    np.testing.assert_array_equal(view.sampler.initial, starts)
    np.testing.assert_array_equal(view.run.draws, again.run.draws)
    # ... and the artists show it without a step
    assert all(not np.array_equal(old, p.get_xydata()) for old, p in zip(paths, view._paths.paths))
    for c in range(4):
        np.testing.assert_allclose(view._paths.heads[c].get_xydata(),
                                   view.run.unconstrained[c, -1:])
    assert np.mean(np.any(view.render() != picture, axis=-1)) > 0.001
    title = view._title.get_text()
    assert "4 chains" in title and "5 sweeps" in title and "c = 0.25" in title
    assert title.endswith("(replayed at once)")
    assert "replayed from their starts for 5 sweeps" in view._readout.value
    assert "pg-primary" in view._shift_slider._dom_classes
    view.step()
    assert view.n_sweeps == 6 and "replayed" not in view._title.get_text()


def test_a_replay_is_bounded_by_the_trail_and_every_knob_replays(target):
    view = make(target, trail=12)
    view.step(40)
    view.shift = 0.3
    assert view.n_sweeps == 12  # a long run replays only the shown trail
    starts = view.sampler.initial.copy()
    view.ordinary = True
    assert view.n_sweeps == 12 and view.kernel.shift is None and view._shift_slider.disabled
    np.testing.assert_array_equal(view.sampler.initial, starts)
    # with the shift knob disabled, the chains slider is the control that changes the figure
    assert "pg-primary" in view._chains_slider._dom_classes
    assert "pg-primary" not in view._shift_slider._dom_classes
    view.seed = 3
    assert view.n_sweeps == 12 and "the seed" in view._readout.value
    view._chains_slider.value = 6
    assert view.n_chains == 6 and view.n_sweeps == 12
    assert len(view._paths.paths) == 6 and len(view._trace_y.lines) == 6
    assert view.run.draws.shape == (6, 12, 2)
    assert len({tuple(np.round(s, 12)) for s in view.sampler.initial}) == 6  # six distinct starts
    view.reset()
    assert view.n_sweeps == 0
    view.shift = 0.2  # nothing shown, nothing replayed
    assert view.n_sweeps == 0


def test_play_ticks_step_and_buttons_work(target):
    view = make(target, n_chains=2)
    view._play.value = 1  # what the front end does on each tick
    view._play.value = 2
    assert view.n_sweeps == 2
    view._step_button.click()
    assert view.n_sweeps == 3
    view._reset_button.click()
    assert view.n_sweeps == 0 and view._play.value == 0


def test_bad_knobs_are_rejected_without_side_effects(target):
    view = make(target, n_chains=2)
    with pytest.raises(traitlets.TraitError, match="`shift` must lie in"):
        view.shift = 1.0
    with pytest.raises(traitlets.TraitError, match="`n_chains` must lie in"):
        view.n_chains = 1
    with pytest.raises(ValueError, match="different coordinates"):
        view.coords = (0, 0)
    assert view.shift == 0.1 and view.n_chains == 2
    with pytest.raises(TypeError, match="must be a phaseglass Target"):
        ShiftGibbsView(_log_density)
    with pytest.raises(ValueError, match="`capacity` must be an int"):
        make(target, capacity=1)
    with pytest.raises(TypeError, match="`conditionals` must be None or a callable"):
        ShiftGibbsView(target, conditionals=3)


def test_numeric_conditionals_and_coordinates_on_three_dimensions():
    t = pg.demos.correlated_gaussian(dim=3, correlation=0.5)
    view = ShiftGibbsView(t, n_chains=3, ordinary=True, coords=(0, 2))
    view.step(4)
    z = view.run.unconstrained
    np.testing.assert_allclose(view._paths.heads[1].get_xydata(), z[1, -1:, [0, 2]].T)
    view._y_pick.value = 1  # the coordinate dropdown
    assert view.coords == (0, 1)
    np.testing.assert_allclose(view._paths.heads[1].get_xydata(), z[1, -1:, [0, 1]].T)
    np.testing.assert_array_equal(view._trace_y.lines[2].get_ydata(), z[2, :, 1])
    assert view._ax.get_ylabel() == t.names[1]
    (row,) = [c for c in view.children if view._x_pick in getattr(c, "children", ())]
    assert view._swap_pick in row.children  # the swap button sits in the picker row
    view._swap_pick.click()
    assert view.coords == (1, 0) and view._ax.get_xlabel() == t.names[1]


def test_vectorized_conditionals_are_called_once_for_all_chains_in_the_pilot_too(target):
    shapes = []

    def conditionals(i, x):
        shapes.append(np.shape(x))
        return exact_conditionals(i, x)

    from phaseglass.ui.gibbs_view import _PILOT_CHAINS

    view = ShiftGibbsView(target, conditionals, n_chains=4, vectorized=True)
    assert view.kernel.vectorized and view._pilot is not None
    # the pilot's sweeps ask once for all its chains, x of shape (dim, chains); only the
    # kernel's start-of-run checks ask chain by chain
    assert (2, _PILOT_CHAINS) in shapes
    shapes.clear()
    ShiftGibbsView(target, conditionals, n_chains=4)
    assert shapes and all(len(s) == 1 for s in shapes)  # not vectorized: one chain per call
    run = pg.sample(target, pg.Gibbs(exact_conditionals, vectorized=True), n_draws=10,
                    n_chains=2, warmup=0, seed=1)
    assert pg.ShiftGibbsView.from_run(run, n_chains=3).kernel.vectorized


# ------------------------------------------------------------ settings, errors
def test_settings_round_trip_and_reproduce_the_draws(target, tmp_path):
    view = make(target, n_chains=3, seed=7, trail=12)
    view.shift = 0.3
    view.step(10)
    settings = json.loads(json.dumps(view.settings))
    assert settings["view"] == "ShiftGibbsView" and settings["shift"] == 0.3
    again = ShiftGibbsView.from_settings(target, settings, conditionals=exact_conditionals)
    assert again.settings == view.settings
    again.step(10)
    np.testing.assert_array_equal(again.run.draws, view.run.draws)
    path = view.save_png(tmp_path / "gibbs.png")
    assert path.stat().st_size > 10_000
    with pytest.raises(ValueError, match="unknown keys"):
        ShiftGibbsView.from_settings(target, {**settings, "colour": 1})


def test_an_error_in_the_conditionals_lands_in_status_and_the_view_keeps_working(target):
    broken = {"on": False}

    def conditionals(i, x):
        if broken["on"] and i == 1:
            raise ZeroDivisionError("flow model not ready")
        return exact_conditionals(i, x)

    view = ShiftGibbsView(target, conditionals, n_chains=2)
    view.step(3)
    broken["on"] = True
    view.step()
    assert view.status.startswith("error during step")
    assert "flow model not ready" in view.status
    assert isinstance(view.last_error, RuntimeError)
    assert view.n_sweeps == 3  # nothing half-done was recorded
    view.step()  # still failing, still no exception
    broken["on"] = False
    view.step(2)
    assert view.status == "" and view.n_sweeps == 5
    # replacing the function works the same way, without a reset
    view.conditionals = exact_conditionals
    view.step()
    assert view.n_sweeps == 6


def test_conditionals_that_always_fail_still_give_a_view_that_reports_it(target):
    def conditionals(i, x):
        raise KeyError("no such conditional")

    view = ShiftGibbsView(target, conditionals, n_chains=2)
    assert view.status.startswith("error during the pilot run")  # random starts instead
    assert view.run.draws.shape == (2, 0, 2)
    view.step()
    assert view.status.startswith("error during step") and "no such conditional" in view.status
    view.conditionals = exact_conditionals
    view.step(2)
    assert view.status == "" and view.n_sweeps == 2
