"""Tests for phaseglass.core.target: checked, counted log-densities and bounded coordinates.

External references are named beside each check. The finite-difference error
estimates ("forward differences are accurate to about sqrt(machine eps)") are
common practice (e.g. Nocedal & Wright, "Numerical Optimization", 2nd ed.,
sec. 8.1, recalled from memory).
"""

import warnings

import numpy as np
import pytest
import scipy.optimize

import phaseglass as pg
from phaseglass.core.target import Target

# ----------------------------------------------------------------------------- helpers


class Counted:
    """Wrap a user function and count the points it was called on (rows for a batch)."""

    def __init__(self, fn, vectorized):
        self.fn, self.vectorized, self.points = fn, vectorized, 0

    def __call__(self, x):
        self.points += x.shape[0] if self.vectorized else 1
        return self.fn(x)


def quad_logp(x):
    return -0.5 * np.sum(x * x, axis=-1) + np.sum(np.sin(x), axis=-1)


def quad_grad(x):
    return -x + np.cos(x)


def quad_vg(x):
    return quad_logp(x), quad_grad(x)


# Random points at which each demo's gradient is checked: around the posterior's bulk.
DEMO_POINTS = {
    "gaussian": lambda rng: rng.standard_normal(2),
    "glaze": lambda rng: rng.standard_normal(2),
    "late-returns": lambda rng: rng.normal(0.0, 0.5, 20),
    "apiaries": lambda rng: np.r_[rng.normal(3, 0.3), rng.uniform(-3, 0.5), rng.normal(3, 0.5, 48)],
    "apiaries-noncentred": lambda rng: np.r_[rng.normal(3, 0.3), rng.uniform(-3, 0.5), rng.normal(0, 1, 48)],
    "apiaries-12": lambda rng: np.r_[rng.normal(3, 0.3), rng.uniform(-3, 0.5), rng.normal(3, 0.5, 12)],
    "apiaries-12-noncentred": lambda rng: np.r_[rng.normal(3, 0.3), rng.uniform(-3, 0.5),
                                                rng.normal(0, 1, 12)],
}


def test_every_demo_has_a_point_generator():
    assert set(DEMO_POINTS) == set(pg.demos.DEMOS)


# ------------------------------------------------------------------- gradient checks


def test_check_gradient_names_the_coordinate_with_a_sign_error():
    names = ["alpha", "beta", "gamma"]

    def wrong_grad(x):
        g = quad_grad(x)
        g[1] = -g[1]  # the classic slip: sign error in one coordinate
        return g

    t = Target(quad_logp, wrong_grad, dim=3, names=names)
    x = np.array([[0.3, -1.2, 0.7], [1.5, 0.4, -0.2]])
    check = t.check_gradient(x)
    assert not check.ok
    assert check.rel_error.shape == (2, 3)
    # relative error of g vs -g is |2g| / |g| = 2 (up to atol), far above rtol
    assert check.max_rel_error == pytest.approx(2.0, rel=1e-3)
    text = repr(check)
    assert "GRADIENT MISMATCH" in text
    flagged = [line for line in text.splitlines() if "<-- check this" in line]
    assert len(flagged) == 1 and flagged[0].strip().startswith("beta:")
    assert check.worst(1)[0][0] == "beta"


def test_check_gradient_passes_for_a_correct_gradient_and_does_not_count():
    t = Target(quad_logp, quad_grad, dim=3)
    check = t.check_gradient(np.random.default_rng(1).standard_normal((4, 3)))
    assert check.ok and check.max_rel_error < 1e-6
    assert "agrees with finite differences" in repr(check)
    assert "<-- check this" not in repr(check)
    assert (t.n_density, t.n_grad) == (0, 0)  # a check is not sampling work


def test_check_gradient_works_with_only_a_joint_function():
    t = Target(quad_logp, dim=2, value_and_grad=quad_vg)
    assert t.check_gradient([0.2, -0.4]).ok


def test_check_gradient_needs_a_supplied_gradient():
    with pytest.warns(UserWarning, match="finite differences"):
        t = Target(quad_logp, dim=2)
    with pytest.raises(ValueError, match="`check_gradient` needs a supplied gradient"):
        t.check_gradient([0.0, 0.0])


@pytest.mark.parametrize("name", sorted(pg.demos.DEMOS))
def test_demo_gradients_match_finite_differences(name):
    t = pg.demos.get(name)
    rng = np.random.default_rng(20261202)
    points = np.array([DEMO_POINTS[name](rng) for _ in range(3)])
    check = t.check_gradient(points)
    assert check.ok, repr(check)
    for x in points:
        value, grad = t.value_and_grad(x)
        assert value == pytest.approx(t.log_density(x), rel=1e-12)
        # Independent reference: scipy's forward differences (step sqrt(machine eps)).
        # Their error is about sqrt(eps) * (|f| + |f''|), so the tolerance grows with
        # |grad|; the worst seen over these points was 2.3e-6 (late_returns, |f| ~ 3000).
        reference = scipy.optimize.approx_fprime(x, t.log_density)
        np.testing.assert_allclose(grad, reference, rtol=2e-5, atol=2e-5)


# ------------------------------------------------------------------- finite differences


def test_finite_difference_fallback_warns_once_and_is_accurate():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        t = Target(quad_logp, dim=3)
        x = np.random.default_rng(2).standard_normal((5, 3))
        g = t.grad(x)
        for row in x:
            t.grad(row)
            t.value_and_grad(row)
        pg.sample(t, pg.HMC(0.3, 3), n_draws=5, n_chains=2, seed=0, warmup=0)
    fd_warnings = [w for w in caught if "finite differences" in str(w.message)]
    assert len(fd_warnings) == 1
    assert fd_warnings[0].category is UserWarning
    assert fd_warnings[0].filename == __file__  # stacklevel points at the caller
    # Central differences with h = eps^(1/3) (1 + |x|) are accurate to ~eps^(2/3) ~ 4e-11
    # times the third derivative (common practice); the docstring promises ~1e-7.
    np.testing.assert_allclose(g, quad_grad(x), rtol=1e-7, atol=1e-8)


def test_finite_difference_counts_two_evaluations_per_coordinate():
    logp = Counted(quad_logp, vectorized=True)
    with pytest.warns(UserWarning):
        t = Target(logp, dim=4, vectorized=True)
    t.grad(np.zeros((3, 4)))
    # 3 points x 2 x 4 differences, plus the one-time check of the first vectorized batch
    # against three of its points evaluated alone
    assert (t.n_density, t.n_grad) == (3 * 2 * 4 + 3, 3)
    assert logp.points == t.n_density
    t.value_and_grad(np.zeros(4))
    assert (t.n_density, t.n_grad) == (27 + 1 + 8, 4)
    assert logp.points == t.n_density


# ------------------------------------------------------------------- evaluation counts


@pytest.mark.parametrize("vectorized", [False, True])
@pytest.mark.parametrize("kind", ["separate", "joint"])
def test_counts_equal_the_points_the_user_functions_saw(vectorized, kind):
    logp = Counted(quad_logp, vectorized)
    if kind == "separate":
        grad = Counted(quad_grad, vectorized)
        t = Target(logp, grad, dim=3, vectorized=vectorized)
    else:
        grad = Counted(quad_vg, vectorized)  # the joint function computes both
        t = Target(logp, dim=3, vectorized=vectorized, value_and_grad=grad)
    x = np.random.default_rng(3).standard_normal((6, 3))
    t.log_density(x[0])
    t.log_density(x)
    t.grad(x[0])
    t.grad(x[:4])
    t.value_and_grad(x[1])
    t.value_and_grad(x[:2])
    # log_density: 1 + 6 points; grad: 1 + 4; value_and_grad: 1 + 2; a vectorized function's
    # first batch is also checked once against three of its points evaluated alone
    c = 3 if vectorized else 0
    if kind == "separate":
        assert (t.n_density, t.n_grad) == (7 + 3 + c, 5 + 3 + c)
        assert (logp.points, grad.points) == (t.n_density, t.n_grad)
    else:
        # every gradient came from the joint function, so it also computed a value
        assert (t.n_density, t.n_grad) == (7 + 5 + 3 + 2 * c, 5 + 3 + c)
        assert logp.points == 7 + c
        assert grad.points == t.n_grad
    t.reset_counts()
    assert (t.n_density, t.n_grad) == (0, 0)


# ------------------------------------------------------------------- bounded coordinates


BOUNDS = [(0.0, None), (None, 3.0), (-1.0, 2.0), None]


def bounded_target():
    # on the user's scale: independent, smooth, finite inside the box
    def logp(x):
        return -0.5 * np.sum((x - 0.5) ** 2)

    def grad(x):
        return -(x - 0.5)

    return Target(logp, grad, bounds=BOUNDS)


def test_bounds_infer_dim_and_round_trip():
    t = bounded_target()
    assert t.dim == 4 and t.bounded
    lo, hi = t.bounds
    np.testing.assert_array_equal(lo, [0.0, -np.inf, -1.0, -np.inf])
    np.testing.assert_array_equal(hi, [np.inf, 3.0, 2.0, np.inf])
    z = np.random.default_rng(4).normal(0, 2, (10, 4))
    x = t.to_user(z)
    assert np.all((x > lo) & (x < hi))
    np.testing.assert_allclose(t.from_user(x), z, rtol=1e-10, atol=1e-10)


def test_bounded_log_density_adds_the_log_jacobian():
    t = bounded_target()
    z = np.array([0.3, -0.7, 1.1, 0.4])
    x = t.to_user(z)
    # log|dx/dz| by finite differences of the transform, coordinate by coordinate
    h = 1e-6
    dxdz = np.array([(t.to_user(z + h * e) - t.to_user(z - h * e))[i] / (2 * h)
                     for i, e in enumerate(np.eye(4))])
    expected = -0.5 * np.sum((x - 0.5) ** 2) + np.sum(np.log(np.abs(dxdz)))
    assert t.log_density(z) == pytest.approx(expected, rel=1e-8)
    # the gradient on the sampler's scale is the derivative of that log-density
    reference = scipy.optimize.approx_fprime(z, t.log_density, 1e-7)
    np.testing.assert_allclose(t.grad(z), reference, rtol=1e-5, atol=1e-6)


def test_unbounded_entries_are_not_transformed():
    t = Target(quad_logp, quad_grad, bounds=[None, (None, None)])
    assert not t.bounded
    z = np.array([0.3, -2.0])
    np.testing.assert_array_equal(t.to_user(z), z)


# ------------------------------------------------------------------- documented errors


def test_non_callable_functions_are_rejected():
    with pytest.raises(TypeError, match="`log_density` must be callable, got int"):
        Target(3, dim=1)
    with pytest.raises(TypeError, match="`grad` must be callable"):
        Target(quad_logp, "grad", dim=1)
    with pytest.raises(TypeError, match="`value_and_grad` must be callable"):
        Target(quad_logp, dim=1, value_and_grad=[1, 2])


def test_dim_must_be_inferable_and_valid():
    with pytest.raises(ValueError, match="`dim` could not be inferred"):
        Target(quad_logp, quad_grad)
    assert Target(quad_logp, quad_grad, names=["a", "b"]).dim == 2
    with pytest.raises(ValueError, match="`dim` must be >= 1, got 0"):
        Target(quad_logp, quad_grad, dim=0)
    with pytest.raises(TypeError, match="`dim` must be an integer"):
        Target(quad_logp, quad_grad, dim="2")


def test_names_must_match_dim_and_be_unique():
    with pytest.raises(ValueError, match="`names` must have 2 entries"):
        Target(quad_logp, quad_grad, dim=2, names=["a", "b", "c"])
    with pytest.raises(ValueError, match="`names` must be unique"):
        Target(quad_logp, quad_grad, dim=2, names=["a", "a"])


def test_bad_bounds_are_rejected():
    with pytest.raises(ValueError, match=r"`bounds` must have one \(lo, hi\) pair per coordinate \(2\), got 1"):
        Target(quad_logp, quad_grad, dim=2, bounds=[(0, 1)])
    with pytest.raises(ValueError, match=r"`bounds\[1\]` must have lo < hi, got \(2, 1\)"):
        Target(quad_logp, quad_grad, bounds=[(0, 1), (2, 1)])
    with pytest.raises(ValueError, match=r"`bounds\[0\]` must have lo < hi"):
        Target(quad_logp, quad_grad, bounds=[(1.0, 1.0)])
    with pytest.raises(ValueError, match=r"`bounds\[0\]` must be a \(lo, hi\) pair or None, got 5"):
        Target(quad_logp, quad_grad, bounds=[5])


def test_wrong_return_shapes_are_named():
    t = Target(lambda x: np.array([1.0, 2.0]), quad_grad, dim=2)
    with pytest.raises(ValueError, match=r"`log_density` must return a scalar .* got shape \(2,\)"):
        t.log_density([0.0, 0.0])
    t = Target(lambda x: np.zeros(3), quad_grad, dim=2, vectorized=True)
    with pytest.raises(ValueError, match=r"`log_density` \(vectorized\) must return shape \(5,\)"):
        t.log_density(np.zeros((5, 2)))
    t = Target(quad_logp, lambda x: np.zeros(3), dim=2)
    with pytest.raises(ValueError, match=r"`grad` must return shape \(2,\), got shape \(3,\)"):
        t.grad([0.0, 0.0])
    t = Target(quad_logp, lambda x: np.zeros((4, 3)), dim=2, vectorized=True)
    with pytest.raises(ValueError, match=r"`grad` must return shape \(4, 2\), got shape \(4, 3\)"):
        t.grad(np.zeros((4, 2)))
    t = Target(quad_logp, dim=2, vectorized=True, value_and_grad=lambda x: (np.zeros(2), quad_grad(x)))
    with pytest.raises(ValueError, match=r"`value_and_grad` must return values of shape \(3,\)"):
        t.value_and_grad(np.zeros((3, 2)))
    t = Target(quad_logp, dim=2, value_and_grad=lambda x: (0.0, np.zeros(5)))
    with pytest.raises(ValueError, match=r"`grad` must return shape \(2,\), got shape \(5,\)"):
        t.value_and_grad(np.zeros(2))


def test_wrong_point_shape_is_named():
    t = Target(quad_logp, quad_grad, dim=2)
    with pytest.raises(ValueError, match=r"`x` must have shape \(2,\) or \(n, 2\), got shape \(3,\)"):
        t.log_density([1.0, 2.0, 3.0])


def test_uncounted_restores_the_counts_even_when_the_block_raises():
    t = pg.demos.correlated_gaussian()
    t.log_density(np.zeros(2))
    before = (t.n_density, t.n_grad)
    with t.uncounted():
        t.value_and_grad(np.ones((3, 2)))
        t.grad(np.ones(2))
    assert (t.n_density, t.n_grad) == before
    with pytest.raises(RuntimeError):
        with t.uncounted():
            t.grad(np.ones(2))
            raise RuntimeError("user code failed")
    assert (t.n_density, t.n_grad) == before
