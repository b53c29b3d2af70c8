"""Built-in demo models, each set in an invented scenario with invented data.

Every demo is a vectorized ``Target`` with an analytic joint value-and-gradient
and a ``description`` attribute. The data are made up for demonstration only.
"""

import numpy as np

from .target import Target

__all__ = [
    "correlated_gaussian",
    "orchards",
    "glaze_ridge",
    "late_returns",
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


# ------------------------------------------------------------- hierarchical

#: Invented data: change in apple yield (kg per tree) after a new pruning method
#: at seven community orchards, with each orchard's standard error.
ORCHARD_GAIN = np.array([11.0, 4.0, -3.0, 8.0, 2.0, 6.0, 15.0])
ORCHARD_SE = np.array([13.0, 9.0, 15.0, 10.0, 8.0, 12.0, 11.0])

_PRIOR_MU_SD = 10.0
_PRIOR_TAU_SCALE = 5.0


def orchards(form="centred"):
    """Hierarchical model of seven invented orchards, centred or non-centred.

    ``gain_j ~ N(effect_j, se_j)``, ``effect_j ~ N(mu, tau)``,
    ``mu ~ N(0, 10)``, ``tau ~ half-Cauchy(0, 5)``, sampled as ``log_tau``.

    In the centred form the parameters are ``mu, log_tau, effect_1..7``; the
    funnel between ``log_tau`` and the effects makes HMC diverge at moderate
    step sizes. The non-centred form samples ``z_j`` with
    ``effect_j = mu + tau * z_j`` and removes the funnel.

    Parameters
    ----------
    form : {"centred", "noncentred"}
    """
    y, se = ORCHARD_GAIN, ORCHARD_SE
    J = y.size
    if form not in ("centred", "noncentred"):
        raise ValueError(f"`form` must be 'centred' or 'noncentred', got {form!r}")

    def hyper_terms(mu, s):
        tau = np.exp(s)
        r = tau / _PRIOR_TAU_SCALE
        # mu ~ N(0, 10); tau ~ half-Cauchy(0, 5) with log-Jacobian s
        lp = -0.5 * (mu / _PRIOR_MU_SD) ** 2 - np.log1p(r * r) + s
        d_mu = -mu / _PRIOR_MU_SD**2
        d_s = -2.0 * r * r / (1.0 + r * r) + 1.0
        return tau, lp, d_mu, d_s

    if form == "centred":
        def value_and_grad(x):
            mu, s, th = x[:, 0], x[:, 1], x[:, 2:]
            tau, lp, d_mu, d_s = hyper_terms(mu, s)
            dev = (th - mu[:, None]) / tau[:, None]
            lp = lp - 0.5 * np.sum(dev**2, axis=1) - J * s
            lik = (y - th) / se
            lp = lp - 0.5 * np.sum(lik**2, axis=1)
            g = np.empty_like(x)
            g[:, 0] = d_mu + np.sum(dev, axis=1) / tau
            g[:, 1] = d_s + np.sum(dev**2, axis=1) - J
            g[:, 2:] = -dev / tau[:, None] + lik / se
            return lp, g

        names = ["mu", "log_tau"] + [f"effect_{j + 1}" for j in range(J)]
    else:
        def value_and_grad(x):
            mu, s, z = x[:, 0], x[:, 1], x[:, 2:]
            tau, lp, d_mu, d_s = hyper_terms(mu, s)
            th = mu[:, None] + tau[:, None] * z
            lik = (y - th) / se
            lp = lp - 0.5 * np.sum(z**2, axis=1) - 0.5 * np.sum(lik**2, axis=1)
            dth = lik / se  # d lp / d theta
            g = np.empty_like(x)
            g[:, 0] = d_mu + np.sum(dth, axis=1)
            g[:, 1] = d_s + np.sum(dth * z, axis=1) * tau
            g[:, 2:] = -z + dth * tau[:, None]
            return lp, g

        names = ["mu", "log_tau"] + [f"z_{j + 1}" for j in range(J)]

    def log_density(x):
        return value_and_grad(x)[0]

    t = Target(log_density, dim=J + 2, vectorized=True, value_and_grad=value_and_grad, names=names)
    t.form = form
    t.description = (
        f"Seven community orchards (invented data), {form} form: yield change after a new "
        "pruning method, partially pooled across orchards."
    )
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


DEMOS = {
    "gaussian": correlated_gaussian,
    "orchards": lambda: orchards("centred"),
    "orchards-noncentred": lambda: orchards("noncentred"),
    "glaze": glaze_ridge,
    "late-returns": late_returns,
}


def get(name):
    """Build a demo Target by its short name (see ``DEMOS``)."""
    if name not in DEMOS:
        raise ValueError(f"unknown demo model {name!r}; choose one of {', '.join(DEMOS)}")
    return DEMOS[name]()
