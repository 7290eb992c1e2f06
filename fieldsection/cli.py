"""Command line: ``fieldsection run CASE``, ``fieldsection study STUDY``, ``fieldsection verify`` and
``fieldsection materials``.

Only this module prints and sets exit codes: 0 success, 2 bad input (a one-line message naming
the culprit and the fix), 1 an unexpected failure, 130 interrupted (Ctrl-C).
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
import time
from dataclasses import replace
from pathlib import Path

from . import __version__
from .errors import FieldSectionError, ReportError

EXIT_OK, EXIT_FAILURE, EXIT_BAD_INPUT = 0, 1, 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, as shells report it


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="fieldsection",
        description="Electric field, capacitance, hotspots and bound charge of 2D insulation cross-sections.",
    )
    parser.add_argument("--version", action="version", version=f"fieldsection {__version__}")
    verbs = parser.add_subparsers(dest="verb", required=True)
    run = verbs.add_parser("run", help="solve a case file and write reports/<case>/")
    run.add_argument("case", type=Path, help="TOML case file")
    run.add_argument("--reports", type=Path, default=Path("reports"), help="folder for reports (default: reports)")
    run.add_argument("--no-figures", action="store_true", help="skip the PNG figures (faster on big meshes)")
    run.add_argument("--trust-script", action="store_true",
                     help="allow the geometry script to run programs, read or write files and call routines "
                          "(System, Save, Merge of CAD files, Macro, ...; see the README)")
    run.add_argument("--time-limit", type=_seconds, default=None, metavar="SECONDS",
                     help="stop gmsh (reading the geometry script and meshing) after this many seconds "
                          "(default 3600)")
    run.add_argument("--quiet", action="store_true", help="no progress bar and no summary")
    run.add_argument("--profile", action="store_true", help="print each stage's time and the peak memory after it")
    run.add_argument("--solver", choices=("auto", "direct", "iterative"), default=None,
                     help="linear solver, overriding the case's [solver] method: direct factorisation (PARDISO if "
                          "installed, else SuperLU), iterative (AMG-preconditioned CG), or auto (by size)")
    run.add_argument("--max-nodes", type=_positive_whole, default=None, metavar="N",
                     help="largest mesh (nodes) to attempt; default: derived from this machine's memory")
    verbs.add_parser("materials", help="list the shipped materials table")
    verify = verbs.add_parser("verify", help="run the shipped verification suite (reference cases against published "
                                             "closed forms) and write reports/verification/")
    verify.add_argument("--full", action="store_true", help="finer meshes and tight tolerances (minutes, not seconds)")
    verify.add_argument("--reports", type=Path, default=Path("reports"), help="folder for the report (default: reports)")
    verify.add_argument("--case", action="append", metavar="NAME", help="run only this reference case (repeatable)")
    verify.add_argument("--quiet", action="store_true", help="no progress and no table")
    study = verbs.add_parser("study", help="run a design study (variants of a case, a design search): reports/<study>/")
    study.add_argument("study", type=Path, help="TOML study file")
    study.add_argument("--reports", type=Path, default=Path("reports"), help="folder for reports (default: reports)")
    study.add_argument("--workers", type=int, default=None, help="local worker processes (default: one per core)")
    study.add_argument("--scheduler", default=None, metavar="ADDRESS",
                       help="run the variants on a Dask distributed cluster, e.g. tcp://10.0.0.5:8786")
    study.add_argument("--max-dofs", type=int, default=None, help="DOF budget of each variant (bounds worker memory)")
    study.add_argument("--figures", action="store_true", help="draw the PNG figures of every variant's report")
    study.add_argument("--quiet", action="store_true", help="no progress bar and no summary")
    return parser


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0 < value < float("inf"):
        raise argparse.ArgumentTypeError(f"{text!r} is not a positive number of seconds")
    return value


def _run(args: argparse.Namespace) -> int:
    from tqdm import tqdm

    from .case import load_case
    from .limits import gmsh_limits
    from .pipeline import STAGES, analyse
    from .report import write_report

    case = load_case(args.case, trust_script=args.trust_script)
    if args.solver is not None:
        case = replace(case, solver=args.solver)
    if args.max_nodes is not None:
        case = replace(case, mesh=replace(case.mesh, max_nodes=args.max_nodes))
    writing = 3  # results, the VTK file, the figures (drawn beside the other two)
    with tqdm(total=len(STAGES) + writing, disable=args.quiet, unit="stage", desc=case.name, file=sys.stderr) as bar:
        peaks: list[tuple[str, float, float]] = []  # (stage, start time, peak memory so far)
        computing = [True]

        def step(name: str) -> None:  # called as each stage starts
            if computing[0] and bar.n >= bar.total - writing - 1:  # another adaptive pass: room for its stages
                bar.total += len(STAGES)
            bar.set_postfix_str(name)
            bar.update(1)
            peaks.append((name, time.perf_counter(), _peak_memory_gib()))

        if not args.no_figures:
            from .figures_worker import warm_up

            warm_up()  # matplotlib's import, beside the analysis
        with gmsh_limits(seconds=args.time_limit):
            result = analyse(case, on_stage=step)
        computing[0] = False
        bar.total = bar.n + (writing if not args.no_figures else 2)
        folder = write_report(result, args.reports, with_figures=not args.no_figures, on_step=step)
        bar.update(bar.total - bar.n)
        peaks.append(("end", time.perf_counter(), _peak_memory_gib()))
    if not args.quiet:
        _summary(result, folder)
    if args.profile:
        print(f"{'stage':24s} {'seconds':>9s} {'peak memory after (GiB)':>24s}")
        for (name, start, _), (_, end, peak) in zip(peaks, peaks[1:]):
            print(f"{name:24s} {end - start:9.3f} {peak:24.2f}")
        print(f"{'total':24s} {peaks[-1][1] - peaks[0][1]:9.3f}")
        mesh = result.section.mesh
        print(f"{mesh.nvertices} vertices, {mesh.nelements} elements, {result.problem.ndofs} DOFs; "
              f"linear solver {result.solution.solver}")
    return EXIT_OK


def _positive_whole(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 100:
        raise argparse.ArgumentTypeError(f"{value} is too small: give at least 100")
    return value


def _peak_memory_gib() -> float:
    """Largest resident set so far of this process and its finished children (gmsh meshes in one)."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    children = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return max(own, children) / 2**20


def _summary(result, folder: Path) -> None:
    cap = result.capacitance
    print(f"report: {folder}/report.html")
    if cap.two_level is not None:
        t = cap.two_level
        print(f"capacitance {', '.join(t.high)} | {', '.join(t.low)}: {t.from_energy * 1e12:.6g} pF/m "
              f"(charge vs energy {t.relative_difference:.1e})")
    else:
        names = cap.names
        for i in range(len(names)):
            for j in range(i + 1, len(names)):
                print(f"mutual capacitance {names[i]} | {names[j]}: {cap.mutual[i, j] * 1e12:.6g} pF/m")
    if result.passes:
        print(f"refinement: {len(result.passes)} pass(es), {result.passes[-1].ndofs} DOFs; {result.stop_reason}")
    certificates = result.certificates.regions if result.certificates else {}
    for peak in result.hotspots.region_peaks:
        share = "" if peak.utilisation is None else f", {100 * peak.utilisation:.1f} % of strength"
        cert = certificates.get(peak.region)
        if cert is not None and not cert.is_peak_field:
            theory = "" if cert.theory_exponent is None else f", corner theory {cert.theory_exponent:.2f}"
            growth = "?" if cert.measured_exponent is None else f"{cert.measured_exponent:.2f}"
            print(f"peak |E| in {peak.region} ({peak.material}): singular at a sharp edge (grows as h^{growth}"
                  f"{theory}); {peak.peak_E * 1e-6:.4g} kV/mm{share} on this mesh is not a peak field")
            continue
        status = "" if cert is None else f" [{cert.status}" + (
            f", ±{cert.relative_error:.1e}]" if cert.relative_error is not None else "]")
        print(f"peak |E| in {peak.region} ({peak.material}): {peak.peak_E * 1e-6:.4g} kV/mm{share}{status}")
    print(f"hotspots at >= {100 * result.case.hotspot_fraction:.0f} % of strength: {len(result.hotspots.hotspots)}")
    if result.conduction is not None:
        from .analysis_report import summary_lines

        print("\n".join(summary_lines(result)))
    print("a design aid, not a certification: margins and partial-discharge tests remain the designer's duty")


def _verify(args: argparse.Namespace) -> int:
    """Exit 0 when every check passes, 1 when any fails (a failed verification is not bad input)."""
    from .verification import run_suite, write_suite_report

    def progress(name: str) -> None:
        if not args.quiet:
            print(f"verifying {name} ...", file=sys.stderr, flush=True)

    suite = run_suite(full=args.full, names=args.case, on_case=progress)
    folder = write_suite_report(suite, args.reports)
    if not args.quiet:
        print(f"{'case':24s} {'quantity':28s} {'error':>9s} {'tolerance':>9s}  result")
        for c in suite.checks:
            error = "-" if c.error is None else f"{c.error:.1e}"
            verdict = "pass" if c.passed else "FAIL" + (f" ({c.note})" if c.note else "")
            print(f"{c.case:24s} {c.quantity:28s} {error:>9s} {c.tolerance:9.1e}  {verdict}")
        passed = sum(c.passed for c in suite.checks)
        print(f"{passed} of {len(suite.checks)} checks passed in {suite.seconds:.1f} s "
              f"({'full' if args.full else 'fast'} mode); report: {folder}/verification.md")
    return EXIT_OK if suite.passed else EXIT_FAILURE


class _AboveTheBar(logging.Handler):
    """Log lines written above a tqdm progress bar."""

    def emit(self, record: logging.LogRecord) -> None:
        from tqdm import tqdm

        tqdm.write(self.format(record), file=sys.stderr)


def _study(args: argparse.Namespace) -> int:
    from .study import load_study, run_settings
    from .study_run import run_study

    study = load_study(args.study)
    given = study.run
    settings = run_settings(args.workers if args.workers is not None else given.workers,
                            args.scheduler or given.scheduler,
                            args.max_dofs if args.max_dofs is not None else given.max_dofs,
                            args.figures or given.figures, "--")
    logger = logging.getLogger("fieldsection.study")
    handler = _AboveTheBar()
    if not args.quiet:  # which variants run and which come from the cache, above the progress bar
        logger.addHandler(handler)
        logger.setLevel(logging.INFO)
    try:
        outcome = run_study(study, args.reports, settings=settings, progress=not args.quiet)
    finally:
        logger.removeHandler(handler)
    if not args.quiet:
        s = outcome.table.summary()
        print(f"study report: {outcome.folder}/index.html")
        print(f"{s['variants']} variant(s): {s['succeeded']} succeeded, {s['failed']} failed; "
              f"{len(outcome.log.ran)} computed, {len(outcome.log.cached)} from the cache")
        if outcome.search is not None:
            print(f"search: {outcome.search.message}")
        print("a design aid, not a certification: margins and partial-discharge tests remain the designer's duty")
    return EXIT_OK


def _materials() -> int:
    from .materials import shipped_materials

    print(f"{'name':20s} {'kind':7s} {'eps_r':>8s} {'strength (kV/mm)':>17s} {'tan delta':>10s} {'sigma (S/m)':>12s}")
    for m in shipped_materials().values():
        strength = "unknown" if m.dielectric_strength is None else f"{m.dielectric_strength * 1e-6:.4g}"
        tan_d = "-" if m.loss_tangent is None else f"{m.loss_tangent:.2g}"
        sigma = "-" if m.conductivity is None else f"{m.conductivity:.2g}"
        print(f"{m.name:20s} {m.kind:7s} {m.relative_permittivity:8.4g} {strength:>17s} {tan_d:>10s} {sigma:>12s}")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    try:
        if args.verb == "run":
            return _run(args)
        if args.verb == "verify":
            return _verify(args)
        if args.verb == "study":
            return _study(args)
        return _materials()
    except ReportError as exc:  # not the input's fault: a disk or permission problem
        print(f"fieldsection: error: {exc}", file=sys.stderr)
        return EXIT_FAILURE
    except FieldSectionError as exc:
        print(f"fieldsection: error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("fieldsection: interrupted; no report was written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # a bug, not the input's fault: one line, unless asked for the traceback
        if os.environ.get("FIELDSECTION_TRACEBACK"):
            raise
        print(f"fieldsection: internal error: {type(exc).__name__}: {exc}; no report was written. Please report it "
              "with the case file (FIELDSECTION_TRACEBACK=1 shows where it happened)", file=sys.stderr)
        return EXIT_FAILURE


if __name__ == "__main__":
    sys.exit(main())
