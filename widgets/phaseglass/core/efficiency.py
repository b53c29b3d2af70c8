"""ESS per gradient evaluation: what a run's effective draws cost, defined once.

The digest, the report, ``draw_ess_per_gradient``, ChainView's readout and
TuningMap's cells all call ``ess_per_gradient``; none computes it itself.
``mean_acceptance`` is the one acceptance number of a comparison cell and a
TuningMap cell.
"""

import numpy as np

from . import diagnostics as dg

__all__ = ["ess_per_gradient", "evaluation_cost", "mean_acceptance", "MIN_ESS_DRAWS"]

#: Fewer draws per chain than this and ESS per gradient is NaN. Measured here (2000 sets of
#: independent normal draws, 2 or 4 chains): with 8 draws per chain the bulk ESS sits at the
#: estimator's cap S log10 S in about two sets of three, with 20 in 13-28 %, with 30 in 2-11 %;
#: a number that is mostly the cap says nothing about the sampler.
MIN_ESS_DRAWS = 20


def mean_acceptance(run):
    """Mean acceptance probability ``min(1, exp(-dH))`` over a run's kept transitions and chains.

    A divergent transition counts 0 (as recorded), and so does a missing (NaN) entry.
    Less noisy than the share of accepted proposals, with the same expectation.
    """
    return float(np.mean(np.nan_to_num(np.asarray(run.accept_prob, dtype=float), nan=0.0)))


def evaluation_cost(run):
    """The work behind a run's kept transitions: ``(count, unit)``.

    Gradient evaluations for a kernel that uses gradients; otherwise one
    log-density evaluation per chain per transition (a Metropolis proposal's),
    so gradient-free kernels can be compared on their own unit.

    Returns
    -------
    count : int
    unit : str
        ``"gradient evaluation"`` or ``"log-density evaluation"``.
    """
    if getattr(run.kernel, "uses_gradient", True):
        return run.total_grad, "gradient evaluation"
    return run.n_chains * run.n_draws, "log-density evaluation"


def ess_per_gradient(run, *, per_coordinate=False, cost=None):
    """Bulk ESS per gradient evaluation of a run.

    The bulk ESS (``diagnostics.ess(draws, "bulk")``, chains pooled) divided by
    ``cost``. By default the worst coordinate counts: the smallest bulk ESS over
    the coordinates, the number that says how long the run must be for every
    coordinate.

    Parameters
    ----------
    run : Run
    per_coordinate : bool
        Return every coordinate's value instead of the smallest.
    cost : int, optional
        The denominator; default ``run.total_grad``, the gradient evaluations of
        the kept transitions. Views that also show gradient-free kernels pass
        ``evaluation_cost(run)[0]``.

    Returns
    -------
    float, or ndarray of shape (dim,) with ``per_coordinate``
        NaN with fewer than ``MIN_ESS_DRAWS`` draws per chain, a zero cost, or
        no finite ESS (a coordinate's NaN under ``per_coordinate``). 0 when some
        chain never moved: a stuck chain is not mixing, whatever the spread
        between chains makes the ESS estimate say.

    Examples
    --------
    >>> import phaseglass as pg
    >>> run = pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 5), n_draws=200, seed=1)
    >>> 0 < ess_per_gradient(run) < 1
    True
    """
    cost = run.total_grad if cost is None else cost
    nan = np.full(run.dim, np.nan)
    if run.n_draws < MIN_ESS_DRAWS or not cost > 0:
        return nan if per_coordinate else float("nan")
    x = run.draws
    if not np.all(np.ptp(x, axis=1).max(axis=-1) > 0):
        return np.zeros(run.dim) if per_coordinate else 0.0
    with np.errstate(all="ignore"):
        e = np.atleast_1d(dg.ess(x, method="bulk")) / cost
    if per_coordinate:
        return e
    return float(np.nanmin(e)) if np.any(np.isfinite(e)) else float("nan")
