"""Log-density backgrounds: a light wash plus contour lines, updatable in place."""

from dataclasses import dataclass

import numpy as np
from contourpy import LineType, contour_generator  # matplotlib's own contouring engine
from matplotlib.collections import LineCollection
from matplotlib.image import AxesImage

from . import style
from ._base import Drawing

__all__ = ["draw_log_density", "LogDensityDrawing", "DEFAULT_DROPS"]

#: Contour levels as drops below the grid's maximum: k^2 / 2 for k = 1..5, so for a
#: Gaussian slice the lines sit 1, 2, ..., 5 standard deviations out.
DEFAULT_DROPS = (0.5, 2.0, 4.5, 8.0, 12.5)


def _check_grid(grid):
    try:
        X, Y, Z = grid
    except (TypeError, ValueError):
        raise TypeError("`grid` must be (X, Y, Z) as returned by log_density_grid") from None
    X, Y, Z = (np.asarray(a, dtype=float) for a in (X, Y, Z))
    if Z.ndim != 2 or X.shape != Z.shape or Y.shape != Z.shape:
        raise ValueError(
            f"`grid` arrays must share one 2-D shape, got X {X.shape}, Y {Y.shape}, Z {Z.shape}"
        )
    return X, Y, Z


def _levels(Z, drops):
    finite = Z[np.isfinite(Z)]
    if finite.size == 0:
        return np.array([]), np.nan
    top = float(finite.max())
    return np.sort(top - np.asarray(drops, dtype=float)), top


def _segments(X, Y, Z, levels):
    """Contour polylines of all levels (one list), computed by contourpy."""
    if levels.size == 0:
        return []
    masked = np.ma.masked_invalid(Z)
    gen = contour_generator(x=X, y=Y, z=masked, line_type=LineType.Separate)
    segs = []
    for lev in levels:
        segs.extend(s for s in gen.lines(lev) if len(s) > 1)
    return segs


@dataclass(repr=False, eq=False)
class LogDensityDrawing(Drawing):
    """Returned by ``draw_log_density``.

    Attributes
    ----------
    ax : Axes
    wash : AxesImage or None
        The log-density as a light image (``get_array()`` is the masked Z).
    contours : LineCollection
        Contour lines of every level, one polyline per segment.
    levels : ndarray
        Current contour levels (log-density values).
    drops : tuple of float
    """

    ax: object
    wash: AxesImage
    contours: LineCollection
    levels: np.ndarray
    drops: tuple

    def update(self, grid):
        """Show a new (X, Y, Z) grid with the same image and line collection."""
        X, Y, Z = _check_grid(grid)
        self.levels, top = _levels(Z, self.drops)
        if self.wash is not None:
            self.wash.set_data(np.ma.masked_invalid(Z))
            self.wash.set_extent(_extent(X, Y))
            if np.isfinite(top):
                self.wash.set_clim(top - 1.3 * max(self.drops), top)
        self.contours.set_segments(_segments(X, Y, Z, self.levels))
        if self.autoscale:  # the grid's extent is the view
            self.ax.set_xlim(X[0, 0], X[0, -1])
            self.ax.set_ylim(Y[0, 0], Y[-1, 0])
        return self


def _extent(X, Y):
    return (float(X[0, 0]), float(X[0, -1]), float(Y[0, 0]), float(Y[-1, 0]))


def draw_log_density(ax, grid, *, drops=DEFAULT_DROPS, wash=True, names=None, label="log-density contours"):
    """Draw a log-density grid as a light wash with contour lines.

    Parameters
    ----------
    ax : Axes
    grid : (X, Y, Z)
        From ``phaseglass.core.slices.log_density_grid``; each shaped (ny, nx)
        in ``numpy.meshgrid`` order. Non-finite Z is left blank.
    drops : sequence of float
        Contour levels as drops below the largest Z on the grid (default
        k^2/2, k = 1..5).
    wash : bool
        Also draw the log-density as a light image.
    names : pair of str, optional
        Axis labels.
    label : str
        Legend label of the contour lines.

    Returns
    -------
    LogDensityDrawing
        ``update(grid)`` redraws into the same image and line collection.

    Examples
    --------
    >>> import phaseglass as pg
    >>> from matplotlib.figure import Figure
    >>> from phaseglass.core.slices import log_density_grid
    >>> ax = Figure().add_subplot()
    >>> d = draw_log_density(ax, log_density_grid(pg.demos.correlated_gaussian(), (0, 1), n=30))
    >>> d.wash.get_array().shape
    (30, 30)
    """
    X, Y, Z = _check_grid(grid)
    drops = tuple(float(d) for d in drops)
    if not drops or any(d <= 0 for d in drops):
        raise ValueError(f"`drops` must be positive numbers, got {drops!r}")
    style.dress(ax)
    levels, top = _levels(Z, drops)
    image = None
    if wash:
        vmin, vmax = (top - 1.3 * max(drops), top) if np.isfinite(top) else (0.0, 1.0)
        image = ax.imshow(np.ma.masked_invalid(Z), origin="lower", extent=_extent(X, Y),
                          aspect="auto", interpolation="bilinear", cmap=style.DENSITY_CMAP,
                          vmin=vmin, vmax=vmax, zorder=0)
    lines = LineCollection(_segments(X, Y, Z, levels), colors=style.CONTOUR["colors"],
                           linewidths=style.CONTOUR["linewidths"], label=label, zorder=1)
    ax.add_collection(lines, autolim=False)
    ax.set_xlim(X[0, 0], X[0, -1])
    ax.set_ylim(Y[0, 0], Y[-1, 0])
    if names is not None:
        ax.set_xlabel(names[0])
        ax.set_ylabel(names[1])
    return LogDensityDrawing(ax=ax, wash=image, contours=lines, levels=levels, drops=drops)
