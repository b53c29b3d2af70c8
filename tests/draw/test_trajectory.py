"""Log-density backgrounds, leapfrog trajectories and energy errors: artist data in and after update."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

import phaseglass as pg
from phaseglass.core.slices import log_density_grid
from phaseglass.draw import (draw_energy_error, draw_log_density, draw_trajectory, one_chain,
                             style)


def _owned(drawing, ax):
    for a in drawing.artists:
        assert a.axes is ax or a.axes in ax.figure.axes


# ----------------------------------------------------------------- log-density

def test_log_density_image_holds_the_grid_and_updates_in_place(ax, gaussian):
    grid = log_density_grid(gaussian, (0, 1), xlim=(-3, 3), ylim=(-2, 2), n=40)
    d = draw_log_density(ax, grid, names=gaussian.names)
    _owned(d, ax)
    assert_allclose(d.wash.get_array(), grid[2])
    assert d.wash.get_extent() == [-3.0, 3.0, -2.0, 2.0]
    assert len(d.contours.get_segments()) >= len(d.levels)
    assert_allclose(d.levels, np.sort(grid[2].max() - np.array([0.5, 2.0, 4.5, 8.0, 12.5])))
    wash, lines = d.wash, d.contours
    other = log_density_grid(pg.demos.glaze_ridge(), (0, 1), xlim=(-1, 2), ylim=(-2, 2), n=30)
    assert d.update(other) is d
    assert d.wash is wash and d.contours is lines
    assert_allclose(d.wash.get_array(), other[2])
    assert d.wash.get_extent() == [-1.0, 2.0, -2.0, 2.0]
    assert ax.get_xlim() == (-1.0, 2.0)


def test_contour_lines_lie_on_their_levels(ax, gaussian):
    grid = log_density_grid(gaussian, (0, 1), xlim=(-4, 4), ylim=(-4, 4), n=120)
    d = draw_log_density(ax, grid, drops=(2.0,))
    (level,) = d.levels
    pts = np.concatenate(d.contours.get_segments())
    # linear interpolation on a fine grid: the log-density on the line is close to the level
    assert_allclose(gaussian.log_density(pts), level, atol=0.02)


def test_log_density_masks_non_finite_values(ax):
    X, Y = np.meshgrid(np.linspace(0, 1, 5), np.linspace(0, 1, 5))
    Z = -(X**2 + Y**2)
    Z[0, 0] = -np.inf
    Z[1, 1] = np.nan
    d = draw_log_density(ax, (X, Y, Z))
    arr = d.wash.get_array()
    assert arr.mask[0, 0] and arr.mask[1, 1] and not arr.mask[2, 2]


def test_log_density_rejects_bad_grids(ax):
    with pytest.raises(TypeError, match="grid"):
        draw_log_density(ax, None)
    with pytest.raises(ValueError, match="share one 2-D shape"):
        draw_log_density(ax, (np.zeros((3, 3)), np.zeros((3, 3)), np.zeros((3, 4))))
    X, Y = np.meshgrid(np.arange(3.0), np.arange(3.0))
    with pytest.raises(ValueError, match="drops"):
        draw_log_density(ax, (X, Y, -X), drops=(-1.0,))


# ----------------------------------------------------------------- trajectory

def test_trajectory_artists_hold_the_positions(ax, smooth_traj):
    d = draw_trajectory(ax, smooth_traj, accepted=True)
    _owned(d, ax)
    assert_allclose(d.path.get_xydata(), smooth_traj.positions)
    assert_allclose(d.start.get_xydata(), smooth_traj.positions[:1])
    assert_allclose(d.end.get_xydata(), smooth_traj.positions[-1:])
    assert len(d.divergent.get_xdata()) == 0
    # accepted: a filled marker of the accepted role
    assert d.end.get_markerfacecolor() != "none"
    assert d.end.get_label() == "end (accepted)"
    # the arrow starts at the start and reaches start + scale * p0 (its farthest vertex)
    start = smooth_traj.positions[0]
    tip = start + d.momentum_scale * smooth_traj.momenta[0]
    assert_allclose(d.momentum_ends, [start, tip])
    # the drawn arrow starts there and its shaft runs along start -> tip
    verts = d.momentum.get_path().vertices
    assert_allclose(verts[0], start, atol=1e-9)
    u, w = tip - start, verts[1] - start
    assert abs(u[0] * w[1] - u[1] * w[0]) < 1e-9 * max(np.linalg.norm(u) ** 2, 1.0)


def test_rejected_end_is_hollow(ax, smooth_traj):
    d = draw_trajectory(ax, smooth_traj, accepted=False)
    assert d.end.get_markerfacecolor() == "none"
    assert d.end.get_marker() == "o"
    assert d.end.get_label() == "end (rejected)"


def test_divergent_part_has_its_own_marker_and_line_style(ax, divergent_traj):
    tr = divergent_traj
    k = tr.divergence_step
    d = draw_trajectory(ax, tr, accepted=None)
    assert_allclose(d.path.get_xydata(), tr.positions[:k])
    assert_allclose(d.divergent.get_xydata(), tr.positions[[k - 1, k]])
    assert d.divergent.get_marker() == "X"
    assert d.divergent.get_linestyle() == "--"
    assert d.path.get_marker() != "X" and d.path.get_linestyle() != "--"
    # a divergent transition is always rejected: hollow end at the last safe step
    assert_allclose(d.end.get_xydata(), tr.positions[k - 1:k])
    assert d.end.get_markerfacecolor() == "none"
    assert d.divergent.get_label() == "divergent step"


def test_trajectory_update_reuses_artists(ax, smooth_traj, divergent_traj, gaussian):
    d = draw_trajectory(ax, divergent_traj, accepted=False)
    before = [id(a) for a in d.artists]
    d.update(smooth_traj, True)
    assert [id(a) for a in d.artists] == before
    assert_allclose(d.path.get_xydata(), smooth_traj.positions)
    assert len(d.divergent.get_xdata()) == 0
    assert d.divergent.get_label().startswith("_")
    assert d.end.get_markerfacecolor() != "none"


def test_trajectory_partial_playback(ax, smooth_traj):
    d = draw_trajectory(ax, smooth_traj, upto=4)
    assert_allclose(d.path.get_xydata(), smooth_traj.positions[:5])
    assert len(d.end.get_xdata()) == 0  # no decision before the end
    d.update(smooth_traj, True, upto=100)
    assert_allclose(d.path.get_xydata(), smooth_traj.positions)
    assert len(d.end.get_xdata()) == 1


def test_trajectory_from_a_batch_and_by_name(ax, gaussian):
    batch = pg.leapfrog(gaussian, [[0.0, 0.0], [1.0, 1.0]], [[1.0, 0.0], [0.0, -1.0]], 0.1, 5)
    d = draw_trajectory(ax, batch, chain=1, coords=("clock_2", "clock_1"), names=gaussian.names)
    assert_allclose(d.path.get_xydata(), batch.positions[1][:, [1, 0]])
    assert ax.get_xlabel() == "clock_2"
    single = one_chain(batch, 1)
    assert_allclose(single.energy_error, batch.energy_error[1])
    with pytest.raises(ValueError, match="chain"):
        one_chain(batch, 5)
    # one definition (issue 12): the drawings use the core's, as the sampler's divergence records do
    from phaseglass.core.leapfrog import one_chain as core_one_chain

    assert one_chain is core_one_chain
    with pytest.raises(TypeError, match="Trajectory"):
        draw_trajectory(ax, np.zeros((3, 2)))


def test_trajectory_from_sampler_step(ax, gaussian):
    s = pg.Sampler(gaussian, pg.HMC(0.25, 7), n_chains=2, seed=3)
    info = s.step(record=True)
    d = draw_trajectory(ax, s.last_trajectory, chain=1, accepted=bool(info["accepted"][1]))
    assert_allclose(d.path.get_xydata(), s.last_trajectory.positions[1])


# ----------------------------------------------------------------- energy error

def test_energy_error_line_threshold_and_verdict(ax, smooth_traj):
    d = draw_energy_error(ax, smooth_traj, secondary=True)
    _owned(d, ax)
    assert_allclose(d.error.get_xdata(), np.arange(smooth_traj.n_steps + 1))
    assert_allclose(d.error.get_ydata(), smooth_traj.energy_error)
    assert [t.get_ydata()[0] for t in d.thresholds] == [1000.0, -1000.0]
    assert ax.get_yscale() == "symlog"
    assert ax.get_ylim()[1] > 1000.0  # the threshold is in view
    p = min(1.0, np.exp(-smooth_traj.energy_error[-1]))
    assert f"{p:.3f}" in d.verdict.get_text()
    assert_allclose(d.accept_line.get_ydata(), np.minimum(1.0, np.exp(-smooth_traj.energy_error)))
    assert len(d.divergence.get_xdata()) == 0


def test_energy_error_marks_divergence_and_updates(ax, smooth_traj, divergent_traj):
    d = draw_energy_error(ax, smooth_traj)
    line = d.error
    d.update(divergent_traj)
    assert d.error is line
    k = divergent_traj.divergence_step
    assert_allclose(d.error.get_ydata(), divergent_traj.energy_error)
    assert d.divergence.get_xdata()[0] == k
    assert d.divergence.get_marker() == "X"
    assert "diverged at step" in d.verdict.get_text()


def test_energy_error_linear_scale_notes_off_scale_threshold(ax, smooth_traj):
    d = draw_energy_error(ax, smooth_traj, scale="linear")
    assert ax.get_yscale() == "linear"
    assert "off-scale" in d.verdict.get_text()
    with pytest.raises(ValueError, match="scale"):
        draw_energy_error(ax, smooth_traj, scale="log")


def test_legend_shows_an_arrow_for_the_momentum(ax, smooth_traj):
    d = draw_trajectory(ax, smooth_traj, accepted=True)
    leg = style.legend(ax)
    labels = [t.get_text() for t in leg.get_texts()]
    assert "initial momentum" in labels and "end (accepted)" in labels
    assert "divergent step" not in labels  # nothing diverged
    assert d.momentum.get_label() == "initial momentum"


def test_momentum_arrow_follows_the_metric(ax, gaussian):
    metric = pg.Metric([4.0, 0.25])
    tr = pg.leapfrog(gaussian, [0.0, 0.0], [1.0, 1.0], 0.05, 4, metric=metric)
    d = draw_trajectory(ax, tr, metric=metric, momentum_scale=1.0)
    assert_allclose(d.momentum_ends[1], [4.0, 0.25])  # M^-1 p0: where the path starts to go
    first_step = tr.positions[1] - tr.positions[0]
    cos = first_step @ d.momentum_ends[1] / np.linalg.norm(first_step) / np.linalg.norm(d.momentum_ends[1])
    assert cos > 0.99


def test_artists_exclude_the_axes_and_remove_takes_them_off(ax, smooth_traj):
    d = draw_trajectory(ax, smooth_traj, accepted=True)
    e = draw_energy_error(ax.figure.add_subplot(2, 1, 2), smooth_traj, secondary=True)
    assert ax not in d.artists and e.twin not in e.artists and e.accept_line in e.artists
    assert len(d.artists) == 5
    d.remove()
    assert not ax.lines and not ax.patches
    assert ax in ax.figure.axes


# ------------------------------------------------------- legible and inside the Axes

def _figure(width, height, dpi=100):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _colour_pixels(fig, colour, tol=40):
    """Pixels of ``fig`` (rendered now) within ``tol`` of ``colour``: boolean mask, row 0 on top."""
    from matplotlib.colors import to_rgb

    fig.canvas.draw()
    img = np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(float)
    return np.all(np.abs(img - 255 * np.array(to_rgb(colour))) < tol, axis=-1)


@pytest.mark.parametrize("size", [(3.0, 2.2), (3.8, 3.2), (3.8, 6.0)])
def test_energy_error_tick_labels_never_overlap(smooth_traj, size):
    fig = _figure(*size)
    ax = fig.add_subplot()
    draw_energy_error(ax, smooth_traj)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    labels = [t for t in ax.get_yticklabels() if t.get_visible() and t.get_text()]
    boxes = sorted((t.get_window_extent(renderer) for t in labels), key=lambda b: b.y0)
    for low, high in zip(boxes, boxes[1:]):
        assert high.y0 >= low.y1, [t.get_text() for t in labels]
    values = set(ax.get_yticks())
    assert {0.0, 1000.0, -1000.0} <= values  # zero and +-max_energy_error always
    assert all(t.get_text().lstrip("\u2212").isdigit() for t in labels)  # plain numbers


def test_energy_error_ticks_follow_the_room_there_is(smooth_traj):
    counts = []
    for height in (2.2, 8.0):
        fig = _figure(3.8, height)
        ax = fig.add_subplot()
        draw_energy_error(ax, smooth_traj)
        fig.canvas.draw()
        counts.append(len(ax.get_yticks()))
    assert counts[1] > counts[0]  # a tall axis labels the decades in between


def test_off_scale_divergence_marker_is_drawn_whole(divergent_traj):
    colour = style.OKABE_ITO["vermillion"]
    fig = _figure(3.8, 3.0)
    ax = fig.add_subplot()
    d = draw_energy_error(ax, divergent_traj)
    k = divergent_traj.divergence_step
    assert d.divergence.get_xdata()[0] == k
    off_scale = _colour_pixels(fig, colour)  # its value is near the top of the scale
    # every pixel of the X lies inside the Axes, and it is as big as an X in mid-air
    h = off_scale.shape[0]
    rows, cols = np.nonzero(off_scale)
    b = ax.bbox
    assert np.all((cols >= b.x0 - 1) & (cols <= b.x1 + 1))
    assert np.all((h - rows >= b.y0 - 1) & (h - rows <= b.y1 + 1))
    d.divergence.set_data([k], [0.5])
    in_view = _colour_pixels(fig, colour)
    assert in_view.sum() > 20
    assert off_scale.sum() >= 0.95 * in_view.sum()
    # the drawn position is at the edge of the frame, the data keep the true value
    d.divergence.set_data([k], [1e9])
    fig.canvas.draw()
    shown = ax.transData.transform(d.divergence.shown_xydata)[0]
    assert b.y1 - 20 < shown[1] < b.y1
    assert d.divergence.get_ydata()[0] == 1e9


def test_divergent_step_out_of_view_ends_on_the_frame(divergent_traj):
    tr = divergent_traj
    k = tr.divergence_step
    fig = _figure(3.8, 3.0)
    ax = fig.add_subplot()
    d = draw_trajectory(ax, tr)
    x0, y0 = tr.positions[k - 1]
    ax.set_xlim(x0 - 0.01, x0 + 0.01)  # the blow-up leaves this small window
    ax.set_ylim(y0 - 0.01, y0 + 0.01)
    assert not (ax.viewLim.contains(*tr.positions[k]))
    fig.canvas.draw()
    assert_allclose(d.divergent.get_xydata(), tr.positions[[k - 1, k]])  # data unchanged
    start, end = ax.transData.transform(d.divergent.shown_xydata)
    b = ax.bbox
    radius = d.divergent.get_markersize() / 2 * fig.dpi / 72
    assert b.x0 + radius <= end[0] <= b.x1 - radius and b.y0 + radius <= end[1] <= b.y1 - radius
    assert min(end[0] - b.x0, b.x1 - end[0], end[1] - b.y0, b.y1 - end[1]) < radius + 3
    # ... in the direction the trajectory flew off
    true = ax.transData.transform(tr.positions[[k - 1, k]])
    u, w = true[1] - true[0], end - start
    assert abs(u[0] * w[1] - u[1] * w[0]) < 1e-6 * np.linalg.norm(u) * np.linalg.norm(w)
    assert u @ w > 0


def test_long_momentum_arrow_ends_inside_the_axes(gaussian):
    tr = pg.leapfrog(gaussian, [0.0, 0.0], [3.0, 1.0], 0.1, 8)
    fig = _figure(3.8, 3.0)
    ax = fig.add_subplot()
    d = draw_trajectory(ax, tr, momentum_scale=10.0)  # tip at (30, 10): far outside
    d.autoscale = False
    ax.set_xlim(-2, 2)
    ax.set_ylim(-2, 2)
    fig.canvas.draw()
    assert_allclose(d.momentum_ends, [[0.0, 0.0], [30.0, 10.0]])  # the true arrow
    tail, tip = d.momentum.shown_ends
    assert_allclose(tail, [0.0, 0.0])
    assert -2 < tip[0] < 2 and -2 < tip[1] < 2 and tip[0] > 1.8  # up to the right edge
    assert abs(tip[1] - tip[0] / 3.0) < 1e-9  # along the momentum
    # the head is drawn: the arrow's colour reaches the right edge of the Axes
    mask = _colour_pixels(fig, style.MOMENTUM["color"])
    cols = np.nonzero(mask)[1]
    assert cols.max() > ax.bbox.x1 - 12 and cols.max() <= ax.bbox.x1
    # an arrow inside the view is drawn as it is
    d.update(pg.leapfrog(gaussian, [0.0, 0.0], [0.1, 0.05], 0.1, 8))
    fig.canvas.draw()
    assert_allclose(d.momentum.shown_ends, d.momentum_ends)
