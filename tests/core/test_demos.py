"""The many-parameter demo `apiaries`: its log-density, gradient, forms and the funnel lesson.

External references are named beside each check (scipy.stats densities; the marginal of a
normal group whose mean is itself normal is the textbook Gaussian convolution, written here
as scipy's multivariate normal with covariance ``sd^2 I + tau^2 1 1^T``).
"""

import numpy as np
import pytest
import scipy.optimize
from scipy import special, stats

import phaseglass as pg
from phaseglass.core import demos

J = 48
HALF_LOG_2PI = 0.5 * np.log(2 * np.pi)


@pytest.fixture(scope="module")
def centred():
    return demos.apiaries("centred")


@pytest.fixture(scope="module")
def noncentred():
    return demos.apiaries("noncentred")


def bulk_points(form, rng, n):
    """Points around the posterior's bulk, funnel neck included (log_tau down to -4)."""
    mu = rng.normal(3.0, 0.3, n)
    s = rng.uniform(-4.0, 0.5, n)
    if form == "centred":
        effects = mu[:, None] + np.exp(s)[:, None] * rng.standard_normal((n, J))
    else:
        effects = rng.standard_normal((n, J))
    return np.column_stack([mu, s, effects])


# ------------------------------------------------------------------------- the data
def test_data_come_from_the_seeded_generator_and_the_shapes_follow_n_groups(centred):
    again = demos.apiaries("centred")
    np.testing.assert_array_equal(again.gain, centred.gain)       # same seed, same data
    other = demos.apiaries("centred", seed=demos.APIARY_SEED + 1)
    assert not np.array_equal(other.gain[:20], centred.gain[:20])
    assert centred.dim == J + 2 and centred.names[:3] == ("mu", "log_tau", "apiary[0]")
    assert centred.names[-1] == "apiary[47]"
    assert demos.apiaries("noncentred").names[2:4] == ("z[0]", "z[1]")
    assert centred.hives.shape == (J,) and centred.hives.min() >= 3 and centred.hives.max() <= 8
    assert centred.gain.shape == centred.group.shape == (centred.hives.sum(),)
    np.testing.assert_array_equal(np.bincount(centred.group, minlength=J), centred.hives)
    small = demos.apiaries("noncentred", n_groups=40)
    assert small.dim == 42 and small.hives.shape == (40,)
    assert "48 apiaries" in centred.description and "centred" in centred.description
    assert demos.get("apiaries").names == centred.names
    assert demos.get("apiaries-noncentred").form == "noncentred"


def test_bad_arguments_name_the_argument():
    with pytest.raises(ValueError, match="`form`"):
        demos.apiaries("centered")
    for bad in (1, 2.5, True, "48"):
        with pytest.raises(ValueError, match="`n_groups`"):
            demos.apiaries(n_groups=bad)


# ------------------------------------------------------------ log-density and gradient
def reference_log_density(t, x):
    """The joint log-density on the sampler's scale, from scipy.stats logpdfs."""
    mu, s, rest = x[0], x[1], x[2:]
    tau = np.exp(s)
    effects = rest if t.form == "centred" else mu + tau * rest
    lp = stats.norm.logpdf(t.gain, effects[t.group], t.hive_sd).sum()   # every hive
    if t.form == "centred":
        lp += stats.norm.logpdf(rest, mu, tau).sum()
    else:
        lp += stats.norm.logpdf(rest).sum()
    lp += stats.norm.logpdf(mu, *t.prior_mu)
    lp += stats.halfnorm.logpdf(tau, scale=t.prior_tau_scale)
    return lp + s  # log-Jacobian of tau = exp(log_tau)


@pytest.mark.parametrize("form", ["centred", "noncentred"])
def test_log_density_is_the_sum_of_scipy_logpdfs(form):
    t = demos.apiaries(form)
    points = bulk_points(form, np.random.default_rng(5), 4)
    ours = t.log_density(points)
    for x, value in zip(points, ours):
        # reference: scipy.stats.norm / halfnorm logpdf, summed over hives, apiaries and priors
        assert value == pytest.approx(reference_log_density(t, x), rel=1e-12, abs=1e-9)


@pytest.mark.parametrize("form", ["centred", "noncentred"])
def test_gradient_matches_finite_differences(form):
    t = demos.apiaries(form)
    points = bulk_points(form, np.random.default_rng(11), 4)
    check = t.check_gradient(points)
    assert check.ok, repr(check)
    # independent reference: scipy's forward differences (step sqrt(machine eps))
    for x in points[:2]:
        ref = scipy.optimize.approx_fprime(x, lambda p: float(t.log_density(p)))
        np.testing.assert_allclose(t.grad(x), ref, rtol=2e-5, atol=2e-4)


def test_the_forms_differ_exactly_by_the_jacobian(centred, noncentred):
    # apiary = mu + tau z has Jacobian tau^J, so lp_nc(mu, s, z) = lp_c(mu, s, mu + tau z) + J s
    x = bulk_points("noncentred", np.random.default_rng(2), 5)
    mu, s, z = x[:, 0], x[:, 1], x[:, 2:]
    y = np.column_stack([mu, s, mu[:, None] + np.exp(s)[:, None] * z])
    np.testing.assert_allclose(noncentred.log_density(x), centred.log_density(y) + J * s,
                               rtol=1e-12)


# ---------------------------------------------------- the same posterior of (mu, tau)
def integrate_out_effects(t, mu, s):
    """log of the integral of exp(lp) over the J group coordinates at fixed (mu, log_tau).

    Given (mu, log_tau) both forms are quadratic in the group coordinates with a diagonal
    Hessian, so two gradient evaluations give it and the Laplace formula is exact.
    """
    base = np.column_stack([mu, s, np.zeros((len(mu), J))])
    g0 = t.grad(base)[:, 2:]
    g1 = t.grad(base + np.r_[0.0, 0.0, np.ones(J)])[:, 2:]
    h = g0 - g1                                   # minus the second derivative, per coordinate
    mode = base.copy()
    mode[:, 2:] = g0 / h
    return t.log_density(mode) + J * HALF_LOG_2PI - 0.5 * np.sum(np.log(h), axis=1)


def scipy_marginal(t, mu, s):
    """log p(data, mu, log_tau): each apiary's hives jointly normal (scipy multivariate_normal)."""
    out = []
    for m, ls in zip(mu, s):
        tau = np.exp(ls)
        lp = 0.0
        for j in range(J):
            y = t.gain[t.group == j]
            cov = t.hive_sd**2 * np.eye(y.size) + tau**2 * np.ones((y.size, y.size))
            lp += stats.multivariate_normal.logpdf(y, np.full(y.size, m), cov)
        lp += stats.norm.logpdf(m, *t.prior_mu) + stats.halfnorm.logpdf(tau, scale=t.prior_tau_scale)
        out.append(lp + ls)
    return np.array(out)


def test_both_forms_give_the_same_posterior_of_mu_and_log_tau(centred, noncentred):
    rng = np.random.default_rng(8)
    mu, s = rng.normal(3.0, 0.4, 6), rng.uniform(-5.0, 0.5, 6)
    c = integrate_out_effects(centred, mu, s)
    nc = integrate_out_effects(noncentred, mu, s)
    np.testing.assert_allclose(c, nc, rtol=1e-10)
    np.testing.assert_allclose(c, scipy_marginal(centred, mu, s), rtol=1e-10)


def quadrature_moments(t):
    """Posterior mean of mu, log_tau and tau by quadrature over (mu, log_tau)."""
    ybar = np.bincount(t.group, weights=t.gain) / t.hives
    se = t.hive_sd / np.sqrt(t.hives)
    s = np.linspace(-9.0, 2.0, 450)
    mu = np.linspace(1.5, 4.5, 301)
    tau = np.exp(s)
    sd = np.sqrt(tau[:, None] ** 2 + se**2)                           # (s, J)
    # apiary means ybar_j ~ N(mu, sqrt(tau^2 + se_j^2)): the same marginal as scipy_marginal
    # up to a constant (checked below at two points)
    lp = stats.norm.logpdf(ybar[None, None, :], mu[None, :, None], sd[:, None, :]).sum(axis=2)
    lp += stats.norm.logpdf(mu, *t.prior_mu)[None, :]
    lp += (stats.halfnorm.logpdf(tau, scale=t.prior_tau_scale) + s)[:, None]
    pts = [(50, 150), (350, 100)]
    ref = scipy_marginal(t, mu[[j for _, j in pts]], s[[i for i, _ in pts]])
    diff = [lp[i, j] - r for (i, j), r in zip(pts, ref)]
    assert diff[0] == pytest.approx(diff[1], abs=1e-8)
    w = np.exp(lp - special.logsumexp(lp))
    return {"mu": np.sum(w.sum(axis=0) * mu), "log_tau": np.sum(w.sum(axis=1) * s),
            "tau": np.sum(w.sum(axis=1) * tau)}


@pytest.fixture(scope="module")
def noncentred_run(noncentred):
    return pg.sample(noncentred, pg.HMC(0.1, 20), n_draws=1000, n_chains=4, seed=2)


@pytest.fixture(scope="module")
def centred_run(centred):
    # the same settings as the non-centred run; seed 0 gives 26 divergences (of 2000)
    return pg.sample(centred, pg.HMC(0.1, 20), n_draws=500, n_chains=4, seed=0)


def test_noncentred_draws_match_the_quadrature_posterior(noncentred, noncentred_run):
    run = noncentred_run
    assert run.n_divergent == 0
    ref = quadrature_moments(noncentred)
    x = np.stack([run.draws[..., 0], run.draws[..., 1], np.exp(run.draws[..., 1])], axis=-1)
    se = pg.mcse(x, kind="mean")
    for k, name in enumerate(("mu", "log_tau", "tau")):
        assert abs(x[..., k].mean() - ref[name]) < 4 * se[k], (name, x[..., k].mean(), ref[name])


def test_centred_form_diverges_where_noncentred_does_not(centred_run, noncentred_run):
    # Found with pg.HMC(0.1, 20) and the automatic warm-up, 4 chains: the centred form
    # diverged on seeds 0..5 (1000 draws: 2, 41, 36, 227, 24, 7), the non-centred on none.
    assert centred_run.n_divergent >= 5
    assert noncentred_run.n_divergent == 0
    # the centred draws still agree with the non-centred ones on mu (the funnel hides in tau)
    a, b = centred_run.draws[..., 0], noncentred_run.draws[..., 0]
    se = np.hypot(pg.mcse(a), pg.mcse(b))
    assert abs(a.mean() - b.mean()) < 4 * se


def test_divergence_ranking_puts_the_scale_first_on_the_centred_run(centred_run):
    r = pg.divergence_ranking(centred_run)
    assert r.n_divergent == centred_run.n_divergent
    assert r.coordinates[0] == "log_tau"
    assert r.shift[1] < -0.5                     # divergences where the apiaries' spread is small
    first, second = r.top_pair
    assert first == 1 and centred_run.names[second].startswith("apiary[")
