"""Animations of one chain: each transition's trajectory grows step by step, then the draw lands.

Frames are drawn with the same ``draw_*`` helpers and their ``update`` methods
that the widgets use, through ``matplotlib.animation.FuncAnimation``. GIFs are
written with Pillow (``PillowWriter``); MP4 needs ``ffmpeg`` on the PATH.
"""

import math
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import style

__all__ = ["ChainRecording", "record_chain", "chain_frames", "animate_chain", "save_animation",
           "write_chain_animation"]


@dataclass(frozen=True, repr=False)
class ChainRecording:
    """What one chain did over a few transitions, on the sampler's scale.

    Attributes
    ----------
    positions : ndarray, shape (n_transitions + 1, dim)
        Row 0 is the start; row t + 1 the state after transition t.
    trajectories : list of Trajectory or None, length n_transitions
        One chain's trajectory per transition (None for a gradient-free kernel).
    accepted, divergent : ndarray of bool, shape (n_transitions,)
    names : tuple of str
    target : Target
    metric : Metric or None
        The kernel's metric (for the direction of the initial-momentum arrow).
    """

    positions: np.ndarray
    trajectories: list
    accepted: np.ndarray
    divergent: np.ndarray
    names: tuple
    target: object
    metric: object = None

    @property
    def n_transitions(self):
        return len(self.trajectories)

    def __repr__(self):
        return (f"ChainRecording({self.n_transitions} transitions, dim={self.positions.shape[1]}, "
                f"{int(self.accepted.sum())} accepted, {int(self.divergent.sum())} divergent)")


def record_chain(target, kernel, n_transitions=20, *, seed=None, initial=None):
    """Run one chain for a few transitions, keeping every trajectory.

    Uses ``Sampler(...).step(record=True)`` and ``last_trajectory``, the same
    path the widgets take. The kernel is copied, so yours is left untouched.

    Parameters
    ----------
    target : Target
    kernel : Kernel
    n_transitions : int >= 1
    seed : None, int, SeedSequence or Generator
    initial : array_like, shape (dim,), optional
        Start on the user's scale.

    Returns
    -------
    ChainRecording
    """
    from phaseglass.core.sampling import Sampler

    from ..core.leapfrog import one_chain

    n_transitions = int(n_transitions)
    if n_transitions < 1:
        raise ValueError(f"`n_transitions` must be >= 1, got {n_transitions}")
    kernel = kernel.copy()
    sampler = Sampler(target, kernel, initial, n_chains=1, seed=seed)
    positions = [sampler.state.position[0].copy()]
    trajectories, accepted, divergent = [], [], []
    for _ in range(n_transitions):
        sampler.last_trajectory = None
        info = sampler.step(record=True)
        traj = sampler.last_trajectory
        trajectories.append(None if traj is None else one_chain(traj, 0))
        accepted.append(bool(info["accepted"][0]))
        divergent.append(bool(info["divergent"][0]))
        positions.append(sampler.state.position[0].copy())
    return ChainRecording(positions=np.array(positions), trajectories=trajectories,
                          accepted=np.array(accepted), divergent=np.array(divergent),
                          names=target.names, target=target,
                          metric=getattr(kernel, "metric", None))


def _frame_plan(recording, frames_per_transition):
    """(transition, upto or None) for every frame; None is the decision frame."""
    plan = []
    for t, traj in enumerate(recording.trajectories):
        n = traj.n_steps if traj is not None else 1
        for j in range(frames_per_transition - 1):
            plan.append((t, max(1, math.ceil(n * (j + 1) / frames_per_transition))))
        plan.append((t, None))
    return plan


def chain_frames(figure, recording, *, coords=(0, 1), frames_per_transition=3, limits=None,
                 density=True):
    """Draw the first frame of a recorded chain into ``figure``; return how to draw the others.

    Parameters are those of ``animate_chain``.

    Returns
    -------
    show : callable
        ``show(frame)`` updates the artists in place to frame ``frame``.
    n_frames : int
        ``frames_per_transition * n_transitions``.
    """
    from phaseglass.core.slices import choose_limits, log_density_grid, resolve_coords

    from .density import draw_log_density
    from .trajectory import draw_trajectory

    frames_per_transition = int(frames_per_transition)
    if frames_per_transition < 1:
        raise ValueError(f"`frames_per_transition` must be >= 1, got {frames_per_transition}")
    names = recording.names
    coords = resolve_coords(coords, names, recording.positions.shape[1])
    trajs = [t for t in recording.trajectories if t is not None]
    if limits is None:
        limits = choose_limits(recording.positions, *trajs, coords=coords, pad=0.12)
    xlim, ylim = limits
    ax = figure.add_subplot()
    style.dress(ax)
    if density and recording.target is not None:
        through = recording.positions.mean(axis=0)
        grid = log_density_grid(recording.target, coords, through, xlim, ylim, n=60)
        draw_log_density(ax, grid, wash=False, label="_contours")  # flat colours keep GIFs small
    (visited,) = ax.plot([], [], linestyle="none", marker="o", markersize=4,
                         color=style.OKABE_ITO["black"], alpha=0.55, label="draws so far", zorder=2)
    drawing = (draw_trajectory(ax, trajs[0], coords=coords, names=names, metric=recording.metric)
               if trajs else None)
    if drawing is not None:
        drawing.autoscale = False
        if recording.trajectories[0] is None:
            for a in drawing.artists:
                a.set_visible(False)
    ax.set_xlim(*xlim)
    ax.set_ylim(*ylim)
    ax.set_xlabel(names[coords[0]])
    ax.set_ylabel(names[coords[1]])
    title = ax.set_title("", loc="left", fontsize=9)
    plan = _frame_plan(recording, frames_per_transition)
    total = recording.n_transitions
    pos = recording.positions[:, list(coords)]

    def show(frame):
        t, upto = plan[frame]
        traj = recording.trajectories[t]
        done = upto is None
        if drawing is not None and traj is not None:
            drawing.update(traj, recording.accepted[t] if done else None, upto=upto)
        seen = pos[:t + 2] if done else pos[:t + 1]
        visited.set_data(seen[:, 0], seen[:, 1])
        if done:
            word = ("divergent, rejected" if recording.divergent[t]
                    else "accepted" if recording.accepted[t] else "rejected")
            title.set_text(f"transition {t + 1}/{total}: {word}")
        else:
            n = traj.n_steps if traj is not None else 1
            title.set_text(f"transition {t + 1}/{total}: leapfrog step {min(upto, n)}/{n}")
        return []

    if drawing is not None:
        handles = style.key_handles("path", "start", "accepted", "rejected", "divergent")
        handles += [drawing.momentum, visited]
        style.legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=7,
                     handles=handles, labels=[h.get_label() for h in handles])
    show(0)
    return show, len(plan)


def animate_chain(figure, recording, *, coords=(0, 1), frames_per_transition=3, limits=None,
                  density=True, fps=6):
    """Build a FuncAnimation of a recorded chain in ``figure``.

    Parameters
    ----------
    figure : matplotlib.figure.Figure
        Should be empty; one Axes is added.
    recording : ChainRecording
    coords : pair of int or str
    frames_per_transition : int >= 1
        Frames per transition: ``frames_per_transition - 1`` show the trajectory
        growing, the last shows the accept/reject decision and the new draw.
    limits : (xlim, ylim), optional
        Default: from every position and trajectory seen.
    density : bool
        Log-density contours behind (a slice through the mean position).
    fps : int
        Frames per second (sets the interval between frames).

    Returns
    -------
    matplotlib.animation.FuncAnimation
        With ``frames_per_transition * n_transitions`` frames; keep a reference
        until it is saved.
    """
    from matplotlib.animation import FuncAnimation

    show, n_frames = chain_frames(figure, recording, coords=coords,
                                  frames_per_transition=frames_per_transition, limits=limits,
                                  density=density)
    return FuncAnimation(figure, show, frames=n_frames, interval=1000.0 / max(fps, 1),
                         blit=False, repeat=False, cache_frame_data=False)


def save_animation(animation, path, *, fps=6, dpi=None):
    """Write an animation to ``.gif`` (Pillow) or ``.mp4`` (needs ffmpeg on the PATH).

    Parameters
    ----------
    animation : matplotlib.animation.Animation
    path : str or Path
    fps : int
    dpi : float, optional
        Defaults to the figure's dpi.

    Returns
    -------
    Path

    Raises
    ------
    RuntimeError
        For ``.mp4`` when ``ffmpeg`` is not installed.
    ValueError
        For any other suffix.
    """
    path = Path(path)
    writer = _writer(path, fps)
    path.parent.mkdir(parents=True, exist_ok=True)
    animation.save(str(path), writer=writer, dpi=dpi)
    return path


def _writer(path, fps):
    """The matplotlib writer for ``path``'s suffix, or a clear error."""
    from matplotlib.animation import FFMpegWriter, PillowWriter

    suffix = path.suffix.lower()
    if suffix == ".gif":
        writer = PillowWriter(fps=fps)
    elif suffix == ".mp4":
        if shutil.which("ffmpeg") is None:
            raise RuntimeError(
                "MP4 export needs ffmpeg on the PATH and none was found; install ffmpeg "
                "or save as .gif (written with Pillow)"
            )
        writer = FFMpegWriter(fps=fps)
    else:
        raise ValueError(f"animation `path` must end in .gif or .mp4, got {path.name!r}")
    return writer


def write_chain_animation(path, target, kernel, *, n_transitions=12, frames_per_transition=3,
                          coords=(0, 1), seed=None, initial=None, size=(6.5, 4.0), dpi=60, fps=6):
    """Record one chain and write its animation: the one-call version.

    The defaults keep files small: 36 frames of 390 x 240 pixels.

    Parameters
    ----------
    path : str or Path
        ``.gif`` or ``.mp4``.
    target : Target
    kernel : Kernel
    n_transitions, frames_per_transition : int
        The file has ``n_transitions * frames_per_transition`` frames.
    coords : pair of int or str
    seed : None, int, SeedSequence or Generator
    initial : array_like, shape (dim,), optional
    size : (float, float)
        Figure size in inches.
    dpi : float
    fps : int

    Returns
    -------
    Path

    Examples
    --------
    >>> import phaseglass as pg
    >>> write_chain_animation("chain.gif", pg.demos.correlated_gaussian(), pg.HMC(0.3, 8),
    ...                       n_transitions=4, seed=1)  # doctest: +SKIP
    """
    _writer(Path(path), fps)  # a bad suffix or missing ffmpeg fails before any work is done
    recording = record_chain(target, kernel, n_transitions, seed=seed, initial=initial)
    figure = style.new_figure(*size, dpi=dpi)
    anim = animate_chain(figure, recording, coords=coords,
                         frames_per_transition=frames_per_transition, fps=fps)
    return save_animation(anim, path, fps=fps, dpi=dpi)
