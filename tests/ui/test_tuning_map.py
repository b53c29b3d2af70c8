"""TuningMap driven headless: small grids of short runs, synchronous and in the background."""

import json
import threading

import numpy as np
import pytest
import traitlets
from PIL import Image

import phaseglass as pg
from phaseglass.core.run import CAUTION
from phaseglass.ui import tuning_map
from phaseglass.ui.tuning_map import QUANTITIES, TuningMap

STEP_SIZES = [0.05, 0.3, 0.9]  # the Gaussian's stability limit 2 sigma_min is 0.632
N_STEPS = [1, 5, 20]
SMALL = {"step_sizes": STEP_SIZES, "n_steps": N_STEPS, "n_draws": 60, "n_chains": 2,
         "burn_in": 10, "seed": 2}


def small_map(target, **kw):
    return TuningMap(target, **{**SMALL, "autorun": False, **kw})


@pytest.fixture(scope="module")
def computed(gaussian):
    """A 3 x 3 map computed synchronously (shared; tests restore what they change)."""
    return small_map(gaussian).compute(background=False)


def same(a, b):
    return all(np.array_equal(a[q], b[q], equal_nan=True) for q in QUANTITIES)


def test_values_have_one_cell_per_knob_pair(computed):
    assert computed.step_sizes == STEP_SIZES and computed.n_steps == N_STEPS
    assert set(computed.values) == set(QUANTITIES)
    for q, v in computed.values.items():
        assert v.shape == (len(N_STEPS), len(STEP_SIZES)), q
        assert np.all(np.isfinite(v)), q
    assert computed.values_all["acceptance"].shape == (1, 3, 3)
    assert computed.n_done == computed.n_cells == 9 and not computed.running
    acc, div = computed.values["acceptance"], computed.values["divergence rate"]
    assert np.all((acc >= 0) & (acc <= 1)) and np.all((div >= 0) & (div <= 1))
    assert np.all(computed.values["ESS per gradient"] >= 0)
    assert computed.status == ""


def test_acceptance_falls_as_the_step_size_grows_with_one_step(computed):
    # For one leapfrog step on a Gaussian the energy error grows with the step size
    # (it is O(eps^3) per step and explodes past the stability limit), so the
    # acceptance probability falls (Neal 2011, "MCMC using Hamiltonian dynamics",
    # Handbook of MCMC, ch. 5, sections on the leapfrog's energy error and stepsize).
    row = computed.values["acceptance"][N_STEPS.index(1)]
    assert np.all(np.diff(row) < 0), row
    assert row[0] > 0.99 and row[-1] < 0.5


def test_divergences_beyond_the_stability_limit(computed, sigma_min):
    # Leapfrog is stable on a Gaussian only for eps < 2 sigma along every direction
    # (Neal 2011, Handbook of MCMC, ch. 5, the "What stepsize?" discussion). Beyond it the
    # error grows geometrically, past max_energy_error within a few steps; a
    # single step cannot get there, so only rows with several steps are checked.
    limit = 2.0 * sigma_min
    div = computed.values["divergence rate"]
    for i, n in enumerate(N_STEPS):
        for j, eps in enumerate(STEP_SIZES):
            if eps > limit and n >= 5:
                assert div[i, j] >= 0.95, (n, eps)
            elif eps < limit:
                assert div[i, j] == 0.0, (n, eps)
    assert computed.values["ESS per gradient"][1:, 2].max() == 0.0  # stuck chains


def test_background_gives_the_numbers_of_a_synchronous_run(gaussian, computed):
    m = small_map(gaussian)
    m.compute()  # background
    assert m.wait(60)
    assert not m.running and m.n_done == 9
    assert same(m.values, computed.values)
    assert m._progress.value == m._progress.max == 9
    assert m._stop_button.disabled and not m._run_button.disabled
    assert m.status == ""


def test_autorun_starts_in_the_background(gaussian, computed):
    m = TuningMap(gaussian, **SMALL)  # autorun=True by default
    assert m.wait(60)
    assert same(m.values, computed.values)


def test_stop_abandons_the_current_cell_and_leaves_every_cell_blank(gaussian, computed):
    gate, inside = threading.Event(), threading.Event()
    blocking = {"on": False}

    def value_and_grad(x):
        if blocking["on"]:
            inside.set()
            gate.wait(30)
        return gaussian.value_and_grad(x)

    target = pg.Target(lambda x: value_and_grad(x)[0], dim=2, vectorized=True,
                       value_and_grad=value_and_grad)
    m = small_map(target)
    m._pilot()  # as in `computed`; done here so the worker blocks in the first cell
    blocking["on"] = True
    m.compute()
    assert inside.wait(30)  # the worker is inside cell (0, 0)
    assert m.running
    m.stop()
    blocking["on"] = False
    gate.set()
    assert m.wait(60) and not m.running
    # the stop is honoured at the next transition: cell (0, 0) is abandoned, none is done
    done = np.isfinite(m.values["acceptance"])
    assert done.sum() == 0
    assert m.n_done == 0 and m._progress.value == 0
    assert "0/9" in m._readout.value
    # resuming computes only the missing cells and gives the same map as one pass
    m.compute(background=False, resume=True)
    assert same(m.values, computed.values)


def test_heat_map_shows_the_values_and_recolours_without_recomputing(computed, monkeypatch):
    def no_computing(*args, **kwargs):
        raise AssertionError("a recolour must not recompute")

    monkeypatch.setattr(tuning_map, "measure_cell", no_computing)
    d = computed._drawing
    try:
        for q in QUANTITIES:
            computed.quantity = q
            shown = np.ma.filled(np.ma.asarray(d.image.get_array(), dtype=float), np.nan)
            assert np.array_equal(shown, computed.values[q], equal_nan=True)
            assert d.colorbar.ax.get_ylabel().startswith(q)
            i, j, value = computed.best_cell()
            assert computed.values[q][i, j] == value
            outline = d.best.get_xydata()
            assert np.allclose(outline.mean(axis=0)[::-1], [i, j], atol=0.1)
            assert d.texts[i, j].get_text() == tuning_map._FORMATS[q].format(value)
            assert q in computed._readout.value
        # the control and the trait are linked
        computed._quantity_pick.value = "divergence rate"
        assert computed.quantity == "divergence rate"
    finally:
        computed.quantity = "acceptance"
    assert computed.n_done == 9 and computed.status == ""


def test_best_cells_follow_their_rules(computed):
    v = computed.values
    i, j, value = computed.best_cell("ESS per gradient")
    assert value == np.nanmax(v["ESS per gradient"])
    i, j, value = computed.best_cell("acceptance")
    assert abs(value - 0.8) == np.min(np.abs(v["acceptance"] - 0.8))
    i, j, value = computed.best_cell("divergence rate")
    assert value == 0.0
    zero = v["divergence rate"] == 0.0
    assert v["ESS per gradient"][i, j] == v["ESS per gradient"][zero].max()  # ties: ESS decides


def test_readout_counts_cells_names_the_best_and_cautions(computed):
    assert "pg-tuning-readout" in computed._readout._dom_classes
    text = computed._readout.value
    assert "9/9</b> cells done" in text
    i, j, _ = computed.best_cell()
    assert f"step size {STEP_SIZES[j]:.3g}, {N_STEPS[i]} leapfrog steps" in text
    assert "noisy" in text and "short run" in text
    assert CAUTION in text


def test_clicking_a_cell_opens_a_trajectory_view(computed, fire):
    computed.render()
    fire(computed.figure, computed._ax, "button_press_event", 1.1, 1.9)  # column 1, row 2
    view = computed.opened
    assert isinstance(view, pg.TrajectoryView)
    assert view.step_size == STEP_SIZES[1] and view.n_steps == N_STEPS[2]
    assert view.trajectory.step_size == STEP_SIZES[1]
    assert computed._slot.children[-1] is view
    assert "step size 0.3, 20 leapfrog steps" in computed._slot.children[0].value
    again = computed.open_cell(0, 2)
    assert (again.step_size, again.n_steps) == (STEP_SIZES[2], N_STEPS[0])
    assert computed._slot.children[-1] is again
    assert computed.open_cell(5, 0) is None and "outside" in computed.status
    computed.status = ""


def test_a_chain_view_opens_with_opens_chain(computed):
    computed.opens = "chain"
    try:
        view = computed.open_cell(1, 1)
    finally:
        computed.opens = "trajectory"
    assert isinstance(view, pg.ChainView)
    assert (view.step_size, view.n_steps, view.kernel_kind) == (0.3, 5, "hmc")
    assert view.kernel.jitter == 0  # the cell's own kernel: exactly its knobs
    assert view.n_chains == computed.n_chains and view.seed == computed.seed
    assert computed.n_done == 9  # opening is not a settings change


def test_settings_round_trip(computed, gaussian):
    saved = json.loads(json.dumps(computed.settings))
    assert saved["view"] == "TuningMap" and saved["step_sizes"] == STEP_SIZES
    again = TuningMap.from_settings(gaussian, saved, autorun=False)
    assert again.settings == computed.settings
    again.compute(background=False)
    assert same(again.values, computed.values)
    with pytest.raises(ValueError, match="unknown keys"):
        TuningMap.from_settings(gaussian, {**saved, "colour": "red"}, autorun=False)


def test_changing_a_setting_discards_the_results(gaussian):
    m = small_map(gaussian)
    m.compute(background=False)
    m.step_sizes = [0.1, 0.2]
    assert m.values["acceptance"].shape == (3, 2)
    assert np.all(np.isnan(m.values["acceptance"])) and m.n_done == 0
    assert m._drawing.image.get_array().shape == (3, 2)
    assert "0/6" in m._readout.value


def test_raising_log_density_lands_in_status_and_the_map_recovers(gaussian):
    broken = {"now": True}

    def value_and_grad(x):
        if broken["now"]:
            raise ZeroDivisionError("model blew up")
        return gaussian.value_and_grad(x)

    target = pg.Target(lambda x: value_and_grad(x)[0], dim=2, vectorized=True,
                       value_and_grad=value_and_grad)
    m = small_map(target)
    m.compute()  # background: the error must not vanish with the thread
    assert m.wait(60)
    assert m.status.startswith("error during cell step size")
    assert "ZeroDivisionError: model blew up" in m.status
    assert np.all(np.isnan(m.values["acceptance"])) and m.n_done == 9
    assert "9 failed" in m._readout.value
    broken["now"] = False
    m.compute(background=False, resume=True)  # retries the failed cells
    assert m.status == ""
    assert np.all(np.isfinite(m.values["acceptance"]))


def test_persistence_is_a_third_knob_shown_one_slice_at_a_time(gaussian):
    m = TuningMap(gaussian, kernel_kind="partial", step_sizes=[0.1, 0.3], n_steps=[1, 3],
                  persistence=[0.0, 0.9], n_draws=40, n_chains=2, burn_in=5, autorun=False)
    assert m._slice_pick.layout.display is None  # the slice picker is shown
    m.compute(background=False)
    assert m.values_all["acceptance"].shape == (2, 2, 2)
    assert np.all(np.isfinite(m.values_all["acceptance"]))
    assert np.array_equal(m.values["acceptance"], m.values_all["acceptance"][0])
    m._slice_pick.value = 1
    assert m.persistence_index == 1
    assert np.array_equal(m.values["acceptance"], m.values_all["acceptance"][1])
    shown = np.ma.filled(np.ma.asarray(m._drawing.image.get_array(), dtype=float), np.nan)
    assert np.array_equal(shown, m.values_all["acceptance"][1])
    assert "persistence 0.9" in m._readout.value
    assert m.open_cell(0, 0).persistence == 0.9


def test_bad_arguments_are_refused(gaussian):
    with pytest.raises(TypeError, match="must be a phaseglass Target"):
        TuningMap(lambda x: -x @ x)
    with pytest.raises(ValueError, match="`persistence` is a knob of kernel_kind 'partial'"):
        TuningMap(gaussian, persistence=[0.5], step_sizes=[0.1], autorun=False)
    with pytest.raises(ValueError, match="`kernel_kind` must be one of"):
        TuningMap(gaussian, kernel_kind="gibbs", step_sizes=[0.1], autorun=False)
    with pytest.raises(ValueError, match="no fixed leapfrog steps"):
        TuningMap(gaussian, kernel_kind="walk", n_steps=[1, 2], scales=[0.1], autorun=False)
    with pytest.raises(ValueError, match="`step_sizes` is a knob of kernel_kind"):
        TuningMap(gaussian, kernel_kind="walk", step_sizes=[0.1], autorun=False)
    with pytest.raises(traitlets.TraitError, match="`max_depths` must be a list of integers"):
        TuningMap(gaussian, kernel_kind="nuts", max_depths=[0, 3], step_sizes=[0.1],
                  autorun=False)
    with pytest.raises(traitlets.TraitError, match="`step_sizes` must be a non-empty list"):
        TuningMap(gaussian, step_sizes=[0.1, -0.2], autorun=False)
    with pytest.raises(traitlets.TraitError, match="`n_draws` must be >= 4"):
        TuningMap(gaussian, step_sizes=[0.1], n_draws=2, autorun=False)
    with pytest.warns(DeprecationWarning, match="use `quantity`"):
        m = TuningMap(gaussian, step_sizes=[0.1], n_steps=[2], metric="ESS per gradient",
                      autorun=False)
    assert m.quantity == "ESS per gradient"  # `metric=` is the former name of `quantity`


def test_save_png_writes_a_picture(computed, tmp_path, blank_fraction):
    path = computed.save_png(tmp_path / "map.png")
    img = np.asarray(Image.open(path).convert("RGB"))
    assert img.shape[0] > 100 and img.shape[1] > 100
    assert blank_fraction(img) < 0.9


def test_switching_kernel_keeps_the_knobs_consistent(gaussian):
    m = small_map(gaussian, step_sizes=[0.3, 1.0, 3.0], n_draws=40)
    with m.hold_trait_notifications():
        m.kernel_kind = "walk"  # a random walk makes one proposal per transition
        m.scales = [0.3, 1.0, 3.0]  # its columns are proposal scales, not step sizes
    assert m.n_steps == [1] and m.values["acceptance"].shape == (1, 3)
    assert m._ax.get_xlabel() == "proposal scale"
    assert m._ax.get_ylabel() == "proposals per transition"
    m.compute(background=False)
    acc = m.values["acceptance"][0]
    assert np.all(np.diff(acc) < 0)  # larger proposals are accepted less often
    assert np.all(m.values["divergence rate"] == 0)
    view = m.open_cell(0, 1)  # a random walk has no trajectory: a ChainView opens
    assert isinstance(view, pg.ChainView) and view.kernel_kind == "walk"
    assert view.scale == 1.0 and view.kernel.scale == 1.0
    m.kernel_kind = "partial"
    assert m.persistence == [0.0, 0.8, 0.95]
    assert m.values_all["acceptance"].shape == (3, 1, 3)
    assert m._slice_pick.layout.display is None


def test_shares_are_coloured_on_a_fixed_scale(gaussian):
    m = small_map(gaussian)
    m.compute(background=False)
    try:
        for q in ("acceptance", "divergence rate"):
            m.quantity = q
            assert m._drawing.image.get_clim() == (0.0, 1.0)
        m.quantity = "ESS per gradient"
        ess = m.values["ESS per gradient"]
        assert m._drawing.image.get_clim() == (ess.min(), ess.max())
    finally:
        m.quantity = "acceptance"


def test_autorun_leaves_a_loadable_image_for_the_front_end(gaussian):
    # Regression: a canvas drawn before the front end is initialised (here by the
    # background thread while the cell still runs) stored a bare base64 string as
    # `_data_url`; the front end loaded it as a broken image and the canvas stayed
    # 0x0 ("Failed to execute 'drawImage'", matplotlib/ipympl issue #472).
    import base64
    import io

    draws = []

    def lock_is_held():
        """Whether some thread holds the map's lock (asked from a fresh thread)."""
        answer = []

        def probe():
            free = m._lock.acquire(blocking=False)
            if free:
                m._lock.release()
            answer.append(not free)

        t = threading.Thread(target=probe)
        t.start()
        t.join()
        return answer[0]

    def on_draw(event):
        draws.append((threading.current_thread().name, lock_is_held()))

    m = TuningMap(gaussian, **{**SMALL, "autorun": False})
    m.figure.canvas.mpl_connect("draw_event", on_draw)
    m.autorun = True
    m.compute()  # what autorun does on construction: a background pass
    assert m.wait(60) and m.n_done == 9
    worker = [held for name, held in draws if name == "phaseglass-tuning-map"]
    assert worker and all(worker)  # the worker drew, always under the lock
    url = m.figure.canvas._data_url
    assert url is None or url.startswith("data:image/png;base64,")
    if worker:
        assert url is not None  # the worker's frame is what a late front end loads
        png = Image.open(io.BytesIO(base64.b64decode(url.split(",", 1)[1])))
        assert png.format == "PNG"
        w, h = m.figure.get_size_inches() * m.figure.dpi
        assert png.size == (round(w), round(h))


def test_a_map_built_with_autorun_has_a_valid_image_url(gaussian):
    import base64
    import io

    m = TuningMap(gaussian, **SMALL)  # autorun: the thread starts inside the constructor
    assert m.autorun
    assert m.wait(60)
    url = m.figure.canvas._data_url
    assert url is None or url.startswith("data:image/png;base64,")
    if url is not None:
        png = Image.open(io.BytesIO(base64.b64decode(url.split(",", 1)[1])))
        assert png.size == tuple(round(v) for v in m.figure.get_size_inches() * m.figure.dpi)


def test_the_quantity_toggle_is_primary_and_recolours_at_once(computed):
    assert "pg-primary" in computed._quantity_pick._dom_classes
    before = computed.render()
    try:
        computed._quantity_pick.value = "ESS per gradient"  # what a click on the toggle does
        after = computed.render()
    finally:
        computed.quantity = "acceptance"
    assert not np.array_equal(before, after)
    assert computed.n_done == 9  # recoloured, not recomputed


def test_cells_start_from_the_shared_pilot(gaussian, monkeypatch):
    from phaseglass.ui._shared import pilot

    seen = []
    real = tuning_map.measure_cell

    def spy(target, kernel, **kw):
        seen.append(kw["initial"])
        return real(target, kernel, **kw)

    monkeypatch.setattr(tuning_map, "measure_cell", spy)
    m = small_map(gaussian, step_sizes=[0.3], n_steps=[1, 5])
    m.compute(background=False)
    shared = pilot(gaussian, seed=SMALL["seed"], n_chains=SMALL["n_chains"])
    assert m._pilot() is shared
    assert len(seen) == 2 and all(np.array_equal(s, shared.initial) for s in seen)
    assert shared.initial.shape == (SMALL["n_chains"], gaussian.dim)


def test_readouts_use_words_and_short_numbers(gaussian):
    m = small_map(gaussian, step_sizes=[0.123456, 0.3], n_steps=[1], n_chains=1)
    m.compute(background=False)
    text = m._readout.value
    assert "1 leapfrog step" in text and "1 leapfrog steps" not in text
    assert "1 chain &times;" in text and "1 chains" not in text
    assert "0.123456" not in text  # at most 3 significant digits
    assert "1 chain \u00d7 60 draws per cell" in m._ax.get_title(loc="left")
    view = m.open_cell(0, 0)
    assert "step size 0.123, 1 leapfrog step" in m._slot.children[0].value
    assert view.step_size == 0.123456  # the cell's exact knob, whatever is shown


def test_the_map_fits_the_column_and_nothing_is_cut(computed):
    from phaseglass.ui._base import COLUMN_WIDTH_IN

    width, height = computed.figure.get_size_inches()
    assert width <= COLUMN_WIDTH_IN
    computed.render()
    drawn = computed.figure.get_tightbbox(computed.figure.canvas.get_renderer())
    assert drawn.x0 >= -0.01 and drawn.y0 >= -0.01
    assert drawn.x1 <= width + 0.01 and drawn.y1 <= height + 0.01


def test_stop_acts_within_one_transition_inside_a_long_cell():
    import time

    def slow(x):
        time.sleep(0.005)
        return -0.5 * float(x @ x)

    target = pg.Target(slow, lambda x: -x, dim=2)
    m = pg.TuningMap(target, step_sizes=[0.3], n_steps=[2], n_draws=100000, n_chains=1,
                     burn_in=0, autorun=False)
    m._pilot = lambda: None  # no pilot: the cell itself is what runs long
    m.compute()
    time.sleep(0.5)  # well inside the one cell (100000 transitions of ~15 ms)
    m.stop()
    assert m.wait(timeout=5.0), "stop() was not honoured inside the cell"
    assert np.isnan(m.values["acceptance"][0, 0])  # the unfinished cell stays blank


# ------------------------------------------------------------------ registry names (issue 12)

def test_kernel_keyword_still_works_for_one_release_and_names_kernel_kind(gaussian):
    with pytest.warns(DeprecationWarning, match="use `kernel_kind`"):
        m = TuningMap(gaussian, kernel="walk", step_sizes=[0.2, 0.5], n_draws=20, n_chains=1,
                      autorun=False)
    # a walk's former "step sizes" were its proposal scales: they become `scales`
    assert m.kernel_kind == "walk" and m.scales == [0.2, 0.5] and m.step_sizes == []
    saved = dict(m.settings)
    saved["kernel"] = saved.pop("kernel_kind")
    with pytest.warns(DeprecationWarning, match="`kernel_kind`"):
        again = TuningMap.from_settings(gaussian, saved, autorun=False)
    assert again.kernel_kind == "walk" and again.scales == [0.2, 0.5]


def test_nuts_maps_step_size_against_max_depth(gaussian):
    from phaseglass.core.registry import kernel_kind

    m = TuningMap(gaussian, kernel_kind="nuts", step_sizes=[0.2, 0.6], max_depths=[1, 4],
                  n_draws=30, n_chains=2, burn_in=5, autorun=False)
    assert m.n_steps == [1] and m._ax.get_ylabel() == "max tree depth"
    m.compute(background=False)
    assert m.values["acceptance"].shape == (2, 2)
    assert np.all(np.isfinite(m.values["acceptance"]))
    # a depth-1 tree is one leapfrog step per transition: far less work than depth 4
    k1, k4 = (m._cell_kernel(dict(m.settings, kernel_kind="nuts", columns=[0.2], rows=[d],
                                  slices=[None]), 0, 0, 0) for d in (1, 4))
    assert isinstance(k1, pg.NUTS) and (k1.max_depth, k4.max_depth) == (1, 4)
    assert kernel_kind("nuts").title in m._ax.get_title(loc="left")
    assert "max tree depth 4" in m._readout.value or "max tree depth 1" in m._readout.value
    view = m.open_cell(1, 0)  # NUTS has no fixed-length trajectory: a ChainView opens
    assert isinstance(view, pg.ChainView) and view.kernel_kind == "nuts"
    assert (view.kernel.step_size, view.kernel.max_depth) == (0.2, 4)
