"""DoublingView: one no-U-turn transition's doubling tree over the log-density, doubling by doubling."""

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import MaxNLocator

from ..core.nuts import MAX_DEPTH_LIMIT, NUTS
from ..core.streams import Streams
from ..draw import legend
from ..draw.tree import draw_tree, draw_tree_energy, tree_rows
from ._base import check_range, guarded, number, plural
from ._controls import KnobControl
from ._phase_space import PhaseSpaceView, run_arguments, run_parts

__all__ = ["DoublingView"]

_DEPTH_SLIDER_MAX = 12


class DoublingView(PhaseSpaceView):
    """One no-U-turn (NUTS) transition's doubling tree over the log-density, live.

    Left: contours of the log-density (a 2-D slice through the start for an
    n-D target) with the tree: the trajectory the next state is drawn from,
    the latest doubling shown thicker, the abandoned subtree dotted, every
    state as a candidate whose marker area grows with its chance of being
    selected, the selected state (filled circle), the stretch where the U-turn
    criterion fired with the two end momenta it compared (orange diamonds and
    arrows), and a divergent subtree's dashed segment and ``X``. Right: the
    energy error of every leapfrog state against its place in time (steps from
    the start, negative backward) and the divergence limit (max energy error).

    The doubling slider and Play show the first k doublings in the order the
    random directions chose them. Click the left panel to move the start;
    press on the start and drag to set the initial momentum. Everything is on
    the sampler's (unconstrained) scale. The tree's random directions and
    choices and the fresh momentum come from ``seed`` exactly as in
    ``pg.NUTS``: a one-chain ``pg.Sampler(target, pg.NUTS(...), seed=seed)``
    started at ``start`` makes this transition.

    Parameters
    ----------
    target : Target
    start : array_like, shape (dim,), optional
        Start (sampler's scale). Default: a draw from a short pilot run.
    coords : pair of int or str
    step_size, max_depth, seed : initial knob values
    inverse_mass : sequence of float, optional
        Diagonal of the inverse mass matrix (the Metric's ``inverse_mass``); ``mass_scale=``
        (its reciprocal, the former name) is read with a DeprecationWarning.
    xlim, ylim : (float, float), optional
    max_energy_error : float
        Largest ``|energy error|`` before the tree counts as divergent (1000, as in ``pg.NUTS``).

    Attributes
    ----------
    tree : DoublingTree
        The tree last drawn (a batch of one: ``NUTS.build_tree``'s output).
    info : dict
        Its records (``tree_depth``, ``n_leapfrog``, ``depth_limit_hit``, ``turned``, ...).
    figure : matplotlib.figure.Figure

    Examples
    --------
    >>> import phaseglass as pg
    >>> view = pg.DoublingView(pg.demos.correlated_gaussian(), step_size=0.2, seed=1)
    >>> view.doublings == int(view.info["tree_depth"][0])   # the whole tree is shown
    True
    """

    max_depth = traitlets.Int(
        10, help="Most doublings a tree may make (at most 2**max_depth - 1 leapfrog steps)."
    ).tag(setting=True)
    seed = traitlets.Int(0, help="Seed of the momentum, the doubling directions and the "
                                 "multinomial choices.").tag(setting=True)
    doublings = traitlets.Int(0, help="Doublings shown, in the order the tree made them (0: the "
                                      "start alone); a new tree shows all of them.")

    def __init__(self, target, *, start=None, coords=(0, 1), step_size=0.1, max_depth=10, seed=0,
                 inverse_mass=None, xlim=None, ylim=None, max_energy_error=1000.0,
                 mass_scale=None):
        self._fixed = None        # the uniforms of a run's transition (from_run), until a new seed
        self._fixed_note = ""
        self._quiet = False
        self._replaying = False
        self.tree = None
        self.info = None
        super().__init__(target, start=start, coords=coords, seed=seed, xlim=xlim, ylim=ylim,
                         inverse_mass=inverse_mass, mass_scale=mass_scale,
                         max_energy_error=max_energy_error, figsize=(7.6, 4.5),
                         knobs=dict(step_size=step_size, max_depth=max_depth))

    # ------------------------------------------------------------ validation
    _RANGES = {"step_size": (0.0, None, "(]"), "max_depth": (1, MAX_DEPTH_LIMIT, "[]"),
               "doublings": (0, MAX_DEPTH_LIMIT, "[]"), "seed": (0, None, "[]")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        self._shared_controls()
        self._depth_knob = KnobControl(self, "max_depth", low=1, high=_DEPTH_SLIDER_MAX,
                                       integer=True, label="max depth", css_class="pg-max-depth")
        self._doubling_knob = KnobControl(self, "doublings", low=0, high=self.max_depth,
                                          integer=True, label="doublings shown",
                                          css_class="pg-doubling")
        self._play = widgets.Play(value=0, min=0, max=self.max_depth, step=1, interval=700,
                                  show_repeat=False, layout=widgets.Layout(width="auto"))
        self._play.tooltip = "Play the doublings one by one, in the order the tree made them"
        self._play.add_class("pg-doubling-play")
        traitlets.link((self._play, "value"), (self, "doublings"))
        if self.target.dim > 2:
            self._coordinate_pickers(self.target.names)
        self._lay_out([[self._step_knob, self._depth_knob],
                       [self._play, self._doubling_knob, self._seed_box]])

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        self._ax, self._ax_err = fig.subplots(1, 2, width_ratios=[1.25, 1.0])
        from ..draw import draw_log_density

        self._density = draw_log_density(self._ax, self._grid(), names=self._axis_names())
        tree, info = self._build()
        self.tree, self.info = tree, info
        self._tree_draw = draw_tree(self._ax, tree, coords=self.coords, metric=self._metric(),
                                    names=self.target.names)
        self._tree_draw.autoscale = False
        self._path = self._tree_draw  # the name PhaseSpaceView's mouse handlers use
        self._energy = draw_tree_energy(self._ax_err, tree)
        for ax in (self._ax, self._ax_err):
            ax.xaxis.set_major_locator(MaxNLocator(5))
        self._ax.yaxis.set_major_locator(MaxNLocator(6))
        d, e = self._tree_draw, self._energy
        handles = [self._density.contours, d.path, d.newest, d.abandoned, d.candidates,
                   d.turn_span, d.turn_ends, d.start, d.selected, d.momentum, d.divergent,
                   e.thresholds[0]]
        labels = ["log-density contours", "trajectory (merged doublings)", "latest doubling",
                  "abandoned subtree", "candidates (area: chance of selection)",
                  "U-turn: stretch checked", "U-turn: momenta compared", "start",
                  "selected (next state)", "initial momentum", "divergent subtree",
                  f"max energy error \u00b1{number(self.max_energy_error)}"]
        legend(fig, loc="outside lower center", ncols=3, handles=handles, labels=labels,
               fontsize=7)
        self.set_dynamic([d.path, d.newest, d.abandoned, d.candidates, d.divergent, d.turn_span,
                          d.turn_ends, *d.turn_momenta, d.start, d.selected, d.momentum,
                          e.error, e.abandoned, e.divergence, e.title])
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        self._connect_mouse()

    # ----------------------------------------------------------- computation
    def kernel(self):
        """The ``pg.NUTS`` kernel this view's knobs describe."""
        return NUTS(self.step_size, self.max_depth, metric=self._metric(),
                    max_energy_error=self.max_energy_error)

    def _fresh_momentum(self):
        """The momentum ``pg.NUTS`` draws first from a one-chain stream of ``seed``."""
        z = Streams(self.seed, 1).normal(self.target.dim)
        return self._metric().momentum_from_normal(z)[0]

    def _build(self):
        kernel = self.kernel()
        with self.target.uncounted():
            if self._fixed is not None and self._fixed.size == 3 * self.max_depth:
                return kernel._tree_with(self.target, self.start, self.momentum, self._fixed)
            return kernel.build_tree(self.target, self.start, self.momentum, seed=self.seed)

    @traitlets.observe("seed")
    def _on_seed(self, change):
        self._fixed = None
        self._fixed_note = ""
        if self.tree is not None and not self._applying:
            self.momentum = self._fresh_momentum()

    @traitlets.observe("step_size", "max_depth", "start", "momentum", "coords", "xlim", "ylim",
                       "inverse_mass")
    def _on_knob(self, change):
        if not self._replaying:
            self._fixed_note = ""  # no longer the run's transition as it was sampled
        if hasattr(self, "_energy"):
            self._recompute()

    @traitlets.observe("doublings")
    def _on_doublings(self, change):
        if hasattr(self, "_energy") and not self._quiet:
            self._show()

    @guarded("redraw")
    def _recompute(self):
        new_region = self._update_contours()
        tree, info = self._build()
        self.tree, self.info = tree, info
        depth = int(info["tree_depth"][0])
        self._quiet = True
        try:
            self._play.playing = False
            self._play.max = depth
            self.doublings = depth
            self._doubling_knob.set_range(0, max(depth, 1))
        finally:
            self._quiet = False
        self._show_region()
        self._show(force_full=new_region)

    @guarded("redraw")
    def _show(self, force_full=False):
        tree = self.tree
        upto = min(self.doublings, int(self.info["tree_depth"][0]))
        self._tree_draw.update(tree, upto=upto)
        self._energy.update(tree, upto=upto)
        static = (self._grids.key, tuple(self.coords), self.xlim, self.ylim,
                  tuple(self._ax_err.get_xlim()))
        full = force_full or static != getattr(self, "_static_key", None)
        self._static_key = static
        self._readout.value = self._readout_html(upto)
        self.clear_status()
        if self._fixed_note:
            self.status = self._fixed_note
        self.redraw(full=full)

    def _readout_html(self, upto):
        t = tree_rows(self.tree)
        info = self.info
        depth = t["depth"]
        n_leap = int(info["n_leapfrog"][0])
        arrows = " ".join("\u2192" if d > 0 else "\u2190" for d in t["directions"])
        if bool(info["divergent"][0]):
            why = ("<b style='color:#a33'>divergent</b> subtree (|&Delta;H| &gt; "
                   f"{number(self.max_energy_error)}): abandoned, the tree stopped")
        elif bool(info["turned"][0]):
            where = "the whole trajectory" if t["turn_whole"] else "a subtree"
            why = f"U-turn in {where}"
        elif bool(info["depth_limit_hit"][0]):
            why = (f"<b style='color:#a33'>depth limit</b> ({self.max_depth} doublings) before "
                   "any U-turn")
        else:
            why = "stopped"
        s, r = t["start"], t["selected"]
        moved = r - s
        where = ("stayed at the start" if moved == 0 else
                 f"moved {plural(abs(moved), 'step')} {'forward' if moved > 0 else 'backward'}")
        shown = "" if upto >= depth else f" | showing {upto} of {depth} doublings"
        lines = [f"step size {number(self.step_size)} | depth {depth} of {self.max_depth} "
                 f"({arrows}) | {plural(n_leap, 'leapfrog step')} | {why}{shown}",
                 f"{where} (chance {number(t['selection_prob'][r], 3)}) | acceptance statistic "
                 f"{number(float(info['accept_prob'][0]), 3)}"]
        return ("<span style='font-family:monospace'>" + "<br>".join(lines) + "</span>")

    # ------------------------------------------------------------- from a run
    @classmethod
    def from_run(cls, run, *, draw=-1, chain=0, **kwargs):
        """Open on one transition of a Run: the one that produced ``run.draws[chain, draw]``.

        The start is the draw before it, and the step size, max depth and mass
        matrix are the run's (a dense mass matrix: its diagonal). For a NUTS run
        the transition's momentum and random directions are replayed from the
        run's seed, so the tree shown is the one the sampler built (the status
        line says when that is not possible); change ``seed`` for other trees
        from the same start.

        Parameters
        ----------
        run : Run
            From ``pg.sample``; needs its target and a kernel with a step size.
        draw : int
            Index of the draw (>= 1, or negative from the end): transition 0's start is
            not kept in the run.
        chain : int
        **kwargs
            Any other argument of DoublingView; they win over the run's values.
        """
        target, kernel = run_parts(run)
        x = np.asarray(run.unconstrained)
        n_chains, n_draws = x.shape[0], x.shape[1]
        if not isinstance(chain, (int, np.integer)) or not -n_chains <= chain < n_chains:
            raise ValueError(f"`chain` must be an integer in range({n_chains}), got {chain!r}")
        if not isinstance(draw, (int, np.integer)) or not -n_draws <= draw < n_draws:
            raise ValueError(f"`draw` must be an integer in range({n_draws}), got {draw!r}")
        chain, draw = int(chain) % n_chains, int(draw) % n_draws
        if draw == 0:
            raise ValueError("`draw` must be >= 1: the start of the run's first kept transition "
                             "is not recorded (pick draw=1 or later)")
        knobs = {}
        if isinstance(kernel, NUTS):
            knobs["max_depth"] = int(kernel.max_depth)
            knobs["max_energy_error"] = float(kernel.max_energy_error)
        args, note = run_arguments(run, kernel, x[chain, draw - 1], **{**knobs, **kwargs})
        view = cls(target, **args)
        replay = _replay(run, kernel, chain, draw) if isinstance(kernel, NUTS) else None
        same = (replay is not None and "momentum" not in kwargs and "seed" not in kwargs
                and view.max_depth == kernel.max_depth and view.step_size == kernel.step_size)
        if same:
            momentum, uniforms = replay
            view._fixed = uniforms
            view._replaying = True
            try:
                view.momentum = momentum
            finally:
                view._replaying = False
            hit = np.allclose(view.tree.positions[0, view.tree.selected[0]], x[chain, draw],
                              rtol=1e-9, atol=1e-12)
            view._fixed_note = (f"the run's transition to draw {draw} of chain {chain}" if hit
                                else "the run's transition could not be replayed exactly; this "
                                     "tree starts from its start with its momentum")
        else:
            why = ("the run did not use NUTS" if not isinstance(kernel, NUTS) else
                   "the knobs given differ from the run's")
            view._fixed_note = f"a fresh tree from the start of draw {draw} of chain {chain} ({why})"
        if note:
            view._fixed_note += "; " + note
        view.status = view._fixed_note
        return view


def _replay(run, kernel, chain, draw):
    """(momentum, uniforms) of transition ``draw`` of ``chain`` from the run's seed, or None."""
    seed = getattr(run, "seed", None)
    if seed is None or not isinstance(seed, (int, np.integer)):
        return None
    n = int(run.n_warmup) + int(run.first_draw) + int(draw)
    dim = run.target.dim
    streams = Streams(int(seed), run.n_chains, shared=kernel.shared_stream)
    for _ in range(n):  # every NUTS transition takes dim normals and 3 * max_depth uniforms
        streams.normal(dim)
        streams.uniform(3 * kernel.max_depth)
    z = streams.normal(dim)[chain]
    u = streams.uniform(3 * kernel.max_depth)[chain]
    return kernel.metric.momentum_from_normal(z[None])[0], u
