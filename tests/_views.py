"""The start/momentum views (TrajectoryView, DoublingView) opened where their tests expect them.

Importable as ``_views`` from any test (pyproject.toml puts ``tests`` on pytest's ``pythonpath``).
"""

import numpy as np

#: The start the view tests use, inside ``REGION`` of the correlated Gaussian demo.
START = np.array([1.0, -0.5])
REGION = {"xlim": (-3.5, 3.5), "ylim": (-3.5, 3.5)}


def open_at_start(view_class, target, **kw):
    """``view_class(target, **kw)`` with ``START`` and ``REGION`` unless given.

    A given start and region skip the pilot run's region, which keeps the tests fast.
    """
    kw.setdefault("start", START)
    for k, v in REGION.items():
        kw.setdefault(k, v)
    return view_class(target, **kw)


def key_below_panels_in_column(view):
    """Check a start/momentum view's figure fits the notebook column, nothing cut off.

    The figure is at most ``COLUMN_WIDTH_IN`` wide, everything drawn (labels, titles,
    tick labels in view, the key) lies on the canvas, and the one key sits whole below
    both panels. Returns the key's labels.
    """
    from phaseglass.ui._base import COLUMN_WIDTH_IN

    width, height = view.figure.get_size_inches()
    assert width <= COLUMN_WIDTH_IN
    view.render()
    fig = view.figure
    renderer = fig.canvas.get_renderer()
    drawn = fig.get_tightbbox(renderer)  # inches
    assert drawn.x0 >= -0.01 and drawn.y0 >= -0.01
    assert drawn.x1 <= width + 0.01 and drawn.y1 <= height + 0.01
    (key,) = fig.legends  # one key below both panels, whole
    b = key.get_window_extent(renderer)
    assert b.x0 >= 0 and b.y0 >= 0 and b.x1 <= fig.bbox.x1 and b.y1 <= fig.bbox.y1
    for ax in (view._ax, view._ax_err):
        assert b.y1 <= ax.get_window_extent(renderer).y0  # below the panels, not over them
    return [t.get_text() for t in key.get_texts()]
