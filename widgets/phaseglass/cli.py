"""The ``phaseglass`` command line (also ``python -m phaseglass``).

``phaseglass report`` runs a sampler on a demo model or your own Target and
writes a shareable folder: PNG figures, ``summary.json`` and a self-contained
``report.html``.

Subcommands are registered in ``SUBCOMMANDS`` below: each is a name, a help
line, a function adding its arguments to an ``argparse`` sub-parser and a
function running it (returning an exit code). A new subcommand (``phaseglass
demo``, for one) is added there without touching the others.

Exit codes: 0 success, 1 the run failed while sampling or drawing, 2 bad usage
(including a ``--model`` that cannot be loaded), always with one line on stderr.
"""

import argparse
import importlib
import os
import sys
import warnings

__all__ = ["main", "build_parser", "load_model", "UsageError", "SUBCOMMANDS"]

PROG = "phaseglass"


class UsageError(Exception):
    """Bad input from the command line: reported as one line, exit code 2."""


class RunError(Exception):
    """The run itself failed (the model raised while sampling, ...): one line, exit code 1."""


class Interrupted(Exception):
    """Ctrl-C while running: one line saying what was finished, exit code 130."""


def _one_line(exc):
    text = str(exc).strip().splitlines()
    first = text[0] if text else ""
    return f"{type(exc).__name__}: {first}" if first else type(exc).__name__


# ------------------------------------------------------------------ models

def load_model(spec):
    """Return the Target named by ``spec``: a demo name, ``package.module:callable`` or
    ``path/to/file.py:callable``.

    The callable is called with no arguments and must return a phaseglass Target.
    The current directory is searched first, so ``mymodel:build`` finds
    ``./mymodel.py``; a file path (``./mymodel.py:build``, ``models/m.py:build``)
    is loaded from that file, with its folder importable while it loads.

    Raises
    ------
    UsageError
        With a one-line message for an unknown name, a module or file that cannot
        be imported, a missing or non-callable attribute, a callable that raises,
        or a return value that is not a Target.
    """
    from .core import demos
    from .core.target import Target

    if spec in demos.DEMOS:
        return demos.get(spec)
    if ":" not in spec:
        hint = (f"; name the function that builds the Target: {spec}:build"
                if spec.endswith(".py") else "")
        raise UsageError(
            f"unknown --model {spec!r}: give a demo name ({', '.join(demos.DEMOS)}), "
            f"package.module:callable or path/to/file.py:callable{hint}"
        )
    module_name, _, attr = spec.rpartition(":")  # rpartition: a Windows path has a drive colon
    if not module_name or not attr:
        raise UsageError(f"--model {spec!r} must look like package.module:callable "
                         "or path/to/file.py:callable")
    if module_name.endswith(".py") or "/" in module_name or os.sep in module_name:
        module = _load_file(module_name, spec)
    else:
        module = _import_module(module_name, spec)
    obj = module
    for part in attr.split("."):
        if not hasattr(obj, part):
            raise UsageError(f"module {module_name!r} has no attribute {attr!r} (from --model {spec!r})")
        obj = getattr(obj, part)
    if isinstance(obj, Target):
        return obj
    if not callable(obj):
        raise UsageError(
            f"--model {spec!r} is not callable (got a value of type {type(obj).__name__}); name a "
            "function that returns a phaseglass Target"
        )
    try:
        target = obj()
    except Exception as exc:
        raise UsageError(f"--model {spec!r} raised {_one_line(exc)}") from None
    if not isinstance(target, Target):
        raise UsageError(
            f"--model {spec!r} returned {type(target).__name__}, not a phaseglass Target; "
            "return pg.Target(log_density, grad, dim=...)"
        )
    return target


class _on_path:
    """Put a folder first on ``sys.path`` for the duration of a ``with`` block."""

    def __init__(self, folder):
        self.folder = str(folder)

    def __enter__(self):
        self.added = self.folder not in sys.path
        if self.added:
            sys.path.insert(0, self.folder)

    def __exit__(self, *exc):
        if self.added and self.folder in sys.path:
            sys.path.remove(self.folder)


def _import_module(module_name, spec):
    if module_name.startswith("."):
        raise UsageError(f"--model {spec!r}: a relative module name cannot be imported; write "
                         f"the full name (package.module:callable) or a file path (./file.py:callable)")
    try:
        with _on_path(os.getcwd()):
            return importlib.import_module(module_name)
    except ModuleNotFoundError as exc:
        raise UsageError(f"cannot import module {module_name!r} for --model {spec!r}: {exc}") from None
    except Exception as exc:  # the user's module raised while importing
        raise UsageError(f"importing {module_name!r} for --model {spec!r} raised {_one_line(exc)}") from None


def _load_file(path_text, spec):
    """Import a Python file by path (``importlib.util.spec_from_file_location``)."""
    import importlib.util
    from pathlib import Path

    path = Path(path_text).expanduser()
    if not path.is_file():
        what = "is a folder" if path.is_dir() else "does not exist"
        raise UsageError(f"--model {spec!r}: the file {path_text!r} {what} (looked in {os.getcwd()})")
    if path.suffix != ".py":
        raise UsageError(f"--model {spec!r}: {path_text!r} is not a .py file")
    path = path.resolve()
    name = "phaseglass_model_" + "".join(c if c.isalnum() else "_" for c in path.stem)
    module_spec = importlib.util.spec_from_file_location(name, path)
    if module_spec is None or module_spec.loader is None:
        raise UsageError(f"--model {spec!r}: cannot load {path_text!r} as a Python module")
    module = importlib.util.module_from_spec(module_spec)
    sys.modules[name] = module  # dataclasses and pickling look the module up by name
    try:
        with _on_path(path.parent):  # so the file can import its neighbours
            module_spec.loader.exec_module(module)
    except Exception as exc:
        sys.modules.pop(name, None)
        raise UsageError(f"importing {path_text!r} for --model {spec!r} raised {_one_line(exc)}") from None
    return module


# ------------------------------------------------------------------ argument types

def _number(convert, accept, expected):
    """An argparse type: ``convert`` the text, keep it if ``accept(value)``, else say ``expected``."""
    def parse(text):
        try:
            v = convert(text)
        except ValueError:
            v = None
        if v is None or not accept(v):
            raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}")
        return v

    parse.__name__ = expected
    return parse


_positive_float = _number(float, lambda v: 0 < v < float("inf"), "a number > 0")
_fraction = _number(float, lambda v: 0 <= v < 1, "a number in [0, 1)")

#: PNG resolution range: below it the figures are unreadable; above it one figure needs hundreds
#: of megabytes (and matplotlib refuses images wider than 2**16 pixels).
DPI_RANGE = (10, 600)
_dpi = _number(float, lambda v: DPI_RANGE[0] <= v <= DPI_RANGE[1],
               f"a number from {DPI_RANGE[0]} to {DPI_RANGE[1]} (screen: 90, print: 300)")


def _count(minimum, maximum=None):
    if maximum is None:
        return _number(int, lambda v: v >= minimum, f"a whole number >= {minimum}")
    return _number(int, lambda v: minimum <= v <= maximum,
                   f"a whole number from {minimum} to {maximum}")


def _coord_pair(text):
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 2 or not all(parts):
        raise argparse.ArgumentTypeError(f"expected two names or indices like mu,log_tau or 0,1, got {text!r}")
    return tuple(int(p) if p.lstrip("-").isdigit() else p for p in parts)


# ------------------------------------------------------------------ report

#: Kernel kinds of ``--kernel`` (short names of ``core.registry``).
CLI_KINDS = ("hmc", "partial", "walk", "nuts")

#: Knob defaults of each kind when an option is not given (warm-up tunes the
#: step size or scale anyway).
KERNEL_DEFAULTS = {
    "hmc": {"step_size": 0.25, "n_steps": 10},
    "partial": {"step_size": 0.15, "n_steps": 1, "persistence": 0.9},
    "walk": {"scale": 0.5},
    "nuts": {"step_size": 0.25, "max_depth": 10},
}

#: Each knob's option (the core's argument names as the user types them).
_FLAGS = {"step_size": "--step-size", "scale": "--scale", "n_steps": "--n-steps",
          "max_depth": "--max-depth", "persistence": "--persistence", "drift": "--drift"}


def _add_report_arguments(p):
    from .core import demos
    from .core._validate import MAX_STEPS
    from .core.nuts import MAX_DEPTH_LIMIT
    from .core.registry import kernel_kind

    def applies(knob):
        kinds = [k for k in CLI_KINDS if knob in KERNEL_DEFAULTS[k]]
        return ", ".join(f"{KERNEL_DEFAULTS[k][knob]} {k}" for k in kinds)

    model = p.add_argument_group("model")
    model.add_argument("--model", default="gaussian", metavar="NAME|MODULE:CALLABLE",
                       help=f"a demo ({', '.join(demos.DEMOS)}), package.module:callable or "
                            "path/to/file.py:callable returning a phaseglass Target "
                            "(default: gaussian)")
    model.add_argument("--coords", type=_coord_pair, default=None, metavar="A,B",
                       help="two coordinates (names or indices) for trajectories, paths and the "
                            "first pair (default: the first two)")
    knobs = p.add_argument_group("sampler and knobs")
    knobs.add_argument("--kernel", choices=CLI_KINDS, default="hmc",
                       help="; ".join(f"{k}: {kernel_kind(k).title}" for k in CLI_KINDS)
                       + " (default: hmc)")
    knobs.add_argument("--step-size", type=_positive_float, default=None, metavar="EPS",
                       help="leapfrog step size; the starting value when --warmup > 0 "
                            f"(default: {applies('step_size')})")
    knobs.add_argument("--scale", type=_positive_float, default=None, metavar="S",
                       help="the random walk's proposal scale; the starting value when "
                            f"--warmup > 0 (default: {applies('scale')})")
    knobs.add_argument("--n-steps", type=_count(1, MAX_STEPS), default=None, metavar="N",
                       dest="n_steps",
                       help=f"leapfrog steps per transition (default: {applies('n_steps')})")
    # the former name, kept working (hidden from --help)
    knobs.add_argument("--steps", type=_count(1, MAX_STEPS), default=None, dest="n_steps",
                       help=argparse.SUPPRESS)
    knobs.add_argument("--max-depth", type=_count(1, MAX_DEPTH_LIMIT), default=None, metavar="D",
                       help="NUTS: most doublings per transition, at most 2**D - 1 leapfrog steps "
                            f"(default: {applies('max_depth')})")
    knobs.add_argument("--persistence", type=_fraction, default=None, metavar="A",
                       help=f"momentum persistence in [0, 1) (default: {applies('persistence')})")
    knobs.add_argument("--uniform", choices=("fresh", "drifting"), default="fresh",
                       help="accept/reject uniform: a fresh one per decision, or one that drifts "
                            "so rejections cluster (default: fresh)")
    knobs.add_argument("--drift", type=_positive_float, default=None, metavar="D",
                       help="change of the drifting uniform per transition, below 2 (default: 0.03)")
    knobs.add_argument("--warmup", type=_count(0), default=300, metavar="N",
                       help="tuning transitions before the kept draws (default: 300)")
    run = p.add_argument_group("run and output")
    run.add_argument("--draws", type=_count(1), default=500, metavar="N",
                     help="draws kept per chain (default: 500)")
    run.add_argument("--chains", type=_count(1), default=4, metavar="N",
                     help="number of chains (default: 4)")
    run.add_argument("--seed", type=_count(0), default=None, metavar="INT",
                     help="random seed; the one used is recorded in the report (default: fresh)")
    run.add_argument("--out", default="phaseglass-report", metavar="DIR",
                     help="folder for the report, created if needed; it must be new, empty or hold "
                          "an earlier report, whose files alone are replaced "
                          "(default: ./phaseglass-report)")
    run.add_argument("--replace", action="store_true",
                     help="also write into a non-empty --out folder that holds no earlier report, "
                          "overwriting files named like the report's (summary.json, report.html, "
                          "the figures); other files there are never touched")
    run.add_argument("--dpi", type=_dpi, default=90, metavar="DPI",
                     help=f"resolution of the PNG figures, {DPI_RANGE[0]} to {DPI_RANGE[1]} "
                          "(default: 90)")
    run.add_argument("--no-grid", action="store_true",
                     help="skip the step size x leapfrog steps heat map (saves a few short runs)")
    run.add_argument("--gif", action="store_true",
                     help="also write chain.gif, a few transitions of one chain, step by step")
    run.add_argument("--quiet", action="store_true", help="print nothing but errors")


def _build_kernel(args):
    from .core.registry import kernel_kind
    from .core.uniforms import DriftingUniform, FreshUniform

    notes = []
    kind = args.kernel
    knobs = dict(KERNEL_DEFAULTS[kind])
    if kind == "walk" and args.step_size is not None and args.scale is None:
        # before issue 12 a walk's scale was given as --step-size: read it, say the new name
        notes.append("--step-size of --kernel walk is its proposal scale: use --scale "
                     "(read as --scale for now)")
        args.scale, args.step_size = args.step_size, None
    for knob in ("step_size", "scale", "n_steps", "max_depth", "persistence"):
        given = getattr(args, knob)
        if given is None:
            continue
        if knob in knobs:
            knobs[knob] = given
        else:
            kinds = [k for k in CLI_KINDS if knob in KERNEL_DEFAULTS[k]]
            notes.append(f"{_FLAGS[knob]} applies to --kernel {' or '.join(kinds)} only; ignored")
    if args.drift is not None and args.uniform != "drifting":
        notes.append("--drift applies to --uniform drifting only; ignored")
    if args.uniform != "fresh" and kind == "nuts":
        notes.append("--uniform does not apply to --kernel nuts (no accept/reject uniform); "
                     "ignored")
    entry = kernel_kind(kind)
    try:
        if kind != "nuts":
            knobs["uniform"] = (DriftingUniform(args.drift if args.drift is not None else 0.03)
                                if args.uniform == "drifting" else FreshUniform())
        positional = [knobs.pop(k) for k in entry.positional]
        kernel = entry.cls(*positional, **knobs)
    except (TypeError, ValueError) as exc:
        raise UsageError(_with_flag(str(exc).splitlines()[0])) from None
    return kernel, notes


def _with_flag(message):
    """Prefix a core error naming `step_size` (say) with the option the user typed: --step-size."""
    import re

    found = re.search(r"`(\w+)`", message)
    flag = _FLAGS.get(found.group(1)) if found else None
    return f"{flag}: {message}" if flag else message


def _run_report(args):
    import time

    import numpy as np

    from .core.sampling import sample

    say = (lambda *a: None) if args.quiet else (lambda *a: print(*a, flush=True))
    target = load_model(args.model)
    kernel, notes = _build_kernel(args)
    for n in notes:
        print(f"{PROG} report: note: {n}", file=sys.stderr)
    coords = args.coords
    if coords is not None:
        from .core.slices import resolve_coords

        try:
            resolve_coords(coords, target.names, target.dim)
        except (TypeError, ValueError) as exc:
            raise UsageError(f"--coords: {str(exc).splitlines()[0]}") from None
    elif target.dim < 2:
        coords = None
    from .report import ReportFolderError, check_report_folder, readable, write_report

    def check_folder():  # before sampling, so a refused folder costs nothing
        try:
            check_report_folder(args.out, replace=args.replace, argument="--out",
                                fix="pass --replace")
        except ReportFolderError as exc:
            raise UsageError(str(exc)) from None

    check_folder()
    say(f"sampling {args.model}: {type(kernel).__name__}, {args.chains} chains x "
        f"{args.draws} draws after {args.warmup} warm-up")
    started = time.perf_counter()
    try:
        with np.errstate(all="ignore"), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            run = sample(target, kernel, None, args.draws, n_chains=args.chains,
                         warmup=args.warmup, seed=args.seed)
    except Exception as exc:  # the model's own code raised, or it has no finite start
        raise RunError(f"sampling {args.model!r} failed: {_one_line(exc)}") from None
    if getattr(run, "stopped", None) == "interrupted":  # Ctrl-C: sample() kept the finished draws
        raise Interrupted(f"interrupted after {run.n_draws} of {args.draws} draws per chain"
                          f"{' (in warm-up)' if run.n_draws == 0 else ''}; no report written")
    for w in caught:  # what the sampler had to say, in the usual format
        warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    sampled = time.perf_counter() - started
    settings = {
        "model": args.model, "kernel": args.kernel,
        f"{kernel.tuned_knob} (start of warm-up)": getattr(kernel, kernel.tuned_knob),
        "n_steps": getattr(kernel, "n_steps", None), "max_depth": getattr(kernel, "max_depth", None),
        "persistence": getattr(kernel, "persistence", None),
        "uniform": args.uniform,
        "drift": args.drift if args.drift is not None else (0.03 if args.uniform == "drifting" else None),
        "warmup": args.warmup, "draws": args.draws, "chains": args.chains,
        "seed": int(run.seed) if np.ndim(run.seed) == 0 else run.seed,
        "seed given": args.seed is not None,
    }
    settings = {k: v for k, v in settings.items() if v is not None}
    command = readable(" ".join([PROG] + list(args._argv)))
    settings["model"] = readable(settings["model"])
    try:
        files = write_report(args.out, run, settings=settings, title=readable(args.model),
                             coords=coords,
                             grid=not args.no_grid, animation=args.gif, dpi=args.dpi,
                             command=command, replace=args.replace)
    except ReportFolderError as exc:  # the folder changed while sampling
        check_folder()
        raise UsageError(str(exc)) from None
    except OSError as exc:
        raise RunError(f"cannot write the report to {args.out!r}: {exc}") from None
    n_warn = len(files.warnings)
    say(f"sampled in {sampled:.1f} s; wrote {len(files.figures)} figures, summary.json and "
        f"report.html to {files.folder} ({files.seconds:.1f} s)")
    say(f"{n_warn} warning(s); open {files.html}" if n_warn
        else f"no problem detected by these checks (not proof of convergence); open {files.html}")
    return 0


# ------------------------------------------------------------------ subcommands

def _add_demo_arguments(p):
    from .launch import add_demo_arguments

    add_demo_arguments(p)


def _run_demo(args):
    from .launch import run_demo

    return run_demo(args, usage_error=UsageError)


#: name -> (help line, add_arguments(parser), run(args) -> exit code).
SUBCOMMANDS = {
    "demo": ("copy every example notebook into a working folder and open the tour in JupyterLab",
             _add_demo_arguments, _run_demo),
    "report": ("run a sampler and write figures, summary.json and a self-contained report.html",
               _add_report_arguments, _run_report),
}


def build_parser():
    """The argparse parser with one sub-parser per entry of ``SUBCOMMANDS``."""
    from . import __version__

    parser = argparse.ArgumentParser(
        prog=PROG,
        description="Look inside gradient-based MCMC samplers. Diagnostics can reveal problems "
                    "but never prove convergence.",
    )
    parser.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name, (help_line, add_arguments, run) in SUBCOMMANDS.items():
        p = sub.add_parser(name, help=help_line, description=help_line[0].upper() + help_line[1:] + ".")
        add_arguments(p)
        p.set_defaults(_run=run)
    return parser


def _tolerant_streams():
    """Under a non-UTF-8 locale (LC_ALL=C, Windows consoles) a path or name the terminal cannot
    show is printed escaped instead of crashing the command with UnicodeEncodeError."""
    for stream in (sys.stdout, sys.stderr):
        encoding = (getattr(stream, "encoding", None) or "").lower().replace("-", "")
        if encoding != "utf8" and hasattr(stream, "reconfigure"):
            try:
                stream.reconfigure(errors="backslashreplace")
            except (ValueError, OSError):  # a stream that cannot be reconfigured: leave it
                pass


def main(argv=None):
    """Run the command line; returns the exit code (0 ok, 1 run failed, 2 bad usage)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    _tolerant_streams()
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse already printed usage and the error (or --help)
        return int(exc.code or 0)
    args._argv = argv
    prefix = f"{PROG} {args.command}"
    try:
        return int(args._run(args) or 0)
    except UsageError as exc:
        print(f"{prefix}: error: {exc}", file=sys.stderr)
        return 2
    except RunError as exc:
        print(f"{prefix}: error: {exc}", file=sys.stderr)
        return 1
    except Interrupted as exc:
        print(f"{prefix}: {exc}", file=sys.stderr)
        return 130
    except KeyboardInterrupt:
        print(f"{prefix}: interrupted; no report written" if args.command == "report"
              else f"{prefix}: interrupted", file=sys.stderr)
        return 130
