"""Drawing layer: matplotlib helpers that draw core results into an Axes they are given.

The pattern
-----------
Every helper is shaped ``draw_<thing>(ax, data, **style) -> drawing``:

* it draws into the Axes it is given and never creates a figure or calls
  ``pyplot`` (figure-level helpers such as ``draw_pair_grid`` take a
  ``Figure`` and add their Axes to it);
* it returns a small dataclass (a ``Drawing``) whose fields are the named
  artists it made (``drawing.path``, ``drawing.lines``, ...) plus a few
  settings; ``drawing.artists`` lists them all;
* ``drawing.update(new_data)`` shows new data with the *same* artists, changed
  in place (``set_data``, ``set_segments``, ``set_array``, ``StepPatch.set_data``,
  ``set_text``), so a widget creates the artists once and then only updates
  them. ``update`` returns the drawing; it rescales the Axes unless
  ``drawing.autoscale = False``. Blitting, where the canvas supports it, is the
  caller's business.

::

    from matplotlib.figure import Figure
    import phaseglass as pg
    from phaseglass.draw import draw_trajectory, legend

    target = pg.demos.correlated_gaussian()
    sampler = pg.Sampler(target, pg.HMC(0.25, 12), n_chains=1, seed=2)
    info = sampler.step(record=True)
    ax = Figure().add_subplot()
    view = draw_trajectory(ax, sampler.last_trajectory, accepted=bool(info["accepted"][0]))
    legend(ax)
    info = sampler.step(record=True)
    view.update(sampler.last_trajectory, bool(info["accepted"][0]))   # same artists

Positions of trajectories (and ``log_density_grid``) are on the sampler's
(unconstrained) scale; ``run.draws`` are on the user's scale and
``run.unconstrained`` on the sampler's.

The look is defined once in ``phaseglass.draw.style``: the Okabe-Ito palette,
rejections as hollow markers, divergences as their own ``X`` marker on dashed
lines, a light background, and never colour alone.

Diagnostics drawn here can reveal problems but never prove convergence
(``phaseglass.core.run.CAUTION``).
"""

from . import style
from ._base import Drawing
from .animate import (ChainRecording, animate_chain, chain_frames, record_chain,
                      save_animation, write_chain_animation)
from .chains import (AutocorrelationDrawing, EssPerGradientDrawing, RunningEssDrawing,
                     TracesDrawing, draw_autocorrelation, draw_ess_per_gradient,
                     draw_running_ess, draw_traces, running_ess)
from .density import LogDensityDrawing, draw_log_density
from .energy import EnergyJumpsDrawing, draw_energy_jumps, energy_histograms
from .gibbs import (ChainSpreadDrawing, GibbsPathsDrawing, chain_spread, draw_chain_spread,
                    draw_gibbs_paths, staircase)
from .pairs import PairDrawing, PairGridDrawing, draw_pair, draw_pair_grid
from .style import legend
from .trajectory import (EnergyErrorDrawing, TrajectoryDrawing, draw_energy_error,
                         draw_trajectory, one_chain)
from .tuning import KnobGridDrawing, draw_knob_grid
from .uniforms import UniformSequenceDrawing, draw_uniform_sequence, rejection_runs

__all__ = [
    # helpers
    "draw_log_density", "draw_trajectory", "draw_energy_error", "draw_uniform_sequence",
    "draw_traces", "draw_autocorrelation", "draw_running_ess", "draw_ess_per_gradient",
    "draw_energy_jumps", "draw_pair", "draw_pair_grid", "draw_gibbs_paths",
    "draw_chain_spread", "draw_knob_grid",
    # what they return
    "Drawing", "LogDensityDrawing", "TrajectoryDrawing", "EnergyErrorDrawing",
    "UniformSequenceDrawing", "TracesDrawing", "AutocorrelationDrawing", "RunningEssDrawing",
    "EssPerGradientDrawing", "EnergyJumpsDrawing", "PairDrawing", "PairGridDrawing",
    "GibbsPathsDrawing", "ChainSpreadDrawing", "KnobGridDrawing",
    # animation
    "ChainRecording", "record_chain", "chain_frames", "animate_chain", "save_animation",
    "write_chain_animation",
    # small numeric helpers and style
    "one_chain", "running_ess", "energy_histograms", "rejection_runs", "staircase",
    "chain_spread", "legend", "style",
]
