"""DivergenceView: where a run's divergent transitions are, and a replay of each one."""

import asyncio
import html
from contextlib import contextmanager

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.ticker import MaxNLocator

from ..core.kernels import HMC, Kernel
from ..core.registry import kernel_from_settings
from ..core.run import CAUTION, Run
from ..core.sampling import Sampler
from ..core.slices import choose_limits, resolve_coords
from ..core.target import Target
from ..core.triage import divergence_ranking
from ..draw import draw_energy_error, draw_log_density, draw_pair, draw_trajectory, legend
from ..draw.pairs import draw_pair_panels
from ..draw.style import key_handles, note
from ._base import COLUMN_WIDTH_IN, View, guarded, make_canvas_figure, number, plural
from ._controls import KnobControl, box_width_px, text_width_px
from ._shared import GridCache

__all__ = ["DivergenceView"]

_PICK_RADIUS_PX = 6
#: The grid of top-ranked pairs: panels by default and at most.
GRID_PAIRS, MAX_GRID_PAIRS = 4, 6


class DivergenceView(View):
    """Pairwise scatter of a run's draws with divergent transitions marked; replay any of them.

    Top left: two coordinates of every draw (chains pooled, user's scale) with
    the divergent transitions as ``X`` markers; the one shown is ringed. Click a
    marker (a matplotlib pick event), choose it in the list, or call
    ``select(index)`` to replay it. Top right: its leapfrog trajectory over the
    log-density slice through its start (the draw before the divergence), up
    to the step where the energy error left the threshold. Below: the energy
    error per leapfrog step. ``step()``, the Play control or the step slider
    replay the trajectory one leapfrog step at a time (they are disabled while
    there is nothing to replay). A readout gives the number of divergences,
    which one is shown, where it diverged and its energy error.

    With many coordinates, the "ranked pair" list offers the top pairs of
    ``pg.divergence_ranking(run)`` and the "top pairs" toggle (or
    ``pair_grid(k)``) shows the top ``k`` of them (default 4, at most 6) as small
    panels below the figure, each titled with its rank and score; clicking a
    panel shows that pair above. The grid is drawn only when asked for.

    Given a Target instead of a Run, the view samples it itself: a short
    warm-up (run at once), then ``n_draws`` draws. In a notebook (an asyncio
    event loop is running) the draws are made in chunks of ``chunk`` as
    background tasks, so the notebook stays responsive and divergences appear
    as they are found; ``await view.wait()`` waits for the end. Elsewhere (a
    script, tests) they are made at once. ``background`` forces either.

    Parameters
    ----------
    run_or_target : Run or Target
        A Run keeps its ``divergences`` replays (``pg.sample`` and
        ``Sampler`` record them); its ``target`` gives the log-density slices.
    kernel : Kernel, optional
        For a Target; default ``pg.HMC(0.1, 20)`` (copied, then tuned by the warm-up).
    coords : pair of int or str, optional
        Default None: the top-ranked pair of ``pg.divergence_ranking(run)``
        (the two coordinates where the divergent draws differ most from the
        other draws), or the first two coordinates when there is no divergence.
        A Target's view starts on the first two and moves to the top pair once
        its sampling is done (unless the coordinates were changed meanwhile).
    n_draws, n_chains, warmup, seed : sampling settings for a Target.
    chunk : int
        Draws per chunk when sampling in the background.
    background : bool, optional
        Sample in chunks on the running event loop (default: when one is running).

    Attributes
    ----------
    run : Run
    divergences : list of (chain, draw, Trajectory)
        The divergent transitions that have replays, in the order they happened;
        ``draw`` indexes ``run.draws`` (the trajectory starts at the draw
        before, on the sampler's scale).
    trajectory : Trajectory or None
        The divergence shown.
    ranking : DivergenceRanking or None
        ``pg.divergence_ranking`` of the run (None until a Target's sampling is done).
    figure : matplotlib.figure.Figure
    grid_figure : matplotlib.figure.Figure or None
        The grid of top-ranked pairs (None until ``pair_grid`` or the toggle draws it).
    grid : PairPanelsDrawing or None
        Its panels (``grid.pairs``, ``grid.panels``).

    Examples
    --------
    >>> import phaseglass as pg
    >>> run = pg.sample(pg.demos.apiaries("centred", n_groups=12), pg.HMC(0.1, 8), n_draws=300,
    ...                 n_chains=2, warmup=0, seed=1)
    >>> view = pg.DivergenceView(run)        # opens on the top-ranked pair
    >>> view.coords == view.ranking.top_pair
    True
    >>> fig = view.pair_grid(4)              # the top 4 pairs, shown below the figure
    >>> view.grid.pairs[0] == view.ranking.top_pair
    True
    >>> view = pg.DivergenceView(run, coords=("log_tau", "apiary[0]"))
    >>> len(view.divergences) == run.n_divergent
    True
    >>> view.select(2)
    >>> view.step()          # the replay starts over at the start point
    >>> view.replay_step
    0
    """

    coords = traitlets.Tuple(traitlets.Int(), traitlets.Int(),
                             help="Indices of the two coordinates shown.").tag(setting=True)
    selected = traitlets.Int(
        -1, help="Index in `divergences` of the divergence shown (-1: none).").tag(setting=True)
    replay_step = traitlets.Int(
        0, help="Leapfrog steps of the shown trajectory drawn (0 .. the step that diverged)."
    ).tag(setting=True)

    def __init__(self, run_or_target, *, kernel=None, coords=None, n_draws=300, n_chains=2,
                 warmup=200, seed=0, chunk=50, background=None):
        if isinstance(run_or_target, Run):
            run, target = run_or_target, run_or_target.target
        elif isinstance(run_or_target, Target):
            run, target = None, run_or_target
        else:
            raise TypeError(
                "`run_or_target` must be a phaseglass Run (from pg.sample) or Target, got "
                f"{type(run_or_target).__name__}"
            )
        if kernel is not None and not isinstance(kernel, Kernel):
            raise TypeError(f"`kernel` must be a phaseglass kernel such as pg.HMC(0.1, 20), "
                            f"got {type(kernel).__name__}")
        if run is not None and kernel is not None:
            raise ValueError("`kernel` is for sampling a Target; a Run already has its kernel")
        names = run.names if run is not None else target.names
        dim = len(names)
        if dim < 2:
            raise ValueError("the run must have dim >= 2 for a pairwise view")
        self.target = target
        self.names = tuple(names)
        super().__init__(figsize=(COLUMN_WIDTH_IN, 6.8))
        self.divergences = []
        self.trajectory = None
        self._marker_index = np.zeros(0, dtype=int)
        self._syncing = False
        self._built = False
        self._grids = GridCache(target, n=70) if target is not None else None
        self._path = self._energy = self._density = None
        self._sampler = None
        self._run = run
        self._task = None
        self._remaining = 0
        self._sampling_settings = None
        self.ranking = None
        self._auto_coords = coords is None
        self.grid_figure = self.grid = None
        self._grid_k = GRID_PAIRS
        self._grid_of = None  # (run, ranking, pairs) the grid shows
        if run is not None:
            self.ranking = divergence_ranking(run)
        if coords is None:
            ranked = self.ranking is not None and not self.ranking.empty
            coords = self.ranking.top_pair if ranked else (0, 1)
        self.coords = resolve_coords(coords, self.names, dim)
        self._build_controls()
        self._build_figure()
        self._built = True
        if run is None:
            self._start_sampling(target, kernel, n_draws, n_chains, warmup, seed, chunk, background)
        else:
            self._refresh_run()

    # ------------------------------------------------------------ validation
    def _coordinate_names(self):
        return self.names

    @traitlets.validate("selected")
    def _check_selected(self, proposal):
        v = proposal["value"]
        n = len(self.divergences)
        if n == 0 and v != -1:
            raise traitlets.TraitError(f"`selected` must be -1: this run has no divergence replays, got {v}")
        if n and not 0 <= v < n:
            raise traitlets.TraitError(f"`selected` must be in range({n}), got {v}")
        return v

    @traitlets.validate("replay_step")
    def _check_replay(self, proposal):
        v = proposal["value"]
        end = self._end()
        if not 0 <= v <= end:
            raise traitlets.TraitError(f"`replay_step` must be in [0, {end}], got {v}")
        return v

    def _end(self):
        tr = self.trajectory
        if tr is None:
            return 0
        return int(tr.divergence_step) if tr.divergent else int(tr.n_steps)

    # ------------------------------------------------------------- sampling
    def _start_sampling(self, target, kernel, n_draws, n_chains, warmup, seed, chunk, background):
        kernel = HMC(0.1, 20) if kernel is None else kernel
        self._sampling_settings = {"n_draws": int(n_draws), "n_chains": int(n_chains),
                                   "warmup": int(warmup), "seed": seed, "chunk": int(chunk),
                                   "kernel": kernel.settings()}
        if int(chunk) < 1:
            raise ValueError(f"`chunk` must be >= 1, got {chunk}")
        self.chunk = int(chunk)
        self._remaining = int(n_draws)
        if not self._warm_up(target, kernel.copy(), n_chains, warmup, seed):
            return
        if background is None:
            try:
                asyncio.get_running_loop()
                background = True
            except RuntimeError:
                background = False
        if background:
            self._task = asyncio.ensure_future(self._sample_in_chunks())
        else:
            self.sample_more(self._remaining)

    @guarded("warm-up")
    def _warm_up(self, target, kernel, n_chains, warmup, seed):
        self.status = f"warming up ({warmup} transitions) ..."
        self._sampler = Sampler(target, kernel, n_chains=n_chains, seed=seed)
        self._history = self._sampler.warm_up(warmup)
        self._warmup = int(warmup)
        self.clear_status()
        return True

    async def _sample_in_chunks(self):
        while self._remaining > 0 and self._sampler is not None:
            if not self.sample_more(self.chunk):
                break
            await asyncio.sleep(0.01)  # let the front end's messages through

    async def wait(self):
        """Wait until background sampling has finished (``await view.wait()``)."""
        if self._task is not None:
            await self._task

    @property
    def sampling(self):
        """Whether draws are still being made in the background."""
        return self._task is not None and not self._task.done()

    @guarded("sampling")
    def sample_more(self, n):
        """Make up to ``n`` more of the requested draws (a Target's view only); True if any."""
        if self._sampler is None:
            raise RuntimeError("this view shows a given Run; there is nothing to sample")
        n = min(int(n), self._remaining)
        if n <= 0:
            return False
        self._sampler.step(n)
        self._remaining -= n
        run = self._sampler.run
        run.n_warmup = self._warmup
        run.warmup_history = self._history
        self._run = run
        self._refresh_run()
        return True

    @property
    def run(self):
        """The Run shown (for a Target, everything sampled so far)."""
        return self._run

    # -------------------------------------------------------------- controls
    def _build_controls(self):
        lay = widgets.Layout
        self._pick_list = widgets.Dropdown(options=[("no divergences", -1)], value=-1,
                                           description="divergence", layout=lay(width="340px"),
                                           style={"description_width": "initial"})
        self._pick_list.add_class("pg-divergence-pick")
        self._pick_list.observe(self._on_list, "value")
        self._coordinate_pickers(self.names)
        self._build_pair_controls()
        self._play = widgets.Play(value=0, min=0, max=0, step=1, interval=250, show_repeat=False,
                                  description="replay")
        self._play.add_class("pg-replay-play")
        traitlets.link((self._play, "value"), (self, "replay_step"))
        self._replay_knob = KnobControl(self, "replay_step", low=0, high=1, integer=True,
                                        label="leapfrog step", css_class="pg-replay-step")
        self._step_slider = self._replay_knob.slider
        self._step_button = widgets.Button(description="step", icon="step-forward",
                                           layout=lay(width="90px"))
        self._step_button.add_class("pg-step")
        self._step_button.on_click(lambda _: self.step())
        self._readout = widgets.HTML()
        self._readout.add_class("pg-divergence-readout")
        self._sync_controls()
        wrap = lay(flex_flow="row wrap", align_items="center")
        self.children = [
            widgets.HBox([self._pick_list, self._x_pick, self._y_pick, self._swap_pick],
                         layout=wrap),
            widgets.HBox([self._play, self._step_button, self._replay_knob]),
            widgets.HBox([self._ranked_list, self._grid_toggle], layout=wrap),
            self.figure.canvas, self._grid_slot, self._readout, self._status_html,
        ]

    def _sync_controls(self):
        """Replay controls work only when there is a divergence to replay.

        The control marked ``pg-primary`` (the one a browser test moves) is the
        replay slider then, and the button swapping x and y otherwise: either
        changes the figure at once.
        """
        idle = self.trajectory is None
        self._play.disabled = self._step_button.disabled = idle
        self._replay_knob.disabled = idle
        self._step_slider.remove_class("pg-primary")
        self._swap_pick.remove_class("pg-primary")
        (self._swap_pick if idle else self._step_slider).add_class("pg-primary")

    def _on_list(self, change):
        if self._syncing or change["new"] == self.selected:
            return
        self.select(change["new"])

    # ------------------------------------------------------ top-ranked pairs
    def _build_pair_controls(self):
        lay = widgets.Layout
        self._ranked_list = widgets.Dropdown(options=[("no divergences to rank", -1)], value=-1,
                                             description="ranked pair",
                                             style={"description_width": "initial"})
        self._ranked_list.add_class("pg-ranked-pair")
        self._ranked_list.observe(self._on_ranked_list, "value")
        self._grid_toggle = widgets.ToggleButton(
            value=False, description=f"top {GRID_PAIRS} pairs", icon="th",
            tooltip="Show the top-ranked pairs as small panels below the figure; click one to "
                    "show it above", layout=lay(width="auto", flex="0 0 auto"))
        self._grid_toggle.add_class("pg-pair-grid-toggle")
        self._grid_toggle.observe(self._on_grid_toggle, "value")
        self._grid_slot = widgets.Box(layout=lay(flex_flow="column"))
        self._fill_ranked_list()

    def _ranked_pairs(self, k=MAX_GRID_PAIRS):
        """The top ``k`` pairs of the ranking, as tuples of int (empty when none)."""
        r = self.ranking
        if r is None or r.empty:
            return []
        return [(int(a), int(b)) for a, b in r.pairs[:k]]

    def _pair_words(self, rank):
        """``("log_tau \u00d7 apiary[0]", "|shift| 0.8 + 0.4 = 1.2")`` for the pair ranked ``rank``."""
        r = self.ranking
        a, b = (int(v) for v in r.pairs[rank])
        return (f"{self.names[a]} \u00d7 {self.names[b]}",
                f"|shift| {number(abs(r.shift[a]), 2)} + {number(abs(r.shift[b]), 2)} = "
                f"{number(r.pair_score[rank], 3)}")

    def _fill_ranked_list(self):
        pairs = self._ranked_pairs()
        with self._sync():
            if not pairs:
                self._ranked_list.options = [("no divergences to rank", -1)]
                self._ranked_list.value = -1
            else:
                labels = [(f"{k + 1}. {self._pair_words(k)[0]} "
                           f"({number(self.ranking.pair_score[k], 3)})", k)
                          for k in range(len(pairs))]
                self._ranked_list.options = labels + [("another pair", -1)]
                self._ranked_list.value = self._rank_of(self.coords)
        # two names per choice: up to 560 px, with the 90 px description within the column
        width = box_width_px([label for label, _ in self._ranked_list.options], chrome=44,
                             most=560)
        self._ranked_list.layout.width = f"{width + 90}px"
        self._ranked_list.disabled = not pairs
        self._grid_toggle.disabled = not pairs

    def _rank_of(self, coords):
        """Rank (0-based) of the pair ``coords`` (either order) among the listed ones, or -1."""
        pairs = self._ranked_pairs()
        c = tuple(int(v) for v in coords)
        for k, p in enumerate(pairs):
            if c in (p, p[::-1]):
                return k
        return -1

    def _on_ranked_list(self, change):
        if self._syncing or change["new"] < 0:
            return
        self.show_ranked_pair(change["new"])

    def show_ranked_pair(self, rank):
        """Show the pair ranked ``rank`` (0: the top pair) of ``ranking`` in the main figure."""
        pairs = self._ranked_pairs(len(self.ranking.pairs) if self.ranking is not None else 0)
        if not pairs:
            self.status = "no divergent transitions: there are no ranked pairs"
            return
        if not 0 <= int(rank) < len(pairs):
            raise ValueError(f"`rank` must be in range({len(pairs)}), got {rank}")
        self.coords = pairs[int(rank)]

    def pair_grid(self, k=GRID_PAIRS):
        """Draw the top ``k`` ranked pairs as small panels below the figure; return their Figure.

        Each panel is the main scatter for one pair (every draw, the divergent ones
        as ``X``), titled with its rank, its score (``ranking.pair_score``) and the two
        ``|shift|`` values it adds up; the pair shown above is framed. Clicking a
        panel shows its pair above. Drawn only when asked for (here or with the
        "top pairs" toggle), so opening the view stays fast.

        Parameters
        ----------
        k : int
            Number of panels, 1 to 6 (fewer when the run has fewer pairs).
        """
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or not 1 <= k <= MAX_GRID_PAIRS:
            raise ValueError(f"`k` must be an integer from 1 to {MAX_GRID_PAIRS}, got {k!r}")
        self._grid_k = int(k)
        self._grid_toggle.description = f"top {self._grid_k} pairs"
        shown = bool(self._draw_grid())
        with self._sync():
            self._grid_toggle.value = shown
        return self.grid_figure if shown else None

    def _on_grid_toggle(self, change):
        if self._syncing:
            return
        if not change["new"]:
            self._grid_slot.children = ()
        elif not self._draw_grid():  # nothing to show: the status says why
            with self._sync():
                self._grid_toggle.value = False

    @staticmethod
    def _grid_shape(k):
        """(rows, columns) of a grid of ``k`` panels in the column: two or three across."""
        cols = 1 if k == 1 else (2 if k in (2, 4) else 3)
        return -(-k // cols), cols

    def _grid_titles(self, k, cols):
        room = 0.9 * COLUMN_WIDTH_IN * 100 / cols - 40  # px of a panel's title line
        titles = []
        for rank in range(k):
            names, score = self._pair_words(rank)
            head = f"{rank + 1}. {names}"
            if text_width_px(head, size=8 * 100 / 72) > room:  # 8 pt at 100 dpi
                head = head.replace(" \u00d7 ", " \u00d7\n", 1)
            titles.append(f"{head}\n{score}")
        return titles

    @guarded("grid of top pairs")
    def _draw_grid(self):
        """Draw (or show again) the grid of the top ``_grid_k`` pairs; True when shown."""
        pairs = self._ranked_pairs(self._grid_k)
        if self._run is None or not pairs:
            self.status = "no divergent transitions yet: there are no ranked pairs to show"
            return False
        drawn = (self._run, self.ranking, pairs)
        last = self._grid_of
        if last is not None and last[0] is drawn[0] and last[1] is drawn[1] and last[2] == pairs:
            self._grid_slot.children = (self.grid_figure.canvas,)  # unchanged: no redraw
            self._mark_grid()
            return True
        k = len(pairs)
        rows, cols = self._grid_shape(k)
        size = (COLUMN_WIDTH_IN, 0.35 + 2.55 * rows)
        fig = self.grid_figure
        if fig is None or tuple(fig.get_size_inches()) != size:
            if fig is not None:
                fig.canvas.close()
            fig = make_canvas_figure(size, css_class="pg-pair-grid")
            fig.canvas.mpl_connect("button_press_event", self._on_grid_click)
            self.grid_figure = fig
        fig.clear()
        axes = fig.subplots(rows, cols, squeeze=False).ravel()
        for ax in axes[k:]:
            ax.set_visible(False)
        self.grid = draw_pair_panels(axes[:k], self._run, pairs, names=self.names,
                                     titles=self._grid_titles(k, cols), markersize=2.0)
        fig.suptitle(f"top {plural(k, 'pair')} where divergent draws (\u2716) differ most; "
                     "click a panel to show it above", fontsize=9, x=0.01, ha="left")
        self._grid_of = drawn
        self._mark_grid()
        self._grid_slot.children = (fig.canvas,)
        return True

    def _mark_grid(self):
        if self.grid is None:
            return
        c = tuple(self.coords)
        self.grid.mark(next((k for k, p in enumerate(self.grid.pairs) if c in (p, p[::-1])), -1))
        self.grid_figure.canvas.draw_idle()

    @guarded("click on the grid of top pairs")
    def _on_grid_click(self, event):
        if self.grid is None or event.inaxes is None:
            return
        if getattr(getattr(self.grid_figure.canvas, "toolbar", None), "mode", ""):
            return  # zooming or panning, not choosing
        k = self.grid.panel_of(event.inaxes)
        if k >= 0:
            self.coords = self.grid.pairs[k]

    # ---------------------------------------------------------------- figure
    def _build_figure(self):
        fig = self.figure
        # two rows so the figure fits a notebook column: the draws and the replay side by
        # side, the energy error (which wants width for its steps) across the bottom
        axd = fig.subplot_mosaic([["pair", "replay"], ["error", "error"]],
                                 height_ratios=[1.75, 1.25])
        self._ax_pair, self._ax, self._ax_err = axd["pair"], axd["replay"], axd["error"]
        empty = np.zeros((1, 0, len(self.names)))
        self._pair = draw_pair(self._ax_pair, empty, self.coords, names=self.names, markersize=2.5)
        self._pair.divergent.set_picker(True)
        self._pair.divergent.set_pickradius(_PICK_RADIUS_PX)
        (self._ring,) = self._ax_pair.plot([], [], linestyle="none", marker="o", markersize=15,
                                           markerfacecolor="none", markeredgecolor="black",
                                           markeredgewidth=1.6, zorder=6, label="shown below")
        self._ax_pair.set_title("draws: click an \u2716 to replay it", loc="left", fontsize=9)
        # until there is a divergence to replay, the replay panels are a message
        self._ax.set_axis_off()
        self._note = self._ax.text(0.5, 0.55, "no divergence to replay", transform=self._ax.transAxes,
                                   ha="center", va="center", fontsize=10, color="#444444")
        # the bottom row says what will appear there rather than stay a blank space
        self._ax_err.set_axis_off()
        self._err_note = self._ax_err.text(
            0.5, 0.5, "the energy error of the replayed divergence, step by step, appears here",
            transform=self._ax_err.transAxes, ha="center", va="center", fontsize=9,
            color="#777777")
        fig.canvas.mpl_connect("pick_event", self._on_pick)

    def _pair_legend(self):
        p = self._pair
        handles = [p.points, p.divergent, self._ring]
        labels = ["draws (chains pooled)", "divergent transition", "replayed divergence"]
        legend(self._ax_pair, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2,
               handles=handles, labels=labels, fontsize=7, markerscale=1.0)

    def _make_replay_drawings(self, tr):
        """Create the trajectory, density and energy-error artists once (first selection)."""
        self._ax.set_axis_on()
        self._ax.xaxis.set_major_locator(MaxNLocator(6))
        self._ax.yaxis.set_major_locator(MaxNLocator(6))
        self._note.set_visible(False)
        self._err_note.set_visible(False)
        self._ax_err.set_axis_on()
        xlim, ylim = self._trajectory_limits(tr)
        grid = self._grid(tr, xlim, ylim)
        if grid is not None:
            self._density = draw_log_density(self._ax, grid, names=self._axis_names())
        self._path = draw_trajectory(self._ax, tr, coords=self.coords, accepted=False,
                                     names=self._axis_names_all())
        self._path.autoscale = False
        self._energy = draw_energy_error(self._ax_err, tr)
        self._ax_err.set_ylabel("energy error \u0394H")  # the long form does not fit this height
        self._ax_err.xaxis.set_major_locator(MaxNLocator(8, integer=True))
        self._offview = note(self._ax, "", loc="lower right")
        p = self._path
        handles = ([self._density.contours] if self._density is not None else []) + [
            p.path, p.start, p.momentum] + key_handles("divergent")
        legend(self._ax, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, handles=handles,
               labels=[h.get_label() for h in handles], fontsize=7)
        self._ax_err.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize=7)
        e = self._energy
        # The readout gives the replayed step's energy error; the panel's own verdict title
        # would repeat it at a second rounding and is the costliest artist of a replay frame.
        e.verdict.set_visible(False)
        self.set_dynamic([p.path, p.start, p.end, p.divergent, p.momentum, e.error, e.divergence,
                          self._offview])

    def _axis_names_all(self):
        bounded = self.target is not None and self.target.bounded
        suffix = " (sampler's scale)" if bounded else ""
        return tuple(n + suffix for n in self.names)

    def _axis_names(self):
        names = self._axis_names_all()
        return names[self.coords[0]], names[self.coords[1]]

    def _trajectory_limits(self, tr):
        """Limits that show the trajectory up to the step that diverged (when not far off)."""
        c = list(self.coords)
        pos = tr.positions[:, c]
        k = tr.divergence_step if tr.divergent else tr.n_steps
        safe = pos[:k] if tr.divergent else pos
        safe = safe[np.all(np.isfinite(safe), axis=1)]
        pts = safe
        tip = pos[k] if tr.divergent else None
        if tip is not None and np.all(np.isfinite(tip)) and len(safe):
            span = np.ptp(safe, axis=0).max() if len(safe) > 1 else 1.0
            # a tip far off would squash the trajectory into a dot; it is then drawn clipped
            if np.max(np.abs(tip - safe[-1])) <= 5.0 * max(span, 1e-6):
                pts = np.vstack([safe, tip])
        xlim, ylim = choose_limits(pts, coords=(0, 1), pad=0.2)
        return xlim, ylim

    def _grid(self, tr, xlim, ylim):
        """The log-density slice through the trajectory's start (cached per region)."""
        if self._grids is None:
            return None
        return self._grids.get(self.coords, tr.positions[0], xlim, ylim)

    # ---------------------------------------------------------------- the run
    def _refresh_run(self):
        """Re-read the run: scatter, list of divergences, readout."""
        run = self._run
        if run is None:
            return
        self._pair.update(run)
        self._collect_divergences(run)
        if self.ranking is None and self._remaining <= 0:  # a Target's sampling just finished
            self._rank_when_done(run)
        with self._sync():
            labels = [(self._label(i), i) for i in range(len(self.divergences))]
            self._pick_list.options = labels or [("no divergences", -1)]
            if labels:
                self._pick_list.value = self.selected if self.selected >= 0 else 0
            else:
                self._pick_list.value = -1
        self._pair_legend()
        if not self.divergences:
            self._note.set_text(
                "no divergent transition found yet ..." if self._remaining > 0 else
                "no divergent transitions in this run:\nnothing to replay\n\n"
                "(no divergence is no proof that the sampler\nhas explored the whole posterior)")
        if self.divergences and self.selected < 0:
            self.select(0)
        else:
            self._place_ring()
            self._write_readout()
            self.redraw(full=True)

    def _rank_when_done(self, run):
        self.ranking = divergence_ranking(run)
        self._fill_ranked_list()
        if self._auto_coords and not self.ranking.empty:
            self.coords = self.ranking.top_pair

    def _collect_divergences(self, run):
        first, n = run.first_draw, run.n_draws
        # in the order they happened, so indices stay put while more draws come in
        # entries read their replay's trajectory only when it is shown (see _Kept)
        kept = sorted((_Kept(item[0], item[1] - first, item) for item in run.divergences
                       if first <= item[1] < first + n), key=lambda e: (e.draw, e.chain))
        self.divergences = kept
        where = {(e.chain, e.draw): i for i, e in enumerate(kept)}
        if run.divergent is not None and run.n_draws:
            chains, draws = np.nonzero(np.asarray(run.divergent, dtype=bool))  # chain-major, as drawn
            self._marker_index = np.array([where.get((int(c), int(t)), -1)
                                           for c, t in zip(chains, draws)], dtype=int)
        else:
            self._marker_index = np.zeros(0, dtype=int)

    def _label(self, i):
        e = self.divergences[i]
        return f"{i + 1}: chain {e.chain}, draw {e.draw}, step {e.divergence_step}"  # short: never cut

    @contextmanager
    def _sync(self):
        """Set controls from the view without their observers acting on it."""
        self._syncing = True
        try:
            yield
        finally:
            self._syncing = False

    # -------------------------------------------------------------- selection
    def select(self, index):
        """Show divergence ``index`` (of ``divergences``) in full; its replay restarts from there."""
        if not self.divergences:
            self.status = "this run has no divergent transitions to replay"
            return
        if index == self.selected:
            self._show_selected()
        else:
            self.selected = index

    @traitlets.observe("selected")
    def _on_selected(self, change):
        if self._built and change["new"] >= 0:
            self._show_selected()

    @guarded("selection")
    def _show_selected(self):
        e = self.divergences[self.selected]
        c, t, tr = e.chain, e.draw, e.trajectory
        self.trajectory = tr
        end = self._end()
        first = self._path is None
        if first:
            self._make_replay_drawings(tr)
        with self._sync():
            self._pick_list.value = self.selected
        self._play.max = self._step_slider.max = end
        self._sync_controls()
        self._path.coords = tuple(self.coords)
        xlim, ylim = self._trajectory_limits(tr)
        grid = self._grid(tr, xlim, ylim)
        if self._density is not None:
            self._density.update(grid)
        self._ax.set_xlim(xlim)
        self._ax.set_ylim(ylim)
        names = self._axis_names()
        self._ax.set_xlabel(names[0])
        self._ax.set_ylabel(names[1])
        self._ax.set_title(f"replay of chain {c}, draw {t} (slice through its start)", loc="left",
                           fontsize=9)
        if self.replay_step != end:
            self.replay_step = end  # the observer draws it
        else:
            self._draw_replay()
        self._place_ring()
        self._write_readout()
        self.clear_status()
        self.redraw(full=True)

    def _place_ring(self):
        if self.selected < 0 or not self.divergences or self._run is None:
            self._ring.set_data([], [])
            return
        start = self.divergences[self.selected].trajectory.positions[0]  # where the transition began
        xy = self.target.to_user(start[None])[0, list(self.coords)]
        self._ring.set_data([xy[0]], [xy[1]])

    @guarded("pick")
    def _on_pick(self, event):
        """Select the divergence whose marker was picked (nearest to the click)."""
        if event.artist is not self._pair.divergent or not len(event.ind):
            return
        ind = np.asarray(event.ind, dtype=int)
        mouse = getattr(event, "mouseevent", None)
        if mouse is not None and mouse.x is not None and len(ind) > 1:
            xy = self._pair.divergent.get_xydata()[ind]
            px = self._ax_pair.transData.transform(xy)
            ind = ind[[int(np.argmin(np.hypot(px[:, 0] - mouse.x, px[:, 1] - mouse.y)))]]
        k = int(self._marker_index[ind[0]]) if ind[0] < len(self._marker_index) else -1
        if k < 0:
            self.status = "no replay was kept for that divergence (only the latest 500 are)"
            return
        self.select(k)

    # ----------------------------------------------------------------- replay
    def step(self, n=1):
        """Advance the replay by ``n`` leapfrog steps; at the end it starts over at step 0."""
        if self.trajectory is None:
            self.status = "no divergence to replay"
            return
        end = self._end()
        self.replay_step = 0 if self.replay_step >= end else min(self.replay_step + int(n), end)

    @traitlets.observe("replay_step")
    @guarded("replay")
    def _on_replay(self, change):
        if self._built and self.trajectory is not None:
            self._draw_replay()
            self._write_readout()
            self.redraw()

    @guarded("replay")
    def _draw_replay(self):
        upto = self.replay_step
        tr = self.trajectory
        self._path.update(tr, False, upto=upto)
        self._energy.update(tr, upto=upto)
        text = ""
        if tr.divergent and upto >= tr.divergence_step:
            tip = tr.positions[tr.divergence_step, list(self.coords)]
            (x0, x1), (y0, y1) = self._ax.get_xlim(), self._ax.get_ylim()
            if not np.all(np.isfinite(tip)):
                text = "the diverging step reached non-finite values"
            elif not (x0 <= tip[0] <= x1 and y0 <= tip[1] <= y1):
                text = (f"the diverging step leaves the view,\n"
                        f"to ({number(tip[0], 3)}, {number(tip[1], 3)})")
        self._offview.set_text(text)
        self._offview.set_visible(bool(text))  # an empty text still costs a layout per frame

    # ------------------------------------------------------------ coordinates
    @traitlets.observe("coords")
    def _on_coords(self, change):
        if not self._built:
            return
        self._auto_coords = False  # chosen now: a Target's finished sampling keeps them
        with self._sync():
            self._x_pick.value, self._y_pick.value = self.coords
            self._ranked_list.value = self._rank_of(self.coords)
        self._redo_coords()
        self._mark_grid()

    @guarded("coordinate change")
    def _redo_coords(self):
        self._pair.coords = tuple(self.coords)
        names = self.names
        self._ax_pair.set_xlabel(names[self.coords[0]])
        self._ax_pair.set_ylabel(names[self.coords[1]])
        if self._run is not None:
            self._pair.update(self._run)
        if self.trajectory is not None:
            step = self.replay_step
            self._show_selected()
            self.replay_step = step
        else:
            self._place_ring()
            self.redraw(full=True)

    # ---------------------------------------------------------------- readout
    def _write_readout(self):
        run = self._run
        caution = f"<br><span style='font-size:85%;color:#555'>{html.escape(CAUTION)}</span>"
        mono = "<span style='font-family:monospace'>{}</span>"
        if run is None:
            self._readout.value = mono.format("no draws yet") + caution
            return
        total = run.n_chains * run.n_draws
        busy = (f" (sampling: {run.n_draws} of {run.n_draws + self._remaining} draws per chain)"
                if self._remaining > 0 else "")
        n_div = run.n_divergent
        if n_div == 0:
            text = (f"no divergent transitions in {plural(run.n_chains, 'chain')} &times; "
                    f"{plural(run.n_draws, 'draw')}{busy}; nothing to replay")
            self._readout.value = mono.format(text) + caution
            return
        parts = [f"{plural(n_div, 'divergent transition')} of {total} "
                 f"({number(100 * n_div / max(total, 1), 2)} %){busy}"]
        if len(self.divergences) != n_div:
            parts.append(f"{len(self.divergences)} with replays")
        r = self.ranking
        if r is not None and not r.empty and tuple(self.coords) == r.top_pair:
            parts.append("coordinates where the divergences differ most from the other draws: "
                         + ", ".join(html.escape(self.names[k]) for k in r.top_pair))
        if self.trajectory is not None and self.selected >= 0:
            e = self.divergences[self.selected]
            c, t, tr = e.chain, e.draw, e.trajectory
            k = tr.divergence_step
            dh = float(tr.energy_error[k])
            dh_text = (f"&Delta;H = {'+' if dh > 0 else ''}{number(dh)}" if np.isfinite(dh)
                       else "&Delta;H not finite")
            parts.append(f"showing {self.selected + 1} of {len(self.divergences)}: chain {c}, "
                         f"draw {t}")
            parts.append(f"diverged at leapfrog step {k} of {tr.n_steps} "
                         f"(step size {number(tr.step_size, 3)}), {dh_text} "
                         f"(max energy error &plusmn;{number(tr.max_energy_error)})")
            now = float(tr.energy_error[self.replay_step])
            now_text = (f"{'+' if now > 0 else ''}{number(now)}" if np.isfinite(now)
                        else "not finite")
            parts.append(f"replay at step {self.replay_step} of {k}: &Delta;H = {now_text}")
        self._readout.value = mono.format(" | ".join(parts)) + caution

    # ---------------------------------------------------------------- settings
    def _extra_settings(self):
        return {} if self._sampling_settings is None else {"sampling": self._sampling_settings}

    EXTRA_SETTINGS = ("sampling",)

    def apply_settings(self, settings):
        """Restore coordinates, the divergence shown and the replay position."""
        s = self.checked_settings(settings)
        s.pop("sampling", None)  # used by from_settings; a built view keeps its draws
        replay = s.pop("replay_step", None)
        super().apply_settings(s)
        if replay is not None and self.trajectory is not None:
            self.replay_step = min(int(replay), self._end())
        return self

    @classmethod
    def from_run(cls, run, **kwargs):
        """Open on a Run (the same as ``DivergenceView(run, ...)``; named as the other views')."""
        if not isinstance(run, Run):
            raise TypeError(f"`run` must be a phaseglass Run (from pg.sample), got {type(run).__name__}")
        return cls(run, **kwargs)

    @classmethod
    def from_settings(cls, run_or_target, settings):
        """Build a view with saved ``settings`` (from ``view.settings``).

        For a Target, the saved sampling settings (draws, chains, warm-up, seed,
        kernel) are used, so the same draws are made again (at once).
        """
        s = cls.checked_settings(settings)
        kw = {"coords": tuple(s.get("coords", (0, 1)))}
        sampling = s.get("sampling")
        if isinstance(run_or_target, Target) and sampling is not None:
            kw.update({k: sampling[k] for k in ("n_draws", "n_chains", "warmup", "seed", "chunk")})
            kw["kernel"] = kernel_from_settings(sampling["kernel"])
            kw["background"] = False
        view = cls(run_or_target, **kw)
        return view.apply_settings(settings)


class _Kept:
    """One divergence as the view lists it: ``(chain, draw, Trajectory)`` when unpacked, ``draw``
    counted from the run's first kept draw. The run's replay is integrated only when its
    trajectory is read (a view of hundreds of divergences opens without replaying them all)."""

    __slots__ = ("chain", "draw", "_item")

    def __init__(self, chain, draw, item):
        self.chain, self.draw, self._item = int(chain), int(draw), item

    @property
    def divergence_step(self):
        step = getattr(self._item, "divergence_step", None)  # a lazy replay knows it unreplayed
        return self.trajectory.divergence_step if step is None else step

    @property
    def trajectory(self):
        return self._item[2]

    def __len__(self):
        return 3

    def __iter__(self):
        return iter((self.chain, self.draw, self.trajectory))

    def __getitem__(self, index):
        if index in (0, 1, -3, -2):  # chain and draw without replaying
            return (self.chain, self.draw, None)[index]
        return (self.chain, self.draw, self.trajectory)[index]
