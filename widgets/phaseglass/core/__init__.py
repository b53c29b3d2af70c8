"""The numerical core: targets, metric, leapfrog, kernels, sampling loop, diagnostics, demos.

Pure numpy/scipy; never imports matplotlib or ipywidgets, so it works from a plain script.
"""

from . import demos
from .compare import KernelComparison, compare_kernels
from .conditionals import NormalConditional
from .diagnostics import autocorrelation, ebfmi, ess, mcse, rhat
from .frozen import freeze
from .gibbs import Gibbs
from .kernels import HMC, Kernel, PartialRefreshHMC, RandomWalk
from .leapfrog import Trajectory, leapfrog
from .metric import Metric
from .nuts import NUTS
from .registry import kernel_from_settings
from .run import Digest, Run
from .sampling import Sampler, auto_warmup, sample
from .slices import log_density_grid
from .target import GradientCheck, Target
from .triage import DivergenceRanking, divergence_ranking
from .uniforms import DriftingUniform, FreshUniform

#: What a user calls. Internals (``leapfrog_step``, ``ChainState``, ``Streams``,
#: ``resolve_coords``, ``choose_limits``, ``CAUTION``, ``DualAveraging``,
#: ``estimate_metric``) stay importable from their own modules.
__all__ = [
    "Target", "GradientCheck", "Metric", "leapfrog", "Trajectory",
    "Kernel", "HMC", "PartialRefreshHMC", "RandomWalk", "Gibbs", "NormalConditional", "freeze", "NUTS",
    "FreshUniform", "DriftingUniform", "kernel_from_settings",
    "Sampler", "sample", "auto_warmup", "Run", "Digest",
    "ess", "rhat", "mcse", "autocorrelation", "ebfmi", "demos",
    "log_density_grid",
    "divergence_ranking", "DivergenceRanking",
    "compare_kernels", "KernelComparison",
]
