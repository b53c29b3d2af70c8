"""The sampling loop: ``Sampler.step()`` for live views, ``sample()`` for batch runs.

Both share one code path: ``sample`` only loops over ``Sampler.step``.
"""

import sys
import time
import warnings
from collections import deque

import numpy as np

from ._validate import RENAMED, check_fraction, check_in, check_int, warn_renamed
from .adaptation import DualAveraging, estimate_metric, warmup_windows
from .kernels import ChainState, Kernel
from .leapfrog import integrate, one_chain, trajectory_from
from .run import Run
from .streams import Streams
from .stop_signal import CellAborted, check_stop
from .target import Target

__all__ = ["Sampler", "sample", "auto_warmup", "DivergenceReplay"]

_INIT_TRIES = 100
_START_KEY = 2**32 - 1  # spawn key of the streams that draw random starts
_MAX_KEPT_DIVERGENCES = 500


#: Integer records that count steps or doublings (at most ``MAX_STEPS`` = 2**20 per
#: transition): kept as int32, which holds them exactly in half the memory.
_COUNT_RECORDS = frozenset({"n_grad", "n_leapfrog", "tree_depth"})


def _record_dtype(name, dtype):
    """The dtype a record is kept in: int32 for counts, the kernel's own otherwise."""
    if name in _COUNT_RECORDS and dtype.kind in "iu":
        return np.dtype(np.int32)
    return dtype


class _Recorder:
    """Per-draw records of a batch of chains; a ring buffer when ``capacity`` is set.

    Without a ring buffer the arrays are allocated at ``expected`` draws when that is
    known (``sample`` knows ``n_draws``), so nothing is re-allocated or copied on the
    way; past that (or when nothing is expected) they double as they fill.
    """

    def __init__(self, n_chains, capacity=None, expected=None):
        self.n_chains = n_chains
        self.capacity = capacity
        self.expected = expected
        self.arrays = {}
        self.count = 0

    def append(self, record):
        if not self.arrays:
            size = self.capacity or self.expected or 256
            for k, v in record.items():
                v = np.asarray(v)
                self.arrays[k] = np.empty((self.n_chains, size) + v.shape[1:],
                                          dtype=_record_dtype(k, v.dtype))
        size = next(iter(self.arrays.values())).shape[1]
        if self.capacity is None and self.count >= size:
            for k, a in self.arrays.items():
                grown = np.empty((a.shape[0], 2 * size) + a.shape[2:], dtype=a.dtype)
                grown[:, :size] = a
                self.arrays[k] = grown
        slot = self.count % self.capacity if self.capacity else self.count
        for k, v in record.items():
            if k in self.arrays:
                self.arrays[k][:, slot] = v
        self.count += 1

    @property
    def kept(self):
        return min(self.count, self.capacity) if self.capacity else self.count

    def get(self, name):
        """Chronological (n_chains, kept, ...) array of one field.

        A full buffer without a ring is handed over as a view, not copied: later
        appends write past its end (or into a grown copy), never into it. A ring
        buffer or a partly filled one is copied.
        """
        a = self.arrays[name]
        if self.capacity and self.count > self.capacity:
            start = self.count % self.capacity
            return np.concatenate([a[:, start:], a[:, :start]], axis=1)
        if not self.capacity and self.count == a.shape[1]:
            return a[:, :self.count]
        return a[:, :self.count].copy()


def _progress(done, total, started, label, stream=sys.stderr):
    """One-line progress that works in a terminal and in a notebook output area."""
    frac = done / max(total, 1)
    bar = "#" * int(24 * frac)
    rate = done / max(time.perf_counter() - started, 1e-9)
    end = "\n" if done >= total else ""
    print(f"\r{label} [{bar:<24}] {done}/{total} ({rate:,.0f}/s)", end=end, file=stream, flush=True)


class Sampler:
    """Run a kernel on a batch of chains, one transition at a time.

    Parameters
    ----------
    target : Target
    kernel : Kernel
        Used as given (not copied): change its knobs between ``step`` calls.
    initial : array_like, shape (dim,) or (n_chains, dim), optional
        Start on the user's scale. ``None`` draws uniform(-2, 2) on the
        sampler's (unconstrained) scale (common practice), retrying a chain up
        to 100 times where the log-density is not finite.
    n_chains : int
    seed : None, int, SeedSequence or Generator
        Chain ``k`` uses the ``k``-th child of ``SeedSequence(seed)``.
    keep_trajectories : bool
        Keep the batch Trajectory of every transition (``run.trajectories``).
    capacity : int, optional
        Keep only the latest ``capacity`` draws (a ring buffer), so live play
        runs in bounded memory however long it goes.

    Attributes
    ----------
    state : ChainState
    last_trajectory : Trajectory or None
        The latest batch trajectory when ``step(record=True)`` or
        ``keep_trajectories`` was used.
    divergences : deque of DivergenceReplay
        A replay of each divergent transition (the latest 500), each behaving
        like the tuple ``(chain, draw, Trajectory)`` and integrated only when
        its trajectory is first read.

    Examples
    --------
    >>> import phaseglass as pg
    >>> s = pg.Sampler(pg.demos.correlated_gaussian(), pg.HMC(0.3, 8), n_chains=2, seed=1)
    >>> _ = s.step(5)
    >>> s.run.draws.shape
    (2, 5, 2)
    """

    def __init__(self, target, kernel, initial=None, *, n_chains=4, seed=None,
                 keep_trajectories=False, capacity=None):
        if not isinstance(target, Target):
            raise TypeError(
                f"`target` must be a phaseglass Target, got {type(target).__name__}; "
                "wrap your log-density with pg.Target(log_density, grad, dim=...)"
            )
        if not isinstance(kernel, Kernel):
            raise TypeError(
                f"`kernel` must be a phaseglass kernel such as pg.HMC(step_size, n_steps), "
                f"got {type(kernel).__name__}"
            )
        self.target = target
        self.kernel = kernel
        self.n_chains = check_int("n_chains", n_chains, minimum=1)
        if capacity is not None:
            capacity = check_int("capacity", capacity, minimum=1)
        self.capacity = capacity
        self.keep_trajectories = bool(keep_trajectories)
        kernel.prepare(target)
        self.streams = Streams(seed, self.n_chains, shared=kernel.shared_stream)
        self.seed = self.streams.entropy
        position = self._initial_positions(initial)
        with np.errstate(all="ignore"):
            if kernel.uses_gradient:
                logp, grad = target._value_and_grad_rows(position)
            else:
                logp, grad = target.log_density(position), None
        if kernel.uses_gradient and not np.all(np.isfinite(grad)):
            bad = int(np.flatnonzero(~np.isfinite(grad).all(axis=1))[0])
            where = target.to_user(position[bad])
            if initial is not None:
                raise ValueError(f"`initial` gives a non-finite gradient for chain {bad} at "
                                 f"{where}; choose another start")
            raise ValueError(
                f"the gradient is not finite at the random start of chain {bad} ({where}) although "
                f"the log-density is: check the gradient function there "
                f"(target.check_gradient(x) compares it with finite differences)")
        self.state = ChainState(position, logp, grad)
        self.state.extra = kernel.init_extra(target, self.state, self.streams)
        self.initial = target.to_user(position)
        self.reset_records()

    # ---------------------------------------------------------------- set-up
    def _initial_positions(self, initial):
        t = self.target
        if initial is not None:
            x = np.asarray(initial, dtype=float)
            if x.shape == (t.dim,):
                x = np.broadcast_to(x, (self.n_chains, t.dim))
            elif x.shape != (self.n_chains, t.dim):
                raise ValueError(
                    f"`initial` must have shape ({t.dim},) or (n_chains, dim) = "
                    f"({self.n_chains}, {t.dim}), got {x.shape}"
                )
            z = t.from_user(x)
            with np.errstate(all="ignore"):
                logp = t.log_density(z)
            bad = np.flatnonzero(~np.isfinite(logp) | ~np.isfinite(z).all(axis=1))
            if bad.size:
                k = int(bad[0])
                raise ValueError(
                    f"`initial` has a non-finite log-density ({logp[k]}) for chain {k} at "
                    f"x = {x[k]}; start inside the support"
                )
            return np.array(z, dtype=float)
        # Starts come from their own per-chain streams (never shared), so chains that
        # share one driving stream (shared-stream Gibbs) still start apart.
        ss = self.streams.seed_sequence
        starts = Streams(np.random.SeedSequence(ss.entropy, spawn_key=ss.spawn_key + (_START_KEY,)),
                         self.n_chains)
        z = 4.0 * starts.uniform(t.dim) - 2.0
        with np.errstate(all="ignore"):
            for _ in range(_INIT_TRIES):
                logp = t.log_density(z)
                bad = ~np.isfinite(logp)
                if not bad.any():
                    return z
                z[bad] = (4.0 * starts.uniform(t.dim) - 2.0)[bad]
        raise ValueError(
            f"no finite log-density found after {_INIT_TRIES} random starts in (-2, 2) for "
            f"chains {np.flatnonzero(bad).tolist()}; pass `initial` inside the support"
        )

    def reset_records(self, expected=None):
        """Forget recorded draws (the chains keep their current state).

        ``expected`` (draws to come, when known) sizes the record arrays once.
        """
        self._records = _Recorder(self.n_chains, self.capacity, expected)
        self.trajectories = deque(maxlen=self.capacity) if self.keep_trajectories else None
        self.divergences = deque(maxlen=_MAX_KEPT_DIVERGENCES)
        self.last_trajectory = None
        self.last_info = None

    @property
    def n_draws(self):
        """Number of transitions recorded since the last reset."""
        return self._records.count

    # ------------------------------------------------------------------ step
    def step(self, n=1, *, record=False):
        """Advance every chain by ``n`` transitions and record them.

        Parameters
        ----------
        n : int
        record : bool
            Keep the latest transition's batch Trajectory in ``last_trajectory``.

        Returns
        -------
        dict
            The per-chain records of the last transition.
        """
        n = check_int("n", n, minimum=1)
        info = None
        for _ in range(n):
            info = self._one(record or self.keep_trajectories)
        return info

    def _one(self, record):
        check_stop()  # a run on an executor's worker whose results are no longer wanted
        state = self.state
        start = state.position
        info = self.kernel.transition(self.target, state, self.streams, record=record)
        traj = info.pop("trajectory", None)
        start_momentum = info.pop("start_momentum", None)
        replay_steps = info.pop("replay_steps", None)  # variable-length kernels (NUTS)
        info["position"] = state.position
        if traj is not None:
            self.last_trajectory = traj
            if self.trajectories is not None:
                self.trajectories.append(traj)
        if np.any(info["divergent"]):
            self._keep_divergences(info, start, start_momentum, traj, replay_steps)
        self._records.append(info)
        self.last_info = info
        return info

    def _keep_divergences(self, info, start, start_momentum, traj, replay_steps=None):
        """Keep a replay of each divergent transition, to be integrated when first read.

        Only what re-integration needs is stored (start rows, momenta, step sizes,
        step count, metric and energy limit); see ``DivergenceReplay``.
        ``replay_steps`` (n_chains,), from kernels whose trajectories vary in
        length, gives each chain's number of steps from ``start`` along
        ``start_momentum`` to its divergent state; otherwise the kernel's
        ``n_steps`` is used.
        """
        draw = self._records.count
        rows = np.flatnonzero(info["divergent"])
        kernel = self.kernel
        if traj is not None:  # already integrated (record=True): nothing to defer
            for r in rows:
                one = one_chain(traj, int(r))
                self.divergences.append(DivergenceReplay(int(r), draw, one.divergence_step,
                                                         trajectory=one))
            return
        if start_momentum is None:
            return
        args = (self.target, kernel.metric, kernel.max_energy_error)
        if replay_steps is not None:  # variable length: each chain on its own, as its own batch
            for r in rows:
                one = _ReplayBatch(*args, start[r:r + 1].copy(), start_momentum[r:r + 1].copy(),
                                   info["step_size"][r:r + 1].copy(),
                                   max(int(replay_steps[r]), 1), single=True)
                # the replay runs to the divergent state: it diverges at its last step
                self.divergences.append(DivergenceReplay(int(r), draw, one.n_steps, batch=one,
                                                         row=0))
            return
        # fixed length: the divergent rows of one transition integrate together, as one batch
        batch = _ReplayBatch(*args, start[rows], start_momentum[rows], info["step_size"][rows],
                             kernel.n_steps, single=False)
        # a chain that stopped at step k evaluated k gradients: n_grad is its divergent step
        steps = info["n_grad"][rows]
        for i, r in enumerate(rows):
            self.divergences.append(DivergenceReplay(int(r), draw, int(steps[i]), batch=batch,
                                                     row=i))

    # ---------------------------------------------------------------- warm-up
    def warm_up(self, n, *, target_accept=None, mass_adaptation="diagonal", progress=False,
                metric=RENAMED):
        """Tune the kernel for ``n`` transitions: dual averaging plus metric windows.

        Parameters
        ----------
        n : int
        target_accept : float, optional
            Defaults to the kernel's ``default_target_accept``.
        mass_adaptation : {"diagonal", "dense", None}
            Shape of the mass matrix (the kernel's Metric) estimated in doubling
            windows from pooled warm-up draws (regularised); ``None`` keeps the
            kernel's metric. ``metric=`` is its deprecated former name.

        Returns
        -------
        ndarray, shape (n,)
            The tuned knob's value at each warm-up transition.
        """
        n = check_int("warmup", n, minimum=0)
        if metric is not RENAMED:
            warn_renamed("metric", "mass_adaptation")
            mass_adaptation = metric
        check_in("mass_adaptation", mass_adaptation, ("diagonal", "dense", None))
        self.warmup_done = 0
        knob = self.kernel.tuned_knob
        history = np.full(n, np.nan)
        if n == 0:
            return history
        if target_accept is None:
            target_accept = self.kernel.default_target_accept
        target_accept = check_fraction("target_accept", target_accept)
        if not 0 < target_accept < 1:
            raise ValueError(f"`target_accept` must lie in (0, 1), got {target_accept}")
        da = DualAveraging(getattr(self.kernel, knob), target_accept) if knob else None
        ends = warmup_windows(n) if (mass_adaptation and knob) else []
        window_start = int(0.15 * n)
        window = []
        started = time.perf_counter()
        for i in range(n):
            info = self._one(False)
            self.warmup_done = i + 1
            if da is not None:
                setattr(self.kernel, knob, da.update(np.mean(info["accept_prob"])))
                history[i] = getattr(self.kernel, knob)
            if i >= window_start:
                window.append(self.state.position.copy())
            if ends and i + 1 == ends[0]:
                ends.pop(0)
                pooled = np.concatenate(window, axis=0)
                self.kernel.metric = estimate_metric(pooled, mass_adaptation)
                self.kernel.metric_changed(self.state)
                window = []
                if da is not None:
                    da.restart(getattr(self.kernel, knob))
            if progress and (i % max(n // 50, 1) == 0 or i + 1 == n):
                _progress(i + 1, n, started, "warm-up")
        if da is not None:
            setattr(self.kernel, knob, da.final)
        self.reset_records()
        return history

    # -------------------------------------------------------------- results
    @property
    def run(self):
        """A Run of everything recorded since the last reset."""
        rec = self._records
        fields = {k: rec.get(k) for k in rec.arrays} if rec.arrays else {}
        return Run.from_records(
            fields, target=self.target, kernel=self.kernel, seed=self.seed,
            trajectories=None if self.trajectories is None else list(self.trajectories),
            divergences=list(self.divergences), first_draw=rec.count - rec.kept,
            n_chains=self.n_chains,
        )


class _ReplayBatch:
    """Starts of the divergent transitions of one transition, integrated on first request."""

    __slots__ = ("target", "metric", "max_energy_error", "position", "momentum", "step_size",
                 "n_steps", "single", "_trajectory")

    def __init__(self, target, metric, max_energy_error, position, momentum, step_size, n_steps,
                 single):
        self.target, self.metric, self.max_energy_error = target, metric, max_energy_error
        self.position, self.momentum, self.step_size = position, momentum, step_size
        self.n_steps, self.single = int(n_steps), single
        self._trajectory = None

    def trajectory(self):
        """The batch (or, with ``single``, one-chain) Trajectory; integrated once, uncounted."""
        if self._trajectory is None:
            q, p, eps = self.position, self.momentum, self.step_size
            with self.target.uncounted(), np.errstate(all="ignore"):  # a replay is not sampling
                logp, grad = self.target._value_and_grad_rows(q)
                res = integrate(self.target, q, p, logp, grad, eps, self.n_steps, self.metric,
                                self.max_energy_error, record=True)
            self._trajectory = trajectory_from(res, eps, self.n_steps, self.max_energy_error,
                                               self.single)
        return self._trajectory


class DivergenceReplay:
    """One divergent transition in ``run.divergences``: ``(chain, draw, trajectory)``.

    It behaves like that tuple (unpacking, indexing, ``len``), but the
    trajectory is integrated only when first read (``replay.trajectory``,
    ``replay[2]`` or unpacking), so a run with many divergences costs no
    gradient evaluations for replays nobody looks at. Until then it holds only
    what re-integration needs: the start, its momentum, the step size, the step
    count and references to the target and metric. The divergent rows of one
    transition are integrated together, exactly as ``pg.leapfrog`` would for
    that batch, and never counted in ``target.n_grad``. ``chain``, ``draw``
    and ``divergence_step`` (the leapfrog step at which it diverged, as in
    the trajectory) are read without integrating anything; ``replayed`` says
    whether the trajectory exists yet.
    """

    __slots__ = ("chain", "draw", "divergence_step", "_batch", "_row", "_trajectory")

    def __init__(self, chain, draw, divergence_step, *, trajectory=None, batch=None, row=0):
        self.chain, self.draw, self.divergence_step = chain, draw, divergence_step
        self._trajectory, self._batch, self._row = trajectory, batch, row

    @property
    def replayed(self):
        return self._trajectory is not None

    @property
    def trajectory(self):
        """The replayed Trajectory of this chain (integrated on first read)."""
        if self._trajectory is None:
            traj = self._batch.trajectory()
            self._trajectory = traj if self._batch.single else one_chain(traj, self._row)
            self._batch = None  # the batch's other rows keep it alive as long as they need it
        return self._trajectory

    def __len__(self):
        return 3

    def __iter__(self):
        yield self.chain
        yield self.draw
        yield self.trajectory

    def __getitem__(self, index):
        if index in (0, -3):
            return self.chain
        if index in (1, -2):
            return self.draw
        return (self.chain, self.draw, self.trajectory)[index]

    def __repr__(self):
        what = repr(self._trajectory) if self._trajectory is not None else "not replayed yet"
        return (f"DivergenceReplay(chain={self.chain}, draw={self.draw}, "
                f"step {self.divergence_step}, {what})")


#: The automatic warm-up length: as many transitions as draws, but at least
#: ``AUTO_WARMUP_MIN`` (enough for the metric windows and for dual averaging
#: to settle) and at most ``AUTO_WARMUP_MAX`` (longer runs gain little from a
#: longer warm-up). Equal warm-up and draw counts are common practice; the
#: bounds are our own choice.
AUTO_WARMUP_MIN = 200
AUTO_WARMUP_MAX = 1000


def auto_warmup(n_draws):
    """The warm-up length ``sample`` uses when ``warmup="auto"`` (the default)."""
    return int(min(max(int(n_draws), AUTO_WARMUP_MIN), AUTO_WARMUP_MAX))


def sample(target, kernel, initial=None, n_draws=1000, *, n_chains=4, warmup="auto", seed=None,
           target_accept=None, keep_trajectories=False, mass_adaptation="diagonal",
           progress=False, metric_adaptation=RENAMED):
    """Draw from ``target`` with ``kernel`` on several chains.

    Parameters
    ----------
    target : Target
    kernel : Kernel
        Copied first; the tuned copy is returned as ``run.kernel``.
    initial : array_like, shape (dim,) or (n_chains, dim), optional
        User-scale start; ``None`` draws uniform(-2, 2) on the sampler's scale.
    n_draws : int
        Draws kept per chain after warm-up.
    n_chains : int
    warmup : "auto" or int
        Transitions of tuning before the kept draws: dual averaging of the
        step size (Hoffman & Gelman, "The No-U-Turn Sampler", JMLR 15, 2014,
        sec. 3.2) toward ``target_accept``, and a regularised metric
        estimated from warm-up draws. ``"auto"`` (the default) warms up for
        ``auto_warmup(n_draws)`` transitions (as many as draws, between
        200 and 1000); ``warmup=0`` switches warm-up off, so the kernel's
        own step size and mass matrix are used exactly as given.
    seed : None, int, SeedSequence or Generator
        The same seed gives identical draws.
    target_accept : float, optional
        Defaults to the kernel's own (0.8 for HMC, 0.9 for one-step
        persistent schemes, 0.234 for random walk).
    keep_trajectories : bool
        Keep every transition's Trajectory in ``run.trajectories``: ``n_draws``
        of them, each at most ``core.sampling.trajectory_memory(kernel, dim, n_chains)`` bytes
        (for HMC ``n_chains * (n_steps + 1) * (2 * dim + 4) * 8``; NUTS up to
        ``2**max_depth`` states per chain). A warning gives the total above 1 GiB.
    mass_adaptation : {"diagonal", "dense", None}
        Shape of the mass matrix warm-up estimates (None: keep the kernel's
        metric). ``metric_adaptation=`` is its deprecated former name.
    progress : bool
        Print a one-line progress bar (terminal or notebook).

    Returns
    -------
    Run

    Notes
    -----
    Diagnostics computed from the Run can reveal problems but never prove
    that the chains have converged.

    Examples
    --------
    >>> import phaseglass as pg
    >>> run = pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 10), n_draws=200, warmup=200, seed=3)
    >>> run.draws.shape
    (4, 200, 2)
    """
    if not isinstance(kernel, Kernel):
        raise TypeError(
            f"`kernel` must be a phaseglass kernel such as pg.HMC(step_size, n_steps), "
            f"got {type(kernel).__name__}"
        )
    n_draws = check_int("n_draws", n_draws, minimum=1)
    auto = isinstance(warmup, str)
    if auto and warmup != "auto":
        raise ValueError(f'`warmup` must be "auto" or a whole number of transitions '
                         f'(0 switches warm-up off), got {warmup!r}')
    warmup = auto_warmup(n_draws) if auto else check_int("warmup", warmup, minimum=0)
    if metric_adaptation is not RENAMED:
        warn_renamed("metric_adaptation", "mass_adaptation")
        mass_adaptation = metric_adaptation
    check_in("mass_adaptation", mass_adaptation, ("diagonal", "dense", None))
    if target_accept is not None:  # checked even without warm-up: a typo is still a typo
        target_accept = check_fraction("target_accept", target_accept)
        if not 0 < target_accept < 1:
            raise ValueError(f"`target_accept` must lie in (0, 1), got {target_accept}")
    kernel = kernel.copy()
    sampler = Sampler(target, kernel, initial, n_chains=n_chains, seed=seed)
    if keep_trajectories:
        _warn_trajectory_memory(target, kernel, n_draws, sampler.n_chains)
    history = None
    try:
        history = sampler.warm_up(warmup, target_accept=target_accept,
                                  mass_adaptation=mass_adaptation, progress=progress)
        sampler.keep_trajectories = bool(keep_trajectories)
        sampler.reset_records(expected=n_draws)
        started = time.perf_counter()
        for i in range(n_draws):
            sampler.step()
            if progress and (i % max(n_draws // 50, 1) == 0 or i + 1 == n_draws):
                _progress(i + 1, n_draws, started, "sampling")
    except KeyboardInterrupt:
        run = _partial_run(sampler, warmup, history, n_draws, "interrupted")
        warnings.warn(_stopped_message(run, sampler, warmup, history, n_draws, "interrupted"),
                      UserWarning, stacklevel=2)
        return run
    except CellAborted:  # nobody waits for this run any more (see core/stop_signal.py)
        raise
    except Exception as exc:  # user code failed: keep what is finished and say where
        run = _partial_run(sampler, warmup, history, n_draws,
                           f"{type(exc).__name__} in the user's code")
        exc.partial_run = run
        note = _stopped_message(run, sampler, warmup, history, n_draws, "stopped by this error")
        if hasattr(exc, "add_note"):
            exc.add_note("phaseglass: " + note + "; they are in `exc.partial_run`")
        raise
    run = sampler.run
    run.n_warmup = warmup
    run.warmup_auto = auto
    run.warmup_history = history
    return run


#: Above this, ``keep_trajectories=True`` warns with its memory estimate.
TRAJECTORY_MEMORY_WARNING = 1 << 30


def trajectory_memory(kernel, dim, n_chains):
    """Upper bound, in bytes, of one transition's kept Trajectory (``keep_trajectories=True``).

    Fixed-length kernels keep ``n_steps + 1`` states per chain: positions and
    momenta (``dim`` floats each) and four energies, float64. NUTS keeps at most
    ``2**max_depth`` states per chain (the start and ``2**max_depth - 1`` leapfrog
    steps), each with a fifth float (its selection probability), a doubling
    index and a merged flag, plus ``max_depth`` directions per chain. Other
    kernels keep no trajectory. 512 bytes cover the object itself.
    """
    depth = getattr(kernel, "max_depth", None)
    if depth is not None:
        states = 2 ** int(depth)
        per_state = (2 * dim + 5) * 8 + 8 + 1
        return n_chains * (states * per_state + 8 * int(depth) + 64) + 512
    if not getattr(kernel, "uses_gradient", False):
        return 0
    steps = getattr(kernel, "n_steps", 1)
    return n_chains * (steps + 1) * (2 * dim + 4) * 8 + 512


def _warn_trajectory_memory(target, kernel, n_draws, n_chains):
    per = trajectory_memory(kernel, target.dim, n_chains)
    total = per * n_draws
    if total > TRAJECTORY_MEMORY_WARNING:
        bound = "at most " if getattr(kernel, "max_depth", None) is not None else "about "
        warnings.warn(f"keep_trajectories=True will hold {bound}{total / 2**30:.1f} GiB "
                      f"({per / 1024:.1f} KiB per transition x {n_draws} draws); keep fewer draws "
                      f"or leave it off (divergent transitions keep their replays anyway)",
                      UserWarning, stacklevel=3)


def _partial_run(sampler, warmup, history, n_draws, why):
    if history is None:  # stopped during warm-up: its draws are not samples; keep none
        sampler.reset_records()
    run = sampler.run
    run.n_warmup = warmup if history is not None else getattr(sampler, "warmup_done", 0)
    run.warmup_history = history
    run.stopped = why
    return run


def _stopped_message(run, sampler, warmup, history, n_draws, how):
    if history is None and warmup:
        done = getattr(sampler, "warmup_done", 0)
        return (f"sampling {how} during warm-up (transition {done} of {warmup}); no draws are "
                f"kept (warm-up draws are not included), so the returned Run is empty")
    return (f"sampling {how} after {run.n_draws} of {n_draws} draws per chain; the Run holds "
            f"those {run.n_draws} finished draws (warm-up draws are not included)")
