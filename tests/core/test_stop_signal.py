"""Runs already going on an executor's workers stop when their results are no longer wanted.

Each run here would take minutes to finish (10**7 transitions); its target appends one
byte to a file per log-density evaluation, so the file's size tells, across processes,
how far the run got. A run that stopped has a small file and ends with CellAborted. The
executors are a ProcessPoolExecutor and a real Dask LocalCluster (``dask_client`` in
tests/conftest.py: two worker processes on the loopback address).
"""

import concurrent.futures
import pickle

import numpy as np
import pytest

import phaseglass as pg
from _processes import end_pool, process_pool, stopped_growing, wait_for
from phaseglass.core.compare import pack, run_fixed_portable, submit_packed
from phaseglass.core.stop_signal import CellAborted, StopSignal, stopping_when

ENDLESS = 10 ** 7  # transitions: about an hour at file-append speed, so only a stop ends it


def counting_target(path, fail_beyond=np.inf):
    """A standard 2-D normal writing a byte to ``path`` per evaluation; raises past ``fail_beyond``."""
    def log_density(x):
        with open(path, "a") as f:
            f.write(".")
        if abs(x[0]) > fail_beyond:
            raise RuntimeError("the model failed far out")
        return -0.5 * float(x @ x)

    return pg.Target(log_density, lambda x: -x, dim=2)


def evaluations(path):
    return path.stat().st_size if path.exists() else 0



@pytest.fixture
def pool():
    ex = process_pool(2)
    yield ex
    end_pool(ex)  # a run that failed to stop would hold a worker for an hour


def stops_a_running_cell(executor, path):
    signal = StopSignal(executor)
    fut = submit_packed(executor, pack(counting_target(path)), run_fixed_portable,
                        (pg.RandomWalk(0.8),),
                        {"n_draws": ENDLESS, "n_chains": 1, "seed": 0, "should_abort": signal.watch})
    assert wait_for(lambda: evaluations(path) > 200), "the cell never started"
    signal.set()
    with pytest.raises(CellAborted):
        fut.result(timeout=300)
    assert evaluations(path) < ENDLESS // 100  # it stopped long before its end


def test_a_cell_running_in_a_process_pool_stops_when_asked(pool, tmp_path):
    stops_a_running_cell(pool, tmp_path / "calls")


def test_a_cell_running_on_a_dask_cluster_stops_when_asked(dask_client, tmp_path):
    stops_a_running_cell(dask_client.get_executor(), tmp_path / "calls")


def test_a_failing_cell_stops_the_other_running_cells_of_a_comparison(pool, tmp_path):
    path = tmp_path / "calls"
    target = counting_target(path, fail_beyond=50.0)
    kernels = {"runs for an hour": pg.RandomWalk(0.5), "fails at once": pg.RandomWalk(1e4)}
    with pytest.raises(RuntimeError, match="the model failed far out"):
        pg.compare_kernels(target, kernels, n_seeds=1, n_draws=ENDLESS, n_chains=1, warmup=0,
                           executor=pool)
    assert wait_for(lambda: stopped_growing(path)), "the long cell is still running"
    assert evaluations(path) < ENDLESS // 100


def test_sampling_gives_up_with_cell_aborted_when_its_check_says_so():
    calls = []

    def check():
        calls.append(1)
        return len(calls) > 25

    with stopping_when(check), pytest.raises(CellAborted) as info:
        pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 5), n_draws=100, n_chains=2,
                  warmup=10, seed=1)
    assert len(calls) == 26  # checked before every transition, warm-up included
    assert not hasattr(info.value, "partial_run")  # not reported as a failure of the model
    # outside the block nothing is checked
    assert pg.sample(pg.demos.correlated_gaussian(), pg.HMC(0.3, 5), n_draws=5, n_chains=2,
                     warmup=0, seed=1).n_draws == 5


def test_the_watch_travels_without_its_state_and_an_unreachable_signal_never_stops_a_run(tmp_path):
    signal = StopSignal(concurrent.futures.ThreadPoolExecutor(1))
    watch = signal.watch
    assert watch() is False
    signal.set()
    # polled at most every POLL_EVERY seconds: a copy made now looks at once and sees it
    assert pickle.loads(pickle.dumps(watch))() is True
    # a Dask watch outside any Dask client or worker cannot look, so it never stops the run
    from phaseglass.core.stop_signal import _EventWatch

    assert _EventWatch("phaseglass-stop-nowhere")() is False
