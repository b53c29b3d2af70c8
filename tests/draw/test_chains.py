"""Chain-level views: artist data equals input after draw and after update, same artists reused."""

import numpy as np
import pytest
from matplotlib.figure import Figure
from numpy.testing import assert_allclose, assert_array_equal

from phaseglass.core.diagnostics import autocorrelation, ebfmi, ess
from phaseglass.draw import (chain_spread, draw_autocorrelation, draw_chain_spread,
                             draw_energy_jumps, draw_ess_per_gradient, draw_gibbs_paths,
                             draw_knob_grid, draw_pair, draw_pair_grid, draw_running_ess,
                             draw_traces, draw_uniform_sequence, energy_histograms,
                             rejection_runs, staircase)


def same_artists(drawing, before):
    return [id(a) for a in drawing.artists] == before


def ids(drawing):
    return [id(a) for a in drawing.artists]


# ----------------------------------------------------------------- uniforms

def test_uniform_sequence_marks_rejections_hollow(ax):
    u = np.array([0.1, 0.9, 0.95, 0.2, 0.97, 0.3])
    acc = np.array([True, False, False, True, False, True])
    prob = np.array([1.0, 0.5, 0.6, 1.0, 0.4, 0.9])
    d = draw_uniform_sequence(ax, u, acc, prob, first=10)
    it = 10 + np.arange(6)
    assert_allclose(d.accepted.get_xydata(), np.c_[it[acc], u[acc]])
    assert_allclose(d.rejected.get_xydata(), np.c_[it[~acc], u[~acc]])
    assert_allclose(d.accept_prob.get_xydata(), np.c_[it, prob])
    assert_allclose(d.trail.get_ydata(), u)
    assert d.rejected.get_markerfacecolor() == "none"
    assert d.accepted.get_markerfacecolor() != "none"
    assert d.summary.get_text() == "3 of 6 rejected: 2 runs, longest 2"
    before = ids(d)
    d.update(u[:3], acc[:3])
    assert same_artists(d, before)
    assert_allclose(d.rejected.get_ydata(), [0.9, 0.95])
    assert len(d.accept_prob.get_xdata()) == 0
    assert d.summary.get_text() == "2 of 3 rejected: 1 run, longest 2"
    d.update(u[:2], np.array([False, True]))
    assert d.summary.get_text() == "1 of 2 rejected: 1 run, longest 1"  # never "1 runs"
    d.update(u[:2], np.array([True, True]))
    assert d.summary.get_text() == "none of 2 rejected"


def test_rejection_runs_and_input_checks(ax):
    assert_array_equal(rejection_runs([True, False, False, True, False]), [2, 1])
    assert rejection_runs([]).size == 0
    with pytest.raises(ValueError, match="accepted"):
        draw_uniform_sequence(ax, np.zeros(3), np.zeros(4, dtype=bool))
    with pytest.raises(ValueError, match="one chain"):
        draw_uniform_sequence(ax, np.zeros((2, 3)), np.zeros((2, 3), dtype=bool))


def test_uniform_sequence_from_a_drifting_run(ax, funnel_run):
    import phaseglass as pg

    run = pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.6, 3, uniform="drifting"),
                    n_draws=60, n_chains=1, seed=2, warmup=0)
    d = draw_uniform_sequence(ax, run.u[0], run.accepted[0], run.accept_prob[0])
    n_rej = int((~run.accepted[0]).sum())
    assert len(d.rejected.get_xdata()) == n_rej


# ----------------------------------------------------------------- traces

def test_traces_one_line_per_chain_and_divergences(ax, funnel_run):
    run = funnel_run
    d = draw_traces(ax, run, "log_tau")
    assert len(d.lines) == run.n_chains
    for c, line in enumerate(d.lines):
        assert_allclose(line.get_ydata(), run.draws[c, :, 1])
        assert line.get_label() == f"chain {c}"
    c, t = np.nonzero(run.divergent)
    assert_allclose(d.divergent.get_ydata(), run.draws[c, t, 1])
    assert d.divergent.get_marker() == "X"
    # chains differ by line style as well as colour
    assert len({line.get_linestyle() for line in d.lines}) == run.n_chains
    before = ids(d)
    new = run.draws[:, :50] * 2.0
    d.update(new, np.zeros((run.n_chains, 50), dtype=bool), first=100)
    assert same_artists(d, before)
    assert_allclose(d.lines[0].get_xydata(), np.c_[100 + np.arange(50), new[0, :, 1]])
    assert len(d.divergent.get_xdata()) == 0
    with pytest.raises(ValueError, match="same number of chains"):
        d.update(new[:1])


def test_traces_accept_plain_arrays(ax):
    x = np.arange(12.0).reshape(2, 6)
    d = draw_traces(ax, x)
    assert_allclose(d.lines[1].get_ydata(), x[1])
    with pytest.raises(ValueError, match="coord"):
        draw_traces(ax, x, coord="nope")


# ----------------------------------------------------------------- autocorrelation

def test_autocorrelation_matches_the_core(ax, small_run):
    d = draw_autocorrelation(ax, small_run, 1, max_lag=15)
    expected = autocorrelation(small_run.draws[:, :, 1], max_lag=15)
    for line, a in zip(d.lines, expected):
        assert_allclose(line.get_xydata(), np.c_[np.arange(16), a])
    before = ids(d)
    other = np.random.default_rng(0).standard_normal((small_run.n_chains, 50, 2))
    d.update(other)
    assert same_artists(d, before)
    assert_allclose(d.lines[2].get_ydata(), autocorrelation(other[2, :, 1], max_lag=15))


# ----------------------------------------------------------------- running ESS

def test_running_ess_ends_at_the_full_bulk_ess(ax, small_run):
    d = draw_running_ess(ax, small_run, n_points=6)
    full = ess(small_run.draws, method="bulk")
    for line, e in zip(d.lines, full):
        assert line.get_xdata()[-1] == small_run.n_draws
        assert line.get_ydata()[-1] == pytest.approx(e)
        assert line.get_xdata()[0] >= 8
    k = d.lines[0].get_xdata()[1]
    assert d.lines[0].get_ydata()[1] == pytest.approx(ess(small_run.draws[:, :k, 0], method="bulk"))
    assert_allclose(d.ideal.get_ydata(), [0, small_run.n_chains * small_run.n_draws])
    assert d.threshold.get_ydata()[0] == 100 * small_run.n_chains
    before = ids(d)
    d.update(small_run.draws[:, :40])
    assert same_artists(d, before)
    assert d.lines[0].get_xdata()[-1] == 40


# ----------------------------------------------------------------- ESS per gradient

def test_ess_per_gradient_from_a_run_and_from_values(ax, small_run):
    d = draw_ess_per_gradient(ax, small_run)
    expected = ess(small_run.draws, method="bulk") / small_run.total_grad
    assert_allclose([b.get_height() for b in d.bars], expected)
    assert [t.get_text() for t in ax.get_xticklabels()] == list(small_run.names)
    before = ids(d)
    d.update([0.5, np.nan])
    assert same_artists(d, before)
    assert [b.get_height() for b in d.bars] == [0.5, 0.0]
    assert d.values[1].get_text() == "n/a"
    with pytest.raises(ValueError, match="2 values"):
        d.update([1.0])


def test_ess_per_gradient_horizontal(ax):
    d = draw_ess_per_gradient(ax, np.arange(1.0, 11.0), [f"p{i}" for i in range(10)])
    assert d.horizontal
    assert_allclose([b.get_width() for b in d.bars], np.arange(1.0, 11.0))


# ----------------------------------------------------------------- energy

def test_energy_histograms_and_ebfmi_text(ax, small_run):
    d = draw_energy_jumps(ax, small_run, bins=20)
    edges, m, t = energy_histograms(small_run.energy, 20)
    assert_allclose(d.levels.get_data().values, m)
    assert_allclose(d.levels.get_data().edges, edges)
    assert_allclose(d.jumps.get_data().values, t)
    # both are densities over the shared bins
    assert np.sum(m * np.diff(edges)) == pytest.approx(1.0)
    assert_allclose(d.ebfmi, ebfmi(small_run.energy))
    for b in d.ebfmi:
        assert f"{b:.2f}" in d.bfmi.get_text()
    # filled vs dashed outline: not colour alone
    assert d.levels.get_fill() and not d.jumps.get_fill()
    assert d.jumps.get_linestyle() == "--"
    before = ids(d)
    low = np.cumsum(np.random.default_rng(1).normal(0, 0.05, (2, 200)), axis=1)  # E-BFMI tiny
    d.update(low)
    assert same_artists(d, before)
    assert "(low)" in d.bfmi.get_text()


def test_energy_rejects_a_single_draw(ax):
    with pytest.raises(ValueError, match="energy"):
        draw_energy_jumps(ax, np.zeros((2, 1)))


# ----------------------------------------------------------------- pairs

def test_pair_highlights_divergent_draws(ax, funnel_run):
    run = funnel_run
    d = draw_pair(ax, run, ("log_tau", "apiary[0]"))
    pts = run.draws[:, :, [1, 2]].reshape(-1, 2)
    div = run.divergent.reshape(-1)
    assert_allclose(d.points.get_xydata(), pts[~div])
    assert_allclose(d.divergent.get_xydata(), pts[div])
    assert d.divergent.get_marker() == "X" and d.points.get_marker() == "o"
    assert d.divergent.get_label() == f"divergent ({div.sum()})"
    before = ids(d)
    d.update(run.draws, np.zeros_like(run.divergent))
    assert same_artists(d, before)
    assert len(d.divergent.get_xdata()) == 0
    with pytest.raises(ValueError, match="divergent"):
        d.update(run.draws, np.zeros((1, 1), dtype=bool))


def test_pair_grid_fills_a_figure(funnel_run):
    fig = Figure(figsize=(5, 5), dpi=40)
    g = draw_pair_grid(fig, funnel_run, ["mu", "log_tau", "apiary[0]"], bins=10)
    assert g.axes.shape == (3, 3)
    assert set(g.pairs) == {(1, 0), (2, 0), (2, 1)}
    assert len(g.diagonal) == 3
    assert not g.axes[1, 2].get_visible()
    assert g.pairs[(2, 1)].coords == (1, 2)  # x: log_tau, y: apiary[0]
    vals, edges = g.diagonal[1].get_data().values, g.diagonal[1].get_data().edges
    assert np.sum(vals * np.diff(edges)) == pytest.approx(1.0)
    before = [id(a) for a in g.artists]
    g.update(funnel_run.draws * 0.5, funnel_run.divergent)
    assert [id(a) for a in g.artists] == before
    assert_allclose(g.pairs[(1, 0)].points.get_xdata(),
                    0.5 * funnel_run.draws[:, :, 0].reshape(-1)[~funnel_run.divergent.reshape(-1)])


# ----------------------------------------------------------------- Gibbs

def test_staircase_and_spread():
    xy = np.array([[0.0, 0.0], [1.0, 2.0], [3.0, 1.0]])
    assert_allclose(staircase(xy), [[0, 0], [1, 0], [1, 2], [3, 2], [3, 1]])
    assert_allclose(staircase(xy, first_moves_x=False), [[0, 0], [0, 2], [1, 2], [1, 1], [3, 1]])
    x = np.array([[[0.0, 0.0], [1.0, 1.0]], [[2.0, 0.5], [1.0, 1.0]]])
    assert_allclose(chain_spread(x), [2.0, 0.0])


def _coupled_draws():
    """Invented Gibbs-like draws: three chains driven by one shared noise stream meet."""
    rng = np.random.default_rng(4)
    x = np.zeros((3, 30, 2))
    x[:, 0] = [[-2.0, 1.0], [2.0, -1.0], [0.5, 2.5]]
    for k in range(1, 30):
        x[:, k] = np.where(k > 20, 0.0, 0.6 * x[:, k - 1]) + rng.normal(size=2)
    return x


def test_gibbs_paths_draw_staircases_per_chain(ax):
    x = _coupled_draws()
    u = np.random.default_rng(0).random((3, 30, 2))  # a Gibbs Run carries u (chain, draw, dim)
    assert u.shape == x.shape
    d = draw_gibbs_paths(ax, x, last=10)
    assert len(d.paths) == 3
    for path, head, chain in zip(d.paths, d.heads, x):
        assert_allclose(path.get_xydata(), staircase(chain[-10:]))
        assert_allclose(head.get_xydata(), chain[-1:])
    assert len({h.get_marker() for h in d.heads}) == 3  # chains differ by marker shape too
    before = ids(d)
    d.update(x[:, :5])
    assert same_artists(d, before)
    assert_allclose(d.heads[0].get_xydata(), x[0, 4:5])


def test_chain_spread_marks_when_chains_meet(ax):
    x = _coupled_draws()
    d = draw_chain_spread(ax, x)
    assert_allclose(d.spread.get_ydata(), np.maximum(chain_spread(x), 1e-12))
    assert d.met.get_xdata()[0] == 21
    d.update(x[:, :10])
    assert len(d.met.get_xdata()) == 0


# ----------------------------------------------------------------- knob grid

def test_knob_grid_cells_texts_best_and_colorbar(ax):
    vals = np.array([[1.0, 2.0, 3.0], [4.0, np.nan, 0.5]])
    d = draw_knob_grid(ax, vals, [0.1, 0.2, 0.4], [5, 10], value_label="ESS", best="max")
    assert_allclose(np.ma.filled(d.image.get_array(), np.nan), vals)
    assert d.image.get_array().mask[1, 1]
    assert d.texts[0, 2].get_text() == "3"
    assert d.texts[1, 1].get_text() == "n/a"
    assert d.texts[0, 0].get_position() == (0, 0)
    assert [t.get_text() for t in ax.get_xticklabels()] == ["0.1", "0.2", "0.4"]
    # the outline (a closed square) surrounds the best cell: row 1, column 0
    assert np.mean(d.best.get_xdata()[:4]) == pytest.approx(0.0)
    assert np.mean(d.best.get_ydata()[:4]) == pytest.approx(1.0)
    assert d.colorbar is not None and d.colorbar.ax.get_ylabel() == "ESS"
    before = ids(d)
    d.update(vals[::-1] * 10)
    assert same_artists(d, before)
    assert d.texts[0, 0].get_text() == "40"
    assert d.image.get_clim() == (5.0, 40.0)
    with pytest.raises(ValueError, match="values"):
        d.update(np.zeros((3, 3)))
    with pytest.raises(ValueError, match="best"):
        draw_knob_grid(ax, vals, [1, 2, 3], [1, 2], best="top")
