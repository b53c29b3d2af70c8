"""The harness's per-view checks can fail: a notebook of deliberately defective views.

``defects_notebook.ipynb`` (plain ipywidgets + ipympl) shows six views shaped like the
phaseglass ones (a VBox with class ``pg-view`` holding one ``pg-canvas``) plus a widget
whose front-end module does not exist. Each defect must be reported by exactly the check
meant for it, and the good views must pass; otherwise test_notebooks_in_browser.py could
pass while seeing nothing.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from phaseglass_browser_harness import Scenario  # loaded by conftest.py

HERE = Path(__file__).resolve().parent

DEFECTS = Scenario(
    name="defects",
    notebook=HERE / "defects_notebook.ipynb",
    copy_whole_folder=False,
    check_views=True,
    view_names=("good", "wide", "flat", "truncated", "dropdown", "unmarked"),
)


def failed(view) -> set[str]:
    return {c for c, v in view.checks.items() if not v["ok"]}


@pytest.mark.browser
def test_view_checks_catch_defects(browser_run):
    res = browser_run(DEFECTS, "lab", timeout_s=300)
    print(res.views_report())
    views = {v.name: v for v in res.views}
    assert list(views) == list(DEFECTS.view_names), res.views_report()

    assert failed(views["good"]) == set(), views["good"].checks
    assert views["good"].primary_marked and views["good"].control.startswith("slider")

    # a 1000 px figure in an ~850 px column: its canvas is reported past the edge
    assert failed(views["wide"]) == {"fits"}, views["wide"].checks
    assert "jupyter-matplotlib" in views["wide"].checks["fits"]["detail"], views["wide"].checks["fits"]

    # a white figure, and a slider that redraws nothing
    assert failed(views["flat"]) == {"canvas", "control"}, views["flat"].checks
    assert "one colour" in views["flat"].checks["canvas"]["detail"]

    # 70 px toggle buttons, a 90 px dropdown and a 70 px number box with long text;
    # the toggle buttons work
    assert failed(views["truncated"]) == {"labels"}, views["truncated"].checks
    labels = views["truncated"].checks["labels"]["detail"]
    assert "toggle" in labels and "select" in labels and "input [28.6163" in labels, labels
    assert views["truncated"].control.startswith("toggle buttons")

    assert failed(views["dropdown"]) == set(), views["dropdown"].checks
    assert views["dropdown"].control.startswith("dropdown")

    # no pg-primary: the first slider is moved, and the record says so
    assert failed(views["unmarked"]) == set(), views["unmarked"].checks
    assert not views["unmarked"].primary_marked and "FALLBACK" in views["unmarked"].control

    # the widget without a front-end module (error widget) and the view of a missing model
    print("widget errors:", res.widget_errors)
    assert len(res.widget_errors) == 2, res.widget_errors
    assert any("Error displaying widget" in e for e in res.widget_errors), res.widget_errors
    print("console errors:", [e[:120] for e in res.console_errors])
    assert any("pg-no-such-module" in e for e in res.console_errors), res.console_errors
    assert not res.page_errors, res.page_errors
