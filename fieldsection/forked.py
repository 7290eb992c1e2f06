"""A second core for one piece of work: ``helper_call(work, *args)`` runs ``work(*args)`` in a forked child process
while this process goes on with its own share; ``HelperCall.result()`` waits for the value.

The child inherits everything at the fork (nothing is copied or pickled on the way in) and sends back only its
value. It ignores Ctrl-C (its parent stops it), dies with its parent (Linux's PR_SET_PDEATHSIG) and is always
reaped. A helper is a speed-up, never a condition of the run: where no second core or no fork is at hand
(``helpers_available``), or when the child fails or dies, ``result()`` returns None and the caller does that share
itself.
"""

from __future__ import annotations

import multiprocessing
import os
import signal
import sys
import threading
from typing import Any, Callable

from .allocator import give_back_free_memory

_background: list[threading.Thread] = []


def hold_forks_for(thread: threading.Thread) -> None:
    """Make every later fork wait for ``thread`` to end first (a thread importing modules holds Python's import
    lock, which a forked child would inherit locked)."""
    _background.append(thread)


def wait_for_background_threads() -> None:
    while _background:
        _background.pop().join()


def die_with_parent(parent: int) -> None:
    """Ask Linux to kill this process when ``parent`` dies (even by SIGKILL, which leaves the parent no say)."""
    try:
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
    if os.getppid() != parent:  # the parent died before the request was made
        os._exit(1)


def fork_child(body: Callable[[], None], *close_in_child: Any) -> int:
    """Fork a child that closes ``close_in_child`` (the parent's ends of its pipes), ignores Ctrl-C (its parent
    stops it), dies with its parent, runs ``body()`` and exits: 0 if ``body`` returned, 1 if it raised (never
    returning into the parent's code). Returns the child's process id, for ``reap``.

    A plain fork rather than ``multiprocessing.Process``, which refuses to start from a daemonic process (a Dask
    worker, a process pool's worker); the child needs none of its bookkeeping."""
    parent = os.getpid()
    give_back_free_memory()  # free pages would be shared copy-on-write, and copied at the first write
    pid = os.fork()
    if pid == 0:
        code = 1
        try:
            for end in close_in_child:
                end.close()
            signal.signal(signal.SIGINT, signal.SIG_IGN)
            die_with_parent(parent)
            body()
            code = 0
        finally:
            os._exit(code)
    return pid


def reap(pid: int) -> int:
    """Wait for the child ``pid`` to end: its exit code, or minus the signal that ended it."""
    return os.waitstatus_to_exitcode(os.waitpid(pid, 0)[1])


def helpers_available() -> bool:
    """Whether a helper process would run beside this one: Linux (a safe fork), at least two cores for this
    process, and not a worker of a pool or cluster (whose cores the other workers use already)."""
    if sys.platform != "linux" or multiprocessing.current_process().daemon:
        return False
    return len(os.sched_getaffinity(0)) >= 2


class HelperCall:
    """``work(*args)`` in a forked child; see the module docstring."""

    def __init__(self, work: Callable[..., Any], *args: Any):
        wait_for_background_threads()
        self._receiver, sender = multiprocessing.Pipe(duplex=False)

        def body() -> None:
            try:
                sender.send(work(*args))
            finally:
                sender.close()

        try:
            self._pid = fork_child(body, self._receiver)
        except OSError:  # the system refused the fork
            self._receiver.close()
            raise
        finally:
            sender.close()

    def result(self) -> Any | None:
        """The child's value; None if it failed or died (the caller then does the work itself)."""
        try:
            return self._receiver.recv()
        except (EOFError, OSError):
            return None
        finally:
            self.cancel()

    def cancel(self) -> None:
        """Stop the child if it still runs, and reap it."""
        if self._pid is None:
            return
        try:
            os.kill(self._pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        reap(self._pid)
        self._pid = None
        self._receiver.close()


def helper_call(work: Callable[..., Any], *args: Any) -> HelperCall | None:
    """Start ``work(*args)`` in a helper process, or None where none is available (``helpers_available``) or the
    system refuses one (no process or pipe to spare): the caller then does the work itself."""
    if not helpers_available():
        return None
    try:
        return HelperCall(work, *args)
    except OSError:
        return None
