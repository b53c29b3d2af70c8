"""Helpers for the tests that start real processes (``phaseglass demo``, a JupyterLab stand-in).

Importable as ``_processes`` from any test: pyproject.toml puts ``tests`` on pytest's
``pythonpath``, whatever the import mode.
"""

import os


def alive(pid):
    """True while ``pid`` is a running (not zombie) process."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return True


def wait_for(condition, timeout=120.0):
    """Poll ``condition`` until it holds (True) or ``timeout`` seconds pass (False)."""
    import time

    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            return False
        time.sleep(0.02)
    return True


def end_pool(pool):
    """Shut a ProcessPoolExecutor down without waiting, ending its workers.

    For tests whose failure would leave a worker busy for a long time (a run that
    did not stop): waiting for it would hang the suite.
    """
    processes = list((pool._processes or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        proc.terminate()


def process_pool(max_workers):
    """A ProcessPoolExecutor whose workers come from a fork server.

    Forking the test process itself is unsafe once JAX (imported by the autodiff tests)
    has started its threads: Python warns that the fork may deadlock. Work reaches these
    workers pickled, as it reaches a remote cluster.
    """
    import concurrent.futures
    import multiprocessing

    return concurrent.futures.ProcessPoolExecutor(
        max_workers, mp_context=multiprocessing.get_context("forkserver"))


def stopped_growing(path, quiet=0.5):
    """True once the file at ``path`` has not grown for ``quiet`` seconds (a missing file is empty).

    The long-run tests write a byte per evaluation from the worker: a file that stops
    growing means the run has ended.
    """
    import time

    def size():
        return path.stat().st_size if path.exists() else 0

    before = size()
    time.sleep(quiet)
    return size() == before
