"""ChainView driven headless: traits in, computed data and artist data out."""

import json

import numpy as np
import pytest
import traitlets
from PIL import Image

import phaseglass as pg


@pytest.fixture(scope="module")
def glaze():
    return pg.demos.glaze_ridge()


def make(target, **kw):
    kw.setdefault("xlim", (-1.6, 1.6))
    kw.setdefault("ylim", (-2.0, 2.0))
    return pg.ChainView(target, **kw)


def test_step_records_run_and_artists_show_it(glaze):
    view = make(glaze, step_size=0.1, n_steps=8, n_chains=3, seed=4)
    assert view.run.n_draws == 0
    view.step(25)
    run = view.run
    assert run.draws.shape == (3, 25, 2)
    assert run.u.shape == (3, 25) and run.accepted.shape == (3, 25)
    # the scatter shows every draw (sampler's scale), pooled over chains; draws whose
    # transition diverged get their own marker
    xy = np.concatenate([view._pairs.points.get_xydata(), view._pairs.divergent.get_xydata()])
    assert xy.shape == (75, 2)
    assert len(view._pairs.divergent.get_xydata()) == run.n_divergent
    assert np.allclose(np.sort(xy[:, 0]), np.sort(run.unconstrained[..., 0].ravel()))
    # the u sequence is chain 0's u, in order
    shown = np.concatenate([view._useq.accepted.get_xydata(), view._useq.rejected.get_xydata()])
    assert np.allclose(np.sort(shown[:, 1]), np.sort(run.u[0]))
    # the latest trajectory is drawn from chain 0's previous state
    traj = view.sampler.last_trajectory
    assert np.allclose(view._traj.path.get_xydata()[0], traj.positions[0, 0, :2])
    assert "25 transitions x 3 chains" in view._readout.value
    assert pg.CAUTION in view._readout.value


def test_same_seed_same_draws_as_sample(glaze):
    # Stepping the view is the same code path as pg.sample (one Sampler.step loop).
    view = make(glaze, step_size=0.15, n_steps=5, n_chains=2, seed=11)
    view.step(30)
    kernel = pg.HMC(0.15, 5)
    run = pg.sample(glaze, kernel, view.sampler.initial, n_draws=30, n_chains=2, seed=11)
    assert np.array_equal(run.draws, view.run.draws)


def test_live_knobs_reach_the_kernel_without_reset(glaze):
    view = make(glaze, kernel_name="partial", uniform="drifting", step_size=0.05, n_steps=1,
                persistence=0.8, drift=0.02)
    view.step(10)
    view.step_size = 0.07
    view.persistence = 0.95
    view.drift = 0.05
    assert view.kernel.step_size == 0.07
    assert view.kernel.persistence == 0.95
    assert view.kernel.uniform.drift == 0.05
    view.step(5)
    assert view.run.n_draws == 15  # knobs changed between transitions, record kept
    u = view.run.u
    # the recorded u of the drifting scheme is |v| with v in [-1, 1] (arXiv:2001.11950)
    assert np.all((u >= 0) & (u <= 1))


def test_kernel_switch_keeps_positions_and_starts_new_record(glaze):
    view = make(glaze, step_size=0.1, n_steps=5)
    view.step(12)
    before = view.sampler.state.position.copy()
    view.kernel_name = "walk"
    assert isinstance(view.kernel, pg.RandomWalk)
    assert view.run.n_draws == 0
    assert np.allclose(view.sampler.state.position, before)
    view.step(3)
    assert view.run.n_grad.sum() == 0  # a random walk uses no gradients
    assert "log-density evaluation" in view._readout.value


def test_reset_and_seed_restart(glaze):
    view = make(glaze, seed=3)
    view.step(10)
    first = view.run.draws.copy()
    view.reset()
    assert view.run.n_draws == 0
    view.step(10)
    assert np.array_equal(view.run.draws, first)
    view.seed = 4
    view.step(10)
    assert not np.array_equal(view.run.draws, first)


def test_ring_buffer_bounds_memory(glaze):
    view = make(glaze, capacity=40, step_size=0.2, n_steps=3)
    view.step(100)
    run = view.run
    assert run.n_draws == 40 and run.first_draw == 60
    assert view._traces.lines[0].get_xdata()[0] == 60


def test_divergences_are_counted_and_marked():
    # Leapfrog on N(0, sigma^2) is unstable for step size > 2 sigma (Neal 2011,
    # "MCMC using Hamiltonian dynamics", Handbook of MCMC ch. 5); here the
    # smallest scale is 0.1, so a step of 0.5 diverges.
    target = pg.demos.correlated_gaussian(2, 0.0, scales=[1.0, 0.1])
    view = pg.ChainView(target, step_size=0.5, n_steps=10, xlim=(-3, 3), ylim=(-0.5, 0.5))
    view.step(5)
    assert view.run.n_divergent > 0
    assert len(view._pairs.divergent.get_xydata()) == view.run.n_divergent
    assert "divergent" in view._readout.value


def test_errors_from_user_code_land_in_status_and_view_keeps_working():
    broken = {"on": False}

    def vg(x):
        if broken["on"]:
            raise RuntimeError("model exploded")
        return -0.5 * np.sum(x * x, axis=1), -x

    target = pg.Target(lambda x: vg(x)[0], dim=2, vectorized=True, value_and_grad=vg)
    view = pg.ChainView(target, xlim=(-3, 3), ylim=(-3, 3))
    view.step(3)
    broken["on"] = True
    view.step(2)
    assert "model exploded" in view.status
    broken["on"] = False
    view.step(2)
    assert view.status == ""
    assert view.run.n_draws == 5


def test_bad_settings_are_rejected_with_named_trait(glaze):
    view = make(glaze)
    with pytest.raises(traitlets.TraitError, match="step_size"):
        view.step_size = -1.0
    with pytest.raises(traitlets.TraitError, match="persistence"):
        view.persistence = 1.0
    with pytest.raises(traitlets.TraitError, match="drift"):
        view.drift = 0.0
    with pytest.raises(TypeError, match="target"):
        pg.ChainView(lambda x: x)


def test_settings_round_trip_and_exports(glaze, tmp_path):
    view = make(glaze, kernel_name="partial", uniform="drifting", step_size=0.04, n_steps=2,
                persistence=0.7, seed=9)
    text = json.dumps(view.settings)
    again = pg.ChainView.from_settings(glaze, json.loads(text))
    assert again.settings == view.settings
    view.step(5)
    again.step(5)
    assert np.array_equal(again.run.draws, view.run.draws)
    png = view.save_png(tmp_path / "chain.png")
    img = np.asarray(Image.open(png))
    assert img.std() > 5  # not blank
    gif = view.save_gif(tmp_path / "chain.gif", n_transitions=2, frames_per_transition=2)
    with Image.open(gif) as im:
        assert im.n_frames == 4


def test_two_views_linked(glaze):
    a, b = make(glaze), make(glaze)
    traitlets.link((a, "step_size"), (b, "step_size"))
    a.step_size = 0.033
    assert b.kernel.step_size == pytest.approx(0.033)


def test_a_tuned_kernel_keeps_its_mass_matrix(glaze):
    # A kernel tuned by warm-up carries a metric; the view must step with it, whatever
    # kernel is picked afterwards.
    tuned = pg.HMC(0.3, 4, metric=np.array([0.2, 0.5]))
    view = make(glaze, kernel=tuned)
    assert view.kernel.metric.kind == "diagonal"
    assert np.allclose(view.kernel.metric.inverse_mass, [0.2, 0.5])
    view.kernel_name = "partial"
    assert np.allclose(view.kernel.metric.inverse_mass, [0.2, 0.5])
