"""A shareable static report of one sampling run: PNG figures, ``summary.json`` and ``report.html``.

``write_report(out_dir, run, settings=...)`` draws every view of
``phaseglass.draw`` into PNG files, writes the settings and the diagnostics
(``run.summary().as_dict()``) with plain-word warnings to ``summary.json``, and
one self-contained ``report.html`` (images embedded as base64) that opens
anywhere without the files beside it. ``phaseglass report`` on the command line
runs a sampler and calls it.

The folder is the user's: a report never touches a file it did not write. It
writes into a new or empty folder, or into a folder holding an earlier report
(recognised by its ``summary.json``, which carries ``"written_by": "phaseglass
report"`` and the list of files that report wrote); there it replaces or removes
only those files. Any other non-empty folder is refused unless ``replace=True``,
and even then only the report's own file names are written and nothing else is
removed. Every file is written atomically (a temporary file in the same folder,
then ``os.replace``) and text as UTF-8, so a crash never leaves a half-written
``report.html`` or ``summary.json``.

Figures are built on ``matplotlib.figure.Figure`` directly (no pyplot state),
so this works in scripts, servers and notebooks alike.
"""

import base64
import html
import io
import json
import os
import secrets
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .core.efficiency import MIN_ESS_DRAWS, ess_per_gradient
from .core.run import CAUTION, EBFMI_LIMIT, ESS_PER_CHAIN_LIMIT, RHAT_LIMIT

__all__ = ["write_report", "check_report_folder", "atomic_write", "readable", "ReportFiles",
           "ReportFolderError", "knob_grid", "FIGURE_NAMES", "WRITTEN_BY"]

#: PNG files a report may contain, in the order shown (views that do not apply are skipped).
FIGURE_NAMES = ("trajectory", "divergence", "uniforms", "traces", "autocorrelation",
                "running_ess", "ess_per_gradient", "energy", "pairs", "gibbs", "tuning")

#: The marker in ``summary.json`` that says a folder holds a report this module wrote.
WRITTEN_BY = "phaseglass report"

#: Every file name a report may write; nothing else is ever written, replaced or removed.
_OWN_NAMES = frozenset([f"{n}.png" for n in FIGURE_NAMES] + ["chain.gif", "summary.json",
                                                              "report.html"])

_RUN_TITLES = {
    "draws_per_chain": "draws per chain", "lowest_bulk_ess": "lowest bulk ESS",
    "ess_per_gradient": "lowest bulk ESS per gradient evaluation",
    "ebfmi": "E-BFMI per chain", "gradient_evaluations": "gradient evaluations",
}


@dataclass
class ReportFiles:
    """Where a report was written and what it holds.

    Attributes
    ----------
    folder : Path
    html : Path
    summary : Path
    figures : dict {name: Path}
        PNG files, by name from ``FIGURE_NAMES``.
    animation : Path or None
    warnings : list of str
        The plain-word warnings of ``run.summary()``.
    notes : list of str
        Views that were skipped and why.
    seconds : float
        Time spent drawing and writing.
    """

    folder: Path
    html: Path
    summary: Path
    figures: dict = field(default_factory=dict)
    animation: object = None
    warnings: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    seconds: float = 0.0


# ---------------------------------------------------------------- files

class ReportFolderError(ValueError):
    """The folder given for a report is one the report may not write into."""


def atomic_write(path, data):
    """Write ``data`` to ``path`` so that ``path`` is either the old file or the whole new one.

    The data goes to a temporary file in the same folder, which then replaces
    ``path`` (``os.replace`` is atomic on POSIX and Windows). If anything fails
    midway the temporary file is removed and ``path`` is left as it was.

    Parameters
    ----------
    path : str or Path
    data : str or bytes
        Text is encoded as UTF-8, whatever the locale.

    Returns
    -------
    Path
    """
    path = Path(path)
    if isinstance(data, str):
        data = data.encode("utf-8")
    tmp, f = _temp_beside(path, ".tmp")
    try:
        with f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def _temp_beside(path, suffix):
    """A new, empty hidden file next to ``path``, opened for binary writing: ``(Path, file)``.

    Created with ``open(..., "xb")`` rather than ``tempfile.mkstemp`` so it gets the
    usual permissions (the user's umask), not mkstemp's owner-only 0600.
    """
    for _ in range(100):
        tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}{suffix}")
        try:
            return tmp, open(tmp, "xb")
        except FileExistsError:
            continue
    raise FileExistsError(f"cannot create a temporary file beside {path}")


def readable(text):
    """``text`` made encodable as UTF-8.

    Under a non-UTF-8 locale Python hands non-ASCII command-line arguments and
    file names over as lone surrogates (PEP 383); they are turned back into the
    characters they were typed as (almost always UTF-8), else into U+FFFD.
    """
    try:
        text.encode("utf-8")
        return text
    except UnicodeEncodeError:
        pass
    try:
        return text.encode("utf-8", "surrogateescape").decode("utf-8", "replace")
    except UnicodeEncodeError:
        return text.encode("utf-8", "replace").decode("utf-8")


def _earlier_report(folder):
    """The file names an earlier report in ``folder`` wrote (its manifest), or None if there is none.

    Only names a report can write are believed, so a hand-edited manifest cannot
    make a report touch anything else.
    """
    manifest = folder / "summary.json"
    if not manifest.is_file():
        return None
    try:
        data = json.loads(manifest.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError):
        return None
    if not isinstance(data, dict) or data.get("written_by") != WRITTEN_BY:
        return None
    listed = data.get("files")
    if not isinstance(listed, list):
        return None
    return {n for n in listed if isinstance(n, str) and n in _OWN_NAMES}


def check_report_folder(out_dir, *, replace=False, argument="`out_dir`",
                        fix="pass replace=True"):
    """Check that a report may be written into ``out_dir``; raise a clear error if not.

    Allowed: a folder that does not exist yet, an empty folder, or a folder
    holding an earlier report whose own files are the only ones named like report
    files. ``replace=True`` also allows any other folder (only the report's own
    file names are then written; nothing else is removed).

    Parameters
    ----------
    out_dir : str or Path
    replace : bool
    argument, fix : str
        How the error message names the folder argument and the way out (the
        command line says ``--out`` and ``--replace``).

    Returns
    -------
    set of str
        File names the earlier report in the folder wrote (empty if none): these,
        and only these, the new report may remove.

    Raises
    ------
    ReportFolderError
        A ``ValueError`` naming ``argument`` and what to do.
    """
    if out_dir is None or not str(out_dir).strip():
        raise ReportFolderError(f"{argument} must name a folder for the report, got {str(out_dir)!r}")
    folder = Path(out_dir)
    if not folder.exists():
        return set()
    if not folder.is_dir():
        raise ReportFolderError(f"{argument} {str(out_dir)!r} exists and is not a folder; "
                         "name a new or empty folder")
    folders = sorted(n for n in _OWN_NAMES if (folder / n).is_dir())
    if folders:
        raise ReportFolderError(f"{argument} {str(out_dir)!r} has a folder named like a report file "
                         f"({', '.join(folders)}); name another folder for the report")
    earlier = _earlier_report(folder)
    if earlier is None:
        if replace or not any(folder.iterdir()):
            return set()
        raise ReportFolderError(
            f"{argument} {str(out_dir)!r} is not empty and holds no earlier phaseglass report; "
            f"name a new or empty folder, or {fix} to write the report's files there "
            "(other files are kept)")
    clash = sorted(n for n in _OWN_NAMES - earlier if (folder / n).exists() or (folder / n).is_symlink())
    if clash and not replace:
        raise ReportFolderError(
            f"{argument} {str(out_dir)!r} holds {', '.join(clash)}, which the earlier report "
            f"there did not write; move {'them' if len(clash) > 1 else 'it'} away, name another "
            f"folder, or {fix} to overwrite")
    return earlier


# ---------------------------------------------------------------- helpers

def _seed(run, k):
    """A reproducible stream for the report's own extra sampling, derived from the run's seed."""
    entropy = run.seed if run.seed is not None else 0
    return np.random.SeedSequence(entropy, spawn_key=(7919, k))


def _png(figure, dpi):
    buf = io.BytesIO()
    figure.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _coords(run, coords):
    from .core.slices import resolve_coords

    if run.dim < 2:
        return None
    return resolve_coords(coords if coords is not None else (0, 1), run.names, run.dim)


def _uses_gradient(run):
    return run.kernel is not None and getattr(run.kernel, "uses_gradient", False)


def _replay(run, seed):
    """One fresh transition of chain 0 from its last draw with the tuned kernel, recorded."""
    from .core.sampling import Sampler
    from .draw.trajectory import one_chain

    sampler = Sampler(run.target, run.kernel.copy(), run.draws[0, -1], n_chains=1, seed=seed)
    info = sampler.step(record=True)
    return one_chain(sampler.last_trajectory, 0), bool(info["accepted"][0])


def _scale_note(run):
    return " (sampler's scale)" if getattr(run.target, "bounded", False) else ""


# ---------------------------------------------------------------- figures

def _figure_trajectory(run, traj, accepted, coords, title):
    from .core.slices import choose_limits, log_density_grid
    from .draw import draw_energy_error, draw_log_density, draw_trajectory, legend, style

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


def _figure_uniforms(run):
    from .draw import draw_uniform_sequence, legend, style

    n = min(run.n_draws, 300)
    fig = style.new_figure(10.0, 3.6)
    ax = fig.add_subplot()
    u = run.u[0, :n]
    prob = None if run.accept_prob is None else run.accept_prob[0, :n]
    draw_uniform_sequence(ax, u, run.accepted[0, :n], prob)
    ax.set_xlabel(f"iteration (chain 0, first {n} draws)")
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    return fig


def _panel_grid(run, coords, per_row=2):
    from .draw import style

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


def _figure_traces(run, coords):
    from .draw import draw_traces

    fig, axes, shown = _panel_grid(run, coords)
    for ax, c in zip(axes, shown):
        draw_traces(ax, run, c)
    _chain_legend(fig, axes[0])
    return fig


def _figure_autocorrelation(run, coords):
    from .draw import draw_autocorrelation

    fig, axes, shown = _panel_grid(run, coords)
    for ax, c in zip(axes, shown):
        draw_autocorrelation(ax, run, c, max_lag=min(40, run.n_draws - 1))
    _chain_legend(fig, axes[0])
    return fig


def _figure_running_ess(run, coords):
    from .draw import draw_running_ess, legend, style

    fig = style.new_figure(8.0, 4.0)
    ax = fig.add_subplot()
    draw_running_ess(ax, run, coords=list(coords)[:6])
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    return fig


def _figure_ess_per_gradient(run):
    from .draw import draw_ess_per_gradient, style

    fig = style.new_figure(8.0, max(3.0, 0.32 * run.dim + 1.4))
    ax = fig.add_subplot()
    draw_ess_per_gradient(ax, run, horizontal=True)
    ax.set_title(f"total {run.total_grad:,} gradient evaluations", loc="left", fontsize=9)
    return fig


def _figure_energy(run):
    from .draw import draw_energy_jumps, legend, style

    fig = style.new_figure(8.0, 4.0)
    ax = fig.add_subplot()
    draw_energy_jumps(ax, run)
    legend(ax, loc="upper left")
    return fig


def _figure_pairs(run, coords):
    from .draw import draw_pair_grid, style

    order = list(dict.fromkeys(list(coords) + list(range(run.dim))))[:4]
    k = len(order)
    fig = style.new_figure(2.4 * k + 1.0, 2.4 * k + 0.6)
    draw_pair_grid(fig, run, order)
    return fig


def _figure_gibbs(run, coords):
    from .draw import draw_chain_spread, draw_gibbs_paths, legend, style

    fig = style.new_figure(11.0, 4.2)
    ax, ax_s = fig.subplots(1, 2)
    draw_gibbs_paths(ax, run, coords, last=min(run.n_draws, 40))
    legend(ax, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    draw_chain_spread(ax_s, run, first=run.first_draw)
    legend(ax_s, loc="upper right")
    return fig


def _figure_tuning(values, step_sizes, steps, value_label):
    from .draw import draw_knob_grid, style

    fig = style.new_figure(7.0, 4.2)
    ax = fig.add_subplot()
    draw_knob_grid(ax, values, step_sizes, steps, x_label="step size", y_label="leapfrog steps",
                   value_label=value_label, best="max")
    ax.set_title("short runs from the run's last draws, no warm-up; outlined: highest",
                 loc="left", fontsize=9)
    return fig


# ---------------------------------------------------------------- tuning grid

def knob_grid(run, step_sizes, steps, *, n_draws=100, seed=None):
    """Minimum bulk ESS per 1000 gradient evaluations over a grid of step size x steps.

    Each cell runs the run's (tuned) kernel with one setting changed, from the
    run's last draws, without warm-up.

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
    from .core.sampling import sample
    from .core.streams import seed_sequence

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


def _grid_axes(kernel):
    eps = float(kernel.step_size)
    step_sizes = [float(f"{eps * f:.3g}") for f in (0.5, 1.0, 1.6)]
    n = int(kernel.n_steps)
    steps = sorted({max(1, n // 2), n, 2 * n})
    return step_sizes, steps


# ---------------------------------------------------------------- writing

def write_report(out_dir, run, *, settings=None, title=None, coords=None, grid=True,
                 grid_draws=100, animation=False, dpi=90, command=None, replace=False):
    """Write figures, ``summary.json`` and a self-contained ``report.html`` for a run.

    Parameters
    ----------
    out_dir : str or Path
        Created if needed. It must be new, empty, or hold an earlier report (then
        only that report's files are replaced or removed); see ``replace``.
    run : Run
        Needs ``run.target`` and ``run.kernel`` (as ``sample`` and ``Sampler.run`` give).
    settings : dict, optional
        What was asked for (command-line options, ...), shown and saved as given.
    title : str, optional
        Model name for the heading.
    coords : pair of int or str, optional
        Coordinates of the trajectory, paths and first pair (default the first two).
    grid : bool
        Add the step size x steps heat map (a few short extra runs; leapfrog kernels).
    grid_draws : int
        Draws per chain in each heat-map cell.
    animation : bool
        Also write ``chain.gif`` (a few transitions of one chain) and embed it.
    dpi : float
    command : str, optional
        The command line, recorded in the report.
    replace : bool
        Also write into a non-empty folder that holds no earlier report, or over
        files named like report files that the earlier report did not write.
        Only the report's own file names (``FIGURE_NAMES`` PNGs, ``chain.gif``,
        ``summary.json``, ``report.html``) are ever written; nothing else is
        removed.

    Returns
    -------
    ReportFiles

    Raises
    ------
    ValueError
        For a folder the report may not write into (see ``check_report_folder``).
    """
    started = time.perf_counter()
    if run.target is None or run.kernel is None:
        raise ValueError("`run` must carry its target and kernel (use pg.sample or Sampler.run)")
    earlier = check_report_folder(out_dir, replace=replace)
    out = Path(out_dir)
    digest = run.summary()
    coords = _coords(run, coords)
    out.mkdir(parents=True, exist_ok=True)
    claimed = set(earlier)  # what the manifest on disk lists: the earlier report's files and ours
    written = set()

    def claim(name):
        """List ``name`` in the manifest before writing it, so a crash leaves a folder the
        next report still recognises as its own."""
        if name not in claimed:
            claimed.update((name, "summary.json"))
            atomic_write(out / "summary.json", json.dumps(
                {"written_by": WRITTEN_BY, "complete": False, "files": sorted(claimed)}, indent=2))
        written.add(name)
    files = ReportFiles(folder=out, html=out / "report.html", summary=out / "summary.json",
                        warnings=list(digest.warnings))
    images = {}
    captions = {}
    notes = files.notes

    def keep(name, fig, caption):
        path = out / f"{name}.png"
        images[name] = _png(fig, dpi)
        claim(path.name)
        atomic_write(path, images[name])
        files.figures[name] = path
        captions[name] = caption

    leapfrog = _uses_gradient(run) and hasattr(run.kernel, "n_steps")
    if leapfrog and coords is not None:
        traj, accepted = _replay(run, _seed(run, 1))
        keep("trajectory", _figure_trajectory(run, traj, accepted, coords,
                                              "a fresh transition of chain 0 from its last draw"),
             "One leapfrog trajectory over a slice of the log-density through its start "
             "(left) and its energy error per step (right). Filled end point: accepted; hollow: "
             "rejected. The arrow is the initial momentum.")
        if run.divergences:
            chain, draw, dtraj = run.divergences[0]
            keep("divergence", _figure_trajectory(
                run, dtraj, False, coords, f"replay of the divergent transition of chain {chain} "
                f"at draw {draw}"),
                "The first divergent transition, replayed: the dashed segment with an X is the "
                "step where the energy error passed the divergence threshold.")
    elif coords is None:
        notes.append("Trajectory, path and pair views need at least two coordinates.")
    else:
        notes.append("This kernel makes no leapfrog trajectories, so the trajectory and "
                     "energy-error views are left out.")
    if run.u is not None and run.accepted is not None and run.u.ndim == 2 and run.n_draws:
        keep("uniforms", _figure_uniforms(run),
             "The accept/reject uniform u of chain 0 per iteration: hollow circles are "
             "rejections, the step line the acceptance probability (u above it means rejection). "
             "A drifting uniform makes rejections come in runs.")
    elif run.u is not None and run.u.ndim == 3:
        notes.append("Gibbs uniforms drive inverse CDFs rather than accept/reject decisions, "
                     "so the uniform-sequence view is left out.")
    shown = list(dict.fromkeys((list(coords) if coords else []) + list(range(run.dim))))
    keep("traces", _figure_traces(run, shown),
         "Trace of each chain for up to four coordinates; X marks a divergent transition.")
    if run.n_draws >= 8:
        keep("autocorrelation", _figure_autocorrelation(run, shown),
             "Autocorrelation against lag, one line per chain.")
    else:
        notes.append("Fewer than 8 draws per chain: the autocorrelation view is left out.")
    if run.n_draws >= MIN_ESS_DRAWS:
        keep("running_ess", _figure_running_ess(run, shown),
             "Bulk ESS of the first n draws per chain as n grows. The dotted line is what "
             f"independent draws would give; the dash-dot line is {ESS_PER_CHAIN_LIMIT} per chain.")
    else:
        notes.append(f"Fewer than {MIN_ESS_DRAWS} draws per chain: the ESS views are left out.")
    if run.total_grad > 0 and run.n_draws >= MIN_ESS_DRAWS:
        keep("ess_per_gradient", _figure_ess_per_gradient(run),
             "Bulk ESS per gradient evaluation for each parameter: the cost-efficiency of "
             "these settings.")
    elif run.total_grad == 0:
        notes.append("No gradients were evaluated, so ESS per gradient is not shown.")
    if _uses_gradient(run) and run.energy is not None and run.n_draws >= 8 \
            and np.all(np.isfinite(run.energy)):
        keep("energy", _figure_energy(run),
             "The spread of energy levels (centred per chain) against the jumps in energy "
             "from one draw to the next. When the jumps are much narrower, the sampler moves "
             f"between energy levels slowly; E-BFMI below {EBFMI_LIMIT} flags it.")
    if coords is not None:
        keep("pairs", _figure_pairs(run, coords),
             "Pairwise scatter of the draws (chains pooled), divergent transitions marked X, "
             "and each coordinate's histogram.")
    if getattr(run.kernel, "shared_stream", False) and coords is not None:
        keep("gibbs", _figure_gibbs(run, coords),
             "Chains sharing one random stream: their latest paths (left) and the largest gap "
             "between chains per draw (right).")
    grid_info = None
    if grid and leapfrog:
        step_sizes, steps = _grid_axes(run.kernel)
        values = knob_grid(run, step_sizes, steps, n_draws=grid_draws, seed=_seed(run, 2))
        label = "min bulk ESS per 1000 gradients"
        keep("tuning", _figure_tuning(values, step_sizes, steps, label),
             f"{label} for a grid of step size x leapfrog steps around the run's settings "
             f"({grid_draws} draws per chain per cell). Short runs are noisy: read it for "
             "trends, not decimals.")
        grid_info = {"value": label, "step_sizes": step_sizes, "steps": steps,
                     "values": [[None if not np.isfinite(v) else float(v) for v in row]
                                for row in values],
                     "draws_per_cell": grid_draws}
    elif grid:
        notes.append("The step size x steps heat map needs a leapfrog kernel.")
    if animation and coords is not None:
        from .draw.animate import write_chain_animation

        claim("chain.gif")
        tmp, f = _temp_beside(out / "chain.gif", ".gif")
        f.close()
        try:  # the GIF writer writes in place: write beside it, then swap it in whole
            write_chain_animation(tmp, run.target, run.kernel, coords=coords, seed=_seed(run, 3),
                                  initial=run.draws[0, -1])
            os.replace(tmp, out / "chain.gif")
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
        files.animation = out / "chain.gif"
    claim("summary.json")
    claim("report.html")
    for stale in sorted(earlier - written):  # the earlier report's files this run does not make
        (out / stale).unlink(missing_ok=True)
    summary = _summary(run, digest, settings, title, files, grid_info, command)
    page = _html(run, digest, summary, images, captions, files)
    atomic_write(files.summary, json.dumps(summary, indent=2, allow_nan=False))
    atomic_write(files.html, readable(page))
    files.seconds = time.perf_counter() - started
    return files


def _summary(run, digest, settings, title, files, grid_info, command):
    from . import __version__

    d = digest.as_dict()
    target = run.target
    return {
        "written_by": WRITTEN_BY,
        "complete": True,
        "phaseglass_version": __version__,
        "model": {"name": title, "description": getattr(target, "description", None),
                  "dim": run.dim, "names": list(run.names),
                  "bounded": bool(getattr(target, "bounded", False))},
        "settings": settings or {},
        "kernel_after_warmup": d["run"].get("kernel"),
        "diagnostics": d,
        "warnings": list(digest.warnings),
        "notes": list(files.notes),
        "caution": CAUTION,
        "tuning_grid": grid_info,
        # the manifest: the only files a later report into this folder may replace or remove
        "files": sorted([p.name for p in files.figures.values()]
                        + (["chain.gif"] if files.animation else [])
                        + ["summary.json", "report.html"]),
        "command": command,
    }


# ---------------------------------------------------------------- HTML

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#222;background:#fff;
max-width:1100px;margin:2em auto;padding:0 1.2em;line-height:1.45}
h1{font-size:1.6em;margin-bottom:.2em}h2{font-size:1.2em;border-bottom:1px solid #ddd;
padding-bottom:.2em;margin-top:1.8em}
table{border-collapse:collapse;font-size:.9em;margin:.6em 0}
th,td{border:1px solid #ddd;padding:.25em .6em;text-align:right}
th:first-child,td:first-child{text-align:left}th{background:#f4f4ef}
table.kv td:last-child,table.kv th:last-child{text-align:left}
td.flag{font-weight:bold;background:#fff4e0}
.caution{border-left:5px solid #0072B2;background:#f3f8fc;padding:.6em 1em}
.warn li{margin:.3em 0}.ok{color:#006b4f}
figure{margin:1.2em 0}figure img{max-width:100%;border:1px solid #eee}
figcaption{font-size:.9em;color:#444;margin-top:.3em}
code{background:#f4f4ef;padding:0 .25em}footer{margin-top:2.5em;font-size:.8em;color:#666}
"""


def _fmt(v, kind=None):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "n/a"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}"
    if isinstance(v, (float, np.floating)):
        if kind == "ess":
            return f"{v:,.0f}"
        return f"{v:.4g}"
    if isinstance(v, (list, tuple)):
        return ", ".join(_fmt(x) for x in v)
    if isinstance(v, dict):
        return "; ".join(f"{k}={_fmt(x)}" for k, x in v.items())
    return str(v)


def _table(rows, head=None, cls=None):
    e = html.escape
    out = [f'<table class="{cls}">' if cls else "<table>"]
    if head:
        out.append("<tr>" + "".join(f"<th>{e(h)}</th>" for h in head) + "</tr>")
    for row in rows:
        out.append("<tr>" + "".join(c if c.startswith("<td") else f"<td>{e(c)}</td>" for c in row)
                   + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _html(run, digest, summary, images, captions, files):
    e = html.escape
    d = summary["diagnostics"]
    model = summary["model"]
    title = model["name"] or "model"
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>phaseglass report: {e(title)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<header><h1>phaseglass report: {e(title)}</h1>",
    ]
    if model["description"]:
        parts.append(f"<p>{e(model['description'])}</p>")
    parts.append(f'<p class="caution" id="caution"><strong>Read with care.</strong> {e(CAUTION)}</p>')
    parts.append("</header>")

    # warnings
    parts.append('<section id="warnings"><h2>Warnings</h2>')
    if digest.warnings:
        parts.append('<ul class="warn">' + "".join(f"<li>\u26a0 {e(w)}</li>" for w in digest.warnings)
                     + "</ul>")
    else:
        parts.append('<p class="ok">\u2713 No problem detected by these checks (divergences, '
                     f"E-BFMI below {EBFMI_LIMIT}, R-hat above {RHAT_LIMIT}, ESS below "
                     f"{ESS_PER_CHAIN_LIMIT} per chain). That is not proof of convergence.</p>")
    parts.append("</section>")

    # diagnostics
    parts.append('<section id="diagnostics"><h2>Diagnostics</h2>')
    rows = []
    for name, cells in d["parameters"].items():
        row = [name]
        for c in digest.column_specs:
            v = cells[c.key]
            if c.needs_attention(v, run.n_chains):
                row.append(f'<td class="flag">\u26a0 {e(_fmt(v, c.kind))}</td>')
            else:
                row.append(_fmt(v, c.kind))
        rows.append(row)
    parts.append(_table(rows, ["parameter"] + list(digest.headings().values())))
    parts.append(f"<p>\u26a0 marks R-hat above {RHAT_LIMIT} or ESS below {ESS_PER_CHAIN_LIMIT} "
                 "per chain (thresholds of common practice).</p>")
    info = d["run"]
    run_rows = [[_RUN_TITLES.get(k, k.replace("_", " ")), _fmt(v)]
                for k, v in info.items() if k != "kernel"]
    parts.append(_table(run_rows, ["run", "value"], cls="kv"))
    parts.append(f'<p class="caution">{e(CAUTION)}</p>')
    parts.append("</section>")

    # settings
    parts.append('<section id="settings"><h2>Settings</h2>')
    rows = [[str(k), _fmt(v)] for k, v in (summary["settings"] or {}).items()]
    if rows:
        parts.append(_table(rows, ["setting", "value"], cls="kv"))
    kern = summary["kernel_after_warmup"] or {}
    if kern:
        parts.append("<p>Kernel after warm-up (what the draws below used):</p>")
        parts.append(_table([[str(k), _fmt(v)] for k, v in kern.items()], ["knob", "value"],
                            cls="kv"))
    parts.append("</section>")

    # figures
    parts.append('<section id="figures"><h2>Figures</h2>')
    for name in FIGURE_NAMES:
        if name not in images:
            continue
        b64 = base64.b64encode(images[name]).decode("ascii")
        parts.append(f'<figure id="fig-{name}"><img alt="{e(name)}" '
                     f'src="data:image/png;base64,{b64}">'
                     f"<figcaption>{e(captions[name])}</figcaption></figure>")
    if files.animation is not None:
        b64 = base64.b64encode(Path(files.animation).read_bytes()).decode("ascii")
        parts.append('<figure id="fig-animation"><img alt="chain animation" '
                     f'src="data:image/gif;base64,{b64}"><figcaption>A few transitions of one '
                     "chain: each trajectory grows step by step, then the draw lands."
                     "</figcaption></figure>")
    if files.notes:
        parts.append('<ul id="notes">' + "".join(f"<li>{e(n)}</li>" for n in files.notes) + "</ul>")
    parts.append("</section>")
    foot = f"phaseglass {e(summary['phaseglass_version'])}"
    if summary.get("command"):
        foot += f" \u00b7 <code>{e(summary['command'])}</code>"
    parts.append(f"<footer>{foot}</footer></body></html>")
    return "\n".join(parts)
