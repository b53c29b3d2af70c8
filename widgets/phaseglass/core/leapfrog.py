"""Leapfrog integration of Hamiltonian dynamics, with divergences recorded as data."""

from dataclasses import dataclass

import numpy as np

from ._validate import MAX_STEPS, as_points, check_finite, check_int, check_positive
from .metric import as_metric

__all__ = ["leapfrog", "leapfrog_step", "Trajectory", "DEFAULT_MAX_ENERGY_ERROR"]

#: Energy error beyond which a trajectory is called divergent (common practice).
DEFAULT_MAX_ENERGY_ERROR = 1000.0


def leapfrog_step(position, momentum, grad, step_size, velocity, value_and_grad):
    """One leapfrog (velocity Verlet) step on arrays.

    Parameters
    ----------
    position, momentum, grad : ndarray, shape (n, dim)
        Current state; ``grad`` is the gradient of the log-density at ``position``.
    step_size : float or ndarray, shape (n, 1)
    velocity : callable
        ``velocity(p)`` returns ``M^-1 p``.
    value_and_grad : callable
        ``value_and_grad(q)`` returns ``(log_density (n,), grad (n, dim))``.

    Returns
    -------
    position, momentum, log_density, grad
    """
    return _kick_drift_kick(position, momentum, grad, step_size, 0.5 * step_size, velocity,
                            value_and_grad)


def _kick_drift_kick(position, momentum, grad, step_size, half_step, velocity, value_and_grad):
    """``leapfrog_step`` with ``half_step = 0.5 * step_size`` computed once by the caller."""
    p_half = momentum + half_step * grad
    q_new = position + step_size * velocity(p_half)
    logp_new, grad_new = value_and_grad(q_new)
    p_new = p_half + half_step * grad_new
    return q_new, p_new, logp_new, grad_new


class _Integration:
    """Outcome of integrating a batch of chains (internal; see ``Trajectory``).

    Arrays are shaped (n,) or (n, dim); recorded arrays (when asked) are
    (n_steps + 1, n, ...) with NaN after a chain stopped.
    """

    __slots__ = ("position", "momentum", "logp", "grad", "h0", "h_end", "divergent",
                 "divergence_step", "n_grad", "record")


def _same(p):
    return p


def _velocity_of(metric):
    """``metric.velocity`` without its per-call dispatch on the kind (same products)."""
    if metric.kind == "identity":
        return _same
    if metric.kind == "diagonal":
        return metric.inverse_mass.__mul__  # inverse_mass * p, equal to p * inverse_mass
    return metric.velocity


def integrate(target, position, momentum, logp, grad, step_size, n_steps, metric,
              max_energy_error=DEFAULT_MAX_ENERGY_ERROR, record=False):
    """Integrate a batch of chains; each stops at its first non-finite value or large energy error.

    All arrays are (n, dim) or (n,); ``step_size`` is a scalar or (n,). The
    returned state of a chain that diverged is its last finite state. Only the
    rows still moving are evaluated, so gradient counts are honest per chain.
    """
    n, dim = position.shape
    if n == 1 and not record:
        return _integrate_one(target, position, momentum, logp, grad, step_size, n_steps, metric,
                              max_energy_error)
    scalar = getattr(step_size, "ndim", 0) == 0  # np.ndim costs a microsecond on a float
    if n == 1 or scalar:
        # one step size for every chain: the same products with a Python float, which
        # numpy applies faster than a broadcast (n, 1) array
        eps_all = float(step_size) if scalar else float(np.ravel(step_size)[0])
        half_all = 0.5 * eps_all
        eps = half = None  # (n, 1) arrays, made only if a chain stops early
    else:
        eps = np.empty((n, 1))
        eps[:, 0] = step_size  # (n,)
        half = 0.5 * eps
        eps_all, half_all = eps, half
    velocity = metric.velocity
    kinetic = metric.kinetic
    vg = target._value_and_grad_rows
    h0 = -logp + kinetic(momentum)
    q, p, lp, g = position, momentum, logp, grad
    h_end = h0.copy()
    divergence_step = None  # (n,) made at the first divergence; -1 for chains that ran through
    active = None  # None means every chain is still moving
    rec = None
    if record:
        rec = {
            "positions": np.full((n_steps + 1, n, dim), np.nan),
            "momenta": np.full((n_steps + 1, n, dim), np.nan),
            "potential": np.full((n_steps + 1, n), np.nan),
            "kinetic": np.full((n_steps + 1, n), np.nan),
        }
        rec["positions"][0], rec["momenta"][0] = q, p
        rec["potential"][0], rec["kinetic"][0] = -lp, h0 + lp
    # The loop while every chain moves is written out with the metric's own products
    # (the same operations, in the same order, as _kick_drift_kick and Metric.kinetic),
    # so a step costs as few numpy calls as it can: this is the sampler's hot path.
    fast_velocity = _velocity_of(metric)
    add_reduce, max_reduce, absolute = np.add.reduce, np.maximum.reduce, np.abs
    with np.errstate(all="ignore"):
        for k in range(1, n_steps + 1):
            if active is None:
                p_half = p + half_all * g
                qn = q + eps_all * fast_velocity(p_half)
                lpn, gn = vg(qn)
                pn = p_half + half_all * gn
                kn = 0.5 * add_reduce(pn * fast_velocity(pn), axis=-1)
                hn = kn - lpn
                err = hn - h0
                # |err| <= max is False for NaN too (max_reduce propagates NaN). A
                # non-finite gradient always shows up here: it makes the new momentum,
                # hence the kinetic energy (a positive-definite form, so nothing cancels)
                # and the energy error, non-finite.
                if rec is None and max_reduce(absolute(err)) <= max_energy_error:
                    q, p, lp, g, h_end = qn, pn, lpn, gn, hn
                    continue
                idx = slice(None)
            else:
                idx = np.flatnonzero(active)
                if idx.size == 0:
                    break
                qn, pn, lpn, gn = _kick_drift_kick(q[idx], p[idx], g[idx], eps[idx], half[idx],
                                                   velocity, vg)
                kn = kinetic(pn)
                hn = kn - lpn
                err = hn - h0[idx]
            if rec is not None:
                rec["positions"][k, idx], rec["momenta"][k, idx] = qn, pn
                rec["potential"][k, idx], rec["kinetic"][k, idx] = -lpn, kn
            if max_reduce(absolute(err)) <= max_energy_error:
                if active is None:
                    q, p, lp, g, h_end = qn, pn, lpn, gn, hn
                else:
                    q[idx], p[idx], lp[idx], g[idx], h_end[idx] = qn, pn, lpn, gn, hn
                continue
            bad = ~(np.abs(err) <= max_energy_error)
            if active is None:
                active = np.ones(n, dtype=bool)
                q, p, lp, g = q.copy(), p.copy(), lp.copy(), g.copy()
                idx = np.arange(n)
                divergence_step = np.full(n, -1)
                if eps is None:
                    eps = np.full((n, 1), eps_all)
                    half = 0.5 * eps
            ok, stop = idx[~bad], idx[bad]
            q[ok], p[ok], lp[ok], g[ok], h_end[ok] = qn[~bad], pn[~bad], lpn[~bad], gn[~bad], hn[~bad]
            h_end[stop] = hn[bad]
            divergence_step[stop] = k
            active[stop] = False
    out = _Integration()
    out.position, out.momentum, out.logp, out.grad = q, p, lp, g
    out.h0, out.h_end = h0, h_end
    if divergence_step is None:  # every chain ran through
        out.divergent = np.zeros(n, dtype=bool)
        out.divergence_step = np.full(n, -1)
        out.n_grad = np.full(n, n_steps)
    else:
        out.divergent = divergence_step >= 0
        out.divergence_step = divergence_step
        # one gradient per step taken: a chain that stopped at step k evaluated k of them
        out.n_grad = np.where(out.divergent, divergence_step, n_steps)
    out.record = rec
    return out


def _integrate_one(target, q, p, logp, grad, step_size, n_steps, metric, max_energy_error):
    """``integrate`` for one chain without recording: energies as Python floats.

    The same arithmetic on the same (1, dim) arrays as the batch loop, with the
    per-step energy check done on scalars (a one-chain sampler is the case
    where Python overhead per leapfrog step shows against cheap gradients).
    """
    eps = float(np.ravel(step_size)[0])
    half = 0.5 * eps
    velocity = metric.velocity
    vg = target._value_and_grad_rows
    dot = np.dot

    def kinetic(mom):
        return 0.5 * float(dot(mom[0], velocity(mom)[0]))

    h0 = kinetic(p) - float(logp[0])
    h_end = h0
    step = -1
    with np.errstate(all="ignore"):
        for k in range(1, n_steps + 1):
            p_half = p + half * grad
            qn = q + eps * velocity(p_half)
            lpn, gn = vg(qn)
            pn = p_half + half * gn
            hn = kinetic(pn) - float(lpn[0])
            if not abs(hn - h0) <= max_energy_error:  # False for NaN too
                step, h_end = k, hn
                break
            q, p, logp, grad, h_end = qn, pn, lpn, gn, hn
    out = _Integration()
    out.position, out.momentum, out.logp, out.grad = q, p, logp, grad
    out.h0, out.h_end = np.array([h0]), np.array([h_end])
    out.divergence_step = np.array([step])
    out.divergent = out.divergence_step >= 0
    out.n_grad = np.array([step if step >= 0 else n_steps])
    out.record = None
    return out


@dataclass(frozen=True, repr=False)
class Trajectory:
    """A leapfrog trajectory, with energies per step and where it diverged.

    For one chain the arrays are shaped as below; for a batch every field has a
    leading chain axis (``divergent`` and ``divergence_step`` become arrays).

    Attributes
    ----------
    positions, momenta : ndarray, shape (n_steps + 1, dim)
        Row 0 is the start. After a divergence at step k, rows > k are NaN
        (row k holds the values that triggered it).
    potential, kinetic, hamiltonian, energy_error : ndarray, shape (n_steps + 1,)
        Potential is -log density, kinetic is 0.5 p^T M^-1 p, and
        ``energy_error = hamiltonian - hamiltonian[0]``.
    divergent : bool
    divergence_step : int or None
    step_size : float
    n_steps : int
    max_energy_error : float
    """

    positions: np.ndarray
    momenta: np.ndarray
    potential: np.ndarray
    kinetic: np.ndarray
    hamiltonian: np.ndarray
    energy_error: np.ndarray
    divergent: object
    divergence_step: object
    step_size: object
    n_steps: int
    max_energy_error: float

    @property
    def length(self):
        """Integration time ``step_size * n_steps``."""
        return np.asarray(self.step_size) * self.n_steps

    def __repr__(self):
        if self.positions.ndim == 2:
            where = f"divergent at step {self.divergence_step}" if self.divergent else "no divergence"
            final = self.energy_error[np.isfinite(self.energy_error)][-1]
            return (f"Trajectory(n_steps={self.n_steps}, step_size={float(self.step_size):.4g}, "
                    f"dim={self.positions.shape[1]}, final energy error {final:.3g}, {where})")
        return (f"Trajectory(batch of {self.positions.shape[0]} chains, n_steps={self.n_steps}, "
                f"dim={self.positions.shape[2]}, {int(np.sum(self.divergent))} divergent)")


def one_chain(trajectory, chain=0):
    """Return one chain's Trajectory from a batch Trajectory (a single one is returned as is).

    The one way to take a chain out of a batch: the sampler's divergence records,
    previews and every drawing use it.

    Parameters
    ----------
    trajectory : Trajectory
        Single (positions (n_steps + 1, dim)) or batch (chains, n_steps + 1, dim).
    chain : int
    """
    if not isinstance(trajectory, Trajectory):
        raise TypeError(f"`trajectory` must be a phaseglass Trajectory, got {type(trajectory).__name__}")
    if trajectory.positions.ndim == 2:
        return trajectory
    n = trajectory.positions.shape[0]
    if not -n <= chain < n:
        raise ValueError(f"`chain` must be in range({n}) for this batch, got {chain}")
    div = bool(trajectory.divergent[chain])
    eps = np.asarray(trajectory.step_size).reshape(-1)
    return Trajectory(
        positions=trajectory.positions[chain], momenta=trajectory.momenta[chain],
        potential=trajectory.potential[chain], kinetic=trajectory.kinetic[chain],
        hamiltonian=trajectory.hamiltonian[chain], energy_error=trajectory.energy_error[chain],
        divergent=div, divergence_step=int(trajectory.divergence_step[chain]) if div else None,
        step_size=float(eps[chain] if eps.size > 1 else eps[0]), n_steps=trajectory.n_steps,
        max_energy_error=trajectory.max_energy_error,
    )


def trajectory_from(integration, step_size, n_steps, max_energy_error, single):
    """Build the public Trajectory from a recorded integration."""
    rec = integration.record
    ham = rec["potential"] + rec["kinetic"]
    err = ham - ham[0]
    div = integration.divergent
    step = integration.divergence_step
    if single:
        return Trajectory(
            positions=rec["positions"][:, 0], momenta=rec["momenta"][:, 0],
            potential=rec["potential"][:, 0], kinetic=rec["kinetic"][:, 0],
            hamiltonian=ham[:, 0], energy_error=err[:, 0], divergent=bool(div[0]),
            divergence_step=int(step[0]) if div[0] else None,
            step_size=float(np.asarray(step_size).reshape(-1)[0]), n_steps=n_steps,
            max_energy_error=max_energy_error,
        )
    return Trajectory(
        positions=np.moveaxis(rec["positions"], 0, 1), momenta=np.moveaxis(rec["momenta"], 0, 1),
        potential=rec["potential"].T, kinetic=rec["kinetic"].T, hamiltonian=ham.T,
        energy_error=err.T, divergent=div.copy(),
        divergence_step=np.where(div, step, -1), step_size=step_size, n_steps=n_steps,
        max_energy_error=max_energy_error,
    )


def leapfrog(target, position, momentum, step_size, n_steps, *, metric=None,
             max_energy_error=DEFAULT_MAX_ENERGY_ERROR):
    """Integrate Hamiltonian dynamics with the leapfrog scheme and record every step.

    Parameters
    ----------
    target : Target
    position, momentum : array_like, shape (dim,) or (chains, dim)
        Start on the sampler's scale. A 2-D position gives a batch.
    step_size : float > 0, or array (chains,) for a batch
    n_steps : int >= 1
    metric : Metric or array, optional
        Inverse mass matrix; identity by default.
    max_energy_error : float
        The integration stops (and is marked divergent) at the first
        non-finite value or when ``|energy error|`` exceeds this (1000 is
        common practice).

    Returns
    -------
    Trajectory
        Shapes (n_steps + 1, dim) for one chain, (chains, n_steps + 1, dim) for a batch.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> t = pg.Target(lambda x: -0.5 * x @ x, lambda x: -x, dim=1)
    >>> tr = pg.leapfrog(t, [1.0], [0.0], 0.1, 10)
    >>> tr.positions.shape, bool(tr.divergent)
    ((11, 1), False)
    """
    from .target import Target

    if not isinstance(target, Target):
        raise TypeError(f"`target` must be a phaseglass Target, got {type(target).__name__}")
    q, single = as_points("position", position, target.dim)
    p, single_p = as_points("momentum", momentum, target.dim)
    check_finite("position", q)
    check_finite("momentum", p)
    if q.shape != p.shape:
        raise ValueError(f"`momentum` must have the shape of `position` {q.shape}, got {p.shape}")
    step_size = check_positive("step_size", step_size, allow_array=True)
    if np.ndim(step_size) > 0 and np.shape(step_size) != (q.shape[0],):
        raise ValueError(f"`step_size` must be a scalar or shape ({q.shape[0]},), got {np.shape(step_size)}")
    n_steps = check_int("n_steps", n_steps, minimum=1, maximum=MAX_STEPS)
    max_energy_error = check_positive("max_energy_error", max_energy_error)
    metric = as_metric(metric, target.dim)
    with np.errstate(all="ignore"):
        logp, grad = target._value_and_grad_rows(q)
    result = integrate(target, q, p, logp, grad, step_size, n_steps, metric, max_energy_error, record=True)
    return trajectory_from(result, step_size, n_steps, max_energy_error, single and single_p)
