"""ShiftGibbsView: Gibbs chains on one shared random stream, with and without a shift."""

import html

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.lines import Line2D
from matplotlib.ticker import LogLocator, MaxNLocator, NullLocator

from ..core._validate import warn_renamed
from ..core.gibbs import DEFAULT_GRID_SIZE, Gibbs
from ..core.run import CAUTION
from ..core.sampling import Sampler
from ..core.slices import choose_limits, resolve_coords
from ..draw import draw_chain_spread, draw_gibbs_paths, draw_log_density, draw_traces, legend
from ..draw.gibbs import chain_spread
from ._base import COLUMN_WIDTH_IN, View, check_range, check_target, guarded, number, plural
from ._controls import KnobControl
from ._shared import GridCache

__all__ = ["ShiftGibbsView", "spread_out_starts"]

MAX_CHAINS = 10
_PILOT_CHAINS = 2
_PILOT_DRAWS = 32      # per chain; the first quarter is dropped
_PILOT_SEED = 20240917  # fixed, so starts and region do not depend on the view's seed
_TRACE_BLOCK = 50       # trace x-limits grow in blocks, so most ticks only blit
_SPREAD_FLOOR = 1e-12   # where draw_chain_spread shows a zero gap
_REPLAY_MAX = 100       # sweeps re-run at most when a knob changes (a user's conditionals may be slow)


def spread_out_starts(points, n, scale=None):
    """Pick ``n`` rows of ``points`` that lie far apart (greedy farthest-point choice).

    Parameters
    ----------
    points : ndarray, shape (m, dim)
        Candidate starts, e.g. draws of a short pilot run.
    n : int
    scale : ndarray, shape (dim,), optional
        Per-coordinate scale used to measure distance (default: the sample sd).

    Returns
    -------
    ndarray, shape (n, dim)
        The first is the point farthest from the mean; each next one is the
        point farthest from those already chosen.

    Examples
    --------
    >>> pts = np.array([[0.0, 0.0], [1.0, 0.0], [0.1, 0.0], [-1.0, 0.0]])
    >>> spread_out_starts(pts, 2, scale=np.ones(2)).tolist()
    [[-1.0, 0.0], [1.0, 0.0]]
    """
    p = np.asarray(points, dtype=float)
    if scale is None:
        scale = p.std(axis=0)
    scale = np.where(np.asarray(scale) > 0, scale, 1.0)
    s = p / scale
    chosen = [int(np.argmax(np.linalg.norm(s - s.mean(axis=0), axis=1)))]
    dist = np.linalg.norm(s - s[chosen[0]], axis=1)
    for _ in range(n - 1):
        k = int(np.argmax(dist))
        chosen.append(k)
        dist = np.minimum(dist, np.linalg.norm(s - s[k], axis=1))
    return p[chosen].copy()


class ShiftGibbsView(View):
    """Several Gibbs chains driven by one shared random stream, live.

    Every chain consumes the same random numbers (``pg.Gibbs(...,
    shared_stream=True)``) but starts somewhere else: the starts are
    draws of a short pilot run that lie far apart. With ordinary Gibbs
    sampling (``ordinary=True``) the chains then coalesce on targets where the
    inverse-CDF update contracts: once they meet they have forgotten their
    starts. With a shift ``c`` of the driving uniforms (R. M. Neal,
    arXiv:1205.0070) each update is a bijection of (x, u), so the chains stay
    distinct while still sampling the target; with ``c = 0`` each chain is a
    deterministic map that stays on one level set of the extended space and
    does not explore.

    Left: the paths of the latest ``trail`` sweeps over the log-density
    contours (a 2-D slice through the pilot mean for an n-D target; computed
    once per region). Right: a trace per chain of each shown coordinate, and
    the chain spread per sweep (``draw.gibbs.chain_spread``: the widest gap
    between chains over the coordinates; log scale). The figure's title and a
    readout give the sweep count, the shift in use and the chain spread now. Step, Play/Pause (front-end driven: each tick of the Play control makes one
    sweep, so the kernel is never blocked) and Reset drive it.

    Everything is on the sampler's (unconstrained) scale; for a target without
    ``bounds`` that is the user's scale.

    Parameters
    ----------
    target : Target
    conditionals : callable, optional
        ``conditionals(i, x)`` returning the distribution of ``x[i]`` given the
        rest (an object with ``cdf`` and ``ppf``; a frozen ``scipy.stats``
        distribution works, and ``pg.freeze(scipy.stats.norm, loc, scale)``
        builds one without scipy's per-object set-up, so knob moves replay
        faster), as for ``pg.Gibbs``. Default: numeric conditionals built from
        the log-density.
    n_chains : int in [2, 10]
    shift : float in [0, 1)
        The shift ``c`` of the driving uniforms (0 is allowed, to show why it fails).
    random_shift : bool
        Draw a fresh shift each sweep (``shift="random"``) instead.
    ordinary : bool
        Ordinary Gibbs sampling (fresh uniforms from the shared stream).
    seed : int
        Seed of the shared stream.
    coords : pair of int or str
        The two coordinates shown.
    capacity : int
        Draws kept per chain (a ring buffer), so Play runs in bounded memory.
    trail : int
        Sweeps drawn as paths (0: every kept draw).
    grid_size : int
        Nodes of numeric conditionals (ignored with ``conditionals``).
    starts_from : array_like, shape (n, dim), optional
        Draws (user's scale) the chains' starts are spread over, e.g. an
        earlier run's; default a short ordinary-Gibbs pilot run.
    vectorized : bool
        Call ``conditionals(i, x)`` once for all chains, as ``pg.Gibbs(vectorized=True)``
        (the pilot run too).

    Attributes
    ----------
    run : Run
        Everything recorded since the last reset: ``draws`` (chain, draw, dim),
        ``u`` (chain, draw, dim) the uniforms each update used, ...
    kernel : Gibbs
    sampler : Sampler
    n_sweeps : int
        Sweeps since the last reset (the ring buffer may have dropped old ones).
    path_points : ndarray, shape (chain, k, dim)
        The states the paths are drawn through: the start followed by the
        draws (the latest ``trail + 1`` of them), sampler's scale.
    spread : float
        The chain spread now: the widest gap between chains over the
        coordinates (sampler's scale; ``distance`` is its deprecated former name).
    met_at : int or None
        Index of the first draw (since the last reset) at which all chains coincided.

    Notes
    -----
    A knob shows its effect at once: changing ``shift``, ``random_shift``,
    ``ordinary``, ``n_chains`` or ``seed`` replays. The chains go back to their
    starts, with a fresh shared stream from ``seed``, and make the same number
    of sweeps again with the new setting -- at most ``trail`` sweeps (and at
    most 100; 100 when ``trail`` is 0), so a replay stays quick even with slow
    conditionals. Step or Play then go on from there. ``reset()`` goes back to
    the starts with no sweeps. Changing ``coords`` or ``trail`` only changes
    what is drawn.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> view = pg.ShiftGibbsView(pg.demos.correlated_gaussian(correlation=0.6), shift=0.1)
    >>> view.step(20)
    >>> view.run.draws.shape
    (4, 20, 2)
    >>> view.ordinary = True     # replays the 20 sweeps from the starts: the chains coalesce
    >>> view.n_sweeps
    20
    >>> view.step(40)
    >>> view.spread < 1e-9
    True
    """

    shift = traitlets.Float(
        0.1, help="Shift c of the driving uniforms: u <- F(old x) + c (mod 1); 0 does not "
        "explore. Replays the shown sweeps from the starts."
    ).tag(setting=True)
    random_shift = traitlets.Bool(
        False, help="Draw a fresh shift from the shared stream each sweep (shift='random'); replays."
    ).tag(setting=True)
    ordinary = traitlets.Bool(
        False, help="Ordinary Gibbs sampling on the same shared stream (fresh uniforms); replays."
    ).tag(setting=True)
    n_chains = traitlets.Int(4, help="Number of chains (2 to 10); replays.").tag(setting=True)
    seed = traitlets.Int(0, help="Seed of the one random stream all chains share; replays.").tag(
        setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    trail = traitlets.Int(30, help="Latest sweeps drawn as paths (0: every kept draw).").tag(
        setting=True)

    def __init__(self, target, conditionals=None, *, n_chains=4, shift=0.1, random_shift=False,
                 ordinary=False, seed=0, coords=(0, 1), capacity=2000, trail=30,
                 grid_size=DEFAULT_GRID_SIZE, starts_from=None, vectorized=False):
        check_target(target, min_dim=2)
        pool = None
        if starts_from is not None:
            pool = np.asarray(starts_from, dtype=float)
            if pool.ndim != 2 or pool.shape[1] != target.dim or len(pool) < 2:
                raise ValueError(f"`starts_from` must be draws shaped (n, dim) = (n >= 2, "
                                 f"{target.dim}), got shape {pool.shape}")
            pool = target.from_user(pool[np.all(np.isfinite(pool), axis=1)])
        if isinstance(capacity, bool) or not isinstance(capacity, (int, np.integer)) or capacity < 2:
            raise ValueError(f"`capacity` must be an int >= 2, got {capacity!r}")
        self.target = target
        self.capacity = int(capacity)
        # the kernel validates `conditionals` and `grid_size` (TypeError/ValueError naming them)
        self.kernel = Gibbs(conditionals, shift=None, shared_stream=True, grid_size=grid_size,
                            vectorized=vectorized)
        super().__init__(figsize=(COLUMN_WIDTH_IN, 4.8))
        self.sampler = None
        self._run = None
        self._region = None
        self._limits = {}
        self._syncing = False
        self._built = False
        self._replayed = None  # (knob, sweeps) of the latest replay, for the readout
        self.met_at = None
        self._grids = GridCache(target, n=80)
        with self.hold_trait_notifications():
            self.coords = resolve_coords(coords, target.names, target.dim)
            self.n_chains = n_chains
            self.seed = seed
            self.shift = shift
            self.random_shift = random_shift
            self.ordinary = ordinary
            self.trail = trail
        self._pilot = self._pilot_draws() if pool is None else pool
        self._sync_kernel()
        self._build_controls()
        self._new_sampler()
        self._build_figure()
        self._built = True
        self._refresh(full=True)

    # ------------------------------------------------------------ validation
    _RANGES = {"shift": (0.0, 1.0, "[)"), "n_chains": (2, MAX_CHAINS, "[]"),
               "seed": (0, None, "[]"), "trail": (0, None, "[]")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    # ------------------------------------------------------------- the kernel
    @property
    def conditionals(self):
        """The user's ``conditionals(i, x)`` (or None for numeric ones); settable, no reset."""
        return self.kernel.conditionals

    @conditionals.setter
    def conditionals(self, fn):
        self.kernel.conditionals = fn  # validated by the kernel

    def _sync_kernel(self):
        self.kernel.shift = (None if self.ordinary else
                             "random" if self.random_shift else float(self.shift))

    @classmethod
    def from_run(cls, run, **kwargs):
        """Open on a Run: its target, its Gibbs conditionals and shift, starts spread over its draws.

        A run of another kernel (e.g. HMC) gives the target and the starts; the
        conditionals are then numeric. Any argument of ShiftGibbsView may be
        given and wins over the run's values.
        """
        from ._phase_space import run_parts

        target, kernel = run_parts(run, needs_step_size=False)
        args = {"starts_from": np.asarray(run.draws, dtype=float).reshape(-1, target.dim)}
        if isinstance(kernel, Gibbs):
            args.update(conditionals=kernel.conditionals, grid_size=kernel.grid_size,
                        vectorized=kernel.vectorized)
            if kernel.shift is None:
                args["ordinary"] = True
            elif isinstance(kernel.shift, str):
                args["random_shift"] = True
            else:
                args["shift"] = float(kernel.shift)
        args.update(kwargs)
        return cls(target, **args)

    def _pilot_draws(self):
        """Draws (m, dim) of a short ordinary-Gibbs pilot (independent streams), sampler's scale."""
        pilot = Gibbs(self.kernel.conditionals, shift=None, shared_stream=False,
                      grid_size=self.kernel.grid_size, vectorized=self.kernel.vectorized)
        try:
            with self.target.uncounted():  # a view is not sampling work
                s = Sampler(self.target, pilot, n_chains=_PILOT_CHAINS, seed=_PILOT_SEED)
                s.step(_PILOT_DRAWS)
            z = s.run.unconstrained[:, _PILOT_DRAWS // 4:].reshape(-1, self.target.dim)
            z = z[np.all(np.isfinite(z), axis=1)]
            return z if len(z) >= MAX_CHAINS else None
        except Exception as exc:  # user code: report, fall back to random starts
            self.report_error("the pilot run (random starts are used instead)", exc)
            return None

    def _starts(self):
        """User-scale starts (n_chains, dim) spread over the pilot draws, or None."""
        if self._pilot is None:
            return None
        return self.target.to_user(spread_out_starts(self._pilot, self.n_chains))

    @guarded("reset")
    def _new_sampler(self):
        self._sync_kernel()
        self.sampler = None  # stays None if user code raises below
        self.sampler = Sampler(self.target, self.kernel, self._starts(), n_chains=self.n_chains,
                               seed=self.seed, capacity=self.capacity)
        self._start_z = self.sampler.state.position.copy()
        self._run = None
        self.met_at = None

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        lay = widgets.Layout
        self._shift_knob = KnobControl(self, "shift", low=0.0, high=0.999, label="shift c",
                                       css_class="pg-shift")
        self._shift_slider = self._shift_knob.slider
        self._shift_slider.continuous_update = False  # a drag replays once, when released
        self._random_toggle = widgets.ToggleButton(value=self.random_shift, description="random shift",
                                                   icon="random", tooltip="shift='random'",
                                                   layout=lay(width="130px"))
        self._random_toggle.add_class("pg-random-shift")
        self._ordinary_box = widgets.Checkbox(value=self.ordinary, description="ordinary Gibbs",
                                              indent=False, layout=lay(width="130px"))
        self._ordinary_box.add_class("pg-ordinary")
        self._chains_knob = KnobControl(self, "n_chains", low=2, high=MAX_CHAINS, integer=True,
                                        label="chains", css_class="pg-n-chains")
        self._chains_slider = self._chains_knob.slider
        self._chains_slider.continuous_update = False
        self._seed_box = widgets.BoundedIntText(value=self.seed, min=0, max=2**31 - 1,
                                                description="seed", layout=lay(width="150px"))
        self._seed_box.add_class("pg-seed")
        self._trail_knob = KnobControl(self, "trail", low=0, high=500, integer=True,
                                       label="trail (sweeps)", css_class="pg-trail")
        self._step_button = widgets.Button(description="step", icon="step-forward",
                                           layout=lay(width="90px"))
        self._step_button.add_class("pg-step")
        self._step_button.on_click(lambda _: self.step())
        self._play = widgets.Play(value=0, min=0, max=10**9, step=1, interval=200,
                                  show_repeat=False, description="play")
        self._play.add_class("pg-play")
        self._play.observe(self._on_tick, "value")
        self._reset_button = widgets.Button(description="reset", icon="undo",
                                            layout=lay(width="90px"))
        self._reset_button.add_class("pg-reset")
        self._reset_button.on_click(lambda _: self.reset())
        for control, trait in ((self._random_toggle, "random_shift"), (self._ordinary_box, "ordinary"),
                               (self._seed_box, "seed")):
            traitlets.link((control, "value"), (self, trait))
        self._coordinate_pickers(self.target.names)
        self._readout = widgets.HTML()
        self._readout.add_class("pg-gibbs-readout")
        self._sync_enabled()
        rows = [
            widgets.HBox([self._shift_knob, self._random_toggle, self._ordinary_box]),
            widgets.HBox([self._step_button, self._play, self._reset_button, self._seed_box]),
            widgets.HBox([self._chains_knob, self._trail_knob]),
        ]
        if self.target.dim > 2:
            rows.append(widgets.HBox([self._x_pick, self._y_pick, self._swap_pick],
                                     layout=widgets.Layout(flex_flow="row wrap",
                                                           align_items="center")))
        self.children = rows + [self.figure.canvas, self._readout, self._status_html]

    def _sync_enabled(self):
        """The shift knob only acts with a fixed shift.

        The control marked ``pg-primary`` (the one a browser test moves) is the
        shift slider then, and the chains slider otherwise: either replays at once.
        """
        fixed = not (self.ordinary or self.random_shift)
        self._shift_knob.disabled = not fixed
        self._random_toggle.disabled = bool(self.ordinary)
        self._shift_slider.remove_class("pg-primary")
        self._chains_slider.remove_class("pg-primary")
        (self._shift_slider if fixed else self._chains_slider).add_class("pg-primary")

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        axd = fig.subplot_mosaic([["paths", "tx"], ["paths", "ty"], ["paths", "spread"]],
                                 width_ratios=[1.05, 1.0])
        self._ax, self._ax_tx, self._ax_ty, self._ax_spread = (
            axd["paths"], axd["tx"], axd["ty"], axd["spread"])
        self._title = fig.suptitle(" ", x=0.01, ha="left", fontsize=9)
        self._ax_tx.sharex(self._ax_spread)
        self._ax_ty.sharex(self._ax_spread)
        for ax in (self._ax_tx, self._ax_ty):
            ax.tick_params(labelbottom=False)
        self._set_region()
        self._density = draw_log_density(self._ax, self._grid(), names=self._axis_names())
        self._draw_chains()

    def _draw_chains(self):
        """(Re)create the per-chain artists: needed when the number of chains changes."""
        for name in ("_paths", "_trace_x", "_trace_y", "_spread"):
            old = getattr(self, name, None)
            if old is not None:
                old.remove()
        for name in ("_starts_line", "_met_note"):
            if getattr(self, name, None) is not None:
                getattr(self, name).remove()
        for ax in (self._ax, self._ax_tx, self._ax_ty, self._ax_spread):
            if ax.get_legend() is not None:
                ax.get_legend().remove()
        z = self._empty_draws()
        names = self._axis_names_all()
        self._paths = draw_gibbs_paths(self._ax, z, coords=self.coords, names=names)
        self._paths.autoscale = False
        (self._starts_line,) = self._ax.plot([], [], linestyle="none", marker="o", markersize=9,
                                             markerfacecolor="none", markeredgecolor="black",
                                             markeredgewidth=1.2, zorder=4, label="starts")
        self._trace_x = draw_traces(self._ax_tx, z, coord=self.coords[0], names=names)
        self._trace_y = draw_traces(self._ax_ty, z, coord=self.coords[1], names=names)
        self._spread = draw_chain_spread(self._ax_spread, z[:, :0])
        for d in (self._trace_x, self._trace_y, self._spread):
            d.autoscale = False
        # heads shrink with the chain index, so chains that have met stay visible as nested markers
        for c, head in enumerate(self._paths.heads):
            head.set_markersize(max(11.0 - 0.8 * c, 5.0))
        self._ax_spread.set_xlabel("draw (one sweep each)")
        self._ax_spread.set_ylabel("chain spread")
        self._ax_spread.yaxis.set_major_locator(LogLocator(numticks=5))
        self._ax_spread.yaxis.set_minor_locator(NullLocator())
        for ax in (self._ax_tx, self._ax_ty):
            ax.set_xlabel("")
            ax.yaxis.set_major_locator(MaxNLocator(4))
        for ax in (self._ax_tx, self._ax_ty, self._ax_spread):
            ax.yaxis.label.set_size(8)
        # legends outside the data: chains under the paths, spread key beside its Axes
        handles = list(self._paths.paths) + [self._starts_line, self._density.contours]
        labels = [f"chain {c}" for c in range(self.n_chains)] + ["starts", "log-density contours"]
        self._path_keys = [Line2D([], [], color=p.get_color(), linestyle=p.get_linestyle(),
                                  marker=h.get_marker(), markersize=6)
                           for p, h in zip(self._paths.paths, self._paths.heads)]
        handles[:self.n_chains] = self._path_keys
        legend(self._ax, loc="upper center", bbox_to_anchor=(0.5, -0.13),
               ncol=3, handles=handles, labels=labels, fontsize=7)  # 4 columns overflow
        # the y label names the line; the meeting point gets a note beside its star
        self._met_note = self._ax_spread.annotate(
            "", xy=(0, _SPREAD_FLOOR), xytext=(6, 8), textcoords="offset points", fontsize=7,
            color=self._spread.met.get_color(), fontweight="bold", annotation_clip=False)
        p = self._paths
        self.set_dynamic(p.paths + p.heads + [self._starts_line] + self._trace_x.lines
                         + self._trace_y.lines + [self._spread.spread, self._spread.met,
                                                  self._met_note, self._title])
        self._limits = {}
        # the legend may have grown: lay the figure out again at the next full draw
        # (the base class freezes the layout after it)
        self.figure.set_layout_engine("constrained")

    def _empty_draws(self):
        return np.zeros((self.n_chains, 1, self.target.dim))

    def _axis_names_all(self):
        suffix = " (sampler's scale)" if self.target.bounded else ""
        return tuple(n + suffix for n in self.target.names)

    def _axis_names(self):
        names = self._axis_names_all()
        return names[self.coords[0]], names[self.coords[1]]

    def _set_region(self):
        """View region of the shown coordinates, from the pilot (or around the starts)."""
        pts = [self._pilot] if self._pilot is not None else []
        if self.sampler is not None:
            pts.append(self._start_z)
        if not pts:
            self._region = ((-3.0, 3.0), (-3.0, 3.0))
            return
        allp = np.concatenate(pts, axis=0)
        xlim, ylim = choose_limits(allp, coords=self.coords, pad=0.12)
        self._region = (xlim, ylim)

    def _through(self):
        if self._pilot is not None:
            return self._pilot.mean(axis=0)
        return self._start_z.mean(axis=0) if self.sampler is not None else np.zeros(self.target.dim)

    def _grid(self):
        """The log-density grid, computed once per region and pair of coordinates."""
        return self._grids.get(self.coords, self._through(), *self._region)

    # ------------------------------------------------------------- stepping
    @guarded("step")
    def step(self, n=1):
        """Advance every chain by ``n`` sweeps and redraw."""
        if self.sampler is None:
            raise RuntimeError("there is no sampler to step (the last reset failed; see above)")
        self.sampler.step(n)
        self._run = None
        self._replayed = None
        self._refresh()
        self.clear_status()

    def _on_tick(self, change):
        if self._syncing or change["new"] <= change["old"]:
            return
        self.step()

    @guarded("reset")
    def reset(self):
        """Put the chains back at their starts with a fresh shared stream (same seed)."""
        self._replayed = None
        self._restart(0)
        self._syncing = True
        try:
            self._play.value = 0
        finally:
            self._syncing = False

    def _restart(self, sweeps):
        """Chains back at their starts (fresh stream), then ``sweeps`` sweeps, then redraw."""
        self._new_sampler()
        if not self._built or self.sampler is None:
            return
        if len(self._paths.paths) != self.n_chains:
            self._draw_chains()
        try:
            if sweeps:
                self.sampler.step(sweeps)  # all or nothing per sweep: a failure keeps what was made
        finally:
            self._run = None
            self._refresh(full=True)

    def _replay_length(self):
        """Sweeps a knob change re-runs: as many as shown, at most ``trail`` and _REPLAY_MAX."""
        return min(self.n_sweeps, self.trail or _REPLAY_MAX, _REPLAY_MAX)

    @property
    def run(self):
        """The Run recorded since the last reset (draws (chain, draw, dim), u, ...)."""
        if self.sampler is None:
            return None
        if self._run is None:
            self._run = self.sampler.run
        return self._run

    @property
    def n_sweeps(self):
        return 0 if self.sampler is None else self.sampler.n_draws

    @property
    def path_points(self):
        run = self.run
        z = run.unconstrained
        if run.first_draw == 0:
            z = np.concatenate([self._start_z[:, None, :], z], axis=1)
        return z if self.trail == 0 else z[:, -(self.trail + 1):]

    @property
    def spread(self):
        """The chain spread now (``chain_spread`` of the chains' states, sampler's scale)."""
        if self.sampler is None:
            return float("nan")
        return float(chain_spread(self.sampler.state.position[:, None, :])[0])

    @property
    def distance(self):
        """Deprecated: the former name of ``spread``."""
        warn_renamed("distance", "spread", "attribute")
        return self.spread

    # -------------------------------------------------------------- observers
    @traitlets.observe("shift", "random_shift", "ordinary", "n_chains", "seed")
    def _on_knob(self, change):
        if not self._built:
            return
        self._sync_enabled()
        self._replay(change["name"])

    @guarded("replay")
    def _replay(self, knob):
        """Show a knob's effect at once: the shown sweeps again, from the starts, with it."""
        sweeps = self._replay_length()
        self._replayed = (knob, sweeps)
        self._restart(sweeps)
        self.clear_status()

    @traitlets.observe("coords")
    def _on_coords(self, change):
        if not self._built:
            return
        self._x_pick.value, self._y_pick.value = self.coords
        self._redo_coords()

    @guarded("redraw")
    def _redo_coords(self):
        self._set_region()
        self._density.update(self._grid())
        names = self._axis_names_all()
        self._paths.coords = tuple(self.coords)
        self._trace_x.coord, self._trace_y.coord = self.coords
        self._ax.set_xlabel(names[self.coords[0]])
        self._ax.set_ylabel(names[self.coords[1]])
        self._ax_tx.set_ylabel(names[self.coords[0]])
        self._ax_ty.set_ylabel(names[self.coords[1]])
        self._limits = {}
        self._refresh(full=True)

    @traitlets.observe("trail")
    def _on_trail(self, change):
        if self._built:
            self._refresh()

    # ----------------------------------------------------------------- redraw
    @guarded("redraw")
    def _refresh(self, full=False):
        if self.sampler is None:
            return
        run = self.run
        z = run.unconstrained
        first = run.first_draw
        self._paths.update(self.path_points)
        starts = self._start_z[:, list(self.coords)]
        self._starts_line.set_data(starts[:, 0], starts[:, 1])
        self._trace_x.update(z, first=first)
        self._trace_y.update(z, first=first)
        self._spread.update(z, first=first)
        spread = chain_spread(z)
        hit = np.flatnonzero(spread <= _SPREAD_FLOOR)
        if self.met_at is None and hit.size:
            self.met_at = int(first + hit[0])
        if self._update_limits(z, first, spread):
            full = True
        self._place_met_note()
        self._write_title()
        self._write_readout()
        self.redraw(full=full)

    def _update_limits(self, z, first, spread):
        """Set axis limits that change only now and then; True when any changed."""
        kept = z.shape[1]
        end = first + max(kept, 1)
        right = _TRACE_BLOCK * int(np.ceil(end / _TRACE_BLOCK))
        left = _TRACE_BLOCK * (first // _TRACE_BLOCK)
        lim = {"x": (left - 0.5, right + 0.5)}
        xlim, ylim = self._region
        if kept:
            pts = z[:, :, list(self.coords)].reshape(-1, 2)
            heads = z[:, -1, list(self.coords)]
            # grow the region (and its contours) if a chain walks out of it
            out = ((heads[:, 0] < xlim[0]) | (heads[:, 0] > xlim[1])
                   | (heads[:, 1] < ylim[0]) | (heads[:, 1] > ylim[1]))
            if out.any():
                (x0, x1), (y0, y1) = choose_limits(np.vstack([heads, [[xlim[0], ylim[0]],
                                                                   [xlim[1], ylim[1]]]]),
                                                   pad=0.1)
                self._region = ((x0, x1), (y0, y1))
                self._density.update(self._grid())
                xlim, ylim = self._region
            lo, hi = np.nanmin(pts, axis=0), np.nanmax(pts, axis=0)
            # trace ranges only grow (until a reset), so few ticks need a full redraw
            ox, oy = self._limits.get("tx", xlim), self._limits.get("ty", ylim)
            ty = (min(xlim[0], lo[0], ox[0]), max(xlim[1], hi[0], ox[1]))
            tyy = (min(ylim[0], lo[1], oy[0]), max(ylim[1], hi[1], oy[1]))
        else:
            ty, tyy = xlim, ylim
        lim["paths"] = (xlim, ylim)
        lim["tx"], lim["ty"] = ty, tyy
        finite = spread[np.isfinite(spread)]
        top = float(np.max(finite)) if finite.size else 1.0
        old_top = self._limits.get("spread", (None, 0.0))[1]
        # the spread's y range only ever grows (in factors of ten), so it rarely forces a full redraw
        top = max(old_top, 10.0 ** np.ceil(np.log10(max(top, 1e-3) * 1.5)))
        lim["spread"] = (_SPREAD_FLOOR / 10.0, top)
        if lim == self._limits:
            return False
        self._ax.set_xlim(*lim["paths"][0])
        self._ax.set_ylim(*lim["paths"][1])
        self._ax_spread.set_xlim(*lim["x"])
        self._ax_tx.set_ylim(*lim["tx"])
        self._ax_ty.set_ylim(*lim["ty"])
        self._ax_spread.set_ylim(*lim["spread"])
        self._limits = lim
        return True

    def _place_met_note(self):
        note = self._met_note
        if self.met_at is None or self.met_at < self.run.first_draw:
            note.set_text("")
            return
        x = self.met_at
        lo, hi = self._ax_spread.get_xlim()
        right = (x - lo) > 0.6 * (hi - lo)
        note.xy = (x, _SPREAD_FLOOR)
        note.set_position((-6, 8) if right else (6, 8))
        note.set_horizontalalignment("right" if right else "left")
        note.set_text(f"all chains meet (draw {self.met_at})")

    _KNOB_WORDS = {"shift": "the shift", "random_shift": "random shift",
                   "ordinary": "ordinary Gibbs", "n_chains": "the number of chains",
                   "seed": "the seed"}

    def _mode(self):
        if self.ordinary:
            return "ordinary Gibbs"
        if self.random_shift:
            return "random shift"
        return f"shift c = {number(self.shift, 3)}"

    def _write_title(self):
        text = (f"{plural(self.n_chains, 'chain')}, {plural(self.n_sweeps, 'sweep')} from their "
                f"starts, {self._mode()}")
        self._title.set_text(text + (" (replayed at once)" if self._replayed else ""))

    def _write_readout(self):
        if self.ordinary:
            mode = "none: ordinary Gibbs (fresh uniforms, shared by all chains)"
        elif self.random_shift:
            mode = "random (a fresh c each sweep, shared by all chains)"
        else:
            mode = f"c = {number(self.shift)}"
        parts = [plural(self.n_sweeps, "sweep"), f"shift {mode}",
                 f"chain spread {number(self.spread, 3)}"]
        if self.met_at is not None:
            parts.append(f"<b>all chains met at draw {self.met_at}</b>")
        if self._replayed is not None:
            knob, sweeps = self._replayed
            parts.append(f"{html.escape(self._KNOB_WORDS[knob])} changed: the chains were "
                         f"replayed from their starts for {plural(sweeps, 'sweep')} (a change "
                         f"replays at most the trail, {min(self.trail or _REPLAY_MAX, _REPLAY_MAX)})")
        note = ""
        if not self.ordinary and not self.random_shift and self.shift == 0.0:
            note = ("<br><b style='color:#a33'>shift 0:</b> each chain is a deterministic map of "
                    "(x, u) and stays on one level set of the extended space; it retraces a "
                    "closed pattern and does not explore.")
        caution = f"<br><span style='font-size:85%;color:#555'>{html.escape(CAUTION)}</span>"
        self._readout.value = ("<span style='font-family:monospace'>" + " | ".join(parts)
                               + "</span>" + note + caution)

    # ------------------------------------------------------------- settings
    def _extra_settings(self):
        return {"capacity": self.capacity, "grid_size": self.kernel.grid_size}

    EXTRA_SETTINGS = ("capacity", "grid_size")

    def apply_settings(self, settings):
        """Set knobs from ``settings``; ``capacity`` and ``grid_size`` must match this view's."""
        s = self.checked_settings(settings)
        for k, have in (("capacity", self.capacity), ("grid_size", self.kernel.grid_size)):
            if k in s and s.pop(k) != have:
                raise ValueError(f"`{k}` cannot change on a built view (have {have}); use "
                                 "ShiftGibbsView.from_settings")
        return super().apply_settings(s)

    @classmethod
    def from_settings(cls, target, settings, conditionals=None):
        """Build a view on ``target`` with saved ``settings`` (from ``view.settings``).

        ``conditionals`` cannot be stored in settings: pass them again.
        """
        s = cls.checked_settings(settings)
        fixed = {k: s[k] for k in ("capacity", "grid_size") if k in s}
        view = cls(target, conditionals, **fixed)
        return view.apply_settings(settings)
