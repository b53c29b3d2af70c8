"""Drawing a report's figures and writing their captions.

``figure(planned, run)`` draws one entry of a ``decide.Plan`` into a new
``matplotlib.figure.Figure`` (no pyplot state, so it works in scripts, servers
and notebooks alike); ``caption(planned)`` says in words what it shows. The
tuning heat map's values come from ``knob_grid`` (short extra runs).
"""

import io

import numpy as np

from ..core.efficiency import ess_per_gradient
from ..core.run import EBFMI_LIMIT, ESS_PER_CHAIN_LIMIT
from .decide import stream

__all__ = ["figure", "caption", "png", "knob_grid", "TUNING_LABEL"]

#: What the tuning heat map's cells hold.
TUNING_LABEL = "min bulk ESS per 1000 gradients"

_CAPTIONS = {
    "trajectory": "One leapfrog trajectory over a slice of the log-density through its start "
                  "(left) and its energy error per step (right). Filled end point: accepted; "
                  "hollow: rejected. The arrow is the initial momentum.",
    "divergence": "The first divergent transition, replayed: the dashed segment with an X is the "
                  "step where the energy error passed max_energy_error.",
    "uniforms": "The accept/reject uniform u of chain 0 per draw: hollow circles are "
                "rejections, the step line the acceptance probability (u above it means "
                "rejection). A drifting uniform makes rejections come in runs.",
    "tree_depth": "Tree depth of every no-U-turn transition: the share of transitions per "
                  "depth (left, chains pooled; hatched: at the limit max_depth = "
                  "{max_depth}, i.e. {max_steps} leapfrog steps) and the depth of each draw "
                  "(right). Trees that stop at the limit were cut short before the trajectory "
                  "turned back: a mass matrix matching the posterior's scales, or a "
                  "reparameterisation, usually shortens them.",
    "traces": "Trace of each chain for up to four coordinates; X marks a divergent transition.",
    "autocorrelation": "Autocorrelation against lag, one line per chain.",
    "running_ess": "Bulk ESS of the first n draws per chain as n grows. The dotted line is what "
                   "independent draws would give; the dash-dot line is "
                   f"{ESS_PER_CHAIN_LIMIT} per chain.",
    "ess_per_gradient": "Bulk ESS per gradient evaluation for each parameter: the "
                        "cost-efficiency of these settings.",
    "energy": "The spread of energy levels (centred per chain) against the jumps in energy "
              "from one draw to the next. When the jumps are much narrower, the sampler moves "
              f"between energy levels slowly; E-BFMI below {EBFMI_LIMIT} flags it.",
    "pairs": "Pairwise scatter of the draws (chains pooled), divergent transitions marked X, "
             "and each coordinate's histogram.",
    "gibbs": "Chains sharing one random stream: their latest paths (left) and the chain spread "
             "(the widest gap between chains over the coordinates) per draw (right).",
    "tuning": TUNING_LABEL + " for a grid of step size x leapfrog steps around the run's "
              "settings ({draws} draws per chain per cell). Short runs are noisy: read it for "
              "trends, not decimals.",
}

#: The caption of the embedded animation (``chain.gif``).
ANIMATION_CAPTION = ("A few transitions of one chain: each trajectory grows step by step, then "
                     "the draw lands.")


def caption(planned):
    """The caption of a planned figure, in words."""
    options = dict(planned.options)
    if "max_depth" in options:
        options["max_steps"] = 2 ** int(options["max_depth"]) - 1
    return _CAPTIONS[planned.name].format(**options)


def figure(planned, run, **computed):
    """Draw ``planned`` (a ``decide.Planned``) for ``run``; returns a Figure.

    ``computed`` passes values computed beforehand (the tuning grid's ``values``).
    """
    draw = globals()[f"figure_{planned.name}"]  # looked up per call: tests replace one
    return draw(run, **planned.options, **computed)


def png(fig, dpi):
    """The figure as PNG bytes."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


# ---------------------------------------------------------------- helpers

def _replay(run, seed):
    """One fresh transition of chain 0 from its last draw with the tuned kernel, recorded."""
    from ..core.sampling import Sampler
    from ..core.leapfrog import one_chain

    sampler = Sampler(run.target, run.kernel.copy(), run.draws[0, -1], n_chains=1, seed=seed)
    info = sampler.step(record=True)
    return one_chain(sampler.last_trajectory, 0), bool(info["accepted"][0])


def _scale_note(run):
    return " (sampler's scale)" if getattr(run.target, "bounded", False) else ""


def _trajectory_figure(run, traj, accepted, coords, title):
    from ..core.slices import choose_limits, log_density_grid
    from ..draw import draw_energy_error, draw_log_density, draw_trajectory, legend, style

    fig = style.new_figure(11.0, 4.6)
    ax, ax_e = fig.subplots(1, 2, width_ratios=[1.1, 1.0])
    # the bulk of the draws and the trajectory up to any divergence (a blow-up would swamp it)
    bulk = choose_limits(run.unconstrained, coords=coords, pad=0.05, quantiles=(0.002, 0.998))
    path = choose_limits(traj, coords=coords, pad=0.08)
    xlim, ylim = ((min(a[0], b[0]), max(a[1], b[1])) for a, b in zip(bulk, path))
    grid = log_density_grid(run.target, coords, traj.positions[0], xlim, ylim, n=90)
    draw_log_density(ax, grid)
    view = draw_trajectory(ax, traj, coords=coords, accepted=accepted, names=run.names,
                           metric=run.kernel.metric)
    view.autoscale = False
    ax.set_xlim(*xlim)
    ax.set_ylim(*ylim)
    note = _scale_note(run)
    ax.set_xlabel(run.names[coords[0]] + note)
    ax.set_ylabel(run.names[coords[1]] + note)
    ax.set_title(title, loc="left", fontsize=9)
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    draw_energy_error(ax_e, traj)
    legend(ax_e, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncols=3)
    return fig


def _panel_grid(coords, per_row=2):
    from ..draw import style

    shown = list(coords)[:4]
    rows = (len(shown) + per_row - 1) // per_row
    cols = min(per_row, len(shown))
    fig = style.new_figure(5.2 * cols, 2.9 * rows + 0.5)
    axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False).ravel())
    for extra in axes[len(shown):]:
        extra.set_visible(False)
    return fig, axes[:len(shown)], shown


def _chain_legend(fig, ax):
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=min(len(labels), 6), fontsize=8,
               frameon=False)


# ---------------------------------------------------------------- figures

def figure_trajectory(run, coords):
    traj, accepted = _replay(run, stream(run, "replay"))
    return _trajectory_figure(run, traj, accepted, coords,
                              "a fresh transition of chain 0 from its last draw")


def figure_divergence(run, coords, index=0):
    chain, draw, traj = run.divergences[index]
    return _trajectory_figure(run, traj, False, coords,
                              f"replay of the divergent transition of chain {chain} at draw {draw}")


def figure_uniforms(run):
    from ..draw import draw_uniform_sequence, legend, style

    n = min(run.n_draws, 300)
    fig = style.new_figure(10.0, 3.6)
    ax = fig.add_subplot()
    u = run.u[0, :n]
    prob = None if run.accept_prob is None else run.accept_prob[0, :n]
    draw_uniform_sequence(ax, u, run.accepted[0, :n], prob)
    ax.set_xlabel(f"draw (chain 0, first {n} draws)")
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    return fig


def figure_tree_depth(run, max_depth):
    from ..draw import legend, style
    from ..draw.tree import draw_tree_depths

    fig = style.new_figure(10.0, 3.6)
    ax, ax_t = fig.subplots(1, 2, width_ratios=[1.0, 1.6])
    draw_tree_depths(ax, ax_t, run.extras["tree_depth"], max_depth,
                     hit=run.extras.get("depth_limit_hit"))
    legend(ax, loc="upper left")
    legend(ax_t, loc="lower right", ncols=2)
    return fig


def figure_traces(run, shown):
    from ..draw import draw_traces

    fig, axes, shown = _panel_grid(shown)
    for ax, c in zip(axes, shown):
        draw_traces(ax, run, c)
    _chain_legend(fig, axes[0])
    return fig


def figure_autocorrelation(run, shown):
    from ..draw import draw_autocorrelation

    fig, axes, shown = _panel_grid(shown)
    for ax, c in zip(axes, shown):
        draw_autocorrelation(ax, run, c, max_lag=min(40, run.n_draws - 1))
    _chain_legend(fig, axes[0])
    return fig


def figure_running_ess(run, shown):
    from ..draw import draw_running_ess, legend, style

    fig = style.new_figure(8.0, 4.0)
    ax = fig.add_subplot()
    draw_running_ess(ax, run, coords=list(shown)[:6])
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    return fig


def figure_ess_per_gradient(run):
    from ..draw import draw_ess_per_gradient, style

    fig = style.new_figure(8.0, max(3.0, 0.32 * run.dim + 1.4))
    ax = fig.add_subplot()
    draw_ess_per_gradient(ax, run, horizontal=True)
    ax.set_title(f"total {run.total_grad:,} gradient evaluations", loc="left", fontsize=9)
    return fig


def figure_energy(run):
    from ..draw import draw_energy_jumps, legend, style

    fig = style.new_figure(8.0, 4.0)
    ax = fig.add_subplot()
    draw_energy_jumps(ax, run)
    legend(ax, loc="upper left")
    return fig


def figure_pairs(run, coords):
    from ..draw import draw_pair_grid, style

    order = list(dict.fromkeys(list(coords) + list(range(run.dim))))[:4]
    k = len(order)
    fig = style.new_figure(2.4 * k + 1.0, 2.4 * k + 0.6)
    draw_pair_grid(fig, run, order)
    return fig


def figure_gibbs(run, coords):
    from ..draw import draw_chain_spread, draw_gibbs_paths, legend, style

    fig = style.new_figure(11.0, 4.2)
    ax, ax_s = fig.subplots(1, 2)
    draw_gibbs_paths(ax, run, coords, last=min(run.n_draws, 40))
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    draw_chain_spread(ax_s, run, first=run.first_draw)
    legend(ax_s, loc="upper right")
    return fig


def figure_tuning(run, step_sizes, steps, draws, values):
    from ..draw import draw_knob_grid, style

    fig = style.new_figure(7.0, 4.2)
    ax = fig.add_subplot()
    draw_knob_grid(ax, values, step_sizes, steps, x_label="step size", y_label="leapfrog steps",
                   value_label=TUNING_LABEL, best="max")
    ax.set_title("short runs from the run's last draws, no warm-up; outlined: highest",
                 loc="left", fontsize=9)
    return fig


# ---------------------------------------------------------------- tuning grid

def knob_grid(run, step_sizes, steps, *, n_draws=100, seed=None):
    """Minimum bulk ESS per 1000 gradient evaluations over a grid of step size x steps.

    Each cell runs the run's (tuned) kernel with one setting changed, from the
    run's last draws, without warm-up, and holds ``1000 *
    core.efficiency.ess_per_gradient`` of that run.

    Parameters
    ----------
    run : Run
        From a leapfrog kernel (``HMC`` or ``PartialRefreshHMC``).
    step_sizes : sequence of float
    steps : sequence of int
    n_draws : int
    seed : optional

    Returns
    -------
    ndarray, shape (len(steps), len(step_sizes))
        NaN where a cell could not be estimated.
    """
    from ..core.sampling import sample
    from ..core.streams import seed_sequence

    values = np.full((len(steps), len(step_sizes)), np.nan)
    start = run.draws[:, -1]
    cell_seeds = seed_sequence(seed).spawn(len(steps) * len(step_sizes))
    for i, n in enumerate(steps):
        for j, eps in enumerate(step_sizes):
            kernel = run.kernel.copy()
            kernel.step_size = float(eps)
            kernel.n_steps = int(n)
            r = sample(run.target, kernel, start, n_draws, n_chains=run.n_chains, warmup=0,
                       seed=cell_seeds[i * len(step_sizes) + j])
            values[i, j] = 1000.0 * ess_per_gradient(r)
    return values
