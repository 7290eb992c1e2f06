"""Drawing a report's figures beside the rest of the report: in a forked child process where the platform can fork
(Linux), else in a second thread.

matplotlib's import alone takes about half a second, and the figures of a model together about as long as the
superposition check, the VTK file and the HTML: the report stage draws them meanwhile, on another core.
``start_drawing(first, then)`` runs ``first()`` at once; ``Drawing.give(*args)`` hands ``args`` over (the
superposition check and the probe samples, known only later) for ``then(*args)``, run after ``first``;
``Drawing.finish()`` waits and returns both results concatenated (lists of what was drawn). Errors of either are
raised by ``finish``; ``stop`` ends the drawing early (the report failed). The child inherits the analysis when it
is forked (nothing is copied) and returns only the list of files; it ignores Ctrl-C (the parent stops it) and dies
with its parent. Arguments of ``give`` that cannot be pickled stay here: ``then`` runs in this process after the
child's ``first``.
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
from typing import Any, Callable

from .errors import ReportError

Drawn = list  # what ``first`` and ``then`` return: (file, caption) pairs


class Drawing(ABC):
    """Figures being drawn (see the module docstring): in a forked child (``_Child``) or a thread (``_Thread``)."""

    @abstractmethod
    def give(self, *args: Any) -> None:
        """Hand ``args`` over for ``then(*args)``."""

    @abstractmethod
    def finish(self) -> Drawn:
        """Wait; what ``first`` and ``then`` drew, or their error."""

    @abstractmethod
    def stop(self) -> None:
        """End the drawing early (the report failed)."""


_warming: threading.Thread | None = None


def warm_up() -> None:
    """Import matplotlib and the figure modules in a background thread, now: for a process that draws a report's
    figures later and little else (a command-line run). The half second of the import then overlaps the analysis,
    much of which waits for gmsh's child process or runs in compiled code. It leaves out matplotlib's 3D toolkit,
    as the drawing process does."""
    global _warming
    if _warming is None:
        _warming = threading.Thread(target=_import_figures, name="fieldsection-figures-import", daemon=True)
        _warming.start()


def _import_figures() -> None:
    try:
        _without_3d_toolkit()
        for name in ("fieldsection.figures", "fieldsection.figures_superposition", "fieldsection.figures_probes"):
            importlib.import_module(name)
    except Exception:  # noqa: BLE001 - the drawing imports them again and reports what fails
        pass


def start_drawing(first: Callable[[], Drawn], then: Callable[..., Drawn]) -> Drawing:
    """Start ``first()`` in a forked child (Linux) or a thread; ``give(*args)`` adds ``then(*args)``."""
    if _warming is not None:
        _warming.join()  # never fork while that thread may hold the import lock
    if sys.platform == "linux" and not multiprocessing.current_process().daemon:
        return _Child(first, then)
    return _Thread(first, then)  # (a daemonic process may not have children)


class _Thread(Drawing):
    def __init__(self, first, then):
        self._args: list = []
        self._given, self._stopped = threading.Event(), False
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="fieldsection-figures")
        self._future: Future = self._pool.submit(self._run, first, then)

    def _run(self, first, then) -> Drawn:
        drawn = first()
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


class _Child(Drawing):
    def __init__(self, first, then):
        context = multiprocessing.get_context("fork")
        self._then, self._here = then, None
        self._parent, child_end = context.Pipe()
        self._child = context.Process(target=_child, args=(child_end, first, then), daemon=True,
                                      name="fieldsection-figures")
        gc.freeze()  # the child's collections leave the inherited objects alone: their pages stay shared
        try:
            self._child.start()
        finally:
            gc.unfreeze()
        child_end.close()

    def give(self, *args) -> None:
        try:
            self._parent.send(args)
        except OSError:  # the child has already ended (an error of ``first``, sent before): ``finish`` reads it
            pass
        except Exception:  # ``args`` cannot be pickled: ``then`` runs here, after the child's ``first``
            self._here = args
            try:
                self._parent.send(None)
            except OSError:
                pass

    def finish(self) -> Drawn:
        try:
            status, payload = self._parent.recv()
        except EOFError:
            self._child.join()
            code = self._child.exitcode
            cause = f"killed by signal {-code}" if code is not None and code < 0 else f"exit code {code}"
            raise ReportError(f"the process drawing the figures stopped unexpectedly ({cause}); run again, or "
                              "with --no-figures") from None
        finally:
            self._child.join(timeout=2.0)  # (it has sent all it had; it is ending)
            self.stop()
        if status == "error":
            raise payload
        return payload if self._here is None else payload + self._then(*self._here)

    def stop(self) -> None:
        if self._child.is_alive():
            self._child.kill()
        self._child.join()
        self._parent.close()


def _child(connection, first, then) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle: it stops this child
    try:  # and die with the parent, even by SIGKILL
        import ctypes

        ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL)  # 1: PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass
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
        drawn = first()
        reader.join()
        answer = None if not given else ("ok", drawn if given[0] is None else drawn + then(*given[0]))
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
