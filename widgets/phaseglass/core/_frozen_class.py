"""The frozen-distribution class behind ``pg.freeze`` (imports scipy.stats: loaded on first use)."""

from scipy.stats._distn_infrastructure import check_random_state, rv_continuous_frozen

__all__ = ["LightFrozen"]


class LightFrozen(rv_continuous_frozen):
    """A frozen scipy.stats continuous distribution that shares its family's instance.

    scipy's own freezing builds a private copy of the family for every frozen
    object (docstrings, argument parser and all, about 0.4 ms); this one keeps
    the family itself in ``dist``, which is what an unfrozen call such as
    ``scipy.stats.norm.ppf(q, loc, scale)`` uses too. Every method is scipy's
    own, so the numbers are the same. Only the random state is per object
    (``random_state`` sets this object's, never the family's).
    """

    def __init__(self, dist, *args, **kwds):  # noqa: D107 - deliberately not calling super
        self.args, self.kwds, self.dist = args, kwds, dist
        shapes, _, _ = dist._parse_args(*args, **kwds)
        self.a, self.b = dist._get_support(*shapes)
        self._own_random_state = None

    @property
    def random_state(self):
        return self.dist._random_state if self._own_random_state is None else self._own_random_state

    @random_state.setter
    def random_state(self, seed):
        self._own_random_state = check_random_state(seed)

    def rvs(self, size=None, random_state=None):
        if random_state is None:
            random_state = self._own_random_state
        return super().rvs(size=size, random_state=random_state)

    def __repr__(self):
        params = [repr(a) for a in self.args] + [f"{k}={v!r}" for k, v in self.kwds.items()]
        return f"pg.freeze(scipy.stats.{self.dist.name}, {', '.join(params)})"
