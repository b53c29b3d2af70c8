"""phaseglass.core.slices: log-density grids through a point, coordinates by name, axis limits."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

import phaseglass as pg
from phaseglass.core.slices import choose_limits, log_density_grid, resolve_coords


def counting_target(dim=3):
    calls = []

    def logp(x):
        calls.append(np.shape(x))
        return -0.5 * np.sum(x * x, axis=-1) - 0.1 * x[..., 0] * x[..., 1]

    def grad(x):
        g = -x.copy()
        g[..., 0] -= 0.1 * x[..., 1]
        g[..., 1] -= 0.1 * x[..., 0]
        return g

    return pg.Target(logp, grad, dim=dim, vectorized=True, names=["a", "b", "c"][:dim]), calls


def test_grid_matches_pointwise_evaluation_in_one_vectorised_call():
    t, calls = counting_target()
    through = np.array([0.3, -0.2, 0.7])
    X, Y, Z = log_density_grid(t, ("c", "a"), through, xlim=(-1, 2), ylim=(-3, 1), n=7)
    # one batched call for the whole grid (a Target also checks its first batch against a
    # few single-point calls, shaped (1, 3), once)
    assert [c for c in calls if c[0] > 1] == [(49, 3)]
    assert X.shape == Y.shape == Z.shape == (7, 7)
    assert_allclose(X[0], np.linspace(-1, 2, 7))
    assert_allclose(Y[:, 0], np.linspace(-3, 1, 7))
    i, j = 4, 2
    point = through.copy()
    point[2], point[0] = X[i, j], Y[i, j]
    assert Z[i, j] == pytest.approx(t.log_density(point))
    assert t.n_density == 1  # only the check above counts; the grid is not sampling work


def test_grid_is_on_the_samplers_scale_for_bounded_targets():
    t = pg.Target(lambda x: -x[..., 0] - 0.5 * x[..., 1] ** 2, lambda x: np.stack(
        [-np.ones_like(x[..., 0]), -x[..., 1]], axis=-1), dim=2, vectorized=True,
        bounds=[(0, None), None])
    X, Y, Z = log_density_grid(t, (0, 1), xlim=(-2, 2), ylim=(-1, 1), n=5)
    # z = log(x): log-density in z includes the Jacobian z
    z, y = X[2, 3], Y[2, 3]
    assert Z[2, 3] == pytest.approx(-np.exp(z) - 0.5 * y * y + z)


def test_grid_errors_name_the_argument():
    t, _ = counting_target()
    with pytest.raises(ValueError, match="`through` is required"):
        log_density_grid(t, (0, 1))
    with pytest.raises(ValueError, match=r"`through` must have shape \(3,\)"):
        log_density_grid(t, (0, 1), [0.0, 0.0])
    with pytest.raises(ValueError, match="`xlim`"):
        log_density_grid(t, (0, 1), np.zeros(3), xlim=(1, 1))
    with pytest.raises(ValueError, match="`n` must be >= 2"):
        log_density_grid(t, (0, 1), np.zeros(3), n=1)
    with pytest.raises(TypeError, match="Target"):
        log_density_grid(lambda x: x, (0, 1))
    # a 2-D target needs no point
    X, Y, Z = log_density_grid(pg.demos.correlated_gaussian(), (1, 0), n=3)
    assert np.all(np.isfinite(Z))


def test_resolve_coords():
    names = ("mu", "log_tau", "z")
    assert resolve_coords(("z", 0), names) == (2, 0)
    assert resolve_coords((-1, "mu"), names) == (2, 0)
    with pytest.raises(ValueError, match="unknown coordinate 'nu'"):
        resolve_coords(("nu", 0), names)
    with pytest.raises(ValueError, match="two different"):
        resolve_coords((1, "log_tau"), names)
    with pytest.raises(ValueError, match="out of range"):
        resolve_coords((0, 3), names)
    with pytest.raises(ValueError, match="pair"):
        resolve_coords(0, names)
    with pytest.raises(TypeError, match="int or str"):
        resolve_coords((0, 1.5), names)


def test_choose_limits_from_draws_trajectories_and_runs():
    draws = np.array([[[0.0, 0.0, 9.0], [1.0, 4.0, 9.0]]])
    assert choose_limits(draws, pad=0.0) == ((0.0, 1.0), (0.0, 4.0))
    # a constant coordinate gets a window of 20% of its size (at least 1)
    xlim, ylim = choose_limits(draws, coords=(2, 0), pad=0.5)
    assert xlim == pytest.approx((9.0 - 0.9 - 0.9, 9.0 + 0.9 + 0.9)) and ylim == (-0.5, 1.5)
    t = pg.demos.correlated_gaussian()
    tr = pg.leapfrog(t, [0.0, 0.0], [1.0, 1.0], 0.1, 10)
    (x0, x1), _ = choose_limits(tr, pad=0.0)
    assert x0 == pytest.approx(tr.positions[:, 0].min()) and x1 == pytest.approx(tr.positions[:, 0].max())
    run = pg.sample(t, pg.HMC(0.3, 5), n_draws=20, n_chains=2, seed=1, warmup=0)
    assert choose_limits(run, coords=("clock_2", "clock_1"), names=run.names, pad=0.0)[0] == \
        pytest.approx((run.draws[..., 1].min(), run.draws[..., 1].max()))


def test_choose_limits_leaves_out_a_divergent_blow_up():
    stiff = pg.Target(lambda x: -0.5e4 * np.sum(x * x, axis=-1), lambda x: -1e4 * x, dim=2,
                      vectorized=True)
    tr = pg.leapfrog(stiff, [0.01, 0.02], [1.0, 0.5], 0.0205, 30)
    k = tr.divergence_step
    xlim, ylim = choose_limits(tr, pad=0.0)
    assert xlim[1] == pytest.approx(max(tr.positions[:k, 0].max(), xlim[0] + 1e-3))
    assert abs(xlim[1]) < 10 * np.abs(tr.positions[:k]).max()


def test_choose_limits_single_point_and_quantiles():
    (x0, x1), _ = choose_limits(np.array([[2.0, 3.0]]), pad=0.0)
    assert (x0, x1) == (1.5, 2.5)
    pts = np.r_[np.zeros((98, 2)), [[100.0, 100.0], [-100.0, -100.0]]]
    pts[:98] = np.random.default_rng(0).normal(size=(98, 2))
    xlim, _ = choose_limits(pts, quantiles=(0.02, 0.98), pad=0.0)
    assert xlim[1] < 10
    with pytest.raises(ValueError, match="same number of coordinates"):
        choose_limits(np.zeros((2, 2)), np.zeros((2, 3)))
    with pytest.raises(ValueError, match="at least one source"):
        choose_limits()


def test_one_coordinate_lookup_serves_pairs_and_drawings():
    # issue 12: coordinate lookup exists once (core.slices.resolve_coord)
    from matplotlib.figure import Figure

    from phaseglass.core.slices import resolve_coord
    from phaseglass.draw import draw_traces

    names = ("mu", "log_tau", "nu")
    assert resolve_coord("nu", names) == 2 and resolve_coord(-1, dim=3) == 2
    assert resolve_coords(("nu", -3), names) == (2, 0)
    with pytest.raises(ValueError, match="`coord` names an unknown coordinate 'sigma'"):
        resolve_coord("sigma", names)
    with pytest.raises(ValueError, match="`coord` index 3 is out of range for 3 coordinates"):
        resolve_coord(3, names)
    with pytest.raises(TypeError, match="`coords` entries must be int or str"):
        resolve_coords((0, 1.5), names)
    draws = np.zeros((2, 5, 3))
    with pytest.raises(ValueError, match="unknown coordinate 'sigma' \\(known names: mu, log_tau, nu\\)"):
        draw_traces(Figure().add_subplot(), draws, "sigma", names=names)
