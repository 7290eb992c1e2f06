"""Drawing a report's figures beside the rest of the report: in a forked child process where the platform can fork
(Linux), else in a second thread.

matplotlib's import alone takes about half a second, and the figures of a model together about as long as the
superposition check, the VTK file and the HTML: the report stage draws them meanwhile, on another core.

``start_drawing(jobs, then)`` starts drawing ``jobs`` (each draws one or more figures and returns what it drew), in
order, at once. ``Drawing.give(*args)`` hands ``args`` over (the superposition check and the probe samples, known
only later) for ``then(*args)``. ``Drawing.finish()`` waits and returns everything drawn, in the order of the jobs
and then ``then``'s. On a small model the child is still drawing when the report's own work is done: ``finish``
then draws what is left here too, the last jobs first while the child takes the next ones (a shared counter hands
each job to one process), and ``then`` here if the child was busy when it was given. Errors of either process are
raised by ``finish``; ``stop`` ends the drawing early (the report failed). The child inherits the analysis when it
is forked (nothing is copied) and returns only the list of files; it ignores Ctrl-C (the parent stops it) and dies
with its parent. Arguments of ``give`` that cannot be pickled stay here: ``then`` runs in this process.
"""

from __future__ import annotations

import gc
import importlib
import multiprocessing
import signal
import sys
import threading
import warnings
from abc import ABC, abstractmethod
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, Callable, Sequence

from .allocator import give_back_free_memory
from .errors import ReportError
from .forked import die_with_parent, hold_forks_for, wait_for_background_threads

Drawn = list  # what a job and ``then`` return: (file, caption) pairs
Job = Callable[[], Drawn]


class Drawing(ABC):
    """Figures being drawn (see the module docstring): in a forked child (``_Child``) or a thread (``_Thread``)."""

    @abstractmethod
    def give(self, *args: Any) -> None:
        """Hand ``args`` over for ``then(*args)``."""

    @abstractmethod
    def finish(self) -> Drawn:
        """Wait (drawing here what the child has not started yet); what the jobs and ``then`` drew, or their error."""

    @abstractmethod
    def stop(self) -> None:
        """End the drawing early (the report failed)."""


def warm_up() -> None:
    """Import matplotlib and the figure modules in a background thread, now: for a process that draws a report's
    figures later and little else (a command-line run). The half second of the import then overlaps the analysis,
    much of which waits for gmsh's child process or runs in compiled code. It leaves out matplotlib's 3D toolkit,
    as the drawing process does, and then freezes the objects made so far (``gc.freeze``: never collected, as a
    run that ends soon needs). Every fork waits for it first (``forked.hold_forks_for``)."""
    global _warmed
    if not _warmed:
        _warmed = True
        thread = threading.Thread(target=_import_figures, name="fieldsection-figures-import", daemon=True)
        thread.start()
        hold_forks_for(thread)


_warmed = False


def _import_figures() -> None:
    gc.freeze()  # (before the import too: its collections then walk only what the import makes)
    try:
        _without_3d_toolkit()
        for name in _FIGURE_MODULES:
            importlib.import_module(name)
    except Exception:  # noqa: BLE001 - the drawing imports them again and reports what fails
        pass
    # the modules' objects (and the analysis's so far) are here to stay in a command-line run: the cyclic garbage
    # collector stops walking them (its full collections took a tenth of a second of a small model's run)
    gc.freeze()


def start_drawing(jobs: Sequence[Job], then: Callable[..., Drawn]) -> Drawing:
    """Start drawing ``jobs`` in a forked child (Linux) or a thread; ``give(*args)`` adds ``then(*args)``."""
    wait_for_background_threads()  # never fork while a thread may hold the import lock
    if sys.platform == "linux" and not multiprocessing.current_process().daemon:
        return _Child(list(jobs), then)
    return _Thread(list(jobs), then)  # (a daemonic process may not have children)


class _Thread(Drawing):
    """All of it in one thread: matplotlib draws one figure at a time in a process."""

    def __init__(self, jobs, then):
        self._args: list = []
        self._given, self._stopped = threading.Event(), False
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="fieldsection-figures")
        self._future: Future = self._pool.submit(self._run, jobs, then)

    def _run(self, jobs, then) -> Drawn:
        drawn = [item for job in jobs for item in job()]
        self._given.wait()
        return drawn if self._stopped else drawn + then(*self._args)

    def give(self, *args) -> None:
        self._args = list(args)
        self._given.set()

    def finish(self) -> Drawn:
        try:
            return self._future.result()
        finally:
            self._pool.shutdown(wait=True)

    def stop(self) -> None:
        self._stopped = True
        self._given.set()
        self._pool.shutdown(wait=True)  # (a figure half drawn is finished: the staging folder goes after this)


_FIGURE_MODULES = ("fieldsection.figures", "fieldsection.figures_superposition", "fieldsection.figures_probes")


def _can_help() -> bool:
    """Whether this process draws some of the figures too: only with the figure modules loaded (``warm_up``)."""
    return all(name in sys.modules for name in _FIGURE_MODULES)


class _Queue:
    """The jobs not yet taken, shared by the two processes: the child takes them from the front, the parent from
    the back."""

    def __init__(self, context, count: int):
        self._ends = context.RawArray("i", [0, count])  # [next from the front, one past the last left]
        self._lock = context.Lock()

    def take(self, front: bool) -> int | None:
        with self._lock:
            first, end = self._ends
            if first >= end:
                return None
            if front:
                self._ends[0] = first + 1
                return first
            self._ends[1] = end - 1
            return end - 1

    def empty(self) -> bool:
        with self._lock:
            return self._ends[0] >= self._ends[1]


class _Child(Drawing):
    def __init__(self, jobs, then):
        context = multiprocessing.get_context("fork")
        self._jobs, self._then, self._here = jobs, then, None
        self._queue = _Queue(context, len(jobs))
        self._parent, child_end = context.Pipe()
        self._child = context.Process(target=_child, args=(child_end, jobs, self._queue, then), daemon=True,
                                      name="fieldsection-figures")
        gc.freeze()  # the child's collections leave the inherited objects alone: their pages stay shared
        give_back_free_memory()  # free pages would be shared copy-on-write, and copied at the first write
        try:
            self._child.start()
        finally:
            gc.unfreeze()
        child_end.close()

    def give(self, *args) -> None:
        # a child still busy with the jobs leaves ``then`` to this process, which is then done with its own work
        # (if the figure modules are loaded here already: their import would cost more than the child's wait)
        keep = _can_help() and not self._queue.empty()
        if not keep:
            try:
                self._parent.send(args)
            except OSError:  # the child has already ended (an error of a job, sent before): ``finish`` reads it
                return
            except Exception:  # ``args`` cannot be pickled: ``then`` runs here
                keep = True
        if keep:
            self._here = args
            try:
                self._parent.send(None)
            except OSError:
                pass

    def finish(self) -> Drawn:
        mine: dict[int, Drawn] = {}
        then_here: Drawn = []
        gc.freeze()  # matplotlib makes many small objects: its collections leave the analysis's many alone
        try:
            if self._here is not None:
                then_here = self._then(*self._here)
            while _can_help() and (index := self._queue.take(front=False)) is not None:  # not started by the child
                mine[index] = self._jobs[index]()
            try:
                status, payload = self._parent.recv()
            except EOFError:
                self._child.join()
                code = self._child.exitcode
                cause = f"killed by signal {-code}" if code is not None and code < 0 else f"exit code {code}"
                raise ReportError(f"the process drawing the figures stopped unexpectedly ({cause}); run again, or "
                                  "with --no-figures") from None
        finally:
            gc.unfreeze()
            self._child.join(timeout=2.0)  # (it has sent all it had; it is ending)
            self.stop()
        if status == "error":
            raise payload
        theirs, then_there = payload
        drawn = {**theirs, **mine}
        return [item for index in sorted(drawn) for item in drawn[index]] + then_there + then_here

    def stop(self) -> None:
        if self._child.is_alive():
            self._child.kill()
        self._child.join()
        self._parent.close()


def _child(connection, jobs, queue: _Queue, then) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle: it stops this child
    die_with_parent(multiprocessing.parent_process().pid)
    _without_3d_toolkit()
    given: list = []

    def receive() -> None:  # at once, so that the parent's ``give`` never waits for a full pipe to drain
        try:
            given.append(connection.recv())
        except (EOFError, OSError):  # the parent is gone or gave up
            pass

    reader = threading.Thread(target=receive, daemon=True)
    reader.start()
    try:
        drawn = {}
        while (index := queue.take(front=True)) is not None:
            drawn[index] = jobs[index]()
        reader.join()
        answer = None if not given else ("ok", (drawn, [] if given[0] is None else then(*given[0])))
    except BaseException as exc:
        answer = ("error", exc if _picklable(exc) else ReportError(f"drawing the figures failed: "
                                                                   f"{type(exc).__name__}: {exc}"))
    try:
        if answer is not None:
            connection.send(answer)
    except OSError:  # the parent is gone or gave up
        pass
    finally:
        connection.close()


def _without_3d_toolkit() -> None:
    """Keep matplotlib from importing its 3D toolkit (a tenth of a second; it only registers a projection that the
    figures never use): in the drawing process alone, which ends with the report."""
    if "matplotlib.projections" in sys.modules:
        return
    sys.modules.setdefault("mpl_toolkits.mplot3d", None)  # (None: "not importable", as Python's import system reads it)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # matplotlib warns that the 3D projection is not available
        importlib.import_module("matplotlib.projections")


def _picklable(exc: BaseException) -> bool:
    import pickle

    try:
        pickle.loads(pickle.dumps(exc))
    except Exception:
        return False
    return True
