"""Pairwise scatter of draws with divergent transitions highlighted: one pair, chosen pairs, a grid."""

from dataclasses import dataclass, field

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D

from . import style
from ._base import Drawing, as_chain_draws, check_divergent

__all__ = ["draw_pair", "draw_pair_panels", "draw_pair_grid", "PairDrawing", "PairPanelsDrawing",
           "PairGridDrawing"]


def _pooled(x, divergent, coords, starts=None):
    """(other draws, divergent transitions' starts) of ``coords``, chains pooled."""
    pts = x[:, :, list(coords)].reshape(-1, 2)
    if divergent is None:
        return pts, np.empty((0, 2))
    d = divergent.reshape(-1)
    at = pts if starts is None else starts[:, :, list(coords)].reshape(-1, 2)
    return pts[~d], at[d]


def _starts_of(draws):
    """A Run whose kernel can move on a divergence (NUTS): its transitions' starts, user scale."""
    if getattr(getattr(draws, "kernel", None), "moves_when_divergent", False):
        from phaseglass.core.triage import transition_starts

        return transition_starts(draws, scale="user")
    return None


@dataclass(repr=False, eq=False)
class PairDrawing(Drawing):
    """Returned by ``draw_pair``.

    Attributes
    ----------
    ax : Axes
    points : Line2D
        Non-divergent draws of all chains pooled (small dots).
    divergent : Line2D
        Where each divergent transition started (``X`` markers): its draw, or
        for a kernel that can move on a divergence (NUTS) the draw before;
        empty when none.
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
        ok, bad = _pooled(x, div, self.coords, _starts_of(draws))
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
    # a Run goes on to update() whole: a NUTS run marks where divergent transitions started
    return d.update(draws if hasattr(draws, "draws") else x,
                    divergent if divergent is not None else div_run)


@dataclass(repr=False, eq=False)
class PairPanelsDrawing(Drawing):
    """Returned by ``draw_pair_panels``.

    Attributes
    ----------
    axes : list of Axes
        One per pair, in the order of ``pairs``.
    panels : list of PairDrawing
        The scatter of each pair (``panels[k].divergent`` holds its ``X`` markers).
    titles : list of Text
        Each panel's title.
    pairs : list of (int, int)
        The coordinates of each panel, x first.
    marked : int
        Index of the panel drawn with a dark frame (-1: none); see ``mark``.
    """

    axes: list
    panels: list
    titles: list
    pairs: list
    marked: int = -1
    ax: object = field(default=None)

    @property
    def artists(self):
        out = list(self.titles)
        for p in self.panels:
            out.extend(p.artists)
        return out

    def update(self, draws, divergent=None):
        """Show new draws in every panel with the same artists."""
        for p in self.panels:
            p.autoscale = self.autoscale
            p.update(draws, divergent)
        return self

    def panel_of(self, ax):
        """Index of the panel drawn in ``ax`` (-1 when it is none of them)."""
        for k, a in enumerate(self.axes):
            if a is ax:
                return k
        return -1

    def mark(self, index):
        """Frame panel ``index`` in black (e.g. the pair a larger view shows); -1 frames none."""
        index = int(index)
        if not -1 <= index < len(self.axes):
            raise ValueError(f"`index` must be -1 or in range({len(self.axes)}), got {index}")
        for k, (ax, title) in enumerate(zip(self.axes, self.titles)):
            on = k == index
            for side, spine in ax.spines.items():
                spine.set_visible(on or side in ("left", "bottom"))
                spine.set_color(style.TEXT if on else "#888888")
                spine.set_linewidth(1.8 if on else 0.8)
            title.set_fontweight("bold" if on else "normal")
        self.marked = index
        return self


def draw_pair_panels(axes, draws, pairs, *, names=None, divergent=None, titles=None,
                     markersize=2.0, fontsize=8):
    """Scatter several chosen pairs of coordinates, one pair per Axes, divergences marked.

    Each panel is a ``draw_pair``: every draw as a small dot (chains pooled), the
    draws of divergent transitions as ``X`` markers.

    Parameters
    ----------
    axes : sequence of Axes
        One per pair.
    draws : Run or array_like, shape (chain, draw, dim)
        A Run also gives names and ``divergent``.
    pairs : sequence of (int or str, int or str)
        The coordinates of each panel, x first.
    names : sequence of str, optional
    divergent : array_like of bool, shape (chain, draw), optional
    titles : sequence of str, optional
        One per panel; default ``"x \u00d7 y"``.
    markersize, fontsize : float
        Dot size, and the size of titles and axis labels.

    Returns
    -------
    PairPanelsDrawing
        ``update(draws, divergent=None)`` reuses the artists; ``mark(k)`` frames panel k.
    """
    axes = list(np.ravel(np.asarray(axes, dtype=object)))
    pairs = [tuple(p) for p in pairs]
    if len(axes) != len(pairs):
        raise ValueError(f"`axes` must hold one Axes per pair: {len(pairs)} pairs, got "
                         f"{len(axes)} Axes")
    x, names, div_run = as_chain_draws(draws, names)
    div = divergent if divergent is not None else div_run
    if titles is not None and len(titles) != len(pairs):
        raise ValueError(f"`titles` must hold one title per pair: {len(pairs)} pairs, got "
                         f"{len(titles)}")
    panels, texts = [], []
    for k, (ax, pair) in enumerate(zip(axes, pairs)):
        panel = draw_pair(ax, draws if hasattr(draws, "draws") else x, pair, names=names,
                          divergent=div, markersize=markersize)
        i, j = panel.coords
        ax.xaxis.label.set_fontsize(fontsize)
        ax.yaxis.label.set_fontsize(fontsize)
        ax.tick_params(labelsize=fontsize - 1)
        text = titles[k] if titles is not None else f"{names[i]} \u00d7 {names[j]}"
        texts.append(ax.set_title(text, loc="left", fontsize=fontsize))
        panels.append(panel)
    return PairPanelsDrawing(axes=axes, panels=panels, titles=texts,
                             pairs=[p.coords for p in panels])


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
