"""DoublingView driven headless: set traits, read the tree and the artists drawn from it."""

import numpy as np
import pytest
import traitlets

from _views import START, key_below_panels_in_column, open_at_start

import phaseglass as pg


def make(target, **kw):
    """A DoublingView at ``START`` in the fixed region unless given."""
    return open_at_start(pg.DoublingView, target, **kw)


def reference(view):
    """The tree the view should show, built directly by the kernel."""
    kernel = pg.NUTS(view.step_size, view.max_depth,
                     metric=pg.Metric(np.asarray(view.inverse_mass)))
    return kernel.build_tree(view.target, view.start, view.momentum, seed=view.seed)


def deep_seed(view, least=4):
    """Set a seed whose tree makes at least ``least`` doublings; return the depth."""
    for s in range(40):
        view.seed = s
        depth = int(view.info["tree_depth"][0])
        if depth >= least and not view.info["divergent"][0]:
            return depth
    raise AssertionError("no seed gave a deep tree")


def test_the_drawn_points_are_the_trees_states(gaussian):
    view = make(gaussian, step_size=0.15)
    deep_seed(view)
    tree, info = reference(view)
    assert np.array_equal(view.tree.positions, tree.positions, equal_nan=True)
    assert np.array_equal(view.info["tree_depth"], info["tree_depth"])
    c = list(view.coords)
    d = view._tree_draw
    every = np.flatnonzero(tree.doubling[0] != -2)
    # every state is a candidate, at its place, with its chance of being selected
    assert np.array_equal(d.rows, every)
    assert np.allclose(d.candidates.get_offsets(), tree.positions[0, every][:, c])
    assert np.allclose(d.weights, tree.selection_prob[0, every])
    order = np.argsort(d.weights)
    assert np.all(np.diff(d.candidates.get_sizes()[order]) >= 0)  # larger chance, larger mark
    assert np.isclose(np.sum(d.weights), 1.0)
    # the path is the merged trajectory in time order; the abandoned subtree is apart
    merged = np.flatnonzero(tree.merged[0])
    assert np.allclose(d.path.get_xydata(), tree.positions[0, merged][:, c])
    gone = np.flatnonzero(~tree.merged[0] & (tree.doubling[0] >= 0))
    assert np.allclose(d.abandoned.get_xydata(), tree.positions[0, gone][:, c]) or not gone.size
    # the energy panel shows every state's energy error at its place in time
    x, y = view._energy.error.get_data()
    assert np.array_equal(x, merged - tree.start[0])
    assert np.allclose(y, tree.energy_error[0, merged])


def test_the_selected_point_is_the_kernels_transition_with_the_same_seed(gaussian):
    view = make(gaussian, step_size=0.2, max_depth=6)
    for seed in (0, 3, 11):
        view.seed = seed
        sampler = pg.Sampler(gaussian, pg.NUTS(0.2, 6), initial=START, n_chains=1, seed=seed)
        info = sampler.step(record=True)
        recorded = sampler.last_trajectory  # the sampler's own tree: same momentum, same states
        assert np.array_equal(view.momentum, recorded.momenta[0, recorded.start[0]])
        assert np.array_equal(view.tree.positions, recorded.positions, equal_nan=True)
        moved_to = sampler.state.position[0]
        selected = view.tree.positions[0, view.tree.selected[0]]
        assert np.array_equal(selected, moved_to)
        assert np.allclose(view._tree_draw.selected.get_xydata()[0], moved_to[list(view.coords)])
        assert int(view.info["tree_depth"][0]) == int(info["tree_depth"][0])
        assert int(view.info["n_leapfrog"][0]) == int(info["n_leapfrog"][0])


def test_the_doubling_slider_shows_the_first_k_doublings(gaussian):
    view = make(gaussian, step_size=0.15)
    depth = deep_seed(view)
    assert view.doublings == depth and view._play.max == depth
    tree = view.tree
    d = view._tree_draw
    for k in range(depth + 1):
        view._doubling_knob.slider.value = k  # what a drag (or Play) does
        assert view.doublings == k
        shown = np.flatnonzero(tree.doubling[0, :] < k)
        shown = shown[tree.doubling[0, shown] != -2]
        assert np.array_equal(d.rows, shown)
        assert len(d.selected.get_xydata()) == (1 if k == depth else 0)
        assert len(d.turn_ends.get_xydata()) == (2 if k == depth else 0)
        x, _ = view._energy.error.get_data()
        assert len(x) == np.count_nonzero(tree.merged[0, shown])
        if k:
            newest = np.flatnonzero((tree.doubling[0] == k - 1) & tree.merged[0])
            assert np.allclose(d.newest.get_xydata(), tree.positions[0, newest])
        if k < depth:
            assert f"showing {k} of {depth} doublings" in view._readout.value
    # the directions of the doublings, in order, are in the readout
    arrows = " ".join("\u2192" if s > 0 else "\u2190" for s in tree.directions[0, :depth])
    assert f"({arrows})" in view._readout.value
    view._play.value = 1
    assert view.doublings == 1
    view.step_size = 0.16  # a new tree shows all its doublings again
    assert view.doublings == int(view.info["tree_depth"][0])


def test_the_u_turn_pair_is_drawn_where_the_criterion_fired(gaussian):
    view = make(gaussian, step_size=0.15)
    found = {True: False, False: False}
    for seed in range(30):
        view.seed = seed
        tree = view.tree
        if not view.info["turned"][0]:
            continue
        a, b = tree.turn_rows[0]
        assert 0 <= a < b
        pos, mom = tree.positions[0], tree.momenta[0]
        # the generalised criterion (identity metric): an end's momentum against the summed
        # momentum of the stretch between them (Betancourt 2017, arXiv:1701.02434, sec. on
        # dynamic trajectory lengths)
        rho = mom[a:b + 1].sum(axis=0)
        assert mom[a] @ rho <= 0 or mom[b] @ rho <= 0
        d = view._tree_draw
        assert np.allclose(d.turn_ends.get_xydata(), pos[[a, b]])
        assert np.allclose(d.turn_span.get_xydata(), pos[a:b + 1])
        for arrow, r in zip(d.turn_momenta, (a, b)):
            tail, tip = np.asarray(arrow._posA_posB)
            assert np.allclose(tail, pos[r])
            assert np.allclose((tip - tail) / d.momentum_scale, mom[r])
        whole = bool(tree.turn_whole[0])
        found[whole] = True
        assert ("U-turn in the whole trajectory" if whole else "U-turn in a subtree") \
            in view._readout.value
        if whole:  # the whole merged trajectory, end to end
            rows = np.flatnonzero(tree.merged[0])
            assert (a, b) == (rows[0], rows[-1])
    assert found[True] and found[False]  # both kinds of U-turn were seen


def test_a_divergent_tree_marks_its_divergence(gaussian, sigma_min):
    # leapfrog on a Gaussian is unstable beyond 2 sigma_min (Neal 2011, "MCMC using
    # Hamiltonian dynamics", Handbook of MCMC, ch. 5)
    view = make(gaussian, step_size=3.0 * sigma_min, seed=2)
    assert view.info["divergent"][0]
    tree = view.tree
    k = int(tree.divergence_step[0])
    j = tree.doubling[0, k]
    assert not tree.merged[0, k]  # the divergent subtree was abandoned
    seg = view._tree_draw.divergent.get_xydata()
    assert len(seg) == 2 and np.allclose(seg[1], tree.positions[0, k])
    before = k - 1 if tree.directions[0, j] > 0 else k + 1
    assert np.allclose(seg[0], tree.positions[0, before])
    x, _ = view._energy.divergence.get_data()
    assert list(x) == [k - tree.start[0]]
    assert "divergent" in view._readout.value
    view.doublings = int(j)  # before the divergent doubling: nothing is marked yet
    assert len(view._tree_draw.divergent.get_xydata()) == 0


def test_click_moves_the_start_and_drag_sets_the_momentum(gaussian, fire):
    view = make(gaussian, step_size=0.2)
    fire(view.figure, view._ax, "button_press_event", -1.0, 1.5)
    assert np.allclose(view.start, [-1.0, 1.5])
    assert np.allclose(view.tree.positions[0, view.tree.start[0]], [-1.0, 1.5])
    fire(view.figure, view._ax, "button_press_event", -1.0, 1.5)  # on the start: a drag
    fire(view.figure, view._ax, "motion_notify_event", 0.0, 1.5)
    view._on_release(None)
    scale = view._tree_draw.momentum_scale
    assert np.allclose(view.momentum, [1.0 / scale, 0.0])
    assert np.allclose(view.tree.momenta[0, view.tree.start[0]], view.momentum)


def test_from_run_opens_on_the_runs_transition():
    target = pg.demos.correlated_gaussian()
    run = pg.sample(target, pg.NUTS(0.3, 6), n_draws=40, n_chains=2, warmup=60, seed=4)
    view = pg.DoublingView.from_run(run, draw=17, chain=1)
    assert view.step_size == run.kernel.step_size and view.max_depth == 6
    assert np.array_equal(view.start, run.unconstrained[1, 16])
    assert np.allclose(view.tree.positions[0, view.tree.selected[0]], run.unconstrained[1, 17])
    assert int(view.info["tree_depth"][0]) == int(run.extras["tree_depth"][1, 17])
    assert "the run's transition to draw 17 of chain 1" in view.status
    view.seed = 99  # another tree from that start: no longer the run's
    assert "the run's transition" not in view.status
    with pytest.raises(ValueError, match="`draw` must be >= 1"):
        pg.DoublingView.from_run(run, draw=0)
    with pytest.raises(ValueError, match="`chain` must be an integer in range"):
        pg.DoublingView.from_run(run, chain=5)
    with pytest.raises(ValueError, match="`draw` must be an integer in range"):
        pg.DoublingView.from_run(run, draw=400)
    hmc = pg.sample(target, pg.HMC(0.3, 8), n_draws=20, n_chains=1, warmup=0, seed=1)
    view = pg.DoublingView.from_run(hmc, draw=5)
    assert "did not use NUTS" in view.status


def test_bad_arguments_are_refused(gaussian):
    with pytest.raises(TypeError, match="must be a phaseglass Target"):
        pg.DoublingView(lambda x: -x @ x)
    view = make(gaussian)
    with pytest.raises(traitlets.TraitError, match="`step_size` must be > 0"):
        view.step_size = -0.1
    with pytest.raises(traitlets.TraitError, match="`max_depth` must lie in"):
        view.max_depth = 0
    with pytest.raises(traitlets.TraitError, match="`start` must have shape"):
        view.start = [1.0, 2.0, 3.0]
    with pytest.raises(traitlets.TraitError, match="`momentum` must be finite"):
        view.momentum = [np.nan, 0.0]
    with pytest.raises(traitlets.TraitError, match="`doublings` must lie in"):
        view.doublings = -1


def test_a_raising_log_density_lands_in_the_status_line():
    def logp(x):
        if x[0] > 5:
            raise RuntimeError("model blew up")
        return -0.5 * float(x @ x)

    target = pg.Target(logp, lambda x: -np.asarray(x, dtype=float), dim=2)
    view = pg.DoublingView(target, start=[0.0, 0.0], xlim=(-3, 3), ylim=(-3, 3), step_size=0.3)
    view.start = np.array([5.5, 0.0])
    assert "error during redraw" in view.status and "model blew up" in view.status
    view.start = np.array([0.5, 0.0])  # the view recovers
    assert not view.status.startswith("error")


def test_the_primary_control_is_the_step_size_slider_and_repaints(gaussian):
    view = make(gaussian, step_size=0.15)
    primary = [w for w in view._step_knob.children if "pg-primary" in w._dom_classes]
    assert primary == [view._step_knob.slider]
    assert "pg-view" in view._dom_classes
    before = view.render()
    view._step_knob.slider.value = 10 ** (np.log10(0.15) + 10 * view._step_knob.slider.step)
    after = view.render()
    assert not np.array_equal(before, after)


def test_the_figure_fits_the_column_and_nothing_is_cut(gaussian, sigma_min):
    view = make(gaussian, step_size=3.0 * sigma_min, seed=2)  # a divergence reaches the frame
    labels = key_below_panels_in_column(view)
    assert "U-turn: momenta compared" in labels and "divergent subtree" in labels


def test_settings_round_trip_reproduces_the_tree(gaussian):
    view = make(gaussian, step_size=0.17, max_depth=7, seed=5)
    view.momentum = np.array([0.4, -1.1])
    again = pg.DoublingView.from_settings(gaussian, view.settings)
    assert np.array_equal(again.tree.positions, view.tree.positions, equal_nan=True)
    assert again.tree.selected[0] == view.tree.selected[0]
