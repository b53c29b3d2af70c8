"""Sources of the accept/reject uniform for Metropolis-type kernels."""

import numpy as np

from ._validate import check_positive

__all__ = ["FreshUniform", "DriftingUniform", "as_uniform"]


class FreshUniform:
    """A new U(0, 1) for every accept/reject decision (the usual Metropolis rule).

    Accept when ``u < min(1, ratio)``; the recorded value is ``u``.
    """

    name = "fresh"

    def init_state(self, n_chains, streams):
        return {}

    def decide(self, state, log_ratio, streams):
        """Return ``(accepted, u)`` for log acceptance ratios shaped (n_chains,)."""
        u = streams.uniform()
        with np.errstate(divide="ignore", invalid="ignore"):
            accepted = np.log(u) < log_ratio
        return accepted, u

    def settings(self):
        return {"kind": self.name}

    def __repr__(self):
        return "FreshUniform()"


class DriftingUniform:
    """Non-reversibly updated accept/reject uniform.

    The scheme of "Non-reversibly updating a uniform [0,1] value for Metropolis
    accept/reject decisions" (R. M. Neal, arXiv:2001.11950): keep ``v`` in
    [-1, 1] per chain; before each decision ``v <- v + drift`` (plus uniform
    noise of half-width ``jitter``), wrapped into [-1, 1]; accept when
    ``|v| < ratio``; after an acceptance rescale ``v <- v / ratio`` so that
    ``|v|`` stays uniform given the new state. Since ``|v|`` sweeps slowly
    0 -> 1 -> 0, rejections cluster in time instead of being scattered.

    Parameters
    ----------
    drift : float > 0
        Change of ``v`` per transition.
    jitter : float >= 0
        Half-width of extra uniform noise added to each change.

    Notes
    -----
    The recorded ``u`` is ``|v|`` at the decision.
    """

    name = "drifting"

    def __init__(self, drift=0.03, jitter=0.0):
        self.drift = drift
        self.jitter = jitter

    @property
    def drift(self):
        return self._drift

    @drift.setter
    def drift(self, value):
        value = check_positive("drift", value)
        if value >= 2.0:
            raise ValueError(f"`drift` must be < 2 (v lives in [-1, 1]), got {value!r}")
        self._drift = value

    @property
    def jitter(self):
        return self._jitter

    @jitter.setter
    def jitter(self, value):
        self._jitter = check_positive("jitter", value, allow_zero=True)

    def init_state(self, n_chains, streams):
        return {"v": 2.0 * streams.uniform() - 1.0}

    def decide(self, state, log_ratio, streams):
        v = state["v"] + self._drift
        if self._jitter > 0:
            v = v + self._jitter * (2.0 * streams.uniform() - 1.0)
        v = np.mod(v + 1.0, 2.0) - 1.0
        u = np.abs(v)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            accepted = np.log(u) < log_ratio
            # after acceptance v <- v * pi(x) / pi(x*) keeps |v| uniform given the new state
            v = np.where(accepted, v * np.exp(-np.where(accepted, log_ratio, 0.0)), v)
        state["v"] = v
        return accepted, u

    def settings(self):
        return {"kind": self.name, "drift": self._drift, "jitter": self._jitter}

    def __repr__(self):
        return f"DriftingUniform(drift={self._drift:g}, jitter={self._jitter:g})"


def as_uniform(uniform):
    """Normalise the ``uniform=`` argument of a kernel."""
    if uniform is None:
        return FreshUniform()
    if isinstance(uniform, (FreshUniform, DriftingUniform)):
        return uniform
    if isinstance(uniform, str):
        if uniform == "fresh":
            return FreshUniform()
        if uniform == "drifting":
            return DriftingUniform()
    raise TypeError(
        "`uniform` must be None, 'fresh', 'drifting', FreshUniform() or DriftingUniform(...), "
        f"got {uniform!r}"
    )
