"""Stopping runs that already execute on an executor's workers.

Cancelling a future only drops work that has not started. A run that has
started polls a ``StopSignal`` between transitions and gives up with
``CellAborted`` once the signal is raised. How the signal travels depends on
the executor:

* a Dask executor (``Client.get_executor()``): a ``distributed.Event`` on the
  scheduler, which every worker of the cluster can see, local or remote;
* any other executor (``ProcessPoolExecutor``, ``ThreadPoolExecutor``, ...): a
  flag file in a temporary folder of this machine, which workers sharing its
  file system see. Workers on other machines cannot, and a run already going
  there finishes; its result is then ignored.

The poll is throttled (``POLL_EVERY`` seconds), so a run stops within that time
plus one transition, and the check costs nothing measurable per transition.
"""

import contextlib
import contextvars
import os
import time
import uuid

__all__ = ["CellAborted", "StopSignal", "stopping_when", "check_stop", "POLL_EVERY"]

#: Seconds between two looks at a stop signal from a running cell.
POLL_EVERY = 0.1


class CellAborted(Exception):
    """A run was abandoned because its results are no longer wanted (Stop, an error elsewhere)."""


_CHECK = contextvars.ContextVar("phaseglass_stop_check", default=None)


@contextlib.contextmanager
def stopping_when(check):
    """Within the block, every sampler transition first calls ``check()``; True aborts the run.

    ``check`` may be None (nothing is checked). The sampler calls ``check_stop``.
    """
    token = _CHECK.set(check)
    try:
        yield
    finally:
        _CHECK.reset(token)


def check_stop():
    """Raise ``CellAborted`` when the check set by ``stopping_when`` says so."""
    check = _CHECK.get()
    if check is not None and check():
        raise CellAborted


class StopSignal:
    """A stop request raised here and seen by runs on ``executor``'s workers.

    Parameters
    ----------
    executor : concurrent.futures.Executor

    Attributes
    ----------
    watch : callable
        Picklable; send it with the work. ``watch()`` is True once ``set`` has been
        called (polled at most every ``POLL_EVERY`` seconds, False while the signal
        cannot be seen from where it runs).
    """

    def __init__(self, executor):
        self.raised = False
        self._event = None
        if type(executor).__module__.split(".")[0] == "distributed":
            from distributed import Event

            self._event = Event(f"phaseglass-stop-{uuid.uuid4().hex}",
                                client=getattr(executor, "_client", None))
            self.watch = _EventWatch(self._event.name)
        else:
            self._path = os.path.join(_flag_folder(), uuid.uuid4().hex)
            self.watch = _FileWatch(self._path)

    def set(self):
        """Ask every run holding ``watch`` to stop (once; later calls do nothing)."""
        if self.raised:
            return
        self.raised = True
        if self._event is not None:
            self._event.set()
        else:
            with open(self._path, "w"):
                pass


class _Watch:
    """Throttled poll of a stop signal; a failing poll counts as "not stopped"."""

    def __init__(self, key):
        self.key = key
        self._seen = False
        self._next = 0.0

    def __call__(self):
        if self._seen:
            return True
        now = time.monotonic()
        if now < self._next:
            return False
        self._next = now + POLL_EVERY
        try:
            self._seen = bool(self._poll())
        except Exception:  # the channel is not reachable from here: keep running
            self._seen = False
        return self._seen

    def __getstate__(self):  # only the key travels; timers and connections are per process
        return {"key": self.key}

    def __setstate__(self, state):
        self.__init__(state["key"])


class _FileWatch(_Watch):
    def _poll(self):
        return os.path.exists(self.key)


class _EventWatch(_Watch):
    def __init__(self, key):
        super().__init__(key)
        self._event = None

    def _poll(self):
        if self._event is None:
            from distributed import Event

            self._event = Event(self.key)  # the worker's (or this process's) client
        return self._event.is_set()


_FOLDER = []


def _flag_folder():
    """This process's folder for flag files, removed when the process exits."""
    if not _FOLDER:
        import atexit
        import shutil
        import tempfile

        folder = tempfile.mkdtemp(prefix="phaseglass-stop-")
        atexit.register(shutil.rmtree, folder, ignore_errors=True)
        _FOLDER.append(folder)
    return _FOLDER[0]
