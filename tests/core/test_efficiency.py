"""ESS per gradient evaluation: one definition, used by the digest, the report grid and the views."""

import numpy as np
import pytest

import phaseglass as pg
from phaseglass.core import diagnostics as dg
from phaseglass.core.efficiency import (MIN_ESS_DRAWS, ess_per_gradient, evaluation_cost,
                                        mean_acceptance)
from phaseglass.core.run import Run


def _run(x, n_grad=3, kernel=None):
    shape = x.shape[:2]
    records = {"accepted": np.ones(shape, bool), "divergent": np.zeros(shape, bool),
               "n_grad": np.full(shape, n_grad, int)}
    return Run(x, x.copy(), records, {}, kernel=kernel)


def test_worst_coordinate_bulk_ess_over_total_gradients():
    rng = np.random.default_rng(3)
    x = rng.standard_normal((2, 200, 3))
    x[:, :, 1] = np.cumsum(x[:, :, 1], axis=1) * 0.1  # a slowly mixing coordinate
    run = _run(x, n_grad=5)
    bulk = dg.ess(x, method="bulk")
    assert run.total_grad == 2 * 200 * 5
    np.testing.assert_allclose(ess_per_gradient(run, per_coordinate=True), bulk / 2000)
    assert ess_per_gradient(run) == pytest.approx(bulk[1] / 2000)
    assert ess_per_gradient(run) == pytest.approx(bulk.min() / 2000)
    assert ess_per_gradient(run, cost=100) == pytest.approx(bulk.min() / 100)


def test_fewer_than_the_minimum_draws_or_no_gradients_give_nan():
    x = np.random.default_rng(1).standard_normal((2, MIN_ESS_DRAWS, 2))
    assert np.isfinite(ess_per_gradient(_run(x)))
    assert np.isnan(ess_per_gradient(_run(x[:, :-1])))
    assert np.all(np.isnan(ess_per_gradient(_run(x[:, :-1]), per_coordinate=True)))
    assert np.isnan(ess_per_gradient(_run(x, n_grad=0)))


def test_a_stuck_chain_counts_as_zero():
    x = np.random.default_rng(2).standard_normal((3, 50, 2))
    x[1] = x[1, 0]  # chain 1 never moves
    run = _run(x)
    assert np.isfinite(dg.ess(x, method="bulk")).all()  # the estimate alone would not say so
    assert ess_per_gradient(run) == 0.0
    np.testing.assert_array_equal(ess_per_gradient(run, per_coordinate=True), [0.0, 0.0])


def test_gradient_free_kernels_are_costed_in_log_density_evaluations():
    t = pg.demos.correlated_gaussian()
    walk = pg.sample(t, pg.RandomWalk(1.0), n_draws=60, n_chains=2, seed=4, warmup=0)
    assert evaluation_cost(walk) == (120, "log-density evaluation")
    assert np.isnan(ess_per_gradient(walk))  # no gradient was evaluated
    e = dg.ess(walk.draws, method="bulk")
    assert ess_per_gradient(walk, cost=120) == pytest.approx(e.min() / 120)
    hmc = pg.sample(t, pg.HMC(0.3, 4), n_draws=60, n_chains=2, seed=4, warmup=0)
    assert evaluation_cost(hmc) == (hmc.total_grad, "gradient evaluation")


def test_the_digest_and_the_tuning_map_cells_use_the_same_number():
    from phaseglass.ui.tuning_map import cell_quantities

    t = pg.demos.correlated_gaussian()
    run = pg.sample(t, pg.HMC(0.3, 4), n_draws=80, n_chains=2, seed=6, warmup=0)
    per = ess_per_gradient(run)
    assert 0 < per < 1
    assert run.summary().run_info["ess_per_gradient"] == per
    assert cell_quantities(run)["ESS per gradient"] == per


def test_mean_acceptance_counts_a_missing_probability_as_zero():
    x = np.zeros((2, 3, 1))
    run = _run(x)
    run.accept_prob = np.array([[1.0, 0.5, np.nan], [0.25, np.nan, 0.25]])
    assert mean_acceptance(run) == pytest.approx(2.0 / 6.0)


def test_the_tuning_map_cells_use_mean_acceptance():
    from phaseglass.ui.tuning_map import cell_quantities

    t = pg.demos.correlated_gaussian()
    run = pg.sample(t, pg.HMC(0.5, 6), n_draws=60, n_chains=2, seed=6, warmup=0)
    acc = cell_quantities(run)["acceptance"]
    assert acc == mean_acceptance(run) == pytest.approx(float(np.mean(run.accept_prob)))
    assert 0 < acc < 1
