"""Triage for many parameters: where do a run's divergences concentrate?

``divergence_ranking(run)`` compares, coordinate by coordinate, the draws at
divergent transitions with all the other draws, on the sampler's
(unconstrained) scale, where HMC diverges. A divergent transition is always
rejected, so the draw it records is its starting point.
"""

import math

import numpy as np

__all__ = ["DivergenceRanking", "divergence_ranking", "transition_starts"]


class DivergenceRanking:
    """Coordinates (and pairs) ranked by how divergent draws differ from the others.

    Per coordinate, the two samples are the draws at divergent transitions
    (``n_divergent`` of them, chains pooled) and all the other draws
    (``n_other``). Ranks are taken over the pooled values (ties get their
    average rank).

    Attributes
    ----------
    names : tuple of str, length dim
        Every coordinate's name, in the target's order.
    n_divergent, n_other : int
        Sizes of the two samples.
    u : ndarray, shape (dim,)
        Mann-Whitney U of the divergent draws: the number of (divergent, other)
        pairs where the divergent value is larger, ties counting one half.
    shift : ndarray, shape (dim,)
        ``2 U / (n_divergent n_other) - 1``, in [-1, 1] (the rank-biserial
        correlation): -1 when every divergent draw lies below every other draw,
        +1 when above, 0 when they are mixed alike. The ranking score is ``|shift|``.
    z : ndarray, shape (dim,)
        U standardised by its null mean and tie-corrected standard deviation
        (normal approximation, no continuity correction).
    p_value : ndarray, shape (dim,)
        Two-sided p-value of ``z``. With many coordinates and correlated draws,
        read it as a scale for the ranking, not as a test.
    order : ndarray of int, shape (dim,) or (0,)
        Coordinate indices, largest ``|shift|`` first; empty when there is
        nothing to compare (no divergence, or every draw divergent).
    pairs : ndarray of int, shape (n_pairs, 2)
        Pairs of coordinate indices, the better-ranked coordinate first
        (so it goes on the x axis), ranked by ``pair_score``; at most
        ``max_pairs`` of them; shape (0, 2) when empty.
    pair_score : ndarray, shape (n_pairs,)
        ``|shift_i| + |shift_j|``: a pair ranks high when both of its
        coordinates separate the divergent draws (so the top pair is the top
        two coordinates).

    Examples
    --------
    >>> import phaseglass as pg
    >>> run = pg.sample(pg.demos.apiaries("centred", n_groups=12), pg.HMC(0.1, 8), n_draws=300,
    ...                 n_chains=2, warmup=0, seed=1)
    >>> ranking = pg.divergence_ranking(run)
    >>> ranking.coordinates[0]
    'log_tau'
    """

    def __init__(self, names, n_divergent, n_other, u, z, p_value, max_pairs=50):
        self.names = tuple(names)
        self.n_divergent = int(n_divergent)
        self.n_other = int(n_other)
        self.u = np.asarray(u, dtype=float)
        self.z = np.asarray(z, dtype=float)
        self.p_value = np.asarray(p_value, dtype=float)
        with np.errstate(invalid="ignore", divide="ignore"):
            self.shift = 2.0 * self.u / (self.n_divergent * self.n_other) - 1.0 if not self.empty \
                else np.full(len(self.names), np.nan)
        if self.empty:
            self.order = np.zeros(0, dtype=int)
            self.pairs = np.zeros((0, 2), dtype=int)
            self.pair_score = np.zeros(0)
            return
        score = np.abs(self.shift)
        # stable sort on -score: ties keep the target's order
        self.order = np.argsort(-score, kind="stable")
        i, j = np.triu_indices(len(self.names), k=1)
        ps = score[i] + score[j]
        # ties: the pair whose better coordinate ranks higher comes first
        pos = np.empty(len(self.names), dtype=int)
        pos[self.order] = np.arange(len(self.names))
        key = np.lexsort((np.maximum(pos[i], pos[j]), np.minimum(pos[i], pos[j]), -ps))
        key = key[:max_pairs]
        first = np.where(pos[i[key]] <= pos[j[key]], i[key], j[key])
        second = np.where(pos[i[key]] <= pos[j[key]], j[key], i[key])
        self.pairs = np.stack([first, second], axis=1)
        self.pair_score = ps[key]

    @property
    def empty(self):
        """True when there is nothing to rank (no divergence, or no other draw)."""
        return self.n_divergent == 0 or self.n_other == 0

    @property
    def coordinates(self):
        """Coordinate names, most different first (empty tuple when ``empty``)."""
        return tuple(self.names[k] for k in self.order)

    @property
    def top_pair(self):
        """Indices (i, j) of the top-ranked pair, or None when ``empty``."""
        return None if self.empty else (int(self.pairs[0, 0]), int(self.pairs[0, 1]))

    def __repr__(self):
        if self.empty:
            why = ("no divergent transitions" if self.n_divergent == 0
                   else "every draw is divergent")
            return (f"DivergenceRanking: {why} among {self.n_divergent + self.n_other} "
                    "draws; nothing to rank.")
        lines = [f"DivergenceRanking: {self.n_divergent} divergent vs {self.n_other} other draws "
                 "(sampler's scale), most different first:"]
        width = max(len(n) for n in self.names)
        lines.append(f"  {'coordinate':<{width}} {'shift':>7} {'z':>8} {'p':>9}")
        for k in self.order[:10]:
            lines.append(f"  {self.names[k]:<{width}} {self.shift[k]:>+7.2f} {self.z[k]:>+8.2f} "
                         f"{self.p_value[k]:>9.2g}")
        if len(self.order) > 10:
            lines.append(f"  ... {len(self.order) - 10} more")
        top = ", ".join(f"({self.names[a]}, {self.names[b]})" for a, b in self.pairs[:3])
        lines.append(f"top pairs: {top}")
        return "\n".join(lines)


def divergence_ranking(run, *, max_pairs=50):
    """Rank coordinates and pairs by how divergent draws differ from the other draws.

    Parameters
    ----------
    run : Run
        A run from ``pg.sample`` (or a Sampler); its ``unconstrained`` draws and
        ``divergent`` flags are used.
    max_pairs : int
        How many ranked pairs to keep (default 50).

    Returns
    -------
    DivergenceRanking
        Empty (``.empty`` True, ``order`` of length 0, ``top_pair`` None) when
        the run has no divergent transition: that is not an error.
    """
    from .run import Run

    if not isinstance(run, Run):
        raise TypeError(f"`run` must be a phaseglass Run (from pg.sample), got {type(run).__name__}")
    if isinstance(max_pairs, bool) or not isinstance(max_pairs, (int, np.integer)) or max_pairs < 1:
        raise ValueError(f"`max_pairs` must be a positive integer, got {max_pairs!r}")
    z = np.asarray(run.unconstrained, dtype=float)
    div = run.divergent
    if div is None or z.ndim != 3 or np.shape(div) != z.shape[:2]:
        raise ValueError("`run` must record `divergent` flags of shape (chain, draw) matching its draws")
    div = np.asarray(div, dtype=bool).reshape(-1)
    x = z.reshape(-1, z.shape[2])
    if getattr(run.kernel, "moves_when_divergent", False):
        # divergent transitions are compared where they started, the others where they are
        x = np.where(div[:, None], transition_starts(run).reshape(-1, z.shape[2]), x)
    n1 = int(div.sum())
    n2 = int(div.size - n1)
    dim = x.shape[1]
    if n1 == 0 or n2 == 0:
        nan = np.full(dim, np.nan)
        return DivergenceRanking(run.names, n1, n2, nan, nan, nan)
    if not np.all(np.isfinite(x)):
        raise ValueError("`run` has non-finite draws; cannot rank them")
    u, zs, p = mann_whitney(x[div], x[~div])
    return DivergenceRanking(run.names, n1, n2, u, zs, p, max_pairs=int(max_pairs))


def transition_starts(run, *, scale="sampler"):
    """Where each recorded transition started, shaped like the draws (chain, draw, dim).

    A kernel that rejects every divergent transition (HMC and its fixed-length
    relatives) stays where it started, so its draw is its start. The no-U-turn
    sampler keeps the valid part of a tree whose newest subtree diverged and can
    still move (``kernel.moves_when_divergent``): its transition ``t`` started at
    draw ``t - 1``. The first kept draw's start is known only from its replay;
    without one its own draw stands in.

    Parameters
    ----------
    run : Run
    scale : {"sampler", "user"}
        ``run.unconstrained`` or ``run.draws``.
    """
    if scale not in ("sampler", "user"):
        raise ValueError(f'`scale` must be "sampler" or "user", got {scale!r}')
    z = np.asarray(run.unconstrained if scale == "sampler" else run.draws, dtype=float)
    if not getattr(run.kernel, "moves_when_divergent", False) or z.ndim != 3 or z.shape[1] == 0:
        return z
    starts = np.empty_like(z)
    starts[:, 1:] = z[:, :-1]
    starts[:, 0] = z[:, 0]
    first = getattr(run, "first_draw", 0)
    for item in run.divergences:
        if item[1] == first and 0 <= item[0] < z.shape[0]:
            s = np.asarray(item[2].positions[0], dtype=float)
            starts[item[0], 0] = s if scale == "sampler" else run.target.to_user(s[None])[0]
    return starts


def _average_ranks(x):
    """Column-wise ranks 1..n of ``x`` (n, dim), ties sharing their average rank,
    and each column's tie term sum(t**3 - t) over groups of t equal values."""
    n, dim = x.shape
    order = np.argsort(x, axis=0, kind="mergesort")
    xs = np.take_along_axis(x, order, axis=0)
    ranks = np.empty((n, dim))
    ties = np.zeros(dim)
    for k in range(dim):
        # start of each run of equal values in the sorted column
        starts = np.flatnonzero(np.r_[True, xs[1:, k] != xs[:-1, k]])
        counts = np.diff(np.r_[starts, n])
        average = starts + (counts + 1) / 2.0  # ranks start+1 .. start+count, averaged
        ranks[order[:, k], k] = np.repeat(average, counts)
        ties[k] = np.sum(counts.astype(float) ** 3 - counts)
    return ranks, ties


def mann_whitney(a, b):
    """Column-wise Mann-Whitney U of ``a`` against ``b``, its z-score and two-sided p-value.

    ``a``: (n1, dim), ``b``: (n2, dim). U counts pairs with ``a > b`` (ties
    one half). z uses the tie-corrected null variance, no continuity
    correction. Returns three arrays of shape (dim,).
    """
    a = np.atleast_2d(np.asarray(a, dtype=float).T).T
    b = np.atleast_2d(np.asarray(b, dtype=float).T).T
    n1, n2 = a.shape[0], b.shape[0]
    n = n1 + n2
    pooled = np.concatenate([a, b], axis=0)
    ranks, ties = _average_ranks(pooled)
    u = ranks[:n1].sum(axis=0) - n1 * (n1 + 1) / 2.0
    var = n1 * n2 / 12.0 * ((n + 1) - ties / (n * (n - 1))) if n > 1 else np.zeros_like(u)
    with np.errstate(invalid="ignore", divide="ignore"):
        zs = np.where(var > 0, (u - n1 * n2 / 2.0) / np.sqrt(np.where(var > 0, var, 1.0)), 0.0)
    # two-sided normal tail; math.erfc keeps scipy out of the first view's start-up
    p = np.array([math.erfc(abs(z) / math.sqrt(2.0)) for z in np.ravel(zs)]).reshape(np.shape(zs))
    return u, zs, p
