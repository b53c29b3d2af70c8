"""The example notebooks as browser scenarios (shared by test_tour.py and
test_notebooks_in_browser.py; conftest.py loads this module as ``phaseglass_browser_scenarios``).

Every scenario runs its notebook top to bottom and checks every view on the page
(``check_views``, see harness.ViewRecord); ``view_names`` lists the views in notebook order,
and the number of views found must match it. All copy the whole example_notebooks folder, so they share one Jupyter server
(conftest.py keys servers by folder). A scenario's ``name`` identifies it: conftest.py
runs each (name, ui) once per session and hands the same result to every test that asks.
"""

from __future__ import annotations

from pathlib import Path

from phaseglass_browser_harness import ButtonClick, CanvasClick, Scenario, SliderStep

NOTEBOOKS = Path(__file__).resolve().parents[2] / "example_notebooks"

# The trajectory view is the first view in the tour, so index 0 of each class is its control.
# Click points are fractions of the whole canvas: both fall in the left (trajectory) panel.
TOUR = Scenario(
    name="tour",
    notebook=NOTEBOOKS / "tour.ipynb",
    steps=(
        SliderStep(slider_class="pg-step-size", canvas_class="pg-canvas",
                   text_classes=("pg-readout",), label="slider", index=0),
        CanvasClick(canvas_class="pg-canvas", points=((0.2, 0.3), (0.35, 0.6)),
                    text_classes=("pg-click-readout", "pg-readout"), label="click", index=0),
        # the chain view (second canvas): its step button advances every chain by one transition
        ButtonClick(button_class="pg-step", canvas_class="pg-canvas", canvas_index=1,
                    text_classes=("pg-chain-readout",), clicks=2, label="chain-step"),
    ),
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=150.0,
    check_views=True,
    view_names=("TrajectoryView", "ChainView"),
)

DIVERGENCES = Scenario(
    name="divergences",
    notebook=NOTEBOOKS / "divergences.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=240.0,  # two tuning maps and ~10 short sampling runs (~35 s headless)
    check_views=True,
    view_names=("DivergenceView-centred", "TuningMap-centred", "TuningMap-noncentred",
                "DivergenceView-noncentred"),
)

PERSISTENT_VS_HMC = Scenario(
    name="persistent_vs_hmc",
    notebook=NOTEBOOKS / "persistent_vs_hmc.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=300.0,  # 18 sampling runs + two tuning maps (~65 s headless)
    check_views=True,
    view_names=("ChainView", "TuningMap-hmc", "TuningMap-persistent"),
)

SHIFT_GIBBS = Scenario(
    name="shift_gibbs",
    notebook=NOTEBOOKS / "shift_gibbs.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=240.0,  # ~30 s headless
    check_views=True,
    view_names=("ShiftGibbsView-golden", "ShiftGibbsView-stuck", "ShiftGibbsView-ordinary",
                "ShiftGibbsView-random"),
)

YOUR_MODEL = Scenario(
    name="your_model",
    notebook=NOTEBOOKS / "your_model.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=240.0,  # ~30 s headless (report and GIF writing)
    check_views=True,
    view_names=("TrajectoryView", "ChainView"),
)

MANY_PARAMETERS = Scenario(
    name="many_parameters",
    notebook=NOTEBOOKS / "many_parameters.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=240.0,  # two 50-parameter runs (~20 s headless)
    check_views=True,
    view_names=("DivergenceView-50-parameters",),
)

TREE_DEPTH = Scenario(
    name="tree_depth",
    notebook=NOTEBOOKS / "tree_depth.ipynb",
    copy_whole_folder=True,  # one server for all the notebooks
    run_timeout_s=240.0,  # two NUTS runs (~10 s headless)
    check_views=True,
    view_names=("DoublingView-saturated", "DoublingView-with-mass-matrix"),
)

ALL = (TOUR, DIVERGENCES, PERSISTENT_VS_HMC, SHIFT_GIBBS, YOUR_MODEL, MANY_PARAMETERS, TREE_DEPTH)


def run_budget_s(scenario: Scenario) -> float:
    """Outer time limit of one browser run: loading, running, and up to ~35 s per view."""
    return scenario.run_timeout_s + 90.0 + 35.0 * len(scenario.view_names) + 20.0 * len(scenario.steps)
