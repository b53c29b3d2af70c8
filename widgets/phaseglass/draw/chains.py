"""Per-chain views of draws: traces, autocorrelation, running bulk ESS, ESS per gradient,
and a chain's next transition drawn as a preview."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D

from phaseglass.core.efficiency import MIN_ESS_DRAWS, ess_per_gradient
from phaseglass.core.slices import resolve_coord, resolve_coords

from . import style
from ._base import Drawing, as_chain_draws, check_divergent, exclude_from_autoscale

__all__ = [
    "draw_traces", "draw_autocorrelation", "draw_running_ess", "draw_ess_per_gradient",
    "draw_next_transition", "TracesDrawing", "AutocorrelationDrawing", "RunningEssDrawing",
    "EssPerGradientDrawing", "NextTransitionDrawing", "running_ess",
]


def _coords(coords, names, limit=6):
    """Indices of ``coords`` (one or several; the first ``limit`` when None)."""
    if coords is None:
        return list(range(min(len(names), limit)))
    if isinstance(coords, (str, int, np.integer)):
        coords = [coords]
    return [resolve_coord(c, names, argument="coords") for c in coords]


def _chain_lines(ax, n, **extra):
    lines = []
    for c in range(n):
        (line,) = ax.plot([], [], label=f"chain {c}", **{**style.chain_style(c), **extra})
        lines.append(line)
    return lines


def _check_chains(x, lines):
    if x.shape[0] != len(lines):
        raise ValueError(
            f"update needs the same number of chains as drawn ({len(lines)}), got {x.shape[0]}; "
            "draw again for a different number"
        )


# ----------------------------------------------------------------------- traces

@dataclass(repr=False, eq=False)
class TracesDrawing(Drawing):
    """Returned by ``draw_traces``.

    Attributes
    ----------
    ax : Axes
    lines : list of Line2D
        One per chain: ``(first + draw, draws[chain, :, coord])``.
    divergent : Line2D
        ``X`` markers at the divergent transitions of every chain.
    coord : int
    first : int
    """

    ax: Axes
    lines: list
    divergent: Line2D
    coord: int
    first: int

    def update(self, draws, divergent=None, *, first=None):
        """Show new draws (same number of chains) with the same lines."""
        x, _, div_run = as_chain_draws(draws)
        _check_chains(x, self.lines)
        div = check_divergent(divergent, x.shape[:2]) if divergent is not None else div_run
        if first is not None:
            self.first = int(first)
        it = self.first + np.arange(x.shape[1])
        for line, chain in zip(self.lines, x[:, :, self.coord]):
            line.set_data(it, chain)
        if div is not None and div.any():
            c, t = np.nonzero(div)
            self.divergent.set_data(it[t], x[c, t, self.coord])
            self.divergent.set_label("divergent")
        else:
            self.divergent.set_data([], [])
            self.divergent.set_label("_divergent")
        self._rescale()
        return self


def draw_traces(ax, draws, coord=0, *, names=None, divergent=None, first=0):
    """Draw the trace of one coordinate for every chain.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim) or (chain, draw)
        A Run also gives the names and the divergent transitions. Works for
        Gibbs runs too.
    coord : int or str
    names : sequence of str, optional
    divergent : array_like of bool, shape (chain, draw), optional
    first : int
        Draw number of the first column (``run.first_draw`` for a ring buffer).

    Returns
    -------
    TracesDrawing
        ``update(draws, divergent=None, *, first=None)`` reuses the lines.
    """
    x, names, div_run = as_chain_draws(draws, names)
    coord = resolve_coord(coord, names)
    style.dress(ax)
    lines = _chain_lines(ax, x.shape[0], linewidth=0.9, alpha=0.9)
    (div,) = ax.plot([], [], zorder=5, linestyle="none", markersize=7,
                     **{k: v for k, v in style.DIVERGENT.items() if k not in ("linestyle", "markersize")})
    ax.set_xlabel("draw")
    ax.set_ylabel(names[coord])
    d = TracesDrawing(ax=ax, lines=lines, divergent=div, coord=coord, first=int(first))
    return d.update(x, divergent if divergent is not None else div_run)


# -------------------------------------------------------------- autocorrelation

@dataclass(repr=False, eq=False)
class AutocorrelationDrawing(Drawing):
    """Returned by ``draw_autocorrelation``.

    Attributes
    ----------
    ax : Axes
    lines : list of Line2D
        One per chain: ``(lag, autocorrelation)`` for lags ``0..max_lag``.
    coord : int
    max_lag : int
    """

    ax: Axes
    lines: list
    coord: int
    max_lag: int

    def update(self, draws):
        """Recompute the autocorrelation of new draws (same number of chains)."""
        from phaseglass.core.diagnostics import autocorrelation

        x, _, _ = as_chain_draws(draws)
        _check_chains(x, self.lines)
        lag = min(self.max_lag, x.shape[1] - 1)
        if lag < 1:
            acf = np.full((x.shape[0], 1), np.nan)
        else:
            acf = np.atleast_2d(autocorrelation(x[:, :, self.coord], max_lag=lag))
        for line, a in zip(self.lines, acf):
            line.set_data(np.arange(a.size), a)
        if self.autoscale:
            self.ax.set_xlim(-0.5, max(lag, 1) + 0.5)
        return self


def draw_autocorrelation(ax, draws, coord=0, *, max_lag=40, names=None):
    """Draw the autocorrelation of one coordinate against lag, one line per chain.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim) or (chain, draw)
    coord : int or str
    max_lag : int
        Largest lag shown (capped at ``draws - 1``).
    names : sequence of str, optional

    Returns
    -------
    AutocorrelationDrawing
        ``update(draws)`` recomputes into the same lines.
    """
    x, names, _ = as_chain_draws(draws, names)
    coord = resolve_coord(coord, names)
    if int(max_lag) < 1:
        raise ValueError(f"`max_lag` must be >= 1, got {max_lag}")
    style.dress(ax)
    ax.axhline(0.0, **style.REFERENCE)
    lines = _chain_lines(ax, x.shape[0], linewidth=1.1, marker=".", markersize=4)
    ax.set_ylim(-0.25, 1.05)
    ax.set_xlabel("lag")
    ax.set_ylabel(f"autocorrelation of {names[coord]}")
    d = AutocorrelationDrawing(ax=ax, lines=lines, coord=coord, max_lag=int(max_lag))
    return d.update(x)


# ------------------------------------------------------------------ running ESS

def running_ess(draws, *, n_points=12, min_draws=MIN_ESS_DRAWS):
    """Bulk ESS of the first ``n`` draws of every chain, for growing ``n``.

    Parameters
    ----------
    draws : array_like, shape (chain, draw, dim)
    n_points : int
    min_draws : int
        The first point; default ``MIN_ESS_DRAWS`` of ``phaseglass.core.efficiency``.

    Returns
    -------
    n : ndarray of int, shape (k,)
        Draws per chain used.
    ess : ndarray, shape (k, dim)
    """
    from phaseglass.core.diagnostics import ess

    x = np.asarray(draws, dtype=float)
    total = x.shape[1]
    if total < min_draws:
        return np.zeros(0, dtype=int), np.zeros((0, x.shape[2]))
    n = np.unique(np.linspace(min_draws, total, int(n_points)).astype(int))
    values = np.array([np.atleast_1d(ess(x[:, :k], method="bulk")) for k in n])
    return n, values


@dataclass(repr=False, eq=False)
class RunningEssDrawing(Drawing):
    """Returned by ``draw_running_ess``.

    Attributes
    ----------
    ax : Axes
    lines : list of Line2D
        One per coordinate: ``(draws per chain, bulk ESS)``.
    ideal : Line2D
        ``chains x draws``: what independent draws would give.
    threshold : Line2D
        100 per chain, the common-practice floor.
    coords : list of int
    n_points : int
    """

    ax: Axes
    lines: list
    ideal: Line2D
    threshold: Line2D
    coords: list
    n_points: int

    def update(self, draws):
        """Recompute the running ESS of new draws into the same lines."""
        from phaseglass.core.run import ESS_PER_CHAIN_LIMIT

        x, _, _ = as_chain_draws(draws)
        n, values = running_ess(x[:, :, self.coords], n_points=self.n_points)
        for line, v in zip(self.lines, values.T if values.size else [[]] * len(self.lines)):
            line.set_data(n, v)
        ends = np.array([0, max(x.shape[1], 1)])
        self.ideal.set_data(ends, x.shape[0] * ends)
        limit = ESS_PER_CHAIN_LIMIT * x.shape[0]
        self.threshold.set_data(ends, [limit, limit])
        self.threshold.set_label(f"{ESS_PER_CHAIN_LIMIT} per chain ({limit})")
        self._rescale()
        return self


def draw_running_ess(ax, draws, coords=None, *, n_points=12, names=None):
    """Draw the bulk ESS of the first n draws per chain as n grows, one line per coordinate.

    A line that bends away from the ideal (chains x draws) shows correlation; a
    line that stops growing shows chains that do not mix.

    Parameters
    ----------
    ax : Axes
    draws : Run or array_like, shape (chain, draw, dim)
    coords : sequence of int or str, optional
        Coordinates to show (default: the first six).
    n_points : int
        Number of prefix lengths evaluated.
    names : sequence of str, optional

    Returns
    -------
    RunningEssDrawing
        ``update(draws)`` recomputes into the same lines.
    """
    x, names, _ = as_chain_draws(draws, names)
    coords = _coords(coords, names)
    style.dress(ax)
    lines = []
    for k, c in enumerate(coords):
        (line,) = ax.plot([], [], label=names[c], linewidth=1.3, markersize=4,
                          **style.chain_style(k, markers=True))
        lines.append(line)
    (ideal,) = ax.plot([], [], label="independent draws (chains \u00d7 draws)", **style.REFERENCE)
    (thr,) = ax.plot([], [], **style.THRESHOLD)
    ax.set_xlabel("draws per chain")
    ax.set_ylabel("bulk ESS")
    d = RunningEssDrawing(ax=ax, lines=lines, ideal=ideal, threshold=thr, coords=coords,
                          n_points=int(n_points))
    return d.update(x)


# --------------------------------------------------------------- ESS / gradient

@dataclass(repr=False, eq=False)
class EssPerGradientDrawing(Drawing):
    """Returned by ``draw_ess_per_gradient``.

    Attributes
    ----------
    ax : Axes
    bars : list of Rectangle
        One per label; ``get_height()`` (or ``get_width()`` when horizontal) is the value.
    values : list of Text
        The value printed by each bar.
    horizontal : bool
    """

    ax: Axes
    bars: list
    values: list
    horizontal: bool

    def update(self, data):
        """Set new values (same number of bars)."""
        v = _values(data)
        if v.size != len(self.bars):
            raise ValueError(f"update needs {len(self.bars)} values, got {v.size}")
        for bar, text, val in zip(self.bars, self.values, v):
            shown = val if np.isfinite(val) else 0.0
            if self.horizontal:
                bar.set_width(shown)
                text.set_position((shown, bar.get_y() + 0.5 * bar.get_height()))
            else:
                bar.set_height(shown)
                text.set_position((bar.get_x() + 0.5 * bar.get_width(), shown))
            text.set_text(" " + _fmt(val) if self.horizontal else _fmt(val))
        self._rescale()
        return self


def _fmt(v):
    return "n/a" if not np.isfinite(v) else f"{v:.3g}"


def _values(data):
    if hasattr(data, "draws"):
        return ess_per_gradient(data, per_coordinate=True)
    return np.asarray(data, dtype=float).reshape(-1)


def draw_ess_per_gradient(ax, data, labels=None, *, horizontal=None,
                          ylabel="bulk ESS per gradient evaluation"):
    """Draw effective sample size per gradient evaluation as bars.

    Parameters
    ----------
    ax : Axes
    data : Run or array_like, shape (k,)
        A Run gives each parameter's ``core.efficiency.ess_per_gradient`` (NaN
        for a gradient-free kernel or fewer than ``MIN_ESS_DRAWS`` draws per
        chain); an array is drawn as given (e.g. one value per setting compared).
    labels : sequence of str, optional
        One per bar (a Run gives its names).
    horizontal : bool, optional
        Horizontal bars; default when there are more than 8.
    ylabel : str

    Returns
    -------
    EssPerGradientDrawing
        ``update(data)`` changes the bar lengths and printed values in place.
    """
    v = _values(data)
    if labels is None:
        labels = getattr(data, "names", None) or [str(i) for i in range(v.size)]
    labels = [str(s) for s in labels]
    if len(labels) != v.size:
        raise ValueError(f"`labels` must have {v.size} entries, got {len(labels)}")
    if horizontal is None:
        horizontal = v.size > 8
    style.dress(ax)
    pos = np.arange(v.size)
    colour = style.OKABE_ITO["sky_blue"]
    edge = style.OKABE_ITO["blue"]
    if horizontal:
        bars = ax.barh(pos, np.zeros(v.size), color=colour, edgecolor=edge, height=0.6)
        ax.set_yticks(pos, labels)
        ax.invert_yaxis()
        ax.set_xlabel(ylabel)
        texts = [ax.text(0, p, "", ha="left", va="center", fontsize=8) for p in pos]
    else:
        bars = ax.bar(pos, np.zeros(v.size), color=colour, edgecolor=edge, width=0.6)
        ax.set_xticks(pos, labels, rotation=30 if v.size > 4 else 0, ha="right" if v.size > 4 else "center")
        ax.set_ylabel(ylabel)
        texts = [ax.text(p, 0, "", ha="center", va="bottom", fontsize=8) for p in pos]
    if horizontal:
        ax.margins(x=0.2, y=0.05)
        ax.ticklabel_format(axis="x", style="sci", scilimits=(-2, 3))
    else:
        ax.margins(x=0.05, y=0.15)
        ax.ticklabel_format(axis="y", style="sci", scilimits=(-2, 3))
    d = EssPerGradientDrawing(ax=ax, bars=list(bars.patches), values=texts, horizontal=horizontal)
    return d.update(v)


# -------------------------------------------------------------- next transition

#: A transition that has not happened yet: dashed and faded black (no chain colour), with a
#: diamond (never a circle) at the proposal, so it cannot be read as a recorded one.
_NEXT_PATH = dict(color=style.OKABE_ITO["black"], linestyle=(0, (4.0, 2.5)), linewidth=1.3,
                  alpha=0.75, marker="o", markersize=2.0)
_NEXT_END = dict(marker="D", markersize=7.5, linestyle="none", markeredgewidth=1.5)
_NEXT_END_COLOURS = {True: (style.ACCEPTED["color"], style.ACCEPTED["color"]),
                     False: (style.REJECTED["markeredgecolor"], "none"),
                     None: ("#555555", "#BBBBBB")}


def _next_parts(transition, coords, chain):
    """Split a pending transition into (path, divergent segment, proposal), each (k, 2)."""
    from phaseglass.core.leapfrog import Trajectory

    from ..core.leapfrog import one_chain

    none = np.empty((0, 2))
    if transition is None:
        return none, none, none
    if isinstance(transition, Trajectory):
        traj = one_chain(transition, chain)
        pos = traj.positions[:, list(coords)]
        if traj.divergent:
            k = traj.divergence_step
            tip = pos[k] if np.all(np.isfinite(pos[k])) else pos[k - 1]
            return pos[:k], np.vstack([pos[k - 1], tip]), none
        return pos, none, pos[-1:]
    pts = np.asarray(transition, dtype=float)
    if pts.ndim != 2 or pts.shape[0] < 2 or pts.shape[1] <= max(coords):
        raise ValueError("`transition` must be a Trajectory or points shaped (k >= 2, dim) "
                         f"covering coordinates {tuple(coords)}, got shape {pts.shape}")
    pos = pts[:, list(coords)]
    return pos, none, pos[-1:]


@dataclass(repr=False, eq=False)
class NextTransitionDrawing(Drawing):
    """Returned by ``draw_next_transition``.

    Attributes
    ----------
    ax : Axes
    path : Line2D
        Dashed, faded path of the pending transition: the leapfrog positions up
        to the last safe step, or the points given (a random walk's
        ``[start, proposal]``); empty when nothing is previewed.
    end : Line2D
        Diamond at the proposal: filled when it would be accepted, hollow when
        rejected, grey when not given; empty for a divergent transition.
    divergent : Line2D
        Dashed segment to the step that would diverge, with an ``X``; empty otherwise.
    coords : tuple of int
    """

    ax: Axes
    path: Line2D
    end: Line2D
    divergent: Line2D
    coords: tuple

    def update(self, transition=None, accepted=None, *, chain=0):
        """Show another pending transition (None shows nothing) with the same artists."""
        path, div, end = _next_parts(transition, self.coords, chain)
        self.path.set_data(path[:, 0], path[:, 1])
        self.divergent.set_data(div[:, 0], div[:, 1])
        self.end.set_data(end[:, 0], end[:, 1])
        edge, face = _NEXT_END_COLOURS[None if accepted is None else bool(accepted)]
        self.end.set_color(edge)
        self.end.set_markeredgecolor(edge)
        self.end.set_markerfacecolor(face)
        self._rescale()
        return self


def draw_next_transition(ax, transition=None, accepted=None, *, coords=(0, 1), chain=0,
                         names=None, label="next transition (preview)"):
    """Draw the transition a chain would take next, as a preview (dashed, faded, a diamond).

    Beside the recorded draws and the latest trajectory, this shows what the
    next transition *would* do with the current knobs, before it is taken.

    Parameters
    ----------
    ax : Axes
    transition : Trajectory or array_like, shape (k, dim), optional
        A leapfrog Trajectory (single, or a batch with ``chain``) on the
        sampler's scale, or the points of a move without a trajectory (a random
        walk's ``[start, proposal]``). None draws nothing (yet).
    accepted : bool, optional
        Whether the proposal would be accepted (filled diamond) or rejected (hollow).
    coords : pair of int or str
    chain : int
        Row of a batch Trajectory.
    names : sequence of str, optional
        Coordinate names (to resolve ``coords`` given by name).
    label : str
        Legend label of the path.

    Returns
    -------
    NextTransitionDrawing
        ``update(transition=None, accepted=None, *, chain=0)`` reuses the artists.

    Examples
    --------
    >>> import phaseglass as pg
    >>> from matplotlib.figure import Figure
    >>> tr = pg.leapfrog(pg.demos.correlated_gaussian(), [1.0, 0.0], [0.0, 1.0], 0.2, 12)
    >>> d = draw_next_transition(Figure().add_subplot(), tr, accepted=True)
    >>> d.path.get_xydata().shape
    (13, 2)
    """

    if names is not None:
        coords = resolve_coords(coords, names, len(names))
    else:
        coords = tuple(int(c) for c in coords)
        if len(coords) != 2 or min(coords) < 0:
            raise ValueError(f"`coords` must be two non-negative indices, got {coords}")
    (path,) = ax.plot([], [], label=label, zorder=6, **_NEXT_PATH)
    (div,) = ax.plot([], [], label="_next divergent step", markevery=[1], zorder=6,
                     **{**style.DIVERGENT, "linestyle": (0, (4.0, 2.5)), "alpha": 0.85})
    exclude_from_autoscale(div)
    (end,) = ax.plot([], [], label="_next proposal", zorder=7, **_NEXT_END)
    d = NextTransitionDrawing(ax=ax, path=path, end=end, divergent=div, coords=tuple(coords))
    return d.update(transition, accepted, chain=chain)
