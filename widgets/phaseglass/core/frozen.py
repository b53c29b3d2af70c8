"""Frozen ``scipy.stats`` distributions as Gibbs conditionals: built cheaply, evaluated at once.

A Gibbs conditional is built for every coordinate of every chain at every sweep.
``scipy.stats.norm(loc, scale)`` spends about 0.4 ms of scipy's own set-up on
each frozen object (a private copy of the family with its docstrings; scipy
issue gh-22510), far more than the sweep itself. ``freeze`` gives the same frozen
distribution in about a microsecond, and ``frozen_batch`` / ``frozen_values``
evaluate the ``ppf`` and ``cdf`` of all chains in one call of the family's own
vectorised functions, skipping scipy's per-call argument handling where every
parameter is valid: the same arithmetic, so the same numbers bit for bit.
"""

import sys

import numpy as np

__all__ = ["BATCHED_FAMILIES", "freeze", "frozen_batch", "frozen_values"]


#: scipy.stats families whose frozen distributions are evaluated for all chains in one call.
#: Each is checked in the tests to give, chain by chain, exactly the per-chain call's numbers.
BATCHED_FAMILIES = frozenset({
    "norm", "truncnorm", "uniform", "expon", "gamma", "invgamma", "beta", "lognorm", "t",
    "cauchy", "laplace", "logistic", "halfnorm", "chi2", "weibull_min",
})


def freeze(family, *args, **kwds):
    """The frozen distribution ``family(*args, **kwds)``, built in about a microsecond.

    A drop-in for scipy's own freezing inside a Gibbs ``conditionals`` function:
    write ``pg.freeze(scipy.stats.truncnorm, a, b, loc=m, scale=s)`` where you
    would write ``scipy.stats.truncnorm(a, b, loc=m, scale=s)``. The result is a
    scipy frozen distribution (every method is scipy's, with the same numbers);
    it skips the private copy of the family that scipy makes for every frozen
    object, which costs about 0.4 ms (``benchmarks/core.py --gibbs-only``).

    Parameters
    ----------
    family : scipy.stats continuous distribution
        The family itself, e.g. ``scipy.stats.norm`` (not called, not frozen).
    *args, **kwds
        Its shape parameters, ``loc`` and ``scale``, as scipy takes them (arrays
        work, e.g. one value per chain with ``Gibbs(vectorized=True)``).

    Returns
    -------
    scipy.stats frozen distribution
        An instance of scipy's ``rv_continuous_frozen``. Its random state is its
        own: setting ``random_state`` never changes the family's.

    Raises
    ------
    TypeError
        When ``family`` is not a scipy.stats continuous distribution family.

    Examples
    --------
    >>> import scipy.stats, phaseglass as pg
    >>> d = pg.freeze(scipy.stats.truncnorm, -1.0, 2.0, loc=0.5, scale=2.0)
    >>> bool(d.ppf(0.3) == scipy.stats.truncnorm(-1.0, 2.0, loc=0.5, scale=2.0).ppf(0.3))
    True
    """
    import scipy.stats

    if not isinstance(family, scipy.stats.rv_continuous):
        if isinstance(family, scipy.stats.rv_discrete):
            why = ("a discrete family: Gibbs updates by inverse CDF need a continuous "
                   "distribution; use scipy's own freezing for other uses")
        elif hasattr(family, "dist") and hasattr(family, "args"):
            why = ("an already frozen distribution; pass the family (scipy.stats.norm), "
                   "then its parameters")
        elif isinstance(family, type):
            why = ("a class; pass the family instance scipy.stats provides "
                   "(scipy.stats.norm, not scipy.stats._continuous_distns.norm_gen)")
        else:
            why = "pass the family object scipy.stats provides"
        raise TypeError(f"`family` must be a scipy.stats continuous distribution family such as "
                        f"scipy.stats.norm, got {type(family).__name__}: {why}")
    from ._frozen_class import LightFrozen

    return LightFrozen(family, *args, **kwds)


def _frozen_types():
    """The frozen classes recognised here (none while scipy.stats is not imported)."""
    infra = sys.modules.get("scipy.stats._distn_infrastructure")
    if infra is None or sys.modules.get("scipy.stats") is None:
        return ()
    light = sys.modules.get(f"{__package__}._frozen_class")
    return (infra.rv_continuous_frozen,) + ((light.LightFrozen,) if light else ())


def _family(dist):
    """The scipy.stats module-level family behind a frozen ``dist``, if recognised, else None."""
    name = getattr(dist.dist, "name", None)
    family = getattr(sys.modules["scipy.stats"], name, None) if name in BATCHED_FAMILIES else None
    if family is None or type(dist.dist) is not type(family) or (
            dist.dist.a, dist.dist.b, dist.dist.badvalue) != (family.a, family.b, family.badvalue):
        return None  # a subclass or a re-configured instance: its own methods decide
    return family


def frozen_batch(dists, q, v):
    """``(ppf(q), cdf(v))`` of per-chain frozen scipy.stats distributions in one call each.

    ``dists`` holds one distribution per chain, ``q`` and ``v`` are (n_chains,). Returns
    None unless every distribution is a frozen scipy.stats continuous distribution (scipy's
    own or ``freeze``'s) of the same recognised family (the module's own generator, not a
    subclass or a re-configured instance) with scalar parameters given the same way
    (positional or keyword).
    """
    types = _frozen_types()
    first = dists[0]
    if type(first) not in types:
        return None
    family = _family(first)
    if family is None:
        return None
    n_args, keys = len(first.args), first.kwds.keys()
    for d in dists:
        if (type(d) not in types or len(d.args) != n_args or d.kwds.keys() != keys
                or _family(d) is not family):
            return None
    try:
        args = [np.array([d.args[j] for d in dists], dtype=float) for j in range(n_args)]
        kwds = {key: np.array([d.kwds[key] for d in dists], dtype=float) for key in keys}
    except (TypeError, ValueError):  # an array-valued or non-numeric parameter
        return None
    if any(a.ndim != 1 for a in args) or any(a.ndim != 1 for a in kwds.values()):
        return None
    return _ppf_cdf(family, args, kwds, q, v)


def frozen_values(dist, q, v):
    """``(ppf(q), cdf(v))`` (each (n,)) of one frozen distribution with per-chain parameters.

    For ``Gibbs(vectorized=True)``: ``dist`` was built for all chains at once. Returns None
    when ``dist`` is not a frozen distribution of a recognised family or its parameters do
    not broadcast to one value per chain; the caller then uses its own methods.
    """
    if type(dist) not in _frozen_types():
        return None
    family = _family(dist)
    if family is None:
        return None
    n = len(q)
    try:
        args = [np.broadcast_to(np.asarray(a, dtype=float), (n,)) for a in dist.args]
        kwds = {k: np.broadcast_to(np.asarray(a, dtype=float), (n,)) for k, a in dist.kwds.items()}
    except (TypeError, ValueError):
        return None
    return _ppf_cdf(family, args, kwds, q, v)


def _ppf_cdf(family, args, kwds, q, v):
    """``family.ppf(q, ...)`` and ``family.cdf(v, ...)`` for (n,) arrays, or None on failure.

    Where every parameter is valid, ``0 < q < 1`` and every ``v`` lies inside the open
    support, the family's own ``_ppf``/``_cdf`` are called with the arithmetic of scipy's
    public methods (``_ppf(q) * scale + loc``, ``_cdf((v - loc) / scale)``): the same
    numbers, without their argument handling (~80 microseconds a call). Anything else
    goes through the public methods.
    """
    try:
        with np.errstate(all="ignore"):
            shapes, loc, scale = family._parse_args(*args, **kwds)
            loc, scale = np.asarray(loc, dtype=float), np.asarray(scale, dtype=float)
            shapes = tuple(np.asarray(s) for s in shapes)
            x = np.asarray((v - loc) / scale, dtype=float)
            if (np.all(family._argcheck(*shapes) & (scale > 0) & (loc == loc))
                    and np.all((0.0 < q) & (q < 1.0))
                    and np.all(family._open_support_mask(x, *shapes))):
                ppf = np.asarray(family._ppf(q, *shapes), dtype=float) * scale + loc
                cdf = np.asarray(family._cdf(x, *shapes), dtype=float)
                if ppf.shape == cdf.shape == np.shape(q):
                    return ppf, cdf
            return (np.asarray(family.ppf(q, *args, **kwds), dtype=float),
                    np.asarray(family.cdf(v, *args, **kwds), dtype=float))
    except Exception:  # let the caller's path report it with the chain's context
        return None
