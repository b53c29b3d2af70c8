"""Frozen ``scipy.stats`` distributions as Gibbs conditionals: evaluated for all chains at once.

``frozen_batch`` turns one frozen distribution per chain (all of one recognised
family) into one call of the family's vectorised ``ppf`` and ``cdf``.
"""

import sys

import numpy as np

__all__ = ["BATCHED_FAMILIES", "frozen_batch"]


#: scipy.stats families whose frozen distributions are evaluated for all chains in one call.
#: Each is checked in the tests to give, chain by chain, exactly the per-chain call's numbers.
BATCHED_FAMILIES = frozenset({
    "norm", "truncnorm", "uniform", "expon", "gamma", "invgamma", "beta", "lognorm", "t",
    "cauchy", "laplace", "logistic", "halfnorm", "chi2", "weibull_min",
})


def frozen_batch(dists, q, v):
    """``(ppf(q), cdf(v))`` of per-chain frozen scipy.stats distributions in one call each.

    ``dists`` holds one distribution per chain, ``q`` and ``v`` are (n_chains,). Returns
    None unless every distribution is a frozen scipy.stats continuous distribution of the
    same recognised family (the module's own generator, not a subclass or a re-configured
    instance) with scalar parameters given the same way (positional or keyword).
    """
    infra = sys.modules.get("scipy.stats._distn_infrastructure")  # no scipy: nothing frozen
    stats = sys.modules.get("scipy.stats")
    if infra is None or stats is None:
        return None
    frozen = infra.rv_continuous_frozen
    first = dists[0]
    if type(first) is not frozen:
        return None
    name = getattr(first.dist, "name", None)
    family = getattr(stats, name, None) if name in BATCHED_FAMILIES else None
    if family is None:
        return None
    kind, n_args, keys = type(family), len(first.args), first.kwds.keys()
    support = (family.a, family.b, family.badvalue)
    for d in dists:
        if (type(d) is not frozen or type(d.dist) is not kind or len(d.args) != n_args
                or d.kwds.keys() != keys or (d.dist.a, d.dist.b, d.dist.badvalue) != support):
            return None
    try:
        args = [np.array([d.args[j] for d in dists], dtype=float) for j in range(n_args)]
        kwds = {key: np.array([d.kwds[key] for d in dists], dtype=float) for key in keys}
    except (TypeError, ValueError):  # an array-valued or non-numeric parameter
        return None
    if any(a.ndim != 1 for a in args) or any(a.ndim != 1 for a in kwds.values()):
        return None
    try:
        return (np.asarray(family.ppf(q, *args, **kwds), dtype=float),
                np.asarray(family.cdf(v, *args, **kwds), dtype=float))
    except Exception:  # let the per-chain path report it with the chain's context
        return None
