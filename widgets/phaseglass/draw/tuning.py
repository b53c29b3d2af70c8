"""A heat map of any scalar over a grid of two sampler knobs (e.g. step size x steps)."""

from dataclasses import dataclass

import numpy as np
from matplotlib import colormaps
from matplotlib.axes import Axes
from matplotlib.colorbar import Colorbar
from matplotlib.image import AxesImage
from matplotlib.lines import Line2D
from matplotlib.patheffects import withStroke

from . import style
from ._base import Drawing

__all__ = ["draw_knob_grid", "KnobGridDrawing"]


def _check(values, nx, ny):
    v = np.asarray(values, dtype=float)
    if v.shape != (ny, nx):
        raise ValueError(
            f"`values` must have shape (len(y_values), len(x_values)) = ({ny}, {nx}), got {v.shape}"
        )
    return v


def _label(v):
    if isinstance(v, (float, np.floating)):
        return f"{v:.3g}"
    return str(v)


@dataclass(repr=False, eq=False)
class KnobGridDrawing(Drawing):
    """Returned by ``draw_knob_grid``.

    Attributes
    ----------
    ax : Axes
    image : AxesImage
        One cell per knob pair; ``get_array()`` is the values (NaN masked).
    texts : ndarray of Text, shape (ny, nx)
        The value printed in each cell ("n/a" for NaN); dark text on light cells.
    best : Line2D
        Square outline (black on white) around the best cell (``best="max"`` or ``"min"``).
    colorbar : Colorbar or None
    fmt : str
    best_rule : str or None
    """

    ax: Axes
    image: AxesImage
    texts: np.ndarray
    best: Line2D
    colorbar: Colorbar
    fmt: str
    best_rule: object

    def update(self, values):
        """Show new values (same grid) in the same image, texts and colour bar."""
        ny, nx = self.texts.shape
        v = _check(values, nx, ny)
        masked = np.ma.masked_invalid(v)
        self.image.set_data(masked)
        finite = v[np.isfinite(v)]
        if finite.size:
            lo, hi = float(finite.min()), float(finite.max())
            if hi <= lo:
                lo, hi = lo - 0.5 * max(abs(lo), 1.0), hi + 0.5 * max(abs(hi), 1.0)
            self.image.set_clim(lo, hi)
        norm = self.image.norm
        cmap = self.image.get_cmap()
        for (i, j), text in np.ndenumerate(self.texts):
            val = v[i, j]
            if np.isfinite(val):
                text.set_text(self.fmt.format(val))
                r, g, b, _ = cmap(norm(val))
                light = 0.299 * r + 0.587 * g + 0.114 * b > 0.5
                text.set_color("black" if light else "white")
            else:
                text.set_text("n/a")
                text.set_color("#444444")
        if self.best_rule and finite.size:
            pick = np.nanargmax if self.best_rule == "max" else np.nanargmin
            i, j = np.unravel_index(pick(v), v.shape)
            h = 0.44
            self.best.set_data([j - h, j + h, j + h, j - h, j - h], [i - h, i - h, i + h, i + h, i - h])
        else:
            self.best.set_data([], [])
        if self.colorbar is not None:
            self.colorbar.update_normal(self.image)
        return self


def draw_knob_grid(ax, values, x_values, y_values, *, x_label="step size", y_label="leapfrog steps",
                   value_label="", fmt="{:.3g}", best=None, colorbar=True, annotate=True):
    """Draw a heat map of one scalar per cell over two knobs, values printed in the cells.

    Parameters
    ----------
    ax : Axes
    values : array_like, shape (len(y_values), len(x_values))
        NaN cells are shown grey and marked "n/a".
    x_values, y_values : sequence
        Knob settings along the columns and the rows (shown as tick labels).
    x_label, y_label, value_label : str
    fmt : str
        Format of the printed values.
    best : {"max", "min", None}
        Outline the best cell with a square (so it does not rely on colour).
    colorbar : bool
        Add a colour bar beside ``ax`` (through ``ax.figure.colorbar``).
    annotate : bool
        Print the value in each cell.

    Returns
    -------
    KnobGridDrawing
        ``update(values)`` reuses the image, texts and colour bar.
    """
    if best not in ("max", "min", None):
        raise ValueError(f"`best` must be 'max', 'min' or None, got {best!r}")
    nx, ny = len(x_values), len(y_values)
    v = _check(values, nx, ny)
    style.dress(ax)
    ax.grid(False)
    cmap = colormaps[style.HEAT_CMAP].with_extremes(bad="#D9D9D9")
    image = ax.imshow(np.ma.masked_invalid(v), origin="lower", aspect="auto", cmap=cmap,
                      interpolation="nearest", extent=(-0.5, nx - 0.5, -0.5, ny - 0.5))
    ax.set_xticks(np.arange(nx), [_label(x) for x in x_values])
    ax.set_yticks(np.arange(ny), [_label(y) for y in y_values])
    ax.set_xlabel(x_label)
    ax.set_ylabel(y_label)
    ax.tick_params(length=0)
    texts = np.empty((ny, nx), dtype=object)
    for i in range(ny):
        for j in range(nx):
            texts[i, j] = ax.text(j, i, "", ha="center", va="center", fontsize=8,
                                  visible=annotate)
    (mark,) = ax.plot([], [], color="black", linewidth=2.2, linestyle="-", zorder=4,
                      path_effects=[withStroke(linewidth=4.5, foreground="white")],
                      label=f"best ({best})" if best else "_best")
    cbar = ax.figure.colorbar(image, ax=ax, label=value_label) if colorbar else None
    d = KnobGridDrawing(ax=ax, image=image, texts=texts, best=mark, colorbar=cbar, fmt=fmt,
                        best_rule=best)
    return d.update(v)
