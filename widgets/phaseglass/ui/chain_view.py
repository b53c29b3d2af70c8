"""ChainView: run a kernel transition by transition and watch what each choice buys."""

import ipywidgets as widgets
import numpy as np
import traitlets

from ..core.diagnostics import ess
from ..core.kernels import HMC, PartialRefreshHMC, RandomWalk
from ..core.run import CAUTION
from ..core.sampling import Sampler
from ..core.slices import log_density_grid, resolve_coords
from ..core.uniforms import DriftingUniform, FreshUniform
from ..draw import draw_log_density, draw_pair, draw_traces, draw_trajectory, draw_uniform_sequence
from ..draw.style import key_handles, legend
from ._base import View, check_range, check_target, guarded
from .trajectory_view import pilot_region

__all__ = ["ChainView", "KERNELS"]

#: Kernel choices of the view: name -> (class, description).
KERNELS = {
    "hmc": "HMC (fresh momentum, fixed steps)",
    "partial": "HMC with partial momentum refresh",
    "walk": "random-walk Metropolis",
}

_MIN_ESS_DRAWS = 20


class ChainView(View):
    """Run a kernel one transition at a time: draws, latest trajectory, trace, u sequence.

    Left: the draws over the log-density (sampler's scale; a 2-D slice through
    the first chain's start for an n-D target), divergent transitions marked,
    and the latest trajectory of chain 0. Right: a trace per chain and chain
    0's accept/reject variable ``u`` per iteration (rejections hollow) with
    the acceptance probability. A readout gives the running acceptance rate,
    divergences, gradient evaluations and ESS per gradient so far (with the
    caution that diagnostics never prove convergence).

    Knobs ``step_size``, ``n_steps``, ``persistence`` and ``drift`` act live on
    the next transition. Changing ``kernel_name`` or ``uniform`` starts a new
    record from the chains' current positions; changing ``seed`` or
    ``n_chains`` (or Reset) starts over from the initial points.

    Parameters
    ----------
    target : Target
    kernel : HMC, PartialRefreshHMC or RandomWalk, optional
        Its knobs seed the view's; otherwise built from ``kernel_name``.
    kernel_name : {"hmc", "partial", "walk"}
    uniform : {"fresh", "drifting"}
    step_size, n_steps, persistence, drift : float, int, float, float
        ``step_size`` is the random walk's scale for ``"walk"``.
    n_chains : int
    seed : int
    coords : pair of int or str
    capacity : int
        Draws kept (a ring buffer), so live play runs in bounded memory.
    steps_per_tick : int
        Transitions per Play tick.

    Attributes
    ----------
    sampler : Sampler
    run : Run
        Everything recorded so far (draws (chain, draw, dim), accepted, u, ...).
    """

    kernel_name = traitlets.Enum(tuple(KERNELS), "hmc", help="Transition kernel.").tag(setting=True)
    uniform = traitlets.Enum(("fresh", "drifting"), "fresh",
                             help="Source of the accept/reject uniform.").tag(setting=True)
    step_size = traitlets.Float(0.2, help="Leapfrog step size (the random walk's scale).").tag(setting=True)
    n_steps = traitlets.Int(10, help="Leapfrog steps per transition.").tag(setting=True)
    persistence = traitlets.Float(0.9, help="Momentum persistence of partial refresh.").tag(setting=True)
    drift = traitlets.Float(0.03, help="Drift per iteration of the drifting uniform.").tag(setting=True)
    n_chains = traitlets.Int(2, help="Number of chains.").tag(setting=True)
    seed = traitlets.Int(0, help="Seed of every random stream.").tag(setting=True)
    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    steps_per_tick = traitlets.Int(1, help="Transitions per Play tick.").tag(setting=True)

    def __init__(self, target, kernel=None, *, kernel_name="hmc", uniform="fresh", step_size=0.2,
                 n_steps=10, persistence=0.9, drift=0.03, n_chains=2, seed=0, coords=(0, 1),
                 capacity=2000, steps_per_tick=1, xlim=None, ylim=None, initial=None):
        check_target(target, min_dim=2)
        self.target = target
        self.capacity = int(capacity)
        super().__init__(figsize=(8.6, 4.6))
        self._ready = False
        coords = resolve_coords(coords, target.names, target.dim)
        # a kernel passed in (e.g. tuned by pg.sample) keeps its mass matrix for every kernel built here
        self._metric = None
        if kernel is not None:
            self._metric = kernel.metric
            kernel_name, uniform, knobs = _knobs_of(kernel)
            step_size = knobs.get("step_size", step_size)
            n_steps = knobs.get("n_steps", n_steps)
            persistence = knobs.get("persistence", persistence)
            drift = knobs.get("drift", drift)
        px, py, start = pilot_region(target, coords, seed=seed)
        self.xlim = tuple(xlim) if xlim is not None else px
        self.ylim = tuple(ylim) if ylim is not None else py
        self._initial = initial
        with self.hold_trait_notifications():
            self.kernel_name = kernel_name
            self.uniform = uniform
            self.step_size = step_size
            self.n_steps = n_steps
            self.persistence = persistence
            self.drift = drift
            self.n_chains = n_chains
            self.seed = seed
            self.coords = coords
            self.steps_per_tick = steps_per_tick
        self._new_sampler(keep_positions=False)
        self._build_controls()
        self._build_figure()
        self._ready = True
        self._refresh()

    # ------------------------------------------------------------ validation
    _RANGES = {"step_size": (0.0, None, "(]"), "n_steps": (1, None, "[]"),
               "n_chains": (1, None, "[]"), "steps_per_tick": (1, None, "[]"),
               "persistence": (0.0, 1.0, "[)"), "drift": (0.0, 2.0, "()")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    # ---------------------------------------------------------------- kernel
    def _make_kernel(self):
        uniform = DriftingUniform(self.drift) if self.uniform == "drifting" else FreshUniform()
        metric = self._metric
        if self.kernel_name == "hmc":
            return HMC(self.step_size, self.n_steps, uniform=uniform, metric=metric)
        if self.kernel_name == "partial":
            return PartialRefreshHMC(self.step_size, self.n_steps, self.persistence, uniform=uniform,
                                     metric=metric)
        return RandomWalk(self.step_size, uniform=uniform, metric=metric)

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

    @property
    def run(self):
        """A Run of everything recorded since the last reset."""
        return self.sampler.run

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        self._kernel_pick = widgets.Dropdown(options=[(v, k) for k, v in KERNELS.items()],
                                             description="kernel", layout=widgets.Layout(width="330px"))
        self._kernel_pick.add_class("pg-kernel")
        self._uniform_pick = widgets.ToggleButtons(options=[("fresh u", "fresh"), ("drifting u", "drifting")])
        self._uniform_pick.add_class("pg-uniform")
        self._step_slider = widgets.FloatLogSlider(base=10, min=-3, max=0.5, step=0.02,
                                                   description="step size", readout_format=".3g")
        self._step_slider.add_class("pg-step-size")
        self._steps_slider = widgets.IntSlider(min=1, max=200, description="steps")
        self._steps_slider.add_class("pg-n-steps")
        self._persist_slider = widgets.FloatSlider(min=0.0, max=0.99, step=0.01, description="persistence")
        self._persist_slider.add_class("pg-persistence")
        self._drift_slider = widgets.FloatLogSlider(base=10, min=-3, max=-0.3, step=0.05,
                                                    description="drift", readout_format=".3g")
        self._drift_slider.add_class("pg-drift")
        self._play = widgets.Play(value=0, min=0, max=10**9, step=1, interval=150, show_repeat=False)
        self._play.add_class("pg-play")
        self._step_button = widgets.Button(description="step", icon="step-forward")
        self._step_button.add_class("pg-step")
        self._reset_button = widgets.Button(description="reset", icon="undo")
        self._reset_button.add_class("pg-reset")
        self._seed_box = widgets.BoundedIntText(min=0, max=2**31 - 1, description="seed",
                                                layout=widgets.Layout(width="160px"))
        for control, trait in ((self._kernel_pick, "kernel_name"), (self._uniform_pick, "uniform"),
                               (self._step_slider, "step_size"), (self._steps_slider, "n_steps"),
                               (self._persist_slider, "persistence"), (self._drift_slider, "drift"),
                               (self._seed_box, "seed")):
            traitlets.link((self, trait), (control, "value"))
        self._play.observe(self._on_tick, "value")
        self._step_button.on_click(lambda _: self.step(self.steps_per_tick))
        self._reset_button.on_click(lambda _: self.reset())
        self._readout = widgets.HTML()
        self._readout.add_class("pg-chain-readout")
        self.children = [
            widgets.HBox([self._kernel_pick, self._uniform_pick]),
            widgets.HBox([self._step_slider, self._steps_slider, self._persist_slider, self._drift_slider]),
            widgets.HBox([self._play, self._step_button, self._reset_button, self._seed_box]),
            self.figure.canvas, self._readout, self._status_html,
        ]

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        grid = fig.add_gridspec(2, 2, width_ratios=[1.1, 1.3])
        self._ax = fig.add_subplot(grid[:, 0])
        self._ax_trace = fig.add_subplot(grid[0, 1])
        self._ax_u = fig.add_subplot(grid[1, 1])
        i, j = self.coords
        through = self.sampler.state.position[0]
        self._density = draw_log_density(self._ax, log_density_grid(
            self.target, self.coords, through, self.xlim, self.ylim, n=80))
        run = self.run
        self._pairs = draw_pair(self._ax, run.unconstrained, self.coords, names=self._axis_names(),
                                divergent=run.divergent, markersize=3.0)
        self._pairs.autoscale = False
        self._traj = None
        self._traces = draw_traces(self._ax_trace, run.unconstrained, i, names=self.target.names,
                                   divergent=run.divergent)
        self._useq = draw_uniform_sequence(self._ax_u, run.u[0], run.accepted[0], run.accept_prob[0])
        self._ax.set_xlim(self.xlim)
        self._ax.set_ylim(self.ylim)
        self._ax.set_title("draws (sampler's scale) and chain 0's latest trajectory", loc="left",
                           fontsize=9)
        self._ax_trace.set_title(f"trace of {self.target.names[i]}, every chain", loc="left", fontsize=9)
        self._ax_u.set_title("chain 0: accept/reject variable u per iteration", loc="left", fontsize=9)
        handles = key_handles("start", "path", "accepted", "rejected", "divergent")
        legend(self._ax, loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=3, handles=handles,
               labels=[h.get_label() for h in handles], fontsize=7)
        legend(self._ax_u, loc="upper left", fontsize=7)

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
        for _ in range(int(n)):
            info = self.sampler.step(record=True)
        if info is not None:
            self._last_accepted = bool(info["accepted"][0])
        self.status = ""
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
    @traitlets.observe("step_size", "n_steps", "persistence", "drift")
    def _on_knob(self, change):
        if not self._ready:
            return
        k, name = self.sampler.kernel, change["name"]
        try:
            if name == "step_size":
                setattr(k, "scale" if isinstance(k, RandomWalk) else "step_size", change["new"])
            elif name == "n_steps" and hasattr(k, "n_steps"):
                k.n_steps = change["new"]
            elif name == "persistence" and hasattr(k, "persistence"):
                k.persistence = change["new"]
            elif name == "drift" and isinstance(k.uniform, DriftingUniform):
                k.uniform.drift = change["new"]
        except Exception as exc:
            self.report_error("setting change", exc)
            return
        self._refresh(redraw=False)

    @traitlets.observe("kernel_name", "uniform")
    def _on_kernel(self, change):
        if self._ready:
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
    def _refresh(self, redraw=True):
        run = self.run
        z = run.unconstrained
        self._pairs.update(z, run.divergent)
        traj = self.sampler.last_trajectory
        self._ensure_trajectory(traj, self._last_accepted)
        self._traces.update(z, run.divergent, first=run.first_draw)
        self._useq.update(run.u[0], run.accepted[0], run.accept_prob[0], first=run.first_draw)
        self._readout.value = self._readout_html(run)
        if redraw:
            self.redraw(full=True)

    def _readout_html(self, run):
        n = run.n_draws
        if n == 0:
            body = "no transitions yet: press step or play"
        else:
            acc = float(np.mean(run.accepted))
            grads = run.total_grad
            evals = grads if self.sampler.kernel.uses_gradient else n * run.n_chains
            unit = "gradient" if self.sampler.kernel.uses_gradient else "log-density evaluation"
            per = "n/a (fewer than 20 draws)"
            if n >= _MIN_ESS_DRAWS:
                e = np.nanmin(ess(run.unconstrained, method="bulk"))
                per = f"{e / max(evals, 1):.3g}" if np.isfinite(e) else "n/a"
            body = (f"{run.first_draw + n} transitions x {run.n_chains} chains | acceptance {acc:.3f} | "
                    f"{run.n_divergent} divergent | {evals} {unit}s | min bulk ESS per {unit}: {per}")
        return (f"<span style='font-family:monospace'>{self.sampler.kernel!r}<br>{body}</span>"
                f"<br><small><i>{CAUTION}</i></small>")

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
    def from_settings(cls, target, settings):
        """Build a view on ``target`` with saved ``settings`` (from ``view.settings``)."""
        s = dict(settings)
        s.pop("view", None)
        known = {k: s[k] for k in cls.setting_names() if k in s}
        if "coords" in known:
            known["coords"] = tuple(known["coords"])
        return cls(target, **known)


def _knobs_of(kernel):
    """(kernel_name, uniform name, knobs) of a kernel instance."""
    uniform = "drifting" if isinstance(kernel.uniform, DriftingUniform) else "fresh"
    knobs = {}
    if isinstance(kernel.uniform, DriftingUniform):
        knobs["drift"] = kernel.uniform.drift
    if isinstance(kernel, PartialRefreshHMC):
        knobs.update(step_size=kernel.step_size, n_steps=kernel.n_steps, persistence=kernel.persistence)
        return "partial", uniform, knobs
    if isinstance(kernel, HMC):
        knobs.update(step_size=kernel.step_size, n_steps=kernel.n_steps)
        return "hmc", uniform, knobs
    if isinstance(kernel, RandomWalk):
        knobs.update(step_size=kernel.scale)
        return "walk", uniform, knobs
    raise TypeError(
        f"`kernel` must be pg.HMC, pg.PartialRefreshHMC or pg.RandomWalk, got {type(kernel).__name__}")
