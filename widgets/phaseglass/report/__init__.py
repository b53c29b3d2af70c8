"""A shareable static report of one sampling run: PNG figures, ``summary.json`` and ``report.html``.

``write_report(out_dir, run, settings=...)`` draws every view of
``phaseglass.draw`` that applies into PNG files, writes the settings and the
diagnostics (``run.summary().as_dict()``) with plain-word warnings to
``summary.json``, and one self-contained ``report.html`` (images embedded as
base64) that opens anywhere without the files beside it. ``phaseglass report``
on the command line runs a sampler and calls it.

The package in four parts, each usable on its own:

``decide``
    Which figures and notes a run gets (pure data: nothing drawn or written).
``render``
    Drawing each figure on a ``matplotlib.figure.Figure`` (no pyplot state, so
    this works in scripts, servers and notebooks alike) and its caption; the
    tuning heat map's short extra runs (``knob_grid``).
``html``
    The page, from the template ``page.html`` filled with ``string.Template``.
``files``
    The folder rules. A report never touches a file it did not write: it writes
    into a new or empty folder, or into a folder holding an earlier report
    (recognised by its ``summary.json``, which carries ``"written_by":
    "phaseglass report"`` and the list of files that report wrote); there it
    replaces or removes only those files. Any other non-empty folder is refused
    unless ``replace=True``, and even then only the report's own file names are
    written and nothing else is removed. Every file is written atomically (a
    temporary file in the same folder, then ``os.replace``) and text as UTF-8,
    so a crash never leaves a half-written ``report.html`` or ``summary.json``.
"""

from .decide import FIGURE_NAMES
from .files import WRITTEN_BY, ReportFolderError, atomic_write, check_report_folder, readable
from .render import knob_grid
from .write import ReportFiles, write_report

__all__ = ["write_report", "check_report_folder", "atomic_write", "readable", "ReportFiles",
           "ReportFolderError", "knob_grid", "FIGURE_NAMES", "WRITTEN_BY"]
