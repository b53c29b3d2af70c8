"""NormalConditional against scipy.stats.norm / truncnorm, and as a Gibbs conditional."""

import numpy as np
import pytest
import scipy.stats

import phaseglass as pg

# (mean, sd, low, high): whole line, both cuts, one cut each side, and far upper/lower tails
CASES = [(0.3, 1.7, -np.inf, np.inf), (1.0, 0.5, 0.2, 1.4), (-2.0, 1.0, 0.0, np.inf),
         (2.0, 0.3, -np.inf, 1.0), (0.0, 1.0, 6.0, 9.0), (0.0, 1.0, -12.0, -7.5),
         (5.0, 2.0, 4.9, 5.1)]


@pytest.mark.parametrize("mean, sd, low, high", CASES)
def test_matches_scipy_truncnorm(mean, sd, low, high):
    d = pg.NormalConditional(mean, sd, low=low, high=high)
    ref = scipy.stats.truncnorm((low - mean) / sd, (high - mean) / sd, loc=mean, scale=sd)  # reference
    u = np.linspace(0.001, 0.999, 41)
    np.testing.assert_allclose(d.ppf(u), ref.ppf(u), rtol=1e-9, atol=1e-12 * sd)
    x = ref.ppf(u)
    np.testing.assert_allclose(d.cdf(x), u, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(d.logpdf(x), ref.logpdf(x), rtol=1e-9, atol=1e-9)
    if np.isfinite(low):
        assert d.logpdf(low - 1e-9 * sd) == -np.inf and d.cdf(low - 1.0) == 0.0


def test_whole_line_is_scipy_norm_and_parameters_broadcast():
    mean, sd = np.array([0.0, 1.0, -3.0]), np.array([1.0, 2.0, 0.5])
    d = pg.NormalConditional(mean, sd)
    u = np.array([0.1, 0.5, 0.97])
    np.testing.assert_allclose(d.ppf(u), scipy.stats.norm(mean, sd).ppf(u), rtol=1e-12)  # reference


def test_bad_parameters_name_the_argument():
    with pytest.raises(ValueError, match="`sd` must be positive"):
        pg.NormalConditional(0.0, 0.0)
    with pytest.raises(ValueError, match="`low` must be below `high`"):
        pg.NormalConditional(0.0, 1.0, low=1.0, high=1.0)
    with pytest.raises(ValueError, match="`mean` must be finite"):
        pg.NormalConditional(np.nan, 1.0)


def test_gibbs_with_it_follows_the_frozen_scipy_draws():
    # box-truncated bivariate normal, correlation 0.6: exact conditionals are truncated normals
    rho, lo, hi = 0.6, -1.0, 2.0
    s = np.sqrt(1 - rho ** 2)

    def log_density(x):
        x = np.atleast_2d(x)
        inside = np.all((x >= lo) & (x <= hi), axis=-1)
        q = (x[:, 0] ** 2 - 2 * rho * x[:, 0] * x[:, 1] + x[:, 1] ** 2) / (2 * (1 - rho ** 2))
        return np.where(inside, -q, -np.inf)

    def grad(x):
        x = np.atleast_2d(x)
        return -(x - rho * x[:, ::-1]) / (1 - rho ** 2)

    target = pg.Target(log_density, grad, dim=2, vectorized=True, bounds=[(lo, hi), (lo, hi)])

    def light(i, x):
        return pg.NormalConditional(rho * x[1 - i], s, low=lo, high=hi)

    def frozen(i, x):
        m = rho * x[1 - i]
        return scipy.stats.truncnorm((lo - m) / s, (hi - m) / s, loc=m, scale=s)

    kw = dict(initial=[[0.0, 0.5], [1.5, -0.5]], n_draws=30, n_chains=2, warmup=0, seed=4)
    a = pg.sample(target, pg.Gibbs(light, shift=0.381966), **kw).draws
    b = pg.sample(target, pg.Gibbs(frozen, shift=0.381966), **kw).draws
    np.testing.assert_allclose(a, b, rtol=1e-8, atol=1e-10)
