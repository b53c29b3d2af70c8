"""The widgets: thin ipywidgets views that hold knobs as traits, compute with the core and
update the artists created by ``phaseglass.draw`` in place."""

from .chain_view import ChainView
from .trajectory_view import TrajectoryView

__all__ = ["TrajectoryView", "ChainView"]
