"""Pairwise scatter of draws with divergent transitions highlighted, for one pair or a grid."""

from dataclasses import dataclass, field

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D

from . import style
from ._base import Drawing, as_chain_draws, check_divergent

__all__ = ["draw_pair", "draw_pair_grid", "PairDrawing", "PairGridDrawing"]


def _pooled(x, divergent, coords):
    pts = x[:, :, list(coords)].reshape(-1, 2)
    if divergent is None:
        return pts, np.empty((0, 2))
    d = divergent.reshape(-1)
    return pts[~d], pts[d]


@dataclass(repr=False, eq=False)
class PairDrawing(Drawing):
    """Returned by ``draw_pair``.

    Attributes
    ----------
    ax : Axes
    points : Line2D
        Non-divergent draws of all chains pooled (small dots).
    divergent : Line2D
        Draws whose transition diverged (``X`` markers); empty when none.
    coords : tuple of int
    """

    ax: Axes
    points: Line2D
    divergent: Line2D
    coords: tuple

    def update(self, draws, divergent=None):
        """Show new draws (and divergences) with the same two artists."""
        x, _, div_run = as_chain_draws(draws)
        div = check_divergent(divergent, x.shape[:2]) if divergent is not None else div_run
        ok, bad = _pooled(x, div, self.coords)
        self.points.set_data(ok[:, 0], ok[:, 1])
        self.points.set_label(f"draws ({ok.shape[0]})")
        self.divergent.set_data(bad[:, 0], bad[:, 1])
        self.divergent.set_label(f"divergent ({bad.shape[0]})" if bad.shape[0] else "_divergent")
        self._rescale()
        return self


def draw_pair(ax, draws, coords=(0, 1), *, names=None, divergent=None, markersize=2.5):
    """Scatter two coordinates of the draws (chains pooled), divergent transitions marked.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim)
        A Run also gives names and ``divergent``.
    coords : pair of int or str
    names : sequence of str, optional
    divergent : array_like of bool, shape (chain, draw), optional
    markersize : float

    Returns
    -------
    PairDrawing
        ``update(draws, divergent=None)`` reuses the artists.
    """
    from phaseglass.core.slices import resolve_coords

    x, names, div_run = as_chain_draws(draws, names)
    coords = resolve_coords(coords, names, x.shape[2])
    style.dress(ax)
    (pts,) = ax.plot([], [], linestyle="none", marker="o", markersize=markersize,
                     color=style.OKABE_ITO["blue"], alpha=0.35, markeredgewidth=0, zorder=2)
    (div,) = ax.plot([], [], zorder=4,
                     **{**style.DIVERGENT, "linestyle": "none", "markersize": 6.5})
    ax.set_xlabel(names[coords[0]])
    ax.set_ylabel(names[coords[1]])
    d = PairDrawing(ax=ax, points=pts, divergent=div, coords=coords)
    return d.update(x, divergent if divergent is not None else div_run)


@dataclass(repr=False, eq=False)
class PairGridDrawing(Drawing):
    """Returned by ``draw_pair_grid``.

    Attributes
    ----------
    figure : Figure
    axes : ndarray of Axes, shape (k, k)
        Upper-triangle Axes are hidden.
    pairs : dict {(row, col): PairDrawing}
        Lower triangle: x is coordinate ``coords[col]``, y is ``coords[row]``.
    diagonal : list of StepPatch
        Histogram (density) of each coordinate, chains pooled.
    coords : list of int
    bins : int
    """

    figure: object
    axes: np.ndarray
    pairs: dict
    diagonal: list
    coords: list
    bins: int
    ax: object = field(default=None)

    @property
    def artists(self):
        out = list(self.diagonal)
        for p in self.pairs.values():
            out.extend(p.artists)
        return out

    def update(self, draws, divergent=None):
        """Show new draws in every cell with the same artists."""
        x, _, div_run = as_chain_draws(draws)
        div = divergent if divergent is not None else div_run
        for p in self.pairs.values():
            p.autoscale = self.autoscale
            p.update(x, div)
        for patch, c, ax in zip(self.diagonal, self.coords, np.diag(self.axes)):
            v = x[:, :, c].ravel()
            v = v[np.isfinite(v)]
            if v.size == 0:
                v = np.zeros(1)
            dens, edges = np.histogram(v, bins=self.bins, density=True)
            patch.set_data(dens, edges)
            if self.autoscale:
                ax.relim()
                ax.autoscale_view()
        return self


def draw_pair_grid(figure, draws, coords=None, *, names=None, divergent=None, bins=25,
                   markersize=2.0, legend=True):
    """Fill ``figure`` with a grid of pairwise scatters (lower triangle) and histograms.

    Parameters
    ----------
    figure : matplotlib.figure.Figure or SubFigure
        Should be empty; the grid's Axes are added to it.
    draws : Run or array_like, shape (chain, draw, dim)
    coords : sequence of int or str, optional
        Coordinates to show; default the first four.
    names : sequence of str, optional
    divergent : array_like of bool, shape (chain, draw), optional
    bins : int
    markersize : float
    legend : bool
        Put the legend (draws / divergent) in the first hidden upper cell.

    Returns
    -------
    PairGridDrawing
        ``update(draws, divergent=None)`` reuses every artist.
    """
    from .chains import _coords

    x, names, div_run = as_chain_draws(draws, names)
    div = divergent if divergent is not None else div_run
    coords = _coords(coords, names, limit=4)
    k = len(coords)
    if k < 2:
        raise ValueError(f"`coords` must name at least two coordinates, got {coords}")
    axes = figure.subplots(k, k, squeeze=False, sharex="col")
    pairs = {}
    diagonal = []
    for r in range(k):
        for c in range(k):
            ax = axes[r, c]
            if c > r:
                ax.set_visible(False)
                continue
            if r == c:
                style.dress(ax)
                patch = ax.stairs(np.zeros(bins), np.linspace(0, 1, bins + 1), fill=True,
                                  facecolor=style.OKABE_ITO["sky_blue"], alpha=0.6,
                                  edgecolor=style.OKABE_ITO["blue"])
                diagonal.append(patch)
                ax.set_yticks([])
                ax.set_ylabel("density" if c == 0 else "")
                ax.set_xlabel(names[coords[c]])
            else:
                pairs[(r, c)] = draw_pair(ax, x, (coords[c], coords[r]), names=names,
                                          divergent=div, markersize=markersize)
            if r < k - 1:
                ax.set_xlabel("")
                ax.tick_params(labelbottom=False)
            if c > 0 and r != c:
                ax.set_ylabel("")
                ax.tick_params(labelleft=False)
    grid = PairGridDrawing(figure=figure, axes=axes, pairs=pairs, diagonal=diagonal,
                           coords=coords, bins=int(bins))
    grid.update(x, div)
    if legend and k >= 2:
        first = pairs[(1, 0)]
        handles = [first.points] + ([first.divergent] if len(first.divergent.get_xdata()) else [])
        axes[0, k - 1].set_visible(True)
        axes[0, k - 1].axis("off")
        axes[0, k - 1].legend(handles=handles, labels=[h.get_label() for h in handles],
                              loc="upper right", fontsize=8, markerscale=2.0, frameon=False)
    return grid
