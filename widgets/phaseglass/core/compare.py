"""Compare kernels (or settings) over several seeds on one target, serially or on any executor.

``compare_kernels`` runs every kernel with every seed (a grid of independent
runs, the "cells") and gathers a few numbers per cell into a
``KernelComparison``: a table of means and spreads over seeds, for showing
why one setting was chosen. The cells can run here, one after the other, or
on any ``concurrent.futures.Executor`` (a ``ProcessPoolExecutor``, or a
cluster's executor such as ``dask.distributed.Client(...).get_executor()``);
the numbers are identical cell for cell either way.

The helpers ``pack``, ``submit_packed`` and ``run_packed`` carry a target and a call
to another process; ``TuningMap`` uses them too.
"""

import pickle
import uuid
import warnings
from dataclasses import dataclass

import numpy as np

from ._validate import RENAMED, check_int, warn_renamed
from .efficiency import evaluation_cost, ess_per_gradient, mean_acceptance
from .kernels import Kernel
from .stop_signal import CellAborted, StopSignal, stopping_when
from .streams import seed_sequence
from .target import Target

__all__ = ["compare_kernels", "KernelComparison", "QUANTITIES", "pack", "submit_packed",
           "run_packed", "check_executor", "run_fixed", "run_fixed_portable", "CellAborted"]

#: The numbers measured in every cell (the keys of ``KernelComparison.cells``).
QUANTITIES = ("ESS per gradient", "acceptance", "divergences", "step size", "R-hat max")

_DESCRIPTIONS = {
    "ESS per gradient": "smallest bulk ESS over the parameters per gradient evaluation "
                        "(per log-density evaluation for a gradient-free kernel)",
    "acceptance": "mean acceptance probability of the kept transitions",
    "divergences": "divergent transitions among the kept ones, all chains",
    "step size": "step size after warm-up (proposal scale of a random walk)",
    "R-hat max": "largest rank-normalised split R-hat over the parameters",
}
#: Options of ``sample`` that one entry of ``kernels`` may set for itself.
_PER_KERNEL = ("warmup", "target_accept", "mass_adaptation")


# ------------------------------------------------------------ sending work away

def check_executor(executor):
    """``executor`` when it is None or a ``concurrent.futures.Executor``, else a clear error."""
    import concurrent.futures  # here: it imports logging, which `import phaseglass` need not pay

    if executor is None or isinstance(executor, concurrent.futures.Executor):
        return executor
    hint = ""
    if callable(getattr(executor, "get_executor", None)):
        hint = " (for a Dask client pass client.get_executor())"
    raise TypeError(f"`executor` must be None (run here) or a concurrent.futures.Executor such as "
                    f"ProcessPoolExecutor(2){hint}, got {type(executor).__name__}")


def _describe(obj):
    fn = getattr(obj, "_user_logp", None) or getattr(obj, "_user_vg", None)
    if fn is not None:
        name = getattr(fn, "__qualname__", None) or type(fn).__name__
        return f"{type(obj).__name__} of {name}"
    return type(obj).__name__


def pack(obj, name="target"):
    """Pickle ``obj`` so another process can run it: with cloudpickle when installed.

    cloudpickle (a dependency of Dask) sends functions by value, so targets built
    from lambdas, closures or functions defined in a notebook travel to worker
    processes; plain ``pickle`` only sends functions a worker can import by name.

    Parameters
    ----------
    obj : object
    name : str
        The argument ``obj`` came from, named in the error.

    Returns
    -------
    bytes
        Load with ``pickle.loads`` (the worker needs cloudpickle installed when
        it was used here).

    Raises
    ------
    TypeError
        ``obj`` cannot be pickled, e.g. its function holds an open file or a lock.
    """
    try:
        import cloudpickle
    except ImportError:
        cloudpickle = None
    try:
        if cloudpickle is not None:
            return cloudpickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
        return pickle.dumps(obj, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception as exc:  # pickling raises TypeError, PicklingError, AttributeError, ...
        how = "cloudpickle" if cloudpickle is not None else "pickle (cloudpickle is not installed)"
        fix = ("Fix: open such resources inside the function that uses them (or read the data "
               "into NumPy arrays before building the Target), or pass executor=None to run in "
               "this process.")
        if cloudpickle is None:
            fix = ("Fix: install cloudpickle (pip install cloudpickle, or phaseglass[dask]) so "
                   "lambdas, closures and notebook functions travel; " + fix[5:])
        raise TypeError(
            f"`{name}` ({_describe(obj)}) cannot be sent to the executor's worker processes: "
            f"{how} failed with {type(exc).__name__}: {exc}. Work for an executor is pickled; "
            f"a function that holds an open file, a lock, a connection or a thread cannot "
            f"be. {fix}") from exc


def run_packed(target_blob, call_blob, token=None):
    """Worker side of ``pack``: ``fn(target, *args, **kwargs)`` from the two pickles.

    ``call_blob`` holds ``(fn, args, kwargs)``. Only bytes cross the executor, so
    any executor's own pickling (plain pickle for ``ProcessPoolExecutor``) carries them.
    ``token`` is not used: it makes every submission distinct (see ``submit_packed``).
    """
    target = pickle.loads(target_blob)
    fn, args, kwargs = pickle.loads(call_blob)
    try:
        return fn(target, *args, **kwargs)
    except Exception as exc:
        # the exception travels back pickled: a partial Run holds the target, whose
        # functions plain pickle (ProcessPoolExecutor's) may not carry
        if exc.__dict__.pop("partial_run", None) is not None and hasattr(exc, "add_note"):
            exc.add_note("phaseglass: the partial Run stayed on the worker")
        raise


def submit_packed(executor, target_blob, fn, args=(), kwargs=None, name="kernel"):
    """Submit ``fn(target, *args, **kwargs)`` to ``executor``; returns its Future.

    The call is packed here (``pack``; ``name`` is the argument an error names). Each
    submission carries a fresh token: an executor that merges identical calls into one
    task (Dask does, by hashing the arguments) would otherwise let the cancelling of an
    abandoned pass cancel a new pass's identical cell too.
    """
    call = pack((fn, tuple(args), dict(kwargs or {})), name)
    return executor.submit(run_packed, target_blob, call, uuid.uuid4().hex)


# ------------------------------------------------------------ fixed-knob runs

def run_fixed(target, kernel, *, n_draws, n_chains, burn_in=0, seed=0, initial=None,
              should_abort=None):
    """A short run with the kernel's knobs exactly as given (no tuning): a TuningMap cell.

    Parameters
    ----------
    target : Target
    kernel : Kernel
        Used as given (not copied).
    n_draws, n_chains : int
    burn_in : int
        Transitions run with the same knobs and discarded before the kept draws.
    seed : int or SeedSequence
    initial : array_like, shape (n_chains, dim), optional
    should_abort : callable, optional
        Polled before every transition; when it returns True, ``CellAborted`` is raised.

    Returns
    -------
    Run
    """
    from .sampling import Sampler

    sampler = Sampler(target, kernel, initial, n_chains=n_chains, seed=seed)

    def advance(n):
        for _ in range(n):
            if should_abort is not None and should_abort():
                raise CellAborted
            sampler.step(1)

    if burn_in:
        advance(burn_in)
        sampler.reset_records()
    advance(n_draws)
    return sampler.run


def run_fixed_portable(target, kernel, **kwargs):
    """``run_fixed`` for a worker process: the Run without what need not travel back.

    The target (the caller has it), the replays of divergent transitions and kept
    trajectories are dropped, so the Run pickles with plain pickle whatever the
    target's functions are.
    """
    run = run_fixed(target, kernel, **kwargs)
    run.target = None
    run.divergences = []
    run.trajectories = None
    return run


# --------------------------------------------------------------------- a cell

def _measure(target, kernel, entropy, spawn_key, n_draws, n_chains, options, initial, stop=None):
    """One cell: a sampling run and its numbers, ``{quantity: float}``.

    ``stop`` (a ``StopSignal.watch``) is polled between transitions: once it is True
    the run gives up with ``CellAborted`` (its comparison has failed or was interrupted).
    """
    from .diagnostics import rhat
    from .sampling import sample

    # a fresh SeedSequence per cell: spawning from a shared one would advance it
    seed = np.random.SeedSequence(entropy, spawn_key=spawn_key)
    with warnings.catch_warnings():
        # sample() turns Ctrl-C into a shortened Run and a warning; a comparison stops instead
        warnings.filterwarnings("ignore", message="sampling interrupted")
        with stopping_when(stop):
            run = sample(target, kernel, initial, n_draws, n_chains=n_chains, seed=seed, **options)
    if run.stopped == "interrupted":
        raise KeyboardInterrupt
    knob = run.kernel.tuned_knob
    r = np.atleast_1d(rhat(run.draws)) if run.n_draws >= 8 else np.array([np.nan])
    return {
        # per log-density evaluation for a gradient-free kernel (see evaluation_cost)
        "ESS per gradient": ess_per_gradient(run, cost=evaluation_cost(run)[0]),
        "acceptance": mean_acceptance(run),
        "divergences": float(run.n_divergent),
        "step size": float(getattr(run.kernel, knob)) if knob else np.nan,
        "R-hat max": float(np.nanmax(r)) if np.any(np.isfinite(r)) else np.nan,
    }


# ----------------------------------------------------------------- the result

@dataclass(frozen=True, eq=False, repr=False)
class KernelComparison:
    """Kernels (rows) x seeds (columns) of short runs on one target, and their summary.

    Attributes
    ----------
    labels : tuple of str
        One per kernel, in the order given.
    settings : tuple of dict
        Each kernel's ``settings()`` as given (before warm-up).
    cells : dict of str -> ndarray, shape (n_kernels, n_seeds)
        Every quantity in ``QUANTITIES`` for every cell.
    entropy : int
        Entropy of the root ``SeedSequence``: ``seed=entropy`` reproduces the comparison.
    spawn_keys : tuple of tuple
        Spawn key of each seed's child; seed ``r`` of every kernel uses child ``r``.
    n_draws, n_chains : int
    options : tuple of dict
        The ``sample`` options of each kernel (warm-up, target acceptance, mass adaptation).
    """

    labels: tuple
    settings: tuple
    cells: dict
    entropy: int
    spawn_keys: tuple
    n_draws: int
    n_chains: int
    options: tuple

    @property
    def n_kernels(self):
        return len(self.labels)

    @property
    def n_seeds(self):
        return len(self.spawn_keys)

    def _check(self, quantity):
        if quantity not in QUANTITIES:
            raise ValueError(f"`quantity` must be one of {QUANTITIES}, got {quantity!r}")
        return self.cells[quantity]

    def mean(self, quantity="ESS per gradient"):
        """Mean over seeds, shape (n_kernels,) (NaN where every seed gave NaN)."""
        v = self._check(quantity)
        ok = np.isfinite(v)
        total = np.where(ok, v, 0.0).sum(axis=1)
        n = ok.sum(axis=1)
        return np.where(n > 0, total / np.maximum(n, 1), np.nan)

    def spread(self, quantity="ESS per gradient"):
        """Standard deviation over seeds (ddof=1), shape (n_kernels,); NaN with one seed."""
        v = self._check(quantity)
        out = np.full(v.shape[0], np.nan)
        for k, row in enumerate(v):
            row = row[np.isfinite(row)]
            if row.size >= 2:
                out[k] = float(np.std(row, ddof=1))
        return out

    @property
    def table(self):
        """``{label: {quantity: (mean, spread)}}`` over seeds."""
        means = {q: self.mean(q) for q in QUANTITIES}
        spreads = {q: self.spread(q) for q in QUANTITIES}
        return {label: {q: (float(means[q][k]), float(spreads[q][k])) for q in QUANTITIES}
                for k, label in enumerate(self.labels)}

    def best(self, quantity="ESS per gradient"):
        """Label of the kernel with the best mean: highest ESS per gradient, acceptance
        and step size, fewest divergences, lowest R-hat; None when nothing is finite."""
        m = self.mean(quantity)
        if not np.any(np.isfinite(m)):
            return None
        lower = quantity in ("divergences", "R-hat max")
        k = int(np.nanargmin(m) if lower else np.nanargmax(m))
        return self.labels[k]

    def same_cells(self, other):
        """Whether ``other`` has the same labels and bit-identical numbers in every cell."""
        return (isinstance(other, KernelComparison) and self.labels == other.labels
                and all(np.array_equal(self.cells[q], other.cells[q], equal_nan=True)
                        for q in QUANTITIES))

    def summary(self):
        """The table as text: mean ± spread over seeds for each kernel."""
        from .run import CAUTION

        heads = ("kernel",) + QUANTITIES
        rows = []
        for k, label in enumerate(self.labels):
            row = [label]
            for q in QUANTITIES:
                m, s = self.mean(q)[k], self.spread(q)[k]
                if not np.isfinite(m):
                    row.append("n/a")
                    continue
                text = f"{m:.3g}" if q != "divergences" else f"{m:.1f}"
                if np.isfinite(s):
                    text += f" \u00b1 {s:.2g}"
                row.append(text)
            rows.append(row)
        widths = [max(len(str(r[i])) for r in [heads] + rows) for i in range(len(heads))]

        def line(cells):
            return "  ".join(str(c).ljust(w) for c, w in zip(cells, widths)).rstrip()

        out = [f"{self.n_kernels} kernels x {self.n_seeds} seeds, {self.n_chains} chains x "
               f"{self.n_draws} draws per run (mean \u00b1 sd over seeds)",
               line(heads), line(["-" * w for w in widths])]
        out += [line(r) for r in rows]
        best = self.best()
        if best is not None:
            out.append(f"highest ESS per gradient: {best}")
        out.append(CAUTION)
        return "\n".join(out)

    def __repr__(self):
        return self.summary()


# --------------------------------------------------------------- the function

def _label(kernel):
    s = kernel.settings()
    parts = [f"{k}={s[k]:.3g}" if isinstance(s[k], float) else f"{k}={s[k]}"
             for k in ("step_size", "n_steps", "persistence", "scale") if k in s]
    return f"{type(kernel).__name__}({', '.join(parts)})"


def _entries(kernels):
    """``[(label, kernel, options)]`` from a dict or a sequence of kernels/entries."""
    if isinstance(kernels, dict):
        items = [(str(k), v) for k, v in kernels.items()]
    elif isinstance(kernels, (list, tuple)):
        items = [(None, v) for v in kernels]
    else:
        raise TypeError(f"`kernels` must be a dict {{label: kernel}} or a list of kernels, "
                        f"got {type(kernels).__name__}")
    if not items:
        raise ValueError("`kernels` must hold at least one kernel, got none")
    out = []
    for label, v in items:
        options = {}
        if isinstance(v, dict):
            options = dict(v)
            v = options.pop("kernel", None)
            if "metric_adaptation" in options:  # the former name, one more release
                warn_renamed("metric_adaptation", "mass_adaptation", "entry key")
                options["mass_adaptation"] = options.pop("metric_adaptation")
            unknown = sorted(set(options) - set(_PER_KERNEL))
            if unknown:
                raise ValueError(f"an entry of `kernels` may set 'kernel' and {_PER_KERNEL}, "
                                 f"got {unknown}")
        if not isinstance(v, Kernel):
            raise TypeError(f"every entry of `kernels` must be a phaseglass kernel such as "
                            f"pg.HMC(0.3, 10) (or a dict with 'kernel': ...), got "
                            f"{type(v).__name__}")
        out.append((label if label is not None else _label(v), v, options))
    labels = [e[0] for e in out]
    if len(set(labels)) != len(labels):  # two kernels with the same knobs: number them
        seen = {}
        for i, (label, v, o) in enumerate(out):
            seen[label] = seen.get(label, 0) + 1
            if labels.count(label) > 1:
                out[i] = (f"{label} #{seen[label]}", v, o)
    return out


def compare_kernels(target, kernels, *, n_seeds=4, seed=0, n_draws=500, n_chains=4,
                    warmup="auto", target_accept=None, mass_adaptation="diagonal",
                    initial=None, executor=None, metric_adaptation=RENAMED):
    """Run every kernel with every seed on ``target`` and tabulate how well each mixes.

    Each cell (one kernel, one seed) is an independent ``sample`` run. Seed ``r``
    of every kernel uses the ``r``-th child of ``SeedSequence(seed)``, so the
    kernels start from the same random points and differences come from the
    kernels; several seeds show how much of a difference is luck.

    Parameters
    ----------
    target : Target
    kernels : dict of str -> Kernel, or sequence of Kernel
        The kernels or settings to compare (labels are made from the knobs
        when a sequence is given). An entry may also be a dict
        ``{"kernel": k, "warmup": ..., "target_accept": ..., "mass_adaptation": ...}``
        to compare the same kernel under different ``sample`` settings.
    n_seeds : int
        Replicate runs per kernel.
    seed : int or SeedSequence
        Root of the per-cell seeds; the same seed gives the same table.
    n_draws, n_chains, warmup, target_accept, mass_adaptation
        As for ``sample``, for every cell (an entry of ``kernels`` may override
        the last three).
    initial : array_like, optional
        User-scale starts shared by every cell; random starts (per seed) when None.
    executor : concurrent.futures.Executor, optional
        Where the cells run: None runs them here, one after the other; any
        executor runs them as futures (``ProcessPoolExecutor(2)``, or
        ``dask.distributed.Client(address).get_executor()`` for a cluster).
        The target is pickled with cloudpickle when it is installed, so lambdas
        and closures travel; a target that cannot be pickled is refused before
        anything runs. The numbers are identical cell for cell to a run with
        ``executor=None`` (given the same numerical libraries on the workers).
        When a cell fails or Ctrl-C interrupts the comparison, cells not yet
        started are cancelled and running ones stop within about 0.1 s plus
        one transition (``core/stop_signal.py``; on a non-Dask executor whose
        workers are on other machines, running cells finish unseen).

    Returns
    -------
    KernelComparison
        ``cells[quantity]`` of shape (n_kernels, n_seeds) for each of
        ``QUANTITIES``; ``table``, ``mean``, ``spread``, ``best`` and a printed
        ``summary()``. ``phaseglass.draw.compare.draw_comparison`` draws it.

    Notes
    -----
    ``ESS per gradient`` divides the smallest bulk ESS over the parameters by
    the gradient evaluations of the kept draws (log-density evaluations for a
    random walk). Diagnostics can reveal problems but never prove convergence.

    Examples
    --------
    >>> import phaseglass as pg
    >>> c = pg.compare_kernels(pg.demos.correlated_gaussian(),
    ...                        {"short": pg.HMC(0.3, 4), "long": pg.HMC(0.3, 16)},
    ...                        n_seeds=2, n_draws=100, n_chains=2, warmup=100)
    >>> c.cells["acceptance"].shape
    (2, 2)
    """
    if not isinstance(target, Target):
        raise TypeError(f"`target` must be a phaseglass Target, got {type(target).__name__}; "
                        "wrap your log-density with pg.Target(log_density, grad, dim=...)")
    entries = _entries(kernels)
    n_seeds = check_int("n_seeds", n_seeds, minimum=1)
    n_draws = check_int("n_draws", n_draws, minimum=1)
    n_chains = check_int("n_chains", n_chains, minimum=1)
    executor = check_executor(executor)
    ss = seed_sequence(seed)
    # a copy: spawning advances a SeedSequence, and the caller's one must give the same
    # children next time
    root = np.random.SeedSequence(ss.entropy, spawn_key=ss.spawn_key, pool_size=ss.pool_size)
    children = root.spawn(n_seeds)
    if metric_adaptation is not RENAMED:
        warn_renamed("metric_adaptation", "mass_adaptation")
        mass_adaptation = metric_adaptation
    shared = {"warmup": warmup, "target_accept": target_accept,
              "mass_adaptation": mass_adaptation}
    if initial is not None:
        initial = np.asarray(initial, dtype=float)
    jobs = []
    for k, (label, kernel, own) in enumerate(entries):
        options = {**shared, **own}
        for r, child in enumerate(children):
            args = (kernel, child.entropy, child.spawn_key, n_draws, n_chains, options, initial)
            jobs.append(((k, r), args))
    results = _run_cells(target, jobs, executor, entries)
    cells = {q: np.full((len(entries), n_seeds), np.nan) for q in QUANTITIES}
    for (k, r), out in results.items():
        for q in QUANTITIES:
            cells[q][k, r] = out[q]
    return KernelComparison(
        labels=tuple(e[0] for e in entries), settings=tuple(e[1].settings() for e in entries),
        cells=cells, entropy=ss.entropy, spawn_keys=tuple(c.spawn_key for c in children),
        n_draws=n_draws, n_chains=n_chains,
        options=tuple({**shared, **e[2]} for e in entries))


def _note(exc, entries, k, r):
    if hasattr(exc, "add_note"):
        exc.add_note(f"phaseglass: in the comparison cell {entries[k][0]!r}, seed {r}")
    return exc


def _run_cells(target, jobs, executor, entries):
    """``{(kernel, seed): numbers}``: here in order, or as futures on ``executor``."""
    import concurrent.futures

    if executor is None:
        out = {}
        for key, args in jobs:
            try:
                out[key] = _measure(target, *args)
            except Exception as exc:
                raise _note(exc, entries, *key)
        return out
    blob = pack(target, "target")
    futures = {}
    stop = StopSignal(executor)
    try:
        for key, args in jobs:
            futures[submit_packed(executor, blob, _measure, args + (stop.watch,),
                                  name=f"kernels ({entries[key[0]][0]!r})")] = key
        out = {}
        for fut in concurrent.futures.as_completed(futures):
            key = futures[fut]
            try:
                out[key] = fut.result()
            except Exception as exc:
                raise _note(exc, entries, *key)
        return out
    finally:  # an error or Ctrl-C: what has not started is not wanted, what runs stops
        for fut in futures:
            fut.cancel()
        if not all(fut.done() for fut in futures):
            stop.set()
