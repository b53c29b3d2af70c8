"""What every phaseglass view shares: a canvas, a status line, settings, PNG export.

A view is a ``VBox`` of standard controls plus one ipympl canvas. Knobs are
traits tagged ``setting=True``; controls are tied to them with
``traitlets.link``, so setting a trait from code redraws exactly as moving
the slider does. Errors raised by user code (a log-density that throws, a
NaN gradient, bad settings) land in the status line and the view keeps working.
"""

import functools
import html
import json
import os
import tempfile
import traceback

import ipywidgets as widgets
import numpy as np
import traitlets
from matplotlib.figure import Figure

from ..core._validate import warn_renamed
from ..core.slices import resolve_coords

__all__ = ["View", "guarded", "make_canvas_figure", "check_range", "check_settings", "check_target",
           "number",
           "plural", "COLUMN_WIDTH_IN"]

#: Widest figure a view may have, in inches at 100 dpi: a notebook's output column is
#: about 800 px wide in JupyterLab with the file browser open, and the canvas toolbar
#: takes about 36 px beside the figure.
COLUMN_WIDTH_IN = 7.6
_DPI = 100


def number(value, digits=4):
    """A number as a reader wants it: ``digits`` significant digits, no float noise."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not np.isfinite(v):
        return "\u221e" if v > 0 else ("-\u221e" if v < 0 else "n/a")
    if v == int(v) and abs(v) < 10 ** digits:
        return str(int(v))
    return f"{v:.{digits}g}"


def plural(n, word, words=None):
    """``"1 rejection"``, ``"2 rejections"``."""
    n = int(n)
    return f"{n} {word if n == 1 else (words or word + 's')}"


_canvas_class = None


def _canvas_type():
    """ipympl's Canvas, fixed to send a real image before its front end is ready.

    Until the front end says it is initialised, ipympl (0.9 -- 0.10) also keeps the
    latest frame as ``_data_url``; its ``send_binary`` then rebinds the frame it
    was given to the raw RGBA buffer (to encode that URL) and sends those raw bytes
    as the "PNG" frame, as a bare base64 string without its ``data:`` prefix besides.
    A canvas drawn in that window -- before display, or by a background thread
    while its cell still runs (the front end's "initialized" message waits until
    the cell ends) -- gets a "broken" image in the browser, the next resize fails
    with "Error setting state: Failed to execute 'drawImage'" and the canvas stays
    0x0 (ipympl issue #472). Views that only ask the front end to draw never hit it;
    TuningMap's worker did. Sending the PNG frame as given fixes every view at its root.
    """
    global _canvas_class
    if _canvas_class is None:
        import io
        from base64 import b64encode

        from ipympl.backend_nbagg import Canvas
        from PIL import Image

        def png(rgba):
            with io.BytesIO() as out:
                # zlib level 1: a live view sends a frame on every knob move, and level 1
                # encodes the (mostly empty) diff frame a third faster than the default
                Image.fromarray(rgba).save(out, format="png", compress_level=1)
                return out.getvalue()

        class ColumnCanvas(Canvas):
            def get_diff_image(self):
                """matplotlib's diff frame (full on size change or transparency), fast PNG."""
                if not self._png_is_old:
                    return None
                pixels = np.asarray(self.get_renderer().buffer_rgba())
                buff = pixels.view(np.uint32).squeeze(2)  # one uint32 per pixel: one comparison
                if (self._force_full or buff.shape != self._last_buff.shape
                        or (pixels[:, :, 3] != 255).any()):  # transparency needs a full frame
                    self.set_image_mode("full")
                    output = buff
                else:
                    self.set_image_mode("diff")
                    output = np.where(buff != self._last_buff, buff, 0)
                self._last_buff = buff.copy()
                self._force_full = False
                self._png_is_old = False
                return png(output.view(np.uint8).reshape((*output.shape, 4)))

            def send_binary(self, data):
                """Send the PNG frame ``data``; before the front end is ready, keep a data URL too."""
                if self.syncing_data_url:
                    rgba = self._last_buff.view(np.uint8).reshape((*self._last_buff.shape, 4))
                    self._data_url = ("data:image/png;base64,"
                                      + b64encode(png(rgba)).decode("ascii"))
                self.send({"data": '{"type": "binary"}'}, buffers=[data])

        _canvas_class = ColumnCanvas
    return _canvas_class


def make_canvas_figure(figsize, *, css_class="pg-canvas"):
    """A matplotlib Figure on an ipympl canvas (works without a front end).

    ``figsize`` is in inches at 100 dpi; its width may not exceed ``COLUMN_WIDTH_IN``
    so the figure fits a notebook's output column instead of being clipped.
    """
    from ipympl.backend_nbagg import FigureManager

    if figsize[0] > COLUMN_WIDTH_IN + 1e-9:
        raise ValueError(f"`figsize` width must be <= {COLUMN_WIDTH_IN} in (an 800 px output "
                         f"column), got {figsize[0]}; stack the panels in rows instead")
    fig = Figure(figsize=figsize, dpi=_DPI, layout="constrained")
    canvas = _canvas_type()(fig)
    manager = FigureManager(canvas, 0)
    canvas.manager = manager
    canvas.header_visible = False
    canvas.footer_visible = False
    canvas.toolbar_visible = "fade-in-fade-out"
    canvas.toolbar_position = "right"
    canvas.resizable = False
    canvas.add_class(css_class)
    return fig


def guarded(what):
    """Decorator for observers/handlers: report exceptions in the status line, never raise.

    ``what`` names the action in the message ("redraw", "step", ...).
    """

    def wrap(fn):
        @functools.wraps(fn)
        def inner(self, *args, **kwargs):
            try:
                return fn(self, *args, **kwargs)
            except Exception as exc:  # user code can raise anything; we show it
                self.report_error(what, exc)
                return None

        return inner

    return wrap


def check_target(target, *, min_dim=1):
    """Raise a clear error unless ``target`` is a phaseglass Target with ``dim >= min_dim``."""
    from ..core.target import Target

    if not isinstance(target, Target):
        raise TypeError(
            f"`target` must be a phaseglass Target, got {type(target).__name__}; wrap your "
            "log-density with pg.Target(log_density, grad, dim=...)"
        )
    if target.dim < min_dim:
        raise ValueError(f"`target` must have dim >= {min_dim} for a {min_dim}-D view, got dim={target.dim}")
    return target


def check_settings(settings):
    """``settings`` as a new dict, or a clear error (a JSON string, a path or None are not)."""
    if isinstance(settings, (str, bytes)):
        raise TypeError("`settings` must be a dict such as view.settings; to load a saved file use "
                        "json.load(open(path)) first")
    if not isinstance(settings, dict):
        raise TypeError(f"`settings` must be a dict such as view.settings, got "
                        f"{type(settings).__name__}")
    return dict(settings)


def check_range(proposal, ranges):
    """Body of a ``@traitlets.validate`` for numeric knobs declared in one table.

    ``ranges`` maps a trait name to ``(low, high, ends)``: ``low``/``high`` may be
    None, ``ends`` is two characters from ``"[("`` and ``")]"`` saying whether
    each end is included. The error names the trait and the interval.
    """
    name = proposal["trait"].name
    low, high, ends = ranges[name]
    v = proposal["value"]
    ok = bool(np.isfinite(v))
    if low is not None:
        ok = ok and (v > low if ends[0] == "(" else v >= low)
    if high is not None:
        ok = ok and (v < high if ends[1] == ")" else v <= high)
    if ok:
        return v
    if high is None:
        need = f"be {'>' if ends[0] == '(' else '>='} {low}"
    elif low is None:
        need = f"be {'<' if ends[1] == ')' else '<='} {high}"
    else:
        need = f"lie in {ends[0]}{low}, {high}{ends[1]}"
    raise traitlets.TraitError(f"`{name}` must {need}, got {v}")


class View(widgets.VBox):
    """Base class of the phaseglass views.

    Attributes
    ----------
    figure : matplotlib.figure.Figure
        The view's figure (an ipympl canvas in a notebook; usable headless).
    status : str
        Text of the status line.
    last_error : BaseException or None
        The latest exception caught from user code.
    """

    status = traitlets.Unicode("", help="Text of the status line (plain text).")

    def __init__(self, figsize=(COLUMN_WIDTH_IN, 4), **kwargs):
        self.figure = make_canvas_figure(figsize)
        self.last_error = None
        self._status_html = widgets.HTML(layout=widgets.Layout(min_height="1.6em"))
        self._status_html.add_class("pg-status")
        super().__init__(**kwargs)
        self.add_class("pg-view")

    # ----------------------------------------------------------- coordinates
    def _coordinate_names(self):
        """Names of the coordinates a ``coords`` pair may refer to."""
        return self.target.names

    @traitlets.validate("coords")
    def _check_coords(self, proposal):
        names = self._coordinate_names()
        return resolve_coords(tuple(proposal["value"]), names, len(names))

    def _coordinate_pickers(self, names):
        """x and y pickers over ``names`` (type part of a name), tied to the ``coords`` trait.

        They are ``ui._controls.CoordinatePicker``s: usable with hundreds of names,
        an entry that picks nothing is reported in the status line. Setting
        ``coords`` from code shows the new names in them. Also makes
        ``self._swap_pick``, a button that swaps x and y.
        """
        from ._controls import CoordinatePicker

        self._x_pick = CoordinatePicker(self, names, self.coords[0], label="x",
                                        css_class="pg-pick-x")
        self._y_pick = CoordinatePicker(self, names, self.coords[1], label="y",
                                        css_class="pg-pick-y")
        self._x_pick.observe(lambda ch: self._pick_coordinate(0, ch["new"]), "value")
        self._y_pick.observe(lambda ch: self._pick_coordinate(1, ch["new"]), "value")
        self._swap_pick = widgets.Button(description="swap x, y", icon="exchange",
                                         tooltip="Show y on the x axis and x on the y axis",
                                         layout=widgets.Layout(width="auto", flex="0 0 auto"))
        self._swap_pick.add_class("pg-swap-xy")
        self._swap_pick.on_click(lambda _: self.swap_coordinates())
        self.observe(self._coordinates_to_pickers, "coords")
        return self._x_pick, self._y_pick

    def _coordinates_to_pickers(self, change):
        self._x_pick.value, self._y_pick.value = self.coords

    @guarded("coordinate change")
    def swap_coordinates(self):
        """Show the y coordinate on the x axis and the x coordinate on the y axis."""
        self._set_coordinates(tuple(self.coords)[::-1])

    @guarded("coordinate change")
    def _pick_coordinate(self, axis, index):
        c = list(self.coords)
        if c[axis] == index:
            return
        c[axis] = index
        if c[0] == c[1]:
            self.status = "x and y must be different coordinates"
            (self._x_pick if axis == 0 else self._y_pick).value = self.coords[axis]
            return
        self._set_coordinates(tuple(c))

    def _set_coordinates(self, coords):
        """Show ``coords``; views that must also change their region override this."""
        self.coords = coords

    # ---------------------------------------------------------------- status
    @traitlets.observe("status")
    def _show_status(self, change):
        text = html.escape(change["new"])
        colour = "#a33" if text.startswith("error") else "#333"
        self._status_html.value = f'<span style="font-family:monospace;color:{colour}">{text}</span>'

    def clear_status(self):
        """Clear the status line after a good update, keeping a standing problem.

        A contour grid on which the user's log-density raised at some points
        (``GridCache.problem``) stays reported until the region changes.
        """
        grids = getattr(self, "_grids", None)
        self.status = (getattr(grids, "problem", None) or "") if grids is not None else ""

    def report_error(self, what, exc):
        """Show ``exc`` in the status line (used by ``guarded``)."""
        self.last_error = exc
        where = traceback.extract_tb(exc.__traceback__)[-1] if exc.__traceback__ else None
        loc = f" ({where.name}, line {where.lineno})" if where else ""
        self.status = f"error during {what}: {type(exc).__name__}: {exc}{loc}"

    # -------------------------------------------------------------- settings
    @classmethod
    def setting_names(cls):
        return [n for n, t in cls.class_traits().items() if t.metadata.get("setting")]

    @property
    def settings(self):
        """JSON-serialisable dict of every knob (``from_settings`` restores them)."""
        out = {"view": type(self).__name__}
        for name in self.setting_names():
            value = getattr(self, name)
            if isinstance(value, np.ndarray):
                value = value.tolist()
            elif isinstance(value, tuple):
                value = list(value)
            out[name] = value
        out.update(self._extra_settings())
        json.dumps(out, allow_nan=False)  # fail loudly here rather than in the user's save step
        return out

    def _extra_settings(self):
        return {}

    #: Keys a view's settings may hold besides its knobs (e.g. how its run was sampled).
    EXTRA_SETTINGS = ()

    #: {old setting name: new name, or (new name, convert)}: saved settings with an old
    #: name are read (``convert(old value)`` when given) with a DeprecationWarning for one release.
    RENAMED_SETTINGS = {}

    @classmethod
    def checked_settings(cls, settings):
        """``settings`` as a new dict without its ``view`` key, or a clear error.

        Refuses a JSON string or None, settings saved from another view, and keys
        this view does not know (a typo is never silently ignored).
        """
        settings = check_settings(settings)
        view = settings.pop("view", cls.__name__)
        if view != cls.__name__:
            raise ValueError(f"`settings` are for a {view}, not a {cls.__name__}")
        for old, new in cls.RENAMED_SETTINGS.items():  # settings saved before a rename
            new, convert = (new, None) if isinstance(new, str) else new
            if old in settings and new not in settings:
                warn_renamed(old, new, "setting")
                value = settings.pop(old)
                settings[new] = value if convert is None else convert(value)
        known = set(cls.setting_names()) | set(cls.EXTRA_SETTINGS)
        unknown = sorted(k for k in settings if k not in known)
        if unknown:
            raise ValueError(f"`settings` has unknown keys {unknown}; known: {sorted(known)}")
        return settings

    def apply_settings(self, settings):
        """Set every known knob from ``settings`` in one batch of notifications."""
        settings = self.checked_settings(settings)
        with self.hold_trait_notifications():
            for k in self.setting_names():
                if k in settings:
                    value = settings[k]
                    current = getattr(self, k)
                    if isinstance(current, tuple) and isinstance(value, list):
                        value = tuple(value)
                    setattr(self, k, value)
        return self

    def save_settings(self, path):
        """Write ``settings`` as JSON to ``path`` (UTF-8, strict JSON, written atomically)."""
        text = json.dumps(self.settings, indent=2, allow_nan=False)
        folder = os.path.dirname(os.path.abspath(path))
        fd, tmp = tempfile.mkstemp(prefix=".settings-", suffix=".tmp", dir=folder)
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(text)
            os.replace(tmp, path)
        except BaseException:
            if os.path.exists(tmp):
                os.unlink(tmp)
            raise
        return path

    # ---------------------------------------------------------------- output
    def save_png(self, path, dpi=120):
        """Write the current figure to ``path`` as PNG."""
        self.figure.savefig(path, dpi=dpi, format="png")
        # savefig draws at its own dpi and fires draw_event: the background captured then has
        # the file's size, not the canvas's. Drop it so the next repaint is a full one.
        self._background = None
        return path

    # -------------------------------------------------------------- redraws
    def set_dynamic(self, artists):
        """Declare the artists that change on every tick; everything else is background.

        The background is captured after each full draw; ``redraw()`` then
        restores it and draws only these artists. ipympl's canvas reports
        ``supports_blit = False`` (inherited from WebAgg), but its ``blit``
        sends the renderer buffer as an ordinary image diff, so restoring a
        saved region and drawing a few artists is safe there and avoids
        re-laying out every tick label on each tick.
        """
        self._dynamic = [a for a in artists if a is not None]
        for a in self._dynamic:
            a.set_animated(True)
        self._background = None
        if getattr(self, "_draw_cid", None) is None:
            self._draw_cid = self.figure.canvas.mpl_connect("draw_event", self._after_full_draw)

    def _after_full_draw(self, event):
        canvas = self.figure.canvas
        self._background = canvas.copy_from_bbox(self.figure.bbox)
        for a in self._dynamic:
            self.figure.draw_artist(a)
        if self.figure.get_layout_engine() is not None and getattr(self, "_freeze_layout", True):
            # layout is settled after the first draw; recomputing it per tick is the slow part
            self.figure.set_layout_engine("none")

    def redraw(self, full=False):
        """Repaint: only the dynamic artists over the saved background, or everything.

        A full repaint is requested from the front end (``draw_idle``); headless,
        ``render()`` draws synchronously.
        """
        canvas = self.figure.canvas
        background = getattr(self, "_background", None)
        if full or background is None:
            self._background = None
            canvas.draw_idle()
            return
        canvas.restore_region(background)
        for a in self._dynamic:
            self.figure.draw_artist(a)
        canvas.blit(self.figure.bbox)

    def render(self):
        """Render the figure now (Agg) and return the RGBA buffer; for tests and benchmarks."""
        self.figure.canvas.draw()
        return np.asarray(self.figure.canvas.buffer_rgba()).copy()
