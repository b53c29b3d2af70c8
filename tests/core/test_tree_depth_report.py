"""Run-level reporting of NUTS runs: the acceptance statistic, and the tree-depth warning."""

import numpy as np
import pytest

import phaseglass as pg


def wide_gaussian(sd):
    """Independent Gaussian in 2-D with standard deviation ``sd`` in every coordinate."""
    return pg.Target(lambda x: -0.5 * float(x @ x) / sd ** 2,
                     lambda x: -np.asarray(x, dtype=float) / sd ** 2, dim=2)


@pytest.fixture(scope="module")
def saturated():
    # sd 30 with step size 1: a U-turn needs about pi * 30 leapfrog steps (half a period of
    # the oscillator), far beyond 2**3 - 1 = 7, so every tree stops at the depth limit
    return pg.sample(wide_gaussian(30.0), pg.NUTS(1.0, max_depth=3), n_draws=60, n_chains=2,
                     warmup=0, seed=1)


def depth_warnings(run):
    return [w for w in run.summary().warnings if "maximum tree depth" in w]


def test_a_saturated_tree_depth_is_warned_about_in_plain_words(saturated):
    hit = saturated.extras["depth_limit_hit"]
    assert np.mean(hit) > 0.9  # the scenario really saturates
    (w,) = depth_warnings(saturated)
    k, n = int(hit.sum()), hit.size
    assert w.startswith(f"{np.mean(hit):.0%} of transitions ({k} of {n}) stopped at the maximum "
                        "tree depth (3 doublings, 7 leapfrog steps)")
    assert "mass matrix" in w and "reparameterisation" in w and "max_depth" in w
    assert w in " ".join(str(saturated.summary()).split())  # printed (wrapped) with the digest


def test_no_depth_warning_when_the_trees_turn_back():
    run = pg.sample(wide_gaussian(1.0), pg.NUTS(0.5, max_depth=6), n_draws=60, n_chains=2,
                    warmup=0, seed=1)
    assert np.mean(run.extras["depth_limit_hit"]) <= 0.10
    assert depth_warnings(run) == []


def test_the_warning_threshold_is_a_tenth_of_the_transitions(saturated):
    run = pg.sample(wide_gaussian(1.0), pg.NUTS(0.5, max_depth=6), n_draws=50, n_chains=2,
                    warmup=0, seed=2)
    hit = np.zeros_like(run.extras["depth_limit_hit"])
    hit.flat[:10] = True  # exactly 10 %: no warning
    run.extras["depth_limit_hit"] = hit
    assert depth_warnings(run) == []
    hit.flat[10] = True  # 11 %: warned
    assert depth_warnings(run)[0].startswith("11% of transitions (11 of 100)")


def test_nuts_acceptance_is_the_mean_acceptance_statistic():
    run = pg.sample(wide_gaussian(1.0), pg.NUTS(1.2, max_depth=6), n_draws=60, n_chains=2,
                    warmup=0, seed=3)
    stat = float(np.mean(run.accept_prob))
    moved = float(np.mean(run.accepted))
    assert abs(stat - moved) > 0.05  # the two numbers differ on this run
    assert f"mean acceptance statistic {stat:.2f}" in repr(run)
    digest = run.summary()
    assert digest.run_info["acceptance"] == pytest.approx(stat)
    assert f"mean acceptance statistic {stat:.3f}" in str(digest)
    hmc = pg.sample(wide_gaussian(1.0), pg.HMC(0.5, 5), n_draws=30, n_chains=2, warmup=0, seed=1)
    assert f"acceptance {np.mean(hmc.accepted):.2f}" in repr(hmc)
    assert "statistic" not in repr(hmc)
    assert depth_warnings(hmc) == []
