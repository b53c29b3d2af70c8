"""Transition kernels acting on a batch of chains.

A kernel holds its knobs as plain (validated) attributes, so a widget can
change them between transitions. ``Kernel.transition`` does the shared
bookkeeping; subclasses implement ``_transition``. The per-chain state that
must survive between calls (persistent momentum, the drifting uniform) lives
in ``ChainState.extra``, owned by the caller (``Sampler``), never in the kernel.
"""

import copy

import numpy as np

from ._validate import MAX_STEPS, check_fraction, check_int, check_positive
from .leapfrog import DEFAULT_MAX_ENERGY_ERROR, integrate, trajectory_from
from .metric import Metric, as_metric
from .uniforms import as_uniform

__all__ = ["ChainState", "Kernel", "HMC", "PartialRefreshHMC", "RandomWalk"]


class ChainState:
    """Current state of a batch of chains (sampler scale).

    Attributes
    ----------
    position : ndarray, shape (n_chains, dim)
    logp : ndarray, shape (n_chains,)
    grad : ndarray, shape (n_chains, dim), or None for gradient-free kernels
    extra : dict
        Kernel-specific state (for example ``"momentum"`` or ``"uniform"``).
    """

    __slots__ = ("position", "logp", "grad", "extra")

    def __init__(self, position, logp, grad=None, extra=None):
        self.position = position
        self.logp = logp
        self.grad = grad
        self.extra = {} if extra is None else extra

    def copy(self):
        return ChainState(self.position.copy(), self.logp.copy(),
                          None if self.grad is None else self.grad.copy(),
                          copy.deepcopy(self.extra))

    def __repr__(self):
        n, d = self.position.shape
        return f"ChainState({n} chains, dim={d}, extra={sorted(self.extra)})"


class _Knob:
    """A validated attribute: ``check(name, value)`` returns the stored value."""

    def __init__(self, check):
        self.check = check

    def __set_name__(self, owner, name):
        self.name = name
        self.slot = "_" + name

    def __get__(self, obj, owner=None):
        return self if obj is None else getattr(obj, self.slot)

    def __set__(self, obj, value):
        setattr(obj, self.slot, self.check(self.name, value))


def _positive(name, value):
    return check_positive(name, value)


def _steps(name, value):
    return check_int(name, value, minimum=1, maximum=MAX_STEPS)


def _metric(name, value):
    return as_metric(value)


def _uniform(name, value):
    return as_uniform(value)


def _jitter(name, value):
    value = check_positive(name, value, allow_zero=True)
    if value >= 1:
        raise ValueError(f"`{name}` must be a fraction in [0, 1), got {value!r}")
    return value


class Kernel:
    """Base class: one transition of a batch of chains.

    Subclasses set the class attributes below and implement ``_transition``.

    Attributes
    ----------
    uses_gradient : bool
    tuned_knob : str or None
        Name of the attribute that warm-up tunes by dual averaging.
    default_target_accept : float
    shared_stream : bool
        Whether all chains consume one random stream.
    u_per_coordinate : bool
        Whether the recorded ``u`` holds one value per coordinate (Gibbs) rather
        than one per transition.
    moves_when_divergent : bool
        Whether a divergent transition can still move the chain (so its recorded
        draw is not where it started); see ``triage.transition_starts``.
    """

    uses_gradient = True
    tuned_knob = None
    default_target_accept = 0.8
    shared_stream = False
    u_per_coordinate = False
    moves_when_divergent = False
    metric = Metric()

    def prepare(self, target):
        """Check the kernel fits ``target`` (called by the sampler before the first transition)."""
        self.metric.check_dim(target.dim, "metric")

    def init_extra(self, target, state, streams):
        """Return the kernel-specific per-chain state for a fresh batch."""
        return {}

    def metric_changed(self, state):
        """Hook for kernels whose state depends on the metric (called after warm-up changes it)."""

    def transition(self, target, state, streams, record=False):
        """Advance every chain by one transition, updating ``state`` in place.

        Returns
        -------
        dict of ndarray, each shaped (n_chains, ...)
            At least ``accepted``, ``accept_prob``, ``energy``, ``energy_error``,
            ``divergent``, ``n_grad`` and ``u``. With ``record=True`` the
            ``"trajectory"`` key holds the batch Trajectory (or None).
        """
        info = self._transition(target, state, streams, record)
        if not record:
            info.pop("trajectory", None)
        return info

    def _transition(self, target, state, streams, record):
        raise NotImplementedError

    def settings(self):
        """JSON-friendly description; ``registry.kernel_from_settings`` rebuilds the kernel."""
        raise NotImplementedError

    def copy(self):
        return copy.deepcopy(self)

    def __repr__(self):
        knobs = ", ".join(f"{k}={v!r}" for k, v in self.settings().items() if k != "kernel")
        return f"{type(self).__name__}({knobs})"


class _Hamiltonian(Kernel):
    """Shared machinery of leapfrog-based kernels."""

    uses_gradient = True
    tuned_knob = "step_size"
    step_size = _Knob(_positive)
    n_steps = _Knob(_steps)
    metric = _Knob(_metric)
    uniform = _Knob(_uniform)
    max_energy_error = _Knob(_positive)

    def init_extra(self, target, state, streams):
        return {"uniform": self.uniform.init_state(state.position.shape[0], streams)}

    def _integrate(self, target, state, momentum, eps, record):
        return integrate(target, state.position, momentum, state.logp, state.grad, eps,
                         self.n_steps, self.metric, self.max_energy_error, record)

    def _decide(self, state, run, streams):
        """Metropolis decision on an integrated batch; moves accepted chains. Returns (accepted, info)."""
        div = run.divergent
        with np.errstate(invalid="ignore", over="ignore"):
            delta = run.h_end - run.h0
            log_ratio = np.where(div, -np.inf, -delta)
            accept_prob = np.where(div, 0.0, np.exp(np.minimum(0.0, log_ratio)))
        ustate = state.extra.setdefault("uniform", {})
        accepted, u = self.uniform.decide(ustate, log_ratio, streams)
        accepted = accepted & ~div
        if accepted.size == 1:  # one chain: move by reference, no array selection
            if accepted[0]:
                state.position, state.logp, state.grad = run.position, run.logp, run.grad
        else:
            acc = accepted[:, None]
            state.position = np.where(acc, run.position, state.position)
            state.logp = np.where(accepted, run.logp, state.logp)
            state.grad = np.where(acc, run.grad, state.grad)
        info = {
            "accepted": accepted,
            "accept_prob": accept_prob,
            "energy": np.where(accepted, run.h_end, run.h0),
            "energy_error": delta,
            "divergent": div,
            "n_grad": run.n_grad,
            "u": u,
        }
        return accepted, info

    def _trajectory(self, run, eps, record):
        if not record:
            return None
        return trajectory_from(run, eps, self.n_steps, self.max_energy_error, single=False)


class HMC(_Hamiltonian):
    """Hamiltonian Monte Carlo with a fixed number of leapfrog steps.

    Each transition draws a fresh momentum from N(0, M), integrates
    ``n_steps`` leapfrog steps, negates the momentum and accepts or rejects by
    the Metropolis rule (Duane, Kennedy, Pendleton & Roweth 1987, "Hybrid
    Monte Carlo", Phys. Lett. B; Neal 2011, "MCMC using Hamiltonian dynamics",
    Handbook of MCMC, ch. 5).

    Parameters
    ----------
    step_size : float > 0
    n_steps : int >= 1
    metric : Metric or array, optional
        Inverse mass matrix (identity by default).
    uniform : FreshUniform, DriftingUniform or str, optional
        Source of the accept/reject uniform; fresh by default.
    jitter : float in [0, 1)
        Each transition (and chain) uses a step size drawn uniformly within
        +-``jitter`` (a fraction) of ``step_size``, so fixed-length trajectories
        cannot lock into a periodic orbit (common practice, Handbook of MCMC
        2011, ch. 5). 0 turns it off.
    max_energy_error : float
        Largest ``|energy error|`` before a transition counts as divergent
        (1000, common practice).

    Examples
    --------
    >>> import phaseglass as pg
    >>> k = pg.HMC(0.2, 10)
    >>> k.step_size = 0.3    # knobs are plain attributes, validated on assignment
    """

    jitter = _Knob(_jitter)

    def __init__(self, step_size, n_steps, *, metric=None, uniform=None, jitter=0.1,
                 max_energy_error=DEFAULT_MAX_ENERGY_ERROR):
        self.step_size = step_size
        self.n_steps = n_steps
        self.metric = metric
        self.uniform = uniform
        self.jitter = jitter
        self.max_energy_error = max_energy_error

    def _transition(self, target, state, streams, record):
        n, dim = state.position.shape
        if self.jitter > 0:
            eps = self.step_size * (1.0 + self.jitter * (2.0 * streams.uniform() - 1.0))
        else:
            eps = np.full(n, self.step_size)
        momentum = self.metric.momentum_from_normal(streams.normal(dim))
        run = self._integrate(target, state, momentum, eps, record)
        _, info = self._decide(state, run, streams)
        info["step_size"] = eps
        info["start_momentum"] = momentum
        info["trajectory"] = self._trajectory(run, eps, record)
        return info

    def settings(self):
        return {"kernel": "HMC", "step_size": self.step_size, "n_steps": self.n_steps,
                "jitter": self.jitter, "max_energy_error": self.max_energy_error,
                "metric": self.metric.as_dict(), "uniform": self.uniform.settings()}


class PartialRefreshHMC(_Hamiltonian):
    """Generalised HMC with partial momentum refresh (persistent momentum).

    Each transition sets ``p <- a p + sqrt(1 - a^2) xi`` with ``xi ~ N(0, M)``
    and ``a`` the persistence, integrates ``n_steps`` leapfrog steps, negates
    the momentum, accepts or rejects, and negates the momentum again: an
    accepted move keeps its direction, a rejection reverses it
    (A. M. Horowitz, "A generalized guided Monte Carlo algorithm",
    Phys. Lett. B 268, 1991). With ``n_steps=1`` and persistence near 1 this
    is one-step HMC with persistent momentum; ``persistence=0`` is an ordinary
    full refresh.

    Parameters
    ----------
    step_size : float > 0
    n_steps : int >= 1
    persistence : float in [0, 1)
    metric, uniform : as for ``HMC``
    max_energy_error : float

    Notes
    -----
    The default warm-up target acceptance is 0.9 rather than 0.8: every
    rejection reverses the momentum and undoes the persistence, so schemes
    with one step and high persistence need rare rejections to move far
    (common practice for persistent-momentum schemes; our choice). Pair it
    with ``DriftingUniform`` so the rejections that do happen cluster.
    """

    persistence = _Knob(check_fraction)
    default_target_accept = 0.9

    def __init__(self, step_size, n_steps=1, persistence=0.9, *, metric=None, uniform=None,
                 max_energy_error=DEFAULT_MAX_ENERGY_ERROR):
        self.step_size = step_size
        self.n_steps = n_steps
        self.persistence = persistence
        self.metric = metric
        self.uniform = uniform
        self.max_energy_error = max_energy_error

    def init_extra(self, target, state, streams):
        extra = super().init_extra(target, state, streams)
        extra["momentum"] = None  # first transition refreshes fully
        return extra

    def metric_changed(self, state):
        state.extra["momentum"] = None

    def _transition(self, target, state, streams, record):
        n, dim = state.position.shape
        noise = self.metric.momentum_from_normal(streams.normal(dim))
        old = state.extra.get("momentum")
        a = self.persistence
        momentum = noise if old is None else a * old + np.sqrt(1.0 - a * a) * noise
        eps = np.full(n, self.step_size)
        run = self._integrate(target, state, momentum, eps, record)
        accepted, info = self._decide(state, run, streams)
        # accepted: (q*, -p*) then negate -> p*; rejected: (q, p) then negate -> -p
        state.extra["momentum"] = np.where(accepted[:, None], run.momentum, -momentum)
        info["energy"] = np.where(accepted, run.h_end, run.h0)
        info["reversed"] = ~accepted
        info["step_size"] = eps
        info["start_momentum"] = momentum
        info["trajectory"] = self._trajectory(run, eps, record)
        return info

    def settings(self):
        return {"kernel": "PartialRefreshHMC", "step_size": self.step_size,
                "n_steps": self.n_steps, "persistence": self.persistence,
                "max_energy_error": self.max_energy_error,
                "metric": self.metric.as_dict(), "uniform": self.uniform.settings()}


class RandomWalk(Kernel):
    """Gaussian random-walk Metropolis: the gradient-free baseline.

    Proposes ``x* = x + scale * xi`` with ``xi ~ N(0, inverse_mass)`` (the
    metric's inverse mass acts as the proposal covariance) and accepts by the
    Metropolis rule. Warm-up tunes ``scale`` toward an acceptance of 0.234
    (Roberts, Gelman & Gilks 1997, "Weak convergence and optimal scaling of
    random walk Metropolis algorithms", Ann. Appl. Probab.).

    Parameters
    ----------
    scale : float > 0
    metric : Metric or array, optional
    uniform : FreshUniform, DriftingUniform or str, optional
    """

    uses_gradient = False
    tuned_knob = "scale"
    default_target_accept = 0.234
    scale = _Knob(_positive)
    metric = _Knob(_metric)
    uniform = _Knob(_uniform)

    def __init__(self, scale, *, metric=None, uniform=None):
        self.scale = scale
        self.metric = metric
        self.uniform = uniform

    def init_extra(self, target, state, streams):
        return {"uniform": self.uniform.init_state(state.position.shape[0], streams)}

    def _transition(self, target, state, streams, record):
        n, dim = state.position.shape
        step = self.scale * self.metric.spread_from_normal(streams.normal(dim))
        proposal = state.position + step
        with np.errstate(all="ignore"):
            logp_new = target.log_density(proposal)
            log_ratio = np.where(np.isfinite(logp_new), logp_new - state.logp, -np.inf)
            accept_prob = np.exp(np.minimum(0.0, log_ratio))
        accepted, u = self.uniform.decide(state.extra.setdefault("uniform", {}), log_ratio, streams)
        state.position = np.where(accepted[:, None], proposal, state.position)
        state.logp = np.where(accepted, logp_new, state.logp)
        return {
            "accepted": accepted,
            "accept_prob": accept_prob,
            "energy": -state.logp,
            "energy_error": -log_ratio,
            "divergent": np.zeros(n, dtype=bool),
            "n_grad": np.zeros(n, dtype=int),
            "u": u,
            "step_size": np.full(n, self.scale),
        }

    def settings(self):
        return {"kernel": "RandomWalk", "scale": self.scale, "metric": self.metric.as_dict(),
                "uniform": self.uniform.settings()}
