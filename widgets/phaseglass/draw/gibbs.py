"""Gibbs chains that share one random stream: their paths, and how far apart they are."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D

from . import style
from ._base import Drawing, as_chain_draws

__all__ = ["draw_gibbs_paths", "draw_chain_spread", "GibbsPathsDrawing", "ChainSpreadDrawing",
           "staircase", "chain_spread"]


def staircase(xy, first_moves_x=True):
    """Insert the corner of each coordinate-wise update between successive points.

    Parameters
    ----------
    xy : ndarray, shape (n, 2)
        Successive states of one chain in the two drawn coordinates.
    first_moves_x : bool
        Whether the x coordinate is updated before y within a sweep.

    Returns
    -------
    ndarray, shape (2n - 1, 2)

    Examples
    --------
    >>> staircase(np.array([[0.0, 0.0], [1.0, 2.0]])).tolist()
    [[0.0, 0.0], [1.0, 0.0], [1.0, 2.0]]
    """
    xy = np.asarray(xy, dtype=float)
    if xy.shape[0] < 2:
        return xy.copy()
    out = np.empty((2 * xy.shape[0] - 1, 2))
    out[0::2] = xy
    if first_moves_x:
        out[1::2, 0], out[1::2, 1] = xy[1:, 0], xy[:-1, 1]
    else:
        out[1::2, 0], out[1::2, 1] = xy[:-1, 0], xy[1:, 1]
    return out


def chain_spread(draws):
    """The chain spread per draw: the widest gap between chains over all coordinates.

    Parameters
    ----------
    draws : array_like, shape (chain, draw, dim)

    Returns
    -------
    ndarray, shape (draw,)
        ``max over dim of (max over chains - min over chains)``; zero once every
        chain sits at the same state (chains on one shared stream can meet).
    """
    x = np.asarray(draws, dtype=float)
    return np.max(np.ptp(x, axis=0), axis=-1)


def _tail(x, last):
    return x if last is None else x[:, -int(last):]


@dataclass(repr=False, eq=False)
class GibbsPathsDrawing(Drawing):
    """Returned by ``draw_gibbs_paths``.

    Attributes
    ----------
    ax : Axes
    paths : list of Line2D
        One per chain, through its (last ``last``) states; with ``staircase``
        the corner of each coordinate-wise update is inserted.
    heads : list of Line2D
        The current state of each chain (its own marker shape).
    coords : tuple of int
    staircase : bool
    last : int or None
    """

    ax: Axes
    paths: list
    heads: list
    coords: tuple
    staircase: bool
    last: object

    def update(self, draws):
        """Show new draws (same number of chains) with the same artists."""
        x, _, _ = as_chain_draws(draws)
        if x.shape[0] != len(self.paths):
            raise ValueError(f"update needs {len(self.paths)} chains, got {x.shape[0]}")
        x = _tail(x, self.last)[:, :, list(self.coords)]
        first_moves_x = self.coords[0] < self.coords[1]
        for path, head, xy in zip(self.paths, self.heads, x):
            shown = staircase(xy, first_moves_x) if self.staircase else xy
            path.set_data(shown[:, 0], shown[:, 1])
            head.set_data(xy[-1:, 0], xy[-1:, 1])
        self._rescale()
        return self


def draw_gibbs_paths(ax, draws, coords=(0, 1), *, names=None, staircase=True, last=None):
    """Draw several Gibbs chains as paths through two coordinates.

    With ``staircase=True`` each step is drawn as the coordinate-wise moves a
    systematic-scan Gibbs sweep makes, assuming coordinates are updated in
    index order (the lower index first). Chains driven by one shared stream of
    uniforms tend to move together and may meet; ``draw_chain_spread`` shows when.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim)
    coords : pair of int or str
    names : sequence of str, optional
    staircase : bool
    last : int, optional
        Show only the latest ``last`` draws of each chain.

    Returns
    -------
    GibbsPathsDrawing
        ``update(draws)`` reuses the artists.
    """
    from phaseglass.core.slices import resolve_coords

    x, names, _ = as_chain_draws(draws, names)
    coords = resolve_coords(coords, names, x.shape[2])
    style.dress(ax)
    paths, heads = [], []
    for c in range(x.shape[0]):
        st = style.chain_style(c, markers=True)
        (p,) = ax.plot([], [], color=st["color"], linestyle=st["linestyle"], linewidth=1.0,
                       alpha=0.8, label=f"chain {c}")
        (h,) = ax.plot([], [], color=st["color"], marker=st["marker"], linestyle="none",
                       markersize=8, markeredgecolor="white", markeredgewidth=0.8, zorder=5,
                       label="_head")
        paths.append(p)
        heads.append(h)
    ax.set_xlabel(names[coords[0]])
    ax.set_ylabel(names[coords[1]])
    d = GibbsPathsDrawing(ax=ax, paths=paths, heads=heads, coords=coords,
                          staircase=bool(staircase), last=last)
    return d.update(x)


@dataclass(repr=False, eq=False)
class ChainSpreadDrawing(Drawing):
    """Returned by ``draw_chain_spread``.

    Attributes
    ----------
    ax : Axes
    spread : Line2D
        ``(first + draw, chain_spread(draws))``.
    met : Line2D
        Marker at the first draw where all chains coincide (empty if never).
    first : int
    """

    ax: Axes
    spread: Line2D
    met: Line2D
    first: int

    def update(self, draws, *, first=None):
        """Recompute the spread of new draws into the same artists."""
        x, _, _ = as_chain_draws(draws)
        if first is not None:
            self.first = int(first)
        s = chain_spread(x)
        it = self.first + np.arange(s.size)
        # zero would vanish on the log axis: show it at a floor and say so in the label
        floor = 1e-12
        self.spread.set_data(it, np.maximum(s, floor))
        hit = np.flatnonzero(s <= floor)
        if hit.size:
            self.met.set_data(it[hit[:1]], [floor])
            self.met.set_label(f"all chains meet (draw {it[hit[0]]})")
        else:
            self.met.set_data([], [])
            self.met.set_label("_met")
        self._rescale()
        return self


def draw_chain_spread(ax, draws, *, first=0):
    """Draw the chain spread per draw (``chain_spread``, log scale).

    For chains on one shared stream a falling spread shows them coupling; a
    marker shows the first draw where all of them coincide.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim)
    first : int

    Returns
    -------
    ChainSpreadDrawing
        ``update(draws, *, first=None)`` reuses the artists.
    """
    style.dress(ax)
    ax.set_yscale("log")
    (line,) = ax.plot([], [], color=style.OKABE_ITO["black"], linewidth=1.2,
                      label="chain spread")
    (met,) = ax.plot([], [], linestyle="none", marker="*", markersize=12,
                     color=style.OKABE_ITO["bluish_green"], markeredgecolor="black", zorder=5)
    ax.set_xlabel("draw")
    ax.set_ylabel("chain spread")
    d = ChainSpreadDrawing(ax=ax, spread=line, met=met, first=int(first))
    return d.update(draws)
