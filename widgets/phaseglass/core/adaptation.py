"""Warm-up: dual averaging of the step size and metric estimation from warm-up draws.

Sources. The dual averaging update and its constants (gamma=0.05, t0=10,
kappa=0.75, ``mu = log(10 * initial)``) are those of Hoffman & Gelman (2014),
"The No-U-Turn Sampler", JMLR 15, sec. 3.2. The rest are our own choices, not
taken from a publication: the warm-up schedule of ``warmup_windows`` (15 % first, 10 % last, doubling windows in
between), the shrinkage of ``estimate_metric`` toward ``1e-3`` times the
identity with weight ``5 / (n + 5)``, the clip of the log step size, and the
restart of dual averaging after each metric update.
"""

import numpy as np

from .metric import Metric

__all__ = ["DualAveraging", "warmup_windows", "estimate_metric"]


class DualAveraging:
    """Nesterov dual averaging of log step size toward a target acceptance.

    The update, its constants gamma=0.05, t0=10, kappa=0.75 and the shrinkage
    point ``mu = log(10 * initial)`` are those of Hoffman & Gelman (2014), "The
    No-U-Turn Sampler", JMLR 15, sec. 3.2. Ours: clipping the log value to
    [-25, 10] and ``restart`` after the metric changes.

    Parameters
    ----------
    initial : float
        Starting value of the tuned knob (step size or proposal scale).
    target_accept : float in (0, 1)
    """

    def __init__(self, initial, target_accept, *, gamma=0.05, t0=10.0, kappa=0.75):
        self.target_accept = float(target_accept)
        self.gamma, self.t0, self.kappa = gamma, t0, kappa
        self.restart(initial)

    def restart(self, initial):
        """Start over around ``initial`` (after the metric changed)."""
        self.mu = np.log(10.0 * initial)
        self.t = 0
        self.h_bar = 0.0
        self.log_value = np.log(initial)
        self.log_value_bar = 0.0

    def update(self, accept_stat):
        """Feed one acceptance statistic; return the value to use next."""
        self.t += 1
        w = 1.0 / (self.t + self.t0)
        a = float(np.clip(np.nan_to_num(accept_stat, nan=0.0), 0.0, 1.0))
        self.h_bar = (1.0 - w) * self.h_bar + w * (self.target_accept - a)
        self.log_value = self.mu - np.sqrt(self.t) / self.gamma * self.h_bar
        # our guard (not in the paper): keep exp() finite when early acceptance swings wildly
        self.log_value = float(np.clip(self.log_value, -25.0, 10.0))
        eta = self.t ** (-self.kappa)
        self.log_value_bar = eta * self.log_value + (1.0 - eta) * self.log_value_bar
        return float(np.exp(self.log_value))

    @property
    def final(self):
        """The averaged value to keep after warm-up."""
        return float(np.exp(self.log_value_bar)) if self.t > 0 else float(np.exp(self.log_value))


def warmup_windows(n_warmup):
    """Ends (exclusive draw indices) of the metric-estimation windows.

    A three-phase schedule whose proportions are our own choice (not taken
    from a publication): a first
    15 % with step-size tuning only, then windows that double in length
    (widths 1 : 2 : 4, the last absorbing the remainder), each ending in a
    metric update, then a final 10 % of step-size tuning with the last metric.
    Warm-ups shorter than 20 draws estimate no metric (also our choice).
    """
    if n_warmup < 20:
        return []
    start = int(0.15 * n_warmup)
    end = n_warmup - max(int(0.1 * n_warmup), 1)
    width = max((end - start) // 7, 5)  # 1 + 2 + 4 -> three doubling windows
    ends = []
    pos = start
    while pos + width < end:
        if pos + 3 * width > end:  # the last window absorbs the rest
            break
        pos += width
        ends.append(pos)
        width *= 2
    ends.append(end)
    return ends


def estimate_metric(samples, kind="diagonal"):
    """Regularised inverse mass from warm-up draws on the sampler's scale.

    Parameters
    ----------
    samples : ndarray, shape (n, dim)
        Pooled warm-up draws from every chain.
    kind : {"diagonal", "dense"}

    Notes
    -----
    Shrinks toward ``1e-3`` times the identity with weight ``5 / (n + 5)``: our
    own regularisation (the target and the weight are choices, not results), so
    that a few warm-up draws cannot make the metric singular or wildly small.
    A dense estimate that is still not positive definite falls back to its
    diagonal.
    """
    n, dim = samples.shape
    w = n / (n + 5.0)
    if kind == "diagonal":
        var = np.var(samples, axis=0, ddof=1) if n > 1 else np.ones(dim)
        inv = w * var + 1e-3 * (1.0 - w)
        inv = np.where(np.isfinite(inv) & (inv > 0), inv, 1.0)
        return Metric(inv)
    cov = np.cov(samples, rowvar=False).reshape(dim, dim) if n > 1 else np.eye(dim)
    inv = w * cov + 1e-3 * (1.0 - w) * np.eye(dim)
    inv = 0.5 * (inv + inv.T)
    try:
        return Metric(inv)
    except ValueError:
        return Metric(np.clip(np.diag(inv), 1e-8, None))
