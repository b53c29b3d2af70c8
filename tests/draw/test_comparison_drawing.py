"""draw_comparison: one row per kernel, a dot per seed, mean and spread; update in place."""

import numpy as np
import pytest

import phaseglass as pg
from phaseglass.core.run import RHAT_LIMIT
from phaseglass.draw.compare import draw_comparison


@pytest.fixture(scope="module")
def comparisons():
    target = pg.demos.correlated_gaussian()
    ks = {"short": pg.HMC(0.3, 3), "long": pg.HMC(0.3, 12), "walk": pg.RandomWalk(0.6)}
    kw = dict(n_seeds=3, n_draws=40, n_chains=2, warmup=30)
    return (pg.compare_kernels(target, ks, seed=1, **kw),
            pg.compare_kernels(target, ks, seed=2, **kw))


def test_artists_hold_the_cells_means_and_spreads(ax, comparisons):
    c, other = comparisons
    d = draw_comparison(ax, c, "acceptance")
    cells = c.cells["acceptance"]
    xy = np.asarray(d.seeds.get_offsets())
    np.testing.assert_allclose(np.sort(xy[:, 0]), np.sort(cells.ravel()))
    rows = np.rint(xy[:, 1]).astype(int)  # each dot sits in its kernel's row
    for k in range(3):
        np.testing.assert_allclose(np.sort(xy[rows == k, 0]), np.sort(cells[k]))
    np.testing.assert_allclose(d.means.get_xdata(), cells.mean(axis=1))
    np.testing.assert_array_equal(d.means.get_ydata(), [0, 1, 2])
    sd = cells.std(axis=1, ddof=1)
    for k, seg in enumerate(d.spreads.get_segments()):
        np.testing.assert_allclose(seg[:, 0], [cells[k].mean() - sd[k], cells[k].mean() + sd[k]])
    assert [t.get_text() for t in d.texts][0].startswith(f"{cells[0].mean():.3g} \u00b1")
    assert [t.get_text() for t in ax.get_yticklabels()] == ["short", "long", "walk"]
    left, right = ax.get_xlim()
    assert left <= cells.min() and right >= cells.max()
    # the same artists show another comparison
    seeds, means = d.seeds, d.means
    d.update(other)
    assert d.seeds is seeds and d.means is means
    np.testing.assert_allclose(d.means.get_xdata(), other.cells["acceptance"].mean(axis=1))
    assert not np.allclose(d.means.get_xdata(), cells.mean(axis=1))


def test_r_hat_shows_the_warning_level_and_bad_input_is_named(ax, comparisons):
    c, _ = comparisons
    d = draw_comparison(ax, c, "R-hat max")
    np.testing.assert_array_equal(d.reference.get_xdata(), [RHAT_LIMIT, RHAT_LIMIT])
    assert ax.get_xlim()[1] > RHAT_LIMIT
    other = draw_comparison(ax.figure.add_subplot(2, 1, 2), c, "divergences")
    assert len(other.reference.get_xdata()) == 0
    with pytest.raises(ValueError, match="`quantity` must be one of"):
        draw_comparison(ax, c, "speed")
    with pytest.raises(TypeError, match="`comparison` must be a KernelComparison"):
        draw_comparison(ax, {"acceptance": [0.5]})
