"""divergence_ranking: where a run's divergent transitions concentrate."""

import numpy as np
import pytest
from scipy import stats

import phaseglass as pg
from phaseglass.core.run import Run

FUNNEL = dict(n_draws=300, n_chains=2, warmup=100, seed=1)


def invented_run(x, divergent, names=None):
    """A Run from given (chain, draw, dim) draws and (chain, draw) divergence flags."""
    return Run(x, x.copy(), {"divergent": np.asarray(divergent, dtype=bool)}, {}, names=names)


@pytest.fixture(scope="module")
def funnel_run():
    run = pg.sample(pg.demos.orchards("centred"), pg.HMC(0.4, 8), **FUNNEL)
    assert run.n_divergent >= 10
    return run


def test_per_coordinate_statistic_matches_scipy_mannwhitneyu():
    rng = np.random.default_rng(3)
    x = rng.normal(size=(2, 200, 4))
    div = np.zeros((2, 200), dtype=bool)
    div[:, ::17] = True
    x[div, 2] -= 1.5          # divergent draws sit low in coordinate 2 ...
    x[div, 0] += 0.5          # ... and somewhat high in coordinate 0
    x[:, :, 3] = np.round(x[:, :, 3])  # heavy ties in coordinate 3
    r = pg.divergence_ranking(invented_run(x, div))
    a, b = x[div], x[~div]
    assert (r.n_divergent, r.n_other) == (len(a), len(b))
    for k in range(4):
        # reference: scipy.stats.mannwhitneyu (U of the first sample, tie-corrected
        # normal approximation without continuity correction)
        ref = stats.mannwhitneyu(a[:, k], b[:, k], alternative="two-sided",
                                 method="asymptotic", use_continuity=False)
        assert r.u[k] == pytest.approx(ref.statistic)
        assert r.p_value[k] == pytest.approx(ref.pvalue, rel=1e-9)
        assert r.shift[k] == pytest.approx(2 * ref.statistic / (len(a) * len(b)) - 1)
    assert r.order[0] == 2 and r.shift[2] < -0.5
    assert r.order[1] == 0 and r.shift[0] > 0
    assert r.coordinates[:2] == ("x[2]", "x[0]")
    assert r.top_pair == (2, 0)
    np.testing.assert_allclose(r.pair_score, np.sort(r.pair_score)[::-1])
    assert r.pairs.shape == (6, 2) and r.pair_score.shape == (6,)
    text = repr(r)
    assert "divergent vs" in text and text.index("x[2]") < text.index("x[1]")


def test_ranks_on_the_samplers_scale():
    rng = np.random.default_rng(0)
    z = rng.normal(size=(1, 100, 2))
    div = np.zeros((1, 100), dtype=bool)
    div[0, :10] = True
    z[0, :10, 1] += 10.0
    user = z[..., ::-1].copy()  # on the user's scale the separated coordinate would be x[0]
    r = pg.divergence_ranking(Run(user, z, {"divergent": div}, {}))
    assert r.coordinates[0] == "x[1]" and r.shift[1] == pytest.approx(1.0)


def test_funnel_scale_parameter_ranks_first(funnel_run):
    # common practice: a centred hierarchical funnel diverges where the group scale is small
    r = pg.divergence_ranking(funnel_run)
    assert r.coordinates[0] == "log_tau"
    assert r.shift[funnel_run.names.index("log_tau")] < -0.5   # at small scale
    assert funnel_run.names[r.top_pair[0]] == "log_tau"
    assert r.n_divergent == funnel_run.n_divergent
    assert r.n_divergent + r.n_other == funnel_run.n_chains * funnel_run.n_draws


def test_run_without_divergences_gives_an_empty_ranking():
    x = np.random.default_rng(1).normal(size=(2, 50, 3))
    r = pg.divergence_ranking(invented_run(x, np.zeros((2, 50))))
    assert r.empty and r.top_pair is None
    assert r.order.shape == (0,) and r.pairs.shape == (0, 2) and r.coordinates == ()
    assert r.n_divergent == 0 and r.n_other == 100
    assert np.all(np.isnan(r.shift))
    assert "no divergent transitions" in repr(r)


def test_bad_input_names_the_argument():
    with pytest.raises(TypeError, match="`run`"):
        pg.divergence_ranking(np.zeros((2, 10, 3)))
    x = np.zeros((1, 10, 2))
    with pytest.raises(ValueError, match="`max_pairs`"):
        pg.divergence_ranking(invented_run(x, np.zeros((1, 10))), max_pairs=0)
    with pytest.raises(ValueError, match="`run`"):
        pg.divergence_ranking(invented_run(x, np.zeros((1, 9))))
