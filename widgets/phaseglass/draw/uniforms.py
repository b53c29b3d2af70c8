"""The accept/reject uniform of one chain over draws, with rejections marked."""

from dataclasses import dataclass

import numpy as np
from matplotlib.axes import Axes
from matplotlib.lines import Line2D
from matplotlib.text import Text

from . import style
from ._base import Drawing

__all__ = ["draw_uniform_sequence", "UniformSequenceDrawing", "rejection_runs",
           "draw_next_decision", "NextDecisionDrawing"]


def rejection_runs(accepted):
    """Lengths of the runs of consecutive rejections, in order.

    Parameters
    ----------
    accepted : array_like of bool, shape (draws,)

    Returns
    -------
    ndarray of int

    Examples
    --------
    >>> rejection_runs([True, False, False, True, False])
    array([2, 1])
    """
    rej = ~np.asarray(accepted, dtype=bool)
    if rej.size == 0:
        return np.zeros(0, dtype=int)
    edges = np.diff(np.concatenate([[0], rej.astype(int), [0]]))
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    return stops - starts


def _check(u, accepted, accept_prob):
    u = np.asarray(u, dtype=float)
    accepted = np.asarray(accepted, dtype=bool)
    if u.ndim != 1:
        raise ValueError(f"`u` must have shape (draws,) for one chain, got {u.shape}")
    if accepted.shape != u.shape:
        raise ValueError(f"`accepted` must have the shape of `u` {u.shape}, got {accepted.shape}")
    if accept_prob is not None:
        accept_prob = np.asarray(accept_prob, dtype=float)
        if accept_prob.shape != u.shape:
            raise ValueError(f"`accept_prob` must have the shape of `u` {u.shape}, got {accept_prob.shape}")
    return u, accepted, accept_prob


def _plural(n, word):
    """``"1 rejection"``, ``"2 rejections"`` (the drawing layer's copy of ui's ``plural``)."""
    n = int(n)
    return f"{n} {word if n == 1 else word + 's'}"


def _summary(accepted):
    runs = rejection_runs(accepted)
    n = accepted.size
    if n == 0:
        return "no draws yet"
    if runs.size == 0:
        return f"none of {n} rejected"
    # short: the title must fit over a narrow panel (about 300 px) for thousands of draws
    return f"{runs.sum()} of {n} rejected: {_plural(runs.size, 'run')}, longest {runs.max()}"


@dataclass(repr=False, eq=False)
class UniformSequenceDrawing(Drawing):
    """Returned by ``draw_uniform_sequence``.

    Attributes
    ----------
    ax : Axes
    trail : Line2D
        Thin grey line through every ``u`` (shows the slow drifts of a drifting uniform).
    accepted : Line2D
        Filled circles at ``(draw, u)`` of accepted proposals.
    rejected : Line2D
        Hollow circles at the rejected ones.
    accept_prob : Line2D
        The acceptance probability per draw (empty when not given): a
        proposal is accepted when ``u`` falls below it.
    summary : Text
        Count of rejections and of runs of consecutive rejections
        (``"3 of 6 rejected: 2 runs, longest 2"``).
    first : int
        Draw index of the first value.
    """

    ax: Axes
    trail: Line2D
    accepted: Line2D
    rejected: Line2D
    accept_prob: Line2D
    summary: Text
    first: int

    def update(self, u, accepted, accept_prob=None, *, first=None):
        """Show a new sequence with the same artists."""
        u, acc, prob = _check(u, accepted, accept_prob)
        if first is not None:
            self.first = int(first)
        it = self.first + np.arange(u.size)
        self.trail.set_data(it, u)
        self.accepted.set_data(it[acc], u[acc])
        self.rejected.set_data(it[~acc], u[~acc])
        if prob is None:
            self.accept_prob.set_data([], [])
            self.accept_prob.set_label("_acceptance probability")
        else:
            self.accept_prob.set_data(it, prob)
            self.accept_prob.set_label("acceptance probability")
        self.summary.set_text(_summary(acc))
        if self.autoscale:
            self.ax.set_xlim(self.first - 0.5, self.first + max(u.size, 1) - 0.5)
        return self


def draw_uniform_sequence(ax, u, accepted, accept_prob=None, *, first=0, trail=True):
    """Draw the accept/reject uniform of one chain, one point per transition.

    Rejected transitions are hollow circles, accepted ones filled, so clusters
    of rejections (as a drifting uniform produces) and the slow drifts of
    ``u`` stand out. With ``accept_prob`` the acceptance probability is drawn
    as a step line: points above it are the rejections.

    Parameters
    ----------
    ax : Axes
    u : array_like, shape (draws,)
        ``run.u[chain]`` for a Metropolis-type kernel.
    accepted : array_like of bool, shape (draws,)
    accept_prob : array_like, shape (draws,), optional
    first : int
        Draw index of ``u[0]`` (``run.first_draw`` for a ring buffer).
    trail : bool
        Join the values with a thin line.

    Returns
    -------
    UniformSequenceDrawing
        ``update(u, accepted, accept_prob=None, *, first=None)`` reuses the artists.
    """
    style.dress(ax)
    (line,) = ax.plot([], [], color="#AAAAAA", linewidth=0.7, zorder=1, label="_trail",
                      visible=trail)
    (prob,) = ax.plot([], [], zorder=2, **style.ACCEPT_PROB)
    (acc,) = ax.plot([], [], markersize=4, label="u, accepted", zorder=3, **style.ACCEPTED)
    (rej,) = ax.plot([], [], markersize=5, label="u, rejected", zorder=4, **style.REJECTED)
    summary = ax.set_title("", loc="left", fontsize=9)
    ax.set_ylim(-0.03, 1.03)
    ax.set_xlabel("draw")
    ax.set_ylabel("accept/reject uniform u")
    d = UniformSequenceDrawing(ax=ax, trail=line, accepted=acc, rejected=rej, accept_prob=prob,
                               summary=summary, first=int(first))
    return d.update(u, accepted, accept_prob)


# ------------------------------------------------------------------ preview

#: Look of a decision that has not happened yet: a diamond (never a circle, so it cannot be
#: mistaken for a recorded u) and a dashed tick, in the acceptance probability's colour, at
#: the acceptance probability.
_NEXT_MARKER = dict(marker="D", markersize=6.5, linestyle="none", markeredgewidth=1.4,
                    color="#555555", markerfacecolor="#BBBBBB")  # undecided until update
_NEXT_PROB = dict(color=style.ACCEPT_PROB["color"], linestyle=(0, (2.0, 1.2)), linewidth=1.6)


@dataclass(repr=False, eq=False)
class NextDecisionDrawing(Drawing):
    """Returned by ``draw_next_decision``.

    Attributes
    ----------
    ax : Axes
    u : Line2D
        Diamond at ``(draw, u)``: filled (accepted colour) when the decision
        would accept, hollow (rejected colour) when it would reject; empty when
        nothing is previewed.
    accept_prob : Line2D
        Dashed tick from ``draw - 0.5`` to ``draw + 0.5`` at the
        acceptance probability (``u`` below it accepts); empty when nothing is previewed.
    draw : int or None
    """

    ax: Axes
    u: Line2D
    accept_prob: Line2D
    draw: object = None

    def update(self, draw=None, u=None, accepted=None, accept_prob=None):
        """Show another pending decision, or nothing when ``draw`` is None."""
        if draw is None:
            self.draw = None
            self.u.set_data([], [])
            self.accept_prob.set_data([], [])
            return self
        u = float(u)
        if not 0.0 <= u <= 1.0:
            raise ValueError(f"`u` must lie in [0, 1], got {u}")
        self.draw = int(draw)
        self.u.set_data([self.draw], [u])
        colour = style.ACCEPTED["color"] if accepted else style.REJECTED["markeredgecolor"]
        self.u.set_color(colour)
        self.u.set_markeredgecolor(colour)
        self.u.set_markerfacecolor(colour if accepted else "none")
        if accept_prob is None:
            self.accept_prob.set_data([], [])
        else:
            p = float(accept_prob)
            self.accept_prob.set_data([self.draw - 0.5, self.draw + 0.5], [p, p])
        self._rescale()
        return self


def draw_next_decision(ax, draw=None, u=None, accepted=None, accept_prob=None, *,
                       label="next u (preview)"):
    """Mark the accept/reject decision a chain's next transition would make.

    For a preview beside ``draw_uniform_sequence``: the ``u`` the next
    transition would draw (a diamond, filled when it would accept, hollow when
    it would reject) and its acceptance probability (a dashed tick). Nothing
    is drawn while ``draw`` is None.

    Parameters
    ----------
    ax : Axes
    draw : int, optional
        Draw index of the pending decision (``run.first_draw + run.n_draws``).
    u : float in [0, 1]
    accepted : bool
    accept_prob : float, optional
    label : str
        Legend label of the diamond.

    Returns
    -------
    NextDecisionDrawing
        ``update(draw=None, u=None, accepted=None, accept_prob=None)`` reuses the artists.
    """
    (marker,) = ax.plot([], [], label=label, zorder=6, **_NEXT_MARKER)
    (prob,) = ax.plot([], [], label="_next acceptance probability", zorder=5, **_NEXT_PROB)
    d = NextDecisionDrawing(ax=ax, u=marker, accept_prob=prob)
    return d.update(draw, u, accepted, accept_prob)
