"""Preview drawings (a chain's next transition and its next u): artists equal their data."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

import phaseglass as pg
from phaseglass.draw import style
from phaseglass.draw.chains import draw_next_transition
from phaseglass.draw.uniforms import draw_next_decision


def test_next_transition_follows_the_trajectory(ax, smooth_traj):
    d = draw_next_transition(ax, smooth_traj, accepted=True)
    assert_allclose(d.path.get_xydata(), smooth_traj.positions)
    assert_allclose(d.end.get_xydata(), smooth_traj.positions[-1:])
    assert d.end.get_marker() == "D"  # never a circle: not to be read as a recorded end
    assert d.end.get_markerfacecolor() == style.ACCEPTED["color"]
    assert d.path.get_linestyle() != "-"  # dashed, unlike a recorded path
    assert d.path.get_label() == "next transition (preview)"
    before = [id(a) for a in d.artists]
    d.update(smooth_traj, accepted=False)
    assert [id(a) for a in d.artists] == before
    assert d.end.get_markerfacecolor() == "none"
    d.update(None)
    assert len(d.path.get_xydata()) == 0 and len(d.end.get_xydata()) == 0


def test_next_transition_divergent_and_points(ax, divergent_traj):
    d = draw_next_transition(ax, divergent_traj, accepted=False)
    k = divergent_traj.divergence_step
    assert_allclose(d.path.get_xydata(), divergent_traj.positions[:k])
    assert_allclose(d.divergent.get_xydata()[0], divergent_traj.positions[k - 1])
    assert len(d.end.get_xydata()) == 0  # a divergent transition proposes nothing
    # a move without a trajectory: start and proposal, coordinates picked from dim 3
    pts = np.array([[0.0, 1.0, 2.0], [0.5, -1.0, 3.0]])
    d2 = draw_next_transition(ax, pts, accepted=None, coords=(2, 0))
    assert_allclose(d2.path.get_xydata(), pts[:, [2, 0]])
    assert_allclose(d2.end.get_xydata(), [[3.0, 0.5]])
    with pytest.raises(ValueError, match="transition"):
        d2.update(np.zeros((1, 3)))


def test_next_transition_by_name_and_batch(ax):
    target = pg.demos.correlated_gaussian()
    s = pg.Sampler(target, pg.HMC(0.2, 5), n_chains=2, seed=1)
    s.step(record=True)
    batch = s.last_trajectory
    d = draw_next_transition(ax, batch, chain=1, coords=(target.names[1], target.names[0]),
                             names=target.names)
    assert_allclose(d.path.get_xydata(), batch.positions[1][:, [1, 0]])


def test_next_decision_marks_u_and_the_acceptance_probability(ax):
    d = draw_next_decision(ax, 12, 0.7, False, 0.4)
    assert_allclose(d.u.get_xydata(), [[12, 0.7]])
    assert d.u.get_markerfacecolor() == "none"  # would reject: hollow, like a rejection
    assert_allclose(d.accept_prob.get_xydata(), [[11.5, 0.4], [12.5, 0.4]])
    d.update(13, 0.1, True, None)
    assert_allclose(d.u.get_xydata(), [[13, 0.1]])
    assert d.u.get_markerfacecolor() == style.ACCEPTED["color"]
    assert len(d.accept_prob.get_xydata()) == 0
    d.update(None)
    assert len(d.u.get_xydata()) == 0 and d.draw is None
    with pytest.raises(ValueError, match="`u`"):
        d.update(3, 1.5, True)


def test_previews_change_pixels(pixels):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3, 3), dpi=50)
    ax = fig.add_subplot()
    ax.set_xlim(-1, 1)
    ax.set_ylim(-1, 1)
    d = draw_next_transition(ax, coords=(0, 1))
    d.autoscale = False
    empty = pixels(fig)
    d.update(np.array([[-0.5, -0.5], [0.5, 0.5]]), accepted=True)
    assert np.any(pixels(fig) != empty)
