"""Pieces several views need: one pilot run per target, a contour-grid cache, knob ranges.

A notebook usually opens several views on one model; each used to run its own
pilot to find a region and a start. ``pilot`` runs it once per (target, seed,
chains) and keeps it as long as the target lives, so the second view on a model
opens without re-sampling.
"""

import threading
import weakref

import numpy as np

from ..core.slices import choose_limits, log_density_grid

__all__ = ["Pilot", "pilot", "GridCache", "step_size_range", "region_around"]

_PILOT_DRAWS = 100
_PILOT_WARMUP = 150
_cache = weakref.WeakKeyDictionary()  # target -> {(seed, n_chains): Pilot}
_lock = threading.Lock()


class Pilot:
    """What a short tuned HMC run says about a target (sampler's scale).

    Attributes
    ----------
    draws : ndarray, shape (chain, draw, dim)
        Kept draws on the sampler's (unconstrained) scale.
    initial : ndarray, shape (chain, dim)
        Last draw of each chain on the user's scale: starts for views' chains.
    step_size : float
        Step size dual averaging tuned to an acceptance of 0.8 (identity metric).
    sd : ndarray, shape (dim,)
        Standard deviation of each coordinate over all draws.
    error : BaseException or None
        Why the pilot failed (then ``draws`` is None and the other fields are
        fall-backs: the origin, step size 0.1, unit sd).
    """

    def __init__(self, target, draws, initial, step_size, error=None):
        self.target = target
        self.draws = draws
        self.initial = initial
        self.step_size = float(step_size)
        self.error = error
        if draws is not None:
            self.sd = np.std(draws, axis=(0, 1))
        else:
            self.sd = np.ones(target.dim)

    @property
    def ok(self):
        return self.draws is not None

    def start(self):
        """A start point on the sampler's scale: chain 0's last draw (the origin on failure)."""
        if self.draws is None:
            return np.zeros(self.target.dim)
        return self.draws[0, -1].copy()

    def region(self, coords, start=None):
        """``(xlim, ylim)`` holding 99 % of the pilot's draws of ``coords`` (padded)."""
        if self.draws is None:
            return region_around(start if start is not None else self.start(), coords)
        return choose_limits(self.draws, coords=coords, quantiles=(0.005, 0.995), pad=0.15)


def pilot(target, *, seed=0, n_chains=2):
    """The (cached) pilot run of ``target``; never raises (see ``Pilot.error``).

    Failures are not cached, so a log-density fixed by the user gets its pilot
    the next time a view opens.
    """
    from ..core.kernels import HMC
    from ..core.sampling import sample

    key = (int(seed), int(n_chains))
    with _lock:
        found = _cache.get(target, {}).get(key)
        if found is not None:
            return found
        try:
            with target.uncounted():  # a view's pilot is not the user's work
                run = sample(target, HMC(0.1, 10), n_draws=_PILOT_DRAWS, n_chains=n_chains,
                             warmup=_PILOT_WARMUP, seed=seed, mass_adaptation=None)
            found = Pilot(target, run.unconstrained, run.draws[:, -1].copy(), run.kernel.step_size)
        except Exception as exc:  # user code can raise anything: the view falls back and says so
            return Pilot(target, None, None, 0.1, error=exc)
        _cache.setdefault(target, {})[key] = found
        return found


def region_around(centre, coords, half_width=3.0):
    """``(xlim, ylim)`` boxes of +-``half_width`` around ``centre`` in ``coords``."""
    c = np.asarray(centre, dtype=float)
    i, j = coords
    return ((c[i] - half_width, c[i] + half_width), (c[j] - half_width, c[j] + half_width))


def step_size_range(step_size):
    """A slider range for a step size around a tuned value: 1/30 to 10 times it.

    Wide enough to reach both "crawls" and "diverges at once" on most targets,
    narrow enough that a few pixels of slider do not jump across it.
    """
    eps = float(step_size) if np.isfinite(step_size) and step_size > 0 else 0.1
    return eps / 30.0, eps * 10.0


class GridCache:
    """Log-density grids for contours, computed once per region, coordinates and slice.

    ``get`` returns the cached grid while ``(coords, xlim, ylim, slice)`` are
    unchanged, so per-tick redraws never re-evaluate the log-density on a grid;
    ``evaluations`` counts the grids computed (for tests).
    """

    def __init__(self, target, n=80):
        self.target = target
        self.n = int(n)
        self.key = None
        self.grid = None
        self.evaluations = 0
        self.problem = None  # a sentence when the log-density raised at some grid points

    def get(self, coords, through, xlim, ylim):
        through = np.asarray(through, dtype=float)
        rest = through.copy()
        rest[list(coords)] = 0.0  # the slice depends only on the other coordinates
        key = (tuple(coords), tuple(map(float, xlim)), tuple(map(float, ylim)),
               tuple(rest) if self.target.dim > 2 else None)
        if key != self.key:
            errors = []
            with self.target.uncounted():
                self.grid = log_density_grid(self.target, tuple(coords), through, xlim, ylim,
                                             n=self.n, errors=errors)
            self.problem = None
            if errors:
                failed, exc = errors[0]
                self.problem = (f"the log-density raised {type(exc).__name__} ({exc}) at {failed} "
                                f"of {self.n * self.n} contour grid points; they are left blank")
            self.key = key
            self.evaluations += 1
        return self.grid
