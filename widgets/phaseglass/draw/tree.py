"""One no-U-turn transition's doubling tree: its states, its U-turn, its candidates' weights."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import PathCollection
from matplotlib.lines import Line2D
from matplotlib.patches import FancyArrowPatch
from matplotlib.text import Text
from matplotlib.ticker import MaxNLocator

from . import style
from ._base import Drawing
from .trajectory import (_arrow_in_view, _check_upto, _divergence_marker, _label_slice,
                         _line_in_view, _move_thresholds, _symlog_energy_axis, _threshold_lines)

__all__ = ["draw_tree", "draw_tree_energy", "draw_tree_depths", "tree_rows", "TreeDrawing",
           "TreeEnergyDrawing", "TreeDepthDrawing"]

#: The U-turn: the stretch the criterion looked at (a wide pale band) and its two ends.
TURN_SPAN = dict(color=style.OKABE_ITO["orange"], linewidth=7.0, alpha=0.35,
                 solid_capstyle="round", linestyle="-")
TURN_ENDS = dict(color=style.OKABE_ITO["orange"], marker="D", markersize=7, linestyle="none",
                 markerfacecolor="white", markeredgecolor=style.OKABE_ITO["orange"],
                 markeredgewidth=1.8)
ABANDONED = dict(color="#777777", linestyle=":", linewidth=1.3, marker="o", markersize=2.5)
_SIZE_MIN, _SIZE_MAX = 4.0, 160.0  # marker areas (pt^2) of candidates, by selection weight


def tree_rows(tree, chain=0):
    """One chain's part of a ``DoublingTree`` as plain arrays, padding dropped.

    Returns
    -------
    dict
        ``positions``, ``momenta``, ``energy_error``, ``doubling``, ``merged``,
        ``selection_prob`` (rows in time order), ``start``, ``selected``,
        ``divergence_step`` (-1 when none), ``turn_rows`` (pair, -1 when none),
        ``turn_whole``, ``directions`` (of the doublings made), ``depth``,
        ``step_size``, ``max_energy_error``.
    """
    from phaseglass.core.nuts import DoublingTree

    if not isinstance(tree, DoublingTree):
        raise TypeError(f"`tree` must be a DoublingTree (from NUTS.build_tree), got "
                        f"{type(tree).__name__}")
    n = tree.positions.shape[0]
    if not -n <= chain < n:
        raise ValueError(f"`chain` must be in range({n}) for this tree, got {chain}")
    keep = tree.doubling[chain] != -2
    # padding sits only after the last state (rows are offsets from the earliest state)
    m = int(np.flatnonzero(keep)[-1]) + 1
    directions = tree.directions[chain]
    depth = int(np.count_nonzero(directions))
    eps = np.asarray(tree.step_size).reshape(-1)
    return dict(
        positions=tree.positions[chain, :m], momenta=tree.momenta[chain, :m],
        energy_error=tree.energy_error[chain, :m], doubling=tree.doubling[chain, :m],
        merged=tree.merged[chain, :m], selection_prob=tree.selection_prob[chain, :m],
        start=int(tree.start[chain]), selected=int(tree.selected[chain]),
        divergence_step=int(tree.divergence_step[chain]),
        turn_rows=tuple(int(v) for v in tree.turn_rows[chain]),
        turn_whole=bool(tree.turn_whole[chain]), directions=directions[:depth].copy(),
        depth=depth, step_size=float(eps[chain] if eps.size > 1 else eps[0]),
        max_energy_error=float(tree.max_energy_error))


def _divergent_segment(t):
    """(2, dim) from the last state before the divergent one to it, along its doubling."""
    k = t["divergence_step"]
    if k < 0:
        return None, None
    j = t["doubling"][k]
    before = k - 1 if t["directions"][j] > 0 else k + 1
    tip = t["positions"][k]
    if not np.all(np.isfinite(tip)):
        tip = t["positions"][before]
    return np.vstack([t["positions"][before], tip]), int(j)


def _weights_shown(t, shown):
    """Selection weights of the shown states: final probabilities, or exp(-dH) normalised."""
    if shown.all():
        return np.nan_to_num(t["selection_prob"])
    w = np.where(shown & t["merged"], np.exp(-np.minimum(t["energy_error"], 700.0)), 0.0)
    w = np.nan_to_num(w)
    total = w.sum()
    return w / total if total > 0 else w


@dataclass(repr=False, eq=False)
class TreeDrawing(Drawing):
    """Returned by ``draw_tree``.

    Attributes
    ----------
    ax : Axes
    path : Line2D
        The trajectory the next state is drawn from (merged states of the shown
        doublings), in time order; ``get_xydata()`` is ``positions[rows, coords]``.
    newest : Line2D
        The last shown doubling's merged states (thicker), so play shows where each went.
    abandoned : Line2D
        The subtree that was given up (it turned or diverged), dotted grey; empty
        until its doubling is shown.
    candidates : PathCollection
        Every shown state, marker area growing with its chance of being selected
        (``weights``).
    divergent : Line2D
        Dashed segment to the divergent state with an ``X``, as in every view; empty
        when the tree did not diverge (or its doubling is not shown yet).
    turn_span : Line2D
        Wide pale band over the states the U-turn criterion looked at when it fired.
    turn_ends : Line2D
        Diamonds at the two states whose momenta were compared.
    turn_momenta : list of FancyArrowPatch
        Their velocities ``M^-1 p`` (the criterion compares them with the summed momentum).
    start, selected : Line2D
        Start (black square) and the state the transition moved to (filled circle).
    momentum : FancyArrowPatch
        The initial momentum as its velocity ``M^-1 p0``, from the start.
    rows : ndarray of int
        Rows (time order) of the states shown in ``candidates``.
    weights : ndarray
        Their selection weights (the final probabilities once the whole tree is shown).
    """

    ax: Axes
    path: Line2D
    newest: Line2D
    abandoned: Line2D
    candidates: PathCollection
    divergent: Line2D
    turn_span: Line2D
    turn_ends: Line2D
    turn_momenta: list
    start: Line2D
    selected: Line2D
    momentum: FancyArrowPatch
    coords: tuple
    momentum_scale: float
    metric: object = None
    rows: np.ndarray = None
    weights: np.ndarray = None

    def update(self, tree, *, chain=0, upto=None):
        """Show another tree (or its first ``upto`` doublings) with the same artists."""
        t = tree_rows(tree, chain)
        upto = _check_upto(upto, t["depth"])
        c = list(self.coords)
        pos = t["positions"][:, c]
        dbl = t["doubling"]
        shown = dbl < upto  # the start has doubling -1
        complete = upto >= t["depth"]
        on_path = shown & t["merged"]
        # a divergent state (and beyond) is not part of any path
        k = t["divergence_step"]
        ok = np.all(np.isfinite(pos), axis=1)
        if k >= 0:
            ok[k] = False
        xy = pos[on_path & ok]
        self.path.set_data(xy[:, 0], xy[:, 1])
        newest = (dbl == upto - 1) & t["merged"] & ok if upto > 0 else np.zeros_like(shown)
        xy = pos[newest]
        self.newest.set_data(xy[:, 0], xy[:, 1])
        gone = shown & ~t["merged"] & (dbl >= 0) & ok
        xy = pos[gone]
        self.abandoned.set_data(xy[:, 0], xy[:, 1])
        self.abandoned.set_label("abandoned subtree" if gone.any() else "_abandoned subtree")
        rows = np.flatnonzero(shown & ok)
        w = _weights_shown(t, shown)[rows]
        self.rows, self.weights = rows, w
        self.candidates.set_offsets(pos[rows] if rows.size else np.empty((0, 2)))
        top = float(w.max()) if w.size and w.max() > 0 else 1.0
        self.candidates.set_sizes(_SIZE_MIN + (_SIZE_MAX - _SIZE_MIN) * w / top)
        seg, j = _divergent_segment(t)
        if seg is not None and j < upto:
            seg = seg[:, c]
            self.divergent.set_data(seg[:, 0], seg[:, 1])
            self.divergent.set_label("divergent subtree")
        else:
            self.divergent.set_data([], [])
            self.divergent.set_label("_divergent subtree")
        a, b = t["turn_rows"]
        if complete and a >= 0:
            span = pos[a:b + 1]
            self.turn_span.set_data(span[:, 0], span[:, 1])
            self.turn_ends.set_data(pos[[a, b], 0], pos[[a, b], 1])
            for arrow, r in zip(self.turn_momenta, (a, b)):
                v = self.metric.velocity(t["momenta"][r])[c] * self.momentum_scale
                arrow.set_positions(tuple(pos[r]), tuple(pos[r] + v))
                arrow.set_visible(True)
            self.turn_ends.set_label("U-turn: momenta compared")
        else:
            self.turn_span.set_data([], [])
            self.turn_ends.set_data([], [])
            for arrow in self.turn_momenta:
                arrow.set_positions((0, 0), (0, 0))
                arrow.set_visible(False)
            self.turn_ends.set_label("_U-turn")
        s = t["start"]
        self.start.set_data([pos[s, 0]], [pos[s, 1]])
        if complete:
            r = t["selected"]
            self.selected.set_data([pos[r, 0]], [pos[r, 1]])
        else:
            self.selected.set_data([], [])
        v0 = self.metric.velocity(t["momenta"][s])[c] * self.momentum_scale
        self.momentum.set_positions(tuple(pos[s]), tuple(pos[s] + v0))
        self._rescale()
        return self


def _arrow(ax, **kwargs):
    return _arrow_in_view(ax, mutation_scale=11, linewidth=1.4, **kwargs)


def draw_tree(ax, tree, *, coords=(0, 1), chain=0, upto=None, momentum_scale=None, metric=None,
              names=None):
    """Draw one NUTS transition's doubling tree through two coordinates.

    Parameters
    ----------
    ax : Axes
    tree : DoublingTree
        From ``NUTS.build_tree`` or ``Sampler.step(record=True)``.
    coords : pair of int or str
    chain : int
        Row of a batch tree.
    upto : int, optional
        Show only the first ``upto`` doublings (0: the start alone); the U-turn and
        the selected state appear once the whole tree is shown.
    momentum_scale : float, optional
        Arrow length per unit of velocity (default: four step sizes).
    metric : Metric or array, optional
        The kernel's metric, so arrows point along ``M^-1 p``.
    names : sequence of str, optional

    Returns
    -------
    TreeDrawing
        ``update(tree, *, chain=0, upto=None)`` reuses the artists.

    Examples
    --------
    >>> import phaseglass as pg
    >>> from matplotlib.figure import Figure
    >>> tree, _ = pg.NUTS(0.3).build_tree(pg.demos.correlated_gaussian(), [1.0, 0.0],
    ...                                   [0.0, 1.0], seed=2)
    >>> d = draw_tree(Figure().add_subplot(), tree)
    >>> len(d.rows) == tree.positions.shape[1]
    True
    """
    from phaseglass.core.metric import as_metric
    from phaseglass.core.slices import resolve_coords

    t = tree_rows(tree, chain)
    dim = t["positions"].shape[1]
    coords = resolve_coords(coords, names, dim)
    metric = as_metric(metric, dim)
    if momentum_scale is None:
        momentum_scale = 4.0 * t["step_size"]
    style.dress(ax)
    (span,) = ax.plot([], [], zorder=2, label="U-turn: stretch checked", **TURN_SPAN)
    (path,) = ax.plot([], [], zorder=3, label="trajectory (merged doublings)",
                      **{**style.PATH, "marker": "none"})
    (newest,) = ax.plot([], [], zorder=3, label="latest doubling",
                        **{**style.PATH, "linewidth": 2.6, "marker": "none", "alpha": 0.6})
    (gone,) = ax.plot([], [], zorder=3, label="abandoned subtree", **ABANDONED)
    cand = ax.scatter(np.empty(0), np.empty(0), s=np.empty(0), zorder=4,
                      facecolor=style.OKABE_ITO["sky_blue"], edgecolor=style.OKABE_ITO["blue"],
                      linewidths=0.6, alpha=0.75, label="candidates (area: chance of selection)")
    div = _line_in_view(ax, "segment", label="divergent subtree", markevery=[1], zorder=5,
                        **style.DIVERGENT)
    (ends,) = ax.plot([], [], zorder=6, label="U-turn: momenta compared", **TURN_ENDS)
    turn_arrows = [_arrow(ax, color=style.OKABE_ITO["orange"], zorder=6) for _ in range(2)]
    (start,) = ax.plot([], [], label="start", zorder=7, **style.START)
    (sel,) = ax.plot([], [], label="selected (next state)", markersize=9, zorder=7,
                     **style.ACCEPTED)
    arrow = _arrow(ax, color=style.MOMENTUM["color"], label="initial momentum", zorder=6)
    _label_slice(ax, coords, names)
    d = TreeDrawing(ax=ax, path=path, newest=newest, abandoned=gone, candidates=cand,
                    divergent=div, turn_span=span, turn_ends=ends, turn_momenta=turn_arrows,
                    start=start, selected=sel, momentum=arrow, coords=tuple(coords),
                    momentum_scale=float(momentum_scale), metric=metric)
    return d.update(tree, chain=chain, upto=upto)


# ------------------------------------------------------------------ energy error

@dataclass(repr=False, eq=False)
class TreeEnergyDrawing(Drawing):
    """Returned by ``draw_tree_energy``.

    Attributes
    ----------
    ax : Axes
    error : Line2D
        ``(offset, energy error)`` of the merged states shown, offset = leapfrog
        steps from the start (negative: integrated backward in time).
    abandoned : Line2D
        The same for the abandoned subtree (dotted).
    divergence : Line2D
        ``X`` at the divergent state (drawn on the edge when off the scale).
    thresholds : list of Line2D
    title : Text
    """

    ax: Axes
    error: Line2D
    abandoned: Line2D
    divergence: Line2D
    thresholds: list
    title: Text

    def update(self, tree, *, chain=0, upto=None):
        """Show another tree's energy errors with the same artists."""
        t = tree_rows(tree, chain)
        upto = _check_upto(upto, t["depth"])
        off = np.arange(len(t["doubling"])) - t["start"]
        err = t["energy_error"]
        dbl = t["doubling"]
        shown = dbl < upto
        k = t["divergence_step"]
        ok = np.isfinite(err)
        if k >= 0:
            ok[k] = False
        merged = shown & t["merged"] & ok
        self.error.set_data(off[merged], err[merged])
        gone = shown & ~t["merged"] & (dbl >= 0) & ok
        self.abandoned.set_data(off[gone], err[gone])
        self.abandoned.set_label("abandoned subtree" if gone.any() else "_abandoned subtree")
        thr = t["max_energy_error"]
        if k >= 0 and dbl[k] < upto:
            v = err[k] if np.isfinite(err[k]) else thr * 1e6
            self.divergence.set_data([off[k]], [v])
            self.divergence.set_label("divergent state")
        else:
            self.divergence.set_data([], [])
            self.divergence.set_label("_divergent state")
        lo, hi = int(off.min()), int(off.max())
        self.ax.set_xlim(lo - 0.5 - 0.02 * (hi - lo), hi + 0.5 + 0.02 * (hi - lo))
        _move_thresholds(self.ax, self.thresholds, thr)
        finite = err[merged | gone]
        worst = float(np.max(np.abs(finite))) if finite.size else 0.0
        self.title.set_text(f"{int(np.count_nonzero(shown)) - 1} leapfrog states, "
                            f"largest |\u0394H| {worst:.3g}")
        return self


def draw_tree_energy(ax, tree, *, chain=0, upto=None, linthresh=1.0):
    """Draw the energy error ``H - H(start)`` of every state of a doubling tree.

    On a symlog axis (linear within +-``linthresh``) with the divergence
    threshold, against the state's place in time (leapfrog steps from the
    start; negative for backward doublings).

    Returns
    -------
    TreeEnergyDrawing
        ``update(tree, *, chain=0, upto=None)`` reuses the artists.
    """
    t = tree_rows(tree, chain)
    style.dress(ax)
    _symlog_energy_axis(ax, t["max_energy_error"], linthresh)
    ax.axhline(0.0, **style.REFERENCE, zorder=1)
    ax.axvline(0.0, **style.REFERENCE, zorder=1)
    thr = t["max_energy_error"]
    thresholds = _threshold_lines(ax, thr)
    (error,) = ax.plot([], [], label="energy error \u0394H", zorder=3,
                       **{**style.PATH, "markersize": 3.0})
    (gone,) = ax.plot([], [], label="abandoned subtree", zorder=3, **ABANDONED)
    div = _divergence_marker(ax, "divergent state")
    title = ax.set_title("", loc="left", fontsize=8)
    ax.set_xlabel("steps from the start (< 0: backward)")
    ax.set_ylabel("\u0394H = H \u2212 H(start)")
    d = TreeEnergyDrawing(ax=ax, error=error, abandoned=gone, divergence=div,
                          thresholds=thresholds, title=title)
    return d.update(tree, chain=chain, upto=upto)


# ------------------------------------------------------------------ tree depth of a run

def _depths(data):
    d = getattr(data, "extras", None)
    d = d.get("tree_depth") if isinstance(d, dict) else data
    d = np.asarray(d)
    if d.ndim == 1:
        d = d[None, :]
    if d.ndim != 2:
        raise ValueError(f"`depth` must have shape (chain, draw), got {d.shape}")
    return d.astype(int)


@dataclass(repr=False, eq=False)
class TreeDepthDrawing(Drawing):
    """Returned by ``draw_tree_depths``.

    Attributes
    ----------
    ax, ax_trace : Axes
    bars : StepPatch
        Share of transitions per tree depth 1..max_depth, chains pooled.
    at_limit : StepPatch
        The bar of the limit itself, hatched and in the divergence colour.
    limit_lines : list of Line2D
        ``max_depth`` marked on both panels (dash-dot).
    traces : list of Line2D
        Depth against draw, one line per chain.
    title : Text
        Share of transitions that stopped at the limit.
    """

    ax: Axes
    ax_trace: Axes
    bars: object
    at_limit: object
    limit_lines: list
    traces: list
    title: Text
    max_depth: int

    def update(self, depth, hit=None):
        """Show other depths (and ``hit``, the transitions stopped by the limit) in place."""
        d = _depths(depth)
        top = self.max_depth
        edges = np.arange(0.5, top + 1.5)
        counts = np.array([np.count_nonzero(d == k) for k in range(1, top + 1)], dtype=float)
        share = counts / max(d.size, 1)
        self.bars.set_data(np.where(np.arange(1, top + 1) < top, share, 0.0), edges)
        self.at_limit.set_data(np.where(np.arange(1, top + 1) == top, share, 0.0), edges)
        for line, row in zip(self.traces, d):
            line.set_data(np.arange(row.size), row)
        if hit is None:
            share_hit = float(np.mean(d >= top)) if d.size else 0.0
            self.title.set_text(f"{share_hit:.0%} of transitions reached max_depth = {top}")
        else:
            share_hit = float(np.mean(np.asarray(hit, dtype=bool)))
            self.title.set_text(f"{share_hit:.0%} of transitions stopped at max_depth = {top} "
                                "before turning back")
        self.ax.set_xlim(0.4, top + 0.6)
        self.ax.set_ylim(0.0, max(float(share.max()) if share.size else 0.0, 0.05) * 1.15)
        self.ax_trace.set_xlim(-0.5, d.shape[1] - 0.5)
        self.ax_trace.set_ylim(0.5, top + 0.5)
        return self


def draw_tree_depths(ax, ax_trace, depth, max_depth, *, hit=None, max_chains=4):
    """Tree depth of every NUTS transition: a histogram with the limit marked, and depth per draw.

    Parameters
    ----------
    ax, ax_trace : Axes
        Histogram (share of transitions per depth, chains pooled) and trace panels.
    depth : Run or array_like, shape (chain, draw)
        ``run.extras["tree_depth"]`` (or the Run).
    max_depth : int
        The kernel's limit, marked on both panels.
    hit : array_like of bool, shape (chain, draw), optional
        ``run.extras["depth_limit_hit"]``: the title then counts the trees the limit
        stopped (a tree can also turn back at its last allowed doubling).
    max_chains : int
        Chains drawn in the trace panel.

    Returns
    -------
    TreeDepthDrawing
        ``update(depth)`` reuses the artists.
    """
    d = _depths(depth)
    top = int(max_depth)
    style.dress(ax)
    style.dress(ax_trace)
    empty = (np.zeros(top), np.arange(0.5, top + 1.5))
    bars = ax.stairs(*empty, fill=True, facecolor=style.OKABE_ITO["sky_blue"], alpha=0.8,
                     edgecolor=style.OKABE_ITO["blue"], label="tree depth")
    at_limit = ax.stairs(*empty, fill=True, facecolor=style.OKABE_ITO["vermillion"], alpha=0.55,
                         edgecolor=style.OKABE_ITO["vermillion"], hatch="//",
                         label="depth = max_depth")
    lines = [ax.axvline(top + 0.5, label=f"max_depth = {top}", **style.THRESHOLD),
             ax_trace.axhline(top, **style.THRESHOLD)]
    traces = []
    for i in range(min(d.shape[0], int(max_chains))):
        kw = style.chain_style(i)
        (line,) = ax_trace.plot([], [], drawstyle="steps-mid", linewidth=0.9, label=f"chain {i}",
                                **kw)
        traces.append(line)
    ax.set_xlabel("tree depth (doublings)")
    ax.set_ylabel("share of transitions")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax_trace.set_xlabel("draw")
    ax_trace.set_ylabel("tree depth")
    ax_trace.yaxis.set_major_locator(MaxNLocator(integer=True))
    title = ax.set_title("", loc="left", fontsize=9)
    out = TreeDepthDrawing(ax=ax, ax_trace=ax_trace, bars=bars, at_limit=at_limit,
                           limit_lines=lines, traces=traces, title=title, max_depth=top)
    return out.update(d, hit)
