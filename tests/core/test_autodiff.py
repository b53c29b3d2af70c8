"""Gradients from JAX (``Target.from_jax``) and a Target built from ``value_and_grad`` alone.

JAX is an optional extra. These tests skip, with the reason, when it is missing, except
under CI (``CI=true``), where the test extra installs it and a missing JAX is a failure.
"""

import sys
import threading

import numpy as np
import pytest
import scipy.stats

import phaseglass as pg
from phaseglass.core.diagnostics import ess, mcse


def _jax():
    from _optional import optional_module  # tests/ is on pytest's pythonpath (pyproject.toml)

    return optional_module("jax", "jax")


@pytest.fixture
def jax():
    return _jax()


@pytest.fixture
def jnp(jax):
    import jax.numpy as jnp

    return jnp


def thin_by_ess(x):
    """Every k-th draw of each chain, k = ceil(total draws / min(bulk ESS, tail ESS)); x: (chains, draws)."""
    k = int(np.ceil(x.size / min(ess(x, method="bulk"), ess(x, method="tail"))))
    return x[:, ::k].ravel()


# ------------------------------------------------------------------ models
# A correlated Gaussian: log p = -x' P x / 2 (P the precision), closed-form gradient -P x.
COV = np.array([[1.0, 0.8, 0.3], [0.8, 2.0, -0.5], [0.3, -0.5, 1.5]])
PREC = np.linalg.inv(COV)


def gaussian_jax(jnp):
    return lambda x: -0.5 * x @ PREC @ x


# A logistic regression on invented data (seeded), N(0, PRIOR_SD^2) priors on the
# coefficients. Closed-form gradient: X'(y - sigmoid(X b)) - b / PRIOR_SD^2.
_rng = np.random.default_rng(20261203)
X = np.column_stack([np.ones(60), _rng.standard_normal((60, 2))])
Y = (_rng.random(60) < 1.0 / (1.0 + np.exp(-(X @ np.array([-0.5, 1.0, -0.7]))))).astype(float)
PRIOR_SD = 2.0


def logistic_jax(jnp):
    def log_density(b):
        eta = X @ b
        return jnp.sum(Y * eta - jnp.logaddexp(0.0, eta)) - 0.5 * jnp.sum(b * b) / PRIOR_SD**2

    return log_density


def logistic_closed_form_grad(b):
    """Closed form, rows of b: X'(y - sigmoid(X b)) - b / sd^2."""
    b = np.atleast_2d(b)
    return (Y - 1.0 / (1.0 + np.exp(-(b @ X.T)))) @ X - b / PRIOR_SD**2


def logistic_numpy_target():
    """The same model, vectorized NumPy with its hand-written gradient."""
    def value_and_grad(b):
        eta = b @ X.T
        lp = np.sum(Y * eta - np.logaddexp(0.0, eta), axis=-1) - 0.5 * np.sum(b * b, axis=-1) / PRIOR_SD**2
        return lp, (Y - 1.0 / (1.0 + np.exp(-eta))) @ X - b / PRIOR_SD**2

    return pg.Target(value_and_grad=value_and_grad, dim=3, vectorized=True)


def assert_close(actual, expected, rtol=1e-12):
    """Relative agreement, measured against the largest entry (entries near 0 are not relative)."""
    scale = np.max(np.abs(expected))
    np.testing.assert_allclose(actual, expected, rtol=rtol, atol=rtol * scale)


# --------------------------------------------------------- closed-form gradients


def test_gaussian_value_and_gradient_match_closed_forms(jnp):
    t = pg.Target.from_jax(gaussian_jax(jnp), dim=3)
    x = np.random.default_rng(1).standard_normal((5, 3)) * 2.0
    v, g = t.value_and_grad(x)
    assert v.dtype == np.float64 and g.dtype == np.float64
    # closed form: grad = -Sigma^{-1} x
    assert_close(g, -x @ PREC)
    # closed form, and scipy.stats.multivariate_normal up to its normalising constant
    assert_close(v, -0.5 * np.einsum("ni,ij,nj->n", x, PREC, x))
    const = scipy.stats.multivariate_normal(np.zeros(3), COV).logpdf(np.zeros(3))
    np.testing.assert_allclose(v + const, scipy.stats.multivariate_normal(np.zeros(3), COV).logpdf(x),
                               rtol=1e-12)
    # one point in, one value and one (dim,) gradient out, as for any Target
    v1, g1 = t.value_and_grad(x[0])
    assert isinstance(v1, float) and g1.shape == (3,)
    assert_close(g1, -PREC @ x[0])


def test_logistic_regression_gradient_matches_closed_form(jnp):
    t = pg.Target.from_jax(logistic_jax(jnp), dim=3, names=["intercept", "dose", "age"])
    b = np.random.default_rng(2).normal(0.0, 1.5, (4, 3))
    # closed form: X'(y - sigmoid(X b)) - b / sd^2
    assert_close(t.grad(b), logistic_closed_form_grad(b))
    assert t.names == ("intercept", "dose", "age")
    check = t.check_gradient(b)
    assert check.ok and check.max_rel_error < 1e-6, check


def test_computation_is_float64_even_where_float32_would_round(jnp):
    # 1e8 + 1 is not a float32 number (float32 spacing at 1e8 is 8): exact in float64
    t = pg.Target.from_jax(lambda x: -0.5 * jnp.sum((x - 1e8) ** 2), dim=1)
    v, g = t.value_and_grad(np.array([1e8 + 1.0]))
    assert v == -0.5 and g.tolist() == [-1.0]


def test_users_jax_x64_setting_is_unchanged(jax, jnp):
    assert jax.config.jax_enable_x64 is False  # JAX's default, as the user left it
    t = pg.Target.from_jax(gaussian_jax(jnp), dim=3)
    t.value_and_grad(np.ones((4, 3)))
    t.log_density(np.ones(3))
    assert jax.config.jax_enable_x64 is False
    assert jnp.zeros(2).dtype == jnp.float32  # the user's own arrays stay 32-bit
    # a user who turned 64-bit on keeps it on
    jax.config.update("jax_enable_x64", True)
    try:
        t2 = pg.Target.from_jax(gaussian_jax(jnp), dim=3)
        t2.value_and_grad(np.ones((2, 3)))
        assert jax.config.jax_enable_x64 is True
    finally:
        jax.config.update("jax_enable_x64", False)


def test_float64_also_from_another_thread(jnp):
    # views compute in background threads; JAX's 64-bit switch is per thread
    t = pg.Target.from_jax(lambda x: -0.5 * jnp.sum((x - 1e8) ** 2), dim=1)
    out = {}
    worker = threading.Thread(target=lambda: out.setdefault("vg", t.value_and_grad(np.array([1e8 + 1.0]))))
    worker.start()
    worker.join()
    v, g = out["vg"]
    assert v == -0.5 and g.tolist() == [-1.0]


def test_counts_are_points_as_for_any_target(jnp):
    t = pg.Target.from_jax(gaussian_jax(jnp), dim=3)
    x = np.ones((5, 3))
    t.log_density(x)
    assert (t.n_density, t.n_grad) == (5, 0)
    t.value_and_grad(x[:4])
    assert (t.n_density, t.n_grad) == (9, 4)
    t.grad(x[0])
    assert (t.n_density, t.n_grad) == (10, 5)
    t.check_gradient(x[:2])  # a check is not sampling work
    assert (t.n_density, t.n_grad) == (10, 5)
    t.reset_counts()
    run = pg.sample(t, pg.HMC(0.4, 5), n_draws=20, n_chains=2, warmup=0, seed=1)
    assert t.n_grad == run.total_grad + 2  # plus the gradient at each chain's start


# ------------------------------------------------------------------- bounds


def test_gamma_with_lower_bound_gradient_is_closed_form_on_log_scale(jnp):
    # Gamma(shape a, rate b): log p(x) = (a - 1) log x - b x. On z = log x, with the
    # Jacobian x: log p(z) = a z - b e^z, gradient a - b e^z (closed form).
    a, b = 3.0, 2.0
    t = pg.Target.from_jax(lambda x: (a - 1.0) * jnp.log(x[0]) - b * x[0], bounds=[(0, None)],
                           names=["wait"])
    assert t.dim == 1 and t.bounded
    z = np.linspace(-2.0, 2.0, 7)[:, None]
    v, g = t.value_and_grad(z)
    assert_close(v, a * z[:, 0] - b * np.exp(z[:, 0]))
    assert_close(g[:, 0], a - b * np.exp(z[:, 0]))


def test_beta_with_two_sided_bound_gradient_is_closed_form_on_logit_scale(jnp):
    # Beta(al, be): on z = logit x, with the Jacobian x (1 - x):
    # log p(z) = al log x + be log(1 - x), gradient al - (al + be) x (closed form).
    al, be = 2.0, 5.0
    t = pg.Target.from_jax(lambda x: (al - 1.0) * jnp.log(x[0]) + (be - 1.0) * jnp.log1p(-x[0]),
                           bounds=[(0, 1)])
    z = np.linspace(-3.0, 3.0, 7)[:, None]
    x = 1.0 / (1.0 + np.exp(-z[:, 0]))
    v, g = t.value_and_grad(z)
    assert_close(v, al * np.log(x) + be * np.log1p(-x))
    assert_close(g[:, 0], al - (al + be) * x)


@pytest.mark.slow
def test_bounded_jax_model_samples_the_right_distribution(jnp):
    # Gamma(shape 3, rate 2) against scipy.stats.gamma: KS on ESS-thinned draws and the
    # mean within 4 MCSE (seeds 0-9 swept once: smallest p 0.11, largest |z| 1.6)
    t = pg.Target.from_jax(lambda x: 2.0 * jnp.log(x[0]) - 2.0 * x[0], bounds=[(0, None)])
    run = pg.sample(t, pg.HMC(0.5, 5), n_draws=1000, warmup=300, n_chains=4, seed=5)
    x = run.draws[..., 0]
    reference = scipy.stats.gamma(3.0, scale=0.5)
    assert np.all(x > 0)
    assert scipy.stats.kstest(thin_by_ess(x), reference.cdf).pvalue > 1e-3
    assert abs(x.mean() - reference.mean()) < 4 * mcse(x, kind="mean")


# ------------------------------------------------------ a full run, JAX vs NumPy


@pytest.mark.slow
def test_sampling_the_jax_model_matches_its_numpy_version(jnp):
    jax_target = pg.Target.from_jax(logistic_jax(jnp), dim=3)
    np_target = logistic_numpy_target()
    kernel = pg.HMC(0.2, 8)
    start = np.zeros(3)
    # Same seed and a fixed step size: the gradients agree to rounding, so the chains do
    # too (seen: 2e-15 after 300 draws). Not through warm-up: its early, nearly unstable
    # step sizes amplify a rounding difference (1e-5 after 50 warm-up transitions).
    a = pg.sample(jax_target, kernel, start, n_draws=200, warmup=0, n_chains=4, seed=3)
    b = pg.sample(np_target, kernel, start, n_draws=200, warmup=0, n_chains=4, seed=3)
    np.testing.assert_allclose(a.draws, b.draws, rtol=0, atol=1e-10)
    assert 0.5 < a.accepted.mean() < 1  # the comparison covers accepts and rejects
    # Independent seeds: the two runs agree in distribution. Means within 4 combined
    # MCSE, and two-sample KS (scipy.stats.ks_2samp) on ESS-thinned draws of every
    # coordinate (ten seed pairs (11, 12), (13, 14), ... swept once: smallest p 0.06,
    # largest |z| 1.7).
    a = pg.sample(jax_target, kernel, start, n_draws=1000, warmup=300, n_chains=4, seed=11)
    b = pg.sample(np_target, kernel, start, n_draws=1000, warmup=300, n_chains=4, seed=12)
    for i in range(3):
        xa, xb = a.draws[..., i], b.draws[..., i]
        se = np.hypot(mcse(xa), mcse(xb))
        assert abs(xa.mean() - xb.mean()) < 4 * se, (i, xa.mean(), xb.mean(), se)
        p = scipy.stats.ks_2samp(thin_by_ess(xa), thin_by_ess(xb)).pvalue
        assert p > 1e-3, (i, p)


# ------------------------------------------------------------------- errors


def test_wrong_output_shape_names_log_density(jnp):
    with pytest.raises(ValueError, match=r"`log_density` must return one real number .* got shape \(3,\)"):
        pg.Target.from_jax(lambda x: -0.5 * x * x, dim=3)  # elementwise: forgot the sum
    with pytest.raises(ValueError, match=r"`log_density` must return one real number .* got a tuple of 2"):
        pg.Target.from_jax(lambda x: (jnp.sum(x), x), dim=3)


def test_untraceable_function_names_log_density(jnp):
    def with_python_if(x):
        return -x[0] if x[0] > 0 else x[0]

    with pytest.raises(ValueError, match=r"`log_density` failed when JAX traced it .*jnp.where"):
        pg.Target.from_jax(with_python_if, dim=2)
    with pytest.raises(ValueError, match=r"`log_density` failed .*one point of shape \(2,\)"):
        pg.Target.from_jax(lambda x: x @ jnp.ones(5), dim=2)  # wrong dim


def test_from_jax_argument_errors(jnp):
    with pytest.raises(TypeError, match="`log_density` must be callable"):
        pg.Target.from_jax("x ** 2", dim=2)
    with pytest.raises(ValueError, match="`dim` could not be inferred"):
        pg.Target.from_jax(lambda x: jnp.sum(x))
    with pytest.raises(ValueError, match="`names` must have 2 entries"):
        pg.Target.from_jax(lambda x: jnp.sum(x), dim=2, names=["a"])
    t = pg.Target.from_jax(lambda x: -jnp.sum(x * x), names=["a", "b"])  # dim from names
    assert t.dim == 2 and repr(t) == "Target(dim=2, gradient from JAX, vectorized)"


def test_missing_jax_is_a_clear_import_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "jax", None)  # import jax now raises ImportError
    with pytest.raises(ImportError, match=r"pip install \"phaseglass\[jax\]\""):
        pg.Target.from_jax(lambda x: x[0], dim=1)


# ----------------------------------------------- value_and_grad alone (no JAX)


def quad_vg(x):
    return -0.5 * np.sum(x * x, axis=-1), -x


@pytest.mark.parametrize("vectorized", [False, True])
def test_value_and_grad_alone_builds_a_target(vectorized):
    calls = []

    def vg(x):
        calls.append(np.shape(x))
        return quad_vg(x)

    t = pg.Target(value_and_grad=vg, dim=3, vectorized=vectorized)
    assert t.has_gradient
    x = np.array([[1.0, 2.0, 2.0], [0.0, 1.0, 0.0], [3.0, 0.0, 4.0]])
    # the log-density is the value part of the joint function
    np.testing.assert_array_equal(t.log_density(x), [-4.5, -0.5, -12.5])
    assert t.log_density(x[0]) == -4.5
    np.testing.assert_array_equal(t.grad(x), -x)
    # every evaluation went through the joint function, which computed both each time
    c = 3 if vectorized else 0  # a vectorized function's first batch is checked against rows alone
    assert (t.n_density, t.n_grad) == (3 + 1 + 3 + c, 3 + 1 + 3 + c)
    assert sum(int(np.prod(s[:-1])) if len(s) > 1 else 1 for s in calls) == t.n_grad
    assert t.check_gradient(x).ok


def test_value_and_grad_alone_samples_and_takes_bounds():
    # Gamma(shape 3, rate 1) from its joint function alone, with a lower bound:
    # mean 3 within 4 MCSE (scipy.stats.gamma(3).mean())
    t = pg.Target(value_and_grad=lambda x: (2.0 * np.log(x[0]) - x[0], np.array([2.0 / x[0] - 1.0])),
                  bounds=[(0, None)])
    assert t.dim == 1
    run = pg.sample(t, pg.HMC(0.5, 5), n_draws=500, warmup=200, n_chains=4, seed=2)
    x = run.draws[..., 0]
    assert np.all(x > 0)
    assert abs(x.mean() - scipy.stats.gamma(3.0).mean()) < 4 * mcse(x)


def test_neither_log_density_nor_value_and_grad_is_refused():
    with pytest.raises(TypeError, match="`log_density` is required .*`value_and_grad`"):
        pg.Target(dim=2)
    with pytest.raises(TypeError, match="`log_density` is required"):
        pg.Target(grad=lambda x: -x, dim=2)  # a gradient alone has no value to sample with


def test_value_and_grad_alone_wrong_value_shape_names_it():
    t = pg.Target(value_and_grad=lambda x: (x, -x), dim=2)
    with pytest.raises(ValueError, match="`value_and_grad` must return a scalar log-density"):
        t.log_density(np.ones(2))
