"""glibc's malloc thresholds while a variant is computed in a process that set them for trimming.

Dask's nanny starts each worker with ``MALLOC_TRIM_THRESHOLD_=65536`` (its configuration key
``distributed.nanny.pre-spawn-environ``), so that freed memory goes back to the system at once. A
threshold set that way also stops glibc from adapting its mmap threshold: every block over 128 KiB
(a numpy array of more than 16 384 doubles) is then mapped afresh, zero-filled by the kernel page by
page as it is first written, and unmapped when freed. A variant makes and drops such arrays by the
thousand (assembly, field recovery, the report). On the demo busbar the kernel's share went from
1.5 s to 10 s of CPU per variant, and a variant took 1.7x as long in a Dask worker as in a local one.

``roomy_malloc()`` raises both thresholds for the ``with`` block to where glibc's own adaptive rule
tops out (blocks up to 32 MiB come from the heap, which is trimmed past 64 MiB free), then gives the
free memory back (``malloc_trim(0)``) and restores the thresholds the environment set. A process
whose thresholds the environment left alone (a local worker) keeps glibc's adaptive rule, untouched;
so does any process off glibc. The environment read is the one the process started with
(``/proc/self/environ``), which glibc read: the nanny also sets the variable in ``os.environ`` of the
process that starts a ``LocalCluster`` (a notebook), whose malloc was long set up by then.
"""

from __future__ import annotations

import ctypes
import functools
import os
import threading
from contextlib import contextmanager
from typing import Iterator, Mapping

_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3  # mallopt parameters, from glibc's malloc.h
#: where glibc's adaptive mmap threshold stops growing on 64-bit (DEFAULT_MMAP_THRESHOLD_MAX), and
#: the trim threshold it pairs with (twice the mmap threshold)
ROOMY_MMAP_THRESHOLD = 32 * 2**20
ROOMY_TRIM_THRESHOLD = 2 * ROOMY_MMAP_THRESHOLD
_DEFAULT_MMAP_THRESHOLD = 128 * 2**10  # glibc's starting (and fixed, once a threshold is set) value

_lock = threading.Lock()
_inside = 0  # blocks open in this process (a Dask worker may run several variants in threads)


def fixed_thresholds(environ: Mapping[str, str]) -> tuple[int, int] | None:
    """(trim, mmap) thresholds in bytes that ``environ`` fixed for glibc, or None if it set neither.

    Both spellings count: ``MALLOC_TRIM_THRESHOLD_`` / ``MALLOC_MMAP_THRESHOLD_`` and
    ``GLIBC_TUNABLES=glibc.malloc.trim_threshold=...:glibc.malloc.mmap_threshold=...``.
    """
    values = {"trim": environ.get("MALLOC_TRIM_THRESHOLD_"), "mmap": environ.get("MALLOC_MMAP_THRESHOLD_")}
    for item in environ.get("GLIBC_TUNABLES", "").split(":"):
        name, _, value = item.partition("=")
        if name in ("glibc.malloc.trim_threshold", "glibc.malloc.mmap_threshold"):
            values[name.split(".")[-1].split("_")[0]] = value
    parsed = {}
    for name, value in values.items():
        try:
            parsed[name] = int(value, 0) if value is not None else None
        except ValueError:  # glibc ignores what it cannot read
            parsed[name] = None
    if parsed["trim"] is None and parsed["mmap"] is None:
        return None
    mmap = parsed["mmap"] if parsed["mmap"] is not None else _DEFAULT_MMAP_THRESHOLD
    trim = parsed["trim"] if parsed["trim"] is not None else 2 * mmap
    return trim, mmap


@functools.cache
def startup_environment() -> Mapping[str, str]:
    """The environment this process started with (Linux), else the current one."""
    try:
        raw = open("/proc/self/environ", "rb").read()
    except OSError:
        return dict(os.environ)
    pairs = (item.decode(errors="replace").partition("=") for item in raw.split(b"\0") if item)
    return {name: value for name, _, value in pairs}


def _glibc() -> ctypes.CDLL | None:
    try:
        os.confstr("CS_GNU_LIBC_VERSION")
    except (AttributeError, ValueError, OSError):
        return None
    try:
        return ctypes.CDLL(None)
    except OSError:
        return None


def give_back_free_memory() -> None:
    """Return the heap's free pages to the system (glibc's ``malloc_trim(0)``; nothing off glibc).

    Called just before a fork: the pages a fork finds free are otherwise shared copy-on-write, and the first write
    to each, as either process reuses freed memory, copies it; a fresh page costs a cheaper fault. Measured on the
    demo's superposition check (parent and helper each summing half of the sources): the parent's page faults fell
    from about 37 000 to 26 000 after the analysis (check 0.80 -> 0.78 s), and from 28 000 to 15 000 in a process
    that had freed more (a second check: 0.84-0.94 -> 0.70 s)."""
    libc = _glibc()
    if libc is not None:
        libc.malloc_trim(ctypes.c_size_t(0))


def _set(libc: ctypes.CDLL, trim: int, mmap: int) -> None:
    libc.mallopt(_M_MMAP_THRESHOLD, ctypes.c_int(min(mmap, ROOMY_MMAP_THRESHOLD)))
    libc.mallopt(_M_TRIM_THRESHOLD, ctypes.c_int(min(trim, 2**31 - 1)))


@contextmanager
def roomy_malloc() -> Iterator[bool]:
    """Lift thresholds the environment fixed for trimming (see the module docstring) for the block.

    Yields whether anything was changed.
    """
    global _inside
    fixed = fixed_thresholds(startup_environment())
    libc = _glibc() if fixed is not None else None
    if libc is None:
        yield False
        return
    trim, mmap = fixed
    with _lock:
        _inside += 1
        if _inside == 1:
            _set(libc, max(trim, ROOMY_TRIM_THRESHOLD), max(mmap, ROOMY_MMAP_THRESHOLD))
    try:
        yield True
    finally:
        with _lock:
            _inside -= 1
            if _inside == 0:
                _set(libc, trim, mmap)
                libc.malloc_trim(ctypes.c_size_t(0))
