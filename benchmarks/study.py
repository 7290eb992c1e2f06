"""Benchmark of design studies: local workers, the cache, and a Dask LocalCluster.

Run on demand (never in the test suite):

    python benchmarks/study.py                     # 16 variants of the demo busbar at its own settings
    python benchmarks/study.py --max-dofs 20000    # the same with a smaller DOF budget per variant (quicker)

A 16-variant study of geometries/busbar_laminated.toml (film thickness x bus voltage, 4 x 4) is
run four times, each into a fresh reports folder (so a fresh cache) unless said otherwise:
1. one local worker;  2. two local workers;  3. two local workers again on run 2's folder
(every variant from the cache);  4. a ``dask.distributed.LocalCluster`` with two worker processes.
Each time is the whole ``run_study`` (variants, table, plots, index, copying the variant reports).
Beside each wall time, the CPU seconds of this process and of the processes it started that ended
(the workers and their gmsh children; for the cluster, from its start to its close): on a shared
machine the wall times of two runs can differ by the other users' load, the CPU seconds much less.

Targets (issue 12), printed beside the ratios measured in this one run:
- two local workers at least 1.8x faster than one (on a 2-core machine);
- the cache-hit rerun under 5 % of the first run's time (run 3 / run 2);
- the Dask LocalCluster within 1.2x of the local pool (run 4 / run 2).
The machine is shared and noisy: compare the ratios measured in one run, not seconds across runs.
Results are printed and written to benchmarks/results/study-<date-time>.json.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

STUDY = """
title = "benchmark: 16 variants of the demo busbar"
case = "{case}"

[[vary]]
set = "geometry.parameters.film_thickness"
from = 0.15
to = 0.45
count = 4
unit = "mm"

[[vary]]
label = "voltage"
together = {{ "electrodes.bar_plus" = ["1 kV", "1.5 kV", "2 kV", "2.5 kV"], "electrodes.bar_minus" = ["-1 kV", "-1.5 kV", "-2 kV", "-2.5 kV"] }}
"""


def _cpu() -> float:
    """CPU seconds used so far by this process and by its children that have ended (and were waited for)."""
    own, children = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def _timed(study, reports, settings):
    from fieldsection.study_run import run_study

    start = time.perf_counter()
    outcome = run_study(study, reports, settings=settings)
    seconds = time.perf_counter() - start
    summary = outcome.table.summary()
    if summary["failed"]:
        print(f"  warning: {summary['failed']} variant(s) failed", file=sys.stderr)
    return seconds, outcome


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--max-dofs", type=int, default=None,
                        help="DOF budget of each variant (default: the demo case's own, 120000)")
    parser.add_argument("--skip-dask", action="store_true", help="leave out the LocalCluster run")
    args = parser.parse_args(argv)

    from fieldsection.study import load_study, run_settings

    with tempfile.TemporaryDirectory(prefix="fieldsection-study-bench-") as tmp:
        tmp = Path(tmp)
        study_file = tmp / "bench_study.toml"
        study_file.write_text(STUDY.format(case=(ROOT / "geometries" / "busbar_laminated.toml").as_posix()),
                              encoding="utf-8")
        study = load_study(study_file)
        assert len(study.variants()) == 16
        times, cpu, loads = {}, {}, {}
        print("1 local worker ...", flush=True)
        start, loads["one_worker"] = _cpu(), os.getloadavg()[0]
        times["one_worker_s"], one = _timed(study, tmp / "one", run_settings(workers=1, max_dofs=args.max_dofs))
        cpu["one_worker_cpu_s"] = _cpu() - start
        print(f"  {times['one_worker_s']:.1f} s ({cpu['one_worker_cpu_s']:.0f} s of CPU)\n2 local workers ...", flush=True)
        start, loads["two_workers"] = _cpu(), os.getloadavg()[0]
        times["two_workers_s"], two = _timed(study, tmp / "two", run_settings(workers=2, max_dofs=args.max_dofs))
        cpu["two_workers_cpu_s"] = _cpu() - start  # the pool is shut down (its workers waited for) by run_study
        print(f"  {times['two_workers_s']:.1f} s ({cpu['two_workers_cpu_s']:.0f} s of CPU)\n"
              "2 local workers, every variant cached ...", flush=True)
        times["cache_hit_s"], hit = _timed(study, tmp / "two", run_settings(workers=2, max_dofs=args.max_dofs))
        assert hit.log.ran == [], "the rerun should read every variant from the cache"
        print(f"  {times['cache_hit_s']:.2f} s", flush=True)
        if not args.skip_dask:
            from distributed import LocalCluster

            print("Dask LocalCluster, 2 worker processes ...", flush=True)
            saved = dict(os.environ)  # the nanny writes its worker variables into this process's environment
            start, loads["dask"] = _cpu(), os.getloadavg()[0]
            with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
                times["dask_s"], dask = _timed(study, tmp / "dask", run_settings(
                    workers=2, scheduler=cluster.scheduler_address, max_dofs=args.max_dofs))
            cpu["dask_cpu_s"] = _cpu() - start  # the closed cluster's workers were waited for
            os.environ.clear()
            os.environ.update(saved)
            print(f"  {times['dask_s']:.1f} s (cluster start-up not counted; {cpu['dask_cpu_s']:.0f} s of CPU, "
                  "start-up counted)", flush=True)

    ratios = {
        "speedup_two_over_one_workers": times["one_worker_s"] / times["two_workers_s"],
        "cache_hit_over_first_run": times["cache_hit_s"] / times["two_workers_s"],
    }
    if "dask_s" in times:
        ratios["dask_over_local_pool"] = times["dask_s"] / times["two_workers_s"]
        cpu_ratio = cpu["dask_cpu_s"] / cpu["two_workers_cpu_s"]
    targets = {"speedup_two_over_one_workers": (">=", 1.8), "cache_hit_over_first_run": ("<", 0.05),
               "dask_over_local_pool": ("<=", 1.2)}
    print(f"\n{'ratio':32s} {'measured':>9s}  target")
    for name, value in ratios.items():
        sign, target = targets[name]
        met = value >= target if sign == ">=" else (value < target if sign == "<" else value <= target)
        print(f"{name:32s} {value:9.3f}  {sign} {target}  {'met' if met else 'NOT met'}")
    if "dask_s" in times:
        print(f"(CPU seconds, Dask LocalCluster / 2 local workers: {cpu_ratio:.3f}, no target)")
    print(f"(cores available: {len(os.sched_getaffinity(0))}; load average at the start of each run: "
          f"{', '.join(f'{k} {v:.1f}' for k, v in loads.items())}; at the end: "
          f"{', '.join(f'{x:.1f}' for x in os.getloadavg())})")
    out = ROOT / "benchmarks" / "results" / f"study-{datetime.now(timezone.utc).strftime('%Y%m%d-%H%M%S')}.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({
        "machine": platform.platform(), "python": platform.python_version(),
        "cores": len(os.sched_getaffinity(0)), "load_average_end": os.getloadavg(),
        "load_average_1min_at_start": loads,
        "max_dofs": args.max_dofs or "the case's own", "variants": 16, "seconds": times, "cpu_seconds": cpu,
        "ratios": ratios,
        "cpu_ratio_dask_over_local_pool": cpu_ratio if "dask_s" in times else None,
        "ratio_definitions": {
            "speedup_two_over_one_workers": "whole study, 1 local worker / 2 local workers, fresh caches",
            "cache_hit_over_first_run": "rerun with every variant cached / the 2-worker first run",
            "dask_over_local_pool": "LocalCluster (2 processes) / 2 local workers, fresh caches, cluster start-up excluded",
        },
    }, indent=2), encoding="utf-8")
    print(f"written {out.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
