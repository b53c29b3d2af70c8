"""Tests for the sampling loop: kernels, Sampler/sample, warm-up, Run and its digest.

Statistical checks use fixed seeds. Each was first run locally with 20
seeds; the "worst seen" comments record the most extreme value over those runs,
and every tolerance sits outside it. Tests marked ``slow`` take a second or more
each; they still run in CI.
"""

import json

import numpy as np
import pytest
import scipy.stats

import phaseglass as pg
from phaseglass.core.run import CAUTION
from phaseglass.core.diagnostics import ess, mcse, rhat

# ----------------------------------------------------------------------------- helpers


def thin_by_ess(x):
    """Keep every k-th draw of each chain, k = ceil(total draws / min(bulk ESS, tail ESS)).

    x : (chains, draws). What remains is close to independent, so a KS test on it is
    roughly calibrated. Only roughly: the bulk ESS summarises the autocorrelation of
    the centre and the tail ESS that of the 5% and 95% quantile indicators, while KS
    looks at every quantile; hence the strict p-value threshold below (1e-3), and the
    sweep over seeds recorded beside each test (its p-values looked uniform enough).
    """
    k = int(np.ceil(x.size / min(ess(x, method="bulk"), ess(x, method="tail"))))
    return x[:, ::k].ravel()


def gamma_target():
    # Gamma(shape=3, scale=2) up to a constant: log p = 2 log x - x / 2 on x > 0
    return pg.Target(lambda x: 2.0 * np.log(x[..., 0]) - 0.5 * x[..., 0],
                     lambda x: 2.0 / x - 0.5, bounds=[(0, None)], vectorized=True)


def beta_target():
    # Beta(2, 5) up to a constant: log p = log x + 4 log(1 - x) on 0 < x < 1
    return pg.Target(lambda x: np.log(x[..., 0]) + 4.0 * np.log1p(-x[..., 0]),
                     lambda x: 1.0 / x - 4.0 / (1.0 - x), bounds=[(0, 1)], vectorized=True)


GAUSS_SCALES = [1.0, 2.0, 0.5]


def gaussian():
    return pg.demos.correlated_gaussian(3, 0.9, GAUSS_SCALES)


# ------------------------------------------------------------------- reproducibility


def test_same_seed_gives_identical_draws_and_records():
    t = gaussian()
    a = pg.sample(t, pg.HMC(0.2, 5), n_draws=30, n_chains=3, seed=11, warmup=0)
    b = pg.sample(t, pg.HMC(0.2, 5), n_draws=30, n_chains=3, seed=11, warmup=0)
    for field in ("draws", "accept_prob", "u", "step_size", "energy", "n_grad"):
        np.testing.assert_array_equal(getattr(a, field), getattr(b, field), err_msg=field)
    c = pg.sample(t, pg.HMC(0.2, 5), n_draws=30, n_chains=3, seed=12, warmup=0)
    assert not np.any(np.all(a.draws == c.draws, axis=(1, 2)))  # every chain differs
    assert len(np.unique(a.draws[:, 0, 0])) == 3  # and chains differ from each other
    # the recorded seed reproduces the run
    d = pg.sample(t, pg.HMC(0.2, 5), n_draws=30, n_chains=3, seed=a.seed, warmup=0)
    np.testing.assert_array_equal(a.draws, d.draws)
    # a Generator seed works and is reproducible too
    e1 = pg.sample(t, pg.HMC(0.2, 5), n_draws=5, n_chains=2, seed=np.random.default_rng(3), warmup=0)
    e2 = pg.sample(t, pg.HMC(0.2, 5), n_draws=5, n_chains=2, seed=np.random.default_rng(3), warmup=0)
    np.testing.assert_array_equal(e1.draws, e2.draws)


@pytest.mark.parametrize("kernel", [pg.HMC(0.2, 5), pg.PartialRefreshHMC(0.2, 1, 0.9),
                                    pg.RandomWalk(0.5), pg.HMC(0.2, 5, uniform="drifting")],
                         ids=["hmc", "partial", "random-walk", "drifting"])
def test_chain_draws_do_not_depend_on_n_chains(kernel):
    # Chain k uses the k-th child of SeedSequence(seed), so what it sees must not depend
    # on how many chains run beside it -- including large batches (600 chains).
    t = gaussian()
    runs = {n: pg.sample(t, kernel, n_draws=25, n_chains=n, seed=4, warmup=0) for n in (1, 3, 600)}
    # Equal up to rounding only: a batched matrix product (600, 3) @ (3, 3) may round
    # differently from (1, 3) @ (3, 3) in BLAS, at the 1e-16 level.
    np.testing.assert_allclose(runs[3].draws[:1], runs[1].draws, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(runs[600].draws[:3], runs[3].draws, rtol=1e-10, atol=1e-12)
    np.testing.assert_array_equal(runs[600].u[:3], runs[3].u)


def test_stepping_a_sampler_equals_sample():
    t = gaussian()
    kernel = pg.HMC(0.2, 5)
    s = pg.Sampler(t, kernel, n_chains=3, seed=7)
    for _ in range(40):
        s.step()
    live = s.run
    batch = pg.sample(t, pg.HMC(0.2, 5), n_draws=40, n_chains=3, seed=7, warmup=0)
    for field in ("draws", "accepted", "accept_prob", "u", "step_size", "energy", "energy_error"):
        np.testing.assert_array_equal(getattr(live, field), getattr(batch, field), err_msg=field)
    assert live.draws.shape == (3, 40, 3)


# ------------------------------------------------------------------- memory


def test_records_are_compact_and_unbounded_draws_are_one_read_only_array():
    run = pg.sample(gaussian(), pg.HMC(0.2, 5), n_draws=40, n_chains=3, seed=2, warmup=0)
    assert run.accepted.dtype == bool and run.divergent.dtype == bool
    assert run.n_grad.dtype == np.int32
    assert run.total_grad == 3 * 40 * 5 and type(run.total_grad) is int
    # no bounds: one array for both scales, not a copy, and read-only so neither changes alone
    assert run.unconstrained is run.draws
    assert not run.draws.flags.writeable
    with pytest.raises(ValueError, match="read-only"):
        run.draws[0, 0, 0] = 1.0
    # sized once for n_draws: the draws are the recorder's whole buffer, not a trimmed copy
    assert run.draws.base is not None and run.draws.base.shape == run.draws.shape
    # a Sampler stepped on after taking a Run leaves that Run as it was
    s = pg.Sampler(gaussian(), pg.HMC(0.2, 5), n_chains=2, seed=3)
    s.step(256)  # exactly the first buffer's size
    before = s.run
    kept = before.draws.copy()
    s.step(10)
    np.testing.assert_array_equal(before.draws, kept)
    np.testing.assert_array_equal(s.run.draws[:, :256], kept)
    # an empty Run (stopped in warm-up) has the same dtypes
    empty = pg.Sampler(gaussian(), pg.HMC(0.2, 5), n_chains=2, seed=3).run
    assert empty.n_grad.dtype == np.int32 and empty.divergent.dtype == bool


def test_bounded_draws_are_their_own_array():
    run = pg.sample(gamma_target(), pg.HMC(0.3, 4), n_draws=20, n_chains=2, seed=1, warmup=0)
    assert run.unconstrained is not run.draws and run.draws.flags.writeable
    np.testing.assert_allclose(run.draws, np.exp(run.unconstrained))  # lower bound 0: x = exp(z)


@pytest.mark.parametrize("kernel", [pg.HMC(0.3, 7), pg.NUTS(0.3, max_depth=4)], ids=["hmc", "nuts"])
def test_kept_trajectories_stay_within_the_stated_memory(kernel):
    from phaseglass.core.sampling import trajectory_memory

    t = gaussian()
    run = pg.sample(t, kernel, n_draws=15, n_chains=3, seed=4, warmup=0, keep_trajectories=True)
    bound = trajectory_memory(run.kernel, t.dim, 3)
    sizes = [sum(v.nbytes for v in vars(tr).values() if isinstance(v, np.ndarray))
             for tr in run.trajectories]
    assert len(sizes) == 15 and max(sizes) <= bound
    if isinstance(kernel, pg.HMC):  # fixed length: the bound is the size, less the object
        assert max(sizes) >= bound - 512 - 3 * 8 * 4  # (divergent, steps, step sizes per chain)


def test_capacity_keeps_the_latest_draws_in_order():
    t = gaussian()
    full = pg.Sampler(t, pg.HMC(0.2, 5), n_chains=2, seed=8)
    ring = pg.Sampler(t, pg.HMC(0.2, 5), n_chains=2, seed=8, capacity=16)
    for n in (5, 16, 17, 41):  # below, at, just past and far past the capacity
        while full.n_draws < n:
            full.step()
            ring.step()
        kept = min(n, 16)
        r, f = ring.run, full.run
        assert r.draws.shape == (2, kept, 3)
        assert r.first_draw == n - kept
        np.testing.assert_array_equal(r.draws, f.draws[:, n - kept:])
        np.testing.assert_array_equal(r.accept_prob, f.accept_prob[:, n - kept:])


# ------------------------------------------------------------------- evaluation counts


@pytest.mark.parametrize("kernel", [pg.HMC(0.3, 20), pg.PartialRefreshHMC(0.3, 3, 0.8)],
                         ids=["hmc", "partial"])
def test_run_gradient_counts_equal_the_targets(kernel):
    # The centred 12-apiary model with a large step size diverges often (202 and 74 of the
    # 240 transitions below), so this also checks that chains stopped early are counted
    # honestly and that divergence replays are not counted as sampling work.
    t = pg.demos.get("apiaries-12")
    s = pg.Sampler(t, kernel, n_chains=4, seed=2)
    before = t.n_grad
    s.step(60)
    run = s.run
    assert run.n_divergent > 0
    assert np.any(run.n_grad < kernel.n_steps)  # some chains stopped early
    assert t.n_grad - before == run.total_grad == int(run.n_grad.sum())
    # sample(): the only extra gradients are the n_chains at the starting points
    t.reset_counts()
    run = pg.sample(t, kernel, n_draws=30, n_chains=4, seed=3, warmup=0)
    assert t.n_grad == run.total_grad + 4


def test_finite_difference_target_counts_during_sampling():
    with pytest.warns(UserWarning, match="finite differences"):
        t = pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), dim=2, vectorized=True)
    s = pg.Sampler(t, pg.HMC(0.3, 4), n_chains=2, seed=0)
    d0, g0 = t.n_density, t.n_grad
    s.step(10)
    used = s.run.total_grad
    assert used == 2 * 10 * 4
    assert t.n_grad - g0 == used
    # each gradient costs 2 * dim log-density evaluations (+1 for the value itself)
    assert t.n_density - d0 == used * (2 * 2 + 1)


# ------------------------------------------------------------------- correctness


@pytest.mark.slow
def test_hmc_recovers_the_correlated_gaussian():
    t = gaussian()
    rng = np.random.default_rng(1)
    # Start from exact draws, so any bias is the kernel's and not a burn-in transient.
    start = rng.multivariate_normal(np.zeros(3), t.cov, 8)
    run = pg.sample(t, pg.HMC(0.2, 10), start, n_draws=1000, n_chains=8, seed=1, warmup=0)
    x = run.draws
    assert np.max(rhat(x)) < 1.02  # worst seen over 20 seeds: 1.008
    sd_true = np.sqrt(np.diag(t.cov))
    # MCSE-based tolerances (4 standard errors; worst |z| seen over 20 seeds was 2.1).
    z_mean = x.mean(axis=(0, 1)) / mcse(x, kind="mean")
    z_sd = (x.std(axis=(0, 1), ddof=1) - sd_true) / mcse(x, kind="sd")
    prod = x[..., 0] * x[..., 1]
    z_cov = (prod.mean() - t.cov[0, 1]) / mcse(prod, kind="mean")
    assert np.all(np.abs(z_mean) < 4), z_mean
    assert np.all(np.abs(z_sd) < 4), z_sd
    assert abs(z_cov) < 4, z_cov
    # Marginals against scipy.stats.norm on ESS-thinned draws (worst p seen over 20 seeds:
    # 0.007; the three marginals of one seed move together).
    for i in range(3):
        p = scipy.stats.kstest(thin_by_ess(x[..., i]), scipy.stats.norm(0, sd_true[i]).cdf).pvalue
        assert p > 1e-3, (i, p)


@pytest.mark.slow
@pytest.mark.parametrize("make, reference", [
    (gamma_target, scipy.stats.gamma(3, scale=2)),
    (beta_target, scipy.stats.beta(2, 5)),
], ids=["gamma-3-2", "beta-2-5"])
def test_bounded_parameters_sample_the_right_distribution(make, reference):
    t = make()
    run = pg.sample(t, pg.HMC(0.5, 5), n_draws=1000, warmup=300, n_chains=4, seed=5)
    x = run.draws[..., 0]
    lo, hi = reference.support()
    assert np.all((x > lo) & (x < hi))
    # draws come back on the user's scale, the unconstrained ones are their transform
    np.testing.assert_allclose(t.from_user(run.draws), run.unconstrained, rtol=1e-9, atol=1e-9)
    # KS against scipy.stats on ESS-thinned draws (worst p over 20 seeds: 0.009, Beta)
    p = scipy.stats.kstest(thin_by_ess(x), reference.cdf).pvalue
    assert p > 1e-3, p
    # mean within 4 MCSE of the known one (worst |z| over 20 seeds: 2.9)
    assert abs(x.mean() - reference.mean()) < 4 * mcse(x, kind="mean")


@pytest.mark.slow
def test_warm_up_tunes_step_size_and_metric():
    scales = np.logspace(-1, 1, 10)  # standard deviations from 0.1 to 10
    t = pg.demos.correlated_gaussian(10, 0.0, scales)
    run = pg.sample(t, pg.HMC(0.1, 10), n_draws=300, warmup=500, n_chains=4, seed=2)
    # Dual averaging toward 0.8 (Hoffman & Gelman 2014, sec. 3.2). The averaged step
    # size is somewhat conservative, so the realised mean acceptance sits a little above
    # the target (0.83-0.86 over 20 seeds).
    assert abs(np.mean(run.accept_prob) - 0.8) < 0.1
    assert run.warmup_history.shape == (500,)
    assert np.all(np.isfinite(run.warmup_history))
    # with the metric learnt the problem is a unit Gaussian, whose leapfrog is stable below
    # step size 2 (see test_leapfrog); 0.8 acceptance in 10-D puts it well inside that
    assert 0.3 < run.kernel.step_size < 1.5
    assert run.n_warmup == 500 and run.draws.shape == (4, 300, 10)
    # The estimated diagonal metric recovers the variances roughly (ratios within
    # 0.73-1.24 over 20 seeds): a 10,000-fold range of variances collapses to ~1.
    ratio = run.kernel.metric.inverse_mass / scales**2
    assert np.all((ratio > 0.6) & (ratio < 1.6)), ratio
    assert run.kernel.metric.kind == "diagonal"


def test_sample_warms_up_by_default_and_warmup_0_keeps_the_knobs():
    # A badly scaled Gaussian (sd 0.2 and 5) and a step size past the narrow
    # direction's leapfrog stability limit (2 x sd = 0.4 for a unit mass;
    # Leimkuhler & Reich, "Simulating Hamiltonian Dynamics", CUP 2004, the
    # harmonic-oscillator analysis): without warm-up nearly every transition
    # diverges, with the default warm-up the run is usable.
    scales = np.array([0.2, 5.0])
    t = pg.demos.correlated_gaussian(2, 0.0, scales)
    kernel = pg.HMC(0.5, 10)
    off = pg.sample(t, kernel, n_draws=300, warmup=0, seed=4)
    assert off.n_warmup == 0 and off.kernel.step_size == 0.5
    assert off.n_divergent > 0.5 * off.n_chains * off.n_draws
    assert "no warm-up" in repr(off)

    run = pg.sample(t, kernel, n_draws=300, seed=4)
    assert run.n_warmup == pg.auto_warmup(300) == 300
    assert "after 300 warm-up (automatic length; warmup=0 switches it off)" in repr(run)
    assert run.kernel.step_size != 0.5 and run.kernel.metric.kind == "diagonal"
    assert run.n_divergent <= 0.01 * run.n_chains * run.n_draws
    # closed form: mean 0 and sd = scales; the pooled mean within 5 MCSE, the sd within 15 %
    x = run.draws.reshape(-1, 2)
    m = np.array([mcse(run.draws[..., i]) for i in range(2)])
    assert np.all(np.abs(x.mean(axis=0)) < 5 * m)
    np.testing.assert_allclose(x.std(axis=0), scales, rtol=0.15)
    assert kernel.step_size == 0.5  # the user's kernel object is left as it was


def test_auto_warmup_length_follows_n_draws_within_bounds():
    assert [pg.auto_warmup(n) for n in (1, 50, 200, 640, 1000, 10**6)] == [200, 200, 200, 640, 1000, 1000]
    t = pg.demos.correlated_gaussian()
    for bad in ("yes", "none", "AUTO"):
        with pytest.raises(ValueError, match=r'`warmup` must be "auto" or a whole number'):
            pg.sample(t, pg.HMC(0.1, 5), n_draws=5, warmup=bad)


# ------------------------------------------------------------------- divergences, digest


def funnel(dim=4):
    """Neal's funnel, log p = N(v; 0, 3) + sum_i N(x_i; 0, exp(v / 2)): diverges at large steps."""
    def value_and_grad(x):
        v, z = x[:, 0], x[:, 1:]
        s2 = np.exp(v)[:, None]
        lp = -v ** 2 / 18.0 - 0.5 * np.sum(z ** 2 / s2, axis=1) - 0.5 * (dim - 1) * v
        gv = -v / 9.0 + 0.5 * np.sum(z ** 2 / s2, axis=1) - 0.5 * (dim - 1)
        return lp, np.column_stack([gv, -z / s2])
    return pg.Target(value_and_grad=value_and_grad, dim=dim, vectorized=True)


def _assert_same_trajectory(a, b):
    for field in ("positions", "momenta", "potential", "kinetic", "energy_error"):
        np.testing.assert_array_equal(getattr(a, field), getattr(b, field), err_msg=field)
    assert (a.divergence_step, a.step_size, a.n_steps) == (b.divergence_step, b.step_size, b.n_steps)


@pytest.mark.parametrize("kernel", [pg.HMC(0.9, 10), pg.PartialRefreshHMC(0.9, 3),
                                    pg.NUTS(0.9, max_depth=5)], ids=["hmc", "partial", "nuts"])
def test_divergence_replays_are_integrated_only_when_read_and_never_counted(kernel):
    t = funnel()
    pg.Sampler(t, kernel.copy(), n_chains=6, seed=0)  # the target checks its first batch once
    start = (t.n_density, t.n_grad)
    lazy_sampler = pg.Sampler(t, kernel.copy(), n_chains=6, seed=2)
    lazy_sampler.step(60)
    run = lazy_sampler.run
    assert run.n_divergent >= 2 and len(run.divergences) == run.n_divergent
    counted = (t.n_density, t.n_grad)
    assert not any(d.replayed for d in run.divergences)  # nothing integrated yet
    assert [(d[0], d[1]) for d in run.divergences] == [(d.chain, d.draw) for d in run.divergences]
    steps = [d.divergence_step for d in run.divergences]
    assert not any(d.replayed for d in run.divergences)  # chain, draw and step integrate nothing
    # the same run with every replay integrated right after its transition (as before)
    s = pg.Sampler(t, kernel.copy(), n_chains=6, seed=2)
    eager = []
    for _ in range(60):
        s.step()
        eager.extend((c, d, tr) for c, d, tr in list(s.divergences)[len(eager):])
    assert len(eager) == len(run.divergences)
    counted_eager = (t.n_density, t.n_grad)
    for (c, d, tr), lazy in zip(eager, run.divergences):
        chain, draw, traj = lazy  # unpacking integrates
        assert lazy.replayed and lazy.trajectory is traj and lazy[2] is traj and len(lazy) == 3
        assert (chain, draw) == (c, d) and run.divergent[chain, draw] and traj.divergent
        _assert_same_trajectory(traj, tr)
    assert steps == [d.trajectory.divergence_step for d in run.divergences]
    assert (t.n_density, t.n_grad) == counted_eager  # reading replays is not sampling work
    # nor is integrating them right away: the eager run cost what the lazy one did
    assert np.subtract(counted_eager, counted).tolist() == np.subtract(counted, start).tolist()


def test_divergence_replays_equal_the_transitions_own_trajectories():
    # keep_trajectories=True keeps the kernel's own integration of every chain; a replay
    # integrates only the divergent rows again, from the start and momentum it stored
    t = funnel()
    kept = pg.sample(t, pg.HMC(0.9, 10), n_draws=60, n_chains=6, seed=5, warmup=0,
                     keep_trajectories=True)
    lazy = pg.sample(t, pg.HMC(0.9, 10), n_draws=60, n_chains=6, seed=5, warmup=0)
    np.testing.assert_array_equal(kept.draws, lazy.draws)
    assert [(d.chain, d.draw) for d in lazy.divergences] == [(c, d) for c, d, _ in kept.divergences]
    assert any(sum(d.draw == e.draw for e in lazy.divergences) > 1 for d in lazy.divergences), \
        "want a transition with several divergent chains (one replay batch)"
    for replay in lazy.divergences:
        own = kept.trajectories[replay.draw]
        c, tr = replay.chain, replay.trajectory
        assert tr.divergence_step == own.divergence_step[c]
        for field in ("positions", "momenta", "potential", "kinetic"):
            # same arithmetic on fewer rows: equal up to rounding in the batched products
            np.testing.assert_allclose(getattr(tr, field), getattr(own, field)[c], rtol=1e-12,
                                       atol=1e-12, err_msg=field)



@pytest.fixture(scope="module")
def apiary_runs():
    kernel = pg.HMC(0.2, 20)
    return {form: pg.sample(pg.demos.apiaries(form, n_groups=12), kernel, n_draws=300,
                            warmup=300, n_chains=4, seed=3)
            for form in ("centred", "noncentred")}


@pytest.mark.slow
def test_centred_apiaries_diverge_and_keep_replays(apiary_runs):
    run = apiary_runs["centred"]
    # 11-126 divergences over seeds 1-20 (centred; this seed gives 40), 0 for the non-centred
    # form.
    assert run.n_divergent >= 3
    assert 3 * apiary_runs["noncentred"].n_divergent <= run.n_divergent
    assert len(run.divergences) == run.n_divergent
    for chain, draw, traj in run.divergences:
        assert run.divergent[chain, draw]
        assert isinstance(traj, pg.Trajectory)
        assert traj.divergent and traj.divergence_step is not None
        assert traj.positions.shape == (21, 14)
        k = traj.divergence_step
        assert not abs(traj.energy_error[k]) <= traj.max_energy_error
        assert np.all(np.isnan(traj.positions[k + 1:]))
        # a divergent transition is rejected, so the chain stays where the replay started
        np.testing.assert_allclose(traj.positions[0], run.unconstrained[chain, draw])
        assert traj.step_size == run.step_size[chain, draw]


@pytest.mark.slow
def test_summary_of_a_divergent_run(apiary_runs, capsys):
    run = apiary_runs["centred"]
    digest = run.summary()
    print(digest)
    out = capsys.readouterr().out
    assert "log_tau" in out and "apiary[11]" in out
    assert CAUTION in " ".join(out.split())  # wrapped to fit a notebook column
    assert max(len(line) for line in out.splitlines()) <= 100
    assert any("divergent transition" in w for w in digest.warnings)
    d = json.loads(json.dumps(digest.as_dict()))
    assert d["caution"] == CAUTION
    assert d["run"]["divergences"] == run.n_divergent
    assert set(d["parameters"]) == set(run.names)
    assert any("divergent" in w for w in d["warnings"])


def test_summary_prints_and_is_json_serialisable(capsys):
    run = pg.sample(gaussian(), pg.HMC(0.2, 5), n_draws=50, n_chains=2, seed=9, warmup=0)
    digest = run.summary()
    print(digest)
    out = capsys.readouterr().out
    assert "clock_1" in out and CAUTION in " ".join(out.split())
    text = json.dumps(digest.as_dict())  # must not raise (no numpy scalars, NaN -> null)
    d = json.loads(text)
    assert d["caution"] == CAUTION
    assert d["run"]["chains"] == 2 and d["run"]["draws_per_chain"] == 50
    assert d["run"]["kernel"]["kernel"] == "HMC"
    assert set(d["parameters"]["clock_1"]) == set(digest.columns)
    assert "<table>" in digest._repr_html_()
    assert "HMC: 2 chains x 50 draws" in repr(run)


# ------------------------------------------------------------------- documented errors


def test_hmc_knob_errors_at_construction_and_assignment():
    with pytest.raises(ValueError, match="`step_size` must be finite and > 0, got 0.0"):
        pg.HMC(0.0, 10)
    with pytest.raises(ValueError, match="`step_size` must be finite and > 0, got -0.1"):
        pg.HMC(-0.1, 10)
    with pytest.raises(ValueError, match="`n_steps` must be >= 1, got 0"):
        pg.HMC(0.1, 0)
    for bad in (1.0, 1.5, -0.1):
        with pytest.raises(ValueError, match="`jitter`"):
            pg.HMC(0.1, 10, jitter=bad)
    k = pg.HMC(0.1, 10)
    with pytest.raises(ValueError, match="`step_size` must be finite and > 0, got -1.0"):
        k.step_size = -1.0
    with pytest.raises(ValueError, match="`n_steps` must be >= 1, got 0"):
        k.n_steps = 0
    with pytest.raises(TypeError, match="`n_steps` must be an integer"):
        k.n_steps = 2.5
    with pytest.raises(ValueError, match=r"`jitter` must be a fraction in \[0, 1\), got 1.0"):
        k.jitter = 1.0
    with pytest.raises(ValueError, match="`jitter` must be finite and >= 0, got -0.2"):
        k.jitter = -0.2
    # a rejected assignment leaves the knob as it was
    assert (k.step_size, k.n_steps, k.jitter) == (0.1, 10, 0.1)
    k.step_size, k.n_steps, k.jitter = 0.3, 4, 0.0
    assert (k.step_size, k.n_steps, k.jitter) == (0.3, 4, 0.0)
    with pytest.raises(ValueError, match=r"`persistence` must lie in \[0, 1\), got 1.0"):
        pg.PartialRefreshHMC(0.1, 1, 1.0)
    with pytest.raises(ValueError, match="`scale` must be finite and > 0"):
        pg.RandomWalk(0.0)
    with pytest.raises(TypeError, match="`uniform` must be None, 'fresh', 'drifting'"):
        pg.HMC(0.1, 10, uniform="sometimes")


def test_sample_errors():
    def logp(x):
        return np.where(x[..., 0] > 0, -0.5 * np.sum(x * x, axis=-1), -np.inf)

    t = pg.Target(logp, lambda x: -x, dim=2, vectorized=True)
    with pytest.raises(ValueError, match=r"non-finite log-density \(-inf\) for chain 1 at x = \[-1\.\s+2\.\]"):
        pg.sample(t, pg.HMC(0.1, 5), [[1.0, 2.0], [-1.0, 2.0]], n_chains=2, warmup=0)
    with pytest.raises(ValueError, match=r"`initial` must have shape \(2,\) or \(n_chains, dim\) = \(4, 2\), got \(3,\)"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0, 3.0], warmup=0)
    with pytest.raises(ValueError, match=r"`initial` must have shape .* got \(2, 2\)"):
        pg.sample(t, pg.HMC(0.1, 5), [[1.0, 2.0], [1.0, 2.0]], n_chains=3, warmup=0)
    for bad in ("42", 1.5, -1, [1, 2]):
        with pytest.raises(TypeError, match="`seed` must be None, a non-negative int"):
            pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], seed=bad, warmup=0)
    with pytest.raises(TypeError, match="`kernel` must be a phaseglass kernel"):
        pg.sample(t, "hmc", [1.0, 2.0], warmup=0)
    with pytest.raises(TypeError, match="`target` must be a phaseglass Target"):
        pg.sample(logp, pg.HMC(0.1, 5), warmup=0)
    with pytest.raises(ValueError, match="`n_draws` must be >= 1, got 0"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], n_draws=0, warmup=0)
    with pytest.raises(ValueError, match="`n_chains` must be >= 1, got 0"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], n_chains=0, warmup=0)
    with pytest.raises(ValueError, match="`warmup` must be >= 0, got -5"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], warmup=-5)
    with pytest.raises(ValueError, match="`mass_adaptation` must be one of"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], warmup=30, mass_adaptation="full")


def test_former_metric_adaptation_keyword_warms_up_the_same_and_names_the_new_one():
    # issue 12: "metric" means a Metric object; the shape warm-up estimates is mass_adaptation
    t = pg.demos.correlated_gaussian(2, 0.0, scales=[1.0, 3.0])
    new = pg.sample(t, pg.HMC(0.3, 5), n_draws=5, warmup=60, seed=2, mass_adaptation=None)
    with pytest.warns(DeprecationWarning, match="use `mass_adaptation`"):
        old = pg.sample(t, pg.HMC(0.3, 5), n_draws=5, warmup=60, seed=2, metric_adaptation=None)
    np.testing.assert_array_equal(old.draws, new.draws)
    assert old.kernel.metric.kind == "identity"  # None was honoured, not mistaken for unset
    sampler = pg.Sampler(t, pg.HMC(0.3, 5), n_chains=2, seed=2)
    with pytest.warns(DeprecationWarning, match="use `mass_adaptation`"):
        sampler.warm_up(60, metric="diagonal")
    assert sampler.kernel.metric.kind == "diagonal"
    with pytest.raises(ValueError, match="`metric` has dimension 3 but the target has dim=2"):
        pg.sample(t, pg.HMC(0.1, 5, metric=np.ones(3)), [1.0, 2.0], warmup=0)
    with pytest.raises(ValueError, match=r"`target_accept` must lie in"):
        pg.sample(t, pg.HMC(0.1, 5), [1.0, 2.0], warmup=30, target_accept=1.2)


def test_sampler_errors():
    t = gaussian()
    with pytest.raises(ValueError, match="`capacity` must be >= 1, got 0"):
        pg.Sampler(t, pg.HMC(0.1, 5), capacity=0)
    with pytest.raises(ValueError, match=r"`initial` gives a non-finite gradient for chain 0"):
        bad = pg.Target(lambda x: -0.5 * x @ x, lambda x: x * np.nan, dim=2)
        pg.Sampler(bad, pg.HMC(0.1, 5), [0.5, 0.5], n_chains=1)
    s = pg.Sampler(t, pg.HMC(0.1, 5), n_chains=1, seed=0)
    with pytest.raises(ValueError, match="`n` must be >= 1, got 0"):
        s.step(0)
    with pytest.raises(ValueError, match="no finite log-density found after 100 random starts"):
        nowhere = pg.Target(lambda x: -np.inf, lambda x: x, dim=1)
        pg.Sampler(nowhere, pg.HMC(0.1, 5), n_chains=1, seed=0)


def test_digest_leaves_ebfmi_out_for_persistent_momentum():
    # E-BFMI measures how a fresh momentum draw moves between energy levels (common
    # practice); with persistence > 0 it does not apply and must not raise a warning.
    t = pg.demos.correlated_gaussian()
    run = pg.sample(t, pg.PartialRefreshHMC(0.2, 1, 0.95), n_draws=200, n_chains=2, seed=5, warmup=0)
    digest = run.summary()
    assert all(np.isnan(b) for b in np.atleast_1d(digest.run_info["ebfmi"]))
    assert not any("E-BFMI" in w for w in digest.warnings)
    full = pg.sample(t, pg.PartialRefreshHMC(0.2, 10, 0.0), n_draws=200, n_chains=2, seed=5, warmup=0)
    assert np.all(np.isfinite(full.summary().run_info["ebfmi"]))
