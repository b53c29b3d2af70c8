"""Tests of the no-U-turn kernel (``pg.NUTS``).

The method: Hoffman & Gelman, "The No-U-Turn Sampler", JMLR 15, 2014, and
Betancourt, "A Conceptual Introduction to Hamiltonian Monte Carlo",
arXiv:1701.02434, 2017 (multinomial selection, generalised U-turn criterion).

Statistical checks use fixed seeds; each was also run with 20 other seeds while
writing the file (seeds 100-119, fewer where stated), and the "worst seen" comments
record the most extreme value over those runs. Tolerances built from MCSE use ``phaseglass.mcse`` (the bulk-ESS-based
MCSE of Vehtari et al. 2021). Simulation-based calibration is in test_sbc.py.
"""

import numpy as np
import pytest
import scipy.stats

import phaseglass as pg
from phaseglass.core.nuts import DoublingTree
from test_sampling import beta_target, gamma_target  # the bounded targets HMC is checked on

SCALES = np.array([1.0, 2.0, 0.5])
CORRELATION = 0.9


@pytest.fixture(scope="module")
def gaussian():
    return pg.demos.correlated_gaussian(3, CORRELATION, SCALES)


def exact_start(target, n_chains, seed):
    """Starts drawn exactly from the Gaussian target, so any bias is the kernel's."""
    return np.random.default_rng(seed).multivariate_normal(target.mean, target.cov, n_chains)


def thin_by_ess(x):
    """Keep every k-th draw of each chain, k = ceil(total draws / min(bulk, tail ESS)), at least 2.

    x : (chains, draws). What remains is roughly independent, so KS on it is roughly
    calibrated (NUTS draws can be antithetic, ESS above the number of draws, hence the
    floor).
    """
    k = max(int(np.ceil(x.size / min(pg.ess(x, method="bulk"), pg.ess(x, method="tail")))), 2)
    return x[:, ::k].ravel()


# ------------------------------------------------------------------- invariance


@pytest.fixture(scope="module")
def gaussian_run(gaussian):
    return pg.sample(gaussian, pg.NUTS(0.3), exact_start(gaussian, 8, 1), n_draws=1500,
                     n_chains=8, seed=1, warmup=0)


@pytest.mark.slow
def test_nuts_keeps_the_gaussian_moments(gaussian_run, gaussian):
    # Started in the target, an invariant kernel keeps every mean and second moment
    # within Monte Carlo error of the closed form (cov from demos.correlated_gaussian).
    # Worst seen over 20 seeds: 3.2 MCSE over the 9 checks.
    x = gaussian_run.draws
    mean, mean_se = x.mean(axis=(0, 1)), pg.mcse(x)
    assert np.all(np.abs(mean - gaussian.mean) < 4.5 * mean_se), (mean, mean_se)
    i, j = np.triu_indices(3)
    products = x[..., i] * x[..., j]
    second, second_se = products.mean(axis=(0, 1)), pg.mcse(products)
    assert np.all(np.abs(second - gaussian.cov[i, j]) < 4.5 * second_se), (second, second_se)
    assert np.max(pg.rhat(x)) < 1.02


@pytest.mark.slow
def test_nuts_marginals_pass_ks_against_scipy_norm(gaussian_run):
    # Kolmogorov-Smirnov (scipy.stats.kstest) of each marginal against
    # scipy.stats.norm(0, sd) on ESS-thinned draws. Level 1e-3 (worst p seen over 20
    # seeds: 0.007; the three marginals of one seed move together).
    x = gaussian_run.draws
    for i in range(3):
        p = scipy.stats.kstest(thin_by_ess(x[..., i]), scipy.stats.norm(0, SCALES[i]).cdf).pvalue
        assert p > 1e-3, (i, p)


@pytest.mark.slow
def test_a_dense_metric_that_whitens_the_target_shortens_the_trees(gaussian):
    # With M^-1 = cov the Gaussian becomes isotropic in the metric's geometry, so the
    # U-turn (measured with p_sharp = M^-1 p) comes after about half an orbit: short
    # trees and nearly independent draws. Over seeds 100-109: ESS per draw 0.86-1.09
    # with the metric against 0.15-0.21 with the identity, ESS per gradient 14x higher.
    start = exact_start(gaussian, 4, 100)
    dense = pg.sample(gaussian, pg.NUTS(0.5, metric=gaussian.cov), start, n_draws=500,
                      n_chains=4, seed=100, warmup=0)
    plain = pg.sample(gaussian, pg.NUTS(0.15), start, n_draws=500, n_chains=4, seed=100,
                      warmup=0)
    ess_dense, ess_plain = pg.ess(dense.draws).min(), pg.ess(plain.draws).min()
    assert ess_dense / 2000 > 0.6
    assert ess_dense / dense.total_grad > 4 * ess_plain / plain.total_grad
    assert dense.extras["n_leapfrog"].mean() < 0.5 * plain.extras["n_leapfrog"].mean()
    # and the whitened run still keeps the moments (4.5 MCSE; worst over seeds 100-119: 3.5)
    x = dense.draws
    assert np.all(np.abs(x.mean(axis=(0, 1))) < 4.5 * pg.mcse(x))
    i, j = np.triu_indices(3)
    products = x[..., i] * x[..., j]
    assert np.all(np.abs(products.mean(axis=(0, 1)) - gaussian.cov[i, j]) < 4.5 * pg.mcse(products))


@pytest.mark.slow
@pytest.mark.parametrize("make, reference", [
    (gamma_target, scipy.stats.gamma(3, scale=2)),
    (beta_target, scipy.stats.beta(2, 5)),
], ids=["gamma-3-2", "beta-2-5"])
def test_nuts_samples_bounded_targets(make, reference):
    run = pg.sample(make(), pg.NUTS(0.5), n_draws=1000, warmup=300, n_chains=4, seed=5)
    x = run.draws[..., 0]
    lo, hi = reference.support()
    assert np.all((x > lo) & (x < hi))
    # KS against the scipy.stats distribution on ESS-thinned draws (worst p over 20 seeds:
    # 0.024 Gamma, 0.011 Beta) and the mean within 4 MCSE of the closed form (worst |z|
    # over 20 seeds: 2.4 Gamma, 2.6 Beta)
    p = scipy.stats.kstest(thin_by_ess(x), reference.cdf).pvalue
    assert p > 1e-3, p
    assert abs(x.mean() - reference.mean()) < 4 * pg.mcse(x, kind="mean")


# -------------------------------------------------------------- the tree itself


def recorded(target, kernel, seed, n_chains=3, n=4):
    s = pg.Sampler(target, kernel, n_chains=n_chains, seed=seed)
    for _ in range(n):
        info = s.step(record=True)
    return s, info, s.last_trajectory


def test_same_seed_builds_the_same_tree(gaussian):
    a, info_a, tree_a = recorded(gaussian, pg.NUTS(0.25), seed=9)
    b, info_b, tree_b = recorded(gaussian, pg.NUTS(0.25), seed=9)
    assert isinstance(tree_a, DoublingTree)
    for field in ("positions", "momenta", "hamiltonian", "doubling", "merged", "start",
                  "selected"):
        np.testing.assert_array_equal(getattr(tree_a, field), getattr(tree_b, field), field)
    for key in ("tree_depth", "n_leapfrog", "accept_prob", "energy", "u"):
        np.testing.assert_array_equal(info_a[key], info_b[key], key)
    # another seed draws other momenta, so every chain's tree differs
    _, info_c, tree_c = recorded(gaussian, pg.NUTS(0.25), seed=10)
    assert np.all(info_c["energy"] != info_a["energy"])
    assert np.all(tree_c.momenta[np.arange(3), tree_c.start] != tree_a.momenta[np.arange(3),
                                                                               tree_a.start])


def test_the_tree_is_one_leapfrog_trajectory_and_runs_back_to_its_start(gaussian):
    s, info, tree = recorded(gaussian, pg.NUTS(0.25), seed=5, n_chains=4, n=3)
    assert np.any(tree.start > 0)  # some tree grew backward at least once
    for c in range(4):
        rows = np.flatnonzero(tree.doubling[c] >= -1)
        lo, hi = rows[0], rows[-1]
        assert rows.size == hi - lo + 1 == info["n_leapfrog"][c] + 1
        # forward integration from the earliest state reproduces every state (round-off)
        fwd = pg.leapfrog(gaussian, tree.positions[c, lo], tree.momenta[c, lo], 0.25, hi - lo)
        np.testing.assert_allclose(fwd.positions, tree.positions[c, lo:hi + 1], atol=1e-12)
        np.testing.assert_allclose(fwd.momenta, tree.momenta[c, lo:hi + 1], atol=1e-12)
        # the selected state is the chain's new position and its energy is recorded
        sel, start = tree.selected[c], tree.start[c]
        np.testing.assert_array_equal(tree.positions[c, sel], s.state.position[c])
        assert tree.merged[c, sel] and tree.merged[c, start]
        assert info["energy"][c] == pytest.approx(tree.hamiltonian[c, sel], rel=1e-12)
        assert info["accepted"][c] == (sel != start)
        # reversibility: from the selected state with the momentum reversed, as many
        # steps as separate it from the start lead back to the start (round-off)
        if sel != start:
            sign = -1.0 if sel > start else 1.0
            back = pg.leapfrog(gaussian, tree.positions[c, sel], sign * tree.momenta[c, sel],
                               0.25, abs(sel - start))
            np.testing.assert_allclose(back.positions[-1], tree.positions[c, start], atol=1e-12)
            np.testing.assert_allclose(back.momenta[-1], sign * tree.momenta[c, start],
                                       atol=1e-12)
        # every state's energy error is relative to the start
        assert tree.energy_error[c, start] == 0.0


def test_build_tree_grows_the_transition_tree_from_a_given_momentum(gaussian):
    # The tree a sampler's first transition grew, rebuilt from its start and momentum
    # with the same seed (the uniforms come from the same per-chain stream).
    x = np.array([0.5, -1.0, 0.2])
    s = pg.Sampler(gaussian, pg.NUTS(0.25), initial=x, n_chains=1, seed=21)
    info = s.step(record=True)
    tree = s.last_trajectory
    p0 = tree.momenta[0, tree.start[0]]
    counts = (gaussian.n_density, gaussian.n_grad)
    again, again_info = pg.NUTS(0.25).build_tree(gaussian, x, p0, seed=21)
    assert (gaussian.n_density, gaussian.n_grad) == counts  # a preview is not counted
    np.testing.assert_array_equal(again.positions, tree.positions)
    np.testing.assert_array_equal(again.selected, tree.selected)
    assert again_info["n_leapfrog"][0] == info["n_leapfrog"][0]
    # a reversed momentum grows another tree through the same start
    other, _ = pg.NUTS(0.25).build_tree(gaussian, x, -p0, seed=21)
    assert not np.array_equal(other.positions, tree.positions)
    with pytest.raises(ValueError, match="`momentum` must have shape"):
        pg.NUTS(0.25).build_tree(gaussian, x, [1.0, 2.0], seed=1)
    with pytest.raises(ValueError, match="non-finite log-density"):
        log_x = pg.Target(lambda z: np.log(z[..., 0]), lambda z: 1.0 / z, dim=1, vectorized=True)
        pg.NUTS(0.25).build_tree(log_x, [-1.0], [1.0])
    with pytest.raises(TypeError, match="`target` must be a phaseglass Target"):
        pg.NUTS(0.25).build_tree(lambda z: z, x, p0)


def test_chain_draws_do_not_depend_on_n_chains(gaussian):
    # As for every kernel (tests/core/test_sampling.py): chain k uses the k-th child
    # stream, and a transition takes the same count of numbers whatever its tree does.
    runs = {n: pg.sample(gaussian, pg.NUTS(0.2), n_draws=25, n_chains=n, seed=4, warmup=0)
            for n in (1, 3, 600)}
    np.testing.assert_allclose(runs[3].draws[:1], runs[1].draws, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(runs[600].draws[:3], runs[3].draws, rtol=1e-10, atol=1e-12)
    np.testing.assert_array_equal(runs[600].extras["n_leapfrog"][:3], runs[3].extras["n_leapfrog"])
    # trees differ in size between chains, so the masking was exercised
    assert len(np.unique(runs[3].extras["n_leapfrog"])) > 1


def test_stepping_a_sampler_equals_sample(gaussian):
    s = pg.Sampler(gaussian, pg.NUTS(0.3), n_chains=2, seed=7)
    s.step(30)
    batch = pg.sample(gaussian, pg.NUTS(0.3), n_draws=30, n_chains=2, seed=7, warmup=0)
    for field in ("draws", "accept_prob", "energy", "n_grad"):
        np.testing.assert_array_equal(getattr(s.run, field), getattr(batch, field), field)


def test_records_and_gradient_counts(gaussian):
    gaussian.reset_counts()
    run = pg.sample(gaussian, pg.NUTS(0.3), n_draws=50, n_chains=3, seed=2, warmup=0)
    ex = run.extras
    for key in ("tree_depth", "n_leapfrog", "depth_limit_hit", "turned"):
        assert ex[key].shape == (3, 50), key
    np.testing.assert_array_equal(run.n_grad, ex["n_leapfrog"])
    # one gradient per leapfrog step, plus one per chain at the start (counted by the Target)
    assert gaussian.n_grad == run.total_grad + 3
    # at most 2**depth - 1 steps, at least the 2**(depth - 1) of the completed doublings
    assert np.all(ex["n_leapfrog"] <= 2 ** ex["tree_depth"] - 1)
    assert np.all(ex["n_leapfrog"] >= 2 ** (ex["tree_depth"] - 1))
    assert np.all((run.accept_prob >= 0) & (run.accept_prob <= 1))
    # a well-scaled Gaussian: every tree stops at a U-turn, none at the depth limit
    assert ex["turned"].all() and not ex["depth_limit_hit"].any()


def test_depth_limit_is_honoured():
    # sd 30 along one axis and 1 along the other, identity metric, step 0.2: a U-turn
    # needs about pi * 30 / 0.2 ~ 470 steps, far beyond 2**3 - 1.
    t = pg.demos.correlated_gaussian(2, 0.0, [30.0, 1.0])
    run = pg.sample(t, pg.NUTS(0.2, max_depth=3), n_draws=200, n_chains=2, seed=3, warmup=0)
    ex = run.extras
    assert np.all(ex["n_leapfrog"] <= 2 ** 3)  # the brief's bound; exactly 2**3 - 1 = 7 at most
    assert np.all(ex["n_leapfrog"] <= 7) and np.all(ex["tree_depth"] <= 3)
    hit = ex["depth_limit_hit"]
    assert hit.mean() > 0.5, hit.mean()
    np.testing.assert_array_equal(ex["n_leapfrog"][hit], 7)
    np.testing.assert_array_equal(ex["tree_depth"][hit], 3)
    assert not np.any(hit & ex["turned"])
    # the same target with room to grow turns back instead
    deep = pg.sample(t, pg.NUTS(0.2), n_draws=20, n_chains=2, seed=3, warmup=0)
    assert deep.extras["depth_limit_hit"].mean() < hit.mean()
    assert deep.extras["tree_depth"].max() > 3


def test_a_divergence_on_the_first_step_leaves_the_chain_in_place(gaussian):
    s = pg.Sampler(gaussian, pg.NUTS(50.0), n_chains=3, seed=2)  # far beyond stability
    start = s.state.position.copy()
    info = s.step()
    assert info["divergent"].all() and not info["accepted"].any()
    np.testing.assert_array_equal(info["n_leapfrog"], 1)
    np.testing.assert_array_equal(info["tree_depth"], 1)
    np.testing.assert_array_equal(info["accept_prob"], 0.0)
    assert np.all(np.abs(info["energy_error"]) > 1000)
    np.testing.assert_array_equal(s.state.position, start)
    assert [c for c, _, _ in s.divergences] == [0, 1, 2]
    assert all(tr.n_steps == 1 and tr.divergence_step == 1 for _, _, tr in s.divergences)


def test_max_depth_one_is_one_leapfrog_step(gaussian):
    run = pg.sample(gaussian, pg.NUTS(0.3, max_depth=1), n_draws=50, n_chains=2, seed=1, warmup=0)
    np.testing.assert_array_equal(run.extras["n_leapfrog"], 1)
    # it stops at the limit unless the two states already point apart
    np.testing.assert_array_equal(run.extras["depth_limit_hit"], ~run.extras["turned"])
    assert run.extras["depth_limit_hit"].mean() > 0.5


@pytest.fixture(scope="module")
def apiary_runs():
    return {form: pg.sample(pg.demos.apiaries(form, n_groups=12), pg.NUTS(0.2), n_draws=300,
                            warmup=300, n_chains=4, seed=3)
            for form in ("centred", "noncentred")}


@pytest.mark.slow
def test_centred_apiaries_diverge_and_non_centred_do_not(apiary_runs):
    # The funnel of the centred hierarchical model (demos.apiaries, 12 apiaries) makes NUTS
    # diverge; the non-centred form removes it. Seeds 3-5: 31, 77, 156 divergences centred
    # and 2, 0, 0 non-centred.
    centred, noncentred = apiary_runs["centred"], apiary_runs["noncentred"]
    assert centred.n_divergent >= 5
    assert 5 * noncentred.n_divergent <= centred.n_divergent
    assert any("divergent transition" in w for w in centred.summary().warnings)


@pytest.mark.slow
def test_divergence_replays_reach_the_divergent_state(apiary_runs):
    run = apiary_runs["centred"]
    assert len(run.divergences) == run.n_divergent
    for chain, draw, traj in run.divergences:
        assert run.divergent[chain, draw]
        # the replay starts where the transition started (the previous draw) and,
        # integrated the way the divergent subtree grew, diverges at its last step
        # with the energy error the transition recorded
        if draw > 0:
            np.testing.assert_array_equal(traj.positions[0], run.unconstrained[chain, draw - 1])
        assert traj.divergent and traj.divergence_step == traj.n_steps
        assert traj.n_steps <= run.extras["n_leapfrog"][chain, draw]
        assert traj.energy_error[-1] == run.energy_error[chain, draw]
        assert not abs(traj.energy_error[-1]) <= traj.max_energy_error


@pytest.mark.slow
def test_warm_up_reaches_the_target_acceptance_statistic():
    # Dual averaging (Hoffman & Gelman 2014, sec. 3.2) steers the mean acceptance
    # statistic; the averaged step size it keeps is a little conservative, so the
    # realised mean sits slightly above the target (0.78-0.87 for 0.8 and 0.94-0.95 for
    # 0.95 over 10 seeds).
    t = pg.demos.correlated_gaussian(10, 0.3, np.logspace(-1, 1, 10))
    runs = {a: pg.sample(t, pg.NUTS(0.05), n_draws=200, n_chains=4, warmup=300, seed=12,
                         target_accept=a) for a in (0.8, 0.95)}
    assert abs(runs[0.8].accept_prob.mean() - 0.8) < 0.1
    assert abs(runs[0.95].accept_prob.mean() - 0.95) < 0.05
    assert runs[0.8].kernel.step_size > runs[0.95].kernel.step_size
    assert pg.NUTS(0.1).default_target_accept == 0.8 and pg.NUTS(0.1).tuned_knob == "step_size"


# ------------------------------------------------------------- knobs and settings


def test_settings_round_trip(gaussian):
    k = pg.NUTS(0.3, 7, metric=SCALES**2, max_energy_error=500.0)
    back = pg.kernel_from_settings(k.settings())
    assert isinstance(back, pg.NUTS) and back.settings() == k.settings()
    a = pg.sample(gaussian, k, n_draws=10, n_chains=2, seed=1, warmup=0)
    b = pg.sample(gaussian, back, n_draws=10, n_chains=2, seed=1, warmup=0)
    np.testing.assert_array_equal(a.draws, b.draws)
    # the defining knob must be present; the others default
    assert pg.kernel_from_settings({"kernel": "NUTS", "step_size": 0.1}).max_depth == 10
    with pytest.raises(ValueError, match=r"must give \['step_size'\]"):
        pg.kernel_from_settings({"kernel": "NUTS", "max_depth": 5})
    with pytest.raises(ValueError, match="does not know"):
        pg.kernel_from_settings({"kernel": "NUTS", "step_size": 0.1, "n_steps": 4})
    assert "NUTS" in pg.__all__ and repr(k).startswith("NUTS(step_size=0.3, max_depth=7")


@pytest.mark.parametrize("kwargs, match", [
    ({"step_size": -0.1}, "`step_size` must be finite and > 0"),
    ({"step_size": 0.1, "max_depth": 0}, "`max_depth`"),
    ({"step_size": 0.1, "max_depth": 21}, "`max_depth`"),
    ({"step_size": 0.1, "max_energy_error": 0}, "`max_energy_error`"),
])
def test_invalid_knobs_raise(kwargs, match):
    with pytest.raises(ValueError, match=match):
        pg.NUTS(**kwargs)


def test_invalid_knobs_raise_as_attributes():
    k = pg.NUTS(0.1)
    with pytest.raises(ValueError, match="`max_depth`"):
        k.max_depth = 0
    with pytest.raises(TypeError):
        k.max_depth = 2.5
    with pytest.raises(ValueError, match="`step_size`"):
        k.step_size = 0.0
    assert k.max_depth == 10 and k.step_size == 0.1
