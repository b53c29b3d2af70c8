"""Tests for phaseglass.core.diagnostics.

Statistical checks use fixed seeds. Each was also run with 30 other seeds; the
"worst seen" comments record the largest deviation over those runs, and every
tolerance sits well outside it.
"""

import warnings

import numpy as np
import pytest
import scipy.signal
import scipy.stats

from phaseglass.core.diagnostics import (
    EBFMI_WARNING_LEVEL,
    RHAT_WARNING_LEVEL,
    autocorrelation,
    ebfmi,
    ess,
    mcse,
    rhat,
)

METHODS = ["bulk", "tail", "mean"]


def ar1(rng, rho, shape):
    """Stationary Gaussian AR(1) x_t = rho x_{t-1} + e_t, e_t ~ N(0, 1), along axis 1."""
    e = rng.standard_normal(shape)
    e[:, 0] /= np.sqrt(1.0 - rho**2)  # start in the stationary law N(0, 1 / (1 - rho^2))
    return scipy.signal.lfilter([1.0], [1.0, -rho], e, axis=1)


# --------------------------------------------------------------------------------------
# autocorrelation


@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_autocorrelation_of_ar1_is_rho_to_the_lag(rho):
    x = ar1(np.random.default_rng(11), rho, (4, 20000))
    acf = autocorrelation(x, max_lag=5).mean(axis=0)
    # Textbook: the lag-k autocorrelation of a stationary AR(1) is rho**k.
    np.testing.assert_allclose(acf, rho ** np.arange(6), atol=0.04)


def test_autocorrelation_matches_direct_numpy_computation():
    x = np.random.default_rng(3).standard_normal(37)
    xc = x - x.mean()
    direct = np.correlate(xc, xc, mode="full")[x.size - 1 :] / np.dot(xc, xc)
    np.testing.assert_allclose(autocorrelation(x), direct, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(autocorrelation(x, max_lag=4), direct[:5], atol=1e-12)


def test_autocorrelation_shapes_keep_lag_last():
    x = np.random.default_rng(0).standard_normal((3, 50, 2))
    assert autocorrelation(x[0, :, 0], max_lag=7).shape == (8,)
    assert autocorrelation(x[:, :, 0], max_lag=7).shape == (3, 8)
    acf = autocorrelation(x, max_lag=7)
    assert acf.shape == (3, 2, 8)
    np.testing.assert_allclose(acf[1, 0], autocorrelation(x[1, :, 0], max_lag=7))
    np.testing.assert_allclose(acf[..., 0], 1.0)
    assert autocorrelation(x[0, :, 0]).shape == (50,)


def test_autocorrelation_of_constant_chain_is_nan_without_warnings():
    x = np.vstack([np.full(20, 0.1), np.arange(20.0)])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        acf = autocorrelation(x)
    assert np.all(np.isnan(acf[0]))
    assert acf[1, 0] == 1.0


# --------------------------------------------------------------------------------------
# ess


@pytest.mark.parametrize("method", ["mean", "bulk"])
@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_ess_of_ar1_matches_integrated_autocorrelation_time(rho, method):
    chains, n, dim = 4, 20000, 10
    x = ar1(np.random.default_rng(7), rho, (chains, n, dim))
    # Textbook: an AR(1) has integrated autocorrelation time (1 + rho) / (1 - rho),
    # so ESS = N (1 - rho) / (1 + rho). Each of the `dim` columns is an independent
    # replicate; their average tests the estimator within 10% (worst seen: 3.3%).
    expected = chains * n * (1 - rho) / (1 + rho)
    assert np.mean(ess(x, method)) == pytest.approx(expected, rel=0.10)
    # Single replicates are noisier (worst seen: 16% off for rho = 0.9).
    np.testing.assert_allclose(ess(x, method), expected, rtol=0.35)


@pytest.mark.parametrize("method", METHODS)
def test_ess_of_iid_draws_is_near_number_of_draws(method):
    x = np.random.default_rng(5).standard_normal((4, 1000, 20))
    values = ess(x, method)
    assert values.shape == (20,)
    # Independent draws: tau = 1 (worst average over 20 columns seen: 0.95 S).
    assert np.mean(values) == pytest.approx(4000, rel=0.10)
    assert np.all((values > 0.6 * 4000) & (values < 1.4 * 4000))


def test_tail_ess_detects_chain_that_misses_the_tails():
    # One of four chains has a third of the scale of the others: it never reaches
    # the 5%/95% tails. The paper (Vehtari et al., 2021) motivates folding and
    # tail-ESS with chains that agree in location but not in scale.
    rng = np.random.default_rng(2)
    x = rng.standard_normal((4, 5000, 5))
    x[0] /= 3.0
    total = x.shape[0] * x.shape[1]
    # Location-based checks see nothing wrong (worst seen: 0.90 S) ...
    assert np.all(ess(x, "mean") > 0.75 * total)
    assert np.all(ess(x, "bulk") > 0.75 * total)
    # ... but tail-ESS collapses (worst seen: 0.11 S) and folded R-hat flags it.
    assert np.all(ess(x, "tail") < 0.25 * total)
    assert np.all(rhat(x) > RHAT_WARNING_LEVEL)


def test_ess_vectorised_over_dim_matches_column_by_column():
    x = ar1(np.random.default_rng(8), 0.6, (3, 301, 4))  # odd length: middle draw dropped
    for method in METHODS:
        column = [ess(x[:, :, j], method) for j in range(x.shape[2])]
        np.testing.assert_allclose(ess(x, method), column, rtol=1e-12)


def test_ess_shapes_and_single_chain():
    x = np.random.default_rng(1).standard_normal((1, 200, 3))
    assert isinstance(ess(x[0, :, 0]), float)
    assert isinstance(ess(x[:, :, 0]), float)
    assert ess(x).shape == (3,)
    # A 1-d array is one chain.
    assert ess(x[0, :, 0]) == ess(x[:, :, 0])


def test_bulk_ess_is_invariant_to_monotone_transforms():
    x = ar1(np.random.default_rng(4), 0.7, (4, 500, 3))
    # Rank normalisation only sees the order of the draws.
    np.testing.assert_allclose(ess(np.exp(x)), ess(x), rtol=1e-12)


@pytest.mark.parametrize("method", METHODS)
def test_ess_of_constant_or_nonfinite_quantity_is_nan_without_warnings(method):
    x = np.random.default_rng(6).standard_normal((4, 100, 3))
    x[:, :, 0] = 0.1
    x[2, 17, 2] = np.nan
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        values = ess(x, method)
        scalar = ess(np.full((4, 100), 3.0), method)
    assert np.isnan(values[0]) and np.isnan(values[2]) and np.isfinite(values[1])
    assert np.isnan(scalar)
    # The other columns are unaffected by the bad ones.
    assert values[1] == pytest.approx(ess(x[:, :, 1], method), rel=1e-12)


def test_ess_of_shortest_allowed_input():
    x = np.random.default_rng(0).standard_normal((2, 4))
    assert np.isfinite(ess(x)) and np.isfinite(rhat(x)) and np.isfinite(mcse(x))


# --------------------------------------------------------------------------------------
# rhat


def test_rhat_of_iid_chains_is_below_warning_level():
    x = np.random.default_rng(9).standard_normal((4, 1000, 20))
    values = rhat(x)
    assert values.shape == (20,)
    # Worst seen over 40 seeds: 1.003.
    assert np.all(values < RHAT_WARNING_LEVEL)
    assert np.all(values > 0.99)


def test_rhat_flags_one_chain_shifted_by_two_sd():
    # The paper's motivating failure: one of four chains is in the wrong place.
    x = np.random.default_rng(9).standard_normal((4, 1000, 20))
    x[0] += 2.0
    # Worst seen over 40 seeds: 1.29.
    assert np.all(rhat(x) > 1.1)


def test_rhat_detects_drift_within_a_single_chain():
    x = np.random.default_rng(10).standard_normal(2000) + np.linspace(0.0, 3.0, 2000)
    # Split R-hat compares the two halves of the chain.
    assert rhat(x) > 1.1


def test_rhat_is_invariant_to_affine_transforms():
    x = np.random.default_rng(12).standard_normal((4, 300, 3))
    # Only up to rounding: near-ties among the folded draws |x - median| can swap ranks.
    assert rhat(3.0 * x - 7.0) == pytest.approx(rhat(x), rel=1e-4)


def test_rhat_of_constant_and_stuck_chains():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isnan(rhat(np.full((4, 50), 2.5)))
        # Every chain constant but at a different value: infinitely bad.
        assert rhat(np.repeat(np.arange(4.0)[:, None], 50, axis=1)) == np.inf
        x = np.random.default_rng(0).standard_normal((4, 50, 2))
        x[1, 3, 0] = np.inf
        values = rhat(x)
    assert np.isnan(values[0]) and np.isfinite(values[1])


# --------------------------------------------------------------------------------------
# mcse


def test_mcse_of_mean_for_iid_draws_is_sd_over_sqrt_n():
    x = np.random.default_rng(13).standard_normal((4, 1000, 20))
    sd = x.std(axis=(0, 1), ddof=1)
    # Textbook: the standard error of the mean of n independent draws is sd / sqrt(n).
    ratio = mcse(x) / (sd / np.sqrt(4000))
    assert np.mean(ratio) == pytest.approx(1.0, rel=0.05)  # worst seen: 1.8%
    np.testing.assert_allclose(ratio, 1.0, rtol=0.3)


def test_mcse_of_sd_for_iid_normal_draws():
    x = np.random.default_rng(13).standard_normal((4, 1000, 20))
    sd = x.std(axis=(0, 1), ddof=1)
    # Textbook (normal theory): the standard error of the sample sd is sd / sqrt(2 n).
    ratio = mcse(x, "sd") / (sd / np.sqrt(2 * 4000))
    assert np.mean(ratio) == pytest.approx(1.0, rel=0.05)  # worst seen: 2.1%


def test_mcse_of_mean_and_sd_for_ar1():
    rho, chains, n = 0.5, 4, 5000
    x = ar1(np.random.default_rng(14), rho, (chains, n, 20))
    total = chains * n
    sd = np.sqrt(1.0 / (1.0 - rho**2))
    # Textbook: ESS of the mean of an AR(1) is N (1 - rho) / (1 + rho).
    expected_mean = sd / np.sqrt(total * (1 - rho) / (1 + rho))
    assert np.mean(mcse(x)) == pytest.approx(expected_mean, rel=0.05)  # worst seen: 1.7%
    # For a Gaussian AR(1), corr(x_t^2, x_{t+k}^2) = rho^(2k) (Isserlis' theorem), so the
    # variance estimate has ESS N (1 - rho^2) / (1 + rho^2); sd error = sd / sqrt(2 ESS).
    expected_sd = sd / np.sqrt(2 * total * (1 - rho**2) / (1 + rho**2))
    assert np.mean(mcse(x, "sd")) == pytest.approx(expected_sd, rel=0.05)  # worst seen: 1.3%


@pytest.mark.parametrize("prob", [0.05, 0.5, 0.9])
def test_mcse_of_quantile_for_iid_normal_draws(prob):
    x = np.random.default_rng(15).standard_normal((4, 1000, 100))
    z = scipy.stats.norm.ppf(prob)
    # Textbook asymptotics of the sample quantile: sqrt(p (1 - p) / n) / f(q_p).
    expected = np.sqrt(prob * (1 - prob) / 4000) / scipy.stats.norm.pdf(z)
    values = mcse(x, "quantile", prob=prob)
    assert values.shape == (100,)
    # Worst average over 100 columns seen: 8% high (the order-statistic positions are
    # rounded outwards, which widens the interval by about one draw on each side).
    assert np.mean(values) == pytest.approx(expected, rel=0.15)


def test_mcse_shapes_and_nan():
    x = np.random.default_rng(16).standard_normal((2, 100, 3))
    x[:, :, 1] = -4.0
    for kind, prob in [("mean", None), ("sd", None), ("quantile", 0.25)]:
        assert isinstance(mcse(x[:, :, 0], kind, prob=prob), float)
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            values = mcse(x, kind, prob=prob)
        assert values.shape == (3,)
        assert np.isnan(values[1]) and np.all(np.isfinite(values[[0, 2]]))


# --------------------------------------------------------------------------------------
# ebfmi


@pytest.mark.parametrize("rho", [0.5, 0.9])
def test_ebfmi_of_ar1_energies(rho):
    energy = ar1(np.random.default_rng(17), rho, (8, 20000))
    values = ebfmi(energy)
    assert values.shape == (8,)
    # Derivation: for a stationary AR(1) with variance s^2,
    # E[(E_t - E_{t-1})^2] = 2 s^2 - 2 cov(E_t, E_{t-1}) = 2 s^2 (1 - rho),
    # so the ratio of sums tends to 2 (1 - rho).
    assert np.mean(values) == pytest.approx(2 * (1 - rho), rel=0.10)  # worst seen: 2.2%
    np.testing.assert_allclose(values, 2 * (1 - rho), rtol=0.25)  # worst seen: 13%


def test_ebfmi_warning_level_separates_sticky_energies():
    rng = np.random.default_rng(18)
    assert np.all(ebfmi(ar1(rng, 0.9, (4, 20000))) < EBFMI_WARNING_LEVEL)  # about 0.2
    assert np.all(ebfmi(rng.standard_normal((4, 20000))) > EBFMI_WARNING_LEVEL)  # about 2


def test_ebfmi_exact_values_and_shapes():
    assert ebfmi([0.0, 1.0, 0.0, 1.0]) == pytest.approx(3.0)
    values = ebfmi([[0.0, 1.0, 0.0, 1.0], [0.0, 1.0, 2.0, 3.0], [5.0, 5.0, 5.0, 5.0]])
    # Diffs 1, 1, 1 over squared deviations 2.25 + 0.25 + 0.25 + 2.25; constant -> nan.
    np.testing.assert_allclose(values[:2], [3.0, 3.0 / 5.0])
    assert np.isnan(values[2])
    assert isinstance(ebfmi(np.arange(5.0)), float)


# --------------------------------------------------------------------------------------
# errors


@pytest.mark.parametrize("func", [ess, rhat, mcse])
def test_draws_with_wrong_shape_raise(func):
    match = (
        r"`draws` must have shape \(draws,\), \(chains, draws\) or \(chains, draws, dim\), "
        r"got shape \(2, 3, 4, 5\)"
    )
    with pytest.raises(ValueError, match=match):
        func(np.zeros((2, 3, 4, 5)))
    with pytest.raises(ValueError, match=r"`draws` must have shape .*got shape \(\)"):
        func(1.0)
    with pytest.raises(ValueError, match=r"`draws` must contain at least 1 chain"):
        func(np.zeros((0, 10)))
    with pytest.raises(ValueError, match=r"`draws` must have dim >= 1, got shape \(2, 10, 0\)"):
        func(np.zeros((2, 10, 0)))


@pytest.mark.parametrize("func", [ess, rhat, mcse])
def test_too_few_draws_raise(func):
    with pytest.raises(ValueError, match=r"`draws` must have at least 4 draws per chain, got 3"):
        func(np.zeros((2, 3)))
    with pytest.raises(ValueError, match=r"`draws` must have at least 4 draws per chain, got 2"):
        func([1.0, 2.0])


@pytest.mark.parametrize("func", [ess, rhat, mcse])
@pytest.mark.parametrize("bad", [["a", "b", "c", "d"], np.ones(8) * 1j])
def test_non_real_draws_raise(func, bad):
    with pytest.raises(TypeError, match=r"`draws` must be an array of real numbers, got dtype"):
        func(bad)


def test_unknown_method_lists_choices():
    with pytest.raises(ValueError, match=r"`method` must be one of 'bulk', 'tail', 'mean'.*'median'"):
        ess(np.zeros(10), method="median")


def test_mcse_argument_errors():
    x = np.random.default_rng(0).standard_normal((2, 20))
    with pytest.raises(ValueError, match=r"`kind` must be one of 'mean', 'sd', 'quantile'.*'var'"):
        mcse(x, kind="var")
    with pytest.raises(ValueError, match=r"`prob` is required with kind='quantile', got None"):
        mcse(x, kind="quantile")
    for prob in (0.0, 1.0, 1.5, -0.1):
        with pytest.raises(ValueError, match=r"`prob` must lie in \(0, 1\), got"):
            mcse(x, kind="quantile", prob=prob)
    with pytest.raises(TypeError, match=r"`prob` must be a real number, got str '0.5'"):
        mcse(x, kind="quantile", prob="0.5")
    with pytest.raises(ValueError, match=r"`prob` is only used with kind='quantile', got kind='sd'"):
        mcse(x, kind="sd", prob=0.5)


def test_autocorrelation_argument_errors():
    x = np.arange(10.0)
    with pytest.raises(TypeError, match=r"`max_lag` must be an integer, got float 2.5"):
        autocorrelation(x, max_lag=2.5)
    with pytest.raises(ValueError, match=r"`max_lag` must be >= 0, got -1"):
        autocorrelation(x, max_lag=-1)
    with pytest.raises(ValueError, match=r"`max_lag` must be <= draws - 1 = 9, got 10"):
        autocorrelation(x, max_lag=10)
    with pytest.raises(ValueError, match=r"`x` must have shape \(draws,\), .*got shape \(1, 2, 3, 4\)"):
        autocorrelation(np.zeros((1, 2, 3, 4)))
    with pytest.raises(ValueError, match=r"`x` must have at least 2 draws per chain, got 1"):
        autocorrelation([1.0])
    with pytest.raises(TypeError, match=r"`x` must be an array of real numbers, got dtype"):
        autocorrelation(["a", "b"])


def test_ebfmi_argument_errors():
    with pytest.raises(
        ValueError, match=r"`energy` must have shape \(draws,\) or \(chains, draws\), got shape \(2, 3, 4\)"
    ):
        ebfmi(np.zeros((2, 3, 4)))
    with pytest.raises(ValueError, match=r"`energy` must have at least 2 draws per chain, got 1"):
        ebfmi(np.zeros((3, 1)))
    with pytest.raises(ValueError, match=r"`energy` must contain at least 1 chain"):
        ebfmi(np.zeros((0, 5)))
    with pytest.raises(TypeError, match=r"`energy` must be an array of real numbers, got dtype"):
        ebfmi(["a", "b"])
