"""compare_kernels: kernels x seeds on one target, here or on any executor, the same numbers.

The executor runs use a ProcessPoolExecutor and a real Dask LocalCluster (two worker
processes on the loopback address, ``dask_client`` in tests/conftest.py). Dask is an
optional extra: its test skips without it, except under CI (``CI=true``), where the test
extra installs it and its absence fails.
"""

import concurrent.futures
import sys
import threading

import numpy as np
import pytest

import phaseglass as pg
from _processes import process_pool
from phaseglass.core.compare import QUANTITIES, pack, run_packed, submit_packed

# small on purpose: CI has two cores
RUN = dict(n_seeds=2, n_draws=40, n_chains=2, warmup=30)


@pytest.fixture
def dask_executor(dask_client):
    return dask_client.get_executor()


@pytest.fixture(scope="module")
def pool():
    with process_pool(2) as ex:
        yield ex


def lambda_target():
    """A target made of lambdas and a closure: plain pickle cannot send it."""
    scale = np.array([2.0, 0.5])
    return pg.Target(lambda x: -0.5 * float(np.sum((x / scale) ** 2)),
                     lambda x: -x / scale ** 2, dim=2)


def kernels():
    return {"HMC 4 steps": pg.HMC(0.3, 4), "HMC 12 steps": pg.HMC(0.3, 12),
            "random walk": pg.RandomWalk(0.8)}


def test_serial_process_pool_and_dask_cluster_give_the_same_cells(pool, dask_executor):
    target = lambda_target()
    with pytest.raises(Exception):  # the premise: plain pickle cannot send this target
        import pickle

        pickle.dumps(target)
    serial = pg.compare_kernels(target, kernels(), seed=7, **RUN)
    on_pool = pg.compare_kernels(target, kernels(), seed=7, executor=pool, **RUN)
    on_dask = pg.compare_kernels(target, kernels(), seed=7, executor=dask_executor, **RUN)
    assert serial.cells["acceptance"].shape == (3, 2)
    assert np.all(np.isfinite(serial.cells["acceptance"]))
    assert np.all(np.isfinite(serial.cells["ESS per gradient"]))
    for other in (on_pool, on_dask):
        assert other.labels == serial.labels
        for q in QUANTITIES:  # bit for bit, cell for cell
            np.testing.assert_array_equal(other.cells[q], serial.cells[q], err_msg=q)
        assert other.same_cells(serial)


def test_seeds_come_from_one_seed_sequence_and_are_shared_by_the_kernels():
    target = pg.demos.correlated_gaussian()
    twins = {"a": pg.HMC(0.25, 6), "b": pg.HMC(0.25, 6), "c": pg.HMC(0.25, 3)}
    c = pg.compare_kernels(target, twins, seed=11, n_seeds=3, n_draws=40, n_chains=2, warmup=0)
    acc = c.cells["acceptance"]
    np.testing.assert_array_equal(acc[0], acc[1])  # seed r of every kernel: the same child
    assert len(set(acc[0])) == 3  # the seeds differ
    assert c.spawn_keys == tuple(s.spawn_key for s in np.random.SeedSequence(11).spawn(3))
    # the same seed (an int, or the same SeedSequence object passed twice) gives the same table
    again = pg.compare_kernels(target, twins, seed=11, n_seeds=3, n_draws=40, n_chains=2, warmup=0)
    assert again.same_cells(c)
    ss = np.random.SeedSequence(11)
    first = pg.compare_kernels(target, twins, seed=ss, n_seeds=3, n_draws=40, n_chains=2, warmup=0)
    second = pg.compare_kernels(target, twins, seed=ss, n_seeds=3, n_draws=40, n_chains=2, warmup=0)
    assert first.same_cells(c) and second.same_cells(c)
    other = pg.compare_kernels(target, twins, seed=12, n_seeds=3, n_draws=40, n_chains=2, warmup=0)
    assert not other.same_cells(c)


def test_cells_measure_the_kernels():
    target = pg.demos.correlated_gaussian()  # smallest sd about 0.32
    ks = {"small step": pg.HMC(0.05, 10, jitter=0.0), "huge step": pg.HMC(3.0, 10, jitter=0.0),
          "walk": pg.RandomWalk(0.5)}
    c = pg.compare_kernels(target, ks, n_seeds=2, n_draws=60, n_chains=2, warmup=0, seed=1)
    # without warm-up the knobs are used as given
    np.testing.assert_array_equal(c.cells["step size"], [[0.05, 0.05], [3.0, 3.0], [0.5, 0.5]])
    assert np.all(c.cells["divergences"][1] > 0) and np.all(c.cells["divergences"][0] == 0)
    assert np.all(c.cells["acceptance"][0] > 0.9) and np.all(c.cells["acceptance"][1] < 0.3)
    moved = c.cells["R-hat max"][[0, 2]]  # (chains stuck at the huge step give no R-hat)
    assert np.all(np.isfinite(moved)) and np.all(moved > 0.9)
    # the table is the mean and sd over seeds of the cells
    row = c.table["huge step"]
    assert row["divergences"][0] == pytest.approx(np.mean(c.cells["divergences"][1]))
    assert row["acceptance"][1] == pytest.approx(np.std(c.cells["acceptance"][1], ddof=1))
    assert c.best("acceptance") == "small step"
    assert c.best("divergences") in ("small step", "walk")
    text = c.summary()
    assert "huge step" in text and "mean \u00b1 sd over seeds" in text and "never prove" in text


def test_sample_settings_per_entry_and_labels_from_knobs():
    target = pg.demos.correlated_gaussian()
    c = pg.compare_kernels(
        target, {"tuned": pg.HMC(0.3, 5), "as given": {"kernel": pg.HMC(0.3, 5), "warmup": 0}},
        n_seeds=1, n_draws=30, n_chains=2, warmup=60, seed=0)
    assert c.cells["step size"][1, 0] == 0.3 and c.cells["step size"][0, 0] != 0.3
    assert c.options[1]["warmup"] == 0 and c.options[0]["warmup"] == 60
    auto = pg.compare_kernels(target, [pg.HMC(0.3, 5), pg.HMC(0.3, 5), pg.RandomWalk(0.5)],
                              n_seeds=1, n_draws=30, n_chains=2, warmup=0)
    assert auto.labels == ("HMC(step_size=0.3, n_steps=5) #1", "HMC(step_size=0.3, n_steps=5) #2",
                           "RandomWalk(scale=0.5)")


def test_a_target_holding_a_lock_or_an_open_file_is_refused_before_anything_runs(tmp_path, pool):
    lock = threading.Lock()
    with_lock = pg.Target(lambda x: (lock, -0.5 * float(x @ x))[1], lambda x: -x, dim=2)
    with pytest.raises(TypeError, match=r"`target` \(Target of .*<lambda>\) cannot be sent .*"
                                        r"lock.*executor=None"):
        pg.compare_kernels(with_lock, [pg.HMC(0.3, 5)], executor=pool, **RUN)
    handle = open(tmp_path / "log.txt", "w")
    try:
        with_file = pg.Target(lambda x: (handle, -0.5 * float(x @ x))[1], lambda x: -x, dim=2)
        with pytest.raises(TypeError, match=r"open file.*Fix: open such resources inside"):
            pg.compare_kernels(with_file, [pg.HMC(0.3, 5)], executor=pool, **RUN)
    finally:
        handle.close()
    # the same targets run here, where nothing has to travel
    assert pg.compare_kernels(with_lock, [pg.HMC(0.3, 5)], **RUN).n_kernels == 1


def test_without_cloudpickle_a_lambda_target_gets_the_fix_in_the_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "cloudpickle", None)  # `import cloudpickle` now fails
    with pytest.raises(TypeError, match=r"`target`.*cloudpickle is not installed.*"
                                        r"install cloudpickle"):
        pack(lambda_target(), "target")
    assert isinstance(pack(pg.HMC(0.3, 5), "kernel"), bytes)  # what plain pickle sends travels


def test_run_packed_calls_the_function_with_the_unpacked_target():
    target = lambda_target()
    out = run_packed(pack(target), pack((lambda t, a, b=0: t.log_density(np.array([a, b])),
                                         (2.0,), {"b": 0.5})))
    assert out == pytest.approx(-0.5 * (1.0 + 1.0))


def test_errors_name_the_argument_and_a_failing_cell_names_itself(pool):
    target = pg.demos.correlated_gaussian()
    with pytest.raises(TypeError, match="`executor` must be None .*concurrent.futures.Executor"):
        pg.compare_kernels(target, [pg.HMC(0.3, 5)], executor="two workers")

    class LooksLikeAClient:
        def get_executor(self):
            return None

    with pytest.raises(TypeError, match=r"client.get_executor\(\)"):
        pg.compare_kernels(target, [pg.HMC(0.3, 5)], executor=LooksLikeAClient())
    with pytest.raises(TypeError, match="`kernels` must be a dict"):
        pg.compare_kernels(target, pg.HMC(0.3, 5))
    with pytest.raises(ValueError, match="`kernels` must hold at least one kernel"):
        pg.compare_kernels(target, {})
    with pytest.raises(TypeError, match="every entry of `kernels` must be a phaseglass kernel"):
        pg.compare_kernels(target, {"x": "HMC"})
    with pytest.raises(ValueError, match="may set 'kernel' and"):
        pg.compare_kernels(target, {"x": {"kernel": pg.HMC(0.3, 5), "n_draws": 5}})
    with pytest.raises(ValueError, match="`n_seeds` must be >= 1"):
        pg.compare_kernels(target, [pg.HMC(0.3, 5)], n_seeds=0)
    with pytest.raises(TypeError, match="`target` must be a phaseglass Target"):
        pg.compare_kernels(lambda x: -x @ x, [pg.HMC(0.3, 5)])

    def log_density(x):
        if x[0] > 1.0:
            raise RuntimeError("model code failed")
        return -0.5 * float(x @ x)

    failing = pg.Target(log_density, lambda x: -x, dim=2)
    for executor in (None, pool):
        with pytest.raises(RuntimeError, match="model code failed") as info:
            pg.compare_kernels(failing, {"wide": pg.HMC(0.5, 10)}, executor=executor, **RUN)
        notes = getattr(info.value, "__notes__", [])
        if sys.version_info >= (3, 11):
            assert any("comparison cell 'wide', seed" in n for n in notes), notes


def test_every_submission_is_distinct_so_cancelling_one_never_cancels_another():
    # Dask merges calls with equal arguments into one task: equal cells of two passes would
    # share it, and cancelling the abandoned pass would cancel the new one's cell too
    class Recorder(concurrent.futures.Executor):
        def __init__(self):
            self.args = []

        def submit(self, fn, *args, **kwargs):
            self.args.append(args)
            fut = concurrent.futures.Future()
            fut.set_result(fn(*args))
            return fut

    ex = Recorder()
    blob = pack(lambda_target())
    a = submit_packed(ex, blob, lambda t, x: t.log_density(np.array(x)), ([1.0, 0.0],))
    b = submit_packed(ex, blob, lambda t, x: t.log_density(np.array(x)), ([1.0, 0.0],))
    assert a.result() == b.result() == pytest.approx(-0.5 * 0.25)
    assert ex.args[0][:1] == ex.args[1][:1] and ex.args[0][2] != ex.args[1][2]


def test_ctrl_c_stops_the_whole_comparison_not_only_the_running_cell():
    calls = []

    def log_density(x):
        calls.append(1)
        if len(calls) == 300:
            raise KeyboardInterrupt  # what Ctrl-C raises in the user's code
        return -0.5 * float(x @ x)

    target = pg.Target(log_density, lambda x: -x, dim=2)
    with pytest.raises(KeyboardInterrupt):
        pg.compare_kernels(target, [pg.RandomWalk(1.0), pg.RandomWalk(0.5)], **RUN)
    assert len(calls) == 300  # no later cell started


def test_former_metric_adaptation_name_warns_and_gives_the_same_cells():
    # issue 12: the mass-matrix shape warm-up estimates is mass_adaptation (metric = a Metric)
    target = pg.demos.correlated_gaussian(2, 0.0, scales=[1.0, 3.0])
    run = dict(n_seeds=1, n_draws=20, n_chains=2, warmup=40, seed=3)
    new = pg.compare_kernels(target, {"a": {"kernel": pg.HMC(0.3, 4), "mass_adaptation": None}},
                             **run)
    with pytest.warns(DeprecationWarning, match="use `mass_adaptation`"):
        old = pg.compare_kernels(target, {"a": {"kernel": pg.HMC(0.3, 4),
                                                "metric_adaptation": None}}, **run)
    with pytest.warns(DeprecationWarning, match="use `mass_adaptation`"):
        shared = pg.compare_kernels(target, {"a": pg.HMC(0.3, 4)}, metric_adaptation=None, **run)
    for q in QUANTITIES:
        np.testing.assert_array_equal(old.cells[q], new.cells[q])
        np.testing.assert_array_equal(shared.cells[q], new.cells[q])
    assert new.options[0]["mass_adaptation"] is None
    # ... and None was honoured: the default diagonal adaptation gives other cells
    default = pg.compare_kernels(target, {"a": pg.HMC(0.3, 4)}, **run)
    assert not all(np.array_equal(default.cells[q], new.cells[q]) for q in QUANTITIES)
