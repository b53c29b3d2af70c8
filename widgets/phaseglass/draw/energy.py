"""How far energy levels spread against how far one transition moves them, with E-BFMI per chain."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.patches import StepPatch
from matplotlib.text import Text

from . import style
from ._base import Drawing

__all__ = ["draw_energy_jumps", "EnergyJumpsDrawing", "energy_histograms"]


def _energy(data):
    e = getattr(data, "energy", data)
    e = np.asarray(e, dtype=float)
    if e.ndim == 1:
        e = e[None, :]
    if e.ndim != 2 or e.shape[1] < 2:
        raise ValueError(f"`energy` must have shape (chain, draw) with draw >= 2, got {e.shape}")
    return e


def energy_histograms(energy, bins=30):
    """Densities of centred energies and of energy changes between successive draws.

    Parameters
    ----------
    energy : array_like, shape (chain, draw)
    bins : int

    Returns
    -------
    edges : ndarray, shape (bins + 1,)
        Shared by both histograms.
    levels : ndarray, shape (bins,)
        Density of the energy levels ``E - mean(E)`` (per-chain mean), chains pooled.
    jumps : ndarray, shape (bins,)
        Density of the jumps ``E[t] - E[t-1]`` between successive draws, chains pooled.
    """
    e = _energy(energy)
    e = e[np.all(np.isfinite(e), axis=1)]
    if e.size == 0:
        edges = np.linspace(-1.0, 1.0, bins + 1)
        return edges, np.zeros(bins), np.zeros(bins)
    centred = (e - e.mean(axis=1, keepdims=True)).ravel()
    steps = np.diff(e, axis=1).ravel()
    both = np.concatenate([centred, steps])
    lo, hi = np.quantile(both, [0.002, 0.998])
    if not hi > lo:
        lo, hi = lo - 0.5, hi + 0.5
    edges = np.linspace(lo, hi, int(bins) + 1)
    levels, _ = np.histogram(np.clip(centred, lo, hi), edges, density=True)
    jumps, _ = np.histogram(np.clip(steps, lo, hi), edges, density=True)
    return edges, levels, jumps


def _bfmi_text(energy):
    from phaseglass.core.diagnostics import ebfmi
    from phaseglass.core.run import EBFMI_LIMIT

    e = _energy(energy)
    values = np.atleast_1d(ebfmi(e))
    cells = []
    for i, b in enumerate(values):
        flag = " (low)" if np.isfinite(b) and b < EBFMI_LIMIT else ""
        cells.append(f"chain {i}: {b:.2f}{flag}" if np.isfinite(b) else f"chain {i}: n/a")
    rows = [", ".join(cells[k:k + 4]) for k in range(0, len(cells), 4)]
    return f"E-BFMI (below {EBFMI_LIMIT} is a warning): " + "\n".join(rows), values


@dataclass(repr=False, eq=False)
class EnergyJumpsDrawing(Drawing):
    """Returned by ``draw_energy_jumps``.

    Attributes
    ----------
    ax : Axes
    levels : StepPatch
        Filled density of the energy levels (centred per chain); ``get_data()``
        gives (values, edges).
    jumps : StepPatch
        Dashed, unfilled density of the jumps in energy between successive draws.
    bfmi : Text
        The Axes title (left): E-BFMI per chain, flagged "(low)" below 0.3.
    ebfmi : ndarray, shape (chain,)
    bins : int
    """

    ax: Axes
    levels: StepPatch
    jumps: StepPatch
    bfmi: Text
    ebfmi: np.ndarray
    bins: int

    def update(self, energy):
        """Recompute both histograms and E-BFMI into the same artists."""
        edges, m, t = energy_histograms(energy, self.bins)
        self.levels.set_data(m, edges)
        self.jumps.set_data(t, edges)
        text, self.ebfmi = _bfmi_text(energy)
        self.bfmi.set_text(text)
        if self.autoscale:
            top = max(float(np.max(m)), float(np.max(t)), 1e-12)
            self.ax.set_xlim(edges[0], edges[-1])
            self.ax.set_ylim(0.0, 1.3 * top)  # headroom for the legend
        return self


def draw_energy_jumps(ax, energy, *, bins=30):
    """Overlay the spread of energy levels and the jumps in energy between draws.

    When the jumps (what momentum resampling achieves per transition) are much
    narrower than the spread of energy levels the chain has to cover, the
    sampler moves between energy levels slowly; E-BFMI summarises the ratio per chain
    (Betancourt 2016, "Diagnosing suboptimal cotangent disintegrations in
    Hamiltonian Monte Carlo", arXiv:1604.00695).

    Parameters
    ----------
    ax : Axes
    energy : Run or array_like, shape (chain, draw)
    bins : int

    Returns
    -------
    EnergyJumpsDrawing
        ``update(energy)`` reuses the artists.
    """
    style.dress(ax)
    empty = (np.zeros(int(bins)), np.linspace(0, 1, int(bins) + 1))
    levels = ax.stairs(*empty, fill=True, facecolor=style.OKABE_ITO["sky_blue"], alpha=0.55,
                       edgecolor=style.OKABE_ITO["blue"], linewidth=1.2,
                       label="energy level E \u2212 chain's mean")
    levels.set_edgecolor(style.OKABE_ITO["blue"])
    jumps = ax.stairs(*empty, fill=False, edgecolor=style.OKABE_ITO["black"], linewidth=1.6,
                      linestyle="--", label="jump \u0394E from one draw to the next")
    text = ax.set_title("", loc="left", fontsize=9)
    ax.set_xlabel("energy level, or jump in energy")
    ax.set_ylabel("density")
    d = EnergyJumpsDrawing(ax=ax, levels=levels, jumps=jumps, bfmi=text, ebfmi=np.zeros(0),
                           bins=int(bins))
    return d.update(energy)
