"""TrajectoryView: one leapfrog trajectory over the log-density, redrawn as the knobs turn."""

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import FixedLocator, MaxNLocator, NullLocator

from ..core.leapfrog import leapfrog
from ..core.metric import Metric
from ..core.slices import choose_limits, log_density_grid, resolve_coords
from ..core.streams import seed_sequence
from ..draw import draw_energy_error, draw_log_density, draw_trajectory, legend
from ..draw.style import key_handles
from ._base import View, check_range, check_target, guarded

__all__ = ["TrajectoryView", "pilot_region"]

_DRAG_RADIUS_PX = 12  # a press this close to the start point drags the momentum


def pilot_region(target, coords, *, seed=0, start=None):
    """A view region and a start point from a short pilot run (sampler's scale).

    Returns ``(xlim, ylim, start)``; falls back to (-3, 3) boxes around
    ``start`` (or the origin) when the pilot fails.
    """
    from ..core.kernels import HMC
    from ..core.sampling import sample

    try:
        run = sample(target, HMC(0.1, 10), n_draws=150, n_chains=2, warmup=150, seed=seed)
        z = run.unconstrained
        xlim, ylim = choose_limits(z, coords=coords, quantiles=(0.005, 0.995), pad=0.15)
        if start is None:
            start = z[0, -1].copy()
        return xlim, ylim, np.asarray(start, dtype=float)
    except Exception:
        centre = np.zeros(target.dim) if start is None else np.asarray(start, dtype=float)
        i, j = coords
        return ((centre[i] - 3, centre[i] + 3), (centre[j] - 3, centre[j] + 3), centre)


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
        Divergence threshold (1000, common practice).

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
    mass_scale = traitlets.List(
        traitlets.Float(), help="Diagonal of the mass matrix, one entry per coordinate."
    ).tag(setting=True)
    seed = traitlets.Int(0, help="Seed of the momentum draws.").tag(setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    start = traitlets.Any(help="Start point, shape (dim,), sampler's scale.").tag(setting=True)
    momentum = traitlets.Any(help="Initial momentum, shape (dim,).").tag(setting=True)
    xlim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="x range shown.").tag(setting=True)
    ylim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="y range shown.").tag(setting=True)

    def __init__(self, target, *, start=None, coords=(0, 1), step_size=0.1, n_steps=20,
                 persistence=0.0, seed=0, xlim=None, ylim=None, max_energy_error=1000.0,
                 mass_scale=None):
        check_target(target, min_dim=2)
        self.target = target
        self.max_energy_error = float(max_energy_error)
        coords = resolve_coords(coords, target.names, target.dim)
        super().__init__(figsize=(8.4, 3.9))
        self._grid_key = None
        self._applying = False
        self._drag = None
        self._resamples = 0
        self.trajectory = None
        self.accepted = None
        with self.hold_trait_notifications():
            if xlim is None or ylim is None or start is None:
                px, py, pstart = pilot_region(target, coords, seed=seed, start=start)
                xlim = px if xlim is None else xlim
                ylim = py if ylim is None else ylim
                start = pstart
            self.coords = coords
            self.xlim = tuple(float(v) for v in xlim)
            self.ylim = tuple(float(v) for v in ylim)
            self.mass_scale = [1.0] * target.dim if mass_scale is None else [float(m) for m in mass_scale]
            self.step_size = step_size
            self.n_steps = n_steps
            self.persistence = persistence
            self.seed = seed
            self.start = start
            self.momentum = self._fresh_momentum()
        self._build_controls()
        self._build_figure()
        self._recompute()

    # ------------------------------------------------------------ validation
    _RANGES = {"step_size": (0.0, None, "(]"), "n_steps": (1, None, "[]"),
               "persistence": (0.0, 1.0, "[)")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    @traitlets.validate("mass_scale")
    def _check_mass(self, proposal):
        v = [float(m) for m in proposal["value"]]
        if len(v) != self.target.dim or not all(np.isfinite(m) and m > 0 for m in v):
            raise traitlets.TraitError(
                f"`mass_scale` must hold {self.target.dim} positive numbers, got {v}")
        return v

    @traitlets.validate("start", "momentum")
    def _check_point(self, proposal):
        v = np.asarray(proposal["value"], dtype=float)
        name = proposal["trait"].name
        if v.shape != (self.target.dim,):
            raise traitlets.TraitError(f"`{name}` must have shape ({self.target.dim},), got {v.shape}")
        return v

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        names = self.target.names
        self._step_slider = widgets.FloatLogSlider(
            value=self.step_size, base=10, min=-3, max=0.5, step=0.02, description="step size",
            readout_format=".3g", continuous_update=True)
        self._step_slider.add_class("pg-step-size")
        self._steps_slider = widgets.IntSlider(value=self.n_steps, min=1, max=300,
                                               description="steps", continuous_update=True)
        self._steps_slider.add_class("pg-n-steps")
        self._persist_slider = widgets.FloatSlider(value=self.persistence, min=0.0, max=0.99,
                                                   step=0.01, description="persistence")
        self._persist_slider.add_class("pg-persistence")
        self._mass_x = widgets.FloatLogSlider(value=self.mass_scale[self.coords[0]], base=10,
                                              min=-2, max=2, step=0.05, readout_format=".3g")
        self._mass_y = widgets.FloatLogSlider(value=self.mass_scale[self.coords[1]], base=10,
                                              min=-2, max=2, step=0.05, readout_format=".3g")
        self._seed_box = widgets.BoundedIntText(value=self.seed, min=0, max=2**31 - 1,
                                                description="seed", layout=widgets.Layout(width="160px"))
        self._resample = widgets.Button(description="resample momentum", icon="refresh")
        self._resample.add_class("pg-resample")
        self._resample.on_click(lambda _: self.resample_momentum())
        self._coordinate_pickers(names)
        for control, trait in ((self._step_slider, "step_size"), (self._steps_slider, "n_steps"),
                               (self._persist_slider, "persistence"), (self._seed_box, "seed")):
            traitlets.link((control, "value"), (self, trait))
        self._mass_x.observe(lambda ch: self._set_mass(0, ch["new"]), "value")
        self._mass_y.observe(lambda ch: self._set_mass(1, ch["new"]), "value")
        self._readout = widgets.HTML()
        self._readout.add_class("pg-readout")
        self._click_readout = widgets.HTML(
            "<span style='font-family:monospace'>click the left panel to move the start; press on "
            "the start and drag to set the initial momentum</span>")
        self._click_readout.add_class("pg-click-readout")
        self._sync_mass_labels()
        row1 = widgets.HBox([self._step_slider, self._steps_slider, self._persist_slider])
        row2 = widgets.HBox([self._mass_x, self._mass_y, self._seed_box, self._resample])
        rows = [row1, row2]
        if self.target.dim > 2:
            rows.append(widgets.HBox([self._x_pick, self._y_pick]))
        self.children = rows + [self.figure.canvas, self._readout, self._click_readout,
                                self._status_html]

    def _sync_mass_labels(self):
        names = self.target.names
        self._mass_x.description = f"mass {names[self.coords[0]]}"[:18]
        self._mass_y.description = f"mass {names[self.coords[1]]}"[:18]
        self._mass_x.value = self.mass_scale[self.coords[0]]
        self._mass_y.value = self.mass_scale[self.coords[1]]

    def _set_mass(self, axis, value):
        masses = list(self.mass_scale)
        masses[self.coords[axis]] = float(value)
        self.mass_scale = masses

    def _set_coordinates(self, coords):
        """Show ``coords`` in a region of three mass-scaled units around the start."""
        z = self.start
        span = 3.0 * np.sqrt(1.0 / np.asarray(self.mass_scale))
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
        self._path = draw_trajectory(self._ax, tr, coords=self.coords, accepted=None,
                                     names=self.target.names)
        self._path.autoscale = False
        self._energy = draw_energy_error(self._ax_err, tr)
        self._energy.verdict.set_fontsize(8)
        # few ticks: tick labels are most of the cost of a full draw
        self._ax_err.yaxis.set_major_locator(FixedLocator([-1000, -10, -1, 0, 1, 10, 1000]))
        self._ax_err.yaxis.set_minor_locator(NullLocator())
        for ax in (self._ax, self._ax_err):
            ax.xaxis.set_major_locator(MaxNLocator(6))
        self._ax.yaxis.set_major_locator(MaxNLocator(6))
        p = self._path
        handles = [self._density.contours, p.path, p.start, p.momentum] + key_handles(
            "accepted", "rejected", "divergent")
        legend(self._ax, loc="upper center", bbox_to_anchor=(0.5, -0.14), ncol=4, handles=handles,
               labels=[h.get_label() for h in handles], fontsize=7)
        self._ax_err.legend(loc="lower left", fontsize=7)
        p, e = self._path, self._energy
        self.set_dynamic([p.path, p.start, p.end, p.divergent, p.momentum, e.error,
                          e.divergence, e.verdict, e.accept_line])
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
        """Contours are computed once per region, coordinates and slice, never per tick."""
        through = self.start.copy()
        through[list(self.coords)] = 0.0  # the slice depends only on the other coordinates
        key = (self.coords, self.xlim, self.ylim, tuple(through) if self.target.dim > 2 else None)
        if key != self._grid_key:
            self._grid_cache = log_density_grid(self.target, self.coords, self.start,
                                                self.xlim, self.ylim, n=90)
            self._grid_key = key
            self.grid_evaluations = getattr(self, "grid_evaluations", 0) + 1
        return self._grid_cache

    # ----------------------------------------------------------- computation
    def _metric(self):
        return Metric(1.0 / np.asarray(self.mass_scale, dtype=float))

    def _rng(self):
        ss = seed_sequence(self.seed)
        return np.random.default_rng(ss.spawn(self._resamples + 1)[-1])

    def _fresh_momentum(self):
        z = self._rng().standard_normal(self.target.dim)
        return self._metric().momentum_from_normal(z)

    def _integrate(self):
        counts = (self.target.n_density, self.target.n_grad)
        try:
            return leapfrog(self.target, self.start, self.momentum, self.step_size, self.n_steps,
                            metric=self._metric(), max_energy_error=self.max_energy_error)
        finally:
            self.target.n_density, self.target.n_grad = counts

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

    @traitlets.observe("mass_scale")
    def _on_mass(self, change):
        if not isinstance(change["old"], list) or self._applying:
            return
        old, new = np.asarray(change["old"], dtype=float), np.asarray(change["new"], dtype=float)
        if self.momentum is not None and old.shape == new.shape:
            # keep the same standard-normal draw: p = sqrt(M) z
            self.momentum = self.momentum * np.sqrt(new / old)
        if hasattr(self, "_mass_x"):
            self._sync_mass_labels()

    @traitlets.observe("step_size", "n_steps", "start", "momentum", "coords", "xlim", "ylim",
                       "mass_scale")
    def _on_knob(self, change):
        if hasattr(self, "_energy"):
            self._recompute()

    @guarded("redraw")
    def _recompute(self):
        if self._grid_key is not None and (self._grid_key[0] != self.coords):
            self._x_pick.value, self._y_pick.value = self.coords
            self._sync_mass_labels()
        grid_key = self._grid_key
        grid = self._grid()
        if grid_key != self._grid_key:  # new contours only for a new region: not per tick
            self._density.update(grid)
        static = (self._grid_key, self.coords, self.xlim, self.ylim, self.n_steps)
        full = grid_key != self._grid_key or static != getattr(self, "_static_key", None)
        self._static_key = static
        tr = self._integrate()
        self.trajectory = tr
        err = tr.energy_error[tr.n_steps] if not tr.divergent else np.inf
        # The end marker shows the Metropolis decision this view's seed would make.
        u = np.random.default_rng(seed_sequence(self.seed).spawn(1)[0]).random()
        self.accepted = bool(not tr.divergent and np.log(u) < -err)
        self._path.coords = tuple(self.coords)
        self._path.update(tr, self.accepted)
        self._energy.update(tr)
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        names = self._axis_names()
        self._ax.set_xlabel(names[0])
        self._ax.set_ylabel(names[1])
        self._readout.value = self._readout_html(tr)
        self.status = ""
        self.redraw(full=full)

    def _readout_html(self, tr):
        length = self.step_size * self.n_steps
        if tr.divergent:
            verdict = (f"<b style='color:#a33'>divergent</b> at step {tr.divergence_step} "
                       f"(|&Delta;H| &gt; {tr.max_energy_error:g}); acceptance probability 0")
            dh = "&Delta;H = &infin;"
        else:
            d = float(tr.energy_error[-1])
            prob = float(np.exp(min(0.0, -d)))
            dh = f"&Delta;H = {d:+.4g}"
            verdict = f"acceptance probability {prob:.3f}; no divergence"
        return (f"<span style='font-family:monospace'>step size {self.step_size:.4g} &times; "
                f"{self.n_steps} steps = length {length:.4g} | {dh} | {verdict}</span>")

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
        """Set the shown momentum components so the arrow points at (x, y) (what a drag does)."""
        p = self.momentum.copy()
        z = self.start[list(self.coords)]
        scale = self._path.momentum_scale
        p[self.coords[0]] = (float(x) - z[0]) / scale
        p[self.coords[1]] = (float(y) - z[1]) / scale
        self.momentum = p
        self._click_readout.value = (
            f"<span style='font-family:monospace'>initial momentum "
            f"({p[self.coords[0]]:.3g}, {p[self.coords[1]]:.3g})</span>")

    # ------------------------------------------------------------- settings
    @classmethod
    def from_settings(cls, target, settings):
        """Build a view on ``target`` with saved ``settings`` (from ``view.settings``)."""
        s = dict(settings)
        s.pop("view", None)
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
