"""Light conditional distributions for ``pg.Gibbs``: cheap to build, vectorised ``cdf``/``ppf``.

A frozen ``scipy.stats`` distribution works as a Gibbs conditional (build it with
``pg.freeze`` to skip scipy's ~0.4 ms set-up per object: a conditional is built
for every coordinate of every chain at every sweep), but scipy's truncated
normal is slow to evaluate. ``NormalConditional`` is the same normal (or
truncated normal) built and evaluated in microseconds, on
``scipy.special.ndtr``/``ndtri``.
"""

import math

import numpy as np

__all__ = ["NormalConditional"]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


class NormalConditional:
    """Normal distribution with mean ``mean`` and sd ``sd``, optionally cut to ``[low, high]``.

    Parameters
    ----------
    mean, sd : float or array_like
        Broadcast together (one value per chain with ``Gibbs(vectorized=True)``).
    low, high : float or array_like, optional
        Truncation bounds (default the whole line).

    Notes
    -----
    The same numbers as ``scipy.stats.norm(mean, sd)`` and
    ``scipy.stats.truncnorm((low - mean) / sd, (high - mean) / sd, loc=mean,
    scale=sd)`` to round-off while the interval holds more than about 1e-300 of
    the untruncated mass: an interval in the upper tail is handled through the
    survival function, so tails up to ~37 sd stay accurate. Past that the
    interval's mass underflows and ``ppf`` returns NaN, which the Gibbs kernel
    reports; use scipy's ``truncnorm`` there.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> def conditionals(i, x):            # a unit bivariate normal with correlation 0.6
    ...     return pg.NormalConditional(0.6 * x[1 - i], np.sqrt(1 - 0.36), low=-2.0, high=2.0)
    >>> float(conditionals(0, np.array([0.0, 0.0])).ppf(0.5))
    0.0
    """

    __slots__ = ("mean", "sd", "low", "high", "_a", "_b", "_upper", "_pa", "_mass")

    def __init__(self, mean, sd, low=-np.inf, high=np.inf):
        if np.ndim(mean) == np.ndim(sd) == np.ndim(low) == np.ndim(high) == 0:
            self._scalar(float(mean), float(sd), float(low), float(high))
        else:
            self._arrays(mean, sd, low, high)

    def _scalar(self, mean, sd, low, high):
        # one chain's conditional: plain floats and math (Gibbs builds one per chain and
        # coordinate at every sweep, so building must cost microseconds)
        if not math.isfinite(mean):
            raise ValueError(f"`mean` must be finite, got {mean}")
        if not (math.isfinite(sd) and sd > 0):
            raise ValueError(f"`sd` must be positive and finite, got {sd}")
        if not low < high:
            raise ValueError(f"`low` must be below `high`, got low={low}, high={high}")
        self.mean, self.sd, self.low, self.high = mean, sd, low, high
        self._a, self._b = (low - mean) / sd, (high - mean) / sd
        # an interval above the mean is measured from the upper tail (Q(x) = Phi(-x)),
        # where the lower-tail CDF would round to 1
        self._upper = self._a > 0
        from scipy.special import ndtr  # the same function cdf uses, so cdf(low) is exactly 0

        sign = -1.0 if self._upper else 1.0
        self._pa = float(ndtr(sign * self._a))
        self._mass = sign * (float(ndtr(sign * self._b)) - self._pa)

    def _arrays(self, mean, sd, low, high):
        from scipy.special import ndtr

        mean, sd, low, high = np.broadcast_arrays(*(np.asarray(v, dtype=float)
                                                    for v in (mean, sd, low, high)))
        if not np.all(np.isfinite(mean)):
            raise ValueError(f"`mean` must be finite, got {mean}")
        if not np.all(np.isfinite(sd) & (sd > 0)):
            raise ValueError(f"`sd` must be positive and finite, got {sd}")
        if not np.all(low < high):
            raise ValueError(f"`low` must be below `high`, got low={low}, high={high}")
        self.mean, self.sd, self.low, self.high = mean, sd, low, high
        self._a, self._b = (low - mean) / sd, (high - mean) / sd
        self._upper = self._a > 0
        sign = np.where(self._upper, -1.0, 1.0)
        self._pa = ndtr(sign * self._a)
        self._mass = sign * (ndtr(sign * self._b) - self._pa)

    def cdf(self, x):
        """P(X <= x)."""
        from scipy.special import ndtr

        z = np.minimum(np.maximum((np.asarray(x, dtype=float) - self.mean) / self.sd, self._a),
                       self._b)
        sign = np.where(self._upper, -1.0, 1.0) if np.ndim(self._upper) else \
            (-1.0 if self._upper else 1.0)
        with np.errstate(all="ignore"):
            below = sign * (ndtr(sign * z) - self._pa)
            return np.minimum(np.maximum(below / self._mass, 0.0), 1.0)

    def ppf(self, u):
        """The point with ``cdf`` equal to ``u`` (NaN where the interval has no mass left)."""
        from scipy.special import ndtri

        sign = np.where(self._upper, -1.0, 1.0) if np.ndim(self._upper) else \
            (-1.0 if self._upper else 1.0)
        with np.errstate(all="ignore"):
            z = sign * ndtri(self._pa + sign * np.asarray(u, dtype=float) * self._mass)
            z = np.minimum(np.maximum(z, self._a), self._b)
            if np.ndim(self._mass):
                z = np.where(self._mass > 0, z, np.nan)
            elif not self._mass > 0:
                z = z * np.nan
        return self.mean + self.sd * z

    def logpdf(self, x):
        """Log density; -inf outside ``[low, high]``."""
        x = np.asarray(x, dtype=float)
        z = (x - self.mean) / self.sd
        with np.errstate(divide="ignore"):
            out = -0.5 * z * z - np.log(self.sd) - _LOG_SQRT_2PI - np.log(self._mass)
        return np.where((x >= self.low) & (x <= self.high), out, -np.inf)

    def __repr__(self):
        cut = "" if np.all(np.isinf(self.low) & np.isinf(self.high)) else \
            f", low={self.low}, high={self.high}"
        return f"NormalConditional(mean={self.mean}, sd={self.sd}{cut})"
