"""Bad input against the public API: every case asserts what the user gets.

Each case is what a practitioner plausibly does wrong. The expected behaviour is one of:
an exception of a stated type whose message names the argument (and the fix), a warning
that says what is wrong, or a result that stays right (finished work returned, not lost).
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
import warnings

import numpy as np
import pytest
import traitlets
import scipy.stats as st

import phaseglass as pg
from phaseglass.core import diagnostics as dg


def quad(x):
    return -0.5 * float(np.dot(x, x))


def quad_grad(x):
    return -np.asarray(x, dtype=float)


def gauss(dim=2):
    return pg.Target(quad, quad_grad, dim=dim)


# ------------------------------------------------------------------ raising cases
# (label, callable, exception type, regex the message must match)
RAISES = [
    ("Target: dim missing", lambda: pg.Target(quad, quad_grad), ValueError, r"`dim`"),
    ("Target: dim 0", lambda: pg.Target(quad, quad_grad, dim=0), ValueError, r"`dim` must be >= 1"),
    ("Target: dim as text", lambda: pg.Target(quad, quad_grad, dim="2"), TypeError, r"`dim`"),
    ("Target: log_density not callable", lambda: pg.Target(3.0, dim=2), TypeError,
     r"`log_density` must be callable"),
    ("Target: names of the wrong length", lambda: pg.Target(quad, quad_grad, dim=2, names=["a"]),
     ValueError, r"`names` must have 2 entries"),
    ("Target: repeated names", lambda: pg.Target(quad, quad_grad, dim=2, names=["a", "a"]),
     ValueError, r"`names` must be unique"),
    ("Target: bounds with lo >= hi", lambda: pg.Target(quad, quad_grad, dim=1, bounds=[(1, 0)]),
     ValueError, r"`bounds\[0\]` must have lo < hi"),
    ("Target: complex log-density",
     lambda: pg.Target(lambda x: quad(x) + 0j, quad_grad, dim=2).log_density(np.zeros(2)),
     TypeError, r"`log_density` must return real numbers, got complex"),
    ("Target: log-density as a string",
     lambda: pg.Target(lambda x: "-1.5", quad_grad, dim=2).log_density(np.zeros(2)),
     TypeError, r"`log_density` must return numbers, got str"),
    ("Target: log-density returns None (forgotten return)",
     lambda: pg.Target(lambda x: None, quad_grad, dim=2).log_density(np.zeros(2)),
     TypeError, r"`log_density` must return numbers"),
    ("Target: complex gradient",
     lambda: pg.Target(quad, lambda x: -x + 1j, dim=2).grad(np.zeros(2)),
     TypeError, r"`grad` must return real numbers"),
    ("Target: value_and_grad returns a float",
     lambda: pg.Target(quad, value_and_grad=lambda x: 1.0, dim=2).value_and_grad(np.zeros(2)),
     TypeError, r"`value_and_grad` must return a pair \(log_density, grad\), got float"),
    ("Target: gradient of the wrong shape",
     lambda: pg.Target(quad, lambda x: np.zeros(3), dim=2).grad(np.zeros(2)),
     ValueError, r"`grad` must return shape \(2,\)"),
    ("Target: point of the wrong shape", lambda: gauss().log_density(np.zeros(3)), ValueError,
     r"`x` must have shape \(2,\)"),
    ("leapfrog: NaN start", lambda: pg.leapfrog(gauss(), [np.nan, np.nan], [1, 0], 0.1, 5),
     ValueError, r"`position` must be finite"),
    ("leapfrog: infinite momentum", lambda: pg.leapfrog(gauss(), [0, 0], [np.inf, 0], 0.1, 5),
     ValueError, r"`momentum` must be finite"),
    ("leapfrog: negative step size", lambda: pg.leapfrog(gauss(), [0, 0], [1, 0], -0.1, 5),
     ValueError, r"`step_size` must be finite and > 0"),
    ("leapfrog: 10**8 steps (would freeze the notebook)",
     lambda: pg.leapfrog(gauss(), [0, 0], [1, 0], 0.1, 10**8), ValueError,
     r"`n_steps` must be <= 100000"),
    ("leapfrog: fractional steps", lambda: pg.leapfrog(gauss(), [0, 0], [1, 0], 0.1, 2.5),
     TypeError, r"`n_steps` must be an integer"),
    ("HMC: 10**9 steps", lambda: pg.HMC(0.1, 10**9), ValueError, r"`n_steps` must be <= 100000"),
    ("HMC: zero step size", lambda: pg.HMC(0.0, 10), ValueError, r"`step_size`"),
    ("PartialRefreshHMC: persistence 1", lambda: pg.PartialRefreshHMC(0.1, 1, 1.0), ValueError,
     r"`persistence` must lie in \[0, 1\)"),
    ("DriftingUniform: drift 3", lambda: pg.DriftingUniform(3.0), ValueError, r"`drift`"),
    ("sample: target_accept 5 without warm-up",
     lambda: pg.sample(gauss(), pg.HMC(0.2, 5), n_draws=10, target_accept=5, seed=1, warmup=0),
     ValueError, r"`target_accept` must lie in"),
    ("sample: mass_adaptation 'full'",
     lambda: pg.sample(gauss(), pg.HMC(0.2, 5), n_draws=10, mass_adaptation="full", seed=1, warmup=0),
     ValueError, r"`mass_adaptation` must be one of"),
    ("sample: kernel as a string", lambda: pg.sample(gauss(), "hmc", n_draws=10, warmup=0), TypeError,
     r"`kernel` must be a phaseglass kernel"),
    ("sample: a log-density instead of a Target",
     lambda: pg.sample(quad, pg.HMC(0.2, 5), n_draws=10, warmup=0), TypeError,
     r"`target` must be a phaseglass Target"),
    ("sample: zero draws", lambda: pg.sample(gauss(), pg.HMC(0.2, 5), n_draws=0, warmup=0), ValueError,
     r"`n_draws` must be >= 1"),
    ("sample: NaN initial",
     lambda: pg.sample(gauss(), pg.HMC(0.2, 5), [np.nan, 0.0], n_draws=5, seed=1, warmup=0), ValueError,
     r"`initial` has a non-finite log-density"),
    ("sample: initial of the wrong shape",
     lambda: pg.sample(gauss(), pg.HMC(0.2, 5), np.zeros((3, 2)), n_draws=5, n_chains=4, warmup=0),
     ValueError, r"`initial` must have shape"),
    ("sample: initial outside the support",
     lambda: pg.sample(pg.Target(lambda x: -x[0], lambda x: -np.ones(1), dim=1, bounds=[(0, None)]),
                       pg.HMC(0.2, 5), [-1.0], n_draws=5, seed=1, warmup=0),
     ValueError, r"`initial`"),
    ("kernel_from_settings: unknown uniform kind",
     lambda: pg.kernel_from_settings({"kernel": "HMC", "step_size": 0.1, "n_steps": 3,
                                      "uniform": {"kind": "banana"}}),
     ValueError, r"must be 'fresh' or 'drifting', got 'banana'"),
    ("kernel_from_settings: partial refresh without persistence",
     lambda: pg.kernel_from_settings({"kernel": "PartialRefreshHMC", "step_size": 0.1,
                                      "n_steps": 1}),
     ValueError, r"must give \['persistence'\]"),
    ("kernel_from_settings: drifting uniform without drift",
     lambda: pg.kernel_from_settings({"kernel": "HMC", "step_size": 0.1, "n_steps": 3,
                                      "uniform": {"kind": "drifting"}}),
     ValueError, r"of kind 'drifting' must give 'drift'"),
    ("kernel_from_settings: a typo'd key",
     lambda: pg.kernel_from_settings({"kernel": "HMC", "step_size": 0.1, "n_steps": 3,
                                      "setp_size": 0.2}),
     ValueError, r"a key it does not know"),
    ("kernel_from_settings: a JSON string", lambda: pg.kernel_from_settings('{"kernel": "HMC"}'),
     TypeError, r"`settings` must be a dict"),
    ("kernel_from_settings: unknown kernel", lambda: pg.kernel_from_settings({"kernel": "Slice"}),
     ValueError, r"`settings\['kernel'\]` must be one of"),
    ("Gibbs: shift 1.5", lambda: pg.Gibbs(shift=1.5), ValueError, r"`shift` must be None"),
    ("Gibbs: conditionals not callable", lambda: pg.Gibbs(conditionals=3), TypeError,
     r"`conditionals` must be None or a callable"),
    ("Gibbs: a conditional without ppf",
     lambda: pg.sample(gauss(), pg.Gibbs(lambda i, x: object()), n_draws=2, n_chains=1, seed=1, warmup=0),
     TypeError, r"must return an object with cdf and ppf"),
    ("ess: a string array", lambda: dg.ess(np.array([["a", "b"]])), TypeError,
     r"`draws` must be an array of real numbers"),
    ("ess: too few draws", lambda: dg.ess(np.zeros((2, 2, 1))), ValueError, r"at least"),
    ("rhat: four-dimensional input", lambda: dg.rhat(np.zeros((2, 10, 2, 2))), ValueError,
     r"must have shape \(draws,\), \(chains, draws\) or \(chains, draws, dim\)"),
]


@pytest.mark.parametrize("label, call, exc, pattern", RAISES, ids=[c[0] for c in RAISES])
def test_bad_input_raises_a_named_error(label, call, exc, pattern):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # finite-difference notices and the like
        with pytest.raises(exc, match=pattern):
            call()


# ------------------------------------------------------------ silently-wrong cases
def test_point_function_declared_vectorized_is_caught_when_chains_equal_dim():
    # written for one point x of shape (4,), declared vectorized: with 4 chains the batch
    # (4, 4) has the shape the sampler expects, and x[0] is a whole chain, not a coordinate
    lp = lambda x: -0.5 * (x[0] ** 2 + x[1] ** 2 + x[2] ** 2 + x[3] ** 2)  # noqa: E731
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        target = pg.Target(lp, dim=4, vectorized=True)
    with pytest.raises(ValueError, match=r"vectorized=True, but `log_density`.*vectorized=False"):
        pg.sample(target, pg.HMC(0.2, 5), n_draws=20, n_chains=4, seed=1, warmup=0)


def test_point_function_declared_vectorized_with_one_chain_says_why():
    lp = lambda x: -0.5 * (x[0] ** 2 + x[1] ** 2)  # noqa: E731
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        target = pg.Target(lp, dim=2, vectorized=True)
    with pytest.raises(IndexError) as info:
        pg.sample(target, pg.HMC(0.2, 5), n_draws=20, n_chains=1, seed=1, warmup=0)
    assert any("pass vectorized=False" in n for n in getattr(info.value, "__notes__", []))


def test_a_truly_vectorized_function_samples_the_right_distribution():
    # N(0, I) in 4-D: moments of 4 x 400 draws within 5 MCSE of 0 and 1 (common practice)
    target = pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), lambda x: -x, dim=4,
                       vectorized=True)
    run = pg.sample(target, pg.HMC(0.5, 5), n_draws=400, warmup=200, n_chains=4, seed=2)
    mean = run.draws.mean(axis=(0, 1))
    assert np.all(np.abs(mean) < 5 * dg.mcse(run.draws, kind="mean"))


def test_gibbs_conditionals_of_another_distribution_warn():
    target = pg.Target(quad, quad_grad, dim=2)  # N(0, I)
    with pytest.warns(UserWarning, match=r"`conditionals` do not match the target"):
        pg.sample(target, pg.Gibbs(lambda i, x: st.norm(5.0, 1.0)), n_draws=3, seed=1, warmup=0)


def test_gibbs_conditionals_that_match_do_not_warn():
    # for N(0, I) every full conditional is N(0, 1) (scipy.stats as the reference)
    target = pg.Target(quad, quad_grad, dim=2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        pg.sample(target, pg.Gibbs(lambda i, x: st.norm(0.0, 1.0)), n_draws=3, seed=1, warmup=0)


def test_one_chain_passed_as_draw_by_dim_warns():
    x = np.random.default_rng(1).standard_normal((1000, 5))
    with pytest.warns(UserWarning, match=r"read as \(chains, draws\): 1000 chains of 5 draws"):
        dg.ess(x)


def test_ess_at_its_upper_safeguard_is_flagged_in_the_summary():
    # perfectly alternating chains: the autocorrelation estimate would give an ESS above
    # the number of draws; the estimator caps it at S log10 S (Vehtari et al. 2021,
    # Bayesian Analysis 16(2), the safeguard of their ESS estimator)
    rng = np.random.default_rng(4)
    x = np.tile([1.0, -1.0], 200)[None, :, None] + 1e-3 * rng.standard_normal((2, 400, 1))
    run = pg.Run(x, x, {k: np.zeros((2, 400)) for k in ("accept_prob", "energy", "energy_error",
                                                         "n_grad", "u", "step_size")}
                 | {"accepted": np.ones((2, 400), bool), "divergent": np.zeros((2, 400), bool)},
                 {}, names=["a"])
    digest = run.summary()
    assert digest.run_info["ess_at_upper_bound"] == ["a"]
    assert any("upper bound" in w and "not a measured value" in w for w in digest.warnings)


def test_settings_are_strict_json(tmp_path):
    view = pg.TrajectoryView(gauss(), start=[0.5, 0.5], xlim=(-3, 3), ylim=(-3, 3))
    path = tmp_path / "s.json"
    view.save_settings(path)
    json.loads(path.read_text(encoding="utf-8"), parse_constant=lambda c: pytest.fail(c))
    for bad in ('{"step_size": 0.1}', None):
        with pytest.raises(TypeError, match=r"`settings` must be a dict"):
            view.apply_settings(bad)


# ------------------------------------------------------------------ lost work
def test_error_in_the_log_density_keeps_the_finished_draws():
    calls = {"n": 0}

    def flaky(x):
        calls["n"] += 1
        if calls["n"] > 300:
            raise RuntimeError("the model's solver failed")
        return quad(x)

    target = pg.Target(flaky, quad_grad, dim=2)
    with pytest.raises(RuntimeError, match="solver failed") as info:
        pg.sample(target, pg.HMC(0.2, 5), n_draws=100, seed=1, warmup=0)
    run = info.value.partial_run
    assert 0 < run.n_draws < 100 and run.stopped.startswith("RuntimeError")
    assert any("exc.partial_run" in n for n in getattr(info.value, "__notes__", []))
    assert np.all(np.isfinite(run.draws))


SLOW_RUN = textwrap.dedent("""
    import sys, time, warnings, numpy as np, phaseglass as pg
    def lp(x):
        time.sleep(0.002)
        return -0.5 * float(x @ x)
    t = pg.Target(lp, lambda x: -x, dim=2)
    print("ready", flush=True)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        run = pg.sample(t, pg.HMC(0.2, 3), n_draws=100000, warmup=int(sys.argv[1]), seed=1)
    print("draws", run.n_draws, "stopped", run.stopped, flush=True)
    print("warning", [str(m.message) for m in w], flush=True)
""")


@pytest.mark.parametrize("warmup", [0, 100000])
def test_ctrl_c_returns_the_finished_draws(tmp_path, warmup):
    script = tmp_path / "slow.py"
    script.write_text(SLOW_RUN)
    proc = subprocess.Popen([sys.executable, str(script), str(warmup)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(2.0)  # some transitions finish (each takes ~4 x 4 x 2 ms)
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 0, err
    draws = int(out.split("draws ")[1].split()[0])
    assert "stopped interrupted" in out
    if warmup:
        assert draws == 0 and "during warm-up" in out and "not included" in out
    else:
        assert draws > 0 and f"after {draws} of 100000 draws per chain" in out


# ------------------------------------------------------------------ views
def log_of_first():
    """A model written with math.log: it raises (not -inf) left of x0 = 0."""
    import math

    return pg.Target(lambda x: math.log(x[0]) - x[0] - 0.5 * x[1] ** 2,
                     lambda x: np.array([1.0 / x[0] - 1.0, -x[1]]), dim=2)


def test_a_log_density_that_raises_in_part_of_the_region_still_opens_the_view():
    # start at x0 = 1 and the default region reaches x0 < 0, where math.log raises: the view
    # opens, the failing part of the contour grid is blank, and the status line says so
    view = pg.TrajectoryView(log_of_first(), start=[1.0, 0.0], xlim=(-2.0, 3.0), ylim=(-2, 2))
    _, _, z = view._grids.grid
    assert np.isnan(z).any() and np.isfinite(z).any()
    assert "raised ValueError (math domain error)" in view.status and "left blank" in view.status


@pytest.mark.parametrize("make", [
    lambda t: pg.ChainView(t, initial=[1.0, 0.0]),
    lambda t: pg.ShiftGibbsView(t),
    lambda t: pg.DivergenceView(t, n_draws=20, warmup=10, background=False),
    lambda t: pg.TuningMap(t, autorun=False),
], ids=["ChainView", "ShiftGibbsView", "DivergenceView", "TuningMap"])
def test_views_open_on_a_model_that_raises_and_say_why(make):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        view = make(log_of_first())
    assert "math domain error" in view.status


@pytest.mark.parametrize("view_type", ["TrajectoryView", "ChainView", "TuningMap"])
def test_from_settings_refuses_a_json_string_or_none(view_type):
    cls = getattr(pg, view_type)
    for bad in ('{"step_size": 0.1}', None):
        with pytest.raises(TypeError, match=r"`settings` must be a dict"):
            cls.from_settings(gauss(), bad)


def test_unknown_settings_keys_are_refused_by_every_view():
    view = pg.ChainView(gauss(), initial=[0.1, 0.2], xlim=(-3, 3), ylim=(-3, 3))
    with pytest.raises(ValueError, match=r"unknown keys \['setp_size'\]"):
        view.apply_settings({"setp_size": 0.1})


@pytest.mark.parametrize("view_type, settings", [
    ("TrajectoryView", {"n_steps": 10**9}),
    ("ChainView", {"n_steps": 10**9}),
    ("TuningMap", {"n_steps": [1, 10**9]}),
])
def test_a_settings_file_with_a_billion_steps_is_refused(view_type, settings):
    cls = getattr(pg, view_type)
    kwargs = {"autorun": False} if view_type == "TuningMap" else {}
    with pytest.raises(Exception, match=r"`n_steps` must"):
        cls.from_settings(gauss(), dict(settings, view=view_type), **kwargs)


def test_a_nan_start_is_refused_by_the_trajectory_view():
    with pytest.raises(traitlets.TraitError, match=r"`start` must be finite"):
        pg.TrajectoryView(gauss(), start=[np.nan, np.nan], xlim=(-3, 3), ylim=(-3, 3))


def test_keeping_every_trajectory_of_a_long_run_warns_with_its_memory(monkeypatch):
    from phaseglass.core import sampling

    monkeypatch.setattr(sampling, "TRAJECTORY_MEMORY_WARNING", 1 << 20)  # 1 MiB for the test
    with pytest.warns(UserWarning, match=r"keep_trajectories=True will hold about .* GiB"):
        pg.sample(gauss(), pg.HMC(0.2, 10), n_draws=2000, n_chains=4, keep_trajectories=True,
                  seed=1, warmup=0)
