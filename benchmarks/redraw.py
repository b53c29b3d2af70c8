"""Benchmark of the widgets' redraw: from a trait change to a finished canvas draw.

Run with ``python benchmarks/redraw.py`` (``--quick`` for a short smoke run). It prints
the machine and a markdown table of numbers measured in this one run; it is not a test
and asserts nothing.

Question: how long after ``view.step_size = x`` is the new frame ready to send, for a
``TrajectoryView`` on the 2-D ``glaze_ridge`` demo with 100 leapfrog steps? And the same
for the two other views whose knobs act on every move:

* ``ChainView``: a step-size change redraws the preview of the next transition (chain 0's
  trajectory from its current state, the chains not advanced), glaze ridge, 20 steps;
* ``DivergenceView``: one step of a divergence replay (``replay_step += 1``) on the centred
  12-apiary demo (dim 14), the first divergence of a short HMC run.

Both are timed the same way (trait change -> frame handed to ipympl) against the same
30 ms goal; they have no naive counterpart here.

Many parameters (issue 11's goal: a DivergenceView on 4 chains x 1000 draws at dim 50 opens in
under 2 s and replays a divergence as fast as on a 2-D demo): the centred ``apiaries`` demo
(48 apiaries, dim 50) sampled with a fixed step size and no warm-up so that it diverges,
against the 2-D ``glaze_ridge`` demo run the same way (4 x 1000, fixed step size, diverging).
For each: the time to open (``DivergenceView.from_run(run)`` and the first full draw of its
figure, in this process after other views were made, median of a few) and the time of one
replay step, printed with the dim-50 / 2-D ratio. The first open in a fresh Python process
(imports of ipywidgets and ipympl, font loading included) is measured once in a subprocess.

* fast path: what the view does (recompute the trajectory, update the artists in place,
  restore the cached background, draw the changed artists, hand the frame to ipympl).
  Goal: median <= 30 ms.
* naive full redraw: clear the Axes and re-plot everything, contours included
  (``ax.clear()`` + ``draw_log_density(log_density_grid(...))`` + ``draw_trajectory`` +
  ``draw_energy_error`` + ``canvas.draw()``). Goal: naive / fast >= 5.

Both paths end in ipympl's ``refresh_all`` (the diff image handed to the comm). With no
front end attached ipympl also PNG-encodes every frame into ``_data_url`` (for
``nbconvert --execute``); a connected front end turns that off, so we set
``canvas.syncing_data_url = False`` on both canvases to measure what a live notebook does.

The two paths are timed interleaved, so a burst of load elsewhere hits them alike;
medians are reported (the typical latency a user feels). Numbers are measured under
whatever load the machine had at the time, printed with the load average.
"""

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # before numpy is imported

import argparse  # noqa: E402
import platform  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

import phaseglass as pg  # noqa: E402
from phaseglass.core.slices import log_density_grid  # noqa: E402
from phaseglass.draw import draw_energy_error, draw_log_density, draw_trajectory  # noqa: E402
from phaseglass.ui._base import make_canvas_figure, plural  # noqa: E402

FAST_GOAL_MS = 30.0
RATIO_GOAL = 5.0
OPEN_GOAL_S = 2.0


def machine():
    nproc = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    load = os.getloadavg() if hasattr(os, "getloadavg") else ("?", "?", "?")
    import matplotlib
    import ipympl

    return {
        "machine": f"{platform.machine()}, {os.cpu_count()} logical CPUs, nproc {nproc}",
        "load": "{:.2f}, {:.2f}, {:.2f}".format(*load) if load[0] != "?" else "?",
        "versions": (f"Python {platform.python_version()}, numpy {np.__version__}, "
                     f"matplotlib {matplotlib.__version__}, ipympl {ipympl.__version__}"),
    }


def make_view(target, n_steps):
    view = pg.TrajectoryView(target, step_size=0.02, n_steps=n_steps, seed=1)
    view.figure.canvas.syncing_data_url = False  # as with a connected front end
    view.render()  # the first full draw, which captures the background
    return view


def naive_redraw(fig, target, view):
    """Everything from scratch, as a figure without cached artists would do it."""
    ax, ax_err = fig.axes
    ax.clear()
    ax_err.clear()
    grid = log_density_grid(target, view.coords, view.start, view.xlim, view.ylim, n=90)
    draw_log_density(ax, grid, names=view.target.names)
    tr = pg.leapfrog(target, view.start, view.momentum, view.step_size, view.n_steps)
    draw_trajectory(ax, tr, coords=view.coords, names=view.target.names)
    ax.set_xlim(view.xlim)
    ax.set_ylim(view.ylim)
    draw_energy_error(ax_err, tr)
    fig.canvas.draw()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="few repeats (smoke run)")
    parser.add_argument("--repeats", type=int, default=None)
    args = parser.parse_args()
    repeats = args.repeats or (8 if args.quick else 60)
    n_steps = 100

    target = pg.demos.glaze_ridge()
    view = make_view(target, n_steps)
    fig = make_canvas_figure(tuple(view.figure.get_size_inches()))
    fig.canvas.syncing_data_url = False
    fig.subplots(1, 2, width_ratios=[1.15, 1.0])
    naive_redraw(fig, target, view)  # warm caches (fonts, text layout) for both paths

    base = view.step_size
    values = base * (1.0 + 0.004 * np.arange(repeats + 1))  # small moves: no divergence flips
    fast, naive, fast_cpu, naive_cpu = [], [], [], []
    for k in range(repeats):
        t0, c0 = time.perf_counter(), time.thread_time()
        view.step_size = float(values[k + 1])
        fast_cpu.append(time.thread_time() - c0)
        fast.append(time.perf_counter() - t0)
        t0, c0 = time.perf_counter(), time.thread_time()
        naive_redraw(fig, target, view)
        naive_cpu.append(time.thread_time() - c0)
        naive.append(time.perf_counter() - t0)
    if view.status:
        raise SystemExit(f"the view reported a problem: {view.status}")
    if getattr(view, "_background", None) is None:
        raise SystemExit("the view fell back to full redraws; the fast path was not measured")

    fast_ms, naive_ms = 1e3 * np.median(fast), 1e3 * np.median(naive)
    fast_cpu_ms, naive_cpu_ms = 1e3 * np.median(fast_cpu), 1e3 * np.median(naive_cpu)
    ratio, ratio_cpu = naive_ms / fast_ms, naive_cpu_ms / fast_cpu_ms
    facts = machine()
    print("# phaseglass redraw benchmark\n")
    print(f"- machine: {facts['machine']}")
    print(f"- load average at the end (1, 5, 15 min): {facts['load']}")
    print(f"- {facts['versions']}")
    print(f"- TrajectoryView on pg.demos.glaze_ridge(), {n_steps} leapfrog steps, "
          f"{repeats} step-size changes, each path timed interleaved with the other")
    print("- `canvas.syncing_data_url = False` on both canvases, as with a connected front end "
          "(ipympl PNG-encodes every frame only when no front end is attached)")
    print("- numbers were measured in this one run, under whatever load the machine had\n")
    print("Wall time is what a user waits; CPU time of the drawing thread is what the redraw "
          "costs, and other processes on a busy machine disturb it much less.\n")
    print("| measure | wall median | wall p90 | CPU median | goal | met (wall / CPU) |")
    print("|---|---|---|---|---|---|")
    print(f"| trait change -> frame ready, fast path (ms) | {fast_ms:.1f} | "
          f"{1e3 * np.quantile(fast, 0.9):.1f} | {fast_cpu_ms:.1f} | <= {FAST_GOAL_MS:g} | "
          f"{_met(fast_ms <= FAST_GOAL_MS)} / {_met(fast_cpu_ms <= FAST_GOAL_MS)} |")
    print(f"| naive full redraw (ms) | {naive_ms:.1f} | {1e3 * np.quantile(naive, 0.9):.1f} | "
          f"{naive_cpu_ms:.1f} | | |")
    print(f"| naive / fast | {ratio:.1f}x | | {ratio_cpu:.1f}x | >= {RATIO_GOAL:g}x | "
          f"{_met(ratio >= RATIO_GOAL)} / {_met(ratio_cpu >= RATIO_GOAL)} |")
    print(_row("ChainView: step-size change -> preview frame", *chain_view_preview(repeats)))
    print(_row("DivergenceView: one replay step -> frame", *divergence_replay(repeats)))
    many_parameters(repeats, opens=3 if args.quick else 5, cold=not args.quick)


def time_changes(view, change, n):
    """Wall and thread-CPU seconds of ``change(view, k)`` for k = 1..n (each ends in a frame)."""
    wall, cpu = [], []
    for k in range(1, n + 1):
        t0, c0 = time.perf_counter(), time.thread_time()
        change(view, k)
        cpu.append(time.thread_time() - c0)
        wall.append(time.perf_counter() - t0)
    if view.status.startswith("error"):
        raise SystemExit(f"the {type(view).__name__} reported a problem: {view.status}")
    return np.asarray(wall), np.asarray(cpu)


def chain_view_preview(repeats):
    view = pg.ChainView(pg.demos.glaze_ridge(), step_size=0.05, n_steps=20, seed=1)
    view.figure.canvas.syncing_data_url = False
    view.step(3)
    view.render()
    base = view.step_size

    def change(v, k):
        v.step_size = base * (1.0 + 0.004 * k)

    return time_changes(view, change, repeats)


def divergence_replay(repeats):
    target = pg.demos.get("apiaries-12")
    run = pg.sample(target, pg.HMC(0.2, 5), n_draws=300, warmup=200, n_chains=2, seed=3)
    if not run.n_divergent:
        raise SystemExit("the apiaries-12 run had no divergence to replay; change the seed")
    view = pg.DivergenceView(run, coords=("log_tau", "apiary[0]"))
    view.figure.canvas.syncing_data_url = False
    tr = view.divergences[0][2]
    steps = int(tr.divergence_step)
    view.render()

    def change(v, k):
        v.replay_step = k % (steps + 1)

    return time_changes(view, change, repeats)


# ------------------------------------------------------------- many parameters
MANY_DRAWS, MANY_CHAINS = 1000, 4


def diverging_run(name):
    """4 chains x 1000 draws, fixed step size, no warm-up, on a demo where that diverges.

    ``"apiaries"``: the centred 48-apiary demo (dim 50), HMC(0.1, 10) from the apiaries'
    own means (about a quarter of the transitions diverge, in the funnel's neck).
    ``"glaze"``: the 2-D glaze ridge, HMC(0.08, 20) (about a third diverge).
    """
    if name == "apiaries":
        target = pg.demos.apiaries("centred", n_groups=48)
        means = np.bincount(target.group, weights=target.gain) / target.hives
        kernel, initial = pg.HMC(0.1, 10), np.r_[means.mean(), -1.0, means]
    else:
        target, kernel, initial = pg.demos.glaze_ridge(), pg.HMC(0.08, 20), None
    run = pg.sample(target, kernel, initial, n_draws=MANY_DRAWS, n_chains=MANY_CHAINS,
                    warmup=0, seed=1)
    if not run.n_divergent:
        raise SystemExit(f"the {name} run had no divergence to replay; change its step size")
    return run


def open_view(run):
    """Open a DivergenceView on ``run`` and draw its figure once (what a notebook cell shows)."""
    view = pg.DivergenceView.from_run(run)
    view.figure.canvas.syncing_data_url = False
    view.render()
    return view


def time_opens(run, n):
    walls, cpus, view = [], [], None
    for _ in range(n):
        if view is not None:
            view.close()
        t0, c0 = time.perf_counter(), time.thread_time()
        view = open_view(run)
        cpus.append(time.thread_time() - c0)
        walls.append(time.perf_counter() - t0)
    if view.status.startswith("error"):
        raise SystemExit(f"the DivergenceView reported a problem: {view.status}")
    return view, np.asarray(walls), np.asarray(cpus)


def time_replay(view, repeats):
    steps = int(view.trajectory.divergence_step)

    def change(v, k):
        v.replay_step = k % (steps + 1)

    return time_changes(view, change, repeats)


_COLD = """
import os, sys, time
for v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(v, "1")
sys.path.insert(0, {here!r})
import redraw
run = redraw.diverging_run("apiaries")
t0 = time.perf_counter()
if {stats_first}:
    import scipy.stats
t1 = time.perf_counter()
redraw.open_view(run)
print(t1 - t0, time.perf_counter() - t1)
"""


def cold_open_seconds(stats_first):
    """The first DivergenceView of a fresh process on the dim-50 run.

    The views are imported already (this module imports ``phaseglass.ui``); the first
    ``divergence_ranking`` imports ``scipy.stats`` (so does a first ``run.summary()``).
    With ``stats_first`` that import is made and timed before the view is opened.
    Returns (seconds of the scipy.stats import, seconds of the open).
    """
    here = os.path.dirname(os.path.abspath(__file__))
    code = _COLD.format(here=here, stats_first=bool(stats_first))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    a, b = out.stdout.strip().splitlines()[-1].split()
    return float(a), float(b)


def many_parameters(repeats, opens=5, cold=True):
    runs = {name: diverging_run(name) for name in ("glaze", "apiaries")}
    rows = {}
    for name, run in runs.items():
        view, wall, cpu = time_opens(run, opens)
        rwall, rcpu = time_replay(view, repeats)
        rows[name] = (run, view, wall, cpu, rwall, rcpu)
    print(f"\n## DivergenceView with many parameters ({MANY_CHAINS} chains x {MANY_DRAWS} draws, "
          "fixed step size, no warm-up)\n")
    for name, (run, view, *_) in rows.items():
        shown = ", ".join(view.names[k] for k in view.coords)
        print(f"- {name}: dim {run.dim}, {plural(run.n_divergent, 'divergent transition')} "
              f"({len(view.divergences)} with replays), opens on ({shown})")
    print()
    print("| measure | 2-D glaze | dim-50 apiaries | dim 50 / 2-D | goal | met (wall / CPU) |")
    print("|---|---|---|---|---|---|")
    g, a = rows["glaze"], rows["apiaries"]
    for label, k, unit, scale, goal in (("open: from_run + first full draw, median", 2, "s", 1.0,
                                         OPEN_GOAL_S),
                                        ("one replay step -> frame, median", 4, "ms", 1e3, None)):
        gw, aw = scale * np.median(g[k]), scale * np.median(a[k])
        gc, ac = scale * np.median(g[k + 1]), scale * np.median(a[k + 1])
        if goal is None:  # the goal is the 2-D speed itself; 20 % slack for timing noise
            met = f"{_met(aw / gw <= 1.2)} / {_met(ac / gc <= 1.2)}"
            goal_text = "ratio <= 1.2"
        else:
            met = f"{_met(aw <= goal)} / {_met(ac <= goal)}"
            goal_text = f"<= {goal:g} {unit}"
        print(f"| {label} (wall; CPU) ({unit}) | {gw:.3g}; {gc:.3g} | {aw:.3g}; {ac:.3g} | "
              f"{aw / gw:.2f}; {ac / gc:.2f} | {goal_text} | {met} |")
    if cold:
        _, first = cold_open_seconds(stats_first=False)
        imp, after = cold_open_seconds(stats_first=True)
        print(f"| first open in a fresh process (s) | | {first:.3g} | | <= {OPEN_GOAL_S:g} s | "
              f"{_met(first <= OPEN_GOAL_S)} / - |")
        print(f"| ... of which `import scipy.stats` (first ranking or summary) (s) | | {imp:.3g} | "
              "| | |")
        print(f"| first open in a fresh process once scipy.stats is imported (s) | | {after:.3g} | "
              f"| <= {OPEN_GOAL_S:g} s | {_met(after <= OPEN_GOAL_S)} / - |")


def _row(label, wall, cpu):
    w, c = 1e3 * np.median(wall), 1e3 * np.median(cpu)
    return (f"| {label} (ms) | {w:.1f} | {1e3 * np.quantile(wall, 0.9):.1f} | {c:.1f} | "
            f"<= {FAST_GOAL_MS:g} | {_met(w <= FAST_GOAL_MS)} / {_met(c <= FAST_GOAL_MS)} |")


def _met(ok):
    return "yes" if ok else "no"

if __name__ == "__main__":
    main()
