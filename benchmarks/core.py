"""Benchmark of the numerical core: what our sampling machinery costs on top of the model.

Run with ``python benchmarks/core.py`` (add ``--quick`` for a short smoke run). It
prints the machine and a markdown table of ratios measured in this one run; it is
not a test and asserts nothing.

Three questions, each against a goal:

1. Sampler overhead (``--overhead-only`` runs just this). Wall time of ``pg.sample`` with
   1 and with 4 chains divided by the time of the same bare gradient calls (the target's
   own joint value-and-gradient function called in a loop on the same batches: all
   chains still moving at each step). Goal <= 1.25 wherever one gradient
   costs >= 0.1 ms (we count late_returns in, the "~0.1 ms" case, even when it
   measures a little less); for cheaper gradients the ratio says little, so we report
   the fixed cost per leapfrog step in microseconds instead. The bare loop evaluates
   the very points the sampler visited, since a gradient's cost depends on where it
   is taken.
2. Against a hand-written HMC loop: the ten lines of numpy a practitioner would write,
   calling the same value-and-gradient function the same number of times. Goal <= 1.1.
3. Batching: per-chain cost of 1000 chains in one batch against a loop of
   single-chain runs, d = 10. Goal >= 50 times cheaper per chain.
4. Gradients from JAX (``Target.from_jax``, needs the ``jax`` extra): cost of one
   value-and-gradient call for 4 chains through the Target, against the same model's
   hand-written NumPy gradient and against central finite differences (no goal; the
   one-time compilation is reported apart).
5. Gibbs conditionals (``--gibbs-only`` runs just this): ms per sweep, 4 chains, shift
   0.381966, on a 2-D correlated Gaussian and the same Gaussian truncated to a box, with
   (a) a frozen ``scipy.stats`` distribution per chain and coordinate, built by
   ``pg.freeze`` and, for reference, by scipy's own freezing (``scipy.stats.norm(...)``,
   whose per-object set-up of ~0.4 ms runs inside the user's function: the "freezing"
   row measures it alone), (b) a hand-written object whose ``cdf``/``ppf`` call
   ``scipy.special.ndtr``/``ndtri`` (same draws), each also with ``vectorized=True`` (one
   call of the user's function per coordinate for all chains), ``pg.NormalConditional``,
   (c) numeric conditionals (``conditionals=None``), also on ``demos.apiaries(n_groups=12)``
   (dim 14), ``demos.late_returns()`` (dim 20, a costly log-density; one sweep, skipped with
   ``--quick``) and on a non-vectorised 2-D target. Goals: (a) by ``pg.freeze`` / (b) <= 3;
   numeric >= 5 x faster per sweep than before. With ``--before DIR`` (a checkout's
   ``widgets/`` folder, e.g. ``git worktree add /tmp/pg-old <commit>``) the same section
   also runs, in a child process, against that code (rows it cannot run are left out).
6. Memory (``--memory-only`` runs just this): peak memory of ``pg.sample`` with HMC (one
   leapfrog step, so the run is quick; the records are those of any kernel), 4 chains x
   10^5 draws, no warm-up, at dim 20 and dim 2, each in a fresh child process: the rise
   of ``ru_maxrss`` over the resident size just before sampling. Printed as ratios to the
   draws array and to the finished Run's own arrays (each distinct buffer counted once).
   Goals: at dim 20 the peak <= 1.6 x the draws; at dim 2, where the per-transition
   records outweigh the draws, <= 1.3 x the Run's arrays. ``--before DIR`` measures the
   same in children importing phaseglass from DIR.
7. Divergence replays (with ``--memory-only``): ``pg.sample`` with no warm-up and a too-large
   step size on the centred ``apiaries(n_groups=12)`` (HMC(0.5, 20), 4 chains x 300 draws),
   where most transitions diverge: sampling time, then the time to read every replay
   afterwards. Goal: replays cost nothing until read (``--before DIR`` shows what they
   cost inside sampling before).

Each time is the best of several repeats (the minimum is the least noisy estimate of
the cost on a shared machine). Ratios are given for wall time and, in parentheses,
for process CPU time, which other processes on a busy machine disturb much less.
BLAS is pinned to one thread: OPENBLAS_NUM_THREADS=1, OMP_NUM_THREADS=1 and
MKL_NUM_THREADS=1 are set before numpy is imported (a value already in the environment
is kept, and the header prints what is in force). One chain's matrix-vector products are
too small to gain from threads, and on a shared 2-core machine threaded BLAS makes the
timings erratic.
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # before numpy is imported

import argparse  # noqa: E402
import inspect  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

import phaseglass as pg


class Timing:
    """Best wall and CPU time of a callable over repeats; ``a / b`` gives both ratios."""

    def __init__(self, wall, cpu):
        self.wall, self.cpu = wall, cpu

    def __truediv__(self, other):
        if isinstance(other, Timing):
            return Timing(self.wall / other.wall, self.cpu / other.cpu)
        return Timing(self.wall / other, self.cpu / other)

    def __sub__(self, other):
        return Timing(self.wall - other.wall, self.cpu - other.cpu)

    def __mul__(self, factor):
        return Timing(self.wall * factor, self.cpu * factor)

    def fmt(self, spec):
        return f"{self.wall:{spec}} ({self.cpu:{spec}})"


def best_of(fn, repeats):
    """Minimum wall and CPU time of ``fn()`` over ``repeats`` calls."""
    wall, cpu = [], []
    for _ in range(repeats):
        w, c = time.perf_counter(), time.process_time()
        fn()
        cpu.append(time.process_time() - c)
        wall.append(time.perf_counter() - w)
    return Timing(min(wall), min(cpu))


def hand_written_hmc(value_and_grad, x0, step_size, n_steps, n_draws, seed):
    """Plain numpy HMC, one chain, as a practitioner would write it (fixed step size)."""
    rng = np.random.default_rng(seed)
    x = x0[None, :].copy()
    lp, g = value_and_grad(x)
    draws = np.empty((n_draws, x.shape[1]))
    for i in range(n_draws):
        p0 = rng.standard_normal(x.shape)
        xn, p, gn, lpn = x, p0, g, lp
        for _ in range(n_steps):
            p = p + 0.5 * step_size * gn
            xn = xn + step_size * p
            lpn, gn = value_and_grad(xn)
            p = p + 0.5 * step_size * gn
        log_ratio = (lpn[0] - 0.5 * np.dot(p[0], p[0])) - (lp[0] - 0.5 * np.dot(p0[0], p0[0]))
        if np.log(rng.random()) < log_ratio:
            x, lp, g = xn, lpn, gn
        draws[i] = x[0]
    return draws


def overhead_row(name, target, x0, step_size, n_steps, n_draws, repeats, n_chains=1):
    vg = target._user_vg  # the user's own joint function, no wrapper
    kernel = pg.HMC(step_size, n_steps, jitter=0.0)
    probe = pg.sample(target, kernel, x0, n_draws=n_draws, n_chains=n_chains, seed=1,
                      keep_trajectories=True, warmup=0)
    # The bare loop evaluates the very points the sampler evaluated (the start, then every
    # leapfrog step, in the same batches: the chains still moving at that step), since a
    # gradient's cost can depend on where it is taken and on the batch size.
    points = [np.repeat(x0[None, :], n_chains, axis=0)]
    for tr in probe.trajectories:  # positions (chain, step, dim)
        for k in range(1, tr.positions.shape[1]):
            rows = tr.positions[:, k]
            rows = rows[np.all(np.isfinite(rows), axis=1)]  # nothing is evaluated after a divergence
            if rows.size:
                points.append(np.ascontiguousarray(rows))
    n_grad = sum(x.shape[0] for x in points)
    assert n_grad == probe.total_grad + n_chains  # plus the gradients at the start
    n_calls = len(points)

    def bare():
        for x in points:
            vg(x)

    def ours():
        pg.sample(target, kernel, x0, n_draws=n_draws, n_chains=n_chains, seed=1, warmup=0)

    def hand():
        hand_written_hmc(vg, x0, step_size, n_steps, n_draws, 1)

    # interleave them so that a burst of load elsewhere hits them alike
    fns = (("bare", bare), ("ours", ours)) + ((("hand", hand),) if n_chains == 1 else ())
    results = {key: [] for key, _ in fns}
    for _ in range(repeats):
        for key, fn in fns:
            results[key].append(best_of(fn, 1))
    best = {k: Timing(min(t.wall for t in v), min(t.cpu for t in v)) for k, v in results.items()}
    t_bare, t_ours, t_hand = best["bare"], best["ours"], best.get("hand")
    return {
        "name": name, "n_chains": n_chains, "grad_ms": 1e3 * t_bare.wall / n_calls,
        "n_grad": n_grad, "acceptance": float(np.mean(probe.accepted)),
        "ratio_bare": t_ours / t_bare, "ratio_hand": t_ours / t_hand if t_hand else None,
        "hand_over_bare": t_hand / t_bare if t_hand else None,
        "fixed_us": (t_ours - t_bare) * (1e6 / n_calls),
        "hand_fixed_us": (t_hand - t_bare) * (1e6 / n_calls) if t_hand else None,
    }


def print_overhead(rows):
    print("## Sampler overhead, 1 and 4 chains (HMC, 10 leapfrog steps, no warm-up)\n")
    print("Wall time, CPU time in parentheses. A gradient is one batched call for all chains "
          "still moving (4 rows with 4 chains); fixed cost is per leapfrog step (per batched call).\n")
    print("| target | chains | gradient call (ms) | pg.sample / bare gradients | goal "
          "| fixed cost per step, ours (µs) | fixed cost per step, hand-written (µs) "
          "| pg.sample / hand-written HMC | goal |")
    print("|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        # late_returns is the brief's "~0.1 ms gradient" case; count it in even if it measures a bit less
        costly = r["grad_ms"] >= 0.1 or r["name"].startswith("late_returns()")
        goal = "<= 1.25" if costly else "n/a (< 0.1 ms): see µs"
        hand = (f"{r['hand_fixed_us'].fmt('.1f')} | {r['ratio_hand'].fmt('.2f')} | <= 1.1"
                if r["ratio_hand"] is not None else "n/a | n/a (one chain only) | n/a")
        print(f"| {r['name']} | {r['n_chains']} | {r['grad_ms']:.4f} | {r['ratio_bare'].fmt('.2f')} "
              f"| {goal} | {r['fixed_us'].fmt('.1f')} | {hand} |")
    print()
    for r in rows:
        costly = r["grad_ms"] >= 0.1 or r["name"].startswith("late_returns()")
        verdicts = []
        if costly:
            verdicts.append(f"vs bare {'met' if r['ratio_bare'].wall <= 1.25 else 'MISSED'}")
        if r["ratio_hand"] is not None:
            verdicts.append(f"vs hand-written {'met' if r['ratio_hand'].wall <= 1.1 else 'MISSED'}")
        if verdicts:
            print(f"- {r['name']}, {r['n_chains']} chain(s): {', '.join(verdicts)} (wall time)")
    print()


def batching_row(n_batch, n_single, n_draws, repeats):
    target = pg.demos.correlated_gaussian(dim=10)
    kernel = pg.HMC(0.1, 10)

    def single_loop():
        for seed in range(n_single):
            pg.sample(target, kernel, n_draws=n_draws, n_chains=1, seed=seed, warmup=0)

    t_single = best_of(single_loop, repeats) / n_single
    t_batch = best_of(lambda: pg.sample(target, kernel, n_draws=n_draws, n_chains=n_batch, seed=0, warmup=0),
                      repeats) / n_batch
    return {"per_chain_single_ms": t_single * 1e3, "per_chain_batch_ms": t_batch * 1e3,
            "speedup": t_single / t_batch, "n_batch": n_batch, "n_draws": n_draws}


# ------------------------------------------------------------------- 5. Gibbs conditionals
_MU = np.array([0.5, -0.3])
_COV = np.array([[1.0, 0.9], [0.9, 2.25]])  # sd 1 and 1.5, correlation 0.6
_PREC = np.linalg.inv(_COV)
_LO, _HI = np.array([-0.4, -1.5]), np.array([2.2, 3.0])


def _gaussian_log_density(x):
    d = x - _MU
    return -0.5 * np.einsum("ni,ij,nj->n", d, _PREC, d)


def _box_log_density(x):
    inside = np.all((x >= _LO) & (x <= _HI), axis=-1)
    return np.where(inside, _gaussian_log_density(x), -np.inf)


def _conditional(i, x):
    """Location and scale of x[i] given x[1 - i] under N(_MU, _COV) (Gaussian conditioning)."""
    j = 1 - i
    loc = _MU[i] + _COV[i, j] / _COV[j, j] * (x[j] - _MU[j])
    return loc, np.sqrt(_COV[i, i] - _COV[i, j] ** 2 / _COV[j, j])


class _Normal:
    """The hand-written conditional: cdf/ppf straight from scipy.special (same numbers as norm)."""

    def __init__(self, loc, scale):
        self.loc, self.scale = loc, scale

    def cdf(self, v):
        from scipy.special import ndtr

        return ndtr((v - self.loc) / self.scale)

    def ppf(self, u):
        from scipy.special import ndtri

        return ndtri(u) * self.scale + self.loc


class _TruncNormal:
    """Hand-written truncated normal: Phi and Phi^-1 rescaled to the box's interval."""

    def __init__(self, lo, hi, loc, scale):
        from scipy.special import ndtr

        self.loc, self.scale = loc, scale
        self.p_lo, self.p_hi = ndtr((lo - loc) / scale), ndtr((hi - loc) / scale)

    def cdf(self, v):
        from scipy.special import ndtr

        return (ndtr((v - self.loc) / self.scale) - self.p_lo) / (self.p_hi - self.p_lo)

    def ppf(self, u):
        from scipy.special import ndtri

        return ndtri(self.p_lo + u * (self.p_hi - self.p_lo)) * self.scale + self.loc


def _light_truncnorm(i, x):
    loc, scale = _conditional(i, x)
    return pg.NormalConditional(loc, scale, low=_LO[i], high=_HI[i])


def _frozen_norm(i, x):
    import scipy.stats

    return scipy.stats.norm(*_conditional(i, x))


def _hand_norm(i, x):
    return _Normal(*_conditional(i, x))


def _frozen_truncnorm(i, x):
    import scipy.stats

    loc, scale = _conditional(i, x)
    return scipy.stats.truncnorm((_LO[i] - loc) / scale, (_HI[i] - loc) / scale, loc=loc, scale=scale)


def _pg_frozen_norm(i, x):
    import scipy.stats

    return pg.freeze(scipy.stats.norm, *_conditional(i, x))


def _pg_frozen_truncnorm(i, x):
    import scipy.stats

    loc, scale = _conditional(i, x)
    return pg.freeze(scipy.stats.truncnorm, (_LO[i] - loc) / scale, (_HI[i] - loc) / scale,
                     loc=loc, scale=scale)


def _hand_truncnorm(i, x):
    return _TruncNormal(_LO[i], _HI[i], *_conditional(i, x))


def gibbs_rows(sweeps, repeats):
    """{case: {"ms": (wall, cpu) ms per sweep, "evals": log-density evaluations per sweep}}."""
    import scipy.stats

    gauss = pg.Target(_gaussian_log_density, lambda x: -(x - _MU) @ _PREC, dim=2, vectorized=True)
    box = pg.Target(_box_log_density, lambda x: -(x - _MU) @ _PREC, dim=2, vectorized=True)
    loop = pg.Target(lambda x: float(_gaussian_log_density(np.asarray(x)[None])[0]),
                     lambda x: -(np.asarray(x) - _MU) @ _PREC, dim=2)  # called once per point
    starts = np.array([[0.0, -1.0], [2.0, 2.5], [1.0, 0.0], [-0.3, 1.0]])
    cases = {
        "gaussian: frozen scipy.stats.norm": (gauss, _frozen_norm, sweeps),
        "gaussian: hand-written ndtr/ndtri": (gauss, _hand_norm, sweeps),
        "gaussian: frozen scipy.stats.norm, vectorized=True": (gauss, _frozen_norm, sweeps, True),
        "gaussian: pg.freeze(scipy.stats.norm, ...)": (gauss, _pg_frozen_norm, sweeps),
        "gaussian: pg.freeze(scipy.stats.norm, ...), vectorized=True": (gauss, _pg_frozen_norm, sweeps, True),
        "gaussian: hand-written ndtr/ndtri, vectorized=True": (gauss, _hand_norm, sweeps, True),
        "gaussian: numeric": (gauss, None, max(sweeps // 10, 3)),
        "box: frozen scipy.stats.truncnorm": (box, _frozen_truncnorm, sweeps),
        "box: hand-written ndtr/ndtri": (box, _hand_truncnorm, sweeps),
        "box: frozen scipy.stats.truncnorm, vectorized=True": (box, _frozen_truncnorm, sweeps, True),
        "box: pg.freeze(scipy.stats.truncnorm, ...)": (box, _pg_frozen_truncnorm, sweeps),
        "box: pg.freeze(scipy.stats.truncnorm, ...), vectorized=True": (box, _pg_frozen_truncnorm, sweeps, True),
        "box: hand-written ndtr/ndtri, vectorized=True": (box, _hand_truncnorm, sweeps, True),
        "box: pg.NormalConditional": (box, _light_truncnorm, sweeps),
        "box: pg.NormalConditional, vectorized=True": (box, _light_truncnorm, sweeps, True),
        "box: numeric": (box, None, max(sweeps // 10, 3)),
        "gaussian, non-vectorised target: numeric": (loop, None, max(sweeps // 40, 2)),
        "apiaries-12 (dim 14): numeric": (pg.demos.apiaries(n_groups=12), None,
                                          max(sweeps // 40, 2)),
    }
    if sweeps >= 100:  # a model whose evaluations dominate: ~1.5-9 s per sweep
        cases["late_returns (dim 20, 2000 rows): numeric"] = (pg.demos.late_returns(), None, 1)
    if "vectorized" not in inspect.signature(pg.Gibbs).parameters:  # code from before it existed
        cases = {k: v for k, v in cases.items() if len(v) == 3}
    for name in ("NormalConditional", "freeze"):  # code from before they existed
        if not hasattr(pg, name):
            cases = {k: v for k, v in cases.items() if f"pg.{name}" not in k}
    out = {name: {"wall": [], "cpu": []} for name in cases}
    for _ in range(repeats):  # interleaved, so a burst of load elsewhere hits every case alike
        for name, (target, cond, n, *vectorized) in cases.items():
            init = starts if target.dim == 2 else None
            kernel = pg.Gibbs(cond, shift=0.381966, **({"vectorized": True} if vectorized else {}))
            target.n_density = 0
            t = best_of(lambda: pg.sample(target, kernel, init, n_draws=n, n_chains=4, seed=0,
                                          warmup=0), 1)
            out[name]["wall"].append(1e3 * t.wall / n)
            out[name]["cpu"].append(1e3 * t.cpu / n)
            out[name]["evals"] = target.n_density / n
    # the floor under (a): freezing one scipy.stats distribution, times chains x coordinates
    n_freeze = 200
    t = best_of(lambda: [scipy.stats.norm(0.1, 1.2) for _ in range(n_freeze)], repeats)
    freeze = {"wall": [1e3 * t.wall / n_freeze * 8], "cpu": [1e3 * t.cpu / n_freeze * 8], "evals": 0}
    out["freezing scipy.stats.norm(loc, scale) 8 times (4 chains x 2 coordinates)"] = freeze
    return {name: {"ms": (min(v["wall"]), min(v["cpu"])), "evals": v["evals"]} for name, v in out.items()}


def _child_json(args, before=None):
    """Run this script with ``args`` in a child process (importing phaseglass from
    ``before`` when given) and return the JSON it prints last."""
    env = dict(os.environ)
    if before:
        env["PYTHONPATH"] = before + os.pathsep + env.get("PYTHONPATH", "")
    proc = subprocess.run([sys.executable, os.path.abspath(__file__), *args],
                          capture_output=True, text=True, env=env, timeout=3600)
    if proc.returncode != 0:
        raise SystemExit(f"child run {args} failed:\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _gibbs_before(before, sweeps, repeats):
    """The same rows measured in a child process that imports phaseglass from ``before``."""
    return _child_json(["--gibbs-json", "--sweeps", str(sweeps), "--repeats", str(repeats)], before)


def print_gibbs(sweeps, repeats, before=None):
    rows = gibbs_rows(sweeps, repeats)
    old = _gibbs_before(before, sweeps, repeats) if before else None
    print("## Gibbs conditionals: ms per sweep, 4 chains, shift 0.381966\n")
    print("Best of the repeats; wall time, CPU time in parentheses" +
          (f"; before = phaseglass from {before}, measured in a child process right after." if before else ".")
          + "\n")
    head = "| case | ms per sweep | evaluations per sweep |"
    if old:
        head += " before: ms per sweep | before: evaluations | before / now |"
    print(head)
    print("|" + "---|" * (head.count("|") - 1))
    for name, r in rows.items():
        line = f"| {name} | {r['ms'][0]:.3f} ({r['ms'][1]:.3f}) | {r['evals']:.0f} |"
        if old and name in old:
            o = old[name]
            line += (f" {o['ms'][0]:.3f} ({o['ms'][1]:.3f}) | {o['evals']:.0f} | "
                     f"{o['ms'][0] / r['ms'][0]:.2f} ({o['ms'][1] / r['ms'][1]:.2f}) |")
        elif old:
            line += " | | |"
        print(line)
    print()
    family = {"gaussian": "norm", "box": "truncnorm"}
    for kind in ("gaussian", "box"):
        for suffix in ("", ", vectorized=True"):
            hand = rows[f"{kind}: hand-written ndtr/ndtri{suffix}"]
            for label, key in (("pg.freeze", f"{kind}: pg.freeze(scipy.stats.{family[kind]}, ...){suffix}"),
                               ("scipy's own freezing", f"{kind}: frozen scipy.stats.{family[kind]}{suffix}")):
                if key not in rows:
                    continue
                ratio = rows[key]["ms"][0] / hand["ms"][0]
                verdict = ("met" if ratio <= 3 else "MISSED") if label == "pg.freeze" else \
                    "reference: scipy's set-up of each frozen object is inside the user's function"
                if label == "pg.freeze" and ratio > 3 and kind == "box":
                    verdict += (" (scipy's truncnorm ppf/cdf themselves cost this; "
                                "pg.NormalConditional gives the same truncated normal fast)")
                print(f"- {kind}{suffix}: frozen scipy.stats.{family[kind]} by {label} / hand-written = "
                      f"{ratio:.1f} ({rows[key]['ms'][1] / hand['ms'][1]:.1f} CPU); goal <= 3: {verdict}")
    if "box: pg.NormalConditional" in rows:
        light = rows["box: pg.NormalConditional"]["ms"][0] / rows["box: hand-written ndtr/ndtri"]["ms"][0]
        print(f"- box: pg.NormalConditional / hand-written (per chain) = {light:.1f}")
    freeze = next(v for k, v in rows.items() if k.startswith("freezing"))
    print(f"- scipy's own freezing alone costs {freeze['ms'][0]:.2f} ms per sweep here, "
          f"{freeze['ms'][0] / rows['gaussian: hand-written ndtr/ndtri']['ms'][0]:.1f} x a whole "
          "hand-written sweep (and a quarter of that with vectorized=True, still "
          f"{freeze['ms'][0] / 4 / rows['gaussian: hand-written ndtr/ndtri, vectorized=True']['ms'][0]:.1f} x): "
          "the user's function builds the frozen object, which Gibbs cannot skip; pg.freeze builds "
          "the same object without that set-up")
    if old:
        for name in rows:
            if name.endswith("numeric") and name in old:
                speedup = old[name]["ms"][0] / rows[name]["ms"][0]
                print(f"- {name}: {speedup:.1f} x faster than before (goal >= 5: "
                      f"{'met' if speedup >= 5 else 'MISSED'}), "
                      f"{old[name]['evals'] / max(rows[name]['evals'], 1):.1f} x fewer evaluations")
    print()


def jax_models():
    """(name, jax log-density for one point, numpy Target, finite-difference Target, points (4, dim))."""
    import warnings

    import jax.numpy as jnp

    rng = np.random.default_rng(7)
    models = []
    lr = pg.demos.late_returns()
    X, late, inv_var = lr.features, lr.late, 1.0 / 2.5**2  # the demo's data and prior

    def lr_jax(b):
        eta = X @ b
        return jnp.sum(late * eta - jnp.logaddexp(0.0, eta)) - 0.5 * inv_var * jnp.sum(b * b)

    models.append(("late_returns() 2000x20", lr_jax, lr, lr.true_coef + 0.05 * rng.standard_normal((4, 20))))
    for d in (10, 100):
        g = pg.demos.correlated_gaussian(dim=d)
        prec = np.linalg.inv(g.cov)

        def g_jax(x, prec=prec):
            return -0.5 * x @ prec @ x

        models.append((f"correlated_gaussian(dim={d})", g_jax, g, rng.standard_normal((4, d))))
    out = []
    for name, fn, numpy_target, x in models:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the finite-difference fallback warns, on purpose here
            fd = pg.Target(numpy_target.log_density, dim=numpy_target.dim, vectorized=True)
        out.append((name, fn, numpy_target, fd, x))
    return out


def autodiff_rows(n_calls, repeats):
    """Cost of one value-and-gradient call for 4 chains: JAX, hand-written NumPy, finite differences."""
    rows = []
    for name, fn, numpy_target, fd_target, x in jax_models():
        t0 = time.perf_counter()
        jax_target = pg.Target.from_jax(fn, dim=numpy_target.dim)
        jax_target.value_and_grad(x)  # traces and compiles for a batch of 4
        compile_s = time.perf_counter() - t0
        g_jax = jax_target.grad(x)
        g_np = numpy_target.grad(x)
        agree = float(np.max(np.abs(g_jax - g_np)) / np.max(np.abs(g_np)))
        per_call = {}
        # interleave the three so that a burst of load elsewhere hits them alike
        results = {"jax": [], "numpy": [], "fd": []}
        for _ in range(repeats):
            for key, t in (("jax", jax_target), ("numpy", numpy_target), ("fd", fd_target)):
                calls = max(n_calls // (10 if key == "fd" else 1), 3)
                results[key].append(best_of(lambda t=t, calls=calls: [t.value_and_grad(x) for _ in range(calls)], 1)
                                    / calls)
        for key, ts in results.items():
            per_call[key] = Timing(min(t.wall for t in ts), min(t.cpu for t in ts))
        rows.append({"name": name, "dim": numpy_target.dim, "compile_s": compile_s, "agree": agree,
                     **{f"{k}_us": v * 1e6 for k, v in per_call.items()},
                     "jax_over_numpy": per_call["jax"] / per_call["numpy"],
                     "fd_over_jax": per_call["fd"] / per_call["jax"],
                     "fd_over_numpy": per_call["fd"] / per_call["numpy"]})
    return rows


def print_autodiff(n_calls, repeats):
    print("## Gradients from JAX, 4 chains per call (Target.from_jax)\n")
    try:
        import jax
    except ImportError:
        print("Skipped: JAX is not installed (pip install \"phaseglass[jax]\").")
        return
    print(f"JAX {jax.__version__}, float64, CPU. One `target.value_and_grad(x)` with x of shape "
          f"(4, dim), through the Target (counting, checks) as the samplers call it; the "
          f"hand-written NumPy gradient is the demo's own, finite differences cost 2*dim "
          f"log-density evaluations per point (one batched call). Wall time, CPU time in "
          f"parentheses.\n")
    rows = autodiff_rows(n_calls, repeats)
    print("| model | JAX (µs) | NumPy, hand-written (µs) | finite differences (µs) "
          "| JAX / NumPy | finite differences / JAX | finite differences / NumPy "
          "| JAX first call, tracing + compiling (s) | max gradient difference, JAX vs NumPy (relative) |")
    print("|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['name']} | {r['jax_us'].fmt('.0f')} | {r['numpy_us'].fmt('.0f')} | "
              f"{r['fd_us'].fmt('.0f')} | {r['jax_over_numpy'].fmt('.2f')} | "
              f"{r['fd_over_jax'].fmt('.1f')} | {r['fd_over_numpy'].fmt('.1f')} | "
              f"{r['compile_s']:.2f} | {r['agree']:.1e} |")
    print()


# ------------------------------------------------------------------- 6. memory

def _rss_bytes():
    """Resident set size now (Linux /proc; 0 elsewhere)."""
    try:
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE")
    except (OSError, ValueError):
        return 0


def _run_arrays_bytes(run):
    """Bytes of the Run's record arrays, each distinct buffer once (views count their base)."""
    fields = [run.draws, run.unconstrained, *(getattr(run, k) for k in (
        "accepted", "accept_prob", "energy", "energy_error", "divergent", "n_grad", "u",
        "step_size")), *run.extras.values()]
    seen = {}
    for a in fields:
        if isinstance(a, np.ndarray):
            base = a if a.base is None else a.base
            seen[id(base)] = base.nbytes
    return sum(seen.values())


def memory_case(dim, n_draws):
    """One measurement in this (fresh) process: bytes of draws, Run arrays and the peak rise."""
    import resource

    target = pg.demos.correlated_gaussian(dim=dim)
    kernel = pg.HMC(0.05, 1)
    pg.sample(target, kernel, n_draws=5, n_chains=4, warmup=0, seed=0)  # first-call costs
    before = _rss_bytes()
    run = pg.sample(target, kernel, n_draws=n_draws, n_chains=4, warmup=0, seed=1)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # KiB on Linux
    return {"dim": dim, "n_draws": n_draws, "draws": run.draws.nbytes,
            "run": _run_arrays_bytes(run), "peak": peak - before}


def _memory_child(dim, n_draws, before=None):
    return _child_json(["--memory-json", "--dim", str(dim), "--draws", str(n_draws)], before)


def replay_case(repeats):
    """Seconds to sample a run that diverges often, and to read all its replays afterwards."""
    target = pg.demos.apiaries("centred", n_groups=12)
    kernel = pg.HMC(0.5, 20)
    best, read, n_div = np.inf, np.inf, 0
    for _ in range(repeats):
        started = time.perf_counter()
        run = pg.sample(target, kernel, n_draws=300, n_chains=4, warmup=0, seed=1)
        mid = time.perf_counter()
        for _, _, traj in run.divergences:  # integrates each replay (already done before)
            traj.positions
        end = time.perf_counter()
        best, read, n_div = min(best, mid - started), min(read, end - mid), run.n_divergent
    return {"sample_s": best, "read_s": read, "n_divergent": n_div,
            "n_transitions": run.n_chains * run.n_draws}


def print_memory(n_draws, before=None):
    print(f"## Memory: pg.sample, HMC, 4 chains x {n_draws} draws, no warm-up\n")
    print("Peak = rise of the process's maximum resident size while sampling (fresh process per "
          "row)" + (f"; before = phaseglass from {before}." if before else ".") + "\n")
    print("| code | dim | draws array (MB) | Run's arrays (MB) | Run / draws | peak (MB) "
          "| peak / draws | peak / Run | goal |")
    print("|---|---|---|---|---|---|---|---|---|")
    for label, where in (("now", None), ("before", before)):
        if label == "before" and not before:
            continue
        for dim in (20, 2):
            r = _memory_child(dim, n_draws, where)
            goal = "peak / draws <= 1.6" if dim == 20 else "peak / Run <= 1.3"
            met = (r["peak"] / r["draws"] <= 1.6) if dim == 20 else (r["peak"] / r["run"] <= 1.3)
            print(f"| {label} | {dim} | {r['draws'] / 1e6:.1f} | {r['run'] / 1e6:.1f} | "
                  f"{r['run'] / r['draws']:.2f} | {r['peak'] / 1e6:.1f} | "
                  f"{r['peak'] / r['draws']:.2f} | {r['peak'] / r['run']:.2f} | "
                  f"{goal}{'' if label == 'before' else (': met' if met else ': MISSED')} |")
    print()
    print("## Divergence replays: centred apiaries-12, HMC(0.5, 20), 4 x 300 draws, no warm-up\n")
    print("| code | divergent transitions | sample (s) | reading every replay afterwards (s) |")
    print("|---|---|---|---|")
    rows = [("now", _child_json(["--replay-json"]))]
    if before:
        rows.append(("before", _child_json(["--replay-json"], before)))
    for label, r in rows:
        print(f"| {label} | {r['n_divergent']} of {r['n_transitions']} | {r['sample_s']:.2f} | "
              f"{r['read_s']:.2f} |")
    if before:
        print(f"\nSampling now takes {rows[0][1]['sample_s'] / rows[1][1]['sample_s']:.2f} x the "
              f"time it took before (replays deferred until read).")
    print()


def machine():
    lines = [f"- machine: {platform.machine()}, {os.cpu_count()} logical CPUs "
             f"(nproc {len(os.sched_getaffinity(0)) if hasattr(os, 'sched_getaffinity') else '?'}), "
             f"Python {platform.python_version()}, numpy {np.__version__}"]
    try:
        from threadpoolctl import threadpool_info

        blas = [f"{i['internal_api']} {i.get('version')} ({i.get('architecture')}, "
                f"{i['num_threads']} threads)" for i in threadpool_info()]
        lines.append(f"- BLAS: {'; '.join(blas)}")
    except ImportError:
        pass
    env = {k: os.environ[k] for k in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")
           if k in os.environ}
    lines.append(f"- environment: {env}")
    lines.append("- BLAS pinned: " + ", ".join(
        f"{k}={os.environ[k]}" for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")))
    if hasattr(os, "getloadavg"):
        lines.append(f"- load average at start (1, 5, 15 min): {os.getloadavg()}")
    return "\n".join(lines)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes, one repeat (smoke run)")
    parser.add_argument("--jax-only", action="store_true", help="only question 4, gradients from JAX")
    parser.add_argument("--gibbs-only", action="store_true", help="only question 5, Gibbs conditionals")
    parser.add_argument("--before", default=None,
                        help="questions 5 and 6 also against phaseglass imported from this widgets/ folder")
    parser.add_argument("--sweeps", type=int, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--repeats", type=int, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--gibbs-json", action="store_true", help=argparse.SUPPRESS)  # for --before
    parser.add_argument("--overhead-only", action="store_true",
                        help="only question 1, sampler overhead for 1 and 4 chains")
    parser.add_argument("--memory-only", action="store_true",
                        help="only questions 6 and 7, memory and divergence replays")
    parser.add_argument("--memory-json", action="store_true", help=argparse.SUPPRESS)  # a child
    parser.add_argument("--dim", type=int, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--draws", type=int, default=None, help=argparse.SUPPRESS)
    parser.add_argument("--replay-json", action="store_true", help=argparse.SUPPRESS)  # a child
    args = parser.parse_args()
    if args.gibbs_json:
        print(json.dumps(gibbs_rows(args.sweeps, args.repeats)))
        return
    if args.memory_json:
        print(json.dumps(memory_case(args.dim, args.draws)))
        return
    if args.replay_json:
        print(json.dumps(replay_case(3)))
        return
    repeats = 1 if args.quick else 5
    scale = 0.1 if args.quick else 1.0

    print("# phaseglass core benchmark\n")
    if args.quick:
        print("(--quick: a smoke run with tiny sizes and one repeat; the numbers mean little)\n")
    print(machine())
    print()
    if args.jax_only:
        print_autodiff(n_calls=30 if args.quick else 300, repeats=repeats)
        return
    memory_draws = 10_000 if args.quick else 100_000
    if args.memory_only:
        print_memory(memory_draws, args.before)
        return
    gibbs = dict(sweeps=20 if args.quick else 200, repeats=repeats, before=args.before)
    if args.gibbs_only:
        print_gibbs(**gibbs)
        return

    cases = []
    for d, draws in ((10, 2000), (100, 1000), (1000, 200)):
        cases.append((f"correlated_gaussian(dim={d})", pg.demos.correlated_gaussian(dim=d),
                      np.zeros(d), 0.1, 10, max(int(draws * scale), 10)))
    lr = pg.demos.late_returns()
    cases.append(("late_returns() 2000x20", lr, lr.true_coef.copy(), 0.02, 10,
                  max(int(300 * scale), 10)))
    small = pg.demos.late_returns(n_rows=400, n_coef=11)
    cases.append(("late_returns(400 rows, 11 coefficients)", small, small.true_coef.copy(), 0.03, 10,
                  max(int(300 * scale), 10)))
    rows = [overhead_row(*case, repeats=2 * repeats - 1, n_chains=c)  # these are short
            for c in (1, 4) for case in cases]
    print_overhead(rows)
    if args.overhead_only:
        return

    b = batching_row(n_batch=1000, n_single=10 if not args.quick else 3,
                     n_draws=max(int(200 * scale), 10), repeats=repeats)
    print("## Batching, correlated_gaussian(dim=10), HMC(0.1, 10)\n")
    print("| per chain: single-chain runs (ms) | per chain: batch of 1000 (ms) | speed-up | goal |")
    print("|---|---|---|---|")
    print(f"| {b['per_chain_single_ms'].fmt('.2f')} | {b['per_chain_batch_ms'].fmt('.3f')} | "
          f"{b['speedup'].fmt('.0f')} | >= 50 |")
    print(f"\n({b['n_draws']} draws per chain; goal {'met' if b['speedup'].wall >= 50 else 'MISSED'}.)")
    print()

    print_autodiff(n_calls=30 if args.quick else 300, repeats=repeats)
    print_gibbs(**gibbs)
    print_memory(memory_draws, args.before)


if __name__ == "__main__":
    main()
