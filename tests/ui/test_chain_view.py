"""ChainView driven headless: traits in, computed data and artist data out."""

import json

import numpy as np
import pytest
import traitlets
from PIL import Image

import phaseglass as pg
from phaseglass.core.run import CAUTION


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
    assert "25 transitions \u00d7 3 chains" in view._readout.value
    assert CAUTION in view._readout.value


def test_same_seed_same_draws_as_sample(glaze):
    # Stepping the view is the same code path as pg.sample (one Sampler.step loop).
    view = make(glaze, step_size=0.15, n_steps=5, n_chains=2, seed=11)
    view.step(30)
    kernel = pg.HMC(0.15, 5)
    run = pg.sample(glaze, kernel, view.sampler.initial, n_draws=30, n_chains=2, seed=11, warmup=0)
    assert np.array_equal(run.draws, view.run.draws)


def test_live_knobs_reach_the_kernel_without_reset(glaze):
    view = make(glaze, kernel_kind="partial", uniform="drifting", step_size=0.05, n_steps=1,
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
    view.kernel_kind = "walk"
    assert isinstance(view.kernel, pg.RandomWalk)
    assert view.run.n_draws == 0
    assert np.allclose(view.sampler.state.position, before)
    view.step(3)
    assert view.run.n_grad.sum() == 0  # a random walk uses no gradients
    assert "6 log-density evaluations" in view._readout.value  # 3 transitions x 2 chains


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
    assert f"{view.run.n_divergent} divergent transition" in view._readout.value


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
    view = make(glaze, kernel_kind="partial", uniform="drifting", step_size=0.04, n_steps=2,
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
    # the file is drawn at another dpi: its background must not be pasted by the next preview
    assert view._background is None
    view.render()
    view.step_size = 0.05
    shown = np.asarray(view.figure.canvas.buffer_rgba()).copy()
    assert np.array_equal(shown, view.render())
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
    assert 10 ** view._step_knob.slider.min == pytest.approx(0.3 / 30)  # range around its step
    assert 10 ** view._step_knob.slider.max == pytest.approx(3.0)
    view.kernel_kind = "partial"
    assert np.allclose(view.kernel.metric.inverse_mass, [0.2, 0.5])


# ------------------------------------------------------------------ preview of the next transition

def _pair(glaze, **kw):
    """Two identical views: one gets knob previews in between, the other does not."""
    return make(glaze, **kw), make(glaze, **kw)


@pytest.mark.parametrize("kw", [
    dict(kernel_kind="partial", uniform="drifting", step_size=0.05, n_steps=3, persistence=0.9),
    dict(kernel_kind="hmc", uniform="fresh", step_size=0.05, n_steps=6),  # jittered step size
    dict(kernel_kind="walk", uniform="drifting", scale=0.3),
], ids=["partial-drifting", "hmc-jitter", "walk"])
def test_preview_consumes_no_random_numbers_and_is_the_next_transition(glaze, kw):
    previewed, plain = _pair(glaze, seed=7, n_chains=2, **kw)
    previewed.step(6)
    plain.step(6)
    counts = (glaze.n_density, glaze.n_grad)
    for eps in (0.02, 0.4, 0.11):  # previews with other knobs, then the knobs end equal
        previewed.step_size = eps
        previewed.scale = eps
    previewed.n_steps = 9
    previewed.drift = 0.2
    previewed.persistence = 0.5
    with previewed.hold_trait_notifications():
        previewed.step_size, previewed.n_steps = kw.get("step_size", 0.2), kw.get("n_steps", 10)
        previewed.scale = kw.get("scale", 0.5)
        previewed.drift, previewed.persistence = 0.03, kw.get("persistence", 0.9)
    preview = previewed.preview
    assert preview is not None and preview.draw == 6
    assert (glaze.n_density, glaze.n_grad) == counts  # a preview is not the user's work
    assert previewed.run.n_draws == 6
    previewed.step(1)
    plain.step(1)
    for field in ("unconstrained", "u", "accepted", "accept_prob", "energy_error"):
        assert np.array_equal(getattr(previewed.run, field), getattr(plain.run, field)), field
    # the preview was exactly that transition
    assert preview.accepted == bool(plain.run.accepted[0, -1])
    assert preview.u == plain.run.u[0, -1]
    assert preview.accept_prob == plain.run.accept_prob[0, -1]
    if kw["kernel_kind"] == "walk":
        if preview.accepted:
            assert np.array_equal(preview.proposal, plain.run.unconstrained[0, -1])
    else:
        assert np.array_equal(preview.trajectory.positions, plain.sampler.last_trajectory.positions[0])
        assert preview.step_size == plain.run.step_size[0, -1]
    previewed.step(10)
    plain.step(10)
    assert np.array_equal(previewed.run.unconstrained, plain.run.unconstrained)
    assert previewed.preview is None  # taken, so gone


def test_knob_change_draws_the_preview_at_once_without_advancing(glaze):
    view = make(glaze, kernel_kind="partial", uniform="drifting", step_size=0.05, n_steps=8,
                persistence=0.9, seed=2)
    view.step(20)
    view.render()
    assert len(view._next.path.get_xydata()) == 0  # no preview before a knob moves
    before = np.asarray(view.figure.canvas.buffer_rgba()).copy()
    view.step_size = 0.08
    path = view._next.path.get_xydata()
    assert view.run.n_draws == 20
    assert len(path) == 9  # n_steps + 1 leapfrog positions
    assert np.allclose(path[0], view.sampler.state.position[0, list(view.coords)])
    assert np.allclose(path, view.preview.trajectory.positions[:, list(view.coords)])
    # the repaint happened already (blit into the canvas buffer, no step, no full draw)
    blitted = np.asarray(view.figure.canvas.buffer_rgba()).copy()
    assert np.any(blitted != before)
    full = view.render()
    assert np.mean(np.any(blitted[..., :3] != full[..., :3], axis=-1)) < 0.002
    view.step_size = 0.02
    assert not np.allclose(view._next.path.get_xydata()[-1], path[-1])
    # the u the next transition would draw, at its draw index
    assert np.allclose(view._next_u.u.get_xydata(), [[20, view.preview.u]])
    text = view._readout.value
    assert "preview" in text and "would be " + ("accepted" if view.preview.accepted else "rejected") in text
    view.step()
    assert view.preview is None
    assert len(view._next.path.get_xydata()) == 0 and len(view._next_u.u.get_xydata()) == 0
    assert "preview" not in view._readout.value


def test_random_walk_preview_shows_the_proposal(glaze):
    view = make(glaze, kernel_kind="walk", scale=0.4, seed=5)
    view.step(3)
    view.scale = 0.5
    p = view.preview
    assert p.trajectory is None
    i, j = view.coords
    assert np.allclose(view._next.path.get_xydata(), [p.start[[i, j]], p.proposal[[i, j]]])
    assert np.allclose(view._next.end.get_xydata(), [p.proposal[[i, j]]])
    assert "proposal (" in view._readout.value


def test_divergent_preview_is_marked():
    # Leapfrog on N(0, sigma^2) is unstable for step size > 2 sigma (Neal 2011, "MCMC using
    # Hamiltonian dynamics", Handbook of MCMC ch. 5): sigma = 0.1 here, so 0.5 diverges.
    target = pg.demos.correlated_gaussian(2, 0.0, scales=[1.0, 0.1])
    view = pg.ChainView(target, step_size=0.05, n_steps=10, xlim=(-3, 3), ylim=(-0.5, 0.5))
    view.step_size = 0.5
    assert view.preview.divergent and not view.preview.accepted
    assert len(view._next.divergent.get_xydata()) == 2
    assert len(view._next.end.get_xydata()) == 0
    assert "would diverge at leapfrog step" in view._readout.value


def test_kernel_switch_previews_the_new_kernel(glaze):
    view = make(glaze, step_size=0.1, n_steps=5)
    view.step(4)
    view.kernel_kind = "walk"
    assert view.preview is not None and view.preview.trajectory is None
    # the walk's knob is its proposal scale, never a renamed step size (issue 12)
    assert view._scale_knob.label.value == "proposal scale"
    assert view._scale_knob.layout.display is None and view._step_knob.layout.display == "none"
    assert "pg-primary" in view._scale_knob.slider._dom_classes
    assert "pg-primary" not in view._step_knob.slider._dom_classes
    assert view._steps_knob.layout.display == "none" and view._persist_knob.layout.display == "none"
    assert view.kernel.scale == view.scale
    assert view._drift_knob.disabled  # fresh u: no drift to set
    view.uniform = "drifting"
    assert not view._drift_knob.disabled


# ------------------------------------------------------------------ controls and words

def test_sliders_are_wide_scaled_to_the_target_and_keep_code_values(glaze):
    from phaseglass.ui._controls import KnobControl
    from phaseglass.ui._shared import pilot, step_size_range

    view = make(glaze, step_size=0.05, kernel_kind="partial")
    knobs = [view._step_knob, view._steps_knob, view._persist_knob, view._drift_knob]
    assert all(isinstance(k, KnobControl) for k in knobs)
    for k, css in zip(knobs, ["pg-step-size", "pg-n-steps", "pg-persistence", "pg-drift"]):
        assert css in k.slider._dom_classes
        assert int(k.slider.layout.width.rstrip("px")) >= 160
    assert "pg-primary" in view._step_knob.slider._dom_classes
    low, high = step_size_range(pilot(glaze).step_size)
    assert view._step_knob.slider.min == pytest.approx(np.log10(low))
    assert view._step_knob.slider.max == pytest.approx(np.log10(high))
    # the value set from code is the value used, not the slider's nearest position
    assert view.step_size == 0.05 and view.kernel.step_size == 0.05
    assert view._step_knob.box.value == 0.05
    view.step_size = 0.0437
    assert view.kernel.step_size == 0.0437
    # a drag is taken (rounded to 3 significant digits) and previewed
    view._step_knob.slider.value = 10 ** (np.log10(low) + 0.6 * (np.log10(high) - np.log10(low)))
    assert view.step_size != 0.0437 and view.kernel.step_size == view.step_size
    assert view.preview is not None and view.preview.step_size == view.step_size
    assert view._steps_knob.slider.max >= 100
    # the random walk's scale gets a range around 2.38 sd / sqrt(dim) (Roberts, Gelman & Gilks 1997)
    view.kernel_kind = "walk"
    sd = pilot(glaze).sd
    centre = 2.38 * np.exp(np.mean(np.log(sd))) / np.sqrt(2)
    lo, hi = 10 ** view._scale_knob.slider.min, 10 ** view._scale_knob.slider.max
    assert lo < centre < hi and hi / lo == pytest.approx(300)


def test_readout_in_words_not_python(glaze):
    view = make(glaze, kernel_kind="partial", uniform="drifting", step_size=0.03981071705534969,
                n_steps=1, persistence=0.9500000000000002, drift=0.03)
    text = view._readout.value
    assert "PartialRefreshHMC(" not in text and "{" not in text
    assert ("HMC with partial momentum refresh: step size 0.03981, 1 leapfrog step, persistence 0.95, "
            "drifting u (drift 0.03), identity mass matrix") in text
    view.step(1)
    assert "1 transition \u00d7 2 chains" in view._readout.value
    tuned = pg.HMC(0.3, 4, metric=np.array([0.2, 0.5]))
    assert "HMC: step size 0.3 (jittered by \u00b110 %), 4 leapfrog steps, fresh u, diagonal mass matrix" in \
        make(glaze, kernel=tuned)._readout.value


def test_kernel_dropdown_texts_fit_its_width(glaze):
    view = make(glaze)
    width_px = int(view._kernel_pick.layout.width.rstrip("px"))
    longest = max(len(label) for label, _ in view._kernel_pick.options)
    # about 8 px per character at JupyterLab's 13 px UI font, plus 32 px for the arrow and padding
    assert 8 * longest + 32 <= width_px
    assert view._kernel_pick.description == ""  # its label is a separate Label: nothing squeezes it


@pytest.mark.parametrize("kw", [
    dict(kernel_kind="partial", uniform="drifting", step_size=0.04, n_steps=1, persistence=0.95),
    dict(kernel_kind="walk", scale=0.6),  # many rejections: the longest u-panel title
], ids=["partial", "walk"])
def test_figure_fits_the_column_and_the_u_legend_leaves_the_data(glaze, kw):
    from phaseglass.ui._base import COLUMN_WIDTH_IN

    view = pg.ChainView(glaze, seed=3, **kw)  # region from the pilot run, as in a notebook
    view.step(1500)
    view.step_size = 1.5 * view.step_size  # with a preview
    view.scale = 1.5 * view.scale
    view.render()
    fig = view.figure
    assert fig.get_size_inches()[0] <= COLUMN_WIDTH_IN
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    for ax in fig.axes:  # titles, tick labels and legends all inside the figure
        tight = ax.get_tightbbox(renderer)
        assert tight.x0 >= box.x0 - 1 and tight.x1 <= box.x1 + 1, ax.get_title(loc="left")
        assert tight.y0 >= box.y0 - 1 and tight.y1 <= box.y1 + 1, ax.get_title(loc="left")
    leg = view._ax_u.get_legend().get_window_extent(renderer)
    assert leg.y1 <= view._ax_u.get_window_extent(renderer).y0  # below the panel, off the u = 1 band


def test_the_trace_panel_follows_the_chain_after_the_first_steps():
    view = pg.ChainView(pg.demos.glaze_ridge(), seed=2)
    view.step(60)
    lo, hi = view._ax_trace.get_xlim()
    assert lo <= 0 and hi >= 59  # every transition is inside the trace panel
    z = view.run.unconstrained[:, :, view.coords[0]]
    y0, y1 = view._ax_trace.get_ylim()
    assert y0 <= z.min() and y1 >= z.max()


# ------------------------------------------------------------------ registry names (issue 12)

def test_kernel_name_still_works_for_one_release_and_names_kernel_kind(glaze):
    with pytest.warns(DeprecationWarning, match="`kernel_kind`"):
        view = make(glaze, kernel_name="walk", scale=0.4)
    assert view.kernel_kind == "walk" and isinstance(view.kernel, pg.RandomWalk)
    with pytest.warns(DeprecationWarning, match="`kernel_kind`"):
        view.kernel_name = "partial"
    assert isinstance(view.kernel, pg.PartialRefreshHMC)
    # settings saved under the old name are read, with the same warning
    saved = dict(view.settings)
    saved["kernel_name"] = saved.pop("kernel_kind")
    with pytest.warns(DeprecationWarning, match="`kernel_kind`"):
        again = pg.ChainView.from_settings(glaze, saved)
    assert again.kernel_kind == "partial"


def test_dropdown_offers_the_registry_titles(glaze):
    from phaseglass.core.registry import kernel_kind

    view = make(glaze)
    assert [v for _, v in view._kernel_pick.options] == ["hmc", "partial", "walk", "nuts"]
    assert dict(view._kernel_pick.options)["random-walk Metropolis"] == "walk"
    assert [t for t, _ in view._kernel_pick.options] == [kernel_kind(k).title for k in
                                                         ("hmc", "partial", "walk", "nuts")]


def test_nuts_steps_like_any_kernel(glaze):
    view = make(glaze, kernel_kind="nuts", step_size=0.2, max_depth=4, n_chains=2)
    assert isinstance(view.kernel, pg.NUTS) and view.kernel.max_depth == 4
    assert view._depth_knob.layout.display is None and view._steps_knob.layout.display == "none"
    assert view._uniform_pick.disabled  # NUTS draws no accept/reject uniform
    preview = view.preview
    view.step(1)
    run = view.run
    # the preview was exactly the transition taken (same selected state, same tree)
    assert np.array_equal(preview.proposal, run.unconstrained[0, -1])
    assert np.array_equal(preview.trajectory.positions, view.sampler.last_trajectory.positions[0])
    view.step(5)
    assert view.run.n_draws == 6
    assert np.all(view.run.extras["tree_depth"] <= 4)
    view.max_depth = 2
    assert view.kernel.max_depth == 2
    view.step(3)
    assert np.all(view.run.extras["tree_depth"][:, -3:] <= 2)
    assert "no-U-turn sampler: step size 0.2, max tree depth 2" in view._readout.value


def test_a_passed_nuts_kernel_sets_the_knobs(glaze):
    view = make(glaze, kernel=pg.NUTS(0.15, 6))
    assert (view.kernel_kind, view.step_size, view.max_depth) == ("nuts", 0.15, 6)
