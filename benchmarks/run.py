"""Benchmark of fieldsection's pipeline against its bare parts, on a parametric busbar model.

Run on demand (never in the test suite):

    python benchmarks/run.py                       # about 1e4 and 1e5 nodes, P1
    python benchmarks/run.py --nodes 1e4 1e5 1e6   # add the million-node model (minutes, GBs)

Each measurement runs in a fresh child process, so that its time and peak memory (resident set,
including gmsh's own child) are its own. The machine is shared and noisy: compare the ratios
measured in one run, not seconds across runs. Results are printed and written to
benchmarks/results/<date-time>.json.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import platform
import resource
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SCRIPT = HERE / "busbar_box.geo"
ELECTRODES = {"bar_1": 1000.0, "bar_2": -1000.0, "bar_3": 500.0, "bar_4": 0.0}


def _peak_rss_gib() -> float:
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(own, children) / 2**20  # ru_maxrss is in KiB on Linux


def _in_child(work, *args) -> dict:
    """Run ``work(*args)`` (returning a dict) in a forked child; add its peak memory."""
    context = multiprocessing.get_context("fork")
    queue = context.Queue()

    def target():
        try:
            out = work(*args)
            out["peak_GiB"] = _peak_rss_gib()
            queue.put(out)
        except BaseException as exc:  # report, do not hang the parent
            queue.put({"error": f"{type(exc).__name__}: {exc}"})

    child = context.Process(target=target)
    child.start()
    result = queue.get()
    child.join()
    return result


def _case(h_mm: float, order: int):
    from fieldsection import Case, Material, MeshSettings, ScriptGeometry, lookup_material

    return Case("bench", ScriptGeometry(SCRIPT, {"h": h_mm}, 1e-3),
                {"air": lookup_material("air"), "block": Material("filled epoxy", 4.5, 20e6)},
                ELECTRODES, mesh=MeshSettings(element_order=order, curved=False))


def bare_gmsh(h_mm: float, algorithm: int) -> dict:
    import gmsh

    gmsh.initialize(interruptible=False)
    gmsh.option.setNumber("General.Terminal", 0)
    gmsh.parser.setNumber("h", [h_mm])
    gmsh.merge(str(SCRIPT))
    gmsh.option.setNumber("Mesh.Algorithm", algorithm)
    start = time.perf_counter()
    gmsh.model.mesh.generate(2)
    seconds = time.perf_counter() - start
    nodes = len(gmsh.model.mesh.getNodes()[0])
    gmsh.finalize()
    return {"seconds": seconds, "nodes": nodes}


def pipeline(h_mm: float, order: int, with_figures: bool, reports: str) -> dict:
    from fieldsection import analyse
    from fieldsection.report import write_report

    start = time.perf_counter()
    result = analyse(_case(h_mm, order))
    report_start = time.perf_counter()
    write_report(result, reports, with_figures=with_figures)
    end = time.perf_counter()
    stages = dict(result.stage_seconds)
    stages["report" + (" with figures" if with_figures else "")] = end - report_start
    return {"seconds": end - start, "stages": stages, "nodes": int(result.section.mesh.nvertices),
            "dofs": int(result.problem.ndofs)}


def bare_solvers(h_mm: float, order: int) -> dict:
    """Each available sparse solver alone on the same reduced matrix, one right-hand side."""
    import scipy.sparse.linalg as spla

    from fieldsection.gmsh_adapter import mesh_geometry
    from fieldsection.mesh import build_section_mesh
    from fieldsection.problem import assemble, conductor_indicator
    from fieldsection.solve import FactorisedSystem

    case = _case(h_mm, order)
    problem = assemble(case, build_section_mesh(mesh_geometry(case.geometry, case.mesh, case.conductor_names)))
    free = problem.free_dofs
    K = problem.stiffness
    lift = conductor_indicator(problem, problem.fixed)[:, 0]
    A = K[free][:, free].tocsc()
    b = -(K[free] @ lift)
    times: dict[str, float] = {}

    def timed(name, solve):
        start = time.perf_counter()
        x = solve()
        times[name] = time.perf_counter() - start
        residual = np.linalg.norm(A @ x - b) / np.linalg.norm(b)
        if residual > 1e-6:
            times[name] = float("nan")

    timed("SuperLU default", lambda: spla.spsolve(A, b))
    timed("SuperLU symmetric, no pivoting", lambda: spla.splu(
        A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True}).solve(b))
    try:
        import pyamg

        def amg():
            ml = pyamg.ruge_stuben_solver(A.tocsr())
            return ml.solve(b, tol=1e-10, accel="cg")
        timed("AMG (Ruge-Stueben) + CG", amg)
    except ImportError:
        pass
    try:
        import pypardiso

        timed("PARDISO (pypardiso)", lambda: pypardiso.spsolve(A.tocsr(), b))
    except ImportError:
        pass

    # the capacitance-matrix path: one factorisation, one back-substitution per electrode
    start = time.perf_counter()
    system = FactorisedSystem(problem)
    factor = time.perf_counter() - start
    lifts = conductor_indicator(problem, problem.fixed)
    no_charge = np.zeros((0, 1))
    start = time.perf_counter()
    system.solve(lifts[:, :1], no_charge)
    one = time.perf_counter() - start
    start = time.perf_counter()
    system.solve(lifts, np.zeros((0, lifts.shape[1])))
    every = time.perf_counter() - start
    return {"solvers": times, "unknowns": int(free.size), "electrodes": lifts.shape[1],
            "factorise": factor, "one_solve": factor + one, "matrix_solve": factor + every}


def run(nodes_wanted: list[float], order: int, reports: Path) -> dict:
    calibration = _in_child(bare_gmsh, 2.0, 6)
    per_h2 = calibration["nodes"] * 2.0**2  # nodes ~ 1 / h^2
    rows = []
    for wanted in nodes_wanted:
        h = float(np.sqrt(per_h2 / wanted))
        print(f"\n== about {wanted:.0e} nodes (h = {h:.4g} mm), P{order}", flush=True)
        gmsh_runs = {a: _in_child(bare_gmsh, h, a) for a in (5, 6)}
        best_algorithm = min(gmsh_runs, key=lambda a: gmsh_runs[a]["seconds"])
        bare = _in_child(bare_solvers, h, order)
        plain = _in_child(pipeline, h, order, False, str(reports))
        figures = _in_child(pipeline, h, order, True, str(reports))
        fastest = min((v for v in bare["solvers"].values() if np.isfinite(v)), default=float("nan"))
        bare_mesh = gmsh_runs[best_algorithm]
        row = {
            "nodes": plain.get("nodes"), "dofs": plain.get("dofs"), "h_mm": h,
            "bare_gmsh_seconds": {str(a): r["seconds"] for a, r in gmsh_runs.items()},
            "bare_gmsh_best_algorithm": best_algorithm,
            "bare_gmsh_peak_GiB": bare_mesh["peak_GiB"],
            "bare_solvers_seconds": bare["solvers"], "bare_solve_peak_GiB": bare["peak_GiB"],
            "pipeline_seconds": plain["seconds"], "pipeline_stages": plain["stages"],
            "pipeline_peak_GiB": plain["peak_GiB"],
            "pipeline_with_figures_seconds": figures["seconds"], "figure_stages": figures["stages"],
            "factorise_seconds": bare["factorise"], "one_solve_seconds": bare["one_solve"],
            "matrix_solve_seconds": bare["matrix_solve"], "electrodes": bare["electrodes"],
            "ratio_end_to_end": plain["seconds"] / (bare_mesh["seconds"] + fastest),
            "ratio_capacitance_matrix": bare["matrix_solve"] / bare["one_solve"],
            "ratio_peak_memory": plain["peak_GiB"] / max(bare_mesh["peak_GiB"], bare["peak_GiB"]),
        }
        rows.append(row)
        _print_row(row)
    return {"when": datetime.now(timezone.utc).isoformat(timespec="seconds"), "machine": platform.platform(),
            "python": sys.version.split()[0], "order": order, "rows": rows,
            "targets": {"ratio_end_to_end": 1.3, "ratio_capacitance_matrix": 1.3, "ratio_peak_memory": 1.3}}


def _print_row(row: dict) -> None:
    print(f"nodes {row['nodes']}, DOFs {row['dofs']}")
    print(f"  bare gmsh (algorithm: s)   {', '.join(f'{a}: {s:.3g}' for a, s in row['bare_gmsh_seconds'].items())}")
    for name, seconds in row["bare_solvers_seconds"].items():
        print(f"  bare solve {name:32s} {seconds:.3g} s")
    for name, seconds in row["pipeline_stages"].items():
        print(f"  fieldsection {name:30s} {seconds:.3g} s")
    print(f"  fieldsection end to end, no figures {row['pipeline_seconds']:.3g} s, peak {row['pipeline_peak_GiB']:.2f} GiB")
    print(f"  report with figures                 {row['figure_stages'].get('report with figures', float('nan')):.3g} s")
    print(f"  ratio end to end / (best gmsh + fastest solve): {row['ratio_end_to_end']:.2f}  (target <= 1.3)")
    print(f"  ratio {row['electrodes']}-electrode matrix / one solve:          {row['ratio_capacitance_matrix']:.2f}  (target <= 1.3)")
    print(f"  ratio peak memory / max(bare mesh, bare solve):  {row['ratio_peak_memory']:.2f}  (target <= 1.3)")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", type=float, nargs="+", default=[1e4, 1e5], help="approximate node counts")
    parser.add_argument("--order", type=int, choices=(1, 2), default=1, help="element order (1 as in the baseline)")
    parser.add_argument("--out", type=Path, default=None, help="JSON file (default benchmarks/results/<time>.json)")
    args = parser.parse_args(argv)
    import tempfile

    with tempfile.TemporaryDirectory() as reports:
        summary = run(args.nodes, args.order, Path(reports))
    out = args.out or HERE / "results" / f"{datetime.now().strftime('%Y%m%d-%H%M%S')}.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(summary, indent=2))
    print(f"\nwritten {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
