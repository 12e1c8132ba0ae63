"""Stopping a run on a signal without leaving half-written files behind.

Two tools, used by the store writer and the command line:

- :func:`signals_deferred`: a block (cleanup: waiting for in-flight writes, removing a temporary
  store) that a Ctrl-C or a ``kill`` cannot cut in half. A SIGINT or SIGTERM arriving inside it
  is held and delivered, to whatever handler was in place, when the block ends.
- :func:`ctrl_c_for_this_process_only`: worker processes started inside the block never see
  SIGINT, so a Ctrl-C (which a terminal sends to every process of the foreground job) reaches
  only the run, which stops its workers in order: one line, no worker tracebacks.
- :func:`stop_on_signals`: SIGTERM (what batch schedulers send at a time limit) stops a run the
  way Ctrl-C does, by raising :class:`Stopped` (a ``KeyboardInterrupt``) in the main thread, so
  every ``except BaseException`` cleanup runs alike for both.

Signal handlers can only be changed from the main thread; elsewhere both are no-ops (signals are
delivered to the main thread only, so other threads are never interrupted by them).
"""

from __future__ import annotations

import contextlib
import signal
import threading

__all__ = ["Stopped", "signals_deferred", "stop_on_signals", "ctrl_c_for_this_process_only", "EXIT_CODES"]

_SIGNALS = (signal.SIGINT, signal.SIGTERM)

#: Shell convention: 128 + the signal number (130 for SIGINT, 143 for SIGTERM).
EXIT_CODES = {signal.SIGINT: 130, signal.SIGTERM: 143}


class Stopped(KeyboardInterrupt):
    """A run was stopped by a signal (``signum``: SIGINT for Ctrl-C, SIGTERM for ``kill``)."""

    def __init__(self, signum: int = signal.SIGINT):
        super().__init__(signal.Signals(signum).name)
        self.signum = int(signum)

    @property
    def exit_code(self) -> int:
        return EXIT_CODES.get(self.signum, 128 + self.signum)


def _main_thread() -> bool:
    return threading.current_thread() is threading.main_thread()


@contextlib.contextmanager
def signals_deferred():
    """Hold SIGINT and SIGTERM for the duration of the block, then deliver them.

    The signals that arrived are re-raised (with :func:`signal.raise_signal`) once the original
    handlers are back, so a Ctrl-C during cleanup still stops the program, just not half-way
    through the cleanup.
    """
    if not _main_thread():
        yield
        return
    held: list[int] = []
    previous = {}
    try:
        for sig in _SIGNALS:
            previous[sig] = signal.signal(sig, lambda signum, frame: held.append(signum))
    except ValueError:  # not the main interpreter
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        yield
        return
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)
        for sig in dict.fromkeys(held):
            signal.raise_signal(sig)


@contextlib.contextmanager
def stop_on_signals():
    """Within the block, SIGINT and SIGTERM raise :class:`Stopped` in the main thread (a signal
    that is ignored on entry, as SIGINT is for a job a shell started in the background, stays so)."""
    if not _main_thread():
        yield
        return

    def stop(signum, frame):
        raise Stopped(signum)

    # a signal ignored when the program started stays ignored (a background job's SIGINT)
    previous = {sig: signal.signal(sig, stop) for sig in _SIGNALS if signal.getsignal(sig) != signal.SIG_IGN}
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler if handler is not None else signal.SIG_DFL)


@contextlib.contextmanager
def ctrl_c_for_this_process_only():
    """Block SIGINT in this thread for the duration of the block; processes and threads started
    inside it keep SIGINT blocked for good, this thread gets it back (and a Ctrl-C pressed
    meanwhile is delivered, not lost) when the block ends.

    A terminal sends Ctrl-C to every process of the foreground job, worker processes included;
    a worker that takes it dies mid-task with a traceback of its own (and leaves semaphores to
    the resource tracker). A blocked signal stays blocked across ``fork`` and ``exec`` and in
    threads started by a thread that blocks it, so workers spawned here (by the cluster's own
    threads, which are started here too) never take it: the run stops them in order instead.
    A no-op where signal masks do not exist.
    """
    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    from multiprocessing import resource_tracker

    # started here first: starting it unblocks SIGINT in the thread that starts it (bpo-33613's
    # guard), which inside the block would be the thread that spawns the workers
    resource_tracker.ensure_running()
    signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})
