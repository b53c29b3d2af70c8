"""The report folder: which files a report may touch, its manifest, and atomic writes.

The folder is the user's: a report never touches a file it did not write. It
writes into a new or empty folder, or into a folder holding an earlier report
(recognised by its ``summary.json``, which carries ``"written_by": "phaseglass
report"`` and the list of files that report wrote); there it replaces or removes
only those files. Any other non-empty folder is refused unless ``replace=True``,
and even then only the report's own file names are written and nothing else is
removed. Every file is written atomically (a temporary file in the same folder,
then ``os.replace``) and text as UTF-8, so a crash never leaves a half-written
``report.html`` or ``summary.json``.
"""

import json
import os
import secrets
from pathlib import Path

from .decide import FIGURE_NAMES

__all__ = ["ReportFolderError", "atomic_write", "readable", "check_report_folder", "Manifest",
           "WRITTEN_BY", "OWN_NAMES", "temp_beside"]

#: The marker in ``summary.json`` that says a folder holds a report this package wrote.
WRITTEN_BY = "phaseglass report"

#: Every file name a report may write; nothing else is ever written, replaced or removed.
OWN_NAMES = frozenset([f"{n}.png" for n in FIGURE_NAMES] + ["chain.gif", "summary.json",
                                                             "report.html"])


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
    tmp, f = temp_beside(path, ".tmp")
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


def temp_beside(path, suffix):
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
    return {n for n in listed if isinstance(n, str) and n in OWN_NAMES}


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
    folders = sorted(n for n in OWN_NAMES if (folder / n).is_dir())
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
    clash = sorted(n for n in OWN_NAMES - earlier if (folder / n).exists() or (folder / n).is_symlink())
    if clash and not replace:
        raise ReportFolderError(
            f"{argument} {str(out_dir)!r} holds {', '.join(clash)}, which the earlier report "
            f"there did not write; move {'them' if len(clash) > 1 else 'it'} away, name another "
            f"folder, or {fix} to overwrite")
    return earlier



class Manifest:
    """The files a report in ``folder`` has claimed, kept on disk in ``summary.json``.

    A name is listed (and the stub ``summary.json`` rewritten, ``"complete":
    false``) *before* its file is written, so a crash midway leaves a folder the
    next report still recognises as its own, with every file it holds listed.

    Parameters
    ----------
    folder : Path
    earlier : set of str
        What the earlier report's manifest lists (``check_report_folder``).
    """

    def __init__(self, folder, earlier):
        self.folder = Path(folder)
        self.earlier = set(earlier)
        self.claimed = set(earlier)  # what the manifest on disk lists: the earlier files and ours
        self.written = set()

    def claim(self, name):
        """List ``name`` in the manifest before it is written."""
        if name not in self.claimed:
            self.claimed.update((name, "summary.json"))
            atomic_write(self.folder / "summary.json", json.dumps(
                {"written_by": WRITTEN_BY, "complete": False, "files": sorted(self.claimed)},
                indent=2))
        self.written.add(name)

    def drop_stale(self):
        """Remove the earlier report's files that this report did not write."""
        for stale in sorted(self.earlier - self.written):
            (self.folder / stale).unlink(missing_ok=True)
