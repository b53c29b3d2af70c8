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
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.2, 8), **FUNNEL)
    assert run.n_divergent >= 10  # 28 (seeds 1-5: 28, 20, 7, 31, 11; log_tau first in all)
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


# ------------------------------------------------------ worst-mixing parameters
def invented_mixing_run(dim, seed=0):
    """Independent draws, except x[17] (sticky, with chains stuck apart) and x[5] (sticky)."""
    rng = np.random.default_rng(seed)
    n_chains, n_draws = 4, 400
    x = rng.normal(size=(n_chains, n_draws, dim))

    def ar1(phi):
        out = np.empty((n_chains, n_draws))
        out[:, 0] = rng.normal(size=n_chains)
        for t in range(1, n_draws):
            out[:, t] = phi * out[:, t - 1] + np.sqrt(1 - phi**2) * rng.normal(size=n_chains)
        return out

    if dim > 17:
        x[:, :, 17] = ar1(0.995) + np.arange(n_chains)[:, None]  # chains disagree
    x[:, :, 5] = ar1(0.9)
    shape = (n_chains, n_draws)
    records = {"accepted": np.ones(shape, bool), "divergent": np.zeros(shape, bool),
               "n_grad": np.ones(shape, int)}
    return Run(x, x.copy(), records, {})


def test_worst_mixing_puts_the_badly_mixing_parameters_first():
    digest = invented_mixing_run(30).summary()
    worst = digest.worst_mixing(5)
    assert worst.shape == (5,)
    assert worst[0] == 17 and worst[1] == 5
    ess = np.fmin(digest["bulk_ess"], digest["tail_ess"])
    assert ess[17] == ess.min() and digest["split_rhat"][17] == np.nanmax(digest["split_rhat"])
    assert digest.worst_mixing(100).shape == (30,)
    with pytest.raises(ValueError, match="`k`"):
        digest.worst_mixing(0)


def test_summary_with_many_parameters_lists_the_worst_first():
    digest = invented_mixing_run(30).summary()
    text = str(digest)
    lines = text.splitlines()
    assert lines[0].startswith("Worst-mixing parameters")
    first = lines[:lines.index("All 30 parameters:")]
    assert [ln.split()[0] for ln in first[2:7]] == [digest.names[i] for i in digest.worst_mixing(5)]
    assert first[2].split()[0] == "x[17]"
    rest = lines[lines.index("All 30 parameters:") + 2:]
    assert [ln.split()[0] for ln in rest[:30]] == list(digest.names)  # the full table follows
    html_text = digest._repr_html_()
    assert html_text.count("<table>") == 2 and html_text.index("x[17]") < html_text.index("x[0]")
    few = str(invented_mixing_run(12).summary())
    assert "Worst-mixing" not in few and few.splitlines()[1].split()[0] == "x[0]"


def test_average_ranks_match_scipy_rankdata_with_ties():
    from phaseglass.core.triage import _average_ranks

    rng = np.random.default_rng(5)
    x = np.round(rng.normal(size=(57, 4)), 1)  # rounding makes many ties
    ranks, ties = _average_ranks(x)
    # reference: scipy.stats.rankdata(method="average") column by column
    np.testing.assert_array_equal(ranks, stats.rankdata(x, axis=0))
    for k in range(4):
        _, counts = np.unique(x[:, k], return_counts=True)
        assert ties[k] == np.sum(counts.astype(float) ** 3 - counts)
