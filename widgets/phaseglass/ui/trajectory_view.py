"""TrajectoryView: one leapfrog trajectory over the log-density, redrawn as the knobs turn."""

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import MaxNLocator

from ..core._validate import MAX_STEPS
from ..core.leapfrog import leapfrog
from ..core.registry import KNOB_LABELS
from ..core.streams import seed_sequence
from ..draw import draw_energy_error, draw_log_density, draw_trajectory, legend
from ..draw.style import key_handles
from ._base import check_range, guarded, number
from ._controls import KnobControl
# inverse_mass_of, reciprocals and run_region are imported from here by other views
from ._phase_space import (PhaseSpaceView, inverse_mass_of, reciprocals, run_arguments,
                           run_parts, run_region)

__all__ = ["TrajectoryView"]

_MASS_RANGE = (0.01, 100.0)


class TrajectoryView(PhaseSpaceView):
    """One leapfrog trajectory over the log-density, with its energy error, live.

    Left: contours of the log-density (a 2-D slice through the start point for
    an n-D target) with the trajectory, its start, end (filled when the
    proposal would be accepted by the Metropolis draw of this view's seed,
    hollow when rejected), initial momentum arrow and any divergent step.
    Right: the energy error per leapfrog step against the divergence
    threshold. A readout gives step size, steps, trajectory length, final
    energy error, acceptance probability and divergence.

    Click the left panel to move the start; press on the start point and drag
    to set the initial momentum's direction and size. Everything is on the
    sampler's (unconstrained) scale.

    Parameters
    ----------
    target : Target
    start : array_like, shape (dim,), optional
        Start point (sampler's scale). Default: a draw from a short pilot run.
    coords : pair of int or str
        The two coordinates shown.
    step_size, n_steps, persistence, seed : initial knob values
    xlim, ylim : (float, float), optional
        View region; default from a short pilot run.
    max_energy_error : float
        Largest ``|energy error|`` before a transition counts as divergent
        (1000, common practice).

    Attributes
    ----------
    trajectory : Trajectory
        The trajectory last drawn.
    figure : matplotlib.figure.Figure

    Examples
    --------
    >>> import phaseglass as pg
    >>> view = pg.TrajectoryView(pg.demos.glaze_ridge(), step_size=0.05, n_steps=40)
    >>> view.step_size = 0.2          # redraws exactly as the slider does
    >>> view.trajectory.n_steps
    40
    """

    n_steps = traitlets.Int(20, help="Number of leapfrog steps (L).").tag(setting=True)
    persistence = traitlets.Float(
        0.0, help="Momentum kept when the momentum is resampled: p <- a p + sqrt(1-a^2) xi."
    ).tag(setting=True)
    seed = traitlets.Int(0, help="Seed of the momentum draws.").tag(setting=True)
    inverse_mass_x = traitlets.Float(1.0, help="Inverse mass of the coordinate on the x axis (its "
                                               "entry of `inverse_mass`).")
    inverse_mass_y = traitlets.Float(1.0, help="Inverse mass of the coordinate on the y axis (its "
                                               "entry of `inverse_mass`).")

    def __init__(self, target, *, start=None, coords=(0, 1), step_size=0.1, n_steps=20,
                 persistence=0.0, seed=0, xlim=None, ylim=None, max_energy_error=1000.0,
                 inverse_mass=None, mass_scale=None):
        self._resamples = 0
        self.trajectory = None
        self.accepted = None
        super().__init__(target, start=start, coords=coords, seed=seed, xlim=xlim, ylim=ylim,
                         inverse_mass=inverse_mass, mass_scale=mass_scale,
                         max_energy_error=max_energy_error, figsize=(7.6, 3.9),
                         knobs=dict(step_size=step_size, n_steps=n_steps,
                                    persistence=persistence))

    @property
    def grid_evaluations(self):
        """How many log-density grids the contours have needed (one per region)."""
        return self._grids.evaluations

    # ------------------------------------------------------------ validation
    _RANGES = {"step_size": (0.0, None, "(]"), "n_steps": (1, MAX_STEPS, "[]"),
               "persistence": (0.0, 1.0, "[)"), "inverse_mass_x": (0.0, None, "(]"),
               "inverse_mass_y": (0.0, None, "(]")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        self._shared_controls()
        self._steps_knob = KnobControl(self, "n_steps", low=1, high=300, integer=True,
                                       label=KNOB_LABELS["n_steps"], css_class="pg-n-steps")
        self._persist_knob = KnobControl(self, "persistence", low=0.0, high=0.99,
                                         label="persistence", css_class="pg-persistence")
        self._mass_knobs = [
            KnobControl(self, name, low=_MASS_RANGE[0], high=_MASS_RANGE[1], log=True,
                        label="inverse mass", css_class=f"pg-{name.replace('_', '-')}")
            for name in ("inverse_mass_x", "inverse_mass_y")]
        self._resample = widgets.Button(
            description="new momentum", icon="refresh", layout=widgets.Layout(width="auto"),
            tooltip="Resample the momentum: p \u2190 a p + \u221a(1 \u2212 a\u00b2) \u03be, "
                    "\u03be ~ N(0, M), a = persistence (a = 0: a fresh draw)")
        self._resample.add_class("pg-resample")
        self._resample.on_click(lambda _: self.resample_momentum())
        self._coordinate_pickers(self.target.names)
        self._name_mass_knobs()
        self._lay_out([[self._step_knob, self._steps_knob], self._mass_knobs,
                       [self._persist_knob, self._resample, self._seed_box]])

    def _name_mass_knobs(self):
        names = self.target.names
        for knob, i in zip(self._mass_knobs, self.coords):
            knob.label.value = f"inverse mass {names[i]}"

    @traitlets.observe("coords")
    def _on_coords(self, change):
        if hasattr(self, "_x_pick"):
            self._x_pick.value, self._y_pick.value = self.coords
            self._name_mass_knobs()

    @traitlets.observe("inverse_mass", "coords")
    def _show_masses(self, change):
        """``inverse_mass_x``/``_y`` follow the shown coordinates' entries of ``inverse_mass``."""
        if len(self.inverse_mass) == self.target.dim:
            self.inverse_mass_x = self.inverse_mass[self.coords[0]]
            self.inverse_mass_y = self.inverse_mass[self.coords[1]]

    @traitlets.observe("inverse_mass_x", "inverse_mass_y")
    def _set_mass(self, change):
        i = self.coords[0 if change["name"] == "inverse_mass_x" else 1]
        if len(self.inverse_mass) == self.target.dim and self.inverse_mass[i] != change["new"]:
            values = list(self.inverse_mass)
            values[i] = float(change["new"])
            self.inverse_mass = values

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        self._ax, self._ax_err = fig.subplots(1, 2, width_ratios=[1.0, 1.0])
        self._density = draw_log_density(self._ax, self._grid(), names=self._axis_names())
        tr = self._integrate()
        # the arrow shows the direction of motion M^-1 p (the velocity), as the drag sets it
        self._path = draw_trajectory(self._ax, tr, coords=self.coords, accepted=None,
                                     names=self.target.names, metric=self._metric())
        self._path.autoscale = False
        self._energy = draw_energy_error(self._ax_err, tr)
        # The readout under the figure gives the final energy error and acceptance
        # probability (one rounding of each number, not two); the panel's own verdict
        # title would repeat them and is the costliest artist of a tick (~10 ms of text).
        self._energy.verdict.set_visible(False)
        for ax in (self._ax, self._ax_err):
            ax.xaxis.set_major_locator(MaxNLocator(6))
        self._ax.yaxis.set_major_locator(MaxNLocator(6))
        p, e = self._path, self._energy
        # one key for both panels, below them (a legend under one panel squeezes it)
        handles = [self._density.contours, p.path, p.start, p.momentum] + key_handles(
            "accepted", "rejected", "divergent") + [e.thresholds[0]]
        legend(fig, loc="outside lower center", ncols=4, handles=handles,
               labels=[h.get_label() for h in handles], fontsize=7)
        self.set_dynamic([p.path, p.start, p.end, p.divergent, p.momentum, e.error,
                          e.divergence, e.accept_line])
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        self._connect_mouse()

    # ----------------------------------------------------------- computation
    def _rng(self):
        ss = seed_sequence(self.seed)
        return np.random.default_rng(ss.spawn(self._resamples + 1)[-1])

    def _fresh_momentum(self):
        z = self._rng().standard_normal(self.target.dim)
        return self._metric().momentum_from_normal(z)

    def _integrate(self):
        with self.target.uncounted():
            return leapfrog(self.target, self.start, self.momentum, self.step_size, self.n_steps,
                            metric=self._metric(), max_energy_error=self.max_energy_error)

    def resample_momentum(self):
        """Partial refresh of the momentum: p <- a p + sqrt(1 - a^2) xi, xi ~ N(0, M)."""
        self._resamples += 1
        xi = self._fresh_momentum()
        a = self.persistence
        self.momentum = a * self.momentum + np.sqrt(1.0 - a * a) * xi

    @traitlets.observe("seed")
    def _on_seed(self, change):
        self._resamples = 0
        if self.trajectory is not None and not self._applying:
            self.momentum = self._fresh_momentum()

    @traitlets.observe("step_size", "n_steps", "start", "momentum", "coords", "xlim", "ylim",
                       "inverse_mass")
    def _on_knob(self, change):
        if hasattr(self, "_energy"):
            self._recompute()

    @guarded("redraw")
    def _recompute(self):
        new_region = self._update_contours()
        static = (self._grids.key, self.coords, self.xlim, self.ylim, self.n_steps)
        full = new_region or static != getattr(self, "_static_key", None)
        self._static_key = static
        tr = self._integrate()
        self.trajectory = tr
        err = tr.energy_error[tr.n_steps] if not tr.divergent else np.inf
        # The end marker shows the Metropolis decision this view's seed would make.
        u = np.random.default_rng(seed_sequence(self.seed).spawn(1)[0]).random()
        self.accepted = bool(not tr.divergent and np.log(u) < -err)
        self._show_region()
        self._path.update(tr, self.accepted)
        self._energy.update(tr)
        self._readout.value = self._readout_html(tr)
        self.clear_status()
        self.redraw(full=full)

    def _readout_html(self, tr):
        length = self.step_size * self.n_steps
        if tr.divergent:
            verdict = (f"<b style='color:#a33'>divergent</b> at step {tr.divergence_step} "
                       f"(|&Delta;H| &gt; {number(tr.max_energy_error)}); acceptance "
                       f"probability 0")
            dh = "&Delta;H = &infin;"
        else:
            d = float(tr.energy_error[-1])
            prob = float(np.exp(min(0.0, -d)))
            dh = f"&Delta;H = {'+' if d >= 0 else ''}{number(d)}"
            verdict = f"acceptance probability {number(prob, 3)}; no divergence"
        return (f"<span style='font-family:monospace'>step size {number(self.step_size)} &times; "
                f"{self.n_steps} steps = length {number(length)} | {dh} | {verdict}</span>")

    # ------------------------------------------------------------- from a run
    @classmethod
    def from_run(cls, run, *, draw=None, divergence=None, **kwargs):
        """Open on a Run: its target, tuned step size, steps, mass matrix and a start of its own.

        Parameters
        ----------
        run : Run
            From ``pg.sample`` (or a view's ``.run``); needs its target and an HMC-family kernel.
        draw : (int, int), optional
            ``(chain, index)`` of the draw to start from: ``run.unconstrained[chain, index]``
            (sampler's scale).
        divergence : int, optional
            Index into ``run.divergences``: start where that divergent transition
            started, with its initial momentum.
        **kwargs
            Any other argument of TrajectoryView; they win over the run's values.

        Default start: the last draw of chain 0; default region: where the run's draws
        are (and the start). ``inverse_mass`` is that of the run's diagonal metric (a dense metric: its diagonal, said in the status line).
        """
        target, kernel = run_parts(run)
        if draw is not None and divergence is not None:
            raise ValueError("pass `draw` or `divergence`, not both")
        if "start" in kwargs and (draw is not None or divergence is not None):
            raise ValueError("pass `start` or `draw`/`divergence`, not both")
        momentum, replay = None, ""
        x = run.unconstrained
        if divergence is not None:
            n = len(run.divergences)
            if n == 0:
                raise ValueError(f"`divergence` = {divergence!r}, but the run has no divergent "
                                 "transitions")
            if not isinstance(divergence, (int, np.integer)) or not -n <= divergence < n:
                raise ValueError(f"`divergence` must be an integer in range({n}) (the run keeps "
                                 f"{n} divergent transitions), got {divergence!r}")
            traj = run.divergences[divergence][2]
            start = np.asarray(traj.positions[0], dtype=float)
            momentum = np.asarray(traj.momenta[0], dtype=float)
            used = np.ravel(np.asarray(traj.step_size, dtype=float))
            if used.size and abs(float(used[0]) - float(kernel.step_size)) > 1e-12 * kernel.step_size:
                replay = (f"this divergent transition used step size {number(float(used[0]))} "
                          f"(jittered); set step_size={float(used[0])!r} to replay it exactly")
        else:
            chain, index = (0, -1) if draw is None else _draw_index(draw)
            n_chains, n_draws = x.shape[0], x.shape[1]
            if not -n_chains <= chain < n_chains:
                raise ValueError(f"`draw` chain must be in range({n_chains}), got {chain}")
            if not -n_draws <= index < n_draws:
                raise ValueError(f"`draw` index must be in range({n_draws}), got {index}")
            start = x[chain, index]
        knobs = {}
        if getattr(kernel, "n_steps", None) is not None:
            knobs["n_steps"] = int(kernel.n_steps)
        if getattr(kernel, "persistence", None) is not None:
            knobs["persistence"] = float(kernel.persistence)
        args, note = run_arguments(run, kernel, start, **{**knobs, **kwargs})
        view = cls(target, **args)
        if momentum is not None and momentum.shape == (target.dim,) and "momentum" not in kwargs:
            view.momentum = momentum
        if note or replay:
            view.status = "; ".join(t for t in (note, replay) if t)
        return view


def _draw_index(draw):
    try:
        chain, index = draw
        return int(chain), int(index)
    except (TypeError, ValueError):
        raise ValueError(f"`draw` must be a pair (chain, index), got {draw!r}") from None
