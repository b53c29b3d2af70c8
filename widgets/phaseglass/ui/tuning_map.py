"""TuningMap: short runs over a grid of sampler knobs, computed in the background."""

import concurrent.futures
import functools
import html
import threading
import time

import ipywidgets as widgets
import numpy as np
import traitlets

from ..core._validate import MAX_STEPS, warn_renamed
from ..core.compare import (CellAborted, check_executor, pack, run_fixed, run_fixed_portable,
                            submit_packed)
from ..core.efficiency import ess_per_gradient, evaluation_cost, mean_acceptance
from ..core.kernels import HMC, PartialRefreshHMC, RandomWalk
from ..core.metric import Metric
from ..core.nuts import MAX_DEPTH_LIMIT, NUTS
from ..core.registry import KNOB_LABELS, kernel_kind
from ..core.run import CAUTION
from ..core.stop_signal import StopSignal
from ..draw import draw_knob_grid
from ._base import View, check_range, check_target, guarded, number, plural
from ._shared import pilot

__all__ = ["TuningMap", "measure_cell", "make_cell_kernel", "QUANTITIES"]

#: What a cell can show (the keys of ``TuningMap.values``).
QUANTITIES = ("acceptance", "divergence rate", "ESS per gradient")
#: Kernel kinds a map covers (short names of ``core.registry``).
KINDS = ("hmc", "partial", "walk", "nuts")

_LABELS = {
    "acceptance": "acceptance (mean acceptance probability)",
    "divergence rate": "divergence rate (share of transitions)",
    "ESS per gradient": "ESS per gradient (worst coordinate)",
}
_PROBABILITIES = ("acceptance", "divergence rate")  # shown on a fixed 0..1 colour scale
_FORMATS = {"acceptance": "{:.2f}", "divergence rate": "{:.2f}", "ESS per gradient": "{:.2g}"}
_DEFAULT_N_STEPS = (1, 2, 4, 8, 16, 32)
_DEFAULT_MAX_DEPTHS = (2, 4, 6, 8, 10)
_DEFAULT_PERSISTENCE = (0.0, 0.8, 0.95)
_DRAW_EVERY = 0.5  # seconds between canvas updates from the background thread


_Aborted = CellAborted  # a cell abandoned because its results are no longer wanted
_POLL = 0.1  # seconds between checks of the stop/abort flags while futures run


def make_cell_kernel(kind, column, row=1, persistence=None, uniform="fresh", metric=None):
    """The kernel a cell runs: fixed knobs, no jitter, the given mass matrix (identity by default).

    Parameters
    ----------
    kind : {"hmc", "partial", "walk", "nuts"}
        Kernel kind (short name of ``core.registry``).
    column : float
        The column's knob: the step size, or the proposal scale for ``"walk"``.
    row : int
        The row's knob: leapfrog steps per transition, NUTS's ``max_depth``
        (ignored by ``"walk"``: one proposal per transition).
    persistence : float, optional
        Momentum persistence of ``"partial"``.
    uniform : {"fresh", "drifting"}
        Not used by ``"nuts"``.
    metric : Metric, optional
        Mass matrix of every cell (a random walk's proposal covariance); identity when None.
    """
    kind = kernel_kind(kind, among=KINDS).short
    if kind == "hmc":
        # no step-size jitter: the cell shows exactly its knobs (HMC's default 10% jitter
        # would blur neighbouring columns)
        return HMC(column, row, jitter=0.0, uniform=uniform, metric=metric)
    if kind == "partial":
        return PartialRefreshHMC(column, row, persistence, uniform=uniform, metric=metric)
    if kind == "nuts":
        return NUTS(column, row, metric=metric)
    return RandomWalk(column, uniform=uniform, metric=metric)


def cell_quantities(run):
    """Acceptance, divergence rate and ESS per gradient of one short Run.

    * ``acceptance``: ``mean_acceptance(run)``, the mean acceptance probability
      ``min(1, exp(-dH))`` over all transitions and chains (0 for a divergence).
    * ``divergence rate``: share of transitions that diverged.
    * ``ESS per gradient``: the smallest bulk ESS over the coordinates divided by
      the gradient evaluations of the kept transitions (log-density evaluations for
      a gradient-free kernel). A run in which some chain never moved gets 0: a stuck
      chain is not mixing, whatever the between-chain spread says.
    """
    acc = mean_acceptance(run)
    div = float(np.mean(run.divergent))
    per = ess_per_gradient(run, cost=evaluation_cost(run)[0])
    return {"acceptance": acc, "divergence rate": div, "ESS per gradient": per}


def measure_cell(target, kernel, *, n_draws, n_chains, burn_in=0, seed=0, initial=None,
                 should_abort=None):
    """One short run with fixed knobs; returns ``{quantity: float}`` (see ``cell_quantities``).

    Parameters
    ----------
    target : Target
    kernel : Kernel
        Used as given (build a fresh one per cell with ``make_cell_kernel``).
    n_draws, n_chains : int
    burn_in : int
        Transitions run with the same knobs and discarded before the kept draws
        (no tuning of anything).
    seed : int
    initial : array_like, shape (n_chains, dim), optional
        User-scale starts; random starts when None.
    should_abort : callable, optional
        Polled every few transitions; when it returns True the cell is abandoned.

    Examples
    --------
    >>> import phaseglass as pg
    >>> k = make_cell_kernel("hmc", 0.3, 5)
    >>> q = measure_cell(pg.demos.correlated_gaussian(), k, n_draws=50, n_chains=2, seed=1)
    >>> sorted(q)
    ['ESS per gradient', 'acceptance', 'divergence rate']
    """
    run = run_fixed(target, kernel, n_draws=n_draws, n_chains=n_chains, burn_in=burn_in,
                    seed=seed, initial=initial, should_abort=should_abort)
    return cell_quantities(run)


def _round3(values):
    return [float(f"{v:.3g}") for v in values]


class _Job:
    """One pass over the cells; a newer job makes an older one's results stale."""

    def __init__(self, cells, config):
        self.cells = cells
        self.config = config
        self.stop = threading.Event()   # finish the current cell, then stop
        self.abort = threading.Event()  # abandon at once (results unwanted)
        self.thread = None


class TuningMap(View):
    """A heat map of short runs over two kernel knobs, computed in the background.

    Columns are step sizes (a random walk's proposal scales); rows are leapfrog
    steps per transition (NUTS: its ``max_depth``, the most doublings).

    Each cell is a short run of the chosen kernel with fixed knobs (no warm-up,
    no step-size jitter, identity metric): ``burn_in`` transitions are run and
    discarded, then ``n_draws`` are kept per chain. All cells share one seed
    (common random numbers) and start from the same points, the last draws of a
    short pilot run (HMC, 150 warm-up transitions), so differences between cells
    come from the knobs rather than from luck or from the start. Each cell then
    shows one of

    * ``"acceptance"``: mean acceptance probability,
    * ``"divergence rate"``: share of divergent transitions,
    * ``"ESS per gradient"``: smallest bulk ESS over the coordinates per gradient
      evaluation (per log-density evaluation for ``kernel_kind="walk"``),

    chosen with the ``quantity`` trait (recolouring, never recomputing). A
    square outlines the best cell: highest ESS per gradient; acceptance closest
    to the kind's target acceptance in ``core.registry`` (0.8 for HMC and NUTS,
    0.9 with partial refresh, 0.234 for a random walk); lowest divergence rate. Ties go to the higher ESS per
    gradient. Short runs give noisy numbers: use the map to find the region
    worth a closer look, then click a cell to open it in a ``TrajectoryView``
    (or a ``ChainView`` with ``opens="chain"``) below the map.

    With ``kernel_kind="partial"`` the momentum persistence is a third knob: every
    value in ``persistence`` is computed, and a dropdown (the
    ``persistence_index`` trait) picks the slice shown. A dropdown rather than
    small multiples keeps every cell large enough to read and click.

    The cells are computed one by one in a background thread, so the notebook
    stays usable; a progress bar counts them and a Stop button (``stop()``)
    ends the pass within one transition (the cell being computed stays blank). ``compute(background=False)`` runs
    in the calling thread (scripts, tests). Changing a setting discards the
    results and, with ``autorun`` (the default), starts a new pass.

    The cells are independent runs, so they can also run on an ``executor``
    (any ``concurrent.futures.Executor``: a ``ProcessPoolExecutor``, or a
    cluster's ``dask.distributed.Client(address).get_executor()``). Every cell
    is then submitted as a future and the map fills in as they finish, with
    the same numbers as computed here. The target travels to the workers
    pickled with cloudpickle (when installed; lambdas and closures travel too);
    one that cannot be pickled is refused when the map is built. Stop cancels
    the cells not yet started, and a cell already running on a worker stops
    there within about 0.1 s plus one transition (the cell stays blank, as
    here). On a Dask executor the stop request travels through the scheduler;
    on any other, through a flag file, so a worker on another machine does not
    see it and finishes its cell, whose result is then discarded.

    Parameters
    ----------
    target : Target
    kernel_kind : {"hmc", "partial", "walk", "nuts"}
        Kernel kind of every cell (short name of ``core.registry``).
        ``kernel=`` is the deprecated former name (one more release, with a
        DeprecationWarning; with it, ``step_sizes`` of a walk are taken as ``scales``).
    step_sizes : sequence of float, optional
        Columns of the leapfrog kinds. Default: six values from 1/8 to 4 times the
        step size a pilot run tunes to an acceptance of 0.8.
    scales : sequence of float, optional
        Columns of ``"walk"``: proposal scales; default six values around
        2.38 sd / sqrt(dim).
    n_steps : sequence of int, optional
        Rows of ``"hmc"`` and ``"partial"``. Default (1, 2, 4, 8, 16, 32); ``(1,)`` for ``"walk"``.
    max_depths : sequence of int, optional
        Rows of ``"nuts"``; default (2, 4, 6, 8, 10).
    persistence : sequence of float in [0, 1), optional
        Only for ``kernel_kind="partial"``; default (0, 0.8, 0.95).
    n_draws, n_chains, burn_in : int
        Size of every cell's run.
    seed : int
    quantity : {"acceptance", "divergence rate", "ESS per gradient"}
        (``metric=`` is its deprecated former name, kept one more release with a
        DeprecationWarning: "metric" means the mass matrix everywhere else.)
    uniform : {"fresh", "drifting"}
        Source of the accept/reject uniform of every cell's kernel.
    opens : {"trajectory", "chain"}
        What clicking a cell opens (a random walk or NUTS always opens a ChainView).
    persistence_index : int
        Which persistence slice is shown.
    autorun : bool
        Start computing in the background right away and after every change.
    mass_matrix : Metric, optional
        Mass matrix of every cell's kernel (e.g. ``run.kernel.metric``; see also
        ``TuningMap.from_run``). Identity when None, as before; step sizes are then
        on the unscaled coordinates.
    executor : concurrent.futures.Executor, optional
        Where the cells run; None (the default) computes them one by one in the
        background thread. Not part of ``settings``.

    Attributes
    ----------
    values : dict of str -> ndarray, shape (n_rows, n_columns)
        Each quantity on the shown slice; NaN for cells not (successfully) computed.
    values_all : dict of str -> ndarray, shape (n_slices, n_rows, n_columns)
        Every persistence slice (one slice unless ``kernel_kind="partial"``).
    opened : View or None
        The view opened by the latest click.
    figure : matplotlib.figure.Figure

    Examples
    --------
    >>> import phaseglass as pg
    >>> m = pg.TuningMap(pg.demos.correlated_gaussian(), step_sizes=[0.1, 0.3], n_steps=[1, 8],
    ...                  n_draws=60, n_chains=2, autorun=False)
    >>> m.compute(background=False).values["acceptance"].shape
    (2, 2)
    >>> m.quantity = "ESS per gradient"     # recolours, does not recompute
    """

    kernel_kind = traitlets.Enum(KINDS, "hmc", help="Kernel kind of every cell.").tag(setting=True)
    step_sizes = traitlets.List(traitlets.Float(), help="Step sizes (columns).").tag(setting=True)
    scales = traitlets.List(traitlets.Float(),
                            help="Proposal scales (columns of kernel_kind 'walk').").tag(setting=True)
    n_steps = traitlets.List(traitlets.Int(), help="Leapfrog steps per transition (rows).").tag(
        setting=True)
    max_depths = traitlets.List(traitlets.Int(),
                                help="NUTS max_depth values (rows of kernel_kind 'nuts').").tag(
        setting=True)
    persistence = traitlets.List(
        traitlets.Float(), help="Momentum persistence values (kernel_kind 'partial' only)."
    ).tag(setting=True)
    persistence_index = traitlets.Int(
        0, help="Which persistence value the heat map shows (index into `persistence`)."
    ).tag(setting=True)
    n_draws = traitlets.Int(150, help="Draws kept per chain in every cell.").tag(setting=True)
    n_chains = traitlets.Int(4, help="Chains per cell.").tag(setting=True)
    burn_in = traitlets.Int(
        25, help="Transitions run with the cell's knobs and discarded before the kept draws."
    ).tag(setting=True)
    seed = traitlets.Int(0, help="Seed shared by every cell (common random numbers).").tag(
        setting=True)
    quantity = traitlets.Enum(QUANTITIES, "acceptance", help="What the cells show.").tag(
        setting=True)
    uniform = traitlets.Enum(("fresh", "drifting"), "fresh",
                             help="Accept/reject uniform of the kernels.").tag(setting=True)
    opens = traitlets.Enum(("trajectory", "chain"), "trajectory",
                           help="What clicking a cell opens.").tag(setting=True)

    _CONFIG = ("kernel_kind", "step_sizes", "scales", "n_steps", "max_depths", "persistence",
               "n_draws", "n_chains", "burn_in", "seed", "uniform")
    RENAMED_SETTINGS = {"kernel": "kernel_kind"}

    def __init__(self, target, *, kernel_kind="hmc", step_sizes=None, scales=None, n_steps=None,
                 max_depths=None, persistence=None, n_draws=150, n_chains=4, burn_in=25, seed=0,
                 quantity="acceptance", uniform="fresh", opens="trajectory", persistence_index=0,
                 autorun=True, mass_matrix=None, executor=None, kernel=None, metric=None):
        check_target(target)
        if kernel is not None:
            warn_renamed("kernel", "kernel_kind")
            kernel_kind = kernel
            if kernel == "walk" and scales is None:  # the former columns of a walk
                scales, step_sizes = step_sizes, None
        if kernel_kind not in KINDS:
            raise ValueError(f"`kernel_kind` must be one of {KINDS}, got {kernel_kind!r}")
        #: Where the cells run (None: here, in the background thread). Not part of ``settings``.
        self.executor = check_executor(executor)
        # pickled once, here, so a target that cannot travel is refused at once
        self._target_blob = None if executor is None else pack(target, "target")
        if mass_matrix is not None:
            if not isinstance(mass_matrix, Metric):
                raise ValueError("`mass_matrix` must be a pg.Metric (e.g. run.kernel.metric or "
                                 f"pg.Metric(variances)), got {type(mass_matrix).__name__}")
            try:
                mass_matrix.check_dim(target.dim, name="mass_matrix")
            except ValueError as exc:
                raise ValueError(str(exc)) from None
        #: Mass matrix of every cell's kernel (None: identity). Not part of ``settings``.
        self.mass_matrix = mass_matrix
        if metric is not None:
            warn_renamed("metric", "quantity")
            if metric not in QUANTITIES:
                raise ValueError(f"`metric` (former name of `quantity`) must be one of "
                                 f"{QUANTITIES}, got {metric!r}")
            quantity = metric
        for name, value, kinds in (("persistence", persistence, ("partial",)),
                                   ("scales", scales, ("walk",)),
                                   ("max_depths", max_depths, ("nuts",)),
                                   ("step_sizes", step_sizes, ("hmc", "partial", "nuts"))):
            if value is not None and kernel_kind not in kinds:
                raise ValueError(f"`{name}` is a knob of kernel_kind {' or '.join(map(repr, kinds))}, "
                                 f"not {kernel_kind!r}")
        if kernel_kind in ("walk", "nuts") and n_steps is not None and list(n_steps) != [1]:
            raise ValueError(f"kernel_kind={kernel_kind!r} has no fixed leapfrog steps: `n_steps` "
                             f"must be None or [1], got {list(n_steps)}")
        self.target = target
        self.autorun = bool(autorun)
        self.opened = None
        self._built = False
        self._lock = threading.RLock()  # artists and result arrays: worker vs. main thread
        self._job = None
        self._config_key = None
        super().__init__(figsize=(7.0, 4.4))
        with self.hold_trait_notifications():
            self.kernel_kind = kernel_kind
            self.n_draws = n_draws
            self.n_chains = n_chains
            self.burn_in = burn_in
            self.seed = seed
            self.quantity = quantity
            self.uniform = uniform
            self.opens = opens
            self.n_steps = list(n_steps) if n_steps is not None else (
                [1] if kernel_kind in ("walk", "nuts") else list(_DEFAULT_N_STEPS))
            self.max_depths = (list(max_depths) if max_depths is not None else
                               list(_DEFAULT_MAX_DEPTHS) if kernel_kind == "nuts" else [])
            self.persistence = (list(persistence) if persistence is not None else
                                list(_DEFAULT_PERSISTENCE) if kernel_kind == "partial" else [])
            self.scales = (list(scales) if scales is not None else
                           self._default_columns("walk") if kernel_kind == "walk" else [])
            self.step_sizes = (list(step_sizes) if step_sizes is not None else
                               self._default_columns("hmc") if kernel_kind != "walk" else [])
            self.persistence_index = persistence_index
        self._lock_canvas()
        self._build_controls()
        self._reset_arrays()
        self._build_drawing()
        self._config_key = self._current_config()
        self._built = True
        self._refresh()
        self.figure.canvas.mpl_connect("button_press_event", self._on_press)
        if self.autorun:
            self.compute()

    # ------------------------------------------------------------ validation
    @traitlets.validate("step_sizes", "scales")
    def _check_columns(self, proposal):
        v = [float(x) for x in proposal["value"]]
        name = proposal["trait"].name
        used = (name == "scales") == (self.kernel_kind == "walk")
        if (used and not v) or not all(np.isfinite(x) and x > 0 for x in v):
            raise traitlets.TraitError(
                f"`{name}` must be a non-empty list of numbers > 0, got {v}")
        return v

    @traitlets.validate("max_depths")
    def _check_max_depths(self, proposal):
        v = list(proposal["value"])
        if not all(1 <= int(x) <= MAX_DEPTH_LIMIT for x in v):
            raise traitlets.TraitError(
                f"`max_depths` must be a list of integers in [1, {MAX_DEPTH_LIMIT}], got {v}")
        return [int(x) for x in v]

    @traitlets.validate("n_steps")
    def _check_n_steps(self, proposal):
        v = list(proposal["value"])
        if not v or not all(1 <= int(x) <= MAX_STEPS for x in v):
            raise traitlets.TraitError(
                f"`n_steps` must be a non-empty list of integers in [1, {MAX_STEPS}], got {v}")
        return [int(x) for x in v]

    @traitlets.validate("persistence")
    def _check_persistence(self, proposal):
        v = [float(x) for x in proposal["value"]]
        if not all(0.0 <= x < 1.0 for x in v):
            raise traitlets.TraitError(f"`persistence` values must lie in [0, 1), got {v}")
        return v

    _RANGES = {"n_draws": (4, None, "[]"), "n_chains": (1, None, "[]"),
               "burn_in": (0, None, "[]"), "seed": (0, None, "[]")}

    @traitlets.validate(*_RANGES)
    def _check_knob(self, proposal):
        return check_range(proposal, self._RANGES)

    @traitlets.validate("persistence_index")
    def _check_index(self, proposal):
        v = proposal["value"]
        n = len(self.persistence) if self.kernel_kind == "partial" else 1
        if not 0 <= v < max(n, 1):
            raise traitlets.TraitError(
                f"`persistence_index` must be in range({max(n, 1)}), got {v}")
        return v

    # ----------------------------------------------------------- the pilot
    def _pilot(self):
        """The shared pilot run of the target (one start per chain), or None when it failed.

        Every cell starts from its chains' last draws, so cells differ by their knobs,
        not by their starts. A failure goes to the status line and cells start from
        random points instead (failures are not cached: a fixed model gets its pilot).
        """
        found = pilot(self.target, seed=self.seed, n_chains=self.n_chains)
        if not found.ok:
            self.report_error("pilot run (cells start from random points)", found.error)
            return None
        return found

    def _default_columns(self, kind):
        """Six step sizes (or proposal scales for ``"walk"``) around the pilot run's."""
        pilot = self._pilot()
        if pilot is None:
            return _round3(np.geomspace(0.01, 1.0, 6))
        if kind == "walk":
            sd = float(np.median(pilot.sd))
            centre = 2.38 * max(sd, 1e-8) / np.sqrt(self.target.dim)
        else:
            centre = pilot.step_size
        return _round3(centre * 2.0 ** np.arange(-3, 3))

    # ------------------------------------------------------------- controls
    def _build_controls(self):
        self._quantity_pick = widgets.ToggleButtons(options=list(QUANTITIES), value=self.quantity,
                                                    style={"button_width": "auto"})
        self._quantity_pick.add_class("pg-quantity")
        self._quantity_pick.add_class("pg-primary")  # the browser test moves it: a recolour
        traitlets.link((self._quantity_pick, "value"), (self, "quantity"))
        self._slice_pick = widgets.Dropdown(description="persistence",
                                            layout=widgets.Layout(width="220px"))
        self._slice_pick.add_class("pg-persistence-slice")
        self._sync_slice_options()
        traitlets.link((self._slice_pick, "value"), (self, "persistence_index"))
        self._run_button = widgets.Button(description="run", icon="play",
                                          tooltip="compute the cells not yet computed")
        self._run_button.add_class("pg-run")
        self._run_button.on_click(lambda _: self._run_clicked())
        self._stop_button = widgets.Button(description="stop", icon="stop", disabled=True,
                                           tooltip="stop now (the cell being computed stays blank)")
        self._stop_button.add_class("pg-stop")
        self._stop_button.on_click(lambda _: self.stop())
        self._progress = widgets.IntProgress(value=0, min=0, max=1, description="cells",
                                             bar_style="info")
        self._progress.add_class("pg-progress")
        self._readout = widgets.HTML()
        self._readout.add_class("pg-tuning-readout")
        self._slot = widgets.VBox()
        self._slot.add_class("pg-tuning-opened")
        wrap = widgets.Layout(flex_flow="row wrap", align_items="center")  # never past 800 px
        self.children = [
            widgets.HBox([self._quantity_pick, self._slice_pick], layout=wrap),
            widgets.HBox([self._run_button, self._stop_button, self._progress], layout=wrap),
            self.figure.canvas, self._readout, self._status_html, self._slot,
        ]

    def _sync_slice_options(self):
        if self.kernel_kind == "partial" and self.persistence:
            self._slice_pick.options = [(number(a), k) for k, a in enumerate(self.persistence)]
            self._slice_pick.value = min(self.persistence_index, len(self.persistence) - 1)
            self._slice_pick.layout.display = None
        else:
            self._slice_pick.options = [("-", 0)]
            self._slice_pick.value = 0
            self._slice_pick.layout.display = "none"

    def _run_clicked(self):
        if not self._pending().any():
            self.status = "every cell is computed; change a setting to compute a new map"
            return
        self.compute(resume=True)

    # --------------------------------------------------------------- arrays
    def _slices(self):
        """Persistence of each slice (None when the kernel has no persistence)."""
        if self.kernel_kind == "partial" and self.persistence:
            return list(self.persistence)
        return [None]

    def _columns(self):
        """The column knob's values: step sizes, or proposal scales for a random walk."""
        return list(self.scales if self.kernel_kind == "walk" else self.step_sizes)

    def _rows(self):
        """The row knob's values: leapfrog steps, or NUTS's max depths."""
        return list(self.max_depths if self.kernel_kind == "nuts" else self.n_steps)

    def _reset_arrays(self):
        shape = (len(self._slices()), len(self._rows()), len(self._columns()))
        with self._lock:
            self._arrays = {q: np.full(shape, np.nan) for q in QUANTITIES}
            self._state = np.zeros(shape, dtype=np.int8)  # 0 pending, 1 done, 2 failed

    def _pending(self):
        return self._state != 1

    @property
    def values(self):
        """``{quantity: ndarray (n_rows, n_columns)}`` of the shown slice (copies)."""
        with self._lock:
            k = min(self.persistence_index, self._state.shape[0] - 1)
            return {q: a[k].copy() for q, a in self._arrays.items()}

    @property
    def values_all(self):
        """``{quantity: ndarray (n_slices, n_rows, n_columns)}`` (copies)."""
        with self._lock:
            return {q: a.copy() for q, a in self._arrays.items()}

    @property
    def n_cells(self):
        """Number of cells over all slices."""
        return int(self._state.size)

    @property
    def n_done(self):
        """Cells computed (successfully or not) in the current results."""
        return int(np.count_nonzero(self._state))

    @property
    def running(self):
        """Whether a background pass is still going."""
        job = self._job
        return bool(job is not None and job.thread is not None and job.thread.is_alive())

    # ------------------------------------------------------------ computing
    def _current_config(self):
        return tuple(tuple(v) if isinstance(v, list) else v
                     for v in (getattr(self, n) for n in self._CONFIG))

    def compute(self, background=True, *, resume=False):
        """Compute the cells: in a background thread (default) or in this one.

        Parameters
        ----------
        background : bool
            Run in a daemon thread and return at once (``wait()`` joins it).
        resume : bool
            Only compute cells not yet done (after ``stop()``, or to retry cells
            that failed); by default every cell is recomputed.

        Returns
        -------
        TuningMap
            ``self``.
        """
        self._cancel()
        if not resume:
            self._reset_arrays()
        config = {n: getattr(self, n) for n in self._CONFIG}
        config["slices"] = self._slices()
        config["columns"], config["rows"] = self._columns(), self._rows()
        config["mass_matrix"] = self.mass_matrix
        cells = [tuple(int(c) for c in idx) for idx in np.argwhere(self._pending())]
        # the shown slice first: that is what the user is looking at
        shown = self.persistence_index
        cells.sort(key=lambda c: (c[0] != shown, c[0], c[1], c[2]))
        job = _Job(cells, config)
        with self._lock:
            self._job = job
            self._state[self._pending()] = 0
        self.clear_status()
        if background:
            job.thread = threading.Thread(target=self._work, args=(job, True), daemon=True,
                                          name="phaseglass-tuning-map")
            job.thread.start()
            self._refresh()
        else:
            self._refresh()
            self._work(job, False)
        return self

    def stop(self):
        """Stop the background pass within one transition; unfinished cells stay NaN.

        With an ``executor``: cells not yet started are cancelled, and a cell running
        on a worker stops there within about 0.1 s plus one transition
        (``core/stop_signal.py``; on a non-Dask executor whose workers are on other
        machines it finishes unseen and its result is ignored).
        """
        job = self._job
        if job is not None:
            job.stop.set()
        return self

    def wait(self, timeout=None):
        """Join the background pass; True when it has finished (False on timeout)."""
        job = self._job
        if job is None or job.thread is None:
            return True
        job.thread.join(timeout)
        return not job.thread.is_alive()

    def _cancel(self):
        """Abandon the current pass at once; whatever it still computes is discarded."""
        with self._lock:
            job, self._job = self._job, None
        if job is not None:
            job.abort.set()

    def _work(self, job, background):
        last_draw = time.perf_counter()
        try:
            pilot = self._pilot()
            initial = None if pilot is None else pilot.initial
            if self.executor is not None:
                self._work_on_executor(job, background, initial)
                return
            for k, i, j in job.cells:
                if job.stop.is_set() or job.abort.is_set():
                    break
                self._compute_cell(job, k, i, j, initial)
                if background and time.perf_counter() - last_draw > _DRAW_EVERY:
                    self._refresh(draw=True)
                    last_draw = time.perf_counter()
        except Exception as exc:  # never let a thread die silently
            self.report_error("tuning map", exc)
        finally:
            if self._job is job:
                try:
                    self._refresh(draw=background, finished=True)
                    if not background:
                        self.redraw(full=True)
                except Exception as exc:
                    self.report_error("tuning map redraw", exc)

    @staticmethod
    def _cell_kernel(c, k, i, j):
        return make_cell_kernel(c["kernel_kind"], c["columns"][j], c["rows"][i], c["slices"][k],
                                c["uniform"], metric=c.get("mass_matrix"))

    def _compute_cell(self, job, k, i, j, initial):
        c = job.config
        kernel = self._cell_kernel(c, k, i, j)
        try:
            out = measure_cell(self.target, kernel, n_draws=c["n_draws"], n_chains=c["n_chains"],
                               burn_in=c["burn_in"], seed=c["seed"], initial=initial,
                               should_abort=lambda: job.abort.is_set() or job.stop.is_set())
            error = None
        except _Aborted:
            return
        except Exception as exc:  # user code (their log-density) can raise anything
            out, error = None, exc
        self._store_cell(job, k, i, j, out, error)

    def _work_on_executor(self, job, background, initial):
        """Submit every cell as a future; store results as they finish; Stop cancels the rest.

        Workers return the cell's Run (without its target) and the quantities are
        computed here by ``cell_quantities``, the same function as for a cell
        computed in this process, so the numbers are the same.
        """
        c = job.config
        futures = {}
        stop = StopSignal(self.executor)
        try:
            for k, i, j in job.cells:
                if job.stop.is_set() or job.abort.is_set():
                    break
                fut = submit_packed(
                    self.executor, self._target_blob, run_fixed_portable,
                    (self._cell_kernel(c, k, i, j),),
                    {"n_draws": c["n_draws"], "n_chains": c["n_chains"], "burn_in": c["burn_in"],
                     "seed": c["seed"], "initial": initial, "should_abort": stop.watch})
                futures[fut] = (k, i, j)
            pending = set(futures)
            last_draw = time.perf_counter()
            while pending and not (job.stop.is_set() or job.abort.is_set()):
                done, pending = concurrent.futures.wait(
                    pending, timeout=_POLL, return_when=concurrent.futures.FIRST_COMPLETED)
                for fut in done:
                    try:
                        out, error = cell_quantities(fut.result()), None
                    except concurrent.futures.CancelledError:
                        # not by us (we cancel only after leaving this loop): the executor
                        # dropped the cell, e.g. a cluster shutting down
                        out, error = None, RuntimeError("the executor cancelled this cell")
                    except Exception as exc:  # user code, or the worker itself, failed
                        out, error = None, exc
                    self._store_cell(job, *futures[fut], out, error)
                if background and done and time.perf_counter() - last_draw > _DRAW_EVERY:
                    self._refresh(draw=True)
                    last_draw = time.perf_counter()
        finally:
            # Stop, a settings change or an error: cells not started are not wanted, and
            # running ones are asked to stop (their results would be ignored anyway)
            for fut in futures:
                fut.cancel()
            if not all(fut.done() for fut in futures):
                stop.set()

    def _store_cell(self, job, k, i, j, out, error):
        c = job.config
        with self._lock:
            if self._job is not job:
                return  # stale: settings changed while this cell ran
            for q in QUANTITIES:
                self._arrays[q][k, i, j] = np.nan if out is None else out[q]
            self._state[k, i, j] = 1 if out is not None else 2
        if error is not None:
            self.report_error(f"cell {self._cell_name(c, k, i, j)}; the cell is left blank", error)
        else:
            self._refresh()

    @staticmethod
    def _cell_name(c, k, i, j):
        kind, column, row = c["kernel_kind"], c["columns"][j], c["rows"][i]
        if kind == "walk":
            return f"{KNOB_LABELS['scale']} {number(column, 3)}"
        name = f"{KNOB_LABELS['step_size']} {number(column, 3)}, "
        name += (f"{KNOB_LABELS['max_depth']} {row}" if kind == "nuts" else
                 plural(row, "leapfrog step"))
        if c["slices"][k] is not None:
            name += f", persistence {number(c['slices'][k])}"
        return name

    def _shown(self):
        """Config-like dict of the shown map (for ``_cell_name``)."""
        return {"kernel_kind": self.kernel_kind, "columns": self._columns(), "rows": self._rows(),
                "slices": self._slices()}

    # -------------------------------------------------------------- settings
    @traitlets.observe(*_CONFIG)
    def _on_config(self, change):
        if self._built:
            self._reconfigure()

    @guarded("settings change")
    def _reconfigure(self):
        # keep the knobs consistent with the kernel (these assignments re-enter here once)
        kind = self.kernel_kind
        if kind in ("walk", "nuts") and self.n_steps != [1]:
            self.n_steps = [1]  # no fixed number of leapfrog steps
        if kind == "partial" and not self.persistence:
            self.persistence = list(_DEFAULT_PERSISTENCE)
        if kind == "nuts" and not self.max_depths:
            self.max_depths = list(_DEFAULT_MAX_DEPTHS)
        if kind == "walk" and not self.scales:
            self.scales = self._default_columns("walk")
        if kind != "walk" and not self.step_sizes:
            self.step_sizes = self._default_columns(kind)
        key = self._current_config()
        if key == self._config_key:
            return  # a batch of notifications for one change (hold_trait_notifications)
        self._config_key = key
        self._cancel()
        with self.hold_trait_notifications():
            n = len(self._slices())
            if self.persistence_index >= n:
                self.persistence_index = 0
        self._sync_slice_options()
        self._reset_arrays()
        self._build_drawing()
        self.opened = None
        self._slot.children = []
        if self.autorun:
            self.compute()
        else:
            self._refresh()
            self.redraw(full=True)

    @traitlets.observe("quantity", "persistence_index")
    def _on_view_choice(self, change):
        if self._built:
            self._recolour()

    @guarded("recolour")
    def _recolour(self):
        self._refresh()
        self.redraw(full=True)

    @classmethod
    def from_run(cls, run, **kwargs):
        """A map around a Run's tuning: its target, kernel kind and mass matrix, and step
        sizes from 1/8 to 8 times its tuned step size (the tuned one in the middle column).

        The run's own number of steps is added to the default rows. Any other argument of
        TuningMap may be given and wins over the run's values.
        """
        from .trajectory_view import run_parts

        target, kernel = run_parts(run, needs_step_size=False)
        try:
            kind = kernel_kind(kernel, among=KINDS).short
        except ValueError:
            titles = ", ".join(kernel_kind(k).title for k in KINDS)
            raise ValueError(f"`run` used a {type(kernel).__name__}; a TuningMap covers {titles}"
                             ) from None
        if kwargs.get("kernel_kind", kind) != kind or kwargs.get("kernel", kind) != kind:
            raise ValueError(f"`run` used kernel kind {kind!r}: a map from it maps that kind")
        columns = _round3(float(getattr(kernel, kernel.tuned_knob)) * 2.0 ** np.arange(-3, 4))
        args = {"kernel_kind": kind, "mass_matrix": kernel.metric,
                ("scales" if kind == "walk" else "step_sizes"): columns}
        if kind in ("hmc", "partial"):
            args["n_steps"] = sorted(set(_DEFAULT_N_STEPS) | {int(kernel.n_steps)})
        if kind == "nuts":
            args["max_depths"] = sorted(set(_DEFAULT_MAX_DEPTHS) | {int(kernel.max_depth)})
        args.update(kwargs)
        return cls(target, **args)

    @classmethod
    def from_settings(cls, target, settings, *, autorun=True, executor=None):
        """Build a map on ``target`` with saved ``settings`` (from ``map.settings``)."""
        s = cls.checked_settings(settings)
        kind = s.get("kernel_kind", "hmc")
        for name, kinds in (("persistence", ("partial",)), ("scales", ("walk",)),
                            ("max_depths", ("nuts",)), ("step_sizes", ("hmc", "partial", "nuts"))):
            if kind not in kinds:
                s.pop(name, None)
        return cls(target, autorun=autorun, executor=executor, **s)

    # ---------------------------------------------------------------- figure
    def _lock_canvas(self):
        """Make every draw of this canvas (front-end requests included) take the lock.

        The worker thread changes artists between cells; a draw requested by the
        front end runs in the kernel's main thread and must not see half an update.
        """
        canvas = self.figure.canvas
        unlocked = canvas.draw

        @functools.wraps(unlocked)
        def draw(*args, **kwargs):
            with self._lock:
                return unlocked(*args, **kwargs)

        canvas.draw = draw

    def _labels(self):
        if self.kernel_kind == "walk":
            return KNOB_LABELS["scale"], "proposals per transition"
        if self.kernel_kind == "nuts":
            return "step size \u03b5", KNOB_LABELS["max_depth"]
        return "step size \u03b5", "leapfrog steps L"

    def _build_drawing(self):
        with self._lock:
            fig = self.figure
            fig.clear()
            self._ax = fig.add_subplot()
            q = self.quantity
            x_label, y_label = self._labels()
            self._drawing = draw_knob_grid(
                self._ax, self.values[q], self._columns(), self._rows(), x_label=x_label,
                y_label=y_label, value_label=_LABELS[q], fmt=_FORMATS[q], best=None)
            self._drawing.best.set_label("best cell")

    def best_cell(self, quantity=None):
        """``(i, j, value)`` of the best cell of the shown slice, or None when none is done.

        ``i`` indexes the rows (``n_steps``, or ``max_depths`` for NUTS), ``j`` the
        columns (``step_sizes``, or ``scales`` for a random walk).
        """
        q = quantity or self.quantity
        if q not in QUANTITIES:
            raise ValueError(f"`quantity` must be one of {QUANTITIES}, got {q!r}")
        v = self.values
        value = v[q]
        ok = np.isfinite(value)
        if not ok.any():
            return None
        if q == "ESS per gradient":
            score = value
        elif q == "acceptance":
            score = -np.abs(value - kernel_kind(self.kernel_kind).target_accept)
        else:
            score = -value
        tie = np.nan_to_num(v["ESS per gradient"], nan=-np.inf)
        rows, cols = np.nonzero(ok)
        best = np.lexsort((tie[rows, cols], score[rows, cols]))[-1]
        i, j = int(rows[best]), int(cols[best])
        return i, j, float(value[i, j])

    def _rule(self, q):
        if q == "ESS per gradient":
            return "highest"
        if q == "acceptance":
            return f"closest to {number(kernel_kind(self.kernel_kind).target_accept)}"
        return "lowest"

    def _refresh(self, draw=False, finished=False):
        """Show the current arrays: heat map, best cell, readout, progress (thread-safe)."""
        with self._lock:
            q = self.quantity
            d = self._drawing
            d.fmt = _FORMATS[q]
            shown = self.values[q]
            d.update(shown)
            if q in _PROBABILITIES:
                self._fix_colour_scale(d, shown)
            best = self.best_cell(q)
            if best is not None:
                i, j, _ = best
                h = 0.44
                d.best.set_data([j - h, j + h, j + h, j - h, j - h],
                                [i - h, i - h, i + h, i + h, i - h])
            if d.colorbar is not None:
                d.colorbar.set_label(_LABELS[q])
            self._ax.set_title(self._title(), loc="left", fontsize=9)
            running = self.running and not finished
            self._progress.max = max(self.n_cells, 1)
            self._progress.value = self.n_done
            self._progress.bar_style = "info" if running else (
                "warning" if self.n_done < self.n_cells else "success")
            self._stop_button.disabled = not running
            self._run_button.disabled = running
            self._readout.value = self._readout_html(best, running)
            if draw:
                self.figure.canvas.draw()

    @staticmethod
    def _fix_colour_scale(d, v):
        """Colour shares on a fixed 0..1 scale, so maps and slices compare at a glance.

        ``KnobGridDrawing.update`` scales colours to the finite values; here the scale
        is reset to 0..1 and the cell texts get the matching dark/light colour.
        """
        d.image.set_clim(0.0, 1.0)
        cmap, norm = d.image.get_cmap(), d.image.norm
        for (i, j), text in np.ndenumerate(d.texts):
            if np.isfinite(v[i, j]):
                r, g, b, _ = cmap(norm(v[i, j]))
                text.set_color("black" if 0.299 * r + 0.587 * g + 0.114 * b > 0.5 else "white")
        if d.colorbar is not None:
            d.colorbar.update_normal(d.image)

    def _title(self):
        title = (f"{kernel_kind(self.kernel_kind).title}: {plural(self.n_chains, 'chain')} \u00d7 "
                 f"{plural(self.n_draws, 'draw')} per cell")
        a = self._slices()[min(self.persistence_index, len(self._slices()) - 1)]
        if a is not None:
            title += f", persistence {number(a)}"
        return title

    def _readout_html(self, best, running):
        q = self.quantity
        failed = int(np.count_nonzero(self._state == 2))
        done = f"<b>{self.n_done}/{self.n_cells}</b> cells done"
        if failed:
            done += f" ({failed} failed: see the status line)"
        if running:
            done += (", computing in the background" if self.executor is None else
                     f", computing on {html.escape(type(self.executor).__name__)}'s workers")
        if best is None:
            found = f"best for {html.escape(q)}: none yet"
        else:
            i, j, value = best
            where = self._cell_name(self._shown(), min(self.persistence_index,
                                                       len(self._slices()) - 1), i, j)
            found = (f"best for {html.escape(q)} ({self._rule(q)}): {where} "
                     f"&rarr; {number(value, 3)}")
        caution = (f"Each cell is a short run ({plural(self.n_chains, 'chain')} &times; "
                   f"{plural(self.n_draws, 'draw')} after {self.burn_in} discarded, fixed knobs, "
                   f"no tuning), so its numbers are "
                   f"noisy: click a cell to look closer, then confirm with a longer run. "
                   f"{html.escape(CAUTION)}")
        return (f"<div style='font-family:monospace'>{done} | {found}<br>"
                f"<span style='color:#555'>{caution}</span></div>")

    # ------------------------------------------------------------- opening
    def _on_press(self, event):
        if event.inaxes is not getattr(self, "_ax", None) or event.xdata is None:
            return
        i, j = int(round(event.ydata)), int(round(event.xdata))
        if 0 <= i < len(self._rows()) and 0 <= j < len(self._columns()):
            self.open_cell(i, j)

    @guarded("open cell")
    def open_cell(self, i, j):
        """Open the cell in row ``i`` and column ``j`` (see ``best_cell``).

        Shows a ``TrajectoryView`` (or a ``ChainView`` when ``opens="chain"`` or the
        kernel is a random walk or NUTS) with the cell's knobs below the map and returns it.
        """
        rows, columns = self._rows(), self._columns()
        if not (0 <= i < len(rows) and 0 <= j < len(columns)):
            raise IndexError(f"cell ({i}, {j}) is outside the {len(rows)} x "
                             f"{len(columns)} grid")
        column, row = columns[j], rows[i]
        a = self._slices()[min(self.persistence_index, len(self._slices()) - 1)]
        pilot = self._pilot()
        region = {}
        if pilot is not None:  # the cells' own region and starts: no second pilot run
            xlim, ylim = pilot.region((0, 1))
            region = {"xlim": xlim, "ylim": ylim}
        if self.opens == "chain" or self.kernel_kind in ("walk", "nuts"):
            from .chain_view import ChainView

            # the cell's own kernel (fixed knobs, mass matrix included) sets the view's knobs
            kwargs = {"kernel": make_cell_kernel(self.kernel_kind, column, row, a, self.uniform,
                                                 metric=self.mass_matrix),
                      "seed": self.seed, "n_chains": self.n_chains}
            if pilot is not None:
                kwargs["initial"] = pilot.initial
            view = ChainView(self.target, **kwargs, **region)
        else:
            from .trajectory_view import TrajectoryView, inverse_mass_of

            if pilot is not None:
                region["start"] = pilot.start()
            inverse, note = inverse_mass_of(self.mass_matrix)
            view = TrajectoryView(self.target, step_size=column, n_steps=row,
                                  persistence=a or 0.0, seed=self.seed, inverse_mass=inverse, **region)
            if note:
                view.status = note
        name = self._cell_name(self._shown(), min(self.persistence_index, len(self._slices()) - 1), i, j)
        header = widgets.HTML(
            f"<span style='font-family:monospace'>opened cell: {html.escape(name)}</span>")
        self._slot.children = [header, view]
        self.opened = view
        return view

    # --------------------------------------------------------------- output
    def save_png(self, path, dpi=120):
        """Write the current map to ``path`` as PNG."""
        with self._lock:
            return super().save_png(path, dpi=dpi)

    def render(self):
        with self._lock:
            return super().render()
