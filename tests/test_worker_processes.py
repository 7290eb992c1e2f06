"""Computing inside worker processes: meshing from a daemonic process, and the malloc thresholds a Dask
nanny sets.

A Dask worker and a ``multiprocessing.Pool`` worker are daemonic (the Python documentation of
``multiprocessing.Process.daemon``: a daemonic process may not create child processes, and Pool workers
are daemonic). The meshing child must still start there, and still die with its parent.

Dask's nanny starts workers with ``MALLOC_TRIM_THRESHOLD_=65536`` (distributed's default configuration,
``distributed.nanny.pre-spawn-environ``). glibc's mallopt(3) manual: setting a threshold disables the
dynamic adjustment of the mmap threshold, so each allocation of at least 128 KiB (M_MMAP_THRESHOLD's
default) is a fresh mapping whose pages fault in again on every use. The checks count those page faults
(a count, not a time) in a fresh interpreter with the environment of a Dask worker.
"""

from __future__ import annotations

import json
import multiprocessing
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fieldsection import gmsh_adapter
from fieldsection.allocator import (ROOMY_MMAP_THRESHOLD, ROOMY_TRIM_THRESHOLD, fixed_thresholds, roomy_malloc,
                                    startup_environment)

ROOT = Path(__file__).resolve().parent.parent


def _glibc() -> bool:
    try:
        return bool(os.confstr("CS_GNU_LIBC_VERSION"))
    except (AttributeError, ValueError, OSError):
        return False


@pytest.mark.parametrize("environ, expected", [
    ({}, None),
    ({"MALLOC_TRIM_THRESHOLD_": "65536"}, (65536, 128 * 1024)),  # Dask's nanny; glibc's default mmap threshold
    ({"MALLOC_MMAP_THRESHOLD_": "1048576"}, (2 * 1048576, 1048576)),
    ({"GLIBC_TUNABLES": "glibc.malloc.arena_max=2:glibc.malloc.trim_threshold=0x20000"}, (0x20000, 128 * 1024)),
    ({"MALLOC_TRIM_THRESHOLD_": "lots"}, None),  # unreadable: glibc ignores it too
    ({"GLIBC_TUNABLES": "glibc.malloc.arena_max=2"}, None),
])
def test_thresholds_fixed_by_the_environment(environ, expected):
    assert fixed_thresholds(environ) == expected


_FAULTS = """
import json, resource
import numpy as np
from fieldsection.allocator import roomy_malloc

def faults(repeats=400):
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(repeats):
        block = np.ones(2**17)  # 1 MiB, over glibc's fixed mmap threshold of 128 KiB
        del block
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before

outside = faults()
with roomy_malloc() as changed:
    inside = faults()
after = faults()
print(json.dumps({"changed": changed, "outside": outside, "inside": inside, "after": after}))
"""


def _page_faults(**environ: str) -> dict:
    env = {k: v for k, v in os.environ.items() if not k.startswith("MALLOC_") and k != "GLIBC_TUNABLES"}
    env.update(environ, PYTHONPATH=str(ROOT))
    done = subprocess.run([sys.executable, "-c", _FAULTS], env=env, cwd=ROOT, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


@pytest.mark.skipif(not _glibc(), reason="glibc's malloc only")
def test_a_variant_in_a_dask_worker_reuses_its_memory():
    counts = _page_faults(MALLOC_TRIM_THRESHOLD_="65536")
    pages = 400 * 2**20 // 4096  # each 1 MiB block faults its 256 pages in again
    assert counts["changed"] is True
    assert counts["outside"] > 0.8 * pages
    assert counts["inside"] < 0.05 * pages  # the heap keeps the block: its pages fault in once
    assert counts["after"] > 0.8 * pages  # the worker's own setting is back after the block


@pytest.mark.skipif(not _glibc(), reason="glibc's malloc only")
def test_a_local_worker_keeps_glibcs_adaptive_thresholds():
    counts = _page_faults()
    pages = 400 * 2**20 // 4096
    assert counts["changed"] is False
    assert counts["outside"] < 0.05 * pages  # glibc raised its mmap threshold after the first free
    assert counts["inside"] < 0.05 * pages


@pytest.mark.skipif(fixed_thresholds(startup_environment()) is not None, reason="this process started with them set")
def test_a_threshold_set_after_start_up_is_not_glibcs(monkeypatch):
    # a LocalCluster's nanny sets MALLOC_TRIM_THRESHOLD_ in the starting process's os.environ too: this
    # process's malloc never read it, and keeps its adaptive rule
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    with roomy_malloc() as changed:
        assert changed is False


def test_roomy_thresholds_are_glibcs_own_ceiling():
    # glibc's malloc.c (from memory): DEFAULT_MMAP_THRESHOLD_MAX = 4 * 1024 * 1024 * sizeof(long) on
    # 64-bit, and the dynamic rule sets the trim threshold to twice the mmap threshold
    assert (ROOMY_MMAP_THRESHOLD, ROOMY_TRIM_THRESHOLD) == (32 * 2**20, 64 * 2**20)


@pytest.mark.skipif(sys.platform != "linux", reason="meshing runs in a forked child on Linux only")
def test_a_daemonic_worker_meshes_in_its_own_child():
    angles = np.linspace(0.0, 2 * np.pi, 24, endpoint=False)
    boundary = np.column_stack([np.cos(angles), np.sin(angles)])
    with multiprocessing.get_context("spawn").Pool(1) as pool:  # Pool workers are daemonic
        points, triangles = pool.apply(gmsh_adapter.mesh_disc, (boundary, np.zeros(2)))
        worker = pool.apply(os.getpid)
        children = Path(f"/proc/{worker}/task/{worker}/children").read_text().split()
    assert np.array_equal(points[:24], boundary)
    # a triangulated disc: the areas add up to the inscribed 24-gon's, (n/2) sin(2 pi/n) (elementary geometry)
    a, b, c = (points[triangles[:, k]] for k in range(3))
    areas = 0.5 * np.abs((b - a)[:, 0] * (c - a)[:, 1] - (b - a)[:, 1] * (c - a)[:, 0])
    assert areas.sum() == pytest.approx(12 * np.sin(2 * np.pi / 24), rel=1e-12)
    assert children == []  # the meshing child was reaped


@pytest.mark.skipif(not _glibc(), reason="glibc's malloc only")
def test_a_dask_workers_thresholds_are_lifted_for_a_variant():
    distributed = pytest.importorskip("distributed")
    saved = dict(os.environ)  # the nanny writes its variables into this process's os.environ too

    def in_the_worker():
        from fieldsection.allocator import fixed_thresholds, roomy_malloc, startup_environment

        with roomy_malloc() as changed:
            return fixed_thresholds(startup_environment()), changed

    try:
        with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                      dashboard_address=None) as cluster, distributed.Client(cluster) as client:
            [(fixed, changed)] = client.run(in_the_worker).values()
    finally:
        os.environ.clear()
        os.environ.update(saved)
    assert fixed == (65536, 128 * 1024)  # distributed's default pre-spawn-environ, glibc's default mmap threshold
    assert changed is True
