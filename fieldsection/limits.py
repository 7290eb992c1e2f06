"""Bounds on gmsh's child process: how long it may run and how much memory it may take for itself.

gmsh reads the geometry script and meshes in a forked child process (``gmsh_adapter._isolated``),
which the parent stops when it passes either bound. The defaults are ``gmsh_adapter``'s
``MESHING_TIME_LIMIT`` and ``MESHING_MEMORY_SHARE``; ``gmsh_limits`` overrides them for the calls
made inside it (the CLI's ``--time-limit``)::

    with gmsh_limits(seconds=60):
        result = analyse(case)

Memory is what the child's anonymous memory (resident or swapped, from ``/proc/<pid>/status``) grew
by since the fork: the parent's pages it inherited are not counted, nor are the address-space
reservations of numerical libraries (an ``RLIMIT_AS`` on the child would count those and fail normal
runs). ``/proc/<pid>/smaps_rollup`` would count exactly the pages the child holds alone, but reading
it takes tens of milliseconds on a large process, at every check.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator


@dataclass(frozen=True)
class GmshLimits:
    """``None`` leaves a bound at its default."""

    seconds: float | None = None
    memory_bytes: int | None = None


_CURRENT: ContextVar[GmshLimits] = ContextVar("gmsh_limits", default=GmshLimits())


@contextmanager
def gmsh_limits(seconds: float | None = None, memory_bytes: int | None = None) -> Iterator[GmshLimits]:
    """Bound gmsh's child processes started inside the ``with`` block (``None`` keeps the bound in force)."""
    for name, value in (("seconds", seconds), ("memory_bytes", memory_bytes)):
        if value is not None and not value > 0:
            raise ValueError(f"gmsh limit {name} = {value!r} must be positive")
    outer = _CURRENT.get()
    limits = GmshLimits(outer.seconds if seconds is None else float(seconds),
                        outer.memory_bytes if memory_bytes is None else int(memory_bytes))
    token = _CURRENT.set(limits)
    try:
        yield limits
    finally:
        _CURRENT.reset(token)


def current_gmsh_limits() -> GmshLimits:
    return _CURRENT.get()


def machine_memory() -> int:
    """Bytes of memory this process may use: the physical memory, or a smaller container (cgroup) limit."""
    total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    for limit in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            value = Path(limit).read_text().strip()
        except OSError:
            continue
        if value.isdigit() and 0 < int(value) < total:
            total = int(value)
    return total


def anonymous_memory(pid: int) -> int:
    """Bytes of anonymous memory (resident or swapped) of process ``pid``; 0 if it cannot be read."""
    try:
        status = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return 0
    return 1024 * sum(int(line.split()[1]) for line in status.splitlines() if line.startswith(("RssAnon:", "VmSwap:")))
