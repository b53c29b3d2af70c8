"""TrajectoryView driven headless: set traits, read the computed trajectory and the artists."""

import json

import numpy as np
import pytest
import traitlets
from PIL import Image

from _views import START, key_below_panels_in_column, open_at_start

import phaseglass as pg
from phaseglass.core.streams import seed_sequence


def make(target, **kw):
    """A TrajectoryView at ``START`` in the fixed region unless given."""
    return open_at_start(pg.TrajectoryView, target, **kw)


def reference(view):
    """The trajectory the view should show, computed directly by the core."""
    metric = pg.Metric(np.asarray(view.inverse_mass))
    return pg.leapfrog(view.target, view.start, view.momentum, view.step_size, view.n_steps,
                       metric=metric, max_energy_error=view.max_energy_error)


def test_knobs_are_traits_with_help(gaussian):
    view = make(gaussian)
    for name in ("step_size", "n_steps", "persistence", "start", "momentum", "inverse_mass", "seed",
                 "coords", "xlim", "ylim"):
        trait = view.traits()[name]
        assert trait.help, name
        assert trait.metadata.get("setting"), name
    assert isinstance(view.trajectory, pg.Trajectory)


@pytest.mark.parametrize("knob, value", [("step_size", 0.23), ("n_steps", 33)])
def test_a_knob_recomputes_trajectory_and_artists(gaussian, knob, value):
    view = make(gaussian, step_size=0.1, n_steps=15, seed=3)
    before = view._readout.value
    setattr(view, knob, value)
    tr = view.trajectory
    assert getattr(tr, knob) == value
    ref = reference(view)
    assert np.allclose(tr.positions, ref.positions)
    assert np.allclose(tr.energy_error, ref.energy_error)
    # what is drawn is that trajectory: the path through the shown coordinates ...
    assert np.allclose(view._path.path.get_xydata(), tr.positions[:, list(view.coords)])
    assert np.allclose(view._path.start.get_xydata()[0], view.start[list(view.coords)])
    # ... and its energy error per leapfrog step
    steps, err = view._energy.error.get_data()
    assert np.array_equal(steps, np.arange(tr.n_steps + 1))
    assert np.allclose(err, tr.energy_error)
    assert view._readout.value != before
    assert f"{value:.4g}" in view._readout.value or f"{value} steps" in view._readout.value


def test_step_size_beyond_the_stability_limit_diverges(gaussian, sigma_min):
    # Leapfrog on a Gaussian is stable only for step size < 2 sigma along every
    # direction; beyond it the energy error grows geometrically (Neal 2011, "MCMC using
    # Hamiltonian dynamics", Handbook of MCMC, ch. 5, the "What stepsize?" discussion).
    limit = 2.0 * sigma_min
    view = make(gaussian, step_size=0.8 * limit, n_steps=40)
    assert not view.trajectory.divergent
    assert "no divergence" in view._readout.value
    view.step_size = 1.2 * limit
    tr = view.trajectory
    assert tr.divergent and tr.divergence_step <= 40
    assert "divergent" in view._readout.value and "no divergence" not in view._readout.value
    assert not view.accepted
    # the divergent step is marked in the energy panel
    assert len(view._energy.divergence.get_xydata()) == 1


def test_click_moves_the_start(gaussian, fire):
    view = make(gaussian)
    view.render()
    fire(view.figure, view._ax, "button_press_event", -2.0, 2.5)
    fire(view.figure, view._ax, "button_release_event", -2.0, 2.5)
    assert np.allclose(view.start, [-2.0, 2.5])
    assert np.allclose(view.trajectory.positions[0], [-2.0, 2.5])
    assert np.allclose(view._path.path.get_xydata()[0], [-2.0, 2.5])
    assert view.status == ""


def test_drag_from_the_start_sets_the_momentum_direction(gaussian, fire):
    view = make(gaussian)
    view.render()
    fig, ax = view.figure, view._ax
    before = view.start.copy()
    fire(fig, ax, "button_press_event", *START)  # on the start point: a drag, not a move
    fire(fig, ax, "motion_notify_event", START[0] + 0.6, START[1] + 0.2)
    fire(fig, ax, "button_release_event", START[0] + 0.6, START[1] + 0.2)
    assert np.allclose(view.start, before)
    p = view.momentum
    direction = p / np.linalg.norm(p)
    assert np.allclose(direction, np.array([0.6, 0.2]) / np.hypot(0.6, 0.2))
    assert np.allclose(view.trajectory.momenta[0], p)
    # after the release, motion does nothing
    fire(fig, ax, "motion_notify_event", START[0] - 1.0, START[1])
    assert np.allclose(view.momentum, p)


def test_resample_momentum_keeps_the_persistence(gaussian):
    a = 0.7
    view = make(gaussian, persistence=a, n_steps=1, seed=5)
    # exact algebra with the seeded draw: p_new = a p_old + sqrt(1 - a^2) xi, where xi is
    # the view's fresh N(0, M) draw for this resample
    old = view.momentum.copy()
    view.resample_momentum()
    xi = view._fresh_momentum()
    assert np.allclose(view.momentum, a * old + np.sqrt(1 - a * a) * xi)
    xi_direct = np.random.default_rng(seed_sequence(5).spawn(2)[-1]).standard_normal(2)
    assert np.allclose(xi, xi_direct)  # identity mass: xi is a standard normal draw
    # statistically: successive momenta have correlation a (lag-1 autocorrelation of an
    # AR(1) sequence), pooled over both coordinates
    moms = [view.momentum.copy()]
    for _ in range(400):
        view.resample_momentum()
        moms.append(view.momentum.copy())
    m = np.array(moms)
    x, y = m[:-1].ravel(), m[1:].ravel()
    r = np.corrcoef(x, y)[0, 1]
    # standard error of r is about (1 - a^2) / sqrt(800) = 0.018; allow 4.5 of them
    assert abs(r - a) < 0.08
    assert view.trajectory.momenta[0] == pytest.approx(view.momentum)


def test_inverse_mass_changes_the_metric(gaussian):
    view = make(gaussian, step_size=0.2, n_steps=12)
    p_old = view.momentum.copy()
    view.inverse_mass = [0.25, 4.0]
    assert np.allclose(view._metric().inverse_mass, [0.25, 4.0])
    # the same standard-normal draw, now scaled by sqrt(M)
    assert np.allclose(view.momentum, p_old * np.sqrt([4.0, 0.25]))
    ref = pg.leapfrog(gaussian, view.start, view.momentum, 0.2, 12,
                      metric=pg.Metric(np.array([0.25, 4.0])))
    assert np.allclose(view.trajectory.positions, ref.positions)
    plain = pg.leapfrog(gaussian, view.start, view.momentum, 0.2, 12)
    assert not np.allclose(view.trajectory.positions, plain.positions)


def test_contours_are_computed_once_per_region(gaussian):
    view = make(gaussian)
    n = view.grid_evaluations
    segments = [s.copy() for s in view._density.contours.get_segments()]
    for k in range(20):
        view.step_size = 0.05 + 0.01 * k
    view.n_steps = 7
    view.momentum = [0.3, -0.2]
    assert view.grid_evaluations == n
    after = view._density.contours.get_segments()
    assert all(np.array_equal(a, b) for a, b in zip(segments, after))
    view.xlim = (-2.0, 2.0)
    assert view.grid_evaluations == n + 1


def test_coordinate_pickers_switch_the_slice(apiaries):
    start = np.zeros(apiaries.dim)
    view = pg.TrajectoryView(apiaries, start=start, xlim=(-3, 3), ylim=(-3, 3), step_size=0.05,
                             n_steps=10)
    n = view.grid_evaluations
    assert view.coords == (0, 1)
    view._x_pick.value = 2  # show apiary[0] against log_tau
    assert view.coords == (2, 1)
    assert view.grid_evaluations == n + 1
    assert view._ax.get_xlabel() == "apiary[0]"
    assert np.allclose(view._path.path.get_xydata(), view.trajectory.positions[:, [2, 1]])
    # the mass knobs name the shown coordinates in full and control their masses
    assert view._mass_knobs[0].label.value == "inverse mass apiary[0]"
    assert view._mass_knobs[1].label.value == "inverse mass log_tau"
    view._mass_knobs[0].box.value = 2.5  # a typed value is taken exactly
    assert view.inverse_mass[2] == 2.5 and view.inverse_mass_x == 2.5
    assert np.allclose(view._metric().inverse_mass[2], 2.5)
    # choosing the same coordinate for both axes is refused with a message
    view._x_pick.value = 1
    assert view.coords == (2, 1) and view._x_pick.value == 2
    assert "different" in view.status
    # setting the trait moves the pickers too
    view.coords = (4, 3)
    assert (view._x_pick.value, view._y_pick.value) == (4, 3)
    # the swap button sits in the picker row and swaps the axes (and their mass knobs)
    (row,) = [c for c in view.children if view._x_pick in getattr(c, "children", ())]
    assert view._swap_pick in row.children
    view._swap_pick.click()
    assert view.coords == (3, 4) and view._ax.get_xlabel() == apiaries.names[3]
    assert view._mass_knobs[0].label.value == f"inverse mass {apiaries.names[3]}"


def test_settings_round_trip_reproduces_the_trajectory(gaussian):
    view = make(gaussian, step_size=0.17, n_steps=23, persistence=0.4, seed=9)
    view.inverse_mass = [0.5, 2.0]
    view.resample_momentum()
    view.move_start(0.4, -1.1)
    saved = json.loads(json.dumps(view.settings))
    assert saved["view"] == "TrajectoryView"
    again = pg.TrajectoryView.from_settings(gaussian, saved)
    assert again.settings == view.settings
    assert np.array_equal(again.trajectory.positions, view.trajectory.positions)
    assert np.array_equal(again.trajectory.energy_error, view.trajectory.energy_error)
    with pytest.raises(ValueError, match="unknown keys"):
        view.apply_settings({**saved, "colour": "red"})
    with pytest.raises(ValueError, match="are for a ChainView"):
        view.apply_settings({**saved, "view": "ChainView"})


def test_raising_log_density_lands_in_status_and_the_view_recovers():
    broken = {"now": False}

    def value_and_grad(x):
        if broken["now"]:
            raise FloatingPointError("model blew up")
        return -0.5 * np.sum(x * x, axis=-1), -x

    target = pg.Target(lambda x: value_and_grad(x)[0], dim=2, vectorized=True,
                       value_and_grad=value_and_grad)
    view = make(target, step_size=0.2, n_steps=10)
    good = view.trajectory
    broken["now"] = True
    view.step_size = 0.3
    assert view.status.startswith("error during redraw")
    assert "FloatingPointError: model blew up" in view.status
    assert isinstance(view.last_error, FloatingPointError)
    assert view.trajectory is good  # the last good picture stays
    broken["now"] = False
    view.step_size = 0.31
    assert view.status == ""
    assert view.trajectory.step_size == 0.31
    assert np.allclose(view._path.path.get_xydata(), view.trajectory.positions)


def test_fast_redraw_gives_the_pixels_of_a_full_render(gaussian):
    view = make(gaussian, step_size=0.1, n_steps=30)
    canvas = view.figure.canvas
    view.render()  # the first full draw captures the background
    full_draws = []
    cid = canvas.mpl_connect("draw_event", full_draws.append)
    view.step_size = 0.13  # a tick: restore background + draw the changed artists
    view.momentum = [0.2, 1.1]
    assert full_draws == []  # the fast path was taken
    fast = np.asarray(canvas.buffer_rgba()).copy()
    canvas.mpl_disconnect(cid)
    full = view.render()
    assert fast.shape == full.shape
    assert np.array_equal(fast, full)


def test_fast_redraw_is_not_used_for_a_new_layout(gaussian):
    view = make(gaussian, step_size=0.1, n_steps=30)
    view.render()
    assert view._background is not None
    view.n_steps = 31  # the energy panel's x range changes: everything is redrawn
    assert view._background is None


def test_link_keeps_two_views_in_step(gaussian):
    a = make(gaussian, step_size=0.1)
    b = make(gaussian, step_size=0.2, start=[-1.0, 0.3])
    link = traitlets.link((a, "step_size"), (b, "step_size"))
    assert b.step_size == 0.1
    a.step_size = 0.27
    assert b.step_size == 0.27 and b.trajectory.step_size == 0.27
    b._step_knob.slider.value = 0.05  # the slider drives its view, which drives the other
    assert a.step_size == pytest.approx(0.05) and a.trajectory.step_size == pytest.approx(0.05)
    link.unlink()
    a.step_size = 0.3
    assert b.step_size == pytest.approx(0.05)


def test_save_png_writes_a_picture(gaussian, tmp_path, blank_fraction):
    view = make(gaussian)
    path = view.save_png(tmp_path / "trajectory.png")
    img = np.asarray(Image.open(path).convert("RGB"))
    assert img.shape[0] > 100 and img.shape[1] > 100
    assert blank_fraction(img) < 0.9


def test_bad_arguments_are_refused(gaussian):
    with pytest.raises(TypeError, match="must be a phaseglass Target"):
        pg.TrajectoryView(lambda x: -x @ x)
    view = make(gaussian)
    with pytest.raises(traitlets.TraitError, match="`step_size` must be > 0"):
        view.step_size = -0.1
    with pytest.raises(traitlets.TraitError, match="`persistence` must lie in"):
        view.persistence = 1.0
    with pytest.raises(traitlets.TraitError, match="`start` must have shape"):
        view.start = [1.0, 2.0, 3.0]


def test_a_step_size_set_from_code_is_the_step_size_used(gaussian):
    # The tour builds TrajectoryView(step_size=0.05); a log slider can only reach
    # 10**(k * step) and the front end echoes that snapped value back. The knob,
    # the readout and the trajectory must keep saying 0.05.
    view = make(gaussian, step_size=0.05, n_steps=40, seed=1)
    slider = view._step_knob.slider
    snapped = 10 ** (round(np.log10(0.05) / slider.step) * slider.step)
    assert snapped != 0.05  # the echo really is a different number
    slider.value = snapped  # what the front end sends after it has placed the handle
    assert view.step_size == 0.05
    assert view.trajectory.step_size == 0.05
    assert "step size 0.05 &times; 40 steps = length 2 " in view._readout.value
    ref = reference(view)
    assert np.array_equal(view.trajectory.energy_error, ref.energy_error)
    assert np.allclose(view._energy.error.get_ydata(), ref.energy_error)
    assert view._step_knob.box.value == 0.05  # the exact number is on show too
    from phaseglass.ui._base import number

    d = float(view.trajectory.energy_error[-1])  # the readout's energy error is this one's
    assert f"&Delta;H = {'+' if d >= 0 else ''}{number(d)} " in view._readout.value


def test_a_slider_drag_changes_the_step_size_and_the_trajectory(gaussian):
    view = make(gaussian, step_size=0.05, n_steps=40, seed=1)
    before = view.trajectory
    slider = view._step_knob.slider
    slider.value = 10 ** (np.log10(0.05) + 6 * slider.step)  # six slider positions up
    eps = view.step_size
    assert eps > 0.05 and eps == float(f"{eps:.3g}")  # a drag gives a short number
    assert view.trajectory.step_size == eps
    assert not np.allclose(view.trajectory.positions, before.positions)
    assert np.allclose(view._path.path.get_xydata(), view.trajectory.positions)
    assert f"step size {eps:.4g} &times;" in view._readout.value
    steps = view._steps_knob.slider
    steps.value = 7
    assert view.n_steps == 7 and view.trajectory.n_steps == 7


def test_the_primary_control_is_the_step_size_slider_and_repaints(gaussian):
    view = make(gaussian, step_size=0.1, n_steps=30)
    primary = [w for w in view._step_knob.children if "pg-primary" in w._dom_classes]
    assert primary == [view._step_knob.slider]
    assert "pg-step-size" in view._step_knob.slider._dom_classes
    before = view.render()
    view._step_knob.slider.value = 10 ** (np.log10(0.1) + 10 * view._step_knob.slider.step)
    after = np.asarray(view.figure.canvas.buffer_rgba()).copy()  # the fast path's frame
    assert not np.array_equal(before, after)


def test_controls_are_labelled_in_full_and_wide_enough_to_aim(gaussian):
    view = make(gaussian)
    names = gaussian.names
    knobs = [view._step_knob, view._steps_knob, view._persist_knob] + view._mass_knobs
    labels = [k.label.value for k in knobs]
    assert labels == ["step size", "leapfrog steps", "persistence",
                      f"inverse mass {names[0]}", f"inverse mass {names[1]}"]
    for k in knobs:
        assert int(k.slider.layout.width.rstrip("px")) >= 160
        assert k.label.layout.flex == "0 0 auto"  # a label never shrinks (no ellipsis)
        assert k.label.tooltip  # the trait's help
    assert view._resample.description == "new momentum"
    assert "persistence" in view._resample.tooltip and "Resample" in view._resample.tooltip
    # the mass knobs set the shown coordinates' masses
    view._mass_knobs[1].box.value = 0.25
    assert view.inverse_mass == [1.0, 0.25] and view.inverse_mass_y == 0.25
    view.inverse_mass = [3.0, 0.5]
    assert (view.inverse_mass_x, view.inverse_mass_y) == (3.0, 0.5)
    assert view._mass_knobs[0].box.value == 3.0


def test_the_figure_fits_the_column_and_nothing_is_cut(gaussian):
    view = make(gaussian)
    view.step_size = 2.0  # a divergence: its X and dashed step reach the frame
    labels = key_below_panels_in_column(view)
    assert "initial momentum" in labels and "max energy error \u00b11000" in labels


def test_former_mass_scale_is_read_as_its_reciprocal_for_one_release(gaussian):
    # issue 12: the view's mass knob is the core's inverse_mass; mass_scale held 1 / inverse mass
    with pytest.warns(DeprecationWarning, match="use `inverse_mass`"):
        view = make(gaussian, mass_scale=[4.0, 0.25])
    assert view.inverse_mass == [0.25, 4.0]
    with pytest.warns(DeprecationWarning, match="use `inverse_mass`"):
        assert view.mass_scale == [4.0, 0.25]
    saved = json.loads(json.dumps(view.settings))
    saved["mass_scale"] = [1.0 / v for v in saved.pop("inverse_mass")]
    with pytest.warns(DeprecationWarning, match="use `inverse_mass`"):
        again = pg.TrajectoryView.from_settings(gaussian, saved)
    assert again.inverse_mass == pytest.approx([0.25, 4.0], rel=1e-12)
    np.testing.assert_allclose(again.trajectory.positions, view.trajectory.positions)
