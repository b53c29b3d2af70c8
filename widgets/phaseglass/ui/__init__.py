"""The widgets: thin ipywidgets views that hold knobs as traits, compute with the core and
update the artists created by ``phaseglass.draw`` in place."""

from .chain_view import ChainView
from .divergence_view import DivergenceView
from .gibbs_view import ShiftGibbsView
from .trajectory_view import TrajectoryView
from .tree_view import DoublingView
from .tuning_map import TuningMap

__all__ = ["TrajectoryView", "ChainView", "ShiftGibbsView", "DivergenceView", "TuningMap",
           "DoublingView"]
