"""ChainView: run a kernel transition by transition and watch what each choice buys."""

import copy
import html
from dataclasses import dataclass

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import MaxNLocator

from ..core._validate import MAX_STEPS, warn_renamed
from ..core.efficiency import MIN_ESS_DRAWS, ess_per_gradient, evaluation_cost
from ..core.kernels import HMC, PartialRefreshHMC, RandomWalk
from ..core.leapfrog import one_chain
from ..core.metric import Metric
from ..core.nuts import MAX_DEPTH_LIMIT, NUTS
from ..core.registry import KNOB_LABELS, kernel_kind
from ..core.run import CAUTION
from ..core.sampling import Sampler
from ..core.slices import resolve_coords
from ..core.uniforms import DriftingUniform, FreshUniform
from ..draw import draw_log_density, draw_pair, draw_traces, draw_trajectory, draw_uniform_sequence
from ..draw.chains import draw_next_transition
from ..draw.style import key_handles, legend
from ..draw.uniforms import draw_next_decision
from ._base import View, check_range, check_target, guarded, number, plural
from ._controls import KnobControl
from ._shared import GridCache, pilot, step_size_range

__all__ = ["ChainView", "KINDS", "NextTransition", "peek_next_transition", "describe_kernel"]

#: Kernel kinds the view offers (short names of ``core.registry``; titles come from there too).
KINDS = ("hmc", "partial", "walk", "nuts")

_MAX_STEPS_SLIDER = 200
_WALK_SCALE = 2.38  # optimal random-walk scale is about 2.38 sd / sqrt(dim) (Roberts, Gelman & Gilks 1997)
_METRIC_WORDS = {"identity": "identity mass matrix", "diagonal": "diagonal mass matrix",
                 "dense": "dense mass matrix"}


# ------------------------------------------------------------------ preview

@dataclass(frozen=True, repr=False)
class NextTransition:
    """What chain 0's next transition would do with the current knobs, before it is taken.

    Attributes
    ----------
    draw : int
        Draw index the transition would get (``sampler.n_draws``).
    start : ndarray, shape (dim,)
        Chain 0's current position (sampler's scale).
    proposal : ndarray, shape (dim,)
        The point proposed: the trajectory's last step before any divergence,
        or the random walk's proposal.
    trajectory : Trajectory or None
        Chain 0's leapfrog trajectory (None for a random walk).
    accepted, divergent : bool
    accept_prob, energy_error, u, step_size : float
        ``energy_error`` is the change of H (minus the log ratio for a random
        walk); ``step_size`` is the one used (after jitter), or the walk's scale.
    """

    draw: int
    start: np.ndarray
    proposal: np.ndarray
    trajectory: object
    accepted: bool
    divergent: bool
    accept_prob: float
    energy_error: float
    u: float
    step_size: float

    def __repr__(self):
        verdict = "accepted" if self.accepted else ("divergent" if self.divergent else "rejected")
        return (f"NextTransition(draw {self.draw}: {verdict}, accept_prob={number(self.accept_prob)}, "
                f"energy_error={number(self.energy_error)}, u={number(self.u)})")


def peek_next_transition(sampler):
    """Chain 0's next transition, computed on copies: nothing advances, nothing is consumed.

    The kernel's own transition runs on a deep copy of the sampler's state
    and random streams, so the result is exactly what the next
    ``sampler.step()`` will do with the same knobs (same momentum, same
    jitter, same ``u``), and the real run's random numbers are untouched. The
    target's evaluation counts are restored: a preview is not the user's work.

    Parameters
    ----------
    sampler : Sampler

    Returns
    -------
    NextTransition
    """
    target, kernel = sampler.target, sampler.kernel
    state = sampler.state.copy()
    streams = copy.deepcopy(sampler.streams)
    with target.uncounted(), np.errstate(all="ignore"):
        proposal = None
        if isinstance(kernel, RandomWalk):
            # the walk keeps no trajectory: its first draw is the step, read from a second copy
            look = copy.deepcopy(streams)
            proposal = state.position[0] + kernel.scale * kernel.metric.spread_from_normal(
                look.normal(target.dim))[0]
        start = state.position[0].copy()
        info = kernel.transition(target, state, streams, record=True)
    traj = info.get("trajectory")
    if traj is not None:
        traj = one_chain(traj, 0)
        if isinstance(kernel, NUTS):  # the state the tree selects (its start when nothing moved)
            proposal = state.position[0].copy()
        else:
            last = traj.divergence_step - 1 if traj.divergent else traj.n_steps
            proposal = traj.positions[last].copy()
    return NextTransition(
        draw=sampler.n_draws, start=start, proposal=np.asarray(proposal, dtype=float),
        trajectory=traj, accepted=bool(info["accepted"][0]), divergent=bool(info["divergent"][0]),
        accept_prob=float(info["accept_prob"][0]), energy_error=float(info["energy_error"][0]),
        u=float(info["u"][0]), step_size=float(info["step_size"][0]))


def describe_kernel(kernel):
    """The kernel in words, e.g. ``"HMC with partial momentum refresh: step size 0.04, 1 leapfrog step, ..."``."""
    name = kernel_kind(kernel).title
    u = getattr(kernel, "uniform", None)
    if isinstance(u, DriftingUniform):
        extra = f", jitter {number(u.jitter)}" if u.jitter else ""
        uniform = [f"drifting u (drift {number(u.drift)}{extra})"]
    else:
        uniform = [] if u is None else ["fresh u"]
    metric = [_METRIC_WORDS.get(kernel.metric.kind, f"{kernel.metric.kind} mass matrix")]
    if isinstance(kernel, RandomWalk):
        parts = [f"{KNOB_LABELS['scale']} {number(kernel.scale)}"]
    elif isinstance(kernel, NUTS):
        parts = [f"step size {number(kernel.step_size)}",
                 f"{KNOB_LABELS['max_depth']} {kernel.max_depth}"]
    else:
        parts = [f"step size {number(kernel.step_size)}", plural(kernel.n_steps, "leapfrog step")]
        if isinstance(kernel, PartialRefreshHMC):
            parts.append(f"persistence {number(kernel.persistence)}")
        elif getattr(kernel, "jitter", 0):
            parts[0] += f" (jittered by \u00b1{number(100 * kernel.jitter)} %)"
    return f"{name}: {', '.join(parts + uniform + metric)}"


# --------------------------------------------------------------------- view

class ChainView(View):
    """Run a kernel one transition at a time: draws, latest trajectory, trace, u sequence.

    Left: the draws over the log-density (sampler's scale; a 2-D slice through
    the first chain's start for an n-D target), divergent transitions marked,
    and the latest trajectory of chain 0. Right: a trace per chain and chain
    0's accept/reject variable ``u`` per draw (rejections hollow) with
    the acceptance probability. A readout gives the running acceptance rate,
    divergences, gradient evaluations and ESS per gradient so far (with the
    caution that diagnostics never prove convergence).

    Knobs ``step_size``, ``n_steps``, ``persistence`` and ``drift`` act on the
    next transition, and show it at once: chain 0's next transition from its
    current state is drawn as a preview (dashed path, diamond at the proposal,
    a diamond at the ``u`` it would draw) and ``preview`` holds its numbers.
    The preview runs on copies of the chains' state and random streams, so it
    is exactly what the next step does and it never changes the run; fresh
    chains (a new view, Reset, another kernel) show it too. Changing
    ``kernel_kind`` or ``uniform`` starts a new record from the chains'
    current positions; changing ``seed`` or ``n_chains`` (or Reset) starts over
    from the initial points.

    Parameters
    ----------
    target : Target
    kernel : HMC, PartialRefreshHMC, RandomWalk or NUTS, optional
        Its knobs seed the view's; otherwise built from ``kernel_kind``.
    kernel_kind : {"hmc", "partial", "walk", "nuts"}
        Short name of the kernel kind (``core.registry``). ``kernel_name=`` is
        the deprecated former name (one more release, with a DeprecationWarning).
    uniform : {"fresh", "drifting"}
        Not used by ``"nuts"`` (it selects among the tree's states without a uniform
        accept/reject decision).
    step_size, n_steps, persistence, drift : float, int, float, float
    scale : float
        The random walk's proposal scale (``"walk"`` only).
    max_depth : int
        NUTS's most doublings per transition (``"nuts"`` only).
    n_chains : int
    seed : int
    coords : pair of int or str
    capacity : int
        Draws kept (a ring buffer), so live play runs in bounded memory.
    steps_per_tick : int
        Transitions per Play tick.
    xlim, ylim : (float, float), optional
        Region of the left panel; default from the target's (shared) pilot run.
    initial : array_like, optional
        Starts on the user's scale (see ``Sampler``).

    Attributes
    ----------
    sampler : Sampler
    run : Run
        Everything recorded so far (draws (chain, draw, dim), accepted, u, ...).
    preview : NextTransition or None
        The previewed next transition of chain 0 (None after a step, until a knob moves).
    """

    kernel_kind = traitlets.Enum(KINDS, "hmc", help="Kernel kind (short name in core.registry).").tag(
        setting=True)
    uniform = traitlets.Enum(("fresh", "drifting"), "fresh",
                             help="Source of the accept/reject uniform.").tag(setting=True)
    step_size = traitlets.Float(0.2, help="Leapfrog step size.").tag(setting=True)
    n_steps = traitlets.Int(10, help="Leapfrog steps per transition.").tag(setting=True)
    scale = traitlets.Float(0.5, help="The random walk's proposal scale.").tag(setting=True)
    max_depth = traitlets.Int(10, help="NUTS: most doublings per transition.").tag(setting=True)
    persistence = traitlets.Float(0.9, help="Momentum persistence of partial refresh.").tag(setting=True)
    drift = traitlets.Float(0.03, help="Drift per transition of the drifting uniform.").tag(setting=True)
    n_chains = traitlets.Int(2, help="Number of chains.").tag(setting=True)
    seed = traitlets.Int(0, help="Seed of every random stream.").tag(setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    steps_per_tick = traitlets.Int(1, help="Transitions per Play tick.").tag(setting=True)

    RENAMED_SETTINGS = {"kernel_name": "kernel_kind"}

    def __init__(self, target, kernel=None, *, kernel_kind="hmc", uniform="fresh", step_size=0.2,
                 n_steps=10, persistence=0.9, scale=0.5, max_depth=10, drift=0.03, n_chains=2,
                 seed=0, coords=(0, 1), capacity=2000, steps_per_tick=1, xlim=None, ylim=None,
                 initial=None, kernel_name=None):
        check_target(target, min_dim=2)
        if kernel_name is not None:
            warn_renamed("kernel_name", "kernel_kind")
            kernel_kind = kernel_name
        self.target = target
        self.capacity = int(capacity)
        super().__init__(figsize=(7.6, 4.9))
        self._ready = False
        self.preview = None
        coords = resolve_coords(coords, target.names, target.dim)
        # a kernel passed in (e.g. tuned by pg.sample) keeps its mass matrix for every kernel built here
        self._metric = None
        self._given_step = {}  # a passed (tuned) kernel's own step centres its slider range
        self._given_extras = {}  # ... and its jitter / max_energy_error are kept
        if kernel is not None:
            self._metric = kernel.metric
            self._given_extras = _extras_of(kernel)
            kernel_kind, uniform, knobs = _knobs_of(kernel)
            self._given_step[kernel_kind] = knobs[kernel.tuned_knob]
            step_size = knobs.get("step_size", step_size)
            n_steps = knobs.get("n_steps", n_steps)
            persistence = knobs.get("persistence", persistence)
            scale = knobs.get("scale", scale)
            max_depth = knobs.get("max_depth", max_depth)
            drift = knobs.get("drift", drift)
        self._initial = initial
        with self.hold_trait_notifications():
            self.kernel_kind = kernel_kind
            self.uniform = uniform
            self.step_size = step_size
            self.n_steps = n_steps
            self.scale = scale
            self.max_depth = max_depth
            self.persistence = persistence
            self.drift = drift
            self.n_chains = n_chains
            self.seed = seed
            self.coords = coords
            self.steps_per_tick = steps_per_tick
        self._new_sampler(keep_positions=False)
        # the target's shared pilot run gives the region and the step-size slider's range
        self._pilot = pilot(target)
        start = self.sampler.state.position[0]
        region = self._pilot.region(coords, start=start)
        self.xlim = tuple(xlim) if xlim is not None else region[0]
        self.ylim = tuple(ylim) if ylim is not None else region[1]
        self._grids = GridCache(target, n=80)
        self._build_controls()
        self._build_figure()
        self._ready = True
        self._refresh()
        if not self._pilot.ok:
            err = self._pilot.error
            self.status = (f"the pilot run failed ({type(err).__name__}: {err}); the region and "
                           "slider ranges are guesses around chain 0's start")

    # ------------------------------------------------------------ validation
    _RANGES = {"step_size": (0.0, None, "(]"), "n_steps": (1, MAX_STEPS, "[]"),
               "scale": (0.0, None, "(]"), "max_depth": (1, MAX_DEPTH_LIMIT, "[]"),
               "n_chains": (1, None, "[]"), "steps_per_tick": (1, None, "[]"),
               "persistence": (0.0, 1.0, "[)"), "drift": (0.0, 2.0, "()")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    # ---------------------------------------------------------------- kernel
    @property
    def kernel_name(self):
        """Deprecated: the former name of ``kernel_kind``."""
        warn_renamed("kernel_name", "kernel_kind", "attribute")
        return self.kernel_kind

    @kernel_name.setter
    def kernel_name(self, value):
        warn_renamed("kernel_name", "kernel_kind", "attribute")
        self.kernel_kind = value

    def _make_kernel(self):
        uniform = DriftingUniform(self.drift) if self.uniform == "drifting" else FreshUniform()
        metric = self._metric
        extras = self._given_extras.get(self.kernel_kind, {})
        kind = self.kernel_kind
        if kind == "hmc":
            return HMC(self.step_size, self.n_steps, uniform=uniform, metric=metric, **extras)
        if kind == "partial":
            return PartialRefreshHMC(self.step_size, self.n_steps, self.persistence, uniform=uniform,
                                     metric=metric, **extras)
        if kind == "nuts":
            return NUTS(self.step_size, self.max_depth, metric=metric, **extras)
        return RandomWalk(self.scale, uniform=uniform, metric=metric)

    @property
    def kernel(self):
        """The kernel being stepped (its knobs follow the view's traits)."""
        return self.sampler.kernel

    def _new_sampler(self, keep_positions):
        initial = self._initial
        if keep_positions and getattr(self, "sampler", None) is not None:
            initial = self.target.to_user(self.sampler.state.position)
            if initial.shape[0] != self.n_chains:
                initial = None
        self.sampler = Sampler(self.target, self._make_kernel(), initial, n_chains=self.n_chains,
                               seed=self.seed, capacity=self.capacity)
        self._last_accepted = None
        self.preview = self._peek()  # fresh chains: show where chain 0 would go first

    def _peek(self):
        """The next transition of chain 0, or None (reported in the status line) if it fails."""
        try:
            return peek_next_transition(self.sampler)
        except Exception as exc:  # user code can raise anything: the view keeps working
            self.report_error("preview", exc)
            return None

    @property
    def run(self):
        """A Run of everything recorded since the last reset."""
        return self.sampler.run

    # -------------------------------------------------------------- controls
    def _step_range(self):
        """Step-size slider range from the pilot run (or a passed kernel's step size)."""
        if self.kernel_kind in self._given_step and self.kernel_kind != "walk":
            return step_size_range(self._given_step[self.kernel_kind])
        return step_size_range(self._pilot.step_size)

    def _scale_range(self):
        """Proposal-scale slider range: about 2.38 sd / sqrt(dim) from the pilot run's sd."""
        if "walk" in self._given_step:
            return step_size_range(self._given_step["walk"])
        sd = self._pilot.sd[np.isfinite(self._pilot.sd) & (self._pilot.sd > 0)]
        typical = float(np.exp(np.mean(np.log(sd)))) if sd.size else 1.0
        return step_size_range(_WALK_SCALE * typical / np.sqrt(self.target.dim))

    def _build_controls(self):
        self._kernel_pick = widgets.Dropdown(
            options=[(kernel_kind(k).title, k) for k in KINDS], value=self.kernel_kind,
            layout=widgets.Layout(width="300px"))
        self._kernel_pick.add_class("pg-kernel")
        self._uniform_pick = widgets.ToggleButtons(options=[("fresh u", "fresh"),
                                                            ("drifting u", "drifting")],
                                                   value=self.uniform,
                                                   style={"button_width": "96px"})
        self._uniform_pick.add_class("pg-uniform")
        low, high = self._step_range()
        self._step_knob = KnobControl(self, "step_size", low=low, high=high, log=True,
                                      label=KNOB_LABELS["step_size"], css_class="pg-step-size")
        low, high = self._scale_range()
        self._scale_knob = KnobControl(self, "scale", low=low, high=high, log=True,
                                       label=KNOB_LABELS["scale"], css_class="pg-scale")
        self._steps_knob = KnobControl(self, "n_steps", low=1, high=_MAX_STEPS_SLIDER, integer=True,
                                       label=KNOB_LABELS["n_steps"], css_class="pg-n-steps")
        self._depth_knob = KnobControl(self, "max_depth", low=1, high=MAX_DEPTH_LIMIT, integer=True,
                                       label=KNOB_LABELS["max_depth"], css_class="pg-max-depth")
        self._persist_knob = KnobControl(self, "persistence", low=0.0, high=0.99,
                                         label="persistence", css_class="pg-persistence")
        self._drift_knob = KnobControl(self, "drift", low=1e-3, high=0.5, log=True, label="drift",
                                       css_class="pg-drift")
        self._play = widgets.Play(value=0, min=0, max=10**9, step=1, interval=150, show_repeat=False)
        self._play.add_class("pg-play")
        self._step_button = widgets.Button(description="step", icon="step-forward")
        self._step_button.add_class("pg-step")
        self._reset_button = widgets.Button(description="reset", icon="undo")
        self._reset_button.add_class("pg-reset")
        self._seed_box = widgets.BoundedIntText(min=0, max=2**31 - 1, description="seed",
                                                layout=widgets.Layout(width="160px"))
        for control, trait in ((self._kernel_pick, "kernel_kind"), (self._uniform_pick, "uniform"),
                               (self._seed_box, "seed")):
            traitlets.link((self, trait), (control, "value"))
        self._play.observe(self._on_tick, "value")
        self._step_button.on_click(lambda _: self.step(self.steps_per_tick))
        self._reset_button.on_click(lambda _: self.reset())
        self._readout = widgets.HTML()
        self._readout.add_class("pg-chain-readout")
        self._sync_controls()
        wrap = widgets.Layout(flex_flow="row wrap", align_items="center")
        self.children = [
            widgets.HBox([widgets.Label("kernel"), self._kernel_pick, self._uniform_pick], layout=wrap),
            widgets.HBox([self._step_knob, self._scale_knob, self._steps_knob, self._depth_knob,
                          self._persist_knob, self._drift_knob], layout=wrap),
            widgets.HBox([self._play, self._step_button, self._reset_button, self._seed_box],
                         layout=wrap),
            self.figure.canvas, self._readout, self._status_html,
        ]

    def _sync_controls(self):
        """Show the knobs of this kernel kind (the others are hidden); ``pg-primary`` on the first."""
        kind = self.kernel_kind
        walk = kind == "walk"
        shown = {self._step_knob: not walk, self._scale_knob: walk,
                 self._steps_knob: kind in ("hmc", "partial"), self._depth_knob: kind == "nuts",
                 self._persist_knob: kind == "partial"}
        for knob, show in shown.items():
            knob.layout.display = None if show else "none"
        self._step_knob.set_range(*self._step_range())
        self._scale_knob.set_range(*self._scale_range())
        primary, other = ((self._scale_knob, self._step_knob) if walk else
                          (self._step_knob, self._scale_knob))
        other.slider.remove_class("pg-primary")
        primary.slider.add_class("pg-primary")
        self._uniform_pick.disabled = kind == "nuts"
        self._drift_knob.disabled = self.uniform != "drifting" or kind == "nuts"

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        grid = fig.add_gridspec(2, 2, width_ratios=[1.1, 1.3])
        self._ax = fig.add_subplot(grid[:, 0])
        self._ax_trace = fig.add_subplot(grid[0, 1])
        self._ax_u = fig.add_subplot(grid[1, 1])
        i, _ = self.coords
        through = self.sampler.state.position[0]
        names = self._axis_names()
        self._density = draw_log_density(self._ax, self._grids.get(self.coords, through, self.xlim,
                                                                   self.ylim))
        run = self.run
        self._pairs = draw_pair(self._ax, run.unconstrained, self.coords, names=names,
                                divergent=run.divergent, markersize=3.0)
        self._pairs.autoscale = False
        self._traj = None
        self._next = draw_next_transition(self._ax, coords=self.coords)
        self._next.autoscale = False
        self._traces = draw_traces(self._ax_trace, run.unconstrained, i, names=self.target.names,
                                   divergent=run.divergent)
        self._useq = draw_uniform_sequence(self._ax_u, run.u[0], run.accepted[0], run.accept_prob[0])
        self._useq.autoscale = False  # the view leaves room for the next transition's preview
        self._next_u = draw_next_decision(self._ax_u)
        self._next_u.autoscale = False
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        self._ax.set_title("draws and chain 0's latest trajectory", loc="left", fontsize=9)
        self._ax_trace.set_title(f"trace of {self.target.names[i]}, every chain", loc="left",
                                 fontsize=9)
        self._ax_trace.set_xlabel("")
        self._ax_u.set_ylabel("u of chain 0")
        for ax in (self._ax_trace, self._ax_u):  # draws are whole numbers
            ax.xaxis.set_major_locator(MaxNLocator(nbins=6, integer=True))
        handles = key_handles("start", "path", "accepted", "rejected", "divergent") + [self._next.path]
        legend(self._ax, loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=3, handles=handles,
               labels=[h.get_label() for h in handles], fontsize=7)
        # below the panel, never over the points near u = 1
        legend(self._ax_u, loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=2, fontsize=7)
        self.set_dynamic(self._next.artists + self._next_u.artists)

    def _axis_names(self):
        suffix = " (sampler's scale)" if self.target.bounded else ""
        return tuple(n + suffix for n in self.target.names)

    def _ensure_trajectory(self, traj, accepted):
        if traj is None:
            if self._traj is not None:
                for a in self._traj.artists:
                    a.set_visible(False)
            return
        if self._traj is None:
            self._traj = draw_trajectory(self._ax, traj, coords=self.coords, accepted=accepted,
                                         names=self._axis_names(), metric=self.sampler.kernel.metric)
            self._traj.autoscale = False
        else:
            for a in self._traj.artists:
                a.set_visible(True)
            self._traj.update(traj, accepted)

    # -------------------------------------------------------------- stepping
    def step(self, n=1):
        """Advance every chain by ``n`` transitions and redraw; returns the last records."""
        info = self._step(n)
        self._refresh()
        return info

    @guarded("step")
    def _step(self, n):
        info = None
        self.preview = None  # the previewed transition is taken (or replaced): drop it
        for _ in range(int(n)):
            info = self.sampler.step(record=True)
        if info is not None:
            self._last_accepted = bool(info["accepted"][0])
        self.clear_status()
        return info

    def _on_tick(self, change):
        if change["new"] > 0:
            self.step(self.steps_per_tick)

    def reset(self):
        """Start over from the initial points (same seed: the same draws again)."""
        self._play.playing = False
        self._play.value = 0
        self._safe_new_sampler(False)

    @guarded("reset")
    def _safe_new_sampler(self, keep_positions):
        self._new_sampler(keep_positions)
        self._refresh()

    # ------------------------------------------------------------- observers
    @traitlets.observe("step_size", "n_steps", "persistence", "scale", "max_depth", "drift")
    def _on_knob(self, change):
        if not self._ready:
            return
        k, name = self.sampler.kernel, change["name"]
        try:
            if name == "drift":
                if isinstance(getattr(k, "uniform", None), DriftingUniform):
                    k.uniform.drift = change["new"]
            elif hasattr(k, name):  # a knob of another kind waits for that kind
                setattr(k, name, change["new"])
        except Exception as exc:
            self.report_error("setting change", exc)
            return
        self._show_preview()

    @guarded("preview")
    def _show_preview(self):
        """Chain 0's next transition with the new knobs, drawn at once (only the preview repaints)."""
        self.clear_status()
        self.preview = self._peek()
        self._draw_preview()
        self._readout.value = self._readout_html(self.run)
        self.redraw()

    def _draw_preview(self):
        p = self.preview
        if p is None:
            self._next.update(None)
            self._next_u.update(None)
            return
        moved = p.trajectory if p.trajectory is not None else np.stack([p.start, p.proposal])
        self._next.update(moved, p.accepted)
        self._next_u.update(p.draw, min(max(p.u, 0.0), 1.0), p.accepted, p.accept_prob)

    @traitlets.observe("kernel_kind", "uniform")
    def _on_kernel(self, change):
        if self._ready:
            self._sync_controls()
            self._safe_new_sampler(True)

    @traitlets.observe("seed", "n_chains")
    def _on_restart(self, change):
        if self._ready:
            self._safe_new_sampler(False)

    @traitlets.observe("coords")
    def _on_coords(self, change):
        if not self._ready:
            return
        self.figure.clear()
        self.figure.set_layout_engine("constrained")
        self._build_figure()
        self._refresh()

    # --------------------------------------------------------------- drawing
    @guarded("redraw")
    def _refresh(self):
        run = self.run
        z = run.unconstrained
        self._pairs.update(z, run.divergent)
        traj = self.sampler.last_trajectory
        self._ensure_trajectory(traj, self._last_accepted)
        self._traces.update(z, run.divergent, first=run.first_draw)
        if run.n_draws == 0:  # nothing to scale to yet: the range of the left panel's x
            # auto=None: keep autoscaling on, so the first steps rescale the trace again
            self._ax_trace.set_xlim(run.first_draw - 0.5, run.first_draw + 10, auto=None)
            self._ax_trace.set_ylim(self.xlim, auto=None)
        self._useq.update(run.u[0], run.accepted[0], run.accept_prob[0], first=run.first_draw)
        # a free slot at the right: where the next transition's preview goes
        last = run.first_draw + run.n_draws
        room = max(1.0, 0.03 * run.n_draws) if run.n_draws else 10.0
        self._ax_u.set_xlim(run.first_draw - 0.5, last + room)
        self._draw_preview()
        self._readout.value = self._readout_html(run)
        self.redraw(full=True)

    def _readout_html(self, run):
        n = run.n_draws
        kernel = self.sampler.kernel
        if n == 0:
            body = "no transitions yet: press step or play"
        else:
            acc = float(np.mean(run.accepted))
            rejections = int(np.size(run.accepted) - np.count_nonzero(run.accepted))
            evals, unit = evaluation_cost(run)
            per = f"n/a (fewer than {MIN_ESS_DRAWS} draws)"
            if n >= MIN_ESS_DRAWS:
                e = ess_per_gradient(run, cost=evals)
                per = number(e, 3) if np.isfinite(e) else "n/a"
            body = (f"{plural(run.first_draw + n, 'transition')} \u00d7 {plural(run.n_chains, 'chain')}"
                    f" | acceptance rate {number(acc, 3)} ({plural(rejections, 'rejection')})"
                    f" | {plural(run.n_divergent, 'divergent transition')}"
                    f" | {plural(evals, unit)} | min bulk ESS per {unit}: {per}")
        lines = [describe_kernel(kernel), body]
        if self.preview is not None:
            lines.append(self._preview_text(self.preview))
        text = "<br>".join(html.escape(s) for s in lines)
        return (f"<span style='font-family:monospace'>{text}</span>"
                f"<br><small><i>{html.escape(CAUTION)}</i></small>")

    def _preview_text(self, p):
        if p.divergent:
            where = p.trajectory.divergence_step if p.trajectory is not None else "?"
            verdict = (f"diverge at leapfrog step {where} (|\u0394H| > "
                       f"{number(self.sampler.kernel.max_energy_error)}) and be rejected")
        else:
            what = "accepted" if p.accepted else "rejected"
            change = (f"\u0394H = {p.energy_error:+.3g}" if p.trajectory is not None else
                      f"log density ratio {-p.energy_error:+.3g}")
            verdict = (f"be {what}: {change}, acceptance probability {number(p.accept_prob, 3)}, "
                       f"u = {number(p.u, 3)}")
        if p.trajectory is None:
            i, j = self.coords
            what = f"proposal ({number(p.proposal[i], 3)}, {number(p.proposal[j], 3)})"
        else:
            what = "transition"
            if not np.isclose(p.step_size, self.step_size, rtol=1e-12, atol=0):
                what += f" (step size {number(p.step_size)} after jitter)"
        return (f"preview (press step to take it): chain 0's next {what} would {verdict}")

    # ------------------------------------------------------------- exporting
    def save_gif(self, path, n_transitions=12, frames_per_transition=3, **kwargs):
        """Write a GIF of chain 0 continuing from its current state with the current kernel.

        A copy of the kernel and a fresh recording are used, so the view's own
        chains are not advanced.
        """
        from ..draw import write_chain_animation

        start = self.target.to_user(self.sampler.state.position[0])
        return write_chain_animation(path, self.target, self.sampler.kernel, n_transitions=n_transitions,
                                     frames_per_transition=frames_per_transition, coords=self.coords,
                                     seed=self.seed, initial=start, **kwargs)

    @classmethod
    def from_run(cls, run, **kwargs):
        """Continue a Run: its target and kernel (tuned knobs, mass matrix), from its last draws.

        Chains start at ``run.draws[:, -1]`` (user's scale), one per chain of the run
        (``n_chains=`` other than the run's reuses them in turn); the region shown is where
        the run's draws are. Any other argument of
        ChainView may be given and wins over the run's values.
        """
        from .trajectory_view import run_parts, run_region

        target, kernel = run_parts(run, needs_step_size=False)
        last = np.asarray(run.draws[:, -1], dtype=float)
        n_chains = int(kwargs.pop("n_chains", last.shape[0]))
        if n_chains < 1:
            raise ValueError(f"`n_chains` must be >= 1, got {n_chains}")
        args = dict(kernel=kwargs.pop("kernel", kernel), n_chains=n_chains,
                    initial=last[np.arange(n_chains) % last.shape[0]])
        args.update(kwargs)
        if args.get("xlim") is None or args.get("ylim") is None:  # where the run's draws are
            xlim, ylim = run_region(run, args.get("coords", (0, 1)))
            args["xlim"] = xlim if args.get("xlim") is None else args["xlim"]
            args["ylim"] = ylim if args.get("ylim") is None else args["ylim"]
        return cls(target, **args)

    #: The mass matrix of a kernel passed in (e.g. a tuned run's) is saved with the knobs.
    EXTRA_SETTINGS = ("mass_matrix",)

    def _extra_settings(self):
        if self._metric is None or self._metric.kind == "identity":
            return {}
        return {"mass_matrix": self._metric.as_dict()}

    @classmethod
    def from_settings(cls, target, settings):
        """Build a view on ``target`` with saved ``settings`` (from ``view.settings``)."""
        known = cls.checked_settings(settings)
        mass = known.pop("mass_matrix", None)
        if "coords" in known:
            known["coords"] = tuple(known["coords"])
        view = cls(target, **known)
        if mass is not None:
            if not isinstance(mass, dict) or "inverse_mass" not in mass:
                raise ValueError(f"`settings['mass_matrix']` must be a dict with 'inverse_mass' "
                                 f"(from view.settings), got {mass!r}")
            view._metric = Metric(mass["inverse_mass"])
            view._safe_new_sampler(False)
        return view


def _extras_of(kernel):
    """{kernel kind: knobs the view has no control for} of a passed kernel (kept as they are)."""
    extras = {k: getattr(kernel, k) for k in ("jitter", "max_energy_error") if hasattr(kernel, k)}
    return {kernel_kind(kernel).short: extras} if extras else {}


def _knobs_of(kernel):
    """(kernel kind, uniform name, knobs) of a kernel instance."""
    try:
        entry = kernel_kind(kernel, among=KINDS)
    except ValueError:
        names = ", ".join(f"pg.{kernel_kind(k).name}" for k in KINDS)
        raise TypeError(f"`kernel` must be one of {names}, got {type(kernel).__name__}") from None
    u = getattr(kernel, "uniform", None)
    uniform = "drifting" if isinstance(u, DriftingUniform) else "fresh"
    knobs = {k: getattr(kernel, k) for k in entry.knobs}
    if isinstance(kernel, NUTS):
        knobs["max_depth"] = kernel.max_depth
    if isinstance(u, DriftingUniform):
        knobs["drift"] = u.drift
    return entry.short, uniform, knobs
