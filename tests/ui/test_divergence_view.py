"""DivergenceView, headless: list, select, pick and replay divergent transitions."""

import asyncio
import json

import numpy as np
import pytest
import traitlets
from matplotlib.backend_bases import MouseEvent

import phaseglass as pg
from phaseglass.ui.divergence_view import DivergenceView

FUNNEL_SETTINGS = dict(n_draws=300, n_chains=2, warmup=0, seed=1)


@pytest.fixture(scope="module")
def funnel_run():
    """Centred 12 apiaries at a fixed, moderate step size: the funnel makes HMC diverge."""
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.1, 8), **FUNNEL_SETTINGS)  # 16
    assert run.n_divergent >= 5
    return run


@pytest.fixture
def view(funnel_run):
    return DivergenceView(funnel_run, coords=("log_tau", "apiary[0]"))


def xy(line):
    return np.asarray(line.get_xydata(), dtype=float).reshape(-1, 2)


# ----------------------------------------------------------------- listing
def test_lists_every_divergence_of_the_run(view, funnel_run):
    run = funnel_run
    assert len(view.divergences) == run.n_divergent == len(run.divergences)
    for c, t, tr in view.divergences:
        assert run.divergent[c, t] and tr.divergent
    assert [t for _, t, _ in view.divergences] == sorted(t for _, t, _ in view.divergences)
    assert len(view._pick_list.options) == run.n_divergent
    assert f"{run.n_divergent} divergent transitions of 600" in view._readout.value
    assert "never prove convergence" in view._readout.value
    # the scatter shows every draw; the X markers sit on the divergent ones
    c, t = np.nonzero(run.divergent)
    np.testing.assert_allclose(xy(view._pair.divergent), run.draws[c, t][:, [1, 2]])
    assert len(xy(view._pair.points)) == run.n_chains * run.n_draws - run.n_divergent
    assert view.selected == 0  # the first one is shown at once


@pytest.mark.parametrize("index", [0, 3, -1])
def test_selected_trajectory_runs_from_the_previous_draw_to_where_it_diverged(view, funnel_run,
                                                                             index):
    index %= len(view.divergences)
    view.select(index)
    c, t, tr = view.divergences[index]
    assert view.trajectory is tr and view.selected == index
    k = tr.divergence_step
    assert view.replay_step == k
    cols = [1, 2]
    # it starts at the draw before the divergent transition (which stayed there: rejected)
    np.testing.assert_allclose(tr.positions[0], funnel_run.unconstrained[c, t])
    if t > 0:
        np.testing.assert_allclose(tr.positions[0], funnel_run.unconstrained[c, t - 1])
    path = view._path
    np.testing.assert_allclose(xy(path.path), tr.positions[:k, cols])
    np.testing.assert_allclose(xy(path.start), tr.positions[:1, cols])
    last = xy(path.divergent)[-1]  # the last point drawn is where it diverged
    np.testing.assert_allclose(last, tr.positions[k, cols])
    np.testing.assert_allclose(view._energy.error.get_ydata(), tr.energy_error[:k + 1])
    assert view._energy.divergence.get_xdata()[0] == k
    np.testing.assert_allclose(xy(view._ring), funnel_run.draws[c, t][None, cols])
    readout = view._readout.value
    assert f"showing {index + 1} of {len(view.divergences)}" in readout
    assert f"diverged at leapfrog step {k} of {tr.n_steps}" in readout
    assert f"{tr.energy_error[k]:+.4g}" in readout


def test_step_replays_the_trajectory_one_leapfrog_step_at_a_time(view):
    # pick a divergence that happens late enough to replay a few steps before it
    late = [i for i, (_, _, t) in enumerate(view.divergences) if t.divergence_step >= 4]
    assert late, "the funnel run should have a divergence after step 4"
    view.select(late[0])
    tr = view.trajectory
    k = tr.divergence_step
    view.step()  # from the end it starts over
    assert view.replay_step == 0
    assert len(xy(view._path.path)) == 1 and len(xy(view._path.divergent)) == 0
    view.step()
    view.step(2)
    assert view.replay_step == 3
    np.testing.assert_allclose(xy(view._path.path), tr.positions[:4, [1, 2]])
    np.testing.assert_allclose(view._energy.error.get_ydata(), tr.energy_error[:4])
    assert "replay at step 3" in view._readout.value
    view.step(100)
    assert view.replay_step == k and len(xy(view._path.divergent)) == 2
    view._play.value = 2  # the Play control and the slider are linked to replay_step
    assert view.replay_step == 2 and view._step_slider.value == 2
    assert view._play.max == k
    with pytest.raises(traitlets.TraitError, match="`replay_step` must be in"):
        view.replay_step = k + 1
    view.render()  # a full draw, then a blitted replay step
    view.step()
    assert view.replay_step == 3


def test_list_and_coordinates_controls(view, funnel_run):
    view._pick_list.value = 2
    assert view.selected == 2 and view.trajectory is view.divergences[2][2]
    view._x_pick.value = 0  # mu against apiary[0]
    assert view.coords == (0, 2)
    tr = view.trajectory
    k = tr.divergence_step
    np.testing.assert_allclose(xy(view._path.path), tr.positions[:k, [0, 2]])
    c, t = np.nonzero(funnel_run.divergent)
    np.testing.assert_allclose(xy(view._pair.divergent), funnel_run.draws[c, t][:, [0, 2]])
    assert view._ax_pair.get_xlabel() == "mu"


def test_replay_knob_keeps_typed_steps_and_follows_the_divergence(view):
    lengths = {tr.divergence_step for _, _, tr in view.divergences}
    assert len(lengths) > 1, "the funnel run should have divergences at different steps"
    for i, (_, _, tr) in enumerate(view.divergences):
        view.select(i)
        k = tr.divergence_step
        assert view._step_slider.max == k == view._play.max
        assert view._replay_knob.box.value == k == view.replay_step
    view._replay_knob.box.value = 1  # typed
    assert view.replay_step == 1 and view._step_slider.value == 1
    view._replay_knob.box.value = view._end() + 5  # refused: the status says why
    assert view.replay_step == 1 and "`replay_step` must be in" in view.status


def test_replay_controls_are_disabled_until_there_is_a_divergence():
    async def main():
        view = DivergenceView(pg.demos.get("apiaries-12"), kernel=pg.HMC(0.1, 8), n_draws=300,
                              warmup=0, chunk=100, seed=1)
        before = [view._play.disabled, view._step_button.disabled, view._step_slider.disabled,
                  view._replay_knob.box.disabled]
        primary_before = "pg-primary" in view._swap_pick._dom_classes
        await view.wait()
        return view, before, primary_before

    view, before, primary_before = asyncio.run(main())
    assert before == [True, True, True, True] and primary_before
    assert view.divergences and view.trajectory is not None
    assert not (view._play.disabled or view._step_button.disabled or view._step_slider.disabled)
    # the control a browser test moves is now the replay slider (and only it)
    assert "pg-primary" in view._step_slider._dom_classes
    assert "pg-primary" not in view._swap_pick._dom_classes


def test_moving_the_primary_control_changes_the_pixels_at_once(view, blank_fraction):
    view.figure.canvas.syncing_data_url = False
    before = view.render()
    assert "pg-primary" in view._step_slider._dom_classes
    view._step_slider.value = 1  # what a drag does; no step() or play
    assert view.replay_step == 1
    after = view.render()
    assert np.mean(np.any(before != after, axis=-1)) > 0.001
    assert blank_fraction(after) < 0.9


# ------------------------------------------------------------------ picking
def test_a_pick_on_a_divergent_marker_selects_that_divergence(view, funnel_run):
    view.render()  # the transforms are settled after a draw
    ax = view._ax_pair
    points = [tuple(funnel_run.draws[c, t, [1, 2]]) for c, t, _ in view.divergences]
    # a divergence whose marker sits alone (a stuck chain repeats its position)
    j = next(i for i, p in enumerate(points) if points.count(p) == 1 and i != view.selected)
    x, y = ax.transData.transform(points[j])
    mouse = MouseEvent("button_press_event", view.figure.canvas, x, y, button=1)
    view.figure.pick(mouse)  # matplotlib finds the artist and fires the pick event
    assert view.selected == j
    assert view.trajectory is view.divergences[j][2]
    # a click far from every marker changes nothing
    mouse = MouseEvent("button_press_event", view.figure.canvas, 1, 1, button=1)
    view.figure.pick(mouse)
    assert view.selected == j


# ------------------------------------------------------------ no divergence
def test_a_run_without_divergences_says_so(tmp_path):
    run = pg.sample(pg.demos.correlated_gaussian(dim=3, correlation=0.5), pg.HMC(0.2, 8),
                    n_draws=60, n_chains=2, seed=2, warmup=0)
    assert run.n_divergent == 0
    view = DivergenceView(run)
    assert view.divergences == [] and view.selected == -1 and view.trajectory is None
    assert "no divergent transitions in 2 chains &times; 60 draws" in view._readout.value
    assert "never prove convergence" in view._readout.value
    assert view._play.disabled and view._step_button.disabled and view._step_slider.disabled
    # with nothing to replay, swapping x and y is the control that changes the figure
    assert "pg-primary" in view._swap_pick._dom_classes
    assert "pg-primary" not in view._step_slider._dom_classes
    before = view.render()
    view._swap_pick.click()  # as a browser test clicks it
    assert view.coords == (1, 0)
    assert np.any(view.render() != before)
    view._y_pick.box.value = "_3"  # typed in the y picker: clock_3
    assert view.coords == (1, 2)
    # nothing to rank: the ranked-pair list and the grid say so and stay off
    assert view._ranked_list.disabled and view._grid_toggle.disabled
    assert view.pair_grid(4) is None and view.grid is None
    assert "no ranked pairs" in view.status and not view._grid_toggle.value
    view.step()
    assert "no divergence" in view.status
    view.select(0)
    assert "no divergent transitions" in view.status
    with pytest.raises(traitlets.TraitError, match="no divergence replays"):
        view.selected = 0
    assert view.save_png(tmp_path / "none.png").stat().st_size > 5_000


# --------------------------------------------------------- settings, errors
def test_settings_round_trip_on_a_run(view, funnel_run):
    view.select(4)
    view.step()
    view.step(3)
    view.coords = (0, 1)
    settings = json.loads(json.dumps(view.settings))
    assert settings == {"view": "DivergenceView", "coords": [0, 1], "selected": 4,
                        "replay_step": 3}
    again = DivergenceView.from_settings(funnel_run, settings)
    assert again.settings == view.settings
    assert again.trajectory is view.trajectory
    np.testing.assert_allclose(xy(again._path.path), xy(view._path.path))


def test_a_target_is_sampled_and_settings_reproduce_the_run():
    target = pg.demos.get("apiaries-12")
    view = DivergenceView(target, kernel=pg.HMC(0.1, 8), n_draws=60, warmup=30, seed=4,
                          background=False)
    assert view.run.n_draws == 60 and view.run.n_warmup == 30 and not view.sampling
    settings = json.loads(json.dumps(view.settings))
    assert settings["sampling"]["kernel"]["kernel"] == "HMC"
    again = DivergenceView.from_settings(target, settings)
    np.testing.assert_array_equal(again.run.draws, view.run.draws)
    assert again.settings == view.settings


def test_in_a_running_event_loop_a_target_is_sampled_in_chunks():
    async def main():
        view = DivergenceView(pg.demos.get("apiaries-12"), kernel=pg.HMC(0.1, 8), n_draws=40,
                              warmup=20, chunk=15, seed=4)
        assert view.sampling and view.run is None  # the cell returns at once
        await view.wait()
        return view

    view = asyncio.run(main())
    assert not view.sampling and view.run.n_draws == 40
    assert "sampling" not in view._readout.value


def test_errors_in_user_code_land_in_status(funnel_run):
    apiaries = pg.demos.get("apiaries-12")
    broken = {"on": False}

    def log_density(x):
        if broken["on"]:
            raise FloatingPointError("hive weighings file missing")
        return apiaries.log_density(x)

    flaky = pg.Target(log_density, dim=apiaries.dim, vectorized=True, names=apiaries.names,
                      value_and_grad=lambda x: apiaries.value_and_grad(x))
    run = pg.sample(flaky, pg.HMC(0.1, 8), **FUNNEL_SETTINGS)
    np.testing.assert_array_equal(run.draws, funnel_run.draws)
    view = DivergenceView(run)
    broken["on"] = True
    view.select(2)  # the log-density slice through its start calls the user's function
    assert view.status.startswith("error during selection")
    assert "hive weighings file missing" in view.status
    broken["on"] = False
    view.select(3)
    assert view.status == "" and view.trajectory is view.divergences[3][2]
    # sampling a Target whose log-density fails: the view is built and says why
    broken["on"] = True
    failed = DivergenceView(flaky, n_draws=10, warmup=5, background=False)
    assert failed.status.startswith("error during warm-up") and failed.run is None


def test_bad_input_is_rejected(funnel_run):
    with pytest.raises(TypeError, match="must be a phaseglass Run"):
        DivergenceView(np.zeros((2, 3, 4)))
    with pytest.raises(ValueError, match="a Run already has its kernel"):
        DivergenceView(funnel_run, kernel=pg.HMC(0.1, 5))
    view = DivergenceView(funnel_run)
    with pytest.raises(traitlets.TraitError, match=r"`selected` must be in range"):
        view.selected = 99
    with pytest.raises(ValueError, match="different coordinates"):
        view.coords = (1, 1)


def test_the_readout_gives_the_replayed_steps_energy_error(view):
    from phaseglass.ui._base import number

    view.replay_step = 1
    tr = view.trajectory
    d = float(tr.energy_error[1])
    assert f"replay at step 1 of {tr.divergence_step}: &Delta;H = {'+' if d > 0 else ''}{number(d)}" \
        in view._readout.value
    assert not view._energy.verdict.get_visible()  # said once, in the readout


# ------------------------------------------------- opening on the ranked pair
@pytest.fixture(scope="module")
def warm_funnel_run():
    """Centred 12 apiaries with a short warm-up: diverges in the funnel's neck (small log_tau)."""
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.2, 8),  # 28 divergences
                    **dict(FUNNEL_SETTINGS, warmup=100))
    assert run.n_divergent >= 10
    return run


def test_opens_on_the_top_ranked_pair_and_says_why(warm_funnel_run):
    run = warm_funnel_run
    view = DivergenceView(run)
    ranking = pg.divergence_ranking(run)
    assert view.coords == ranking.top_pair == view.ranking.top_pair
    # common practice: a funnel diverges at small scale, so the scale parameter comes first
    assert view.names[view.coords[0]] == "log_tau"
    x, y = (view.names[k] for k in view.coords)
    assert ("coordinates where the divergences differ most from the other draws: "
            f"{x}, {y}") in view._readout.value
    assert view._ax_pair.get_xlabel() == "log_tau" and view._ax_pair.get_ylabel() == y
    c, t = np.nonzero(run.divergent)
    np.testing.assert_allclose(xy(view._pair.divergent), run.draws[c, t][:, list(view.coords)])
    # another pair: the reason is no longer claimed
    view.coords = (0, 2)
    assert view.coords != ranking.top_pair
    assert "differ most" not in view._readout.value


def test_explicit_coords_are_kept(warm_funnel_run):
    view = DivergenceView(warm_funnel_run, coords=("mu", "apiary[1]"))
    assert view.coords == (0, 3)
    assert "differ most" not in view._readout.value


def test_a_targets_view_moves_to_the_top_pair_once_sampled():
    target = pg.demos.get("apiaries-12")
    kw = dict(kernel=pg.HMC(0.2, 8), n_draws=300, warmup=100, seed=1, background=False)
    view = DivergenceView(target, **kw)
    assert view.run.n_divergent > 0
    assert view.coords == pg.divergence_ranking(view.run).top_pair
    assert view.names[view.coords[0]] == "log_tau"
    kept = DivergenceView(target, coords=(0, 2), **kw)
    assert kept.coords == (0, 2) and kept.ranking is not None


# ------------------------------------------------------ grid of top-ranked pairs
def test_the_grid_of_top_pairs_is_drawn_only_when_asked(warm_funnel_run):
    view = DivergenceView(warm_funnel_run)
    assert view.grid_figure is None and view.grid is None
    assert view._grid_slot.children == () and not view._grid_toggle.value
    view._grid_toggle.value = True  # the "top 4 pairs" button
    assert len(view.grid.pairs) == 4 and view._grid_slot.children == (view.grid_figure.canvas,)
    assert "pg-pair-grid" in view.grid_figure.canvas._dom_classes
    view._grid_toggle.value = False
    assert view._grid_slot.children == ()
    grid = view.grid
    view._grid_toggle.value = True  # shown again as drawn: nothing has changed
    assert view.grid is grid and view._grid_slot.children == (view.grid_figure.canvas,)
    assert view.pair_grid(3) is view.grid_figure and len(view.grid.pairs) == 3
    for bad in (0, 7, 2.5, True):
        with pytest.raises(ValueError, match="`k` must be an integer from 1 to 6"):
            view.pair_grid(bad)


@pytest.mark.parametrize("k", [4, 6])
def test_the_grid_shows_the_rankings_top_pairs_in_order(warm_funnel_run, k):
    from phaseglass.ui._base import number

    run = warm_funnel_run
    view = DivergenceView(run)
    fig = view.pair_grid(k)
    assert fig is view.grid_figure and view._grid_toggle.value
    assert view._grid_toggle.description == f"top {k} pairs"
    ranking = pg.divergence_ranking(run)
    top = [tuple(int(v) for v in p) for p in ranking.pairs[:k]]
    assert view.grid.pairs == top
    c, t = np.nonzero(run.divergent)
    starts = {(int(a), int(b)): tr.positions[0] for a, b, tr in view.divergences}
    for rank, (pair, panel, ax) in enumerate(zip(top, view.grid.panels, view.grid.axes)):
        x, y = (view.names[i] for i in pair)
        title = view.grid.titles[rank].get_text()
        assert title.startswith(f"{rank + 1}. {x} \u00d7")  # rank, then the pair
        assert f"= {number(ranking.pair_score[rank], 3)}" in title  # and its score
        assert (ax.get_xlabel(), ax.get_ylabel()) == (x, y)
        # the X markers are the draws of the divergent transitions: their starting points
        np.testing.assert_allclose(xy(panel.divergent), run.draws[c, t][:, list(pair)])
        if not run.target.bounded:  # on the sampler's scale too: each replay's start
            np.testing.assert_allclose(
                xy(panel.divergent), np.array([starts[(a, b)] for a, b in zip(c, t)])[:, list(pair)])
        assert len(xy(panel.points)) == run.n_chains * run.n_draws - run.n_divergent
    # the pair shown above is framed
    assert view.grid.marked == 0 and view.grid.titles[0].get_fontweight() == "bold"


def test_choosing_a_panel_or_a_listed_pair_shows_that_pair(warm_funnel_run, fire):
    run = warm_funnel_run
    view = DivergenceView(run)
    view.pair_grid(4)
    view.grid_figure.canvas.draw()  # settle the layout before aiming
    ax = view.grid.axes[2]
    x, y = ax.transData.inverted().transform(ax.transAxes.transform((0.5, 0.5)))
    fire(view.grid_figure, ax, "button_press_event", x, y)
    pair = view.grid.pairs[2]
    assert view.coords == pair
    assert view._ax_pair.get_xlabel() == view.names[pair[0]]
    c, t = np.nonzero(run.divergent)
    np.testing.assert_allclose(xy(view._pair.divergent), run.draws[c, t][:, list(pair)])
    assert view.grid.marked == 2 and view._ranked_list.value == 2
    assert (view._x_pick.box.value, view._y_pick.box.value) == tuple(view.names[i] for i in pair)
    # the list of ranked pairs does the same
    view._ranked_list.value = 3
    assert view.coords == view.grid.pairs[3] and view.grid.marked == 3
    view.show_ranked_pair(0)
    assert view.coords == view.ranking.top_pair
    # another pair: no panel framed, the list says so
    view.coords = (0, 2) if (0, 2) not in view._ranked_pairs() else (2, 3)
    assert view.grid.marked == -1 and view._ranked_list.value == -1
    with pytest.raises(ValueError, match="`rank` must be in range"):
        view.show_ranked_pair(99)


@pytest.mark.parametrize("k", [3, 4, 6])
def test_the_grid_fits_the_column_and_nothing_is_cut(warm_funnel_run, k):
    from phaseglass.ui._base import COLUMN_WIDTH_IN

    view = DivergenceView(warm_funnel_run)
    fig = view.pair_grid(k)
    width, height = fig.get_size_inches()
    assert width <= COLUMN_WIDTH_IN
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    drawn = fig.get_tightbbox(renderer)  # inches
    assert drawn.x0 >= -0.01 and drawn.y0 >= -0.01
    assert drawn.x1 <= width + 0.01 and drawn.y1 <= height + 0.01
    # every panel title stays above its own panel and clear of its neighbours' titles
    boxes = [t.get_window_extent(renderer) for t in view.grid.titles]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not a.overlaps(b)
    assert view._grid_shape(k)[1] * 2.4 <= COLUMN_WIDTH_IN + 0.01  # panels of 2.4 in or more


def test_the_grid_follows_a_targets_run_once_ranked():
    view = DivergenceView(pg.demos.get("apiaries-12"), kernel=pg.HMC(0.2, 8), n_draws=300,
                          warmup=100, seed=1, background=False)
    assert not view._grid_toggle.disabled and len(view._ranked_list.options) == 7
    fig = view.pair_grid(2)
    assert view.grid.pairs == [tuple(int(v) for v in p) for p in view.ranking.pairs[:2]]
    assert tuple(fig.get_size_inches())[0] <= 7.6


def test_opening_replays_only_the_divergence_it_shows():
    # a fresh run: its replays are integrated on first read (core/sampling.py DivergenceReplay)
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.1, 8), **FUNNEL_SETTINGS)
    assert run.n_divergent >= 5 and not any(item.replayed for item in run.divergences)
    view = DivergenceView(run)
    shown = [item.replayed for item in run.divergences]
    assert sum(shown) == 1  # the selected one, nothing else
    # the list's labels came from the replays' steps without integrating them
    e = view.divergences[view.selected]
    assert view.trajectory is e.trajectory and view._pick_list.options[0][0].endswith(
        f"step {view.divergences[0].divergence_step}")
    view.selected = (view.selected + 1) % len(view.divergences)
    assert sum(item.replayed for item in run.divergences) == 2


def test_a_nuts_run_marks_and_ranks_divergences_where_their_transitions_started():
    # NUTS keeps the valid part of a tree whose newest subtree diverged, so a divergent
    # transition can move: its start is the previous draw, which is where its replay begins.
    run = pg.sample(pg.demos.get("apiaries-12"), pg.NUTS(0.2), n_draws=150, n_chains=2,
                    warmup=0, seed=3)
    moved = [(c, t) for c, t, _ in run.divergences
             if t > 0 and not np.allclose(run.unconstrained[c, t], run.unconstrained[c, t - 1])]
    assert moved, "the test needs a divergent NUTS transition that moved"
    view = DivergenceView(run, coords=(0, 1))
    e = view.divergences[view.selected]
    if e.draw > 0:
        np.testing.assert_allclose(e.trajectory.positions[0], run.unconstrained[e.chain, e.draw - 1])
        ring = np.asarray(view._ring.get_xydata()).reshape(-1)
        np.testing.assert_allclose(ring, run.draws[e.chain, e.draw - 1, :2])
    # the X markers are the divergent transitions' starts (previous draws), not their draws
    from phaseglass.core.triage import transition_starts
    starts = transition_starts(run, scale="user")
    expected = starts[np.asarray(run.divergent, dtype=bool)][:, :2]
    marks = np.asarray(view._pair.divergent.get_xydata()).reshape(-1, 2)
    np.testing.assert_allclose(np.sort(marks, axis=0), np.sort(expected, axis=0))
    c, t = moved[0]
    np.testing.assert_allclose(starts[c, t], run.draws[c, t - 1])
    # HMC never moves on a divergence: its starts are its draws
    hmc = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.1, 8), n_draws=40, n_chains=2, warmup=0, seed=1)
    assert transition_starts(hmc) is not None and np.array_equal(transition_starts(hmc), hmc.unconstrained)
