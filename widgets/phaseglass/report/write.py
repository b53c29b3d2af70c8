"""``write_report``: plan, draw and write a report folder (see ``phaseglass.report``)."""

import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..core.run import CAUTION
from . import decide, render
from .files import WRITTEN_BY, Manifest, atomic_write, check_report_folder, readable, temp_beside
from .html import page

__all__ = ["write_report", "ReportFiles"]


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
        Add the step size x leapfrog steps heat map (a few short extra runs; leapfrog kernels).
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
    plan = decide.plan(run, digest, coords=coords, grid=grid, grid_draws=grid_draws,
                       animation=animation)
    out.mkdir(parents=True, exist_ok=True)
    manifest = Manifest(out, earlier)
    files = ReportFiles(folder=out, html=out / "report.html", summary=out / "summary.json",
                        warnings=list(plan.warnings), notes=list(plan.notes))
    images, captions = {}, {}
    grid_info = None
    for planned in plan.figures:
        computed = {}
        if planned.name == "tuning":
            o = planned.options
            computed["values"] = render.knob_grid(run, o["step_sizes"], o["steps"],
                                                  n_draws=o["draws"],
                                                  seed=decide.stream(run, "grid"))
            grid_info = _grid_summary(computed["values"], o)
        name, path = planned.name, out / f"{planned.name}.png"
        images[name] = render.png(render.figure(planned, run, **computed), dpi)
        manifest.claim(path.name)  # listed before it is written
        atomic_write(path, images[name])
        files.figures[name] = path
        captions[name] = render.caption(planned)
    gif = None
    if plan.animation:
        gif = _write_animation(run, plan.coords, out, manifest)
        files.animation = out / "chain.gif"
    manifest.claim("summary.json")
    manifest.claim("report.html")
    manifest.drop_stale()  # the earlier report's files this run does not make
    summary = _summary(run, digest, settings, title, files, grid_info, command)
    text = page(digest, summary, images, captions, n_chains=run.n_chains, notes=files.notes,
                animation=gif)
    atomic_write(files.summary, json.dumps(summary, indent=2, allow_nan=False))
    atomic_write(files.html, readable(text))
    files.seconds = time.perf_counter() - started
    return files


def _grid_summary(values, options):
    return {"value": render.TUNING_LABEL, "step_sizes": options["step_sizes"],
            "steps": options["steps"],
            "values": [[None if not np.isfinite(v) else float(v) for v in row] for row in values],
            "draws_per_cell": options["draws"]}


def _write_animation(run, coords, out, manifest):
    """Write ``chain.gif`` whole (beside it first, then swapped in); returns its bytes."""
    from ..draw.animate import write_chain_animation

    manifest.claim("chain.gif")
    tmp, f = temp_beside(out / "chain.gif", ".gif")
    f.close()
    try:  # the GIF writer writes in place: write beside it, then swap it in whole
        write_chain_animation(tmp, run.target, run.kernel, coords=coords,
                              seed=decide.stream(run, "animation"), initial=run.draws[0, -1])
        os.replace(tmp, out / "chain.gif")
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return (out / "chain.gif").read_bytes()


def _summary(run, digest, settings, title, files, grid_info, command):
    from .. import __version__

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
