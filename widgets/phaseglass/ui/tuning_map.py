"""TuningMap: short runs over a grid of sampler knobs, computed in the background."""

import concurrent.futures
import functools
import html
import threading
import time

import ipywidgets as widgets
import numpy as np
import traitlets

from ..core._validate import MAX_STEPS
from ..core.compare import (CellAborted, check_executor, pack, run_fixed, run_fixed_portable,
                            submit_packed)
from ..core.efficiency import ess_per_gradient, evaluation_cost
from ..core.kernels import HMC, PartialRefreshHMC, RandomWalk
from ..core.metric import Metric
from ..core.run import CAUTION
from ..draw import draw_knob_grid
from ._base import View, check_range, check_target, guarded, number, plural
from ._shared import pilot

__all__ = ["TuningMap", "measure_cell", "make_cell_kernel", "QUANTITIES"]

#: What a cell can show (the keys of ``TuningMap.values``).
QUANTITIES = ("acceptance", "divergence rate", "ESS per gradient")
KERNELS = ("hmc", "partial", "walk")

_LABELS = {
    "acceptance": "acceptance (mean acceptance probability)",
    "divergence rate": "divergence rate (share of transitions)",
    "ESS per gradient": "ESS per gradient (worst coordinate)",
}
_PROBABILITIES = ("acceptance", "divergence rate")  # shown on a fixed 0..1 colour scale
_FORMATS = {"acceptance": "{:.2f}", "divergence rate": "{:.2f}", "ESS per gradient": "{:.2g}"}
_TARGET_ACCEPT = {"hmc": HMC.default_target_accept,
                  "partial": PartialRefreshHMC.default_target_accept,
                  "walk": RandomWalk.default_target_accept}
_KERNEL_TITLES = {"hmc": "HMC", "partial": "HMC with partial momentum refresh",
                  "walk": "random-walk Metropolis"}
_DEFAULT_N_STEPS = (1, 2, 4, 8, 16, 32)
_DEFAULT_PERSISTENCE = (0.0, 0.8, 0.95)
_DRAW_EVERY = 0.5  # seconds between canvas updates from the background thread


_Aborted = CellAborted  # a cell abandoned because its results are no longer wanted
_POLL = 0.1  # seconds between checks of the stop/abort flags while futures run


def make_cell_kernel(kernel, step_size, n_steps, persistence=None, uniform="fresh", metric=None):
    """The kernel a cell runs: fixed knobs, no jitter, the given mass matrix (identity by default).

    Parameters
    ----------
    kernel : {"hmc", "partial", "walk"}
    step_size : float
        Leapfrog step size (the proposal scale for ``"walk"``).
    n_steps : int
        Leapfrog steps per transition (ignored by ``"walk"``).
    persistence : float, optional
        Momentum persistence of ``"partial"``.
    uniform : {"fresh", "drifting"}
    metric : Metric, optional
        Mass matrix of every cell (a random walk's proposal covariance); identity when None.
    """
    if kernel == "hmc":
        # no step-size jitter: the cell shows exactly its knobs (HMC's default 10% jitter
        # would blur neighbouring columns)
        return HMC(step_size, n_steps, jitter=0.0, uniform=uniform, metric=metric)
    if kernel == "partial":
        return PartialRefreshHMC(step_size, n_steps, persistence, uniform=uniform, metric=metric)
    if kernel == "walk":
        return RandomWalk(step_size, uniform=uniform, metric=metric)
    raise ValueError(f"`kernel` must be one of {KERNELS}, got {kernel!r}")


def cell_quantities(run):
    """Acceptance, divergence rate and ESS per gradient of one short Run.

    * ``acceptance``: mean acceptance probability ``min(1, exp(-dH))`` over all
      transitions and chains (0 for a divergence); less noisy than the share of
      accepted proposals and with the same expectation.
    * ``divergence rate``: share of transitions that diverged.
    * ``ESS per gradient``: the smallest bulk ESS over the coordinates divided by
      the gradient evaluations of the kept transitions (log-density evaluations for
      a gradient-free kernel). A run in which some chain never moved gets 0: a stuck
      chain is not mixing, whatever the between-chain spread says.
    """
    acc = float(np.mean(np.nan_to_num(np.asarray(run.accept_prob, dtype=float), nan=0.0)))
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
    """A heat map of short runs over step size x leapfrog steps, computed in the background.

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
      evaluation (per log-density evaluation for ``kernel="walk"``),

    chosen with the ``quantity`` trait (recolouring, never recomputing). A
    square outlines the best cell: highest ESS per gradient; acceptance closest
    to the kernel's usual target (0.8 for HMC, 0.9 with partial refresh, 0.234
    for a random walk); lowest divergence rate. Ties go to the higher ESS per
    gradient. Short runs give noisy numbers: use the map to find the region
    worth a closer look, then click a cell to open it in a ``TrajectoryView``
    (or a ``ChainView`` with ``opens="chain"``) below the map.

    With ``kernel="partial"`` the momentum persistence is a third knob: every
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
    the cells not yet started; a cell already running on a worker cannot be
    interrupted there: it finishes on its worker and its result is discarded
    (the cell stays blank, as here).

    Parameters
    ----------
    target : Target
    kernel : {"hmc", "partial", "walk"}
    step_sizes : sequence of float, optional
        Columns. Default: six values from 1/8 to 4 times the step size a pilot
        run tunes to an acceptance of 0.8 (for ``"walk"``, around 2.38 sd / sqrt(dim)).
    n_steps : sequence of int, optional
        Rows. Default (1, 2, 4, 8, 16, 32); ``(1,)`` for ``"walk"``.
    persistence : sequence of float in [0, 1), optional
        Only for ``kernel="partial"``; default (0, 0.8, 0.95).
    n_draws, n_chains, burn_in : int
        Size of every cell's run.
    seed : int
    quantity : {"acceptance", "divergence rate", "ESS per gradient"}
        (``metric=`` is accepted as an alias; elsewhere phaseglass uses "metric"
        for the mass matrix, hence the name ``quantity``.)
    uniform : {"fresh", "drifting"}
        Source of the accept/reject uniform of every cell's kernel.
    opens : {"trajectory", "chain"}
        What clicking a cell opens (a random walk always opens a ChainView).
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
    values : dict of str -> ndarray, shape (len(n_steps), len(step_sizes))
        Each quantity on the shown slice; NaN for cells not (successfully) computed.
    values_all : dict of str -> ndarray, shape (n_slices, len(n_steps), len(step_sizes))
        Every persistence slice (one slice unless ``kernel="partial"``).
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

    kernel = traitlets.Enum(KERNELS, "hmc", help="Kernel run in every cell.").tag(setting=True)
    step_sizes = traitlets.List(traitlets.Float(), help="Step sizes (columns).").tag(setting=True)
    n_steps = traitlets.List(traitlets.Int(), help="Leapfrog steps per transition (rows).").tag(
        setting=True)
    persistence = traitlets.List(
        traitlets.Float(), help="Momentum persistence values (kernel 'partial' only)."
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

    _CONFIG = ("kernel", "step_sizes", "n_steps", "persistence", "n_draws", "n_chains", "burn_in",
               "seed", "uniform")

    def __init__(self, target, *, kernel="hmc", step_sizes=None, n_steps=None, persistence=None,
                 n_draws=150, n_chains=4, burn_in=25, seed=0, quantity="acceptance",
                 uniform="fresh", opens="trajectory", persistence_index=0, autorun=True,
                 metric=None, mass_matrix=None, executor=None):
        check_target(target)
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
        if kernel not in KERNELS:
            raise ValueError(f"`kernel` must be one of {KERNELS}, got {kernel!r}")
        if metric is not None:
            if metric not in QUANTITIES:
                raise ValueError(f"`metric` (alias of `quantity`) must be one of {QUANTITIES}, "
                                 f"got {metric!r}")
            quantity = metric
        if persistence is not None and kernel != "partial":
            raise ValueError(f"`persistence` is a knob of kernel='partial', not {kernel!r}")
        if kernel == "walk" and n_steps is not None and list(n_steps) != [1]:
            raise ValueError(f"kernel='walk' makes one proposal per transition: `n_steps` must be "
                             f"None or [1], got {list(n_steps)}")
        self.target = target
        self.autorun = bool(autorun)
        self.opened = None
        self._built = False
        self._lock = threading.RLock()  # artists and result arrays: worker vs. main thread
        self._job = None
        self._config_key = None
        super().__init__(figsize=(7.0, 4.4))
        with self.hold_trait_notifications():
            self.kernel = kernel
            self.n_draws = n_draws
            self.n_chains = n_chains
            self.burn_in = burn_in
            self.seed = seed
            self.quantity = quantity
            self.uniform = uniform
            self.opens = opens
            self.n_steps = list(n_steps) if n_steps is not None else (
                [1] if kernel == "walk" else list(_DEFAULT_N_STEPS))
            self.persistence = (list(persistence) if persistence is not None else
                                list(_DEFAULT_PERSISTENCE) if kernel == "partial" else [])
            self.step_sizes = (list(step_sizes) if step_sizes is not None
                               else self._default_step_sizes())
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
    @traitlets.validate("step_sizes")
    def _check_step_sizes(self, proposal):
        v = [float(x) for x in proposal["value"]]
        if not v or not all(np.isfinite(x) and x > 0 for x in v):
            raise traitlets.TraitError(
                f"`step_sizes` must be a non-empty list of numbers > 0, got {v}")
        return v

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
        n = len(self.persistence) if self.kernel == "partial" else 1
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

    def _default_step_sizes(self):
        pilot = self._pilot()
        if pilot is None:
            return _round3(np.geomspace(0.01, 1.0, 6))
        if self.kernel == "walk":
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
        if self.kernel == "partial" and self.persistence:
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
        if self.kernel == "partial" and self.persistence:
            return list(self.persistence)
        return [None]

    def _reset_arrays(self):
        shape = (len(self._slices()), len(self.n_steps), len(self.step_sizes))
        with self._lock:
            self._arrays = {q: np.full(shape, np.nan) for q in QUANTITIES}
            self._state = np.zeros(shape, dtype=np.int8)  # 0 pending, 1 done, 2 failed

    def _pending(self):
        return self._state != 1

    @property
    def values(self):
        """``{quantity: ndarray (len(n_steps), len(step_sizes))}`` of the shown slice (copies)."""
        with self._lock:
            k = min(self.persistence_index, self._state.shape[0] - 1)
            return {q: a[k].copy() for q, a in self._arrays.items()}

    @property
    def values_all(self):
        """``{quantity: ndarray (n_slices, len(n_steps), len(step_sizes))}`` (copies)."""
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

        With an ``executor``: cells not yet started are cancelled; a cell running on
        a worker finishes there (it cannot be interrupted) and its result is ignored.
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
        return make_cell_kernel(c["kernel"], c["step_sizes"][j], c["n_steps"][i], c["slices"][k],
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
        try:
            for k, i, j in job.cells:
                if job.stop.is_set() or job.abort.is_set():
                    break
                fut = submit_packed(
                    self.executor, self._target_blob, run_fixed_portable,
                    (self._cell_kernel(c, k, i, j),),
                    {"n_draws": c["n_draws"], "n_chains": c["n_chains"], "burn_in": c["burn_in"],
                     "seed": c["seed"], "initial": initial})
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
            # Stop, a settings change or an error: cells not started are not wanted; a
            # running one cannot be interrupted on its worker and its result is ignored
            for fut in futures:
                fut.cancel()

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
        name = f"step size {number(c['step_sizes'][j], 3)}, {plural(c['n_steps'][i], 'step')}"
        if c["slices"][k] is not None:
            name += f", persistence {number(c['slices'][k])}"
        return name

    # -------------------------------------------------------------- settings
    @traitlets.observe(*_CONFIG)
    def _on_config(self, change):
        if self._built:
            self._reconfigure()

    @guarded("settings change")
    def _reconfigure(self):
        # keep the knobs consistent with the kernel (these assignments re-enter here once)
        if self.kernel == "walk" and self.n_steps != [1]:
            self.n_steps = [1]  # one proposal per transition
        if self.kernel == "partial" and not self.persistence:
            self.persistence = list(_DEFAULT_PERSISTENCE)
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
        if isinstance(kernel, PartialRefreshHMC):
            kind = "partial"
        elif isinstance(kernel, HMC):
            kind = "hmc"
        elif isinstance(kernel, RandomWalk):
            kind = "walk"
        else:
            raise ValueError(f"`run` used a {type(kernel).__name__}; a TuningMap covers HMC, "
                             "partial-refresh HMC and the random walk")
        kind = kwargs.pop("kernel", kind)
        centre = kernel.scale if isinstance(kernel, RandomWalk) else kernel.step_size
        args = {"kernel": kind, "mass_matrix": kernel.metric,
                "step_sizes": _round3(float(centre) * 2.0 ** np.arange(-3, 4))}
        if kind != "walk" and getattr(kernel, "n_steps", None) is not None:
            args["n_steps"] = sorted(set(_DEFAULT_N_STEPS) | {int(kernel.n_steps)})
        args.update(kwargs)
        return cls(target, **args)

    @classmethod
    def from_settings(cls, target, settings, *, autorun=True, executor=None):
        """Build a map on ``target`` with saved ``settings`` (from ``map.settings``)."""
        s = cls.checked_settings(settings)
        if s.get("kernel", "hmc") != "partial":
            s.pop("persistence", None)
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
        if self.kernel == "walk":
            return "proposal scale", "proposals per transition"
        return "step size \u03b5", "leapfrog steps L"

    def _build_drawing(self):
        with self._lock:
            fig = self.figure
            fig.clear()
            self._ax = fig.add_subplot()
            q = self.quantity
            x_label, y_label = self._labels()
            self._drawing = draw_knob_grid(
                self._ax, self.values[q], self.step_sizes, self.n_steps, x_label=x_label,
                y_label=y_label, value_label=_LABELS[q], fmt=_FORMATS[q], best=None)
            self._drawing.best.set_label("best cell")

    def best_cell(self, quantity=None):
        """``(i, j, value)`` of the best cell of the shown slice, or None when none is done.

        ``i`` indexes ``n_steps`` (rows), ``j`` indexes ``step_sizes`` (columns).
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
            score = -np.abs(value - _TARGET_ACCEPT[self.kernel])
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
            return f"closest to {number(_TARGET_ACCEPT[self.kernel])}"
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
        title = (f"{_KERNEL_TITLES[self.kernel]}: {plural(self.n_chains, 'chain')} \u00d7 "
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
            a = self._slices()[min(self.persistence_index, len(self._slices()) - 1)]
            where = f"step size {number(self.step_sizes[j], 3)}, {plural(self.n_steps[i], 'step')}"
            if a is not None:
                where += f", persistence {number(a)}"
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
        if 0 <= i < len(self.n_steps) and 0 <= j < len(self.step_sizes):
            self.open_cell(i, j)

    @guarded("open cell")
    def open_cell(self, i, j):
        """Open the cell in row ``i`` (``n_steps[i]``), column ``j`` (``step_sizes[j]``).

        Shows a ``TrajectoryView`` (or a ``ChainView`` when ``opens="chain"`` or the
        kernel is a random walk) with the cell's knobs below the map and returns it.
        """
        if not (0 <= i < len(self.n_steps) and 0 <= j < len(self.step_sizes)):
            raise IndexError(f"cell ({i}, {j}) is outside the {len(self.n_steps)} x "
                             f"{len(self.step_sizes)} grid")
        eps, n_steps = self.step_sizes[j], self.n_steps[i]
        a = self._slices()[min(self.persistence_index, len(self._slices()) - 1)]
        pilot = self._pilot()
        region = {}
        if pilot is not None:  # the cells' own region and starts: no second pilot run
            xlim, ylim = pilot.region((0, 1))
            region = {"xlim": xlim, "ylim": ylim}
        if self.opens == "chain" or self.kernel == "walk":
            from .chain_view import ChainView

            kwargs = {"step_size": eps, "n_steps": n_steps, "kernel_name": self.kernel,
                      "uniform": self.uniform, "seed": self.seed, "n_chains": self.n_chains}
            if a is not None:
                kwargs["persistence"] = a
            if pilot is not None:
                kwargs["initial"] = pilot.initial
            if self.mass_matrix is not None:  # the cell's own kernel, mass matrix included
                kwargs["kernel"] = make_cell_kernel(self.kernel, eps, n_steps, a, self.uniform,
                                                    metric=self.mass_matrix)
            view = ChainView(self.target, **kwargs, **region)
        else:
            from .trajectory_view import TrajectoryView, mass_from_metric

            if pilot is not None:
                region["start"] = pilot.start()
            mass, note = mass_from_metric(self.mass_matrix)
            view = TrajectoryView(self.target, step_size=eps, n_steps=n_steps,
                                  persistence=a or 0.0, seed=self.seed, mass_scale=mass, **region)
            if note:
                view.status = note
        shown = {"step_sizes": self.step_sizes, "n_steps": self.n_steps, "slices": self._slices()}
        name = self._cell_name(shown, min(self.persistence_index, len(self._slices()) - 1), i, j)
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
