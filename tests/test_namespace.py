"""The top-level namespace: what a user calls, tab completion, star import."""

import subprocess
import sys

import phaseglass as pg

INTERNALS = ("leapfrog_step", "ChainState", "Streams", "resolve_coords", "choose_limits", "CAUTION",
             "DualAveraging", "estimate_metric")


def test_internals_live_in_their_modules_not_at_the_top():
    for name in INTERNALS:
        assert name not in pg.__all__ and not hasattr(pg, name), name
    from phaseglass.core.kernels import ChainState  # noqa: F401  still importable where they live
    from phaseglass.core.leapfrog import leapfrog_step  # noqa: F401
    from phaseglass.core.run import CAUTION  # noqa: F401


def test_every_exported_name_exists_and_the_views_show_in_dir():
    names = dir(pg)
    for view in ("TrajectoryView", "ChainView", "ShiftGibbsView", "DivergenceView", "TuningMap",
                 "DoublingView"):
        assert view in names
    for name in pg.__all__:
        assert getattr(pg, name) is not None, name


def test_star_import_works_in_a_fresh_process():
    code = ("from phaseglass import *\n"
            "assert callable(sample) and callable(Target) and TuningMap.__name__ == 'TuningMap'\n"
            "assert 'leapfrog_step' not in dir()\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
