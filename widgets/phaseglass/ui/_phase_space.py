"""What TrajectoryView and DoublingView share: a start and momentum edited on a 2-D slice.

Both views show one transition from a start point with an initial momentum over
the contours of the log-density (a 2-D slice through the start), with a
diagonal inverse mass matrix. ``PhaseSpaceView`` holds that part once: its
traits and checks, the pilot-based defaults, the click (move the start) and drag
(set the momentum) handlers, the contour grid, the seed box and readouts, the
deprecated ``mass_scale`` and saved settings, and the pieces of ``from_run``
both views use. Each view adds its own knobs, figure and transition.
"""

import ipywidgets as widgets
import numpy as np
import traitlets

from ..core._validate import warn_renamed
from ..core.metric import Metric
from ..core.slices import resolve_coords
from ._base import View, check_target, guarded
from ._controls import KnobControl
from ._shared import GridCache, pilot, step_size_range

__all__ = ["PhaseSpaceView", "run_parts", "run_region", "run_arguments", "reciprocals",
           "inverse_mass_of"]

_DRAG_RADIUS_PX = 12  # a press this close to the start point drags the momentum


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


def run_arguments(run, kernel, start, **kwargs):
    """(view arguments, note) to open a start/momentum view on ``run`` from ``start``.

    The arguments are the start, the kernel's step size and inverse mass (the
    diagonal of a dense one; the note says so), then ``kwargs`` (which win), and
    where not given a region holding the run's draws of the shown coordinates
    and the start.
    """
    inverse, note = inverse_mass_of(kernel.metric)
    args = dict(start=np.array(start, dtype=float), step_size=float(kernel.step_size),
                inverse_mass=inverse)
    args.update(kwargs)
    if args.get("xlim") is None or args.get("ylim") is None:  # where the run's draws are
        xlim, ylim = run_region(run, args.get("coords", (0, 1)), args["start"])
        args["xlim"] = xlim if args.get("xlim") is None else args["xlim"]
        args["ylim"] = ylim if args.get("ylim") is None else args["ylim"]
    return args, note


class PhaseSpaceView(View):
    """Base of the views that edit one transition's start and momentum on a 2-D slice.

    A subclass passes its own knobs' initial values (``knobs``, set in order
    after the region and mass) and defines ``_fresh_momentum()``,
    ``_build_controls()``, ``_build_figure()`` (its trajectory drawing as
    ``self._path``, with a ``momentum_scale``) and ``_recompute()``.
    """

    step_size = traitlets.Float(0.1, help="Leapfrog step size (epsilon).").tag(setting=True)
    inverse_mass = traitlets.List(
        traitlets.Float(), help="Diagonal of the inverse mass matrix (the Metric's inverse_mass), "
                                "one entry per coordinate."
    ).tag(setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    start = traitlets.Any(help="Start point, shape (dim,), sampler's scale.").tag(setting=True)
    momentum = traitlets.Any(help="Initial momentum, shape (dim,).").tag(setting=True)
    xlim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="x range shown.").tag(setting=True)
    ylim = traitlets.Tuple(traitlets.Float(), traitlets.Float(), help="y range shown.").tag(setting=True)

    def __init__(self, target, *, start, coords, seed, xlim, ylim, inverse_mass, mass_scale,
                 max_energy_error, figsize, knobs):
        check_target(target, min_dim=2)
        self.target = target
        self.max_energy_error = float(max_energy_error)
        coords = resolve_coords(coords, target.names, target.dim)
        super().__init__(figsize=figsize)
        self._grids = GridCache(target, n=90)
        self._applying = False
        self._drag = None
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
            for name, value in knobs.items():
                setattr(self, name, value)
            self.seed = seed
            self.start = start
            self.momentum = self._fresh_momentum()
        self._build_controls()
        self._build_figure()
        self._recompute()

    # ------------------------------------------------------------ validation
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
    def _shared_controls(self):
        """The step-size knob (the ``pg-primary`` control), the seed box and the two readouts."""
        low, high = step_size_range(self._pilot.step_size)
        self._step_knob = KnobControl(self, "step_size", low=low, high=high, log=True,
                                      label="step size", css_class="pg-step-size")
        self._step_knob.slider.add_class("pg-primary")
        self._seed_box = widgets.BoundedIntText(value=self.seed, min=0, max=2**31 - 1,
                                                description="seed",
                                                layout=widgets.Layout(width="150px"))
        self._seed_box.tooltip = self.traits()["seed"].help
        traitlets.link((self._seed_box, "value"), (self, "seed"))
        self._readout = widgets.HTML()
        self._readout.add_class("pg-readout")
        self._click_readout = widgets.HTML(
            "<span style='font-family:monospace'>click the left panel to move the start; press on "
            "the start and drag to set the initial momentum</span>")
        self._click_readout.add_class("pg-click-readout")

    def _lay_out(self, rows):
        """The view's children: control ``rows``, the picker row (n-D), canvas, readouts, status."""
        wrap = widgets.Layout(flex_flow="row wrap", align_items="center")
        rows = [widgets.HBox(row, layout=wrap) for row in rows]
        if self.target.dim > 2:
            rows.append(widgets.HBox([self._x_pick, self._y_pick, self._swap_pick], layout=wrap))
        self.children = rows + [self.figure.canvas, self._readout, self._click_readout,
                                self._status_html]

    # ----------------------------------------------------------------- mass
    @property
    def mass_scale(self):
        """Deprecated: the mass diagonal, ``1 / inverse_mass`` (use ``inverse_mass``)."""
        warn_renamed("mass_scale", "inverse_mass", "attribute")
        return reciprocals(self.inverse_mass)

    @mass_scale.setter
    def mass_scale(self, value):
        warn_renamed("mass_scale", "inverse_mass", "attribute")
        self.inverse_mass = reciprocals(value)

    def _metric(self):
        return Metric(np.asarray(self.inverse_mass, dtype=float))

    @traitlets.observe("inverse_mass")
    def _on_mass(self, change):
        if not isinstance(change["old"], list) or self._applying:
            return
        old, new = np.asarray(change["old"], dtype=float), np.asarray(change["new"], dtype=float)
        if self.momentum is not None and old.shape == new.shape:
            # keep the same standard-normal draw: p = sqrt(M) z = z / sqrt(inverse mass)
            self.momentum = self.momentum * np.sqrt(old / new)

    # ------------------------------------------------------------ the slice
    def _set_coordinates(self, coords):
        """Show ``coords`` in a region of three mass-scaled units around the start."""
        z = self.start
        span = 3.0 * np.sqrt(np.asarray(self.inverse_mass))
        with self.hold_trait_notifications():
            self.coords = coords
            self.xlim = (z[coords[0]] - span[coords[0]], z[coords[0]] + span[coords[0]])
            self.ylim = (z[coords[1]] - span[coords[1]], z[coords[1]] + span[coords[1]])

    def _axis_names(self):
        names = self.target.names
        suffix = " (sampler's scale)" if self.target.bounded else ""
        return (names[self.coords[0]] + suffix, names[self.coords[1]] + suffix)

    def _grid(self):
        """Contours: computed once per region, coordinates and slice, never per tick."""
        return self._grids.get(self.coords, self.start, self.xlim, self.ylim)

    def _update_contours(self):
        """New contours only for a new region (not per tick); True when the region is new."""
        before = (self._grids.evaluations, self._grids.key)
        grid = self._grid()
        new_region = (self._grids.evaluations, self._grids.key) != before
        if new_region:
            self._density.update(grid)
        return new_region

    def _show_region(self):
        """The slice panel's limits and axis labels, and the drawing's coordinates and metric."""
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        names = self._axis_names()
        self._ax.set_xlabel(names[0])
        self._ax.set_ylabel(names[1])
        self._path.coords = tuple(self.coords)
        self._path.metric = self._metric()

    # ---------------------------------------------------------------- mouse
    def _connect_mouse(self):
        canvas = self.figure.canvas
        canvas.mpl_connect("button_press_event", self._on_press)
        canvas.mpl_connect("motion_notify_event", self._on_motion)
        canvas.mpl_connect("button_release_event", self._on_release)

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
