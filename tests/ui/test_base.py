"""What every view shares: the canvas the browser receives, the column width, knob controls."""

import base64
import io
import math

import numpy as np
import pytest
import traitlets
from PIL import Image

import phaseglass as pg
from phaseglass.ui._base import COLUMN_WIDTH_IN, View, make_canvas_figure, number, plural
from phaseglass.ui._controls import KnobControl
from phaseglass.ui._shared import GridCache, pilot, step_size_range


class _Knobs(View):
    """A minimal view with a log knob, a linear knob and an integer knob."""

    step_size = traitlets.Float(0.05, help="a log-scale knob")
    persistence = traitlets.Float(0.9, help="a linear knob")
    n_steps = traitlets.Int(10, help="an integer knob")

    @traitlets.validate("step_size")
    def _positive(self, proposal):
        if not proposal["value"] > 0:
            raise traitlets.TraitError(f"`step_size` must be > 0, got {proposal['value']}")
        return proposal["value"]


def snapped(slider, value):
    """The value a front-end log slider shows for ``value``: the nearest step of the track."""
    k = round((math.log10(value) - slider.min) / slider.step)
    return 10 ** (slider.min + k * slider.step)


@pytest.fixture
def knobs():
    view = _Knobs(figsize=(4, 3))
    controls = {
        "step_size": KnobControl(view, "step_size", low=1e-3, high=3.0, log=True,
                                 label="step size", css_class="pg-step-size"),
        "persistence": KnobControl(view, "persistence", low=0.0, high=0.99, label="persistence"),
        "n_steps": KnobControl(view, "n_steps", low=1, high=200, integer=True, label="steps"),
    }
    return view, controls


def test_slider_echo_never_rewrites_a_value_set_from_code(knobs):
    view, c = knobs
    s = c["step_size"].slider
    echo = snapped(s, 0.05)
    assert echo != 0.05  # the front end would really send back another number
    s.value = echo  # what the browser sends after placing the handle
    assert view.step_size == 0.05
    view.step_size = 0.0731
    s.value = snapped(s, 0.0731)
    assert view.step_size == 0.0731
    assert c["step_size"].box.value == 0.0731


def test_a_drag_sets_the_knob_rounded_to_three_digits(knobs):
    view, c = knobs
    s = c["step_size"].slider
    s.value = snapped(s, 0.2)  # many steps away from 0.05: a real drag
    assert view.step_size == pytest.approx(snapped(s, 0.2), rel=5e-3)
    assert view.step_size == float(f"{view.step_size:.3g}")  # three significant digits
    c["persistence"].slider.value = 0.5
    assert view.persistence == 0.5
    c["n_steps"].slider.value = 37
    assert view.n_steps == 37


def test_typed_values_are_exact_and_refused_ones_reported(knobs):
    view, c = knobs
    c["step_size"].box.value = 0.0123456
    assert view.step_size == 0.0123456
    c["step_size"].box.value = -1.0
    assert view.step_size == 0.0123456
    assert view.status.startswith("error") and "`step_size` must be > 0" in view.status
    assert c["step_size"].box.value == 0.0123456  # the box returns to the knob's value


def test_the_box_shows_six_digits_of_a_long_float(knobs):
    view, c = knobs
    view.step_size = 0.08734020764124649  # e.g. a tuned step size
    assert c["step_size"].box.value == 0.0873402
    assert view.step_size == 0.08734020764124649  # the knob keeps every digit


def test_out_of_range_values_widen_the_slider(knobs):
    view, c = knobs
    view.step_size = 20.0
    s = c["step_size"].slider
    assert s.max >= math.log10(20.0) and s.value == 20.0
    assert view.step_size == 20.0
    view.n_steps = 500
    assert c["n_steps"].slider.max >= 500


def test_set_range_keeps_the_knob(knobs):
    view, c = knobs
    c["step_size"].set_range(0.1, 1.0)  # 0.05 lies below: the range widens for it
    s = c["step_size"].slider
    assert view.step_size == 0.05 and s.min <= math.log10(0.05) and s.max == 0.0
    c["persistence"].set_range(0.5, 0.9)
    assert view.persistence == 0.9 and c["persistence"].slider.max == 0.9


def test_save_png_drops_the_background_it_captured_at_another_size(tmp_path):
    view = _Knobs(figsize=(4, 3))
    line, = view.figure.add_subplot().plot([0, 1], [0, 1])
    view.set_dynamic([line])
    view.render()
    assert view._background is not None
    view.save_png(tmp_path / "a.png", dpi=150)
    assert view._background is None  # the next repaint is a full one at the canvas's size


def test_controls_keep_css_classes_and_help(knobs):
    _, c = knobs
    k = c["step_size"]
    assert "pg-step-size" in k.slider._dom_classes
    assert "pg-step-size-value" in k.box._dom_classes
    assert k.label.value == "step size" and k.slider.tooltip == "a log-scale knob"
    assert k.slider.layout.width == "190px"  # at least 160 px of track to aim with
    k.disabled = True
    assert k.slider.disabled and k.box.disabled


def test_frames_sent_before_the_front_end_is_ready_are_pngs():
    # ipympl 0.10's send_binary, while it still syncs `_data_url`, sends the raw RGBA buffer
    # as the frame: the browser gets a "broken" image and the canvas stays 0x0. Every frame
    # we send must be a PNG (its 8-byte signature, PNG specification section 5.2).
    fig = make_canvas_figure((4.0, 3.0))
    fig.add_subplot().plot([0, 1], [1, 0])
    sent = []
    fig.canvas.send = lambda content, buffers=None: sent.append((content, buffers))
    assert fig.canvas.syncing_data_url  # no front end yet
    fig.canvas.draw()  # a draw before display, as a background thread may do
    frames = [b[0] for c, b in sent if b]
    assert frames, "the draw sent no frame"
    for frame in frames:
        assert bytes(frame[:8]) == b"\x89PNG\r\n\x1a\n"
        assert Image.open(io.BytesIO(bytes(frame))).size == (400, 300)


def test_data_url_before_the_front_end_is_a_loadable_png():
    # ipympl stores the image it would send as `_data_url` until the front end says it is
    # initialised; a bare base64 string there is loaded as a relative URL and breaks the canvas
    # (ipympl issue #472). Ours must be a complete data URL of a PNG of the figure's size.
    fig = make_canvas_figure((4.0, 3.0))
    fig.add_subplot().plot([0, 1], [1, 0])
    fig.canvas.draw()  # a draw before display, as a background thread may do
    url = fig.canvas._data_url
    prefix = "data:image/png;base64,"
    assert isinstance(url, str) and url.startswith(prefix)
    img = Image.open(io.BytesIO(base64.b64decode(url[len(prefix):])))
    assert img.format == "PNG" and img.size == (400, 300)


def test_figures_are_capped_at_the_column_width():
    with pytest.raises(ValueError, match="`figsize` width must be <= 7.6"):
        make_canvas_figure((COLUMN_WIDTH_IN + 0.5, 4.0))


def test_number_and_plural():
    assert number(0.03981071705534969) == "0.03981"
    assert number(0.9500000000000002) == "0.95"
    assert number(1000.0) == "1000"
    assert number(float("inf")) == "\u221e"
    assert plural(1, "rejection") == "1 rejection"
    assert plural(2, "rejection") == "2 rejections"
    assert plural(0, "divergence") == "0 divergences"


def test_pilot_is_shared_and_not_counted(gaussian):
    target = pg.demos.correlated_gaussian()
    before = (target.n_density, target.n_grad)
    first = pilot(target, seed=3)
    assert (target.n_density, target.n_grad) == before
    assert pilot(target, seed=3) is first  # a second view on the model reuses the run
    assert first.ok and first.draws.shape[0] == 2 and first.initial.shape == (2, target.dim)
    # the sd of a correlated Gaussian's coordinates is sqrt(diag(cov)) (demo built with
    # known covariance); a 200-draw pilot gets it within a factor of two
    ratio = first.sd / np.sqrt(np.diag(target.cov))
    assert np.all((ratio > 0.5) & (ratio < 2.0))
    lo, hi = step_size_range(first.step_size)
    assert lo < first.step_size < hi


def test_pilot_failure_falls_back_and_says_why():
    def broken(x):
        raise RuntimeError("model not ready")

    target = pg.Target(broken, lambda x: np.zeros_like(x), dim=2)
    p = pilot(target)
    assert not p.ok and isinstance(p.error, RuntimeError)
    assert p.region((0, 1)) == ((-3.0, 3.0), (-3.0, 3.0))


def test_grid_cache_computes_once_per_region(gaussian):
    cache = GridCache(gaussian, n=20)
    through = np.zeros(gaussian.dim)
    g1 = cache.get((0, 1), through, (-2, 2), (-2, 2))
    g2 = cache.get((0, 1), through + 0.0, (-2, 2), (-2, 2))
    assert g1 is g2 and cache.evaluations == 1
    cache.get((0, 1), through, (-3, 3), (-2, 2))
    assert cache.evaluations == 2
