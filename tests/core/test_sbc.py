"""Simulation-based calibration of every kind of kernel on conjugate normal models.

SBC (Talts, Betancourt, Simpson, Vehtari & Gelman 2018, "Validating Bayesian
inference algorithms with simulation-based calibration", arXiv:1804.06788): draw
a parameter from the prior, data given it, then L posterior draws with the
sampler; the rank of the prior draw among the L posterior draws is uniform on
{0, ..., L} exactly when the sampler draws from the posterior. Over many
replications the binned ranks are tested for uniformity with a chi-square test.

Model for the gradient-based and random-walk kernels: mu ~ N(0, 1),
y_i | mu ~ N(mu, sigma^2), i = 1..N_OBS, whose posterior is
N(sum(y) / (sigma^2 + N_OBS), sigma^2 / (sigma^2 + N_OBS)).

Model for Gibbs: two means, a ~ N(0, 1), b ~ N(0, 1), two observations of a and
three of a + b (unit noise). Its posterior is a correlated bivariate normal
(correlation -0.61) whose full conditionals are normal, so Gibbs gets exact
conditionals. Gibbs is not run on the one-mean model: there its single
conditional is the posterior itself, and with a fixed shift the scheme is a
rotation that never forgets its starting point (x_{t+2} = F^-1(F(x_t) + c)), so
the draws at even steps fail SBC however long the run; with two coordinates the
shift scheme mixes.

Each replication gets a fresh Target (its own data) and one ``pg.sample`` call
with warm-up; the L draws come from ``N_CHAINS`` chains (batched in one run),
``DRAWS_PER_CHAIN`` each, thinned far beyond the autocorrelation time, so they
are close to independent. The level is strict (p > 0.001) and the seeds are
fixed; each sampler was also run with 30 other seeds while writing the test.
"""

import numpy as np
import pytest
import scipy.special
import scipy.stats

import phaseglass as pg

N_REPLICATIONS = 200
N_CHAINS = 10
DRAWS_PER_CHAIN = 2
L = N_CHAINS * DRAWS_PER_CHAIN      # 20 draws -> ranks 0..20
N_BINS = 7                          # 21 rank values, 3 per bin, about 29 replications per bin
LEVEL = 1e-3


# ------------------------------------------------------------------- one mean

SIGMA = 1.0
N_OBS = 4
POST_VAR = SIGMA**2 / (SIGMA**2 + N_OBS)


def simulate_one_mean(rng):
    mu = rng.standard_normal()
    return np.array([mu]), mu + SIGMA * rng.standard_normal(N_OBS)


def posterior_one_mean(y):
    """The exact conjugate posterior of mu given the data (scipy.stats.norm)."""
    return scipy.stats.norm(np.sum(y) / (SIGMA**2 + N_OBS), np.sqrt(POST_VAR))


def target_one_mean(y):
    """A fresh vectorized Target for one replication's data ``y`` (N_OBS,)."""

    def value_and_grad(x):
        mu = x[:, 0]
        resid = y[None, :] - mu[:, None]
        logp = -0.5 * mu * mu - 0.5 * np.sum(resid * resid, axis=1) / SIGMA**2
        grad = -mu + np.sum(resid, axis=1) / SIGMA**2
        return logp, grad[:, None]

    return pg.Target(lambda x: value_and_grad(x)[0], dim=1, vectorized=True,
                     value_and_grad=value_and_grad, names=["mu"])


# ------------------------------------------------------------------ two means

N_A, N_AB = 2, 3
# posterior precision of (a, b): prior identity plus the data's information
PRECISION = np.array([[1.0 + N_A + N_AB, N_AB], [N_AB, 1.0 + N_AB]])


def simulate_two_means(rng):
    a, b = rng.standard_normal(2)
    return np.array([a, b]), (a + rng.standard_normal(N_A), a + b + rng.standard_normal(N_AB))


def posterior_mean_two_means(data):
    y_a, y_ab = data
    return np.linalg.solve(PRECISION, [np.sum(y_a) + np.sum(y_ab), np.sum(y_ab)])


def target_two_means(data):
    mean = posterior_mean_two_means(data)

    def value_and_grad(x):
        d = x - mean
        g = -(d @ PRECISION)
        return 0.5 * np.sum(d * g, axis=1), g

    return pg.Target(lambda x: value_and_grad(x)[0], dim=2, vectorized=True,
                     value_and_grad=value_and_grad, names=["a", "b"])


class Normal:
    """N(loc, scale) with the cdf and ppf Gibbs needs.

    The same functions scipy.stats.norm evaluates (scipy.special.ndtr, ndtri), without
    the cost of building a frozen distribution on every update (~0.2 ms, which would
    make 200 replications too slow for CI); ``test_normal_matches_scipy_stats`` checks
    the two agree.
    """

    def __init__(self, loc, scale):
        self.loc, self.scale = loc, scale

    def cdf(self, x):
        return scipy.special.ndtr((x - self.loc) / self.scale)

    def ppf(self, u):
        return self.loc + self.scale * scipy.special.ndtri(u)


def conditionals_two_means(data):
    """Exact full conditionals: x_i | x_j ~ N(m_i - P_ij / P_ii (x_j - m_j), 1 / P_ii)."""
    mean = posterior_mean_two_means(data)
    sd = 1.0 / np.sqrt(np.diag(PRECISION))

    def conditionals(i, x):
        j = 1 - i
        return Normal(mean[i] - PRECISION[i, j] / PRECISION[i, i] * (x[j] - mean[j]), sd[i])

    return conditionals


def test_normal_matches_scipy_stats():
    x = np.linspace(-4, 4, 17)
    u = np.linspace(0.01, 0.99, 17)
    np.testing.assert_allclose(Normal(0.3, 1.7).cdf(x), scipy.stats.norm(0.3, 1.7).cdf(x), rtol=1e-14)
    np.testing.assert_allclose(Normal(0.3, 1.7).ppf(u), scipy.stats.norm(0.3, 1.7).ppf(u), rtol=1e-14)


# -------------------------------------------------------------------- harness


def sbc_ranks(simulate, draw_posterior, seed, n_replications=N_REPLICATIONS):
    """Ranks (n_replications, dim) of the prior draw among L posterior draws.

    ``simulate(rng)`` returns ``(theta (dim,), data)``; ``draw_posterior(data, seed)``
    returns L posterior draws shaped (L, dim).
    """
    ranks = []
    for child in np.random.SeedSequence(seed).spawn(n_replications):
        data_seed, run_seed = child.spawn(2)
        theta, data = simulate(np.random.default_rng(data_seed))
        draws = np.asarray(draw_posterior(data, run_seed))
        assert draws.shape == (L, theta.size)
        ranks.append(np.sum(draws < theta, axis=0))
    return np.array(ranks)


def uniformity_pvalues(ranks):
    """Chi-square test (scipy.stats.chisquare) per coordinate, ranks binned into N_BINS bins."""
    return np.array([
        scipy.stats.chisquare(np.bincount(r, minlength=L + 1).reshape(N_BINS, -1).sum(axis=1)).pvalue
        for r in ranks.T
    ])


def with_sampler(make_target, make_kernel, *, warmup, thin, **options):
    """A ``draw_posterior`` that runs ``pg.sample`` and keeps thinned draws of every chain."""

    def draw_posterior(data, seed):
        run = pg.sample(make_target(data), make_kernel(data), n_draws=DRAWS_PER_CHAIN * thin,
                        n_chains=N_CHAINS, warmup=warmup, seed=seed, **options)
        return run.draws[:, thin - 1::thin].reshape(L, -1)

    return draw_posterior


def test_harness_with_exact_posterior_draws():
    # Control: independent draws from the analytic posterior must pass, so a failure
    # below points at the sampler and not at the posterior formula or the binning.
    def exact(y, seed):
        return posterior_one_mean(y).rvs(size=(L, 1), random_state=np.random.default_rng(seed))

    assert np.all(uniformity_pvalues(sbc_ranks(simulate_one_mean, exact, seed=100)) > LEVEL)


def test_harness_detects_a_wrong_posterior():
    # Power check: a posterior 30% too wide piles the ranks in the middle and fails.
    def too_wide(y, seed):
        p = posterior_one_mean(y)
        return scipy.stats.norm(p.mean(), 1.3 * p.std()).rvs(
            size=(L, 1), random_state=np.random.default_rng(seed))

    ranks = sbc_ranks(simulate_one_mean, too_wide, seed=100, n_replications=400)
    assert np.all(uniformity_pvalues(ranks) < LEVEL)


# --------------------------------------------------------------------- kernels

def one_mean(make_kernel, **options):
    # warm-up 100 transitions; autocorrelation is below 0.05 by lag 6-8 for every
    # kernel here, so a thinning of 20 leaves the kept draws close to independent
    return with_sampler(target_one_mean, lambda data: make_kernel(), warmup=100, thin=20, **options)


SAMPLERS = {
    "hmc": (simulate_one_mean, one_mean(lambda: pg.HMC(0.5, 3))),
    # the no-U-turn sampler (Hoffman & Gelman 2014; multinomial, generalised criterion):
    # autocorrelation 0.46 at lag 1, below 0.02 by lag 5, so a thinning of 10 suffices
    "nuts": (simulate_one_mean, with_sampler(target_one_mean, lambda data: pg.NUTS(0.5),
                                             warmup=100, thin=10)),
    "partial-drifting": (simulate_one_mean, one_mean(
        lambda: pg.PartialRefreshHMC(0.3, 1, persistence=0.9, uniform=pg.DriftingUniform(0.03)))),
    "randomwalk": (simulate_one_mean, one_mean(lambda: pg.RandomWalk(0.5))),
    "randomwalk-drifting-nometric": (simulate_one_mean, one_mean(
        lambda: pg.RandomWalk(0.5, uniform="drifting"), mass_adaptation=None)),
    # Gibbs has nothing to tune; by lag 10 the autocorrelation is within +-0.05 (the
    # shift scheme's oscillates, 0.13 at lag 7; ordinary Gibbs is below 0.02 by lag 5)
    "gibbs-shift": (simulate_two_means, with_sampler(
        target_two_means, lambda data: pg.Gibbs(conditionals_two_means(data), shift=0.381966),
        warmup=10, thin=10)),
    "gibbs-fresh": (simulate_two_means, with_sampler(
        target_two_means, lambda data: pg.Gibbs(conditionals_two_means(data)), warmup=10, thin=10)),
}


#: Longer than 20 s on a shared 2-core machine (NUTS: ~0.3 s per replication, its tree
#: bookkeeping in Python costs more than the few leapfrog steps of this 1-D posterior).
SLOW = {"nuts"}


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n in SLOW else n
                                  for n in sorted(SAMPLERS)])
def test_sbc_ranks_are_uniform(name):
    simulate, draw_posterior = SAMPLERS[name]
    ranks = sbc_ranks(simulate, draw_posterior, seed=2018)
    assert np.all(uniformity_pvalues(ranks) > LEVEL), [np.bincount(r, minlength=L + 1) for r in ranks.T]
