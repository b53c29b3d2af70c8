"""Controls: numeric knobs (a slider to aim with, a box for the exact value) and coordinate pickers.

A slider quantises: a log slider with 0.02 steps turns 0.05 into 0.0501. Linked
with ``traitlets.link``, that snapped value flows back into the knob, and the
figure, the readout and ``view.trajectory`` end up describing different numbers.
``KnobControl`` binds one trait of a view to a slider and a number box so that

* a value set from code (or typed) is kept exactly, and the slider only shows
  the nearest position it can reach (its echo from the front end is ignored);
* a drag sets the knob to the slider's position, rounded to three significant
  digits so readouts stay short; the box shows at most six significant digits
  (a 17-digit float would be cut off in it);
* a value outside the slider's range widens the range instead of being clipped;
* a refused value (the view's validator raises) lands in the view's status line
  and the controls return to the knob's value.

``CoordinatePicker`` chooses one coordinate among many (a model can have
hundreds) by typing part of its name; see its docstring for why it is a
combobox and not a dropdown.
"""

import math

import ipywidgets as widgets
import traitlets

__all__ = ["KnobControl", "CoordinatePicker", "SLIDER_WIDTH", "text_width_px"]

#: Width of a slider's track and handle area: wide enough to aim (at least 160 px).
SLIDER_WIDTH = "190px"
_STEPS_PER_TRACK = 200  # slider positions across the whole range


def _round_sig(v, digits=3):
    if v == 0 or not math.isfinite(v):
        return v
    return round(v, digits - 1 - int(math.floor(math.log10(abs(v)))))


class KnobControl(widgets.HBox):
    """A label, a slider and a number box bound to ``owner.<trait>``.

    Parameters
    ----------
    owner : View
        The view whose trait is controlled (its ``status`` shows refused values).
    trait : str
        Name of a numeric trait of ``owner``.
    low, high : float
        Slider range (widened automatically when the knob leaves it).
    log : bool
        Logarithmic slider (for scales such as the step size).
    integer : bool
        Integer knob (``IntSlider`` and ``IntText``).
    label : str
        Text before the slider; never truncated.
    css_class : str, optional
        Class of the slider (the number box gets ``<css_class>-value``), for browser tests.

    Attributes
    ----------
    slider : FloatLogSlider, FloatSlider or IntSlider
    box : FloatText or IntText
    """

    def __init__(self, owner, trait, *, low, high, log=False, integer=False, label=None,
                 css_class=None):
        self.owner = owner
        self.trait = trait
        self.logscale = bool(log)
        self.integer_knob = bool(integer)
        self._quiet = False
        help_text = owner.traits()[trait].help or ""
        value = getattr(owner, trait)
        track = widgets.Layout(width=SLIDER_WIDTH)
        if self.integer_knob:
            self.slider = widgets.IntSlider(value=int(value), min=int(low), max=int(high), step=1,
                                            readout=False, layout=track)
            self.box = widgets.IntText(value=int(value), layout=widgets.Layout(width="72px"))
        elif self.logscale:
            lo, hi = math.log10(low), math.log10(high)
            self.slider = widgets.FloatLogSlider(base=10, min=lo, max=hi,
                                                 step=(hi - lo) / _STEPS_PER_TRACK, readout=False,
                                                 layout=track)
            self.box = widgets.FloatText(value=float(value), layout=widgets.Layout(width="84px"))
        else:
            self.slider = widgets.FloatSlider(min=low, max=high, step=(high - low) / _STEPS_PER_TRACK,
                                              readout=False, layout=track)
            self.box = widgets.FloatText(value=float(value), layout=widgets.Layout(width="84px"))
        self.slider.continuous_update = True
        self.box.continuous_update = False  # commit on Enter or when the box loses focus
        self.label = widgets.Label(label if label is not None else trait,
                                   layout=widgets.Layout(flex="0 0 auto"))
        if help_text:
            for w in (self.label, self.slider, self.box):
                w.tooltip = help_text
        if css_class:
            self.slider.add_class(css_class)
            self.box.add_class(css_class + "-value")
        super().__init__([self.label, self.slider, self.box],
                         layout=widgets.Layout(align_items="center", flex="0 0 auto",
                                               margin="0 12px 0 0"))
        self.add_class("pg-knob")
        self.show(value)
        owner.observe(self._from_owner, names=trait)
        self.slider.observe(self._from_slider, names="value")
        self.box.observe(self._from_box, names="value")

    # ------------------------------------------------------------------ view
    @property
    def disabled(self):
        return self.slider.disabled

    @disabled.setter
    def disabled(self, flag):
        self.slider.disabled = self.box.disabled = bool(flag)

    def _position(self, v):
        """Slider coordinate of value ``v`` (log10 for a log slider)."""
        if self.logscale:
            return math.log10(v) if v > 0 else -math.inf
        return float(v)

    def show(self, value):
        """Move slider and box to ``value`` without touching the knob."""
        self._quiet = True
        try:
            s = self.slider
            pos = self._position(value)
            if math.isfinite(pos):  # widen the range rather than clip the knob's value
                if pos < s.min:
                    s.min = math.floor(pos) if self.logscale else pos
                if pos > s.max:
                    s.max = math.ceil(pos) if self.logscale else pos
            s.value = int(value) if self.integer_knob else float(value)
            # six significant digits fit the box; a value typed there is used exactly
            self.box.value = int(value) if self.integer_knob else _round_sig(float(value), 6)
        finally:
            self._quiet = False

    def set_range(self, low, high):
        """Give the slider a new range (the knob's value is kept; the range widens for it)."""
        self._quiet = True
        try:
            s = self.slider
            if self.logscale:
                lo, hi = math.log10(low), math.log10(high)
            else:
                lo, hi = float(low), float(high)
            if self.integer_knob:
                lo, hi = int(lo), int(hi)
            # order matters: never let min exceed max on the way
            if lo > s.max:
                s.max, s.min = hi, lo
            else:
                s.min, s.max = lo, hi
            if not self.integer_knob:
                s.step = (hi - lo) / _STEPS_PER_TRACK
        finally:
            self._quiet = False
        self.show(getattr(self.owner, self.trait))

    # -------------------------------------------------------------- bindings
    def _from_owner(self, change):
        self.show(change["new"])

    def _echo(self, v):
        """True when ``v`` is only the slider's snapped copy of the knob's value."""
        if self.integer_knob:
            return int(v) == int(getattr(self.owner, self.trait))
        current = self._position(getattr(self.owner, self.trait))
        s = self.slider
        current = min(max(current, s.min), s.max)
        return abs(self._position(v) - current) <= 0.5 * s.step + 1e-12

    def _from_slider(self, change):
        if self._quiet or self._echo(change["new"]):
            return
        v = change["new"] if self.integer_knob else _round_sig(float(change["new"]))
        self._set(v)

    def _from_box(self, change):
        if self._quiet or change["new"] == getattr(self.owner, self.trait):
            return
        self._set(change["new"])

    def _set(self, v):
        try:
            setattr(self.owner, self.trait, v)
        except traitlets.TraitError as exc:
            self.owner.status = f"error: {exc}"
            self.show(getattr(self.owner, self.trait))


# ------------------------------------------------------------------ coordinate pickers
_FONT_PX = 13  # JupyterLab's widget font size (--jp-widgets-font-size)


_ADVANCES = {}  # (size, character) -> advance width in px
_FONT = []  # the DejaVu Sans face, loaded on first use


def text_width_px(text, size=_FONT_PX):
    """Width of ``text`` in pixels at ``size`` px: the sum of its characters' advances in DejaVu Sans.

    DejaVu Sans is wider than the sans-serif faces notebooks usually show, and the
    sum leaves out kerning (which only narrows), so a box sized with it holds the
    text in any of them. Advances are measured once per character (a model's
    hundreds of names cost a dictionary look-up each).
    """
    width = 0.0
    for ch in str(text):
        key = (size, ch)
        if key not in _ADVANCES:
            if not _FONT:
                from matplotlib.font_manager import FontProperties, findfont
                from matplotlib.ft2font import FT2Font

                _FONT.append(FT2Font(findfont(FontProperties(family="DejaVu Sans"))))
            _FONT[0].set_size(size, 72)  # 72 dpi: one point is one pixel
            _ADVANCES[key] = _FONT[0].load_char(ord(ch)).linearHoriAdvance / 65536
        width += _ADVANCES[key]
    return width


#: Room a text box needs besides its text: padding, borders and the suggestion arrow
#: a browser adds to a box with a list of choices.
_BOX_CHROME_PX = 40
_PICKER_MIN_PX, _PICKER_MAX_PX = 110, 330


def box_width_px(texts, chrome=_BOX_CHROME_PX, most=_PICKER_MAX_PX):
    """Width in px of a box that shows the longest of ``texts`` whole (110 px to ``most``)."""
    need = max((text_width_px(t) for t in texts), default=0.0) + chrome
    return int(min(max(need, _PICKER_MIN_PX), most) + 0.999)


class CoordinatePicker(widgets.HBox):
    """Choose one coordinate of many by typing part of its name.

    A label and a text box with the coordinate names as suggestions (an
    ipywidgets ``Combobox``). Typing filters the suggestions in the browser;
    Enter (or leaving the box, or choosing a suggestion) commits the text, and
    the picker takes the one name it designates: a whole name, or the only name
    containing the text (case-insensitive), so ``"tau"`` picks ``log_tau`` and
    ``"site[17"`` picks ``site[17]``. Text that names no coordinate, or several,
    changes nothing: the owner's status line says why (listing the first few
    candidates) and the box shows the current name again.

    Why not a ``Dropdown``: a native select of 100+ names must be scrolled
    through. Why not ``Combobox(ensure_option=True)``: the browser then keeps
    an unknown entry to itself (the box only turns red), so the view could not
    say what went wrong; here every committed text reaches Python and is
    either used or reported.

    Parameters
    ----------
    owner : View
        Its ``status`` reports entries that pick nothing.
    names : sequence of str
        The coordinate names, in the target's order.
    value : int
        Index of the coordinate shown at first.
    label : str
        Text before the box ("x", "y"); also names the picker in messages.
    css_class : str, optional
        Class of the text box, for browser tests.

    Attributes
    ----------
    value : int
        Index in ``names`` of the chosen coordinate; setting it from code shows that
        name in the box.
    box : Combobox
    """

    value = traitlets.Int(0, help="Index (in `names`) of the chosen coordinate.")

    #: Candidates listed when an entry matches several names.
    SHOWN_CANDIDATES = 5

    def __init__(self, owner, names, value, *, label, css_class=None):
        self.owner = owner
        self.names = tuple(str(n) for n in names)
        if not self.names:
            raise ValueError("`names` must hold at least one coordinate name")
        self.axis = str(label)
        self._said = None  # the last message this picker put in the status line
        self.label = widgets.Label(self.axis, layout=widgets.Layout(flex="0 0 auto"))
        self.box = widgets.Combobox(
            value=self.names[int(value)], options=list(self.names), ensure_option=False,
            continuous_update=False, placeholder="type part of a name",
            layout=widgets.Layout(width=f"{box_width_px(self.names)}px", flex="0 0 auto"))
        self.box.tooltip = (f"{self.axis} coordinate: type part of one of the {len(self.names)} "
                            "names and press Enter, or choose a suggestion")
        if css_class:
            self.box.add_class(css_class)
        super().__init__([self.label, self.box], value=int(value),
                         layout=widgets.Layout(align_items="center", flex="0 0 auto",
                                               margin="0 12px 0 0"))
        self.add_class("pg-coordinate-picker")
        self.observe(self._show, names="value")
        self.box.observe(self._from_box, names="value")

    @traitlets.validate("value")
    def _check_value(self, proposal):
        v = int(proposal["value"])
        if not 0 <= v < len(self.names):
            raise traitlets.TraitError(f"`value` must be in range({len(self.names)}), got {v}")
        return v

    @property
    def disabled(self):
        return self.box.disabled

    @disabled.setter
    def disabled(self, flag):
        self.box.disabled = bool(flag)

    def matches(self, text):
        """Indices of the names ``text`` designates, in the target's order.

        A whole name (exactly, else ignoring case) designates itself alone;
        otherwise every name containing ``text`` (ignoring case and the spaces
        around it) is a candidate. Empty text designates nothing.
        """
        t = str(text).strip()
        if not t:
            return []
        if t in self.names:
            return [self.names.index(t)]
        low = t.lower()
        whole = [i for i, n in enumerate(self.names) if n.lower() == low]
        return whole or [i for i, n in enumerate(self.names) if low in n.lower()]

    def _show(self, change=None):
        self.box.value = self.names[self.value]

    def _from_box(self, change):
        text = change["new"]
        if text == self.names[self.value]:
            return
        found = self.matches(text)
        if len(found) == 1:
            if self._said is not None and self.owner.status == self._said:
                self.owner.clear_status()  # the complaint is answered
            self._said = None
            self.value = found[0]  # the owner's observer may still refuse it (x == y)
            self._show()  # the whole name, also when the value did not change
            return
        current = self.names[self.value]
        if not text.strip():
            why = "type part of a coordinate name"
        elif not found:
            why = f"no coordinate name contains {text.strip()!r}"
        else:
            shown = ", ".join(self.names[i] for i in found[:self.SHOWN_CANDIDATES])
            more = ", ..." if len(found) > self.SHOWN_CANDIDATES else ""
            why = (f"{text.strip()!r} is part of {len(found)} names ({shown}{more}); "
                   "type more of the one you want")
        self._said = f"{self.axis}: {why}; {self.axis} stays {current}"
        self.owner.status = self._said
        self._show()
