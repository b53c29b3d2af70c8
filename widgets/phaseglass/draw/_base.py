"""The object every ``draw_*`` helper returns: named artists plus an in-place ``update``."""

from dataclasses import fields

import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes as _Axes

__all__ = ["Drawing", "as_chain_draws", "exclude_from_autoscale"]


class Drawing:
    """Base class of the small dataclasses returned by the ``draw_*`` helpers.

    Subclasses are dataclasses whose fields are the Axes (``ax``), named artists
    (or lists of them) and a few plain values. ``update(new_data)`` changes the
    same artists in place; ``artists`` lists them all.

    Attributes
    ----------
    autoscale : bool
        When true (the default) ``update`` recomputes the data limits and
        rescales the Axes; set it to False to keep the limits you chose.
    """

    autoscale = True

    @property
    def artists(self):
        """Every artist this drawing made, in field order (not the Axes it drew into)."""
        out = []
        for f in fields(self):
            v = getattr(self, f.name)
            items = list(v.ravel()) if isinstance(v, np.ndarray) and v.dtype == object else (
                list(v) if isinstance(v, (list, tuple)) else [v])
            out.extend(a for a in items if isinstance(a, Artist) and not isinstance(a, _Axes))
        return out

    def update(self, *args, **kwargs):  # pragma: no cover - every subclass overrides it
        raise NotImplementedError

    def remove(self):
        """Take every artist off the Axes."""
        for a in self.artists:
            a.remove()

    def _rescale(self):
        if self.autoscale:
            self.ax.relim()
            self.ax.autoscale_view()

    def __repr__(self):
        names = [f.name for f in fields(self) if f.name != "ax"]
        return f"{type(self).__name__}({', '.join(names)})"


def exclude_from_autoscale(artist):
    """Keep ``artist`` out of ``relim``/autoscaling (a divergence can run off to 1e10)."""
    setter = getattr(artist, "_set_in_autoscale", None)  # matplotlib >= 3.6
    if setter is not None:
        setter(False)
    return artist


def as_chain_draws(data, names=None, *, ndim=3):
    """Return ``(draws (chain, draw, dim), names, divergent or None)`` from a Run or an array.

    A 2-D array is read as (chain, draw) of one coordinate; a 1-D array as one chain.
    """
    divergent = None
    if hasattr(data, "draws"):
        if names is None:
            names = getattr(data, "names", None)
        divergent = getattr(data, "divergent", None)
        data = data.draws
    x = np.asarray(data, dtype=float)
    if x.ndim == 1:
        x = x[None, :, None]
    elif x.ndim == 2:
        x = x[:, :, None]
    elif x.ndim != 3:
        raise ValueError(f"draws must have shape (chain, draw, dim), (chain, draw) or (draw,), got {x.shape}")
    if names is None:
        names = tuple(f"x[{i}]" for i in range(x.shape[2]))
    names = tuple(names)
    if len(names) != x.shape[2]:
        raise ValueError(f"`names` must have {x.shape[2]} entries, got {len(names)}")
    if divergent is not None:
        divergent = np.asarray(divergent, dtype=bool)
        if divergent.shape != x.shape[:2]:
            divergent = None
    return x, names, divergent


def check_divergent(divergent, shape):
    """Return ``divergent`` as a bool array of ``shape`` (chain, draw), or None."""
    if divergent is None:
        return None
    d = np.asarray(divergent, dtype=bool)
    if d.shape != tuple(shape):
        raise ValueError(f"`divergent` must have shape {tuple(shape)} (chain, draw), got {d.shape}")
    return d
