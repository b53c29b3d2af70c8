"""Animation export: GIF frames counted with Pillow, MP4 only with ffmpeg, clear errors otherwise."""

import pytest
from numpy.testing import assert_allclose
from PIL import Image

import phaseglass as pg
from phaseglass.draw import animate, chain_frames, record_chain, save_animation, style
from phaseglass.draw import write_chain_animation


def test_record_chain_keeps_one_trajectory_per_transition():
    t = pg.demos.correlated_gaussian()
    kernel = pg.HMC(0.3, 6)
    rec = record_chain(t, kernel, 4, seed=3)
    assert rec.positions.shape == (5, 2)
    assert len(rec.trajectories) == 4 and rec.accepted.shape == (4,)
    for k, tr in enumerate(rec.trajectories):
        assert_allclose(tr.positions[0], rec.positions[k])  # each starts where the chain stood
        if rec.accepted[k]:
            assert_allclose(tr.positions[-1], rec.positions[k + 1])
    assert kernel.step_size == 0.3  # the caller's kernel is copied, not changed
    with pytest.raises(ValueError, match="n_transitions"):
        record_chain(t, kernel, 0)


def test_gif_has_the_expected_number_of_frames(tmp_path):
    path = write_chain_animation(tmp_path / "chain.gif", pg.demos.correlated_gaussian(),
                                 pg.HMC(0.3, 6), n_transitions=3, frames_per_transition=2,
                                 seed=1, size=(3.0, 2.0), dpi=30)
    assert path.exists() and path.stat().st_size < 200_000
    with Image.open(path) as im:
        assert im.format == "GIF"
        assert im.n_frames == 6
        assert im.size == (90, 60)


def test_animation_frames_show_the_trajectory_growing():
    rec = record_chain(pg.demos.glaze_ridge(), pg.HMC(0.1, 8), 2, seed=2)
    fig = style.new_figure(3, 2, dpi=30)
    show, n_frames = chain_frames(fig, rec, frames_per_transition=3, density=False)
    assert n_frames == 6
    ax = fig.axes[0]
    path_line = [line for line in ax.lines if line.get_label() == "leapfrog path"][0]
    show(0)  # a third of the first trajectory: steps 0..3
    assert_allclose(path_line.get_xydata(), rec.trajectories[0].positions[:4])
    assert ax.get_title(loc="left") == "transition 1/2: leapfrog step 3/8"
    show(2)  # decision frame: the whole trajectory and the verdict
    assert_allclose(path_line.get_xydata(), rec.trajectories[0].positions)
    word = "accepted" if rec.accepted[0] else "rejected"
    assert ax.get_title(loc="left").endswith(word)


def test_random_walk_animates_draws_only(tmp_path):
    path = write_chain_animation(tmp_path / "walk.gif", pg.demos.correlated_gaussian(),
                                 pg.RandomWalk(0.8), n_transitions=2, frames_per_transition=1,
                                 seed=1, size=(2.0, 2.0), dpi=30)
    with Image.open(path) as im:
        assert im.n_frames == 2


def test_mp4_needs_ffmpeg(tmp_path, monkeypatch):
    monkeypatch.setattr(animate.shutil, "which", lambda name: None)
    with pytest.raises(RuntimeError, match="ffmpeg"):
        write_chain_animation(tmp_path / "chain.mp4", pg.demos.correlated_gaussian(),
                              pg.HMC(0.3, 4), n_transitions=1)
    assert not (tmp_path / "chain.mp4").exists()


def test_unknown_suffix_is_refused(tmp_path):
    with pytest.raises(ValueError, match=r"\.gif or \.mp4"):
        save_animation(None, tmp_path / "chain.avi")
