"""phaseglass's visual identity, defined once and used by every view.

Colours come from the Okabe-Ito palette, published as colour-blind safe
(M. Okabe & K. Ito, 2008, "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people"). Colour never carries
meaning alone: every role below also has its own marker shape, fill or line style,
and a label.

Roles
-----
=================  ==============================================================
leapfrog path      blue solid line, small dots at each step
start              black filled square
accepted           bluish-green filled circle
rejected           hollow circle with an orange edge
divergence         vermillion ``X`` marker on a dashed line
initial momentum   reddish-purple arrow
acceptance prob.   blue step line
reference lines    grey, dash-dot (thresholds) or dotted (ideal values)
chains             colour, line style and marker all cycle together (``chain_style``)
log-density        a light wash from white to pale blue, thin grey contour lines
heat maps          matplotlib's ``cividis`` (designed for colour-vision deficiency)
=================  ==============================================================

Nothing here changes global matplotlib state: ``dress(ax)`` styles one Axes,
``new_figure`` builds a ``matplotlib.figure.Figure`` without pyplot, and
``RC`` can be used with ``matplotlib.rc_context`` by callers who want it.
"""

from matplotlib.colors import LinearSegmentedColormap

__all__ = [
    "OKABE_ITO", "CHAIN_COLOURS", "CHAIN_LINESTYLES", "CHAIN_MARKERS", "PATH", "START",
    "ACCEPTED", "REJECTED", "UNDECIDED", "DIVERGENT", "MOMENTUM", "ACCEPT_PROB", "THRESHOLD",
    "REFERENCE", "DENSITY_CMAP", "CONTOUR", "HEAT_CMAP", "BACKGROUND", "GRID", "TEXT",
    "RC", "chain_style", "dress", "legend", "new_figure", "note", "key_handles",
]

#: The eight colours of Okabe & Ito (2008), by their published names.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
_C = OKABE_ITO

# Vermillion is kept for divergences and yellow is too faint on a light background,
# so chains cycle through the other six.
CHAIN_COLOURS = (_C["blue"], _C["orange"], _C["bluish_green"], _C["reddish_purple"],
                 _C["sky_blue"], _C["black"])
CHAIN_LINESTYLES = ("-", "--", ":", "-.")
CHAIN_MARKERS = ("o", "s", "^", "D", "v", "P", "*", "h")

BACKGROUND = "#FAFAF6"
GRID = "#E2E2DC"
TEXT = "#222222"

# Each role is a dict of Line2D keyword arguments.
PATH = dict(color=_C["blue"], linestyle="-", linewidth=1.4, marker="o", markersize=2.5)
START = dict(color=_C["black"], marker="s", markersize=7, linestyle="none",
             markerfacecolor=_C["black"], markeredgecolor=_C["black"])
ACCEPTED = dict(color=_C["bluish_green"], marker="o", linestyle="none",
                markerfacecolor=_C["bluish_green"], markeredgecolor=_C["bluish_green"])
REJECTED = dict(color=_C["orange"], marker="o", linestyle="none", markerfacecolor="none",
                markeredgecolor=_C["orange"], markeredgewidth=1.4)
UNDECIDED = dict(color="#777777", marker="o", linestyle="none", markerfacecolor="#BBBBBB",
                 markeredgecolor="#555555")
DIVERGENT = dict(color=_C["vermillion"], marker="X", linestyle="--", linewidth=1.6,
                 markersize=9, markerfacecolor=_C["vermillion"], markeredgecolor="white",
                 markeredgewidth=0.6)
MOMENTUM = dict(color=_C["reddish_purple"])
ACCEPT_PROB = dict(color=_C["blue"], linestyle="-", linewidth=1.0, drawstyle="steps-mid")
THRESHOLD = dict(color="#666666", linestyle="-.", linewidth=1.1)
REFERENCE = dict(color="#888888", linestyle=":", linewidth=1.1)
CONTOUR = dict(colors="#7D8A96", linewidths=0.8)

#: Light wash for log-density backgrounds (white to a pale tint of sky blue).
DENSITY_CMAP = LinearSegmentedColormap.from_list(
    "phaseglass_wash", ["#FFFFFF", "#E4F2FB", "#B9DDF3"])
#: Sequential map for heat maps: matplotlib's cividis, made for colour-vision deficiency.
HEAT_CMAP = "cividis"

#: rcParams for callers that build figures (``matplotlib.rc_context(RC)``).
RC = {
    "figure.facecolor": "white",
    "axes.facecolor": BACKGROUND,
    "axes.edgecolor": "#888888",
    "axes.grid": True,
    "grid.color": GRID,
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "legend.framealpha": 0.9,
    "font.size": 9,
    "text.color": TEXT,
    "axes.labelcolor": TEXT,
}


def chain_style(i, *, markers=False):
    """Line2D keywords for chain ``i``: colour, line style (and marker) cycle together.

    Parameters
    ----------
    i : int
    markers : bool
        Include a marker shape (for points rather than lines).

    Returns
    -------
    dict
    """
    style = dict(color=CHAIN_COLOURS[i % len(CHAIN_COLOURS)],
                 linestyle=CHAIN_LINESTYLES[i % len(CHAIN_LINESTYLES)])
    if markers:
        style["marker"] = CHAIN_MARKERS[i % len(CHAIN_MARKERS)]
    return style


def dress(ax):
    """Give one Axes our light background, light grid and quiet frame (idempotent)."""
    ax.set_facecolor(BACKGROUND)
    ax.grid(True, color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color("#888888")
    ax.tick_params(labelsize=8, colors="#444444")
    return ax


def note(ax, text, *, loc="upper left"):
    """A small boxed text in a corner of ``ax`` (axes coordinates); returns the Text."""
    x, ha = (0.02, "left") if "left" in loc else (0.98, "right")
    y, va = (0.97, "top") if "upper" in loc else (0.03, "bottom")
    return ax.text(x, y, text, transform=ax.transAxes, ha=ha, va=va, fontsize=8, color=TEXT,
                   bbox=dict(boxstyle="round,pad=0.3", facecolor="white", edgecolor=GRID,
                             alpha=0.9), zorder=6)


def new_figure(width=6.0, height=4.0, *, dpi=100):
    """A ``matplotlib.figure.Figure`` (no pyplot state) with constrained layout."""
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), dpi=dpi, facecolor="white", layout="constrained")


def _arrow_key(legend, orig_handle, xdescent, ydescent, width, height, fontsize):
    from matplotlib.patches import FancyArrow

    return FancyArrow(0, 0.5 * height, width, 0, width=0.12 * height, head_width=0.7 * height,
                      head_length=0.35 * width, length_includes_head=True,
                      color=orig_handle.get_edgecolor())


def legend(ax, *, loc="best", also=(), **kwargs):
    """Legend of ``ax`` in our style; arrows (initial momentum) get an arrow key.

    Only artists with a label not starting with ``_`` appear, as usual.
    ``also`` lists more Axes (a twin) whose labelled artists join the legend.
    """
    from matplotlib.legend_handler import HandlerPatch
    from matplotlib.patches import FancyArrowPatch

    if also and "handles" not in kwargs:
        handles, labels = ax.get_legend_handles_labels()
        for other in also:
            if other is not None:
                h, lab = other.get_legend_handles_labels()
                handles, labels = handles + h, labels + lab
        kwargs["handles"], kwargs["labels"] = handles, labels

    handler_map = {FancyArrowPatch: HandlerPatch(patch_func=_arrow_key)}
    handler_map.update(kwargs.pop("handler_map", {}))
    kwargs.setdefault("fontsize", 8)
    kwargs.setdefault("framealpha", 0.9)
    kwargs.setdefault("edgecolor", GRID)
    return ax.legend(loc=loc, handler_map=handler_map, **kwargs)


def key_handles(*roles):
    """Stand-in legend handles for roles, e.g. ``key_handles("accepted", "rejected", "divergent")``.

    For legends that must explain markers whose style changes from frame to frame.
    """
    from matplotlib.lines import Line2D

    table = {
        "accepted": (ACCEPTED, "end (accepted)"),
        "rejected": (REJECTED, "end (rejected)"),
        "divergent": ({**DIVERGENT, "linestyle": "--"}, "divergent step"),
        "start": (START, "start"),
        "path": (PATH, "leapfrog path"),
    }
    out = []
    for r in roles:
        if r not in table:
            raise ValueError(f"unknown role {r!r}; choose from {', '.join(table)}")
        kw, label = table[r]
        out.append(Line2D([], [], label=label, **kw))
    return out
