"""phaseglass: look inside gradient-based MCMC samplers while they run on your model.

The numerical core (``phaseglass.core``) is re-exported here. Widgets
(``TrajectoryView``, ``ChainView``, ...) are imported on first use, so
``import phaseglass`` does not import ipywidgets.
"""

from .core import *  # noqa: F401,F403
from .core import __all__ as _core_all

__version__ = "0.1.0"

_WIDGETS = ("TrajectoryView", "ChainView", "ShiftGibbsView", "DivergenceView", "TuningMap",
            "DoublingView")

__all__ = list(_core_all) + list(_WIDGETS) + ["__version__"]


def __getattr__(name):
    if name in _WIDGETS:
        from . import ui

        return getattr(ui, name)
    raise AttributeError(f"module 'phaseglass' has no attribute {name!r}")


def __dir__():
    """The public names, the lazily imported views included (for tab completion)."""
    return sorted(set(globals()) | set(__all__))
