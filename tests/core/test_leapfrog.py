"""Tests for phaseglass.core.leapfrog and phaseglass.core.metric.

Mathematical properties of the leapfrog map (exact on a 1-D Gaussian,
reversible, volume preserving, second order) parametrised over metrics and
targets, divergences recorded as data, and every documented error.

Reference for the leapfrog facts: R. M. Neal (2011), "MCMC using Hamiltonian
dynamics", Handbook of Markov Chain Monte Carlo, ch. 5 (secs. 2.3 and 3.2;
section numbers recalled from memory).
"""

import numpy as np
import pytest

import phaseglass as pg
from phaseglass.core.leapfrog import DEFAULT_MAX_ENERGY_ERROR, leapfrog_step

# ----------------------------------------------------------------------------- helpers


def gaussian_1d(sigma):
    """N(0, sigma^2) as a Target: log p = -q^2 / (2 sigma^2), grad = -q / sigma^2."""
    return pg.Target(lambda q: -0.5 * np.sum(q * q, axis=-1) / sigma**2,
                     lambda q: -q / sigma**2, dim=1, vectorized=True)


def leapfrog_matrix(eps, sigma):
    """One leapfrog step on N(0, sigma^2) with unit mass, as a linear map of (q, p).

    Derivation (kick-drift-kick, Neal 2011 eqs. 2.28-2.30), with w = 1 / sigma^2:
        p_half = p - (eps / 2) w q
        q'     = q + eps p_half           = (1 - eps^2 w / 2) q + eps p
        p'     = p_half - (eps / 2) w q'  = -eps w (1 - eps^2 w / 4) q + (1 - eps^2 w / 2) p
    so M = [[1 - eps^2/(2 sigma^2), eps], [-eps/sigma^2 (1 - eps^2/(4 sigma^2)), 1 - eps^2/(2 sigma^2)]].
    det M = (1 - a)^2 + eps^2 w (1 - eps^2 w / 4) = 1 with a = eps^2 w / 2 (symplectic), and
    trace M = 2 - eps^2 / sigma^2: the eigenvalues lie on the unit circle (bounded orbits) iff
    |trace| < 2, i.e. eps < 2 sigma; above it one eigenvalue has modulus > 1 and the energy
    grows geometrically (Neal 2011, sec. 3.2, "stability" of leapfrog).
    """
    w = 1.0 / sigma**2
    a = 1.0 - 0.5 * eps**2 * w
    return np.array([[a, eps], [-eps * w * (1.0 - 0.25 * eps**2 * w), a]])


def closed_form_energy_error(q0, p0, eps, sigma, n_steps):
    """H(M^k z0) - H(z0) for k = 0..n_steps, with H = q^2 / (2 sigma^2) + p^2 / 2."""
    m = leapfrog_matrix(eps, sigma)
    z = np.array([q0, p0], dtype=float)
    out = []
    h0 = 0.5 * z[0] ** 2 / sigma**2 + 0.5 * z[1] ** 2
    with np.errstate(over="ignore", invalid="ignore"):  # divergent cases overflow to inf
        for _ in range(n_steps + 1):
            out.append(0.5 * z[0] ** 2 / sigma**2 + 0.5 * z[1] ** 2 - h0)
            z = m @ z
    return np.array(out)


def spd(dim, seed):
    a = np.random.default_rng(seed).standard_normal((dim, dim))
    return a @ a.T / dim + 0.5 * np.eye(dim)


def make_metric(kind, dim):
    if kind == "identity":
        return pg.Metric()
    if kind == "diagonal":
        return pg.Metric(np.linspace(0.5, 1.5, dim))
    return pg.Metric(spd(dim, seed=dim))


# (target factory, start position, step size, n_steps): step sizes well inside stability.
TARGETS = {
    # scales 1, 2, 0.5 and correlation 0.9 between neighbours
    "correlated_gaussian": (lambda: pg.demos.correlated_gaussian(3, 0.9, [1.0, 2.0, 0.5]),
                            np.array([0.4, -1.0, 0.2]), 0.05, 40),
    # stiff curved ridge: curvature up to ~200 near |spray| ~ 1, so eps * omega ~ 0.3 at eps=0.02
    "glaze_ridge": (pg.demos.glaze_ridge, np.array([0.1, 1.0]), 0.02, 40),
}
METRICS = ["identity", "diagonal", "dense"]


# ------------------------------------------------------------------- 1-D Gaussian, exact


def test_leapfrog_matrix_is_symplectic_with_the_documented_trace():
    for eps, sigma in [(0.1, 1.0), (0.7, 1.5), (3.1, 1.5)]:
        m = leapfrog_matrix(eps, sigma)
        assert np.linalg.det(m) == pytest.approx(1.0, abs=1e-12)
        assert np.trace(m) == pytest.approx(2.0 - eps**2 / sigma**2, abs=1e-12)


@pytest.mark.parametrize("eps", [0.1, 0.7, 1.4, 2.9])
def test_one_step_is_the_closed_form_linear_map(eps):
    sigma = 1.5
    t = gaussian_1d(sigma)
    rng = np.random.default_rng(5)
    for q0, p0 in rng.standard_normal((4, 2)):
        tr = pg.leapfrog(t, [q0], [p0], eps, 1)
        q1, p1 = leapfrog_matrix(eps, sigma) @ [q0, p0]
        assert tr.positions[1, 0] == pytest.approx(q1, rel=1e-13, abs=1e-14)
        assert tr.momenta[1, 0] == pytest.approx(p1, rel=1e-13, abs=1e-14)


@pytest.mark.parametrize("eps", [0.1, 0.7, 2.9])
def test_energy_error_equals_the_closed_form_linear_map(eps):
    sigma, n = 1.5, 60
    t = gaussian_1d(sigma)
    tr = pg.leapfrog(t, [0.8], [-0.5], eps, n)
    expected = closed_form_energy_error(0.8, -0.5, eps, sigma, n)
    np.testing.assert_allclose(tr.energy_error, expected, rtol=1e-9, atol=1e-12)
    assert tr.energy_error.shape == tr.hamiltonian.shape == (n + 1,)
    np.testing.assert_allclose(tr.potential, 0.5 * tr.positions[:, 0] ** 2 / sigma**2, rtol=1e-14)
    np.testing.assert_allclose(tr.kinetic, 0.5 * tr.momenta[:, 0] ** 2, rtol=1e-14)


@pytest.mark.parametrize("ratio", [0.5, 1.5, 1.95])
def test_energy_error_stays_bounded_below_two_sigma(ratio):
    sigma, n = 1.5, 5000
    eps = ratio * sigma
    t = gaussian_1d(sigma)
    q0, p0 = 0.8, -0.5
    tr = pg.leapfrog(t, [q0], [p0], eps, n)
    assert not tr.divergent and tr.divergence_step is None
    q, p = tr.positions[:, 0], tr.momenta[:, 0]
    # The linear map conserves the quadratic form (the "shadow" Hamiltonian of leapfrog
    # on a harmonic oscillator, common practice; check: it is M^T S M = S for
    # S = diag(w (1 - eps^2 w / 4), 1)):  H~ = p^2 / 2 + (w / 2) (1 - eps^2 w / 4) q^2.
    w = 1.0 / sigma**2
    c = 1.0 - 0.25 * eps**2 * w
    shadow = 0.5 * p**2 + 0.5 * w * c * q**2
    np.testing.assert_allclose(shadow, shadow[0], rtol=1e-9)
    # H - H~ = (eps^2 w^2 / 8) q^2 and q^2 <= 2 H~ / (w c) on the invariant ellipse, so the
    # energy error is bounded for all time by (eps^2 w^2 / 8) * 2 H~ / (w c).
    bound = eps**2 * w**2 / 8.0 * 2.0 * shadow[0] / (w * c)
    assert np.max(np.abs(tr.energy_error)) <= bound * (1 + 1e-9)
    # ...and the bound is not vacuous: the orbit gets close to it.
    assert np.max(np.abs(tr.energy_error)) >= 0.5 * bound


@pytest.mark.parametrize("ratio", [2.05, 2.5, 4.0])
def test_step_size_above_two_sigma_is_flagged_divergent_at_the_right_step(ratio):
    sigma, n = 1.5, 200
    eps = ratio * sigma
    t = gaussian_1d(sigma)
    tr = pg.leapfrog(t, [0.8], [-0.5], eps, n)
    expected = closed_form_energy_error(0.8, -0.5, eps, sigma, n)
    first = int(np.argmax(np.abs(expected) > DEFAULT_MAX_ENERGY_ERROR))
    assert first > 0
    assert tr.divergent and tr.divergence_step == first
    # row k holds the values that triggered it; every row after is NaN
    np.testing.assert_allclose(tr.energy_error[: first + 1], expected[: first + 1], rtol=1e-9)
    assert np.all(np.isfinite(tr.positions[: first + 1]))
    assert np.all(np.isnan(tr.positions[first + 1:]))
    assert np.all(np.isnan(tr.momenta[first + 1:]))
    assert np.all(np.isnan(tr.energy_error[first + 1:]))
    assert f"divergent at step {first}" in repr(tr)


def test_energy_error_is_second_order_in_the_step_size():
    # Leapfrog has global error O(eps^2), so over a fixed integration time the energy
    # error shrinks by 4 when eps halves (Neal 2011, sec. 2.3; common practice).
    t = pg.demos.glaze_ridge()
    rng = np.random.default_rng(6)
    p0 = rng.standard_normal(2)
    errs = []
    for eps in (0.01, 0.005, 0.0025):
        tr = pg.leapfrog(t, [0.1, 1.0], p0, eps, int(round(0.4 / eps)))
        errs.append(np.max(np.abs(tr.energy_error)))
    ratios = np.array(errs[:-1]) / np.array(errs[1:])
    np.testing.assert_allclose(ratios, 4.0, rtol=0.05)


# ------------------------------------------------------- reversibility and volume


@pytest.mark.parametrize("metric_kind", METRICS)
@pytest.mark.parametrize("target_name", sorted(TARGETS))
def test_leapfrog_is_reversible(target_name, metric_kind):
    make, q0, eps, n = TARGETS[target_name]
    t = make()
    metric = make_metric(metric_kind, t.dim)
    p0 = metric.momentum_from_normal(np.random.default_rng(7).standard_normal(t.dim))
    fwd = pg.leapfrog(t, q0, p0, eps, n, metric=metric)
    assert not fwd.divergent
    back = pg.leapfrog(t, fwd.positions[-1], -fwd.momenta[-1], eps, n, metric=metric)
    assert not back.divergent
    # Neal 2011 sec. 2.3: negate the momentum, apply the same map, recover the start.
    np.testing.assert_allclose(back.positions[-1], q0, rtol=0, atol=1e-10)
    np.testing.assert_allclose(back.momenta[-1], -p0, rtol=0, atol=1e-10)
    # ...through the same states in reverse order
    np.testing.assert_allclose(back.positions[::-1], fwd.positions, rtol=0, atol=1e-10)


@pytest.mark.parametrize("metric_kind", METRICS)
@pytest.mark.parametrize("target_name", sorted(TARGETS))
def test_leapfrog_preserves_volume(target_name, metric_kind):
    make, q0, eps, n = TARGETS[target_name]
    t = make()
    d = t.dim
    metric = make_metric(metric_kind, d)
    p0 = metric.momentum_from_normal(np.random.default_rng(8).standard_normal(d))
    z0 = np.concatenate([q0, p0])
    # Jacobian of the n-step map (q, p) -> (q_n, p_n) by central differences, all 4d
    # perturbed starts integrated as one batch.
    h = 1e-5
    starts = np.concatenate([z0 + h * np.eye(2 * d), z0 - h * np.eye(2 * d)])
    tr = pg.leapfrog(t, starts[:, :d], starts[:, d:], eps, n, metric=metric)
    assert not np.any(tr.divergent)
    ends = np.concatenate([tr.positions[:, -1], tr.momenta[:, -1]], axis=1)
    jac = (ends[: 2 * d] - ends[2 * d:]).T / (2 * h)
    assert not np.allclose(jac, np.eye(2 * d), atol=1e-2)  # the map does move things
    # Neal 2011 sec. 2.3: leapfrog is symplectic, so its Jacobian determinant is 1.
    # Central differences with h = 1e-5 are accurate to ~h^2 times third derivatives.
    assert np.linalg.det(jac) == pytest.approx(1.0, abs=1e-6)


# ----------------------------------------------------- batches and divergences as data


def test_batch_leapfrog_equals_per_chain_leapfrog():
    sigma = 1.0
    t = gaussian_1d(sigma)
    rng = np.random.default_rng(9)
    q0 = rng.standard_normal((5, 1))
    p0 = rng.standard_normal((5, 1))
    eps = np.array([0.5, 1.9, 2.5, 0.1, 3.0])  # chains 2 and 4 are above 2 sigma
    n = 40
    batch = pg.leapfrog(t, q0, p0, eps, n)
    assert batch.positions.shape == (5, n + 1, 1)
    assert batch.energy_error.shape == (5, n + 1)
    np.testing.assert_array_equal(batch.divergent, [False, False, True, False, True])
    for k in range(5):
        one = pg.leapfrog(t, q0[k], p0[k], eps[k], n)
        for field in ("positions", "momenta", "potential", "kinetic", "hamiltonian", "energy_error"):
            np.testing.assert_allclose(getattr(batch, field)[k], getattr(one, field),
                                       rtol=1e-12, atol=1e-14, err_msg=field)
        assert bool(batch.divergent[k]) == one.divergent
        expected = closed_form_energy_error(q0[k, 0], p0[k, 0], eps[k], sigma, n)
        if one.divergent:
            first = int(np.argmax(np.abs(expected) > DEFAULT_MAX_ENERGY_ERROR))
            assert one.divergence_step == first == batch.divergence_step[k]
            assert np.all(np.isnan(batch.positions[k, first + 1:]))
            assert np.all(np.isfinite(batch.positions[k, : first + 1]))
        else:
            assert one.divergence_step is None and batch.divergence_step[k] == -1
            assert np.all(np.isfinite(batch.positions[k]))
    assert "2 divergent" in repr(batch)


def test_leapfrog_step_is_kick_drift_kick():
    rng = np.random.default_rng(10)
    q, p = rng.standard_normal((2, 3, 2))
    inv_mass = np.array([0.5, 2.0])

    def vg(x):
        return -0.5 * np.sum(x**2, axis=1), -x

    q1, p1, lp1, g1 = leapfrog_step(q, p, -q, 0.1, lambda m: m * inv_mass, vg)
    p_half = p + 0.05 * (-q)
    np.testing.assert_allclose(q1, q + 0.1 * inv_mass * p_half, rtol=1e-15)
    np.testing.assert_allclose(p1, p_half + 0.05 * (-q1), rtol=1e-15)
    np.testing.assert_allclose(g1, -q1)


@pytest.mark.parametrize("bad_value", [-np.inf, np.nan])
def test_non_finite_log_density_mid_trajectory_is_a_divergence(bad_value):
    # A wall at q = 1: log-density is bad_value beyond it, the gradient stays finite.
    def logp(q):
        return np.where(q[..., 0] > 1.0, bad_value, -0.5 * q[..., 0] ** 2)

    t = pg.Target(logp, lambda q: -q, dim=1, vectorized=True)
    with np.errstate(all="raise"):  # nothing may leak a floating-point warning
        tr = pg.leapfrog(t, [0.0], [2.0], 0.1, 50)
    k = int(np.argmax(tr.positions[:, 0] > 1.0))
    assert k > 0
    assert tr.divergent and tr.divergence_step == k
    assert tr.positions[k, 0] > 1.0  # the row that triggered it is kept
    assert not np.isfinite(tr.energy_error[k])
    assert np.all(np.isfinite(tr.energy_error[:k]))
    assert np.all(np.isnan(tr.positions[k + 1:]))


def test_non_finite_gradient_mid_trajectory_is_a_divergence():
    def grad(q):
        return np.where(np.abs(q) > 1.0, np.nan, -q)

    t = pg.Target(lambda q: -0.5 * np.sum(q**2, axis=-1), grad, dim=1, vectorized=True)
    tr = pg.leapfrog(t, [[0.0], [0.0]], [[2.0], [0.1]], 0.1, 50)
    np.testing.assert_array_equal(tr.divergent, [True, False])
    k = tr.divergence_step[0]
    assert k == int(np.argmax(np.abs(tr.positions[0, :, 0]) > 1.0))
    assert np.all(np.isnan(tr.positions[0, k + 1:]))
    assert np.all(np.isfinite(tr.positions[1]))


def test_trajectory_fields():
    t = gaussian_1d(1.0)
    tr = pg.leapfrog(t, [1.0], [0.0], 0.1, 10)
    assert tr.length == pytest.approx(1.0)
    assert tr.n_steps == 10 and tr.step_size == 0.1
    assert tr.max_energy_error == DEFAULT_MAX_ENERGY_ERROR
    np.testing.assert_allclose(tr.hamiltonian, tr.potential + tr.kinetic)
    assert tr.energy_error[0] == 0.0
    assert "no divergence" in repr(tr)


# ------------------------------------------------------------------------------ Metric


def test_metric_factors_give_the_right_covariances():
    inv_mass = spd(4, seed=11)
    m = pg.Metric(inv_mass)
    eye = np.eye(4)
    # momenta p = z A (rows) have covariance A^T A, which must be the mass M = inv_mass^-1
    a = m.momentum_from_normal(eye)
    np.testing.assert_allclose(a.T @ a, np.linalg.inv(inv_mass), rtol=1e-10, atol=1e-12)
    b = m.spread_from_normal(eye)
    np.testing.assert_allclose(b.T @ b, inv_mass, rtol=1e-10, atol=1e-12)
    p = np.random.default_rng(12).standard_normal((3, 4))
    np.testing.assert_allclose(m.velocity(p), p @ inv_mass)
    np.testing.assert_allclose(m.kinetic(p), 0.5 * np.einsum("ni,ij,nj->n", p, inv_mass, p))
    d = pg.Metric(np.array([4.0, 1.0]))
    assert float(d.kinetic(np.array([2.0, 1.0]))) == 8.5
    np.testing.assert_allclose(d.momentum_from_normal(np.ones(2)), [0.5, 1.0])


def test_metric_errors():
    with pytest.raises(ValueError, match="must be positive-definite"):
        pg.Metric(np.array([[1.0, 2.0], [2.0, 1.0]]))
    with pytest.raises(ValueError, match=r"must be square, got shape \(2, 3\)"):
        pg.Metric(np.ones((2, 3)))
    with pytest.raises(ValueError, match=r"must be None, 1-D \(diagonal\) or 2-D \(dense\), got shape \(2, 2, 2\)"):
        pg.Metric(np.ones((2, 2, 2)))
    with pytest.raises(ValueError, match=r"`inverse_mass` \(diagonal\) must be finite and > 0"):
        pg.Metric(np.array([1.0, -0.5]))
    with pytest.raises(ValueError, match=r"`inverse_mass` \(diagonal\) must be finite and > 0"):
        pg.Metric(np.array([1.0, np.inf]))
    with pytest.raises(ValueError, match="must be symmetric"):
        pg.Metric(np.array([[2.0, 0.5], [0.0, 2.0]]))
    with pytest.raises(ValueError, match=r"`inverse_mass` \(dense\) must be finite"):
        pg.Metric(np.array([[1.0, np.nan], [np.nan, 1.0]]))
    with pytest.raises(ValueError, match="`metric` has dimension 3 but the target has dim=2"):
        pg.leapfrog(pg.demos.glaze_ridge(), [0.0, 1.0], [0.0, 0.0], 0.1, 1, metric=np.ones(3))


# --------------------------------------------------------------- documented errors


def test_leapfrog_errors():
    t = pg.demos.glaze_ridge()
    q, p = [0.1, 1.0], [0.0, 0.0]
    for bad in (0.0, -0.1, np.inf):
        with pytest.raises(ValueError, match="`step_size` must be finite and > 0"):
            pg.leapfrog(t, q, p, bad, 5)
    with pytest.raises(ValueError, match="`step_size` must be finite and > 0 everywhere"):
        pg.leapfrog(t, [q, q], [p, p], np.array([0.1, -0.1]), 5)
    with pytest.raises(ValueError, match=r"`step_size` must be a scalar or shape \(2,\), got \(3,\)"):
        pg.leapfrog(t, [q, q], [p, p], np.array([0.1, 0.1, 0.1]), 5)
    with pytest.raises(TypeError, match="`step_size` must be a real number"):
        pg.leapfrog(t, q, p, "0.1", 5)
    for bad in (0, -3):
        with pytest.raises(ValueError, match=f"`n_steps` must be >= 1, got {bad}"):
            pg.leapfrog(t, q, p, 0.1, bad)
    with pytest.raises(TypeError, match="`n_steps` must be an integer"):
        pg.leapfrog(t, q, p, 0.1, 2.5)
    with pytest.raises(ValueError, match=r"`position` must have shape \(2,\) or \(n, 2\), got shape \(3,\)"):
        pg.leapfrog(t, [0.0, 1.0, 2.0], p, 0.1, 5)
    with pytest.raises(ValueError, match=r"`momentum` must have shape \(2,\) or \(n, 2\)"):
        pg.leapfrog(t, q, [0.0], 0.1, 5)
    with pytest.raises(ValueError, match=r"`momentum` must have the shape of `position` \(2, 2\), got \(3, 2\)"):
        pg.leapfrog(t, [q, q], [p, p, p], 0.1, 5)
    with pytest.raises(ValueError, match="`max_energy_error` must be finite and > 0"):
        pg.leapfrog(t, q, p, 0.1, 5, max_energy_error=0)
    with pytest.raises(TypeError, match="`target` must be a phaseglass Target, got function"):
        pg.leapfrog(lambda x: -x @ x, q, p, 0.1, 5)
