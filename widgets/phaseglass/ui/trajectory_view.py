"""TrajectoryView: one leapfrog trajectory over the log-density, redrawn as the knobs turn."""

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import MaxNLocator

from ..core._validate import MAX_STEPS, warn_renamed
from ..core.leapfrog import leapfrog
from ..core.metric import Metric
from ..core.registry import KNOB_LABELS
from ..core.slices import resolve_coords
from ..core.streams import seed_sequence
from ..draw import draw_energy_error, draw_log_density, draw_trajectory, legend
from ..draw.style import key_handles
from ._base import View, check_range, check_target, guarded, number
from ._controls import KnobControl
from ._shared import GridCache, pilot, step_size_range

__all__ = ["TrajectoryView"]


def run_parts(run, *, needs_step_size=True):
    """(target, kernel) of a Run, with errors naming ``run`` when a view cannot start from it."""
    target = getattr(run, "target", None)
    kernel = getattr(run, "kernel", None)
    if target is None or getattr(run, "unconstrained", None) is None:
        raise ValueError("`run` must be a phaseglass Run with its target (from pg.sample or a "
                         f"view's .run), got {type(run).__name__} without one")
    if kernel is None:
        raise ValueError("`run` has no kernel (run.kernel is None): its step size and mass "
                         "matrix are unknown")
    if needs_step_size and getattr(kernel, "step_size", None) is None:
        raise ValueError(f"`run` used a {type(kernel).__name__}, which has no leapfrog step size")
    return target, kernel


def run_region(run, coords, start=None):
    """(xlim, ylim) holding 99 % of a run's draws of ``coords`` (sampler's scale) and ``start``."""
    coords = resolve_coords(coords, run.target.names, run.target.dim)
    x = np.asarray(run.unconstrained, dtype=float)
    lims = []
    for k, c in enumerate(coords):
        v = x[..., c].ravel()
        v = v[np.isfinite(v)]
        lo, hi = (np.quantile(v, [0.005, 0.995]) if v.size else (-1.0, 1.0))
        if start is not None:
            lo, hi = min(lo, start[c]), max(hi, start[c])
        pad = 0.1 * (hi - lo) if hi > lo else 1.0
        lims.append((float(lo - pad), float(hi + pad)))
    return lims[0], lims[1]


def reciprocals(values):
    """``[1 / v for v in values]`` as floats (a former ``mass_scale`` to ``inverse_mass``)."""
    return [1.0 / float(v) for v in values]


def inverse_mass_of(metric):
    """(diagonal inverse mass list or None, note) of a Metric, for a view's ``inverse_mass``.

    A dense metric keeps only its diagonal; the note says so (for the status line).
    """
    if metric is None or metric.kind == "identity":
        return None, ""
    inv = np.asarray(metric.inverse_mass, dtype=float)
    if metric.kind == "dense":
        return [float(v) for v in np.diag(inv)], (
            "the run's mass matrix is dense: this view uses its diagonal only")
    return [float(v) for v in inv], ""

_DRAG_RADIUS_PX = 12  # a press this close to the start point drags the momentum
_MASS_RANGE = (0.01, 100.0)


class TrajectoryView(View):
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

    step_size = traitlets.Float(0.1, help="Leapfrog step size (epsilon).").tag(setting=True)
    n_steps = traitlets.Int(20, help="Number of leapfrog steps (L).").tag(setting=True)
    persistence = traitlets.Float(
        0.0, help="Momentum kept when the momentum is resampled: p <- a p + sqrt(1-a^2) xi."
    ).tag(setting=True)
    inverse_mass = traitlets.List(
        traitlets.Float(), help="Diagonal of the inverse mass matrix (the Metric's inverse_mass), "
                                "one entry per coordinate."
    ).tag(setting=True)
    seed = traitlets.Int(0, help="Seed of the momentum draws.").tag(setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    start = traitlets.Any(help="Start point, shape (dim,), sampler's scale.").tag(setting=True)
    momentum = traitlets.Any(help="Initial momentum, shape (dim,).").tag(setting=True)
    xlim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="x range shown.").tag(setting=True)
    ylim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="y range shown.").tag(setting=True)
    inverse_mass_x = traitlets.Float(1.0, help="Inverse mass of the coordinate on the x axis (its "
                                               "entry of `inverse_mass`).")
    inverse_mass_y = traitlets.Float(1.0, help="Inverse mass of the coordinate on the y axis (its "
                                               "entry of `inverse_mass`).")

    def __init__(self, target, *, start=None, coords=(0, 1), step_size=0.1, n_steps=20,
                 persistence=0.0, seed=0, xlim=None, ylim=None, max_energy_error=1000.0,
                 inverse_mass=None, mass_scale=None):
        check_target(target, min_dim=2)
        self.target = target
        self.max_energy_error = float(max_energy_error)
        coords = resolve_coords(coords, target.names, target.dim)
        super().__init__(figsize=(7.6, 3.9))
        self._grids = GridCache(target, n=90)
        self._applying = False
        self._drag = None
        self._resamples = 0
        self.trajectory = None
        self.accepted = None
        # the shared pilot gives the region and start when not given, and always the
        # step-size slider's range (scaled to this target's tuned step size)
        self._pilot = pilot(target, seed=seed)
        with self.hold_trait_notifications():
            if start is None:
                start = self._pilot.start()
            if xlim is None or ylim is None:
                px, py = self._pilot.region(coords, start)
                xlim = px if xlim is None else xlim
                ylim = py if ylim is None else ylim
            self.coords = coords
            self.xlim = tuple(float(v) for v in xlim)
            self.ylim = tuple(float(v) for v in ylim)
            if mass_scale is not None:  # the former name held the mass, 1 / inverse mass
                warn_renamed("mass_scale", "inverse_mass")
                inverse_mass = reciprocals(mass_scale)
            self.inverse_mass = ([1.0] * target.dim if inverse_mass is None
                                 else [float(m) for m in inverse_mass])
            self.step_size = step_size
            self.n_steps = n_steps
            self.persistence = persistence
            self.seed = seed
            self.start = start
            self.momentum = self._fresh_momentum()
        self._build_controls()
        self._build_figure()
        self._recompute()

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

    @traitlets.validate("inverse_mass")
    def _check_mass(self, proposal):
        v = [float(m) for m in proposal["value"]]
        if len(v) != self.target.dim or not all(np.isfinite(m) and m > 0 for m in v):
            raise traitlets.TraitError(
                f"`{proposal['trait'].name}` must hold {self.target.dim} positive numbers, got {v}")
        return v

    @traitlets.validate("start", "momentum")
    def _check_point(self, proposal):
        v = np.asarray(proposal["value"], dtype=float)
        name = proposal["trait"].name
        if v.shape != (self.target.dim,):
            raise traitlets.TraitError(f"`{name}` must have shape ({self.target.dim},), got {v.shape}")
        if not np.all(np.isfinite(v)):
            raise traitlets.TraitError(f"`{name}` must be finite, got {v.tolist()}")
        return v

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        low, high = step_size_range(self._pilot.step_size)
        self._step_knob = KnobControl(self, "step_size", low=low, high=high, log=True,
                                      label="step size", css_class="pg-step-size")
        self._step_knob.slider.add_class("pg-primary")
        self._steps_knob = KnobControl(self, "n_steps", low=1, high=300, integer=True,
                                       label=KNOB_LABELS["n_steps"], css_class="pg-n-steps")
        self._persist_knob = KnobControl(self, "persistence", low=0.0, high=0.99,
                                         label="persistence", css_class="pg-persistence")
        self._mass_knobs = [
            KnobControl(self, name, low=_MASS_RANGE[0], high=_MASS_RANGE[1], log=True,
                        label="inverse mass", css_class=f"pg-{name.replace('_', '-')}")
            for name in ("inverse_mass_x", "inverse_mass_y")]
        self._seed_box = widgets.BoundedIntText(value=self.seed, min=0, max=2**31 - 1,
                                                description="seed",
                                                layout=widgets.Layout(width="150px"))
        self._seed_box.tooltip = self.traits()["seed"].help
        traitlets.link((self._seed_box, "value"), (self, "seed"))
        self._resample = widgets.Button(
            description="new momentum", icon="refresh", layout=widgets.Layout(width="auto"),
            tooltip="Resample the momentum: p \u2190 a p + \u221a(1 \u2212 a\u00b2) \u03be, "
                    "\u03be ~ N(0, M), a = persistence (a = 0: a fresh draw)")
        self._resample.add_class("pg-resample")
        self._resample.on_click(lambda _: self.resample_momentum())
        self._coordinate_pickers(self.target.names)
        self._readout = widgets.HTML()
        self._readout.add_class("pg-readout")
        self._click_readout = widgets.HTML(
            "<span style='font-family:monospace'>click the left panel to move the start; press on "
            "the start and drag to set the initial momentum</span>")
        self._click_readout.add_class("pg-click-readout")
        self._name_mass_knobs()
        wrap = widgets.Layout(flex_flow="row wrap", align_items="center")
        rows = [widgets.HBox([self._step_knob, self._steps_knob], layout=wrap),
                widgets.HBox(self._mass_knobs, layout=wrap),
                widgets.HBox([self._persist_knob, self._resample, self._seed_box], layout=wrap)]
        if self.target.dim > 2:
            rows.append(widgets.HBox([self._x_pick, self._y_pick], layout=wrap))
        self.children = rows + [self.figure.canvas, self._readout, self._click_readout,
                                self._status_html]

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

    @property
    def mass_scale(self):
        """Deprecated: the mass diagonal, ``1 / inverse_mass`` (use ``inverse_mass``)."""
        warn_renamed("mass_scale", "inverse_mass", "attribute")
        return reciprocals(self.inverse_mass)

    @mass_scale.setter
    def mass_scale(self, value):
        warn_renamed("mass_scale", "inverse_mass", "attribute")
        self.inverse_mass = reciprocals(value)

    def _set_coordinates(self, coords):
        """Show ``coords`` in a region of three mass-scaled units around the start."""
        z = self.start
        span = 3.0 * np.sqrt(np.asarray(self.inverse_mass))
        with self.hold_trait_notifications():
            self.coords = coords
            self.xlim = (z[coords[0]] - span[coords[0]], z[coords[0]] + span[coords[0]])
            self.ylim = (z[coords[1]] - span[coords[1]], z[coords[1]] + span[coords[1]])

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
        fig.canvas.mpl_connect("button_press_event", self._on_press)
        fig.canvas.mpl_connect("motion_notify_event", self._on_motion)
        fig.canvas.mpl_connect("button_release_event", self._on_release)

    def _axis_names(self):
        names = self.target.names
        suffix = " (sampler's scale)" if self.target.bounded else ""
        return (names[self.coords[0]] + suffix, names[self.coords[1]] + suffix)

    def _grid(self):
        """Contours: computed once per region, coordinates and slice, never per tick."""
        return self._grids.get(self.coords, self.start, self.xlim, self.ylim)

    # ----------------------------------------------------------- computation
    def _metric(self):
        return Metric(np.asarray(self.inverse_mass, dtype=float))

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

    @traitlets.observe("inverse_mass")
    def _on_mass(self, change):
        if not isinstance(change["old"], list) or self._applying:
            return
        old, new = np.asarray(change["old"], dtype=float), np.asarray(change["new"], dtype=float)
        if self.momentum is not None and old.shape == new.shape:
            # keep the same standard-normal draw: p = sqrt(M) z = z / sqrt(inverse mass)
            self.momentum = self.momentum * np.sqrt(old / new)

    @traitlets.observe("step_size", "n_steps", "start", "momentum", "coords", "xlim", "ylim",
                       "inverse_mass")
    def _on_knob(self, change):
        if hasattr(self, "_energy"):
            self._recompute()

    @guarded("redraw")
    def _recompute(self):
        before = (self._grids.evaluations, self._grids.key)
        grid = self._grid()
        new_region = (self._grids.evaluations, self._grids.key) != before
        if new_region:  # new contours only for a new region: not per tick
            self._density.update(grid)
        static = (self._grids.key, self.coords, self.xlim, self.ylim, self.n_steps)
        full = new_region or static != getattr(self, "_static_key", None)
        self._static_key = static
        tr = self._integrate()
        self.trajectory = tr
        err = tr.energy_error[tr.n_steps] if not tr.divergent else np.inf
        # The end marker shows the Metropolis decision this view's seed would make.
        u = np.random.default_rng(seed_sequence(self.seed).spawn(1)[0]).random()
        self.accepted = bool(not tr.divergent and np.log(u) < -err)
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        self._path.coords = tuple(self.coords)
        self._path.metric = self._metric()
        self._path.update(tr, self.accepted)
        self._energy.update(tr)
        names = self._axis_names()
        self._ax.set_xlabel(names[0])
        self._ax.set_ylabel(names[1])
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

    # ---------------------------------------------------------------- mouse
    def _start_pixels(self):
        z = self.start[list(self.coords)]
        return self._ax.transData.transform(z)

    @guarded("click")
    def _on_press(self, event):
        if event.inaxes is not self._ax or event.xdata is None:
            return
        sx, sy = self._start_pixels()
        if np.hypot(event.x - sx, event.y - sy) <= _DRAG_RADIUS_PX:
            self._drag = True
            return
        self.move_start(event.xdata, event.ydata)

    @guarded("drag")
    def _on_motion(self, event):
        if not self._drag or event.inaxes is not self._ax or event.xdata is None:
            return
        self.set_momentum_towards(event.xdata, event.ydata)

    def _on_release(self, event):
        self._drag = None

    def move_start(self, x, y):
        """Move the start to (x, y) in the shown coordinates (what a click does)."""
        z = self.start.copy()
        z[self.coords[0]], z[self.coords[1]] = float(x), float(y)
        self.start = z
        self._click_readout.value = (
            f"<span style='font-family:monospace'>start moved to ({x:.3g}, {y:.3g})</span>")

    def set_momentum_towards(self, x, y):
        """Set the shown momentum components so the arrow points at (x, y) (what a drag does).

        The arrow shows the initial velocity ``M^-1 p`` (the direction of motion), so the
        momentum set is ``p = M v`` with ``v`` the arrow from the start to (x, y).
        """
        p = self.momentum.copy()
        z = self.start[list(self.coords)]
        scale = self._path.momentum_scale
        i, j = self.coords
        p[i] = (float(x) - z[0]) / scale / self.inverse_mass[i]
        p[j] = (float(y) - z[1]) / scale / self.inverse_mass[j]
        self.momentum = p
        self._click_readout.value = (
            f"<span style='font-family:monospace'>initial momentum "
            f"({p[self.coords[0]]:.3g}, {p[self.coords[1]]:.3g})</span>")

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
        inverse, note = inverse_mass_of(kernel.metric)
        args = dict(start=np.array(start, dtype=float), step_size=float(kernel.step_size),
                    inverse_mass=inverse)
        if getattr(kernel, "n_steps", None) is not None:
            args["n_steps"] = int(kernel.n_steps)
        if getattr(kernel, "persistence", None) is not None:
            args["persistence"] = float(kernel.persistence)
        args.update(kwargs)
        if args.get("xlim") is None or args.get("ylim") is None:  # where the run's draws are
            xlim, ylim = run_region(run, args.get("coords", (0, 1)), args["start"])
            args["xlim"] = xlim if args.get("xlim") is None else args["xlim"]
            args["ylim"] = ylim if args.get("ylim") is None else args["ylim"]
        view = cls(target, **args)
        if momentum is not None and momentum.shape == (target.dim,) and "momentum" not in kwargs:
            view.momentum = momentum
        if note or replay:
            view.status = "; ".join(t for t in (note, replay) if t)
        return view

    # ------------------------------------------------------------- settings
    #: saved before issue 12: ``mass_scale`` held the mass diagonal, 1 / inverse mass
    RENAMED_SETTINGS = {"mass_scale": ("inverse_mass", reciprocals)}

    @classmethod
    def from_settings(cls, target, settings):
        """Build a view on ``target`` with saved ``settings`` (from ``view.settings``)."""
        s = cls.checked_settings(settings)
        view = cls(target, start=s.get("start"), coords=tuple(s.get("coords", (0, 1))),
                   xlim=s.get("xlim"), ylim=s.get("ylim"))
        return view.apply_settings(settings)

    def apply_settings(self, settings):
        """Restore saved knobs, start and momentum exactly (no fresh momentum draw)."""
        self._applying = True
        try:
            return super().apply_settings(settings)
        finally:
            self._applying = False


def _draw_index(draw):
    try:
        chain, index = draw
        return int(chain), int(index)
    except (TypeError, ValueError):
        raise ValueError(f"`draw` must be a pair (chain, index), got {draw!r}") from None
