"""``phaseglass demo``: copy the example notebooks into a working folder and open JupyterLab.

The user's edits are never overwritten: a notebook that already exists in the
folder is left as it is, and a copy interrupted midway never leaves a
half-written notebook that a later run would keep.

The server is JupyterLab's own process, started and watched by this one. Ctrl-C,
SIGTERM and SIGHUP all stop it cleanly (SIGTERM is what JupyterLab shuts down on,
kernels included); if it has not stopped after ``STOP_GRACE`` seconds it is
killed, so no server is ever left running behind ``phaseglass demo``.
"""

import argparse
import errno
import os
import secrets
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

__all__ = ["notebooks_folder", "copy_notebooks", "add_demo_arguments", "run_demo", "TOUR",
           "lab_command", "choose_port", "port_is_free", "serve", "LAB_PORT", "STOP_GRACE"]

TOUR = "tour.ipynb"
DEFAULT_DIR = "phaseglass-tour"

#: JupyterLab's usual port, tried first when ``--port`` is not given.
LAB_PORT = 8888
#: Seconds JupyterLab gets to shut down (its kernels too) after a stop signal before it is killed.
STOP_GRACE = 20.0


def notebooks_folder():
    """The folder holding the shipped example notebooks.

    Installed from a wheel they live in the package (``phaseglass.notebooks``);
    in a source checkout (editable install) they are ``example_notebooks/``.
    """
    try:
        from importlib.resources import files

        folder = files("phaseglass.notebooks")
        if (Path(str(folder)) / TOUR).exists():
            return Path(str(folder))
    except (ModuleNotFoundError, TypeError):
        pass
    here = Path(__file__).resolve().parent
    checkout = here.parents[1] / "example_notebooks"
    if (checkout / TOUR).exists():
        return checkout
    raise FileNotFoundError(
        "the example notebooks were not found in the installed package nor next to the source "
        "tree; reinstall phaseglass (pip install phaseglass[lab])"
    )


def copy_notebooks(folder, *, out=print):
    """Copy every example notebook into ``folder``; existing files are kept as they are.

    Returns
    -------
    list of Path
        The notebooks now in ``folder`` (copied or kept).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    kept = []
    for src in sorted(notebooks_folder().glob("*.ipynb")):
        dst = folder / src.name
        if dst.exists() or dst.is_symlink():
            out(f"keeping your {dst} (not overwritten)")
        elif _copy_new(src, dst):
            out(f"copied {src.name} -> {dst}")
        else:
            out(f"keeping your {dst} (not overwritten)")
        kept.append(dst)
    return kept


def _copy_new(src, dst):
    """Copy ``src`` to a ``dst`` that does not exist yet, all or nothing; False if it appeared.

    The copy goes to a hidden file beside ``dst`` first and is then linked into
    place, which fails rather than overwrites if ``dst`` was created meanwhile.
    """
    tmp = dst.with_name(f".{dst.name}.{secrets.token_hex(4)}.tmp")
    try:
        shutil.copyfile(src, tmp)
        try:
            os.link(tmp, dst)
        except FileExistsError:
            return False
        except OSError:  # a file system without hard links: the exists-check above has to do
            if dst.exists():
                return False
            os.replace(tmp, dst)
        return True
    finally:
        tmp.unlink(missing_ok=True)


def _notebook_names():
    try:
        return ", ".join(sorted(f.stem for f in notebooks_folder().glob("*.ipynb")))
    except FileNotFoundError:
        return "none found"


def add_demo_arguments(p):
    p.description = (f"Copy every example notebook ({_notebook_names()}) into a working folder "
                     "and open the tour in JupyterLab.")
    p.add_argument("--dir", default=DEFAULT_DIR,
                   help=f"working folder for the notebooks (default ./{DEFAULT_DIR}); existing "
                        "notebooks there are never overwritten")
    p.add_argument("--port", type=int, default=None,
                   help=f"port for JupyterLab; if it is in use the next free one is taken and the "
                        f"terminal says which (default: {LAB_PORT}, or the next free one)")
    p.add_argument("--no-browser", action="store_true", help="start the server without opening a browser")
    p.add_argument("--copy-only", action="store_true",
                   help="only copy the notebooks; do not start JupyterLab")
    p.add_argument("lab_args", nargs=argparse.REMAINDER,
                   help="anything after -- is passed on to JupyterLab (e.g. -- --ServerApp.token=...)")


def _lab_available():
    try:
        import jupyterlab  # noqa: F401
    except ImportError:
        return False
    return True


def lab_command(folder, *, port=None, no_browser=False, extra=(), strict_port=False):
    """The command line that starts JupyterLab on the tour.

    As root (containers, CI machines) JupyterLab refuses to start without
    ``--allow-root``, so it is added there. ``strict_port`` makes JupyterLab fail
    rather than move to another port (``run_demo`` has already checked the port
    and told the user which one it is).
    """
    cmd = [sys.executable, "-m", "jupyterlab", f"--ServerApp.root_dir={folder}", str(Path(folder) / TOUR)]
    if port is not None:
        cmd.append(f"--port={port}")
        if strict_port:
            cmd.append("--ServerApp.port_retries=0")
    if no_browser:
        cmd.append("--no-browser")
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        cmd.append("--allow-root")
    cmd.extend(a for a in extra if a != "--")
    return cmd


def port_is_free(port):
    """True if nothing listens on ``port`` on the loopback interfaces (IPv4, and IPv6 if present).

    Binds a probe socket with ``SO_REUSEADDR`` as a server does, so a port that
    only has closing connections left (TIME_WAIT) counts as free.
    """
    for family, host in ((socket.AF_INET, "127.0.0.1"), (socket.AF_INET6, "::1")):
        try:
            probe = socket.socket(family, socket.SOCK_STREAM)
        except OSError:  # no IPv6 on this machine
            continue
        with probe:
            if os.name != "nt":  # on Windows SO_REUSEADDR would let us bind over a listener
                probe.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
            try:
                probe.bind((host, port))
            except OSError as exc:
                if family == socket.AF_INET6 and exc.errno != errno.EADDRINUSE:
                    continue  # ::1 not configured here: only IPv4 matters
                return False
    return True


def choose_port(wanted=None, *, tries=50):
    """The port to serve on and, if it is not the one asked for, a plain-word sentence saying so.

    Parameters
    ----------
    wanted : int, optional
        The port asked for (default ``LAB_PORT``).
    tries : int
        Ports after ``wanted`` to try before letting the system pick one.

    Returns
    -------
    (int, str or None)
    """
    first = LAB_PORT if wanted is None else int(wanted)
    if port_is_free(first):
        return first, None
    for port in range(first + 1, min(first + 1 + tries, 65536)):
        if port_is_free(port):
            break
    else:
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
    whose = "" if wanted is not None else " (JupyterLab's usual port)"
    return port, f"port {first}{whose} is in use, so JupyterLab will use port {port} instead"


def _user_sets_port(lab_args):
    return any(a.startswith(("--port", "--ServerApp.port", "--ServerApp.sock")) for a in lab_args)


def serve(cmd, *, cwd=None, grace=STOP_GRACE, out=print):
    """Run the server command until it exits; stop it on Ctrl-C, SIGTERM or SIGHUP.

    A stop asks the server to shut down with SIGTERM (JupyterLab then stops its
    kernels too; SIGHUP is not forwarded as it is, because JupyterLab would die
    on it without stopping its kernels), waits up to ``grace`` seconds, and kills
    it if it is still running. The server is never left behind, whatever ends
    this function.

    Returns
    -------
    int
        The exit code for ``phaseglass demo``: 0 after Ctrl-C or a normal exit,
        128 + the signal number after SIGTERM/SIGHUP, else the server's code.
    """
    proc = subprocess.Popen(cmd, cwd=cwd)
    stop = {}

    def on_signal(signum, frame):  # only note it: the loop below does the work
        if not stop:
            stop["by"] = signum
            stop["deadline"] = time.monotonic() + grace
            _signal(proc, signal.SIGTERM)

    previous = {}
    if threading.current_thread() is threading.main_thread():  # handlers only work there
        for name in ("SIGTERM", "SIGHUP"):
            sig = getattr(signal, name, None)
            if sig is not None:
                previous[sig] = signal.signal(sig, on_signal)
    announced = []

    def announce():
        if stop and not announced:
            announced.append(True)
            out(f"stopping JupyterLab (pid {proc.pid}) after {signal.Signals(stop['by']).name}...")

    try:
        while True:
            try:
                code = proc.wait(timeout=0.2)
                break
            except subprocess.TimeoutExpired:
                pass
            except KeyboardInterrupt:
                on_signal(signal.SIGINT, None)
            announce()
            if stop and time.monotonic() > stop["deadline"]:
                out(f"JupyterLab did not stop within {grace:g} s; killing it (pid {proc.pid})")
                proc.kill()
                code = proc.wait()
                break
    finally:
        if proc.poll() is None:  # an unexpected error here: still never leave the server running
            _signal(proc, signal.SIGTERM)
            try:
                proc.wait(timeout=grace)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
    announce()  # the server may have stopped before the loop came round to saying so
    if stop.get("by") == signal.SIGINT:
        return 0
    if stop:
        return 128 + int(stop["by"])
    return code if code >= 0 else 128 - code


def _signal(proc, sig):
    try:
        proc.send_signal(sig)
    except (ProcessLookupError, OSError):  # it has just exited
        pass


def run_demo(args, *, usage_error):
    """Run ``phaseglass demo``; ``usage_error`` is the CLI's exception for one-line exit-2 errors."""
    if args.port is not None and not 0 < args.port < 65536:
        raise usage_error(f"--port must be between 1 and 65535, got {args.port}")
    if not str(args.dir).strip():
        raise usage_error("--dir must name a folder for the notebooks, got ''")
    folder = Path(args.dir).expanduser().resolve()
    if folder.exists() and not folder.is_dir():
        raise usage_error(f"--dir {args.dir!r} exists and is not a folder")
    try:
        copy_notebooks(folder)
    except FileNotFoundError as exc:
        if folder.is_dir():  # the shipped notebooks are missing, not the folder
            raise usage_error(str(exc)) from None
        raise usage_error(f"--dir {args.dir!r}: cannot create the folder ({_reason(exc)}); "
                          "name a folder you can write to") from None
    except OSError as exc:
        raise usage_error(f"--dir {args.dir!r}: cannot write the notebooks there ({_reason(exc)}); "
                          "name a folder you can write to") from None
    if args.copy_only:
        print(f"notebooks are in {folder}; open {TOUR} in Jupyter")
        return 0
    if not _lab_available():
        raise usage_error(
            "JupyterLab is not installed; install it with: pip install 'phaseglass[lab]' "
            f"(the notebooks were copied to {folder})"
        )
    lab_args = [a for a in (args.lab_args or ()) if a != "--"]
    port, strict = args.port, False
    if not _user_sets_port(lab_args):
        port, moved = choose_port(args.port)
        strict = True
        if moved:
            print(f"{moved}.")
    cmd = lab_command(folder, port=port, no_browser=args.no_browser, extra=lab_args,
                      strict_port=strict)
    print("starting JupyterLab on the tour (stop it with Ctrl-C):", " ".join(cmd))
    if strict:
        print(f"JupyterLab will be at http://localhost:{port}/lab (it prints the full address "
              "with its access token below)", flush=True)
    return serve(cmd, cwd=folder)


def _reason(exc):
    return exc.strerror or str(exc) or type(exc).__name__
