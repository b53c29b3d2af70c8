"""The numerical core: targets, metric, leapfrog, kernels, sampling loop, diagnostics, demos.

Pure numpy/scipy; never imports matplotlib or ipywidgets, so it works from a plain script.
"""

from . import demos
from .adaptation import DualAveraging, estimate_metric
from .diagnostics import autocorrelation, ebfmi, ess, mcse, rhat
from .gibbs import Gibbs
from .kernels import HMC, ChainState, Kernel, PartialRefreshHMC, RandomWalk, kernel_from_settings
from .leapfrog import Trajectory, leapfrog, leapfrog_step
from .metric import Metric
from .run import CAUTION, Digest, Run
from .sampling import Sampler, auto_warmup, sample
from .slices import choose_limits, log_density_grid, resolve_coords
from .streams import Streams
from .target import GradientCheck, Target
from .triage import DivergenceRanking, divergence_ranking
from .uniforms import DriftingUniform, FreshUniform

__all__ = [
    "Target", "GradientCheck", "Metric", "leapfrog", "leapfrog_step", "Trajectory",
    "Kernel", "ChainState", "HMC", "PartialRefreshHMC", "RandomWalk", "Gibbs",
    "FreshUniform", "DriftingUniform", "kernel_from_settings",
    "Sampler", "sample", "auto_warmup", "Run", "Digest", "CAUTION", "Streams",
    "DualAveraging", "estimate_metric",
    "ess", "rhat", "mcse", "autocorrelation", "ebfmi", "demos",
    "log_density_grid", "choose_limits", "resolve_coords",
    "divergence_ranking", "DivergenceRanking",
]
