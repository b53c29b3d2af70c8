"""The tour notebook in a real browser: JupyterLab and Notebook 7, Debian chromium.

Runs every cell, waits for the ipympl canvases to be painted, moves the trajectory view's
step-size slider (the canvas image and the readout must change after every input), clicks
the trajectory panel twice (the start point must move, and the canvas repaint), presses the
chain view's step button twice (one more transition each time, canvas repainted), and prints
the latency from input to repainted canvas (a benchmark figure, not an assertion).
Screenshots land in test-artefacts/browser/. The per-view checks of the same run (canvas,
fit in the column, errors, primary control) are asserted in test_notebooks_in_browser.py.
"""

from __future__ import annotations

import re

import pytest

# loaded by conftest.py; the same run of the tour also serves test_notebooks_in_browser.py
from phaseglass_browser_scenarios import TOUR, run_budget_s

_NUMBER = r"-?\d+(?:\.\d+)?(?:e[-+]?\d+)?"


@pytest.mark.browser
@pytest.mark.parametrize("ui", ["lab", "notebook"])
def test_tour_notebook(browser_run, ui):
    res = browser_run(TOUR, ui, timeout_s=run_budget_s(TOUR))

    slider = res.step_inputs("slider")
    assert len(slider) == 2
    sizes = []
    for rec in slider:
        assert rec.canvas_latency_ms is not None, "canvas did not repaint after the slider moved"
        m = re.search(r"step size (" + _NUMBER + ")", rec.texts_after["pg-readout"])
        assert m, rec.texts_after
        sizes.append(float(m.group(1)))
    before = float(re.search(r"step size (" + _NUMBER + ")", slider[0].texts_before["pg-readout"]).group(1))
    if ui == "lab":  # two ArrowRight presses: the step size grows each time
        assert before < sizes[0] < sizes[1], (before, sizes)
    else:  # track clicks at 85 % then 15 %: large, then small
        assert sizes[0] > before > sizes[1], (before, sizes)

    clicks = res.step_inputs("click")
    assert len(clicks) == 2
    starts = []
    for rec in clicks:
        m = re.search(r"start moved to \((" + _NUMBER + r"), (" + _NUMBER + r")\)",
                      rec.texts_after["pg-click-readout"])
        assert m, rec.texts_after
        starts.append((float(m.group(1)), float(m.group(2))))
        assert rec.canvas_latency_ms is not None
    # the second click is right of and below the first one: so is the start point
    assert starts[1][0] > starts[0][0] and starts[1][1] < starts[0][1], starts

    steps = res.step_inputs("chain-step")
    assert len(steps) == 2
    counts = [int(re.search(r"(\d+) transitions [x×]", r.texts_after["pg-chain-readout"]).group(1))
              for r in steps]
    first = int(re.search(r"(\d+) transitions [x×]", steps[0].texts_before["pg-chain-readout"]).group(1))
    assert counts == [first + 1, first + 2], (first, counts)
    assert all(r.canvas_latency_ms is not None for r in steps)

    assert not res.page_errors, res.page_errors
    print("LATENCY", res.summary())
