"""One leapfrog trajectory: its path through two coordinates, and its energy error per step."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D
from matplotlib.patches import FancyArrowPatch
from matplotlib.text import Text
from matplotlib.ticker import FuncFormatter, Locator, NullLocator

from ..core.leapfrog import one_chain  # the core's, re-exported for drawing code
from . import style
from ._base import Drawing, exclude_from_autoscale

__all__ = ["draw_trajectory", "draw_energy_error", "one_chain", "TrajectoryDrawing",
           "EnergyErrorDrawing"]


# ------------------------------------------------------- keeping marks inside the Axes

def _inner_box(ax, pad):
    """The Axes' box in display pixels, shrunk by ``pad`` pixels on every side (or None)."""
    b = ax.bbox
    box = (b.x0 + pad, b.y0 + pad, b.x1 - pad, b.y1 - pad)
    return box if box[2] > box[0] and box[3] > box[1] else None


def _inside(p, box):
    return box[0] <= p[0] <= box[2] and box[1] <= p[1] <= box[3]


def _cut_at_box(tail, tip, box):
    """``tip`` moved back along ``tail -> tip`` onto the edge of ``box`` (tail inside)."""
    d = tip - tail
    t = 1.0
    for axis, (lo, hi) in enumerate(((box[0], box[2]), (box[1], box[3]))):
        if tail[axis] + t * d[axis] > hi:
            t = (hi - tail[axis]) / d[axis]
        elif tail[axis] + t * d[axis] < lo:
            t = (lo - tail[axis]) / d[axis]
    return tail + max(t, 0.0) * d


class _ArrowInView(FancyArrowPatch):
    """An arrow shortened at draw time so that its head stays inside its Axes.

    Its positions keep the true tail and tip (``get_path``, ``momentum_ends``); a
    tip beyond the view is drawn on the edge of the Axes, head and all, instead of
    being cut off. An arrow whose tail is outside the view is not drawn.
    """

    #: Tail and tip as last drawn (data coordinates), None when the arrow was not drawn.
    shown_ends = None

    def draw(self, renderer):
        ends = [np.asarray(p, dtype=float) for p in self._posA_posB]
        self.shown_ends = np.array(ends)
        ax = self.axes
        if ax is None or not self.get_visible():
            return super().draw(renderer)
        to_px = self.get_transform()
        tail, tip = to_px.transform(ends[0]), to_px.transform(ends[1])
        box = _inner_box(ax, renderer.points_to_pixels(3.0))
        if box is None or not np.all(np.isfinite([tail, tip])) or _inside(tip, box):
            return super().draw(renderer)
        if not _inside(tail, box):
            self.shown_ends = None
            return None
        shown = to_px.inverted().transform(_cut_at_box(tail, tip, box))
        self.shown_ends = np.array([ends[0], shown])
        self._posA_posB = [tuple(ends[0]), tuple(shown)]
        try:
            return super().draw(renderer)
        finally:
            self._posA_posB = [tuple(ends[0]), tuple(ends[1])]


class _LineInView(Line2D):
    """A Line2D whose marked end is drawn inside its Axes, never cut by the frame.

    ``keep="segment"``: a two-point segment from a point in view to one that may
    be far outside (a divergence) is shortened onto the edge of the Axes, so its
    end marker is drawn whole there. ``keep="points"``: each point is pulled
    inside the frame (a marker for a value off the scale sits on the edge). Only
    drawing changes: ``get_xydata`` keeps the true values.
    """

    def __init__(self, *args, keep="segment", **kwargs):
        super().__init__(*args, **kwargs)
        self.keep = keep

    def _shown(self, xy, renderer):
        ax = self.axes
        pad = renderer.points_to_pixels(0.5 * self.get_markersize() + 1.0)
        box = _inner_box(ax, pad) if ax is not None else None
        if box is None or len(xy) == 0:
            return None
        to_px = self.get_transform()
        px = to_px.transform(np.where(np.isfinite(xy), xy, np.sign(xy) * 1e300))
        if not np.all(np.isfinite(px)):
            return None
        if self.keep == "points":
            moved = np.column_stack([np.clip(px[:, 0], box[0], box[2]),
                                     np.clip(px[:, 1], box[1], box[3])])
        else:
            if len(px) != 2 or not _inside(px[0], box) or _inside(px[1], box):
                return None
            moved = np.vstack([px[0], _cut_at_box(px[0], px[1], box)])
        if np.array_equal(moved, px):
            return None
        return to_px.inverted().transform(moved)

    #: Positions as last drawn (data coordinates).
    shown_xydata = None

    def draw(self, renderer):
        xy = self.get_xydata()
        shown = self._shown(xy, renderer) if self.get_visible() else None
        self.shown_xydata = xy.copy() if shown is None else shown
        if shown is None:
            return super().draw(renderer)
        self.set_data(shown[:, 0], shown[:, 1])
        try:
            return super().draw(renderer)
        finally:
            self.set_data(xy[:, 0], xy[:, 1])
            self.stale = False


def _line_in_view(ax, keep, **kwargs):
    """An empty ``_LineInView`` on ``ax``, left out of autoscaling (it may point far away)."""
    line = _LineInView([], [], keep=keep, **kwargs)
    ax.add_line(line)
    exclude_from_autoscale(line)
    return line


def _divergence_marker(ax, label):
    """The ``X`` of a divergent step on an energy-error panel (on the edge when off-scale)."""
    return _line_in_view(ax, "points", linestyle="none", label=label, zorder=4,
                         **{k: v for k, v in style.DIVERGENT.items() if k != "linestyle"})


def _arrow_in_view(ax, *, mutation_scale, linewidth, **kwargs):
    """An empty ``_ArrowInView`` on ``ax`` (a momentum), left out of autoscaling."""
    arrow = _ArrowInView((0, 0), (0, 0), arrowstyle="-|>", mutation_scale=mutation_scale,
                         linewidth=linewidth, shrinkA=0, shrinkB=0, **kwargs)
    ax.add_patch(arrow)
    exclude_from_autoscale(arrow)
    return arrow


def _label_slice(ax, coords, names):
    """Name the axes of a 2-D slice: the coordinates' names, or ``x[i]`` when none are given."""
    if names is not None:
        ax.set_xlabel(names[coords[0]])
        ax.set_ylabel(names[coords[1]])
    elif not ax.get_xlabel():
        ax.set_xlabel(f"x[{coords[0]}] (sampler's scale)")
        ax.set_ylabel(f"x[{coords[1]}] (sampler's scale)")


def _check_upto(upto, n_steps):
    if upto is None:
        return n_steps
    upto = int(upto)
    if upto < 0:
        raise ValueError(f"`upto` must be >= 0, got {upto}")
    return min(upto, n_steps)


def _parts(traj, coords, upto):
    """Split one trajectory into (path, divergent segment, end point, finished) for drawing."""
    pos = traj.positions[:, list(coords)]
    k = traj.divergence_step if traj.divergent else None
    safe_last = k - 1 if k is not None else traj.n_steps
    shown = min(safe_last, upto)
    path = pos[:shown + 1]
    if k is not None and upto >= k:
        tip = pos[k] if np.all(np.isfinite(pos[k])) else pos[k - 1]
        divergent = np.vstack([pos[k - 1], tip])
    else:
        divergent = np.empty((0, 2))
    finished = upto >= (k if k is not None else traj.n_steps)
    end = pos[safe_last][None, :] if finished else np.empty((0, 2))
    return path, divergent, end, finished


_END_LABELS = {True: "end (accepted)", False: "end (rejected)", None: "end"}


def _end_style(line, accepted):
    kw = {True: style.ACCEPTED, False: style.REJECTED, None: style.UNDECIDED}[accepted]
    line.set_marker(kw["marker"])
    line.set_color(kw["color"])
    line.set_markerfacecolor(kw["markerfacecolor"])
    line.set_markeredgecolor(kw["markeredgecolor"])
    line.set_markeredgewidth(kw.get("markeredgewidth", 1.0))
    line.set_label(_END_LABELS[accepted])


@dataclass(repr=False, eq=False)
class TrajectoryDrawing(Drawing):
    """Returned by ``draw_trajectory``.

    Attributes
    ----------
    ax : Axes
    path : Line2D
        Positions from the start to the last step before any divergence, with a
        dot at every leapfrog step; ``get_xydata()`` is ``positions[:m + 1, coords]``.
    start : Line2D
        Black square at ``positions[0]``.
    end : Line2D
        Circle at the proposal (the last safe step): filled when accepted, hollow
        when rejected, grey when the decision is not given. Empty while a
        trajectory is shown partly (``upto``).
    divergent : Line2D
        Dashed segment from the last safe step to the step that diverged, with
        an ``X`` at the latter; empty when there is no divergence. A step that
        flew out of view is drawn on the edge of the Axes, in its direction, with
        the ``X`` whole (the data keep the true position).
    momentum : FancyArrowPatch
        The initial momentum, drawn as the velocity it starts, ``M^-1 p0``
        (``p0`` with the identity metric), times ``momentum_scale``, from the start.
        An arrow longer than the view is drawn up to the edge of the Axes, head
        included (``momentum_ends`` keep the true tip).
    coords : tuple of int
    momentum_scale : float
    metric : Metric
    momentum_ends : ndarray, shape (2, 2)
        Tail and tip of the arrow in data coordinates.
    """

    ax: Axes
    path: Line2D
    start: Line2D
    end: Line2D
    divergent: Line2D
    momentum: FancyArrowPatch
    coords: tuple
    momentum_scale: float
    metric: object = None
    momentum_ends: np.ndarray = None

    def update(self, trajectory, accepted=None, *, chain=0, upto=None):
        """Show another trajectory (or more of this one) with the same artists.

        Parameters
        ----------
        trajectory : Trajectory
        accepted : bool or None
        chain : int
            Row of a batch Trajectory.
        upto : int, optional
            Show only leapfrog steps ``0..upto`` (for step-by-step playback);
            the end marker appears once the trajectory is complete.
        """
        traj = one_chain(trajectory, chain)
        upto = _check_upto(upto, traj.n_steps)
        path, div, end, finished = _parts(traj, self.coords, upto)
        self.path.set_data(path[:, 0], path[:, 1])
        self.divergent.set_data(div[:, 0], div[:, 1])
        self.divergent.set_label("divergent step" if len(div) else "_divergent step")
        if traj.divergent and finished:
            accepted = False  # a divergent transition is always rejected
        self.end.set_data(end[:, 0], end[:, 1])
        _end_style(self.end, accepted if finished else None)
        p0 = traj.positions[0, list(self.coords)]
        v0 = self.metric.velocity(traj.momenta[0])[list(self.coords)] * self.momentum_scale
        self.start.set_data([p0[0]], [p0[1]])
        self.momentum_ends = np.array([p0, p0 + v0])
        self.momentum.set_positions(tuple(p0), tuple(p0 + v0))
        self._rescale()
        return self


def draw_trajectory(ax, trajectory, *, coords=(0, 1), accepted=None, chain=0, upto=None,
                    momentum_scale=None, metric=None, names=None):
    """Draw a leapfrog trajectory through two coordinates.

    Parameters
    ----------
    ax : Axes
    trajectory : Trajectory
        One chain's trajectory, or a batch (pick the row with ``chain``). Its
        positions are on the sampler's scale.
    coords : pair of int or str
        Coordinates on the x and y axes (names need ``names``).
    accepted : bool, optional
        Whether the proposal was accepted (filled end marker) or rejected
        (hollow); a divergent trajectory is always shown as rejected.
    chain : int
    upto : int, optional
        Show leapfrog steps ``0..upto`` only.
    momentum_scale : float, optional
        Arrow length per unit of velocity. Default ``step_size * max(n_steps / 4, 2)``:
        about the distance covered in a quarter of the integration time.
    metric : Metric or array, optional
        The kernel's metric (``kernel.metric``), so the arrow points where the
        trajectory starts to move (``M^-1 p0``); identity by default.
    names : sequence of str, optional
        Coordinate names (all of them); label the axes and resolve ``coords``.

    Returns
    -------
    TrajectoryDrawing
        ``update(trajectory, accepted=None, *, chain=0, upto=None)`` reuses the artists.

    Examples
    --------
    >>> import phaseglass as pg
    >>> from matplotlib.figure import Figure
    >>> t = pg.demos.correlated_gaussian()
    >>> tr = pg.leapfrog(t, [1.0, 0.0], [0.0, 1.0], 0.2, 12)
    >>> d = draw_trajectory(Figure().add_subplot(), tr, accepted=True)
    >>> d.path.get_xydata().shape
    (13, 2)
    """
    from phaseglass.core.metric import as_metric
    from phaseglass.core.slices import resolve_coords

    traj = one_chain(trajectory, chain)
    coords = resolve_coords(coords, names, traj.positions.shape[1])
    metric = as_metric(metric, traj.positions.shape[1])
    if momentum_scale is None:
        momentum_scale = float(traj.step_size) * max(traj.n_steps / 4.0, 2.0)
    style.dress(ax)
    (path,) = ax.plot([], [], label="leapfrog path", zorder=3, **style.PATH)
    div = _line_in_view(ax, "segment", label="divergent step", markevery=[1], zorder=4,
                        **style.DIVERGENT)
    (start,) = ax.plot([], [], label="start", zorder=5, **style.START)
    (end,) = ax.plot([], [], markersize=8, zorder=5, **style.UNDECIDED)
    arrow = _arrow_in_view(ax, mutation_scale=12, linewidth=1.6, color=style.MOMENTUM["color"],
                           label="initial momentum", zorder=4)
    _label_slice(ax, coords, names)
    d = TrajectoryDrawing(ax=ax, path=path, start=start, end=end, divergent=div,
                          momentum=arrow, coords=coords, momentum_scale=float(momentum_scale),
                          metric=metric)
    return d.update(traj, accepted, upto=upto)


# ------------------------------------------------------------------ energy error

def _accept_prob(err):
    with np.errstate(over="ignore", invalid="ignore"):
        return np.where(np.isfinite(err), np.exp(np.minimum(0.0, -err)), 0.0)


def _verdict(traj, upto):
    err = traj.energy_error
    if traj.divergent and upto >= traj.divergence_step:
        return (f"diverged at step {traj.divergence_step} (|\u0394H| > {traj.max_energy_error:g}):\n"
                "rejected, acceptance probability 0")
    final = err[upto]
    where = "at the end" if upto == traj.n_steps else f"at step {upto}"
    # short lines: the title must fit over a narrow panel whatever the numbers
    return (f"\u0394H {where} = {final:.3g}\n"
            f"acceptance probability {float(_accept_prob(final)):.3f}")


class _SpacedTicks(Locator):
    """Ticks picked from ``candidates`` (most important first) that never crowd.

    At draw time each candidate in view is kept only when its label is at least
    ``spacing`` label heights away from every tick kept before it, so the choice
    follows the Axes' real size and dpi: a short symlog axis keeps 0, the
    threshold and +-1, a tall one adds the decades in between.
    """

    def __init__(self, candidates, spacing=1.6):
        self.candidates = candidates
        self.spacing = float(spacing)

    def __call__(self):
        lo, hi = sorted(self.axis.get_view_interval())
        values = [c for c in self.candidates if lo <= c <= hi]
        ax = self.axis.axes
        if ax is None:
            return sorted(values)
        try:
            size = self.axis.majorTicks[0].label1.get_size()
        except (IndexError, AttributeError):
            size = 8.0
        gap = self.spacing * size * ax.figure.dpi / 72.0
        along = 1 if self.axis.axis_name == "y" else 0
        kept, where = [], []
        for v in values:
            px = ax.transData.transform((0.0, v) if along else (v, 0.0))[along]
            if all(abs(px - w) >= gap for w in where):
                kept.append(v)
                where.append(px)
        return sorted(kept)

    def tick_values(self, vmin, vmax):
        return [c for c in self.candidates if vmin <= c <= vmax]


def _energy_ticks(threshold):
    """Tick candidates for a symlog energy-error axis, most important first."""
    threshold = float(threshold)
    out = [0.0, threshold, -threshold, 1.0, -1.0]
    decade = 10.0
    middle = []
    while decade < 0.5 * threshold:
        middle += [decade, -decade]
        decade *= 10.0
    # every other decade first, so a tight axis still gets evenly spread labels
    out += middle[2::4] + middle[3::4] + middle[0::4] + middle[1::4]
    return out


def _plain_number(v, pos=None):
    text = f"{v:g}"
    return text.replace("-", "\u2212")


def _symlog_energy_axis(ax, threshold, linthresh):
    """A symlog y axis for energy errors: room for small errors, plain numbers, no crowding."""
    ax.set_yscale("symlog", linthresh=linthresh, linscale=3.0)  # room for small errors
    # plain numbers, and only as many ticks as the axis has room for (no minor ticks)
    ax.yaxis.set_major_locator(_SpacedTicks(_energy_ticks(threshold)))
    ax.yaxis.set_major_formatter(FuncFormatter(_plain_number))
    ax.yaxis.set_minor_locator(NullLocator())


def _threshold_lines(ax, threshold):
    """The lines at +-``threshold`` (the largest energy error allowed), the first labelled."""
    return [ax.axhline(sign * threshold, zorder=1, label=lab, **style.THRESHOLD)
            for sign, lab in ((1, f"max energy error \u00b1{threshold:g}"), (-1, None))]


def _move_thresholds(ax, lines, threshold, *, symlog=True):
    """Put the threshold ``lines`` at +-``threshold``; on a symlog axis show both, with ticks."""
    for line, sign in zip(lines, (1, -1)):
        line.set_ydata([sign * threshold, sign * threshold])
    if symlog:
        ax.set_ylim(-2.5 * threshold, 2.5 * threshold)
        ticks = ax.yaxis.get_major_locator()
        if isinstance(ticks, _SpacedTicks):
            ticks.candidates = _energy_ticks(threshold)


@dataclass(repr=False, eq=False)
class EnergyErrorDrawing(Drawing):
    """Returned by ``draw_energy_error``.

    Attributes
    ----------
    ax : Axes
    error : Line2D
        ``(step, energy_error[step])`` for steps ``0..upto``.
    thresholds : list of Line2D
        The largest energy error allowed, at ``+max_energy_error`` and ``-max_energy_error``.
    divergence : Line2D
        ``X`` at the step that diverged (a value beyond the scale, or infinite, is
        drawn on the edge of the Axes, whole); empty otherwise.
    verdict : Text
        The Axes title (left): final energy error and acceptance probability
        ``min(1, exp(-dH))``, or where it diverged; on a linear axis also a note
        when ``max_energy_error`` is off-scale.
    accept_line : Line2D or None
        On ``twin``: acceptance probability if the trajectory stopped at each step.
    twin : Axes or None
        Secondary y axis (``secondary=True``).
    scale : str
    """

    ax: Axes
    error: Line2D
    thresholds: list
    divergence: Line2D
    verdict: Text
    accept_line: Line2D
    twin: Axes
    scale: str

    def remove(self):
        """Take the artists off, and the secondary Axes too."""
        super().remove()
        if self.twin is not None:
            self.twin.remove()

    def update(self, trajectory, *, chain=0, upto=None):
        """Show another trajectory's energy error with the same artists."""
        traj = one_chain(trajectory, chain)
        upto = _check_upto(upto, traj.n_steps)
        steps = np.arange(upto + 1)
        err = traj.energy_error[:upto + 1]
        self.error.set_data(steps, err)
        thr = traj.max_energy_error
        _move_thresholds(self.ax, self.thresholds, thr, symlog=self.scale == "symlog")
        if traj.divergent and upto >= traj.divergence_step:
            k = traj.divergence_step
            v = traj.energy_error[k]
            v = v if np.isfinite(v) else thr * 1e6  # beyond the scale: drawn on the edge
            self.divergence.set_data([k], [v])
            self.divergence.set_label("divergent step")
        else:
            self.divergence.set_data([], [])
            self.divergence.set_label("_divergent step")
        if self.accept_line is not None:
            self.accept_line.set_data(steps, _accept_prob(err))
        self.ax.set_xlim(-0.5, traj.n_steps + 0.5)
        text = _verdict(traj, upto)
        if self.scale != "symlog":
            finite = err[np.isfinite(err)]
            top = max(float(np.max(np.abs(finite))) if finite.size else 1.0, 1e-3) * 1.15
            if self.autoscale:
                self.ax.set_ylim(-top, top)
            lo, hi = self.ax.get_ylim()
            off = thr > hi or -thr < lo
            if off:
                text += f"\n(max energy error \u00b1{thr:g} is off-scale)"
            self.thresholds[0].set_label("_threshold" if off else f"max energy error \u00b1{thr:g}")
        self.verdict.set_text(text)
        return self


def draw_energy_error(ax, trajectory, *, chain=0, upto=None, scale="symlog", linthresh=1.0,
                      secondary=False):
    """Draw the energy error ``H(step) - H(0)`` of each leapfrog step.

    Parameters
    ----------
    ax : Axes
    trajectory : Trajectory
    chain : int
        Row of a batch Trajectory.
    upto : int, optional
        Show steps ``0..upto`` only.
    scale : {"symlog", "linear"}
        ``symlog`` (default) shows small errors and the +-``max_energy_error``
        lines on one axis (linear within +-``linthresh``). On a linear axis a note
        says when ``max_energy_error`` is off-scale.
    linthresh : float
    secondary : bool
        Add a right-hand axis with the acceptance probability ``min(1, exp(-dH))``
        the trajectory would have if it stopped at each step.

    Returns
    -------
    EnergyErrorDrawing
        ``update(trajectory, *, chain=0, upto=None)`` reuses the artists.
    """
    if scale not in ("symlog", "linear"):
        raise ValueError(f"`scale` must be 'symlog' or 'linear', got {scale!r}")
    traj = one_chain(trajectory, chain)
    style.dress(ax)
    if scale == "symlog":
        _symlog_energy_axis(ax, traj.max_energy_error, linthresh)
    ax.axhline(0.0, **style.REFERENCE, zorder=1)
    thresholds = _threshold_lines(ax, traj.max_energy_error)
    (error,) = ax.plot([], [], label="energy error \u0394H", zorder=3,
                       **{**style.PATH, "markersize": 3.5})
    div = _divergence_marker(ax, "divergent step")
    verdict = ax.set_title("", loc="left", fontsize=9)
    ax.set_xlabel("leapfrog step")
    ax.set_ylabel("energy error \u0394H = H(step) \u2212 H(0)")
    twin = line = None
    if secondary:
        twin = ax.twinx()
        (line,) = twin.plot([], [], label="acceptance probability if stopped here", zorder=2,
                            **{**style.ACCEPT_PROB, "drawstyle": "default", "linestyle": "--"})
        twin.set_ylim(0.0, 1.5)  # probabilities sit in the lower part, clear of the legend
        twin.set_yticks([0.0, 0.25, 0.5, 0.75, 1.0])
        twin.set_ylabel("min(1, e^(\u2212\u0394H))", color=style.ACCEPT_PROB["color"])
        twin.tick_params(labelsize=8, colors=style.ACCEPT_PROB["color"])
        twin.grid(False)
        for side in ("top", "left", "bottom"):
            twin.spines[side].set_visible(False)
    d = EnergyErrorDrawing(ax=ax, error=error, thresholds=thresholds, divergence=div,
                           verdict=verdict, accept_line=line, twin=twin, scale=scale)
    return d.update(traj, upto=upto)
