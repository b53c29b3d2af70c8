"""Convergence diagnostics for MCMC draws: autocorrelation, ESS, R-hat, MCSE and E-BFMI.

ESS, R-hat and MCSE follow the definitions in

    A. Vehtari, A. Gelman, D. Simpson, B. Carpenter and P.-C. Bürkner (2021),
    "Rank-normalization, folding, and localization: An improved R-hat for
    assessing convergence of MCMC", Bayesian Analysis.

referred to below as "the paper". E-BFMI follows

    M. Betancourt (2016), "Diagnosing Suboptimal Cotangent Disintegrations in
    Hamiltonian Monte Carlo", arXiv.

Shapes
------
Every function that takes ``draws`` accepts

* ``(draws,)`` -- a single chain, returns a float;
* ``(chains, draws)`` -- one scalar quantity, returns a float;
* ``(chains, draws, dim)`` -- ``dim`` quantities, returns an ndarray of shape ``(dim,)``.

Degenerate input is data, not an exception: a quantity that is constant over all
chains and draws, or that contains a non-finite value, gives ``nan`` (without
warnings). Too few draws to split the chains is a ``ValueError``.
"""

from __future__ import annotations

import numbers
import warnings

import numpy as np

# scipy is imported inside the functions that use it: ``import scipy.stats`` alone costs
# several times ``import numpy``, and ``import phaseglass`` should not pay it (issue 13).
from ._validate import check_in, check_int

__all__ = [
    "EBFMI_WARNING_LEVEL",
    "RHAT_WARNING_LEVEL",
    "autocorrelation",
    "ebfmi",
    "ess",
    "ess_upper_bound",
    "mcse",
    "rhat",
]

#: R-hat above this suggests the chains have not mixed (the paper's recommendation).
RHAT_WARNING_LEVEL = 1.01

#: E-BFMI below this suggests the momentum resampling explores the energy poorly
#: (common practice).
EBFMI_WARNING_LEVEL = 0.3

_MIN_DRAWS = 4  # split chains need at least two draws per half
_ESS_METHODS = ("bulk", "tail", "mean")
_MCSE_KINDS = ("mean", "sd", "quantile")


# --------------------------------------------------------------------------------------
# Input handling.  Internally every array is laid out (chains, dim, draws) so that the
# time axis is last and all reductions over it are ``axis=-1``.


def _as_float_array(name, value):
    arr = np.asarray(value)
    if arr.dtype.kind not in "biuf":
        raise TypeError(f"`{name}` must be an array of real numbers, got dtype {arr.dtype}")
    return arr.astype(float, copy=False)


def _as_chains(name, value, *, min_draws):
    """Return ``value`` as a float array (chains, dim, draws) and whether the result is scalar."""
    arr = _as_float_array(name, value)
    if arr.ndim == 1:
        arr = arr[None, :, None]
    elif arr.ndim == 2:
        if arr.shape[0] > arr.shape[1]:
            warnings.warn(
                f"`{name}` of shape {arr.shape} is read as (chains, draws): {arr.shape[0]} chains of "
                f"{arr.shape[1]} draws. If it is one chain shaped (draws, dim), pass "
                f"{name}[None] (shape (1, draws, dim)) instead", UserWarning, stacklevel=3)
        arr = arr[:, :, None]
    elif arr.ndim != 3:
        raise ValueError(
            f"`{name}` must have shape (draws,), (chains, draws) or (chains, draws, dim), "
            f"got shape {np.shape(value)}"
        )
    scalar = np.ndim(value) < 3
    if arr.shape[0] < 1:
        raise ValueError(f"`{name}` must contain at least 1 chain, got shape {np.shape(value)}")
    if arr.shape[1] < min_draws:
        raise ValueError(
            f"`{name}` must have at least {min_draws} draws per chain, "
            f"got {arr.shape[1]} (shape {np.shape(value)})"
        )
    if arr.shape[2] < 1:
        raise ValueError(f"`{name}` must have dim >= 1, got shape {np.shape(value)}")
    return np.moveaxis(arr, 1, 2), scalar


def ess_upper_bound(n_chains, n_draws):
    """The largest ESS the estimators report: ``S log10 S`` for ``S`` draws in all.

    An estimate at this bound was capped by the safeguard against strongly
    antithetic chains: it is a bound, not a measured value.
    """
    total = int(n_chains) * int(n_draws)
    return total * np.log10(total) if total > 1 else np.nan


def _finish(result, scalar):
    return float(result[0]) if scalar else result


def _nonfinite_dims(x):
    """Boolean (dim,): quantities with any nan/inf, and ``x`` with those rows zeroed."""
    bad = ~np.all(np.isfinite(x), axis=(0, 2))
    if np.any(bad):
        x = np.where(bad[None, :, None], 0.0, x)
    return bad, x


def _constant_dims(x):
    """Boolean (dim,): quantities taking a single value over all chains and draws."""
    return np.max(x, axis=(0, 2)) == np.min(x, axis=(0, 2))


def _centre(x):
    """Subtract the mean over the last axis, exactly zero for constant series.

    Rounding in the mean would otherwise leave a spurious variance of ~1e-34.
    """
    xc = x - np.mean(x, axis=-1, keepdims=True)
    flat = np.max(x, axis=-1, keepdims=True) == np.min(x, axis=-1, keepdims=True)
    return np.where(flat, 0.0, xc)


# --------------------------------------------------------------------------------------
# Building blocks from the paper.


def _autocovariance(xc, max_lag):
    """Biased autocovariance (divided by n) of centred series along the last axis, via FFT."""
    import scipy.fft

    n = xc.shape[-1]
    # Zero-pad to at least 2n - 1 so the circular correlation equals the linear one.
    nfft = scipy.fft.next_fast_len(2 * n - 1, real=True)
    f = scipy.fft.rfft(xc, n=nfft, axis=-1)
    acov = scipy.fft.irfft(f.real**2 + f.imag**2, n=nfft, axis=-1)
    return acov[..., : max_lag + 1] / n


def _split_chains(x):
    """(chains, dim, n) -> (2 chains, dim, n // 2); the middle draw is dropped when n is odd."""
    half = x.shape[-1] // 2
    return np.concatenate([x[..., :half], x[..., x.shape[-1] - half :]], axis=0)


def _rank_normalize(x):
    """Normal scores of the ranks pooled over chains and draws, per quantity (the paper's z).

    z = Phi^-1((r - 3/8) / (S + 1/4)) with r the average rank among all S draws.
    """
    import scipy.special
    import scipy.stats

    chains, dim, n = x.shape
    pooled = np.moveaxis(x, 1, 0).reshape(dim, chains * n)
    ranks = scipy.stats.rankdata(pooled, axis=-1)
    z = scipy.special.ndtri((ranks - 0.375) / (chains * n + 0.25))
    return np.moveaxis(z.reshape(dim, chains, n), 0, 1)


def _fold(x):
    """|x - median|, the median pooled over chains and draws (the paper's folded draws)."""
    return np.abs(x - np.median(x, axis=(0, 2), keepdims=True))


def _variances(x):
    """The paper's W and var+ = (n - 1) / n W + B / n, for (chains, dim, n) -> 2 x (dim,)."""
    n = x.shape[-1]
    within = np.mean(np.mean(_centre(x) ** 2, axis=-1), axis=0) * n / (n - 1)
    between_over_n = np.var(np.mean(x, axis=-1), axis=0, ddof=1)
    return within, within * (n - 1) / n + between_over_n


def _rhat_of(x):
    """R-hat of already split (and transformed) chains (chains, dim, n) -> (dim,)."""
    const = _constant_dims(x)
    within, var_plus = _variances(x)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.sqrt(var_plus / within)
    # Chains stuck at different values: no within-chain variation but clear disagreement.
    out[(within == 0) & ~const] = np.inf
    out[const] = np.nan
    return out


def _ess_of(x):
    """ESS of already split (and transformed) chains (chains, dim, n) -> (dim,).

    Multi-chain autocorrelation rho_t = 1 - (W - mean_m s_m^2 rho_t,m) / var+ as in the
    paper, truncated with Geyer's initial positive sequence and made monotone with
    Geyer's initial monotone sequence.
    """
    chains, dim, n = x.shape
    const = _constant_dims(x)
    xc = _centre(x)
    # s_m^2 * rho_{t,m}: the biased autocovariance rescaled so lag 0 is the unbiased variance.
    acov = _autocovariance(xc, n - 1) * n / (n - 1)
    within, var_plus = _variances(x)
    safe_var = np.where(const, 1.0, var_plus)
    rho = 1.0 - (within[:, None] - np.mean(acov, axis=0)) / safe_var[:, None]  # (dim, n)

    # Pair sums P_t = rho_2t + rho_2t+1; keep the initial run of positive pairs and
    # replace each by the running minimum so the sequence is non-increasing.
    n_pairs = n // 2
    pairs = rho[:, 0 : 2 * n_pairs : 2] + rho[:, 1 : 2 * n_pairs : 2]
    initial_positive = np.cumprod(pairs > 0, axis=-1, dtype=bool)
    monotone = np.minimum.accumulate(pairs, axis=-1)
    tau = -1.0 + 2.0 * np.sum(np.where(initial_positive, monotone, 0.0), axis=-1)
    total = chains * n
    # Safeguard for strongly antithetic chains, where tau can approach 0: caps the ESS at
    # total * log10(total).
    tau = np.maximum(tau, 1.0 / np.log10(total))
    out = total / tau
    out[const] = np.nan
    return out


def _ess_array(x, method):
    """ESS (dim,) of raw chains (chains, dim, draws) for a validated ``method``."""
    bad, x = _nonfinite_dims(x)
    if method == "mean":
        out = _ess_of(_split_chains(x))
    elif method == "bulk":
        out = _ess_of(_rank_normalize(_split_chains(x)))
    else:  # tail: the worse of the 5% and 95% quantile indicators
        out = np.minimum(_ess_quantile(x, 0.05), _ess_quantile(x, 0.95))
    out[bad] = np.nan
    return out


def _ess_quantile(x, prob):
    """ESS (dim,) of the indicator I(x <= q_prob), q_prob pooled over chains and draws."""
    q = np.quantile(x, prob, axis=(0, 2), keepdims=True)
    return _ess_of(_split_chains((x <= q).astype(float)))


# --------------------------------------------------------------------------------------
# Public functions.


def autocorrelation(x, max_lag=None):
    """Autocorrelation of each chain, estimated with the FFT.

    The estimator is the usual biased one,
    ``rho_k = sum_t (x_t - m)(x_{t+k} - m) / sum_t (x_t - m)^2`` with ``m`` the chain
    mean, so ``rho_0 = 1``. A constant chain gives ``nan`` at every lag.

    Parameters
    ----------
    x : array_like, shape (draws,), (chains, draws) or (chains, draws, dim)
        Draws; at least 2 per chain.
    max_lag : int, optional
        Largest lag, ``0 <= max_lag < draws``. Defaults to ``draws - 1``.

    Returns
    -------
    acf : ndarray
        Shape ``(max_lag + 1,)``, ``(chains, max_lag + 1)`` or
        ``(chains, dim, max_lag + 1)`` respectively: the lag is always the last axis.

    Raises
    ------
    TypeError
        If ``x`` is not real-valued or ``max_lag`` is not an integer.
    ValueError
        If ``x`` has the wrong number of dimensions or fewer than 2 draws per chain,
        or ``max_lag`` is out of range.

    Examples
    --------
    >>> autocorrelation([1.0, 2.0, 3.0, 4.0], max_lag=2)
    array([ 1.  ,  0.25, -0.3 ])
    """
    arr, _ = _as_chains("x", x, min_draws=2)
    n = arr.shape[-1]
    if max_lag is None:
        max_lag = n - 1
    max_lag = check_int("max_lag", max_lag, minimum=0)
    if max_lag > n - 1:
        raise ValueError(f"`max_lag` must be <= draws - 1 = {n - 1}, got {max_lag}")
    acov = _autocovariance(_centre(arr), max_lag)
    var = acov[..., :1]
    with np.errstate(divide="ignore", invalid="ignore"):
        acf = np.where(var > 0, acov / np.where(var > 0, var, 1.0), np.nan)
    ndim = np.ndim(x)
    if ndim == 1:
        return acf[0, 0]
    if ndim == 2:
        return acf[:, 0]
    return acf


def ess(draws, method="bulk"):
    """Effective sample size of MCMC draws (Vehtari et al., 2021).

    Chains are split in half, the autocorrelations of all chains are combined with
    the within- and between-chain variances, and the sum of autocorrelations is
    truncated with Geyer's initial positive sequence, made monotone with Geyer's
    initial monotone sequence. ``ESS = chains * draws / tau`` for the split chains.

    Parameters
    ----------
    draws : array_like, shape (draws,), (chains, draws) or (chains, draws, dim)
        At least 4 draws per chain. A 1-d array is treated as a single chain.
    method : {"bulk", "tail", "mean"}
        ``"bulk"``: on rank-normalised split chains, the paper's recommendation for
        the centre of the distribution. ``"tail"``: the minimum of the ESS of the
        indicators ``I(x <= q05)`` and ``I(x <= q95)`` (quantiles pooled over chains),
        i.e. how well the 5% and 95% quantiles are estimated. ``"mean"``: the classic
        ESS on split chains without rank normalisation, the one that governs the
        MCSE of the mean.

    Returns
    -------
    float or ndarray, shape (dim,)
        ``nan`` for a quantity that is constant or contains a non-finite value
        (and for ``"tail"`` when an indicator is constant, e.g. heavy ties).

    Raises
    ------
    TypeError
        If ``draws`` is not real-valued.
    ValueError
        If ``draws`` has the wrong shape or too few draws, or ``method`` is unknown.

    Notes
    -----
    To guard against unstable estimates for strongly antithetic chains, the
    integrated autocorrelation time is floored at ``1 / log10(S)`` for ``S`` draws,
    so the ESS never exceeds ``S log10(S)``.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.standard_normal((4, 1000))
    >>> 3000 < ess(x) < 5000
    True
    """
    method = check_in("method", method, _ESS_METHODS)
    x, scalar = _as_chains("draws", draws, min_draws=_MIN_DRAWS)
    return _finish(_ess_array(x, method), scalar)


def rhat(draws):
    """Rank-normalised split R-hat, the maximum of its bulk and folded (tail) versions.

    Following Vehtari et al. (2021): split each chain in half, rank-normalise the
    pooled draws and compute the classic potential scale reduction; repeat on the
    draws folded around their median, ``|x - median|``, which detects chains that
    agree in location but not in scale; report the larger of the two. Values above
    :data:`RHAT_WARNING_LEVEL` suggest the chains have not mixed.

    Parameters
    ----------
    draws : array_like, shape (draws,), (chains, draws) or (chains, draws, dim)
        At least 4 draws per chain. A 1-d array is treated as a single chain
        (whose two halves are compared).

    Returns
    -------
    float or ndarray, shape (dim,)
        ``nan`` for a quantity that is constant or contains a non-finite value;
        ``inf`` when every chain is constant but the chains disagree.

    Raises
    ------
    TypeError
        If ``draws`` is not real-valued.
    ValueError
        If ``draws`` has the wrong shape or too few draws.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> float(rhat(rng.standard_normal((4, 1000)))) < RHAT_WARNING_LEVEL
    True
    """
    x, scalar = _as_chains("draws", draws, min_draws=_MIN_DRAWS)
    bad, x = _nonfinite_dims(x)
    bulk = _rhat_of(_rank_normalize(_split_chains(x)))
    tail = _rhat_of(_rank_normalize(_split_chains(_fold(x))))
    out = np.maximum(bulk, tail)
    out[bad] = np.nan
    return _finish(out, scalar)


def mcse(draws, kind="mean", prob=None):
    """Monte Carlo standard error of the mean, standard deviation or a quantile.

    * ``"mean"``: ``sd / sqrt(ESS)`` with the classic (``method="mean"``) ESS.
    * ``"sd"``: the delta method on the variance estimator: the MCSE of the mean
      of ``(x - mean)^2`` (using that quantity's own ESS) divided by ``2 sd``.
    * ``"quantile"``: the paper's approach. With ``S_eff`` the ESS of the indicator
      ``I(x <= q_prob)``, take the 15.87% and 84.13% quantiles ``a, b`` of
      ``Beta(S_eff prob + 1, S_eff (1 - prob) + 1)``; the MCSE is half the distance
      between the sorted draws at positions ``floor(a S)`` and ``ceil(b S)``.

    Parameters
    ----------
    draws : array_like, shape (draws,), (chains, draws) or (chains, draws, dim)
        At least 4 draws per chain. A 1-d array is treated as a single chain.
    kind : {"mean", "sd", "quantile"}
        Which estimate the standard error is for.
    prob : float, optional
        Probability in (0, 1) of the quantile; required for, and only allowed with,
        ``kind="quantile"``.

    Returns
    -------
    float or ndarray, shape (dim,)
        ``nan`` for a quantity that is constant or contains a non-finite value.

    Raises
    ------
    TypeError
        If ``draws`` is not real-valued or ``prob`` is not a real number.
    ValueError
        If ``draws`` has the wrong shape or too few draws, ``kind`` is unknown, or
        ``prob`` is missing, out of range or given without ``kind="quantile"``.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> round(mcse(rng.standard_normal((4, 2500))), 2)  # about 1 / sqrt(10000)
    0.01
    """
    kind = check_in("kind", kind, _MCSE_KINDS)
    if kind == "quantile":
        if prob is None:
            raise ValueError("`prob` is required with kind='quantile', got None")
        if isinstance(prob, bool) or not isinstance(prob, numbers.Real):
            raise TypeError(f"`prob` must be a real number, got {type(prob).__name__} {prob!r}")
        prob = float(prob)
        if not 0.0 < prob < 1.0:
            raise ValueError(f"`prob` must lie in (0, 1), got {prob!r}")
    elif prob is not None:
        raise ValueError(f"`prob` is only used with kind='quantile', got kind={kind!r}")

    x, scalar = _as_chains("draws", draws, min_draws=_MIN_DRAWS)
    bad, x = _nonfinite_dims(x)
    if kind == "mean":
        sd = np.std(x, axis=(0, 2), ddof=1)
        out = sd / np.sqrt(_ess_array(x, "mean"))
    elif kind == "sd":
        sq = (x - np.mean(x, axis=(0, 2), keepdims=True)) ** 2
        var = np.mean(sq, axis=(0, 2))
        mcse_var = np.std(sq, axis=(0, 2), ddof=1) / np.sqrt(_ess_array(sq, "mean"))
        with np.errstate(divide="ignore", invalid="ignore"):
            out = mcse_var / (2.0 * np.sqrt(var))
    else:
        out = _mcse_quantile(x, prob)
    out[bad] = np.nan
    return _finish(out, scalar)


def _mcse_quantile(x, prob):
    """MCSE (dim,) of the ``prob`` quantile via the Beta/ESS construction of the paper."""
    import scipy.stats

    # Probabilities of a standard normal at -1 and +1: a +-1 sd interval.
    one_sigma = (scipy.stats.norm.cdf(-1.0), scipy.stats.norm.cdf(1.0))
    chains, dim, n = x.shape
    s_eff = _ess_quantile(x, prob)
    ok = np.isfinite(s_eff)
    s_eff = np.where(ok, s_eff, 1.0)
    lo, hi = scipy.stats.beta.ppf(
        np.array(one_sigma)[:, None], s_eff * prob + 1.0, s_eff * (1.0 - prob) + 1.0
    )
    total = chains * n
    ordered = np.sort(np.moveaxis(x, 1, 0).reshape(dim, total), axis=-1)
    # 1-based positions floor(a S) and ceil(b S), clipped to [1, S], as 0-based indices.
    i_lo = np.clip(np.floor(lo * total).astype(int), 1, total) - 1
    i_hi = np.clip(np.ceil(hi * total).astype(int), 1, total) - 1
    rows = np.arange(dim)
    out = (ordered[rows, i_hi] - ordered[rows, i_lo]) / 2.0
    out[~ok] = np.nan
    return out


def ebfmi(energy):
    """Energy Bayesian fraction of missing information (E-BFMI) of each chain.

    ``E-BFMI = sum_t (E_t - E_{t-1})^2 / sum_t (E_t - mean(E))^2`` per chain
    (Betancourt, 2016). Values below :data:`EBFMI_WARNING_LEVEL` suggest the
    momentum resampling moves poorly between energy level sets.

    Parameters
    ----------
    energy : array_like, shape (draws,) or (chains, draws)
        Hamiltonian at each draw; at least 2 draws per chain.

    Returns
    -------
    float or ndarray, shape (chains,)
        ``nan`` for a constant chain or one with a non-finite energy.

    Raises
    ------
    TypeError
        If ``energy`` is not real-valued.
    ValueError
        If ``energy`` has the wrong shape or fewer than 2 draws per chain.

    Examples
    --------
    >>> ebfmi([0.0, 1.0, 0.0, 1.0])
    3.0
    """
    arr = _as_float_array("energy", energy)
    if arr.ndim not in (1, 2):
        raise ValueError(
            f"`energy` must have shape (draws,) or (chains, draws), got shape {arr.shape}"
        )
    chains = arr.reshape(-1, arr.shape[-1]) if arr.ndim == 2 else arr[None, :]
    if chains.shape[0] < 1:
        raise ValueError(f"`energy` must contain at least 1 chain, got shape {arr.shape}")
    if chains.shape[-1] < 2:
        raise ValueError(
            f"`energy` must have at least 2 draws per chain, got {chains.shape[-1]} "
            f"(shape {arr.shape})"
        )
    finite = np.all(np.isfinite(chains), axis=-1)
    chains = np.where(finite[:, None], chains, 0.0)
    denom = np.sum(_centre(chains) ** 2, axis=-1)
    num = np.sum(np.diff(chains, axis=-1) ** 2, axis=-1)
    out = np.full(chains.shape[0], np.nan)
    ok = finite & (denom > 0)
    out[ok] = num[ok] / denom[ok]
    return float(out[0]) if arr.ndim == 1 else out
