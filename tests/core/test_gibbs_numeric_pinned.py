"""Behaviour kept by the faster numeric Gibbs conditionals and non-vectorized Target loop.

Speed itself is measured by ``benchmarks/core.py --gibbs-only``, never here.
"""

import warnings

import numpy as np
import pytest

import phaseglass as pg
from phaseglass.core.gibbs import GridConditional

MU = np.array([0.5, -0.3])
PREC = np.linalg.inv(np.array([[1.0, 0.9], [0.9, 2.25]]))
LO, HI = np.array([-0.4, -1.5]), np.array([2.2, 3.0])
POSITION = np.array([[0.0, -1.0], [2.0, 2.5], [1.0, 0.0]])


def box_log_density(x):
    d = x - MU
    inside = np.all((x >= LO) & (x <= HI), axis=-1)
    return np.where(inside, -0.5 * np.einsum("ni,ij,nj->n", d, PREC, d), -np.inf)


def make_target(vectorized, wrap=float):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # finite-difference gradient: not used here
        if vectorized:
            return pg.Target(box_log_density, None, dim=2, vectorized=True)
        return pg.Target(lambda x: wrap(box_log_density(np.asarray(x)[None])[0]), None, dim=2)


# Measured with the code before the speed-up (commit 8ef7922): the conditionals of the box
# (truncation edges on both sides) at POSITION, coordinate 0.
PINNED = {
    "nodes[:, 200]": [0.4629135044434016, 0.8360111594202895, 0.5632284283723901],
    "nodes[:, 508]": [2.199999998606237, 2.1999999999612845, 2.19999999938055],
    "log_density[:, 2]": [-0.29914867272099804, -3.1804688906490317, -0.8105187969972919],
    "log_density[:, 507]": [-3.059279449344511, -0.2622777732296586, -1.9479906020309292],
    "cum[:, 100]": [0.2293066852958105, 0.053634439549050186, 0.16762263807142597],
    "ppf": [-0.2999204629394206, 1.3877312926384833, 1.7158947175953463],
    "cdf": [0.2228047241817791, 0.8905674852858194, 0.6647359590808309],
}


@pytest.mark.parametrize("vectorized", [True, False])
def test_numeric_conditional_gives_the_numbers_measured_before_the_speed_up(vectorized):
    cond = GridConditional.from_target(make_target(vectorized), POSITION, 0)
    got = {
        "nodes[:, 200]": cond.nodes[:, 200], "nodes[:, 508]": cond.nodes[:, 508],
        "log_density[:, 2]": cond.log_density[:, 2], "log_density[:, 507]": cond.log_density[:, 507],
        "cum[:, 100]": cond.cum[:, 100], "ppf": cond.ppf(np.array([0.05, 0.5, 0.93])),
        "cdf": cond.cdf(POSITION[:, 0]),
    }
    for name, want in PINNED.items():
        np.testing.assert_allclose(got[name], want, rtol=1e-12, atol=1e-15, err_msg=name)


def test_per_point_answers_of_any_numeric_type_build_the_same_conditionals():
    # a float answer takes the loop's fast path, the others the checked conversion
    reference = make_target(False, float)
    a = GridConditional.from_target(reference, POSITION, 1)
    assert reference.n_density == 3 * (35 + 512 // 16 + 512 // 4) + 3 * 2 * 6 * 32  # two edges each
    for wrap in (np.float64, np.array, lambda v: np.array([v]), lambda v: [v]):
        b = GridConditional.from_target(make_target(False, wrap), POSITION, 1)
        np.testing.assert_array_equal(b.nodes, a.nodes)
        np.testing.assert_array_equal(b.log_density, a.log_density)
        np.testing.assert_array_equal(b.cum, a.cum)
    # the batched function sums in another order: the same conditionals to round-off
    v = GridConditional.from_target(make_target(True), POSITION, 1)
    np.testing.assert_allclose(v.nodes, a.nodes, rtol=0, atol=1e-12)
    np.testing.assert_allclose(v.log_density, a.log_density, rtol=0, atol=1e-12)
    np.testing.assert_allclose(v.cum, a.cum, rtol=0, atol=1e-12)


def test_per_point_loop_counts_and_converts_every_answer():
    answers = [1.5, np.float64(-2.0), 3, np.float32(0.25), np.array(4.0), np.array([5.0]), True * 0 + 6]
    target = pg.Target(lambda x: answers[int(x[0])], lambda x: np.zeros(2), dim=2)
    x = np.column_stack([np.arange(len(answers)), np.zeros(len(answers))])
    out = target.log_density(x)
    np.testing.assert_array_equal(out, [1.5, -2.0, 3.0, 0.25, 4.0, 5.0, 6.0])
    assert out.dtype == np.float64
    assert target.n_density == len(answers)


@pytest.mark.parametrize("bad, error, match", [
    (1.0 + 2.0j, TypeError, r"`log_density` must return real numbers, got complex values"),
    (np.complex128(1.0), TypeError, r"`log_density` must return real numbers, got complex values"),
    ("-1.5", TypeError, r"`log_density` must return numbers, got str '-1.5'"),
    (None, TypeError, r"`log_density` must return numbers, got NoneType None"),
    (True, TypeError, r"`log_density` must return numbers, got bool True"),
    (np.array([1.0, 2.0]), ValueError, r"`log_density` must return a scalar for input of shape "
                                       r"\(2,\), got shape \(2,\); pass vectorized=True"),
])
def test_per_point_loop_refuses_a_bad_answer_among_good_ones(bad, error, match):
    calls = []

    def log_density(x):
        calls.append(float(x[0]))
        return bad if x[0] == 2.0 else -0.5 * float(x @ x)

    target = pg.Target(log_density, lambda x: -x, dim=2)
    with pytest.raises(error, match=match):
        target.log_density(np.column_stack([np.arange(5.0), np.zeros(5)]))
    assert calls == [0.0, 1.0, 2.0]  # stops at the first bad answer, as before
