"""Views opened from a Run: the run's target, tuned step size, mass matrix and a start of its own."""

import numpy as np
import pytest

import phaseglass as pg


@pytest.fixture(scope="module")
def badly_scaled():
    """Independent Gaussian with standard deviations 10 and 0.1: the identity metric fits neither."""
    return pg.demos.correlated_gaussian(correlation=0.0, scales=[10.0, 0.1])


@pytest.fixture(scope="module")
def tuned_run(badly_scaled):
    """A warmed-up run: tuned step size and a diagonal metric close to the variances (100, 0.01)."""
    return pg.sample(badly_scaled, pg.HMC(0.05, 10), n_draws=120, n_chains=2, warmup=300, seed=1)


@pytest.fixture(scope="module")
def divergent_run(badly_scaled):
    """Identity metric and a step size far past the narrow coordinate's stability limit (2 * 0.1)."""
    return pg.sample(badly_scaled, pg.HMC(0.5, 10, jitter=0.0), n_draws=40, n_chains=2, seed=3, warmup=0)


# ---------------------------------------------------------------- TrajectoryView

def test_trajectory_view_takes_the_runs_step_size_mass_and_chosen_draw(tuned_run):
    inv = tuned_run.kernel.metric.inverse_mass
    assert tuned_run.kernel.metric.kind == "diagonal" and inv[0] / inv[1] > 100  # it did adapt
    view = pg.TrajectoryView.from_run(tuned_run, draw=(1, 5))
    assert view.target is tuned_run.target
    assert view.step_size == tuned_run.kernel.step_size
    assert view.n_steps == tuned_run.kernel.n_steps
    assert view.inverse_mass == pytest.approx(list(inv), rel=1e-12)
    assert np.array_equal(view.start, tuned_run.unconstrained[1, 5])
    # the trajectory drawn is the run's leapfrog with the run's metric
    ref = pg.leapfrog(tuned_run.target, view.start, view.momentum, view.step_size, view.n_steps,
                      metric=tuned_run.kernel.metric)
    assert np.allclose(view.trajectory.positions, ref.positions)


def test_trajectory_view_defaults_to_the_last_draw_of_chain_0(tuned_run):
    view = pg.TrajectoryView.from_run(tuned_run)
    assert np.array_equal(view.start, tuned_run.unconstrained[0, -1])


def test_trajectory_view_keyword_arguments_win_over_the_run(tuned_run):
    view = pg.TrajectoryView.from_run(tuned_run, step_size=0.123, n_steps=7)
    assert (view.step_size, view.n_steps) == (0.123, 7)


def test_trajectory_view_starts_at_a_divergent_transition(divergent_run):
    assert len(divergent_run.divergences) >= 2
    k = 1
    chain, draw, traj = divergent_run.divergences[k]
    view = pg.TrajectoryView.from_run(divergent_run, divergence=k)
    assert np.array_equal(view.start, traj.positions[0])
    assert np.array_equal(view.momentum, traj.momenta[0])
    assert view.step_size == divergent_run.kernel.step_size
    assert view.trajectory.divergent  # same start, momentum and step: it diverges again


def test_dense_metric_uses_its_diagonal_and_says_so(badly_scaled, tuned_run):
    import copy
    run = copy.copy(tuned_run)
    run.kernel = pg.HMC(0.3, 5, metric=pg.Metric(np.array([[4.0, 0.5], [0.5, 0.25]])))
    view = pg.TrajectoryView.from_run(run)
    assert view.inverse_mass == pytest.approx([4.0, 0.25])
    assert "dense" in view.status and "diagonal" in view.status


def test_trajectory_view_from_run_errors_name_the_argument(tuned_run, divergent_run):
    with pytest.raises(ValueError, match="`run`"):
        pg.TrajectoryView.from_run(object())
    with pytest.raises(ValueError, match="`draw` index"):
        pg.TrajectoryView.from_run(tuned_run, draw=(0, tuned_run.n_draws))
    with pytest.raises(ValueError, match="`draw` chain"):
        pg.TrajectoryView.from_run(tuned_run, draw=(2, 0))
    with pytest.raises(ValueError, match="`draw`"):
        pg.TrajectoryView.from_run(tuned_run, draw=3)
    assert tuned_run.divergences == []
    with pytest.raises(ValueError, match="`divergence`.*no divergent"):
        pg.TrajectoryView.from_run(tuned_run, divergence=0)
    with pytest.raises(ValueError, match="`divergence` must be"):
        pg.TrajectoryView.from_run(divergent_run, divergence=len(divergent_run.divergences))


def test_arrow_shows_the_velocity_and_a_drag_points_it_at_the_mouse(tuned_run, fire):
    view = pg.TrajectoryView.from_run(tuned_run)
    m = 1.0 / np.asarray(view.inverse_mass)  # the masses
    path = view._path
    tail, tip = path.momentum_ends
    shown = view.coords
    v = view.momentum[list(shown)] / m[list(shown)]  # M^-1 p, not p (masses 0.01 and 100 here)
    assert np.allclose(tip - tail, v * path.momentum_scale)
    # drag to a point inside the view: the arrow's tip lands on it
    x0, y0 = view.start[list(shown)]
    (xa, xb), (ya, yb) = view.xlim, view.ylim
    x, y = x0 + 0.2 * (xb - xa), y0 - 0.15 * (yb - ya)
    view.set_momentum_towards(x, y)
    assert np.allclose(view._path.momentum_ends[1], [x, y])
    # and the trajectory starts moving that way
    step = view.trajectory.positions[1, list(shown)] - view.trajectory.positions[0, list(shown)]
    assert np.dot(step, [x - x0, y - y0]) > 0


# ---------------------------------------------------------------- ChainView

def test_chain_view_continues_the_run_with_its_kernel_and_last_draws(tuned_run):
    import copy

    from phaseglass.ui.chain_view import peek_next_transition

    view = pg.ChainView.from_run(tuned_run, seed=4)
    k = view.kernel
    assert view.n_chains == tuned_run.n_chains
    assert (k.step_size, k.n_steps, k.jitter) == (tuned_run.kernel.step_size,
                                                  tuned_run.kernel.n_steps, tuned_run.kernel.jitter)
    assert k.metric is tuned_run.kernel.metric
    assert np.allclose(view.sampler.state.position, tuned_run.unconstrained[:, -1])
    # the previewed next transition is exactly the run's own kernel stepping from its last draws
    ref = pg.Sampler(tuned_run.target, copy.deepcopy(tuned_run.kernel), tuned_run.draws[:, -1],
                     n_chains=tuned_run.n_chains, seed=4)
    expect = peek_next_transition(ref)
    got = view.preview
    assert np.allclose(got.trajectory.positions, expect.trajectory.positions)
    assert got.accept_prob == pytest.approx(expect.accept_prob)
    # and it is not what the identity metric would do from there
    plain = pg.Sampler(tuned_run.target, pg.HMC(k.step_size, k.n_steps), tuned_run.draws[:, -1],
                       n_chains=tuned_run.n_chains, seed=4)
    assert not np.allclose(peek_next_transition(plain).trajectory.positions,
                           got.trajectory.positions)
    view.step()
    assert np.allclose(view.run.unconstrained[0, -1], expect.proposal if expect.accepted
                       else expect.start)


def test_chain_view_from_run_more_chains_reuses_the_last_draws(tuned_run):
    view = pg.ChainView.from_run(tuned_run, n_chains=3)
    last = tuned_run.unconstrained[:, -1]
    assert np.allclose(view.sampler.state.position, last[[0, 1, 0]])


def test_chain_view_from_run_errors_name_the_argument(tuned_run):
    with pytest.raises(ValueError, match="`run`"):
        pg.ChainView.from_run(None)
    import copy
    run = copy.copy(tuned_run)
    run.kernel = None
    with pytest.raises(ValueError, match="`run` has no kernel"):
        pg.ChainView.from_run(run)


# ---------------------------------------------------------------- TuningMap

def _one_cell(target, eps, **kwargs):
    m = pg.TuningMap(target, step_sizes=[eps], n_steps=[5], n_draws=30, n_chains=2, burn_in=5,
                     autorun=False, **kwargs)
    m.compute(background=False)
    return m.values


def test_tuning_map_cells_use_the_mass_matrix(badly_scaled, tuned_run):
    # step 0.6: past the stability limit 2 * 0.1 of the narrow coordinate with the identity
    # metric, but well inside it once the metric rescales both coordinates to about 1
    plain = _one_cell(badly_scaled, 0.6)
    scaled = _one_cell(badly_scaled, 0.6, mass_matrix=tuned_run.kernel.metric)
    assert plain["divergence rate"][0, 0] > 0.5 and plain["acceptance"][0, 0] < 0.2
    assert scaled["divergence rate"][0, 0] == 0 and scaled["acceptance"][0, 0] > 0.6


def test_make_cell_kernel_passes_the_metric(tuned_run):
    from phaseglass.ui.tuning_map import make_cell_kernel

    metric = tuned_run.kernel.metric
    for kind in ("hmc", "partial", "walk"):
        assert make_cell_kernel(kind, 0.3, 4, 0.5, metric=metric).metric is metric
    assert make_cell_kernel("hmc", 0.3, 4).metric.kind == "identity"


def test_tuning_map_from_run_centres_on_the_tuned_step_size(tuned_run):
    m = pg.TuningMap.from_run(tuned_run, autorun=False)
    eps = tuned_run.kernel.step_size
    assert m.mass_matrix is tuned_run.kernel.metric
    assert len(m.step_sizes) == 7 and m.step_sizes[3] == pytest.approx(eps, rel=5e-3)
    assert m.step_sizes[0] == pytest.approx(eps / 8, rel=5e-3)
    assert m.step_sizes[-1] == pytest.approx(eps * 8, rel=5e-3)
    assert tuned_run.kernel.n_steps in m.n_steps
    opened = m.open_cell(0, 3)
    assert opened.inverse_mass == pytest.approx(list(tuned_run.kernel.metric.inverse_mass))


def test_tuning_map_mass_matrix_errors_name_the_argument(badly_scaled):
    with pytest.raises(ValueError, match="`mass_matrix` must be a pg.Metric"):
        pg.TuningMap(badly_scaled, mass_matrix=[1.0, 2.0], autorun=False)
    with pytest.raises(ValueError, match="`mass_matrix` has dimension 3"):
        pg.TuningMap(badly_scaled, mass_matrix=pg.Metric(np.ones(3)), autorun=False)
    with pytest.raises(ValueError, match="`run`"):
        pg.TuningMap.from_run("not a run")


def test_views_from_a_run_show_where_its_draws_are(tuned_run):
    x = tuned_run.unconstrained
    inside = lambda lim, v: np.mean((v >= lim[0]) & (v <= lim[1]))  # noqa: E731
    for view in (pg.TrajectoryView.from_run(tuned_run), pg.ChainView.from_run(tuned_run)):
        assert inside(view.xlim, x[..., 0]) >= 0.99 and inside(view.ylim, x[..., 1]) >= 0.99
        # and not a region many times wider than the draws
        assert view.xlim[1] - view.xlim[0] < 2 * np.ptp(x[..., 0])
        assert view.ylim[1] - view.ylim[0] < 2 * np.ptp(x[..., 1])
    tv = pg.TrajectoryView.from_run(tuned_run, xlim=(-1, 1))
    assert tv.xlim == (-1.0, 1.0)


def test_divergence_view_from_run_and_trajectory_view_needs_a_step_size(divergent_run, tuned_run):
    view = pg.DivergenceView.from_run(divergent_run)
    assert view.run is divergent_run and len(view.divergences) == len(divergent_run.divergences)
    with pytest.raises(TypeError, match="`run`"):
        pg.DivergenceView.from_run(divergent_run.target)
    walk = pg.sample(tuned_run.target, pg.RandomWalk(0.5), n_draws=10, n_chains=2, seed=0, warmup=0)
    with pytest.raises(ValueError, match="`run` used a RandomWalk"):
        pg.TrajectoryView.from_run(walk)
    assert pg.ChainView.from_run(walk).kernel_kind == "walk"


def test_chain_view_settings_keep_the_runs_mass_matrix():
    import json

    target = pg.demos.correlated_gaussian(correlation=0.0, scales=[10.0, 0.1])
    run = pg.sample(target, pg.HMC(0.5, 5), n_draws=50, warmup=150, n_chains=2, seed=3)
    view = pg.ChainView.from_run(run, seed=2)
    saved = json.loads(json.dumps(view.settings))
    assert saved["mass_matrix"]["inverse_mass"] == run.kernel.metric.inverse_mass.tolist()
    restored = pg.ChainView.from_settings(target, saved)
    np.testing.assert_array_equal(restored.kernel.metric.inverse_mass,
                                  run.kernel.metric.inverse_mass)
    assert restored.settings == view.settings


# ---------------------------------------------------------------- ShiftGibbsView

def test_shift_gibbs_view_from_a_gibbs_run_keeps_conditionals_shift_and_starts_among_its_draws():
    target = pg.demos.correlated_gaussian(correlation=0.6)

    def conditionals(i, x):
        # exact normal conditionals of the unit-variance bivariate normal with rho = 0.6
        # (the standard formula: mean rho * x_other, variance 1 - rho**2)
        import scipy.stats
        return scipy.stats.norm(0.6 * x[1 - i], np.sqrt(1 - 0.36))

    run = pg.sample(target, pg.Gibbs(conditionals, shift=0.25), n_draws=60, n_chains=3, warmup=0,
                    seed=2)
    view = pg.ShiftGibbsView.from_run(run, n_chains=3)
    assert view.target is target and view.kernel.conditionals is conditionals
    assert view.shift == 0.25 and not view.random_shift and not view.ordinary
    # every start is one of the run's draws
    starts = view.sampler.state.position
    pool = run.unconstrained.reshape(-1, 2)
    assert all(np.any(np.all(np.isclose(pool, s), axis=1)) for s in starts)
    ordinary = pg.ShiftGibbsView.from_run(
        pg.sample(target, pg.Gibbs(conditionals), n_draws=10, n_chains=2, warmup=0, seed=1))
    assert ordinary.ordinary
    with pytest.raises(ValueError, match="`starts_from` must be draws shaped"):
        pg.ShiftGibbsView(target, starts_from=np.zeros((5, 3)))


def test_shift_gibbs_view_from_an_hmc_run_uses_numeric_conditionals(tuned_run):
    view = pg.ShiftGibbsView.from_run(tuned_run, grid_size=32)
    assert view.kernel.conditionals is None and view.target is tuned_run.target
    lo, hi = tuned_run.unconstrained.min(axis=(0, 1)), tuned_run.unconstrained.max(axis=(0, 1))
    assert np.all((view.sampler.state.position >= lo) & (view.sampler.state.position <= hi))
