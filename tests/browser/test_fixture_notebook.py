"""Real-browser tests of the placeholder notebook (ipywidgets + ipympl only).

Run:  PHASEGLASS_BROWSER_TESTS=1 python -m pytest tests/browser -v -s
Screenshots, console logs and result JSON land in test-artefacts/browser/.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from phaseglass_browser_harness import CanvasClick, Scenario, SliderStep  # loaded by conftest.py

HERE = Path(__file__).resolve().parent

FIXTURE = Scenario(
    name="fixture",
    notebook=HERE / "fixture_notebook.ipynb",
    steps=(
        # Lab: focus the handle, ArrowRight twice (3 -> 4 -> 5).
        # Notebook 7: click the track at 85 % then 15 % (-> 9, then 2).
        SliderStep(slider_class="pg-step-size", canvas_class="pg-canvas",
                   text_classes=("pg-readout",), label="slider"),
        CanvasClick(canvas_class="pg-canvas", points=((0.3, 0.35), (0.7, 0.65)),
                    text_classes=("pg-click-readout",), label="click"),
    ),
    copy_whole_folder=False,  # only the notebook is needed next to itself
)


@pytest.mark.browser
@pytest.mark.parametrize("ui", ["lab", "notebook"])
def test_fixture_notebook(browser_run, ui):
    res = browser_run(FIXTURE, ui)

    slider = res.step_inputs("slider")
    assert len(slider) == 2
    assert all(r.canvas_latency_ms is not None for r in slider)
    values = [int(re.fullmatch(r"step size = (\d+)", r.texts_after["pg-readout"]).group(1))
              for r in slider]
    if ui == "lab":
        assert values == [4, 5], values
    else:
        assert values[0] >= 8 and values[1] <= 3, values

    clicks = res.step_inputs("click")
    assert len(clicks) == 2
    texts = [r.texts_after["pg-click-readout"] for r in clicks]
    assert re.fullmatch(r"click 1: x=\d+\.\d\d y=-?\d+\.\d\d", texts[0]), texts
    assert texts[1].startswith("click 2: "), texts
    # the second click is right of and below the first one
    (x1, y1), (x2, y2) = (map(float, re.findall(r"-?\d+\.\d\d", t)) for t in texts)
    assert x2 > x1 and y2 < y1, texts

    assert not res.page_errors
    print("LATENCY", res.summary())
