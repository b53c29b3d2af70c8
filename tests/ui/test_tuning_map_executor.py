"""TuningMap(executor=...): cells as futures, the same numbers as computed here, Stop cancels.

A ProcessPoolExecutor and a real Dask LocalCluster (two worker processes on the loopback
address) compute tiny maps; a held executor (futures that only finish when the test says
so) checks progress and Stop without timing. The cluster is ``dask_client`` in
tests/conftest.py (Dask is an optional extra: skipped without it, except under CI).
"""

import concurrent.futures
import os

import numpy as np
import pytest

import phaseglass as pg
from _processes import end_pool, process_pool, stopped_growing, wait_for
from phaseglass.ui.tuning_map import TuningMap

# a 2 x 2 map of short runs: CI has two cores
MAP = dict(step_sizes=[0.2, 0.6], n_steps=[2, 6], n_draws=30, n_chains=2, burn_in=3, seed=4,
           autorun=False)


def lambda_target():
    """Lambdas and a closure: plain pickle cannot send this target, cloudpickle can."""
    scale = np.array([1.5, 0.5])
    return pg.Target(lambda x: -0.5 * float(np.sum((x / scale) ** 2)),
                     lambda x: -x / scale ** 2, dim=2)


def test_serial_process_pool_and_dask_cluster_fill_the_same_cells(dask_client):
    target = lambda_target()
    serial = TuningMap(target, **MAP).compute(background=False)
    assert serial.n_done == 4 and np.all(np.isfinite(serial.values["acceptance"]))
    maps = []
    with process_pool(2) as pool:
        maps.append(TuningMap(target, executor=pool, **MAP).compute(background=False))
        in_background = TuningMap(target, executor=pool, **MAP).compute()
        assert in_background.wait(timeout=300)
        maps.append(in_background)
    maps.append(TuningMap(target, executor=dask_client.get_executor(), **MAP)
                .compute(background=False))
    for m in maps:
        assert m.n_done == m.n_cells == 4
        assert m._progress.value == 4 and m._progress.bar_style == "success"
        assert m.status == ""
        for q, v in serial.values_all.items():  # bit for bit, cell for cell
            np.testing.assert_array_equal(m.values_all[q], v, err_msg=q)
        assert m.best_cell() == serial.best_cell()


def test_partial_refresh_slices_and_a_mass_matrix_travel_too():
    target = pg.demos.correlated_gaussian()
    kw = dict(MAP, kernel_kind="partial", persistence=[0.0, 0.9], step_sizes=[0.3], n_steps=[3],
              mass_matrix=pg.Metric([2.0, 0.5]))
    serial = TuningMap(target, **kw).compute(background=False)
    with process_pool(2) as pool:
        remote = TuningMap(target, executor=pool, **kw).compute(background=False)
    assert serial.values_all["acceptance"].shape == (2, 1, 1)
    for q, v in serial.values_all.items():
        np.testing.assert_array_equal(remote.values_all[q], v, err_msg=q)



class HeldExecutor(concurrent.futures.Executor):
    """Futures that stay pending until ``finish(n)`` runs the first n calls here."""

    def __init__(self):
        self.calls = []  # (future, fn, args)

    def submit(self, fn, *args, **kwargs):
        fut = concurrent.futures.Future()
        self.calls.append((fut, fn, args))
        return fut

    def finish(self, n):
        for fut, fn, args in self.calls[:n]:
            if fut.set_running_or_notify_cancel():
                fut.set_result(fn(*args))


def test_progress_counts_finished_futures_and_stop_cancels_the_pending_ones():
    held = HeldExecutor()
    m = TuningMap(lambda_target(), executor=held, **MAP).compute()
    assert wait_for(lambda: len(held.calls) == 4)  # every cell submitted (after the pilot)
    assert m.running
    assert "computing on HeldExecutor's workers" in m._readout.value
    held.finish(1)
    assert wait_for(lambda: m.n_done == 1 and m._progress.value == 1)  # the readout follows the cell
    assert m.n_done == 1 and m._progress.value == 1 and not m._stop_button.disabled
    m.stop()
    assert m.wait(timeout=60)
    assert [f.cancelled() for f, _, _ in held.calls] == [False, True, True, True]
    assert m.n_done == 1 and int(np.isfinite(m.values_all["acceptance"]).sum()) == 1
    assert m._stop_button.disabled and not m._run_button.disabled
    assert m._progress.bar_style == "warning"
    # the finished cell equals the serial one
    serial = TuningMap(lambda_target(), **MAP).compute(background=False)
    done = np.isfinite(m.values_all["acceptance"])
    np.testing.assert_array_equal(m.values_all["acceptance"][done],
                                  serial.values_all["acceptance"][done])
    # resume submits only the three cells still missing
    held2 = HeldExecutor()
    m.executor = held2
    m.compute(resume=True)
    assert wait_for(lambda: len(held2.calls) == 3)
    held2.finish(3)
    assert m.wait(timeout=60)
    for q, v in serial.values_all.items():
        np.testing.assert_array_equal(m.values_all[q], v, err_msg=q)


def test_a_settings_change_cancels_the_pending_futures():
    held = HeldExecutor()
    m = TuningMap(lambda_target(), executor=held, **MAP).compute()
    assert wait_for(lambda: len(held.calls) == 4)
    first = [f for f, _, _ in held.calls]
    m.n_draws = 24  # autorun=False: the old pass is abandoned, nothing new starts
    assert wait_for(lambda: all(f.cancelled() for f in first))
    assert m.n_done == 0


def test_a_target_that_cannot_travel_is_refused_when_the_map_is_built(tmp_path):
    handle = open(tmp_path / "log.txt", "w")
    try:
        target = pg.Target(lambda x: (handle, -0.5 * float(x @ x))[1], lambda x: -x, dim=2)
        with pytest.raises(TypeError, match=r"`target` .*cannot be sent.*open file.*"
                                            r"executor=None"):
            TuningMap(target, executor=HeldExecutor(), **MAP)
    finally:
        handle.close()
    with pytest.raises(TypeError, match="`executor` must be None"):
        TuningMap(lambda_target(), executor=2, **MAP)


def test_a_cell_failing_on_a_worker_lands_in_the_status_line():
    def log_density(x):
        raise RuntimeError("model code failed")

    target = pg.Target(log_density, lambda x: -x, dim=2)
    with process_pool(1) as pool:
        m = TuningMap(target, executor=pool, **dict(MAP, step_sizes=[0.3], n_steps=[2]))
        m.compute(background=False)
    assert m.n_done == 1 and m._state[0, 0, 0] == 2  # failed, left blank
    assert "model code failed" in m.status and "step size 0.3" in m.status


def test_a_new_pass_on_dask_is_not_cancelled_with_the_abandoned_one(dask_client):
    # Dask merges calls with equal arguments into one task; without a token per submission
    # the first pass's cancelled cells took the second pass's identical cells with them
    # (seen: 0 of 9 cells done after wait())
    serial = TuningMap(lambda_target(), **MAP).compute(background=False)
    m = TuningMap(lambda_target(), executor=dask_client.get_executor(), **MAP)
    m.compute()
    m.compute()
    assert m.wait(timeout=300)
    assert m.n_done == 4
    for q, v in serial.values_all.items():
        np.testing.assert_array_equal(m.values_all[q], v, err_msg=q)


def test_stop_ends_a_cell_already_running_on_a_worker(tmp_path):
    # one cell of 10**7 transitions (about an hour); its target writes a byte per evaluation
    # made on a worker, so the file's size shows whether the cell still runs after Stop
    path, here = tmp_path / "worker-calls", os.getpid()

    def log_density(x):
        if os.getpid() != here:
            with open(path, "a") as f:
                f.write(".")
        return -0.5 * float(x @ x)

    def grad(x):
        if os.getpid() != here:
            with open(path, "a") as f:
                f.write(".")
        return -x

    def size():
        return path.stat().st_size if path.exists() else 0

    pool = process_pool(1)
    try:
        m = TuningMap(pg.Target(log_density, grad, dim=2), executor=pool,
                      **dict(MAP, step_sizes=[0.3], n_steps=[2], n_draws=10 ** 7, n_chains=1))
        m.compute()
        assert wait_for(lambda: size() > 200), "the cell never started on the worker"
        m.stop()
        assert m.wait(timeout=60)
        assert wait_for(lambda: stopped_growing(path)), "the cell still runs on its worker"
        assert size() < 10 ** 5 and m.n_done == 0  # stopped long before its end, left blank
        assert m._progress.bar_style == "warning"
    finally:
        end_pool(pool)  # a cell that failed to stop would hold the worker for an hour
