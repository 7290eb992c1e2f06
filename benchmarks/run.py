"""Benchmark of fieldsection's pipeline against its bare parts, on a parametric busbar model.

Run on demand (never in the test suite):

    python benchmarks/run.py                       # about 1e4 and 1e5 nodes, P1
    python benchmarks/run.py --nodes 1e4 1e5 1e6   # add the million-node model (about 10 minutes, a few GiB)

Each measurement runs in a fresh child process, so that its time and peak memory (resident set,
including gmsh's own child) are its own. The machine is shared and noisy: compare the ratios
measured in one run, not seconds across runs. Results are printed and written to
benchmarks/results/<date-time>.json.

Measured, at each size:
- bare gmsh: 2D meshing alone at the final size with the Delaunay (5) and Frontal-Delaunay (6)
  algorithms, and meshing 2**k coarser then splitting every triangle k times (gmsh's ``refine``);
  the fastest of these is the meshing reference of the end-to-end target. Also gmsh 2**k coarser
  followed by fieldsection's numpy split: the pipeline's own meshing path on its own, for a
  stricter ratio printed beside the target (it holds the rest of the pipeline to its own meshing);
- bare solvers: each available sparse solver alone on the same reduced matrix and one right-hand
  side, loaded from a file in a fresh process (so its memory is the matrix and the solver only);
  PARDISO both with MKL's defaults and with the settings the pipeline uses;
- fieldsection's pipeline, stage by stage with the peak memory after each stage, without and with
  figures, with ``[mesh] refinements = k`` chosen so the coarse mesh has about 25 000 nodes;
- the capacitance matrix: the pipeline's solver set up once, solved for one conductor and for all;
- the time and DOFs to reach a coaxial line's capacitance within 1e-4 by uniform refinement.
"""

from __future__ import annotations

import argparse
import json
import math
import multiprocessing
import platform
import resource
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # benchmark the working tree's fieldsection
SCRIPT = HERE / "busbar_box.geo"
ELECTRODES = {"bar_1": 1000.0, "bar_2": -1000.0, "bar_3": 500.0, "bar_4": 0.0}
COARSE_NODES = 25_000  # the pipeline meshes about this many nodes and refines up to the size asked
TARGETS = {"ratio_end_to_end": 1.3, "ratio_capacitance_matrix": 1.3, "ratio_peak_memory": 1.3}
#: what each ratio divides by (files before 2026-12-02 09:30 took the fastest of all meshing runs, the
#: numpy split included, for ratio_end_to_end, and the fastest bare solver's memory for ratio_peak_memory)
RATIO_DEFINITIONS = {
    "ratio_end_to_end": "pipeline without figures / (fastest gmsh alone: final size or coarse + refine(), "
                        "+ fastest bare solve of one right-hand side)",
    "ratio_end_to_end_vs_meshing_at_final_size": "pipeline / (fastest gmsh at the final size + fastest bare solve)",
    "ratio_end_to_end_vs_own_meshing_path": "pipeline / (gmsh coarse + fieldsection's numpy split + fastest bare "
                                            "solve); no target",
    "ratio_capacitance_matrix": "all conductors / one conductor, the pipeline's solver, set-up included",
    "ratio_peak_memory": "pipeline peak / max(fastest gmsh alone, the pipeline's solver alone)",
    "ratio_peak_memory_vs_fastest_solver": "pipeline peak / max(fastest gmsh alone, the fastest bare solver)",
}


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
    if "error" in result:
        print(f"  ! {work.__name__}{args}: {result['error']}", flush=True)
    return result


def _case(h_mm: float, order: int, refinements: int = 0):
    from fieldsection import SINGLE_MESH, Case, Material, MeshSettings, ScriptGeometry, lookup_material

    return Case("bench", ScriptGeometry(SCRIPT, {"h": h_mm}, 1e-3),
                {"air": lookup_material("air"), "block": Material("filled epoxy", 4.5, 20e6)},
                ELECTRODES, mesh=MeshSettings(element_order=order, curved=False, refinements=refinements),
                refinement=SINGLE_MESH)  # the million-node path: one mesh


def _open_model(gmsh, h_mm: float, refinements: int) -> None:
    """The benchmark model in a fresh gmsh session, every size 2**refinements times larger."""
    gmsh.initialize(interruptible=False)
    gmsh.option.setNumber("General.Terminal", 0)
    gmsh.parser.setNumber("h", [h_mm])
    gmsh.merge(str(SCRIPT))
    gmsh.option.setNumber("Mesh.MeshSizeFactor", 2.0**refinements)


def bare_gmsh(h_mm: float, algorithm: int, refinements: int = 0) -> dict:
    import gmsh

    _open_model(gmsh, h_mm, refinements)
    gmsh.option.setNumber("Mesh.Algorithm", algorithm)
    start = time.perf_counter()
    gmsh.model.mesh.generate(2)
    for _ in range(refinements):
        gmsh.model.mesh.refine()
    seconds = time.perf_counter() - start
    nodes = len(gmsh.model.mesh.getNodes()[0])
    gmsh.finalize()
    return {"seconds": seconds, "nodes": nodes}


def gmsh_and_split(h_mm: float, refinements: int) -> dict:
    """gmsh 2**k coarser, then fieldsection's numpy split k times (new curve nodes projected by gmsh): the
    pipeline's own way of meshing, without the rest of its mesh stage (child process, checks, groups)."""
    import gmsh

    from fieldsection.gmsh_adapter import curve_projection, curve_segments
    from fieldsection.splitting import split_into_four

    _open_model(gmsh, h_mm, refinements)
    start = time.perf_counter()
    gmsh.model.mesh.generate(2)
    tags, coords, _ = gmsh.model.mesh.getNodes()
    index = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
    index[tags.astype(np.int64)] = np.arange(tags.size)
    points = coords.reshape(-1, 3)
    triangles = index[gmsh.model.mesh.getElementsByType(2)[1].astype(np.int64)].reshape(-1, 3)
    segments = curve_segments(gmsh, index)
    snap = curve_projection(gmsh)
    for _ in range(refinements):
        points, triangles, segments = split_into_four(points, triangles, segments, snap)
    seconds = time.perf_counter() - start
    gmsh.finalize()
    return {"seconds": seconds, "nodes": len(points)}


def pipeline(h_mm: float, order: int, refinements: int, with_figures: bool, reports: str) -> dict:
    from fieldsection import analyse
    from fieldsection.report import write_report

    marks: list[tuple[str, float, float]] = []

    def mark(name: str) -> None:
        marks.append((name, time.perf_counter(), _peak_rss_gib()))

    start = time.perf_counter()
    result = analyse(_case(h_mm, order, refinements), on_stage=mark)
    mark("report" + (" with figures" if with_figures else ""))
    write_report(result, reports, with_figures=with_figures)
    mark("end")
    stages = {name: t1 - t0 for (name, t0, _), (_, t1, _) in zip(marks, marks[1:])}
    peaks = {name: peak for (name, _, _), (_, _, peak) in zip(marks, marks[1:])}
    return {"seconds": marks[-1][1] - start, "stages": stages, "stage_peak_GiB": peaks,
            "nodes": int(result.section.mesh.nvertices), "dofs": int(result.problem.ndofs),
            "solver": result.solution.solver,
            "capacitance_pF_per_m": float(result.capacitance.maxwell_from_energy[0, 0] * 1e12)}


def build_system(h_mm: float, order: int, refinements: int, path: str) -> dict:
    """The pipeline's reduced matrix and its right-hand sides (one per conductor), saved to ``path``."""
    import scipy.sparse as sp

    from fieldsection.gmsh_adapter import mesh_geometry
    from fieldsection.mesh import build_section_mesh
    from fieldsection.problem import assemble, conductor_indicator

    case = _case(h_mm, order, refinements)
    problem = assemble(case, build_section_mesh(mesh_geometry(case.geometry, case.mesh, case.conductor_names)))
    free = problem.free_dofs
    K = problem.stiffness
    A = K[free][:, free].tocsc()
    B = -(K[free] @ conductor_indicator(problem, problem.fixed))
    sp.save_npz(path + ".A.npz", A, compressed=False)
    np.save(path + ".B.npy", B)
    return {"unknowns": int(free.size), "conductors": int(B.shape[1])}


def _load(path: str):
    import scipy.sparse as sp

    return sp.load_npz(path + ".A.npz").tocsc(), np.load(path + ".B.npy")


def bare_solve(path: str, name: str) -> dict:
    """One sparse solver alone on the saved matrix and its first right-hand side."""
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    A, B = _load(path)
    b = B[:, 0]
    if "PARDISO" in name:  # load the libraries before the clock starts
        from fieldsection.solve import _point_pypardiso_at_mkl

        _point_pypardiso_at_mkl()
        import pypardiso  # noqa: F401
    if "AMG" in name:
        import pyamg  # noqa: F401
    start = time.perf_counter()
    if name == "SuperLU, scipy defaults":
        x = spla.spsolve(A, b)
    elif name == "SuperLU, symmetric ordering":
        x = spla.splu(A, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True}).solve(b)
    elif name.startswith("PARDISO (pypardiso), SPD on triu(A)"):
        import pypardiso

        from fieldsection.solve import PARDISO_SETTINGS

        solver = pypardiso.PyPardisoSolver(mtype=2)  # an own instance: the module-level one caches globally
        if "our settings" in name:
            for number, value in PARDISO_SETTINGS:
                solver.set_iparm(number, value)
        upper = sp.triu(A, format="csr")
        upper.sort_indices()
        solver.factorize(upper)
        x = solver.solve(upper, b)
    elif name.startswith("AMG (Ruge-Stueben) + CG"):
        import pyamg
        from scipy.sparse.csgraph import reverse_cuthill_mckee

        csr = A.tocsr()
        order = reverse_cuthill_mckee(csr, symmetric_mode=True) if "RCM" in name else np.arange(A.shape[0])
        M = csr[order][:, order]
        ml = pyamg.ruge_stuben_solver(M)
        y, info = spla.cg(M, b[order], rtol=1e-10, atol=0.0, maxiter=1000, M=ml.aspreconditioner())
        x = np.empty_like(y)
        x[order] = y
    else:
        raise ValueError(name)
    seconds = time.perf_counter() - start
    residual = float(np.linalg.norm(A @ x - b) / np.linalg.norm(b))
    return {"seconds": seconds if residual < 1e-8 else float("nan"), "residual": residual}


def matrix_solve(path: str, backend: str) -> dict:
    """fieldsection's solver ``backend``: set up once, then one conductor, then all of them."""
    from fieldsection.solve import _BACKENDS, Handoff

    A, B = _load(path)
    if backend == "PARDISO":  # load MKL before the clock starts
        _BACKENDS[backend](Handoff(A[:2, :2].tocsr())).close()
    start = time.perf_counter()
    solver = _BACKENDS[backend](Handoff(A))
    setup = time.perf_counter() - start
    start = time.perf_counter()
    solver.solve(B[:, :1].copy())
    one = time.perf_counter() - start
    # the pipeline derives the last conductor's unit solution from the others (they sum to 1)
    columns = B[:, :-1] if B.shape[1] > 1 else B
    start = time.perf_counter()
    solver.solve(columns.copy())
    every = time.perf_counter() - start
    return {"setup": setup, "one": one, "all": every, "one_solve": setup + one, "matrix_solve": setup + every}


def coaxial_accuracy(order: int, wanted: float = 1e-4) -> dict:
    """Refine a coaxial line uniformly until its capacitance is within ``wanted`` of the closed form.

    C = 2 pi eps0 eps_r / ln(b/a) (Gauss's law; D. M. Pozar, Microwave Engineering, 4th ed., 2012,
    Table 2.1). Step k meshes at 0.8 mm and refines k times, so the element size halves per step.
    """
    from scipy.constants import epsilon_0

    from fieldsection import SINGLE_MESH, Case, Material, MeshSettings, ScriptGeometry, analyse

    a, b, eps_r = 1e-3, 3e-3, 2.25
    exact = 2 * np.pi * epsilon_0 * eps_r / np.log(b / a)
    steps = []
    for k in range(7):
        case = Case("coaxial", ScriptGeometry(HERE.parent / "geometries" / "coaxial.geo", {"lc": 0.8 / 2**k}, 1e-3),
                    {"insulation": Material("test dielectric", eps_r, None)}, {"inner": 1.0, "outer": 0.0},
                    mesh=MeshSettings(element_order=order, curved=order == 2, refinements=k), refinement=SINGLE_MESH)
        start = time.perf_counter()
        result = analyse(case)
        seconds = time.perf_counter() - start
        error = abs(result.capacitance.two_level.from_energy / exact - 1)
        steps.append({"refinements": k, "dofs": int(result.problem.ndofs), "seconds": seconds,
                      "relative_error": float(error)})
        if error <= wanted:
            break
    return {"order": order, "wanted": wanted, "steps": steps, "reached": steps[-1]["relative_error"] <= wanted}


#: the bare solve that matches each of the pipeline's solver backends
_BARE_OF = {"PARDISO": "PARDISO (pypardiso), SPD on triu(A), our settings",
            "AMG-CG": "AMG (Ruge-Stueben) + CG, RCM ordering", "SuperLU": "SuperLU, scipy defaults"}


def _solver_names(unknowns: int, everything: bool) -> list[str]:
    import importlib.util

    names = ["SuperLU, scipy defaults", "AMG (Ruge-Stueben) + CG", "AMG (Ruge-Stueben) + CG, RCM ordering"]
    if unknowns < 300_000 or everything:
        names.insert(1, "SuperLU, symmetric ordering")  # its minimum-degree ordering takes many minutes at 1e6
    if importlib.util.find_spec("pypardiso") is not None:
        names += ["PARDISO (pypardiso), SPD on triu(A)", "PARDISO (pypardiso), SPD on triu(A), our settings"]
    return names


def run(nodes_wanted: list[float], order: int, reports: Path, everything: bool) -> dict:
    calibration = _in_child(bare_gmsh, 2.0, 6)
    per_h2 = calibration["nodes"] * 2.0**2  # nodes ~ 1 / h^2
    rows = []
    for wanted in nodes_wanted:
        h = float(np.sqrt(per_h2 / wanted))
        k = max(0, round(math.log(wanted / COARSE_NODES, 4)))
        print(f"\n== about {wanted:.0e} nodes (h = {h:.4g} mm), P{order}, pipeline with refinements = {k}", flush=True)
        gmsh_runs = {f"algorithm {a}": _in_child(bare_gmsh, h, a) for a in (5, 6)}
        best_final = min(gmsh_runs, key=lambda a: gmsh_runs[a]["seconds"])
        if k:
            gmsh_runs[f"algorithm {best_final[-1]}, {k} refinement(s)"] = _in_child(bare_gmsh, h, int(best_final[-1]), k)
            # not gmsh alone but the pipeline's own way to this mesh, for the stricter ratio
            gmsh_runs[f"algorithm 6, {k} numpy split(s)"] = _in_child(gmsh_and_split, h, k)
        alone = [name for name in gmsh_runs if "numpy" not in name]
        best_mesh = min(alone, key=lambda a: gmsh_runs[a]["seconds"])  # the best of gmsh alone
        own_mesh = f"algorithm 6, {k} numpy split(s)" if k else None  # (k = 0: the pipeline meshes with gmsh alone)
        with tempfile.TemporaryDirectory() as scratch:
            path = str(Path(scratch) / "system")
            system = _in_child(build_system, h, order, k, path)
            solvers = {name: _in_child(bare_solve, path, name) for name in _solver_names(system["unknowns"], everything)}
            plain = _in_child(pipeline, h, order, k, False, str(reports))
            backends = ["AMG-CG"] + (["PARDISO"] if any("PARDISO" in n for n in solvers) else [])
            if system["unknowns"] < 300_000 or everything or plain["solver"] == "SuperLU":
                backends.insert(0, "SuperLU")
            matrix = {b: _in_child(matrix_solve, path, b) for b in backends}
        figures = _in_child(pipeline, h, order, k, True, str(reports))
        timed = {n: r["seconds"] for n, r in solvers.items() if np.isfinite(r.get("seconds", float("nan")))}
        fastest = min(timed, key=timed.get)
        bare_solve_peak = max(solvers[fastest]["peak_GiB"], 0.0)
        used = plain["solver"]
        from fieldsection.solve import ITERATIVE_ABOVE

        bare_of = _BARE_OF[used]
        if used == "SuperLU" and system["unknowns"] <= ITERATIVE_ABOVE:
            bare_of = "SuperLU, symmetric ordering"  # the pipeline's SuperLU orders symmetrically at this size
        same = next((n for n in solvers if n == bare_of), None)  # the pipeline's solver, alone
        if same is not None and not np.isfinite(solvers[same].get("peak_GiB", float("nan"))):
            same = None  # it failed alone: the fastest solver's memory stands in, and the row says so
        memory_solver = same or fastest
        row = {
            "nodes": plain["nodes"], "dofs": plain["dofs"], "h_mm": h, "refinements": k,
            "unknowns": system["unknowns"], "conductors": system["conductors"],
            "capacitance_11_pF_per_m": plain["capacitance_pF_per_m"],
            "bare_gmsh": {name: {"seconds": r["seconds"], "nodes": r["nodes"], "peak_GiB": r["peak_GiB"]}
                          for name, r in gmsh_runs.items()},
            "bare_gmsh_best": best_mesh,
            "bare_solvers": {name: {"seconds": r.get("seconds"), "peak_GiB": r.get("peak_GiB")}
                             for name, r in solvers.items()},
            "bare_solver_fastest": fastest,
            "pipeline_seconds": plain["seconds"], "pipeline_stages": plain["stages"],
            "pipeline_stage_peak_GiB": plain["stage_peak_GiB"], "pipeline_peak_GiB": plain["peak_GiB"],
            "pipeline_solver": used,
            "pipeline_with_figures_seconds": figures["seconds"], "figure_stages": figures["stages"],
            "pipeline_with_figures_peak_GiB": figures["peak_GiB"],
            "capacitance_matrix": matrix,
            "ratio_end_to_end": plain["seconds"] / (gmsh_runs[best_mesh]["seconds"] + timed[fastest]),
            "ratio_end_to_end_vs_meshing_at_final_size":
                plain["seconds"] / (gmsh_runs[best_final]["seconds"] + timed[fastest]),
            "bare_meshing_own_path": own_mesh,
            "ratio_end_to_end_vs_own_meshing_path":
                plain["seconds"] / (gmsh_runs[own_mesh]["seconds"] + timed[fastest]) if own_mesh else None,
            "ratio_capacitance_matrix": matrix[used]["matrix_solve"] / matrix[used]["one_solve"],
            "bare_solver_used_by_pipeline": same,
            # the solve the pipeline must do (every conductor: one factorisation), by the same solver alone
            # (by the fastest one when the pipeline's was not timed alone)
            "bare_solver_for_memory": memory_solver,
            "ratio_peak_memory":
                plain["peak_GiB"] / max(gmsh_runs[best_mesh]["peak_GiB"], solvers[memory_solver]["peak_GiB"]),
            "ratio_peak_memory_vs_fastest_solver":
                plain["peak_GiB"] / max(gmsh_runs[best_mesh]["peak_GiB"], bare_solve_peak),
        }
        rows.append(row)
        _print_row(row)
    accuracy = [_in_child(coaxial_accuracy, p) for p in (1, 2)]
    print("\n== coaxial line to 1e-4 of its closed form, uniform refinement of a 0.8 mm mesh")
    for run_ in accuracy:
        last = run_["steps"][-1]
        print(f"  P{run_['order']}: {'reached' if run_['reached'] else 'NOT reached'} with {last['refinements']} "
              f"refinement(s), {last['dofs']} DOFs, {last['seconds']:.3g} s (error {last['relative_error']:.2e})")
    return {"when": datetime.now(timezone.utc).isoformat(timespec="seconds"), "machine": platform.platform(),
            "python": sys.version.split()[0], "order": order, "rows": rows, "targets": TARGETS,
            "definitions": RATIO_DEFINITIONS,
            "coaxial_accuracy": accuracy}


def _print_row(row: dict) -> None:
    print(f"nodes {row['nodes']}, DOFs {row['dofs']}, unknowns {row['unknowns']}, {row['conductors']} conductors")
    for name, r in row["bare_gmsh"].items():
        print(f"  bare gmsh, {name:42s} {r['seconds']:8.3g} s {r['peak_GiB']:6.2f} GiB  ({r['nodes']} nodes)")
    for name, r in row["bare_solvers"].items():
        print(f"  bare solve, {name:41s} {r['seconds']:8.3g} s {r['peak_GiB']:6.2f} GiB")
    peaks = row["pipeline_stage_peak_GiB"]
    for name, seconds in row["pipeline_stages"].items():
        print(f"  fieldsection {name:40s} {seconds:8.3g} s {peaks[name]:6.2f} GiB (peak so far)")
    print(f"  fieldsection end to end, no figures ({row['pipeline_solver']:8s})        "
          f"{row['pipeline_seconds']:8.3g} s {row['pipeline_peak_GiB']:6.2f} GiB")
    print(f"  fieldsection end to end, with figures                   {row['pipeline_with_figures_seconds']:8.3g} s "
          f"{row['pipeline_with_figures_peak_GiB']:6.2f} GiB")
    for name, m in row["capacitance_matrix"].items():
        print(f"  {name:8s} set-up {m['setup']:.3g} s, one conductor {m['one']:.3g} s, all {row['conductors']} "
              f"({row['conductors'] - 1} solved, the last derived) {m['all']:.3g} s: "
              f"matrix / one solve = {m['matrix_solve'] / m['one_solve']:.2f}")
    print(f"  ratio end to end / (best bare gmsh + fastest bare solve):    {row['ratio_end_to_end']:5.2f}  "
          f"(target <= {TARGETS['ratio_end_to_end']}; gmsh alone: {row['bare_gmsh_best']})")
    print(f"    the same against gmsh meshing at the final size:           "
          f"{row['ratio_end_to_end_vs_meshing_at_final_size']:5.2f}")
    if row.get("ratio_end_to_end_vs_own_meshing_path") is not None:
        print(f"    the same against the pipeline's own meshing path alone:    "
              f"{row['ratio_end_to_end_vs_own_meshing_path']:5.2f}  ({row['bare_meshing_own_path']}; stricter, "
              "no target)")
    print(f"  ratio {row['conductors']}-conductor matrix / one solve ({row['pipeline_solver']}):"
          f"{'':20s}{row['ratio_capacitance_matrix']:5.2f}  (target <= {TARGETS['ratio_capacitance_matrix']})")
    print(f"  ratio peak memory / max(bare mesh, bare solve):              {row['ratio_peak_memory']:5.2f}  "
          f"(target <= {TARGETS['ratio_peak_memory']}; bare solve: {row['bare_solver_for_memory']}; "
          f"against the fastest bare solver's memory: "
          f"{row['ratio_peak_memory_vs_fastest_solver']:.2f})", flush=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", type=float, nargs="+", default=[1e4, 1e5], help="approximate node counts")
    parser.add_argument("--order", type=int, choices=(1, 2), default=1, help="element order (1 as in the baseline)")
    parser.add_argument("--all-solvers", action="store_true",
                        help="also time SuperLU with the symmetric ordering and fieldsection's SuperLU path above "
                             "300 000 unknowns (many minutes)")
    parser.add_argument("--out", type=Path, default=None, help="JSON file (default benchmarks/results/<time>.json)")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as reports:
        summary = run(args.nodes, args.order, Path(reports), args.all_solvers)
    out = args.out or HERE / "results" / f"{datetime.now().strftime('%Y%m%d-%H%M%S')}.json"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(json.dumps(summary, indent=2))
    print(f"\nwritten {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
