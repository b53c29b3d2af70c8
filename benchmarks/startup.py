"""Benchmark of start-up: what ``import phaseglass`` costs against ``import numpy``.

Run with ``python benchmarks/startup.py`` (``--quick`` for a short smoke run; ``--source
DIR`` imports phaseglass from another checkout's ``widgets`` folder, e.g. a ``git worktree``
of an older commit, to measure "before"). It prints the machine and markdown tables of
numbers measured in this one run; it is not a test and asserts nothing.

Questions:

1. Import. Every measurement is a fresh Python process that times its own
   ``import numpy`` or ``import phaseglass`` with ``time.perf_counter`` (interpreter
   start-up excluded; the whole process's wall time is shown too). The two kinds
   alternate so a busy spell on the machine hits both; the median over the repeats is
   reported. Goal: ``import phaseglass`` <= 2 x ``import numpy`` (phaseglass imports
   numpy itself, so the ratio is 1 + what phaseglass adds over numpy).
2. First use, in the same fresh processes right after ``import phaseglass``: building a
   Target (a 2-D correlated Gaussian written as a user would, NumPy log-density and
   gradient), a short run (``pg.sample``, HMC, 4 chains x 100 draws, no warm-up), and the
   run's first summary, which computes ESS and R-hat and so loads scipy's statistics and
   FFT modules on first use. No goal: it shows where the cost moved.

BLAS is pinned to one thread in this process and in every child process:
OPENBLAS_NUM_THREADS=1, OMP_NUM_THREADS=1 and MKL_NUM_THREADS=1 are set before numpy is
imported (the children inherit them), so thread-pool start-up is the same in every
measurement; values already set in the environment are kept and printed.
"""

import os

_BLAS_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
for _var in _BLAS_VARS:
    os.environ.setdefault(_var, "1")  # before numpy is imported, here and in the children

import argparse  # noqa: E402
import json  # noqa: E402
import platform  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

_IMPORT = """
import time
t0 = time.perf_counter()
import {module}
t1 = time.perf_counter()
out = {{"import": t1 - t0}}
"""

_FIRST_USE = """
import numpy as np
import phaseglass as pg
cov = np.array([[1.0, 0.8], [0.8, 1.0]])
prec = np.linalg.inv(cov)
t0 = time.perf_counter()
target = pg.Target(lambda x: -0.5 * np.einsum("...i,ij,...j->...", x, prec, x),
                   lambda x: -x @ prec, dim=2, vectorized=True)
t1 = time.perf_counter()
run = pg.sample(target, pg.HMC(0.3, 5), n_draws=100, n_chains=4, warmup=0, seed=0)
t2 = time.perf_counter()
text = str(run.summary())
t3 = time.perf_counter()
out.update(target=t1 - t0, sample=t2 - t1, summary=t3 - t2)
"""

_PRINT = """
import json, sys
out["modules"] = len(sys.modules)
print(json.dumps(out))
"""


def child(module, source, first_use):
    """One fresh process: its own timings (s) and its whole wall time."""
    code = _IMPORT.format(module=module) + (_FIRST_USE if first_use else "") + _PRINT
    env = dict(os.environ)
    if source:
        env["PYTHONPATH"] = source + os.pathsep + env.get("PYTHONPATH", "")
    w = time.perf_counter()
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env,
                          timeout=300)
    wall = time.perf_counter() - w
    if proc.returncode != 0:
        raise SystemExit(f"child process failed:\n{proc.stderr}")
    result = json.loads(proc.stdout.strip().splitlines()[-1])
    result["process"] = wall
    return result


def machine():
    lines = [f"- machine: {platform.machine()}, {os.cpu_count()} logical CPUs, "
             f"Python {platform.python_version()} ({sys.executable})"]
    lines.append("- BLAS pinned: " + ", ".join(f"{v}={os.environ[v]}" for v in _BLAS_VARS))
    if hasattr(os, "getloadavg"):
        lines.append(f"- load average at start (1, 5, 15 min): {os.getloadavg()}")
    return "\n".join(lines)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="3 processes of each kind (smoke run)")
    parser.add_argument("--repeats", type=int, default=None, help="processes of each kind (default 11)")
    parser.add_argument("--source", default=None,
                        help="a checkout's widgets/ folder to import phaseglass from (default: installed)")
    args = parser.parse_args()
    repeats = args.repeats or (3 if args.quick else 11)

    print("# phaseglass start-up benchmark\n")
    print(machine())
    probe = child("phaseglass", args.source, first_use=False)  # warms the file cache, not counted
    where = subprocess.run([sys.executable, "-c", "import phaseglass; print(phaseglass.__file__)"],
                           capture_output=True, text=True,
                           env={**os.environ, "PYTHONPATH": args.source or ""}).stdout.strip()
    print(f"- phaseglass imported from: {where} ({probe['modules']} modules loaded)")
    print(f"- {repeats} fresh processes of each kind, alternating; medians\n")

    child("numpy", None, first_use=False)
    numpy_runs, pg_runs = [], []
    for _ in range(repeats):
        numpy_runs.append(child("numpy", args.source, first_use=False))
        pg_runs.append(child("phaseglass", args.source, first_use=True))

    def med(runs, key):
        return statistics.median(r[key] for r in runs)

    imp_np, imp_pg = med(numpy_runs, "import"), med(pg_runs, "import")
    ratio = statistics.median(p["import"] / n["import"] for n, p in zip(numpy_runs, pg_runs))
    print("## Import\n")
    print("| | import (ms) | whole process (ms)* | modules loaded after the import |")
    print("|---|---|---|---|")
    print(f"| `import numpy` | {imp_np * 1e3:.0f} | {med(numpy_runs, 'process') * 1e3:.0f} | "
          f"{numpy_runs[0]['modules']} |")
    print(f"| `import phaseglass` | {imp_pg * 1e3:.0f} | {med(pg_runs, 'process') * 1e3:.0f} | "
          f"{probe['modules']} |")
    print("\n*interpreter start-up included; the phaseglass processes also run the first-use steps "
          "below.")
    print(f"\nimport phaseglass / import numpy: **{imp_pg / imp_np:.2f}** (ratio of medians; "
          f"median of the per-pair ratios {ratio:.2f}); goal <= 2: "
          f"{'met' if imp_pg / imp_np <= 2 else 'MISSED'}\n")

    print("## First use, right after the import (same processes)\n")
    print("| step | median (ms) | range (ms) |")
    print("|---|---|---|")
    for key, label in (("target", "build a Target (2-D Gaussian, NumPy gradient)"),
                       ("sample", "pg.sample: HMC(0.3, 5), 4 chains x 100 draws, warmup=0"),
                       ("summary", "first run.summary() (loads scipy.stats and scipy.fft)")):
        vals = [r[key] * 1e3 for r in pg_runs]
        print(f"| {label} | {statistics.median(vals):.2f} | {min(vals):.2f} - {max(vals):.2f} |")
    total = imp_pg + med(pg_runs, "target") + med(pg_runs, "sample") + med(pg_runs, "summary")
    print(f"\nimport + target + sample + summary: {total * 1e3:.0f} ms (sum of medians)")


if __name__ == "__main__":
    main()
