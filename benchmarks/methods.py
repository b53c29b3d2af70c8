"""Benchmark of the method family: effective draws per unit of work on the demo models.

Run with ``python benchmarks/methods.py`` (add ``--quick`` for a short smoke run). It
prints the machine and one markdown table; it is not a test and asserts nothing.

For every demo model and method, after warm-up (dual averaging toward the method's
default acceptance and a diagonal metric, see ``pg.sample``), the kept draws are
scored by the smallest bulk ESS over the parameters (``pg.ess``, the
rank-normalised ESS of Vehtari et al. 2021), divided by

* gradient evaluations for the gradient-based methods (HMC, partial-refresh HMC),
* log-density evaluations for the gradient-free ones (random walk, Gibbs with
  numeric conditionals), which is a different unit: a gradient usually costs a
  small multiple of a log-density evaluation, so the two columns are not
  comparable one-to-one,
* and, for all of them, seconds of sampling (process CPU time, which other
  processes on a busy machine disturb less than wall time; warm-up excluded).

Only the sampling phase is counted (the target's counters are reset after
warm-up). Settings are the defaults of each method except where stated in METHODS;
HMC uses a fixed number of steps, so its ranking depends on that choice: when the
tuned step size times the number of steps lands near a period of the posterior's
oscillation (late returns, in one run: 0.67 x 10 steps, about 2 pi in whitened units)
trajectories come back near their start and its ESS collapses.

A second table sets the no-U-turn sampler (``pg.NUTS``, which picks its
trajectory length itself) beside the best fixed-length HMC on each model: HMC is
run with several step counts (FIXED_STEPS, the step size tuned by warm-up each
time) and the one with the most ESS per gradient is kept. NUTS gets the same
warm-up and draws, so its column is ESS per gradient without choosing a length.
The best of five step counts is picked in hindsight on the very draws it is scored
on, which flatters HMC: it is the ceiling a user reaches only after trying them all.

Caution: a ranking on one demo model does not transfer automatically to another
model; the numbers say how these settings did on these targets, with this seed,
and ESS estimates from a few thousand draws carry roughly 10-20% noise.
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # before numpy is imported

import argparse  # noqa: E402
import platform  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

import phaseglass as pg  # noqa: E402

MODELS = {
    "gaussian d=10": lambda: pg.demos.correlated_gaussian(dim=10),
    "12 apiaries (non-centred)": lambda: pg.demos.get("apiaries-12-noncentred"),
    "glaze ridge": pg.demos.glaze_ridge,
    "late returns": pg.demos.late_returns,
}

# name -> (kernel factory, unit, warm-up, kept draws per chain)
METHODS = {
    "HMC, 10 steps": (lambda: pg.HMC(0.1, 10), "grad", 1000, 2000),
    "partial refresh, fresh u": (lambda: pg.PartialRefreshHMC(0.1), "grad", 1000, 5000),
    "partial refresh, drifting u": (
        lambda: pg.PartialRefreshHMC(0.1, uniform=pg.DriftingUniform(0.03)), "grad", 1000, 5000),
    "random walk": (lambda: pg.RandomWalk(0.5), "density", 2000, 20000),
    "Gibbs, numeric conditionals": (lambda: pg.Gibbs(), "density", 50, 500),
    "NUTS": (lambda: pg.NUTS(0.1), "grad", 1000, 2000),
}

#: Step counts tried for the best fixed-length HMC in the NUTS comparison.
FIXED_STEPS = (3, 5, 10, 20, 40)

# Gibbs with numeric conditionals evaluates ~1200 log-densities per coordinate and
# chain per transition; on the 2000-row logistic regression that is minutes per
# hundred transitions, so it is left out there.
SKIP = {("late returns", "Gibbs, numeric conditionals")}

N_CHAINS = 4
SEED = 20240601


def bench(target, make_kernel, unit, warmup, n_draws):
    sampler = pg.Sampler(target, make_kernel(), n_chains=N_CHAINS, seed=SEED)
    sampler.warm_up(warmup)
    target.reset_counts()
    wall, cpu = time.perf_counter(), time.process_time()
    sampler.step(n_draws)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    run = sampler.run
    ess = float(np.min(pg.ess(run.draws, method="bulk")))
    work = target.n_grad if unit == "grad" else target.n_density
    out = {"ess": ess, "work": work, "cpu": cpu, "wall": wall,
           "accept": float(np.mean(run.accepted)), "rhat": float(np.max(pg.rhat(run.draws)))}
    if "n_leapfrog" in run.extras:
        out["steps"] = float(np.mean(run.extras["n_leapfrog"]))
        out["depth_hit"] = float(np.mean(run.extras["depth_limit_hit"]))
    return out


def nuts_against_fixed_hmc(results, scale):
    """Second table: NUTS next to the best fixed-length HMC (by ESS per gradient) per model."""
    print("\n## NUTS against the best fixed-length HMC\n")
    print("| model | best HMC steps | HMC ESS per 1000 grad | NUTS ESS per 1000 grad | NUTS / HMC "
          "| NUTS mean steps | NUTS depth-limit hits | HMC step counts tried (ESS per 1000 grad) |")
    print("|---|---:|---:|---:|---:|---:|---:|---|")
    _, _, warmup, n_draws = METHODS["HMC, 10 steps"]
    warmup, n_draws = max(int(warmup * scale), 20), max(int(n_draws * scale), 20)
    for model_name, make_target in MODELS.items():
        tried = {}
        for steps in FIXED_STEPS:
            if steps == 10 and (model_name, "HMC, 10 steps") in results:
                r = results[(model_name, "HMC, 10 steps")]
            else:
                r = bench(make_target(), lambda s=steps: pg.HMC(0.1, s), "grad", warmup, n_draws)
            tried[steps] = 1000 * r["ess"] / r["work"]
        best = max(tried, key=tried.get)
        nuts = results.get((model_name, "NUTS"))
        if nuts is None:
            nuts = bench(make_target(), METHODS["NUTS"][0], "grad", warmup, n_draws)
        per = 1000 * nuts["ess"] / nuts["work"]
        listing = ", ".join(f"{k}: {v:.2f}" for k, v in tried.items())
        print(f"| {model_name} | {best} | {tried[best]:.2f} | {per:.2f} | {per / tried[best]:.2f} | "
              f"{nuts['steps']:.1f} | {nuts['depth_hit']:.1%} | {listing} |", flush=True)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="short smoke run (numbers meaningless)")
    args = parser.parse_args(argv)
    scale = 0.1 if args.quick else 1.0

    print(f"# phaseglass {pg.__version__} methods benchmark")
    print(f"{platform.platform()}, Python {platform.python_version()}, numpy {np.__version__}, "
          f"{os.cpu_count()} CPUs; {N_CHAINS} chains, seed {SEED}\n")
    print("| model | method | min bulk ESS | per 1000 grad | per 1000 density | per CPU s "
          "| acceptance | max R-hat | sampling CPU s |")
    print("|---|---|---:|---:|---:|---:|---:|---:|---:|")
    started = time.perf_counter()
    results = {}
    for model_name, make_target in MODELS.items():
        for method_name, (make_kernel, unit, warmup, n_draws) in METHODS.items():
            if (model_name, method_name) in SKIP:
                print(f"| {model_name} | {method_name} | skipped (cost) | | | | | | |", flush=True)
                continue
            r = bench(make_target(), make_kernel, unit, max(int(warmup * scale), 20),
                      max(int(n_draws * scale), 20))
            results[(model_name, method_name)] = r
            per_work = 1000 * r["ess"] / r["work"]
            grad_col = f"{per_work:.2f}" if unit == "grad" else ""
            dens_col = f"{per_work:.3f}" if unit == "density" else ""
            print(f"| {model_name} | {method_name} | {r['ess']:.0f} | {grad_col} | {dens_col} | "
                  f"{r['ess'] / r['cpu']:.0f} | {r['accept']:.2f} | {r['rhat']:.3f} | "
                  f"{r['cpu']:.1f} |", flush=True)
    nuts_against_fixed_hmc(results, scale)
    print(f"\nTotal wall time {time.perf_counter() - started:.0f} s.")
    print("Caution: a ranking on a demo model does not transfer automatically to another model; "
          "rerun on yours. Gradient and density columns are different units.")


if __name__ == "__main__":
    main()
