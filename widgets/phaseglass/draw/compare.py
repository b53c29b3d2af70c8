"""One quantity of a kernel comparison: every seed's value, their mean and spread, per kernel."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection, PathCollection
from matplotlib.lines import Line2D

from . import style
from ._base import Drawing

__all__ = ["draw_comparison", "ComparisonDrawing"]

_X_LABELS = {
    "ESS per gradient": "bulk ESS per gradient evaluation (lowest parameter)",
    "acceptance": "mean acceptance probability",
    "divergences": "divergent transitions (all chains)",
    "step size": "step size after warm-up",
    "R-hat max": "largest R-hat over the parameters",
}
_SEED_SPREAD = 0.22  # vertical offsets of the seeds' dots inside a row, in row heights


def _offsets(n_seeds):
    if n_seeds == 1:
        return np.zeros(1)
    return np.linspace(-_SEED_SPREAD, _SEED_SPREAD, n_seeds)


def _fmt(v, quantity):
    if not np.isfinite(v):
        return "n/a"
    return f"{v:.1f}" if quantity == "divergences" else f"{v:.3g}"


@dataclass(repr=False, eq=False)
class ComparisonDrawing(Drawing):
    """Returned by ``draw_comparison``.

    Attributes
    ----------
    ax : Axes
    seeds : PathCollection
        One hollow dot per cell (kernel ``k`` on row ``k``, seeds a little apart
        inside the row); ``get_offsets()`` is ``(value, row + offset)``, NaN cells left out.
    means : Line2D
        The mean over seeds of each kernel (a filled diamond), ``get_xdata()`` the means.
    spreads : LineCollection
        Mean ± one standard deviation over seeds of each kernel (a horizontal bar).
    texts : list of Text
        "mean ± sd" of each row, at the Axes' right edge.
    reference : Line2D
        The R-hat warning level for ``"R-hat max"`` (empty otherwise).
    quantity : str
    """

    ax: Axes
    seeds: PathCollection
    means: Line2D
    spreads: LineCollection
    texts: list
    reference: Line2D
    quantity: str

    def update(self, comparison):
        """Show ``comparison`` (same kernels) with the same artists."""
        q = self.quantity
        cells = np.asarray(comparison.cells[q], dtype=float)
        n_k = cells.shape[0]
        if n_k != len(self.texts):
            raise ValueError(f"update needs a comparison of {len(self.texts)} kernels, got {n_k}")
        rows = np.arange(n_k)[:, None] + _offsets(cells.shape[1])[None, :]
        ok = np.isfinite(cells)
        self.seeds.set_offsets(np.column_stack([cells[ok], rows[ok]]) if ok.any()
                               else np.empty((0, 2)))
        mean, sd = comparison.mean(q), comparison.spread(q)
        self.means.set_data(mean, np.arange(n_k))
        segs = [[(m - s, k), (m + s, k)] if np.isfinite(m) and np.isfinite(s) else [(np.nan, k)] * 2
                for k, (m, s) in enumerate(zip(mean, sd))]
        self.spreads.set_segments(segs)
        for k, text in enumerate(self.texts):
            label = _fmt(mean[k], q)
            if np.isfinite(mean[k]) and np.isfinite(sd[k]):
                label += f" \u00b1 {sd[k]:.2g}"
            text.set_text(label)
            text.set_position((0.99, k))
        if q == "R-hat max":
            from phaseglass.core.run import RHAT_LIMIT

            self.reference.set_data([RHAT_LIMIT, RHAT_LIMIT], [-0.5, n_k - 0.5])
        # the data limits: seeds' dots (a collection) are not in relim; set x by hand
        if self.autoscale and ok.any():
            lo, hi = float(np.nanmin(cells)), float(np.nanmax(cells))
            if q == "R-hat max":
                lo, hi = min(lo, 1.0), max(hi, RHAT_LIMIT)
            if q in ("divergences", "ESS per gradient", "acceptance", "step size"):
                lo = min(lo, 0.0)
            pad = 0.05 * (hi - lo) if hi > lo else 0.5 * max(abs(hi), 1e-12)
            # room on the right for the "mean ± sd" texts (a third of the width)
            self.ax.set_xlim(lo - pad, hi + pad + 0.5 * (hi - lo + 2 * pad))
        self.ax.set_ylim(n_k - 0.5, -0.5)
        return self


def draw_comparison(ax, comparison, quantity="ESS per gradient"):
    """Draw one quantity of a ``KernelComparison``: a row per kernel, a dot per seed.

    Each row shows every seed's value (hollow dots), the mean over seeds (a
    diamond) with a bar of ± one standard deviation, and "mean ± sd" in text,
    so a difference between kernels can be judged against the seed-to-seed
    spread. ``"R-hat max"`` adds the warning level as a dash-dot line.

    Parameters
    ----------
    ax : Axes
    comparison : KernelComparison
        From ``phaseglass.compare_kernels``.
    quantity : {"ESS per gradient", "acceptance", "divergences", "step size", "R-hat max"}

    Returns
    -------
    ComparisonDrawing
        ``update(comparison)`` shows a new comparison of the same kernels in place.

    Examples
    --------
    >>> import phaseglass as pg
    >>> from phaseglass.draw import style
    >>> from phaseglass.draw.compare import draw_comparison
    >>> c = pg.compare_kernels(pg.demos.correlated_gaussian(), [pg.HMC(0.3, 4), pg.HMC(0.3, 16)],
    ...                        n_seeds=2, n_draws=100, n_chains=2, warmup=100)
    >>> fig = style.new_figure(6, 2.5)
    >>> d = draw_comparison(fig.add_subplot(), c, "acceptance")
    """
    from phaseglass.core.compare import QUANTITIES

    if quantity not in QUANTITIES:
        raise ValueError(f"`quantity` must be one of {QUANTITIES}, got {quantity!r}")
    if not hasattr(comparison, "cells") or not hasattr(comparison, "labels"):
        raise TypeError(f"`comparison` must be a KernelComparison (from pg.compare_kernels), "
                        f"got {type(comparison).__name__}")
    style.dress(ax)
    n_k = len(comparison.labels)
    blue = style.OKABE_ITO["blue"]
    seeds = ax.scatter([], [], s=22, facecolors="none", edgecolors=blue, linewidths=1.0,
                       label=f"one seed ({comparison.n_seeds} per kernel)", zorder=3)
    (means,) = ax.plot([], [], linestyle="none", marker="D", markersize=6, color=style.TEXT,
                       markerfacecolor=style.TEXT, label="mean over seeds", zorder=4)
    spreads = LineCollection([], colors=style.TEXT, linewidths=2.0, label="\u00b1 1 sd", zorder=2)
    ax.add_collection(spreads)
    (reference,) = ax.plot([], [], label="_R-hat warning level", **style.THRESHOLD)
    if quantity == "R-hat max":
        reference.set_label("R-hat warning level")
    # x in axes fraction (the right edge), y in rows: the texts never sit on a dot
    where = ax.get_yaxis_transform()
    texts = [ax.text(0.99, k, "", transform=where, ha="right", va="center", fontsize=8,
                     color=style.TEXT, bbox=dict(boxstyle="round,pad=0.2", facecolor="white",
                                                 edgecolor="none", alpha=0.8))
             for k in range(n_k)]
    ax.set_yticks(np.arange(n_k), [str(s) for s in comparison.labels])
    ax.grid(False, axis="y")
    ax.set_xlabel(_X_LABELS[quantity])
    d = ComparisonDrawing(ax=ax, seeds=seeds, means=means, spreads=spreads, texts=texts,
                          reference=reference, quantity=quantity)
    return d.update(comparison)
