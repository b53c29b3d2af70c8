"""Built-in demo models, each set in an invented scenario with invented data.

Every demo is a vectorized ``Target`` with an analytic joint value-and-gradient
and a ``description`` attribute. The data are made up for demonstration only.
"""

import numpy as np

from .target import Target

__all__ = [
    "correlated_gaussian",
    "glaze_ridge",
    "late_returns",
    "apiaries",
    "FEW_APIARIES",
    "DEMOS",
    "get",
]

# ----------------------------------------------------------------- Gaussian


def correlated_gaussian(dim=2, correlation=0.9, scales=None):
    """A zero-mean Gaussian with known covariance (the reference every kernel must reproduce).

    Scenario: the daily drift (seconds per day) of antique clocks wound by the
    same hand, so their errors move together. ``cov[i, j] = scales[i] *
    scales[j] * correlation**|i - j|`` (an AR(1)-style correlation).

    Parameters
    ----------
    dim : int
    correlation : float in (-1, 1)
    scales : array_like, shape (dim,), optional
        Marginal standard deviations (ones by default).

    Returns
    -------
    Target
        With ``mean`` (dim,) and ``cov`` (dim, dim) attributes.
    """
    if not -1 < correlation < 1:
        raise ValueError(f"`correlation` must lie in (-1, 1), got {correlation!r}")
    scales = np.ones(dim) if scales is None else np.asarray(scales, dtype=float)
    if scales.shape != (dim,) or np.any(scales <= 0):
        raise ValueError(f"`scales` must be positive with shape ({dim},), got {scales}")
    lag = np.abs(np.subtract.outer(np.arange(dim), np.arange(dim)))
    cov = np.outer(scales, scales) * correlation ** lag
    prec = np.linalg.inv(cov)
    prec = 0.5 * (prec + prec.T)
    _, logdet = np.linalg.slogdet(cov)
    const = -0.5 * (dim * np.log(2 * np.pi) + logdet)

    def value_and_grad(x):
        g = -(x @ prec)
        return const + 0.5 * np.sum(x * g, axis=-1), g

    def log_density(x):
        return value_and_grad(x)[0]

    t = Target(log_density, dim=dim, vectorized=True, value_and_grad=value_and_grad,
               names=[f"clock_{i + 1}" for i in range(dim)])
    t.mean = np.zeros(dim)
    t.cov = cov
    t.description = (f"Daily drift of {dim} antique clocks wound by the same hand (invented): "
                     f"a Gaussian with correlation {correlation} between neighbours.")
    return t


# ------------------------------------------------------------------ curved

#: Invented data: glaze thickness (mm) of twelve test tiles.
GLAZE_THICKNESS = np.array([1.21, 0.94, 1.08, 1.33, 0.87, 1.02, 1.15, 0.99, 1.27, 1.05, 0.91, 1.12])
_GLAZE_NOISE = 0.5


def glaze_ridge():
    """A curved (banana-shaped) 2-D posterior from a small nonlinear model.

    Invented scenario: tile glaze thickness is a base coat ``base`` plus the
    square of a spray setting ``spray``; ``thickness_i ~ N(base + spray^2, 0.5)``
    with ``base, spray ~ N(0, 1)``. Only ``base + spray^2`` is identified, so
    the posterior bends along a parabola.
    """
    y = GLAZE_THICKNESS
    n, ybar = y.size, y.mean()
    ss = np.sum((y - ybar) ** 2)

    def value_and_grad(x):
        a, b = x[:, 0], x[:, 1]
        m = a + b * b
        resid = ybar - m
        lp = -0.5 * (a * a + b * b) - 0.5 * (ss + n * resid**2) / _GLAZE_NOISE**2
        dm = n * resid / _GLAZE_NOISE**2
        g = np.stack([-a + dm, -b + 2.0 * b * dm], axis=1)
        return lp, g

    def log_density(x):
        return value_and_grad(x)[0]

    t = Target(log_density, dim=2, vectorized=True, value_and_grad=value_and_grad,
               names=["base", "spray"])
    t.description = "Glaze thickness of twelve test tiles (invented): base + spray^2, a curved ridge."
    return t


# ------------------------------------------------------- logistic regression


def late_returns(n_rows=2000, n_coef=20, seed=20261202, prior_sd=2.5):
    """Logistic-regression posterior on invented rental data.

    Scenario: whether a hired cargo bike comes back late, from ``n_coef``
    standardised features of the booking (invented, drawn once from a fixed
    seed). Coefficients have independent N(0, ``prior_sd``) priors.

    Returns
    -------
    Target
        With ``features`` (n_rows, n_coef), ``late`` (n_rows,) and
        ``true_coef`` (n_coef,) attributes (the values the data were made from).
    """
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n_rows, n_coef))
    X[:, 0] = 1.0  # intercept
    beta = rng.normal(0.0, 0.7, n_coef)
    beta[0] = -1.0
    p = 1.0 / (1.0 + np.exp(-(X @ beta)))
    late = (rng.random(n_rows) < p).astype(float)
    XT = np.ascontiguousarray(X.T)
    inv_var = 1.0 / prior_sd**2

    def value_and_grad(b):
        eta = b @ XT  # (n, rows)
        lp = np.sum(late * eta - np.logaddexp(0.0, eta), axis=-1) - 0.5 * inv_var * np.sum(b * b, axis=-1)
        resid = late - 0.5 * (1.0 + np.tanh(0.5 * eta))
        g = resid @ X - inv_var * b
        return lp, g

    def log_density(b):
        return value_and_grad(b)[0]

    names = ["intercept"] + [f"feature_{i}" for i in range(1, n_coef)]
    t = Target(log_density, dim=n_coef, vectorized=True, value_and_grad=value_and_grad, names=names)
    t.features, t.late, t.true_coef = X, late, beta
    t.description = (f"Late returns of hired cargo bikes (invented): logistic regression with "
                     f"{n_rows} bookings and {n_coef} coefficients.")
    return t

# ------------------------------------------------------- many parameters

#: Seed of the generator that invents the apiaries' data (kept as generator + seed).
APIARY_SEED = 1203
_APIARY_PRIOR_MU = (2.0, 4.0)      # mean and sd (kg) of the normal prior on mu
_APIARY_PRIOR_TAU_SCALE = 1.5      # scale (kg) of the half-normal prior on tau
_APIARY_HIVE_SD = 2.4              # hive-to-hive sd within an apiary (kg), taken as known
#: The small version (dim 14): a funnel quick enough for views, tests and the divergences
#: notebook; in ``DEMOS`` as "apiaries-12" and "apiaries-12-noncentred".
FEW_APIARIES = 12


def _apiary_data(n_groups, seed):
    """Invent the hive weighings: (hives per apiary, every hive's gain, which apiary).

    The truth behind them: a mean gain of 3.1 kg and a small spread of 0.3 kg
    between apiaries, much smaller than the hive-to-hive spread, so the data
    say little about each apiary and the spread's posterior reaches down to 0.
    """
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    true_effect = rng.normal(3.1, 0.3, n_groups)
    hives = rng.integers(3, 9, n_groups)  # 3 to 8 hives weighed per apiary
    group = np.repeat(np.arange(n_groups), hives)
    gain = np.round(rng.normal(true_effect[group], _APIARY_HIVE_SD), 2)  # scales read to 10 g
    return hives, gain, group, true_effect


def apiaries(form="centred", n_groups=48, seed=APIARY_SEED):
    """Hierarchical model with many parameters: honey gain at ``n_groups`` invented apiaries.

    Scenario (invented, data drawn by our own seeded generator): during one week
    of lime-tree bloom, 3 to 8 hives at each of ``n_groups`` apiaries are
    weighed before and after; ``gain_i`` (kg) is hive i's weight gain. Hives
    at apiary j gain ``N(apiary_j, 2.4)`` (the hive-to-hive sd is taken as known);
    the apiaries' own means are ``apiary_j ~ N(mu, tau)``, with priors
    ``mu ~ N(2, 4)`` and ``tau ~ half-normal(1.5)``, sampled as ``log_tau``
    (the log-Jacobian is included).

    The centred form samples ``mu, log_tau, apiary[0..n_groups-1]``: where
    ``tau`` is small the apiaries are squeezed together (a funnel), and HMC
    with a step size tuned for the wide part diverges there. The non-centred
    form samples standard offsets ``z[j]`` with ``apiary_j = mu + tau z_j``,
    which removes the funnel; both forms describe the same posterior of
    ``(mu, tau)``.

    Parameters
    ----------
    form : {"centred", "noncentred"}
    n_groups : int >= 2
        Number of apiaries (dim = n_groups + 2). The default 48 gives dim 50;
        ``FEW_APIARIES`` (12, dim 14) is the small funnel the divergences
        notebook, the views' docstrings and the tests use.
    seed : int
        Seed of the ``SeedSequence`` that invents the data (``APIARY_SEED``).

    Returns
    -------
    Target
        With ``form``, ``hives`` (n_groups,) hives per apiary, ``gain`` (n_hives,)
        every hive's gain, ``group`` (n_hives,) its apiary, ``true_effect``
        (n_groups,) the apiary means the data were made from, ``hive_sd``,
        ``prior_mu`` (mean, sd) and ``prior_tau_scale``.

    Examples
    --------
    >>> import phaseglass as pg
    >>> t = pg.demos.apiaries("noncentred")
    >>> t.dim, t.names[:3]
    (50, ('mu', 'log_tau', 'z[0]'))
    """
    if form not in ("centred", "noncentred"):
        raise ValueError(f"`form` must be 'centred' or 'noncentred', got {form!r}")
    if isinstance(n_groups, bool) or not isinstance(n_groups, (int, np.integer)) or n_groups < 2:
        raise ValueError(f"`n_groups` must be an integer >= 2, got {n_groups!r}")
    n_groups = int(n_groups)
    hives, gain, group, true_effect = _apiary_data(n_groups, seed)
    J = n_groups
    # the likelihood through each apiary's count, mean and sum of squares (exact, constants kept)
    n = hives.astype(float)
    ybar = np.bincount(group, weights=gain, minlength=J) / n
    ss = float(np.sum((gain - ybar[group]) ** 2))
    sig2 = _APIARY_HIVE_SD**2
    w = n / sig2  # precision of each apiary's mean
    half_log_2pi = 0.5 * np.log(2.0 * np.pi)
    lik_const = -gain.size * (half_log_2pi + np.log(_APIARY_HIVE_SD)) - 0.5 * ss / sig2
    m0, s0 = _APIARY_PRIOR_MU
    scale = _APIARY_PRIOR_TAU_SCALE
    # N(m0, s0) on mu and half-normal(scale) on tau, normalised
    prior_const = (-half_log_2pi - np.log(s0)) + (np.log(2.0) - half_log_2pi - np.log(scale))

    def hyper_terms(mu, s):
        tau = np.exp(s)
        lp = prior_const - 0.5 * ((mu - m0) / s0) ** 2 - 0.5 * (tau / scale) ** 2 + s
        d_mu = -(mu - m0) / s0**2
        d_s = 1.0 - (tau / scale) ** 2
        return tau, lp, d_mu, d_s

    if form == "centred":
        def value_and_grad(x):
            mu, s, th = x[:, 0], x[:, 1], x[:, 2:]
            tau, lp, d_mu, d_s = hyper_terms(mu, s)
            dev = (th - mu[:, None]) / tau[:, None]
            resid = ybar - th
            lp = (lp + lik_const - J * (half_log_2pi + s) - 0.5 * np.sum(dev * dev, axis=1)
                  - 0.5 * np.sum(w * resid * resid, axis=1))
            g = np.empty_like(x)
            g[:, 0] = d_mu + np.sum(dev, axis=1) / tau
            g[:, 1] = d_s - J + np.sum(dev * dev, axis=1)
            g[:, 2:] = -dev / tau[:, None] + w * resid
            return lp, g

        names = ["mu", "log_tau"] + [f"apiary[{j}]" for j in range(J)]
    else:
        def value_and_grad(x):
            mu, s, z = x[:, 0], x[:, 1], x[:, 2:]
            tau, lp, d_mu, d_s = hyper_terms(mu, s)
            resid = ybar - (mu[:, None] + tau[:, None] * z)
            lp = (lp + lik_const - J * half_log_2pi - 0.5 * np.sum(z * z, axis=1)
                  - 0.5 * np.sum(w * resid * resid, axis=1))
            dth = w * resid  # d lp / d apiary_j
            g = np.empty_like(x)
            g[:, 0] = d_mu + np.sum(dth, axis=1)
            g[:, 1] = d_s + tau * np.sum(dth * z, axis=1)
            g[:, 2:] = -z + tau[:, None] * dth
            return lp, g

        names = ["mu", "log_tau"] + [f"z[{j}]" for j in range(J)]

    def log_density(x):
        return value_and_grad(x)[0]

    t = Target(log_density, dim=J + 2, vectorized=True, value_and_grad=value_and_grad,
               names=names)
    t.form = form
    t.hives, t.gain, t.group, t.true_effect = hives, gain, group, true_effect
    t.hive_sd = _APIARY_HIVE_SD
    t.prior_mu = _APIARY_PRIOR_MU
    t.prior_tau_scale = _APIARY_PRIOR_TAU_SCALE
    t.description = (
        f"Honey gain at {J} apiaries in a week of lime-tree bloom (invented data, {gain.size} "
        f"hives weighed), {form} form: apiary means partially pooled, dim {J + 2}."
    )
    return t


DEMOS = {
    "gaussian": correlated_gaussian,
    "glaze": glaze_ridge,
    "late-returns": late_returns,
    "apiaries": lambda: apiaries("centred"),
    "apiaries-noncentred": lambda: apiaries("noncentred"),
    "apiaries-12": lambda: apiaries("centred", n_groups=FEW_APIARIES),
    "apiaries-12-noncentred": lambda: apiaries("noncentred", n_groups=FEW_APIARIES),
}


def get(name):
    """Build a demo Target by its short name (see ``DEMOS``)."""
    if name not in DEMOS:
        raise ValueError(f"unknown demo model {name!r}; choose one of {', '.join(DEMOS)}")
    return DEMOS[name]()
