"""What a report shows for a run: which figures, with which options, and which notes.

Pure decisions on the run's data (its kernel, shapes and records): nothing here
draws, samples or writes. ``render`` draws what the plan lists; ``write`` puts
it on disk.
"""

from dataclasses import dataclass, field

import numpy as np

from ..core.efficiency import MIN_ESS_DRAWS

__all__ = ["FIGURE_NAMES", "Planned", "Plan", "plan", "grid_axes", "stream"]

#: PNG files a report may contain, in the order shown (views that do not apply are skipped).
FIGURE_NAMES = ("trajectory", "divergence", "uniforms", "tree_depth", "traces", "autocorrelation",
                "running_ess", "ess_per_gradient", "energy", "pairs", "gibbs", "tuning")

#: Fewer draws per chain than this and the autocorrelation and energy views are left out.
MIN_VIEW_DRAWS = 8

# spawn keys of the report's own random streams (see ``stream``)
_STREAMS = {"replay": 1, "grid": 2, "animation": 3}


@dataclass(frozen=True)
class Planned:
    """One figure of the plan: its name (from ``FIGURE_NAMES``) and the options
    ``render.figure`` passes to its drawing function."""

    name: str
    options: dict = field(default_factory=dict)


@dataclass
class Plan:
    """What a report of one run holds.

    Attributes
    ----------
    coords : tuple of int or None
        The pair of coordinates of trajectory, paths and first pair (None below two).
    figures : list of Planned
        In ``FIGURE_NAMES`` order.
    notes : list of str
        Views left out and why, in plain words.
    warnings : list of str
        The digest's plain-word warnings.
    animation : bool
        Whether ``chain.gif`` is written.
    """

    coords: tuple
    figures: list
    notes: list
    warnings: list
    animation: bool

    @property
    def names(self):
        return [f.name for f in self.figures]


def stream(run, purpose):
    """A reproducible ``SeedSequence`` for the report's own sampling, derived from the run's seed.

    ``purpose`` is ``"replay"``, ``"grid"`` or ``"animation"``; each gets its own stream.
    """
    entropy = run.seed if run.seed is not None else 0
    return np.random.SeedSequence(entropy, spawn_key=(7919, _STREAMS[purpose]))


def grid_axes(kernel):
    """Step sizes (half, same, 1.6 times) and steps (half, same, double) around a kernel's."""
    eps = float(kernel.step_size)
    step_sizes = [float(f"{eps * f:.3g}") for f in (0.5, 1.0, 1.6)]
    n = int(kernel.n_steps)
    steps = sorted({max(1, n // 2), n, 2 * n})
    return step_sizes, steps


def _coords(run, coords):
    from ..core.slices import resolve_coords

    if run.dim < 2:
        return None
    return tuple(resolve_coords(coords if coords is not None else (0, 1), run.names, run.dim))


def _uses_gradient(run):
    return run.kernel is not None and getattr(run.kernel, "uses_gradient", False)


def _uses_trees(run):
    """A no-U-turn run: its kernel has a depth limit and the run recorded tree depths."""
    return (run.kernel is not None and hasattr(run.kernel, "max_depth")
            and "tree_depth" in (run.extras or {}))


def plan(run, digest, *, coords=None, grid=True, grid_draws=100, animation=False):
    """Decide the figures and notes of a report of ``run`` (see ``write_report``).

    Returns
    -------
    Plan
    """
    coords = _coords(run, coords)
    figures, notes = [], []

    def add(name, **options):
        figures.append(Planned(name, options))

    leapfrog = _uses_gradient(run) and hasattr(run.kernel, "n_steps")
    if leapfrog and coords is not None:
        add("trajectory", coords=coords)
        if run.divergences:
            add("divergence", coords=coords, index=0)
    elif coords is None:
        notes.append("Trajectory, path and pair views need at least two coordinates.")
    elif _uses_trees(run):
        notes.append("A no-U-turn transition is a doubling tree, not one fixed-length "
                     "trajectory: open one with pg.DoublingView.from_run(run, draw=..., "
                     "chain=...).")
    else:
        notes.append("This kernel makes no leapfrog trajectories, so the trajectory and "
                     "energy-error views are left out.")
    if run.u is not None and run.accepted is not None and run.u.ndim == 2 and run.n_draws:
        add("uniforms")
    elif run.u is not None and run.u.ndim == 3:
        notes.append("Gibbs uniforms drive inverse CDFs rather than accept/reject decisions, "
                     "so the uniform-sequence view is left out.")
    if _uses_trees(run) and run.n_draws:
        add("tree_depth", max_depth=int(run.kernel.max_depth))
    shown = list(dict.fromkeys((list(coords) if coords else []) + list(range(run.dim))))
    add("traces", shown=shown)
    if run.n_draws >= MIN_VIEW_DRAWS:
        add("autocorrelation", shown=shown)
    else:
        notes.append(f"Fewer than {MIN_VIEW_DRAWS} draws per chain: the autocorrelation view "
                     "is left out.")
    if run.n_draws >= MIN_ESS_DRAWS:
        add("running_ess", shown=shown)
    else:
        notes.append(f"Fewer than {MIN_ESS_DRAWS} draws per chain: the ESS views are left out.")
    if run.total_grad > 0 and run.n_draws >= MIN_ESS_DRAWS:
        add("ess_per_gradient")
    elif run.total_grad == 0:
        notes.append("No gradients were evaluated, so ESS per gradient is not shown.")
    if _uses_gradient(run) and run.energy is not None and run.n_draws >= MIN_VIEW_DRAWS \
            and np.all(np.isfinite(run.energy)):
        add("energy")
    if coords is not None:
        add("pairs", coords=coords)
    if getattr(run.kernel, "shared_stream", False) and coords is not None:
        add("gibbs", coords=coords)
    if grid and leapfrog:
        step_sizes, steps = grid_axes(run.kernel)
        add("tuning", step_sizes=step_sizes, steps=steps, draws=int(grid_draws))
    elif grid:
        notes.append("The step size x leapfrog steps heat map needs a fixed-length leapfrog "
                     "kernel (HMC, with or without partial momentum refresh).")
    return Plan(coords=coords, figures=figures, notes=notes, warnings=list(digest.warnings),
                animation=bool(animation) and coords is not None)
