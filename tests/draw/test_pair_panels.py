"""draw_pair_panels: chosen pairs of coordinates, one per Axes, divergences marked."""

import numpy as np
import pytest
from matplotlib.figure import Figure

from phaseglass.draw.pairs import draw_pair_panels


def _draws(seed):
    """Synthetic draws (2 chains x 50 draws x 4 coordinates) with 5 divergent transitions."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(2, 50, 4))
    div = np.zeros((2, 50), dtype=bool)
    div[0, [3, 9, 30]] = div[1, [1, 44]] = True
    return x, div


def xy(line):
    return np.asarray(line.get_xydata(), dtype=float).reshape(-1, 2)


def test_each_panel_is_its_pair_with_the_divergent_draws_marked_and_updates_in_place():
    x, div = _draws(0)
    fig = Figure(figsize=(6, 3))
    axes = fig.subplots(1, 3)
    names = ("a", "b", "c", "d")
    d = draw_pair_panels(axes, x, [(3, 1), ("a", "c"), (2, 0)], names=names, divergent=div,
                         titles=["one", "two", "three"])
    assert d.pairs == [(3, 1), (0, 2), (2, 0)]
    assert [t.get_text() for t in d.titles] == ["one", "two", "three"]
    c, t = np.nonzero(div)
    for panel, pair in zip(d.panels, d.pairs):
        np.testing.assert_allclose(xy(panel.divergent), x[c, t][:, list(pair)])
        np.testing.assert_allclose(xy(panel.points), x[~div][:, list(pair)])
    before = [id(a) for a in d.artists]
    y, div2 = _draws(1)
    assert d.update(y, div2) is d
    assert [id(a) for a in d.artists] == before  # the same artists, new data
    c, t = np.nonzero(div2)
    np.testing.assert_allclose(xy(d.panels[0].divergent), y[c, t][:, [3, 1]])
    assert draw_pair_panels(Figure().subplots(1, 1, squeeze=False), x, [(0, 1)],
                            names=names).titles[0].get_text() == "a \u00d7 b"


def test_mark_frames_one_panel_and_finds_panels_by_axes():
    x, div = _draws(0)
    fig = Figure(figsize=(4, 2))
    axes = fig.subplots(1, 2)
    d = draw_pair_panels(axes, x, [(0, 1), (2, 3)], divergent=div)
    d.mark(1)
    assert d.marked == 1 and axes[1].spines["top"].get_visible()
    assert not axes[0].spines["top"].get_visible()
    assert d.titles[1].get_fontweight() == "bold" and d.titles[0].get_fontweight() == "normal"
    d.mark(-1)
    assert not axes[1].spines["top"].get_visible()
    assert d.panel_of(axes[1]) == 1 and d.panel_of(Figure().add_subplot()) == -1
    with pytest.raises(ValueError, match=r"`index` must be -1 or in range\(2\)"):
        d.mark(2)


def test_bad_input_is_rejected():
    x, div = _draws(0)
    axes = Figure().subplots(1, 2)
    with pytest.raises(ValueError, match="`axes` must hold one Axes per pair: 3 pairs, got 2"):
        draw_pair_panels(axes, x, [(0, 1), (0, 2), (1, 2)])
    with pytest.raises(ValueError, match="`titles` must hold one title per pair"):
        draw_pair_panels(axes, x, [(0, 1), (0, 2)], titles=["only one"])
