"""The static report: every file present, HTML that parses and holds every section, JSON summary."""

import base64
import json
from html.parser import HTMLParser

import pytest

import phaseglass as pg
from phaseglass.core.run import CAUTION
from phaseglass.report import FIGURE_NAMES, write_report


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.images, self.text = set(), [], []
        self.stack = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag not in ("img", "meta", "br"):
            self.stack.append(tag)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"unbalanced </{tag}>"
        self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def funnel_report(tmp_path_factory):
    run = pg.sample(pg.demos.get("apiaries-12"), pg.HMC(0.1, 8), n_draws=60, n_chains=2,
                    warmup=0, seed=11)
    assert run.n_divergent > 0
    out = tmp_path_factory.mktemp("report")
    files = write_report(out, run, settings={"model": "apiaries-12", "draws": 60},
                         title="apiaries-12", coords=("log_tau", "apiary[0]"), grid_draws=30,
                         dpi=40)
    return run, files


def test_report_folder_holds_every_file(funnel_report):
    run, files = funnel_report
    expected = {"trajectory", "divergence", "uniforms", "traces", "autocorrelation",
                "running_ess", "ess_per_gradient", "energy", "pairs", "tuning"}
    assert set(files.figures) == expected
    assert expected <= set(FIGURE_NAMES)
    for name, path in files.figures.items():
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n", name
    assert files.html.exists() and files.summary.exists()
    assert set(p.name for p in files.folder.iterdir()) == \
        {f"{n}.png" for n in expected} | {"report.html", "summary.json"}


def test_html_parses_and_has_every_section(funnel_report):
    run, files = funnel_report
    parser = _Collect()
    parser.feed(files.html.read_text())
    parser.close()
    assert parser.stack == []
    for section in ("settings", "warnings", "diagnostics", "figures", "caution"):
        assert section in parser.ids
    for name in files.figures:
        assert f"fig-{name}" in parser.ids
    # self-contained: every image is an embedded PNG equal to the file beside it
    assert len(parser.images) == len(files.figures)
    embedded = [base64.b64decode(src.split(",", 1)[1]) for src in parser.images]
    assert all(src.startswith("data:image/png;base64,") for src in parser.images)
    assert sorted(embedded) == sorted(p.read_bytes() for p in files.figures.values())
    text = " ".join(parser.text)
    assert " ".join(CAUTION.split()) in " ".join(text.split())
    assert "divergent transition" in text
    assert "R-hat" in text and "bulk ESS" in text
    for name in run.names:
        assert name in text


def test_summary_json(funnel_report):
    run, files = funnel_report
    s = json.loads(files.summary.read_text())
    assert s["settings"] == {"model": "apiaries-12", "draws": 60}
    assert s["caution"] == CAUTION
    assert s["diagnostics"] == json.loads(json.dumps(run.summary().as_dict(), allow_nan=False))
    assert s["warnings"] and any("divergent" in w for w in s["warnings"])
    assert s["model"]["names"] == list(run.names)
    assert s["tuning_grid"]["steps"] == [4, 8, 16]
    assert len(s["tuning_grid"]["values"]) == 3
    assert set(s["files"]) == {p.name for p in files.folder.iterdir()}


def test_random_walk_report_leaves_out_leapfrog_views(tmp_path):
    run = pg.sample(pg.demos.correlated_gaussian(), pg.RandomWalk(1.0), n_draws=40, n_chains=2,
                    seed=3, warmup=0)
    files = write_report(tmp_path, run, dpi=30)
    assert "trajectory" not in files.figures and "tuning" not in files.figures
    assert {"uniforms", "traces", "pairs"} <= set(files.figures)
    assert any("no leapfrog trajectories" in n for n in files.notes)
    html = files.html.read_text()
    assert "no leapfrog trajectories" in html
    # the kernel table speaks the registry's words: its title, and the scale called a scale
    assert "(what the draws below used): random-walk Metropolis" in html
    assert "<td>proposal scale (scale)</td>" in html and "<td>step size" not in html
    # 2 x 40 random-walk draws: ESS far below 100 per chain, so there are warnings to show
    assert files.warnings and files.warnings == run.summary().warnings
    parser = _Collect()
    parser.feed(html)
    text = " ".join(parser.text)
    for w in files.warnings:
        assert w in text
    assert "No problem detected" not in html


def test_rewriting_a_folder_drops_only_the_earlier_reports_stale_figures(tmp_path):
    hmc = pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 4), n_draws=20, n_chains=2, seed=1, warmup=0)
    walk = pg.sample(pg.demos.correlated_gaussian(), pg.RandomWalk(1.0), n_draws=20, n_chains=2,
                     seed=1, warmup=0)
    write_report(tmp_path, hmc, grid=False, dpi=20)
    assert (tmp_path / "trajectory.png").exists()
    (tmp_path / "notes.txt").write_text("not ours")
    write_report(tmp_path, walk, dpi=20)
    assert not (tmp_path / "trajectory.png").exists()  # the earlier report's, not made this time
    assert (tmp_path / "notes.txt").read_text() == "not ours"  # files the report did not write stay


def test_a_folder_without_an_earlier_report_is_refused(tmp_path):
    run = pg.sample(pg.demos.correlated_gaussian(), pg.RandomWalk(1.0), n_draws=20, n_chains=2,
                    seed=1, warmup=0)
    (tmp_path / "tuning.png").write_bytes(b"from somewhere else")
    with pytest.raises(ValueError, match="`out_dir`.*no earlier phaseglass report.*replace=True"):
        write_report(tmp_path, run, dpi=20)
    assert [p.name for p in tmp_path.iterdir()] == ["tuning.png"]
    assert (tmp_path / "tuning.png").read_bytes() == b"from somewhere else"


def test_report_needs_target_and_kernel(tmp_path):
    run = pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 4), n_draws=10, n_chains=1, seed=1, warmup=0)
    run.target = None
    with pytest.raises(ValueError, match="target and kernel"):
        write_report(tmp_path, run)


def test_gibbs_report_shows_paths_and_spread(tmp_path):
    run = pg.sample(pg.demos.correlated_gaussian(), pg.Gibbs(shared_stream=True), n_draws=40,
                    n_chains=3, seed=2, warmup=0)
    files = write_report(tmp_path, run, dpi=30)
    assert "gibbs" in files.figures and "uniforms" not in files.figures
    assert "trajectory" not in files.figures and "ess_per_gradient" not in files.figures


def test_page_says_all_clear_only_without_warnings(funnel_report):
    from phaseglass.report.html import page

    run, files = funnel_report
    digest = run.summary()
    summary = json.loads(files.summary.read_text())
    with_warnings = page(digest, summary, {}, {}, n_chains=run.n_chains, notes=[])
    assert "No problem detected" not in with_warnings
    digest.warnings = []
    clear = page(digest, summary, {}, {}, n_chains=run.n_chains, notes=[])
    assert "No problem detected by these checks" in clear and "not proof of convergence" in clear


def test_diagnostics_table_headings_and_summary_columns_come_from_one_definition(funnel_report):
    from phaseglass.core.run import COLUMNS

    run, files = funnel_report
    s = json.loads(files.summary.read_text())
    keys = [c.key for c in COLUMNS]
    assert list(s["diagnostics"]["columns"]) == keys
    for cells in s["diagnostics"]["parameters"].values():
        assert list(cells) == keys
    html = files.html.read_text()
    # every column heading carries its description, in the digest's order
    at = [html.index(f'<th title="{c.describe()}">{c.heading()}</th>') for c in COLUMNS]
    assert at == sorted(at)
    assert '<th title="the lower quantile of the draws (5%)">5%</th>' in html
    # the divergent funnel run has R-hat or ESS cells that need attention, and they are marked
    digest = run.summary()
    flagged = sum(c.needs_attention(v, run.n_chains) for c in COLUMNS for v in digest[c.key])
    assert flagged > 0 and html.count('<td class="flag">') == flagged


def test_plan_is_data_and_follows_the_kernel():
    from phaseglass.core.efficiency import MIN_ESS_DRAWS
    from phaseglass.report.decide import FIGURE_NAMES, plan

    t = pg.demos.correlated_gaussian()
    hmc = pg.sample(t, pg.HMC(0.3, 4), n_draws=30, n_chains=2, seed=1, warmup=0)
    p = plan(hmc, hmc.summary(), grid=True, grid_draws=25)
    assert p.names == [n for n in FIGURE_NAMES if n in p.names]  # page order
    assert {"trajectory", "traces", "running_ess", "ess_per_gradient", "energy", "tuning"} <= set(p.names)
    tuning = p.figures[p.names.index("tuning")]
    assert tuning.options == {"step_sizes": [0.15, 0.3, 0.48], "steps": [2, 4, 8], "draws": 25}
    assert p.coords == (0, 1) and not p.notes
    short = pg.sample(t, pg.RandomWalk(1.0), n_draws=12, n_chains=2, seed=1, warmup=0)
    q = plan(short, short.summary(), grid=True)
    assert not {"trajectory", "running_ess", "ess_per_gradient", "energy", "tuning"} & set(q.names)
    assert {"uniforms", "traces", "autocorrelation", "pairs"} <= set(q.names)
    assert any(f"Fewer than {MIN_ESS_DRAWS} draws per chain" in n for n in q.notes)
    assert any("needs a fixed-length leapfrog kernel" in n for n in q.notes)


def test_a_nuts_report_adds_the_tree_depth_figure(tmp_path):
    import numpy as np

    from phaseglass.report import decide, render

    # sd 30 with step size 1: a U-turn needs about 94 leapfrog steps, beyond 2**3 - 1 = 7,
    # so every tree stops at the depth limit
    wide = pg.Target(lambda x: -0.5 * float(x @ x) / 900.0,
                     lambda x: -np.asarray(x, dtype=float) / 900.0, dim=2)
    run = pg.sample(wide, pg.NUTS(1.0, max_depth=3), n_draws=40, n_chains=2, seed=2, warmup=0)
    p = decide.plan(run, run.summary(), grid=False)
    assert p.names == [n for n in FIGURE_NAMES if n in p.names]
    (planned,) = [f for f in p.figures if f.name == "tree_depth"]
    assert planned.options == {"max_depth": 3}
    assert "trajectory" not in p.names and any("DoublingView.from_run" in n for n in p.notes)
    assert "max_depth = 3, i.e. 7 leapfrog steps" in render.caption(planned)
    fig = render.figure(planned, run)
    ax, ax_trace = fig.axes[:2]
    depth = run.extras["tree_depth"]
    bars, at_limit = ax.patches[:2]  # the histogram (below the limit) and the limit's bar
    below, edges = bars.get_data().values, bars.get_data().edges
    limit = at_limit.get_data().values
    shares = [np.mean(depth == k) for k in (1, 2, 3)]
    assert np.allclose(edges, [0.5, 1.5, 2.5, 3.5])
    assert np.allclose(below, shares[:2] + [0.0]) and np.allclose(limit, [0.0, 0.0, shares[2]])
    assert shares[2] == 1.0
    for line, row in zip(ax_trace.get_lines()[1:], depth):  # after the limit line: one per chain
        assert np.array_equal(line.get_ydata(), row)
    hit = run.extras["depth_limit_hit"]  # a tree may also turn back at its last doubling
    assert ax.get_title(loc="left") == (f"{np.mean(hit):.0%} of transitions stopped at "
                                        "max_depth = 3 before turning back")
    files = write_report(tmp_path, run, grid=False, dpi=30)
    assert files.figures["tree_depth"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert any("maximum tree depth" in w for w in files.warnings)
    # an HMC run has no trees: no tree-depth figure
    hmc = pg.sample(wide, pg.HMC(1.0, 5), n_draws=20, n_chains=2, seed=1, warmup=0)
    assert "tree_depth" not in decide.plan(hmc, hmc.summary(), grid=False).names
