"""Report stage: a folder with results.json, report.html, figures and a VTK file.

The folder is built under a temporary name beside its destination and renamed only when every
file is complete, so a failed run never leaves a half-written report.
"""

from __future__ import annotations

import base64
import json
import math
import os
import shutil
import sys
import tempfile
from contextlib import contextmanager
from functools import lru_cache, partial
from pathlib import Path
from typing import Callable, Iterator

from jinja2 import Environment, FileSystemBytecodeCache, PackageLoader, StrictUndefined, select_autoescape

from .blas_threads import one_blas_thread
from .errors import ReportError, ReportFolderTaken
from .figures_worker import start_drawing
from .pipeline import SectionResult
from .probes import csv_name, figure_name, probe_results, sample_probe, write_csv
from .results import build_results
from .superposition import check_superposition

FIELDS_FILE = "fields.vtk"


def _number(value, fmt: str) -> str:
    """``fmt % value``, or a dash for a value that is missing or not finite (the report renders every result)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        return "–"
    return fmt % value


def _point(value) -> str:
    """An (x, y) location in mm."""
    try:
        return f"{_number(value[0], '%.3f')}, {_number(value[1], '%.3f')}"
    except (TypeError, IndexError):
        return "–"


class _QuietBytecodeCache(FileSystemBytecodeCache):
    """jinja's compiled templates, kept in the temporary folder between runs (compiling the report's
    template took ~0.3 s of every run); keyed by the template's checksum, so an edited template is
    compiled afresh. A cache that cannot be read or written is skipped, never an error."""

    def load_bytecode(self, bucket) -> None:
        try:
            super().load_bytecode(bucket)
        except (OSError, EOFError, ValueError):
            bucket.reset()

    def dump_bytecode(self, bucket) -> None:
        try:
            super().dump_bytecode(bucket)
        except OSError:
            pass


@lru_cache(maxsize=1)
def _environment() -> Environment:
    """One template environment per process (it keeps the templates it compiled)."""
    try:
        cache = _QuietBytecodeCache()
    except (OSError, RuntimeError):  # no private temporary folder to be had: compile every time
        cache = None
    env = Environment(
        loader=PackageLoader("fieldsection", "templates"),
        autoescape=select_autoescape(["html", "j2"]),
        undefined=StrictUndefined,
        bytecode_cache=cache,
    )
    env.filters["num"] = _number
    env.filters["xy"] = _point
    return env


def _template():
    """The report's page template, compiled (a quarter of a second when not cached: done while the figures
    are drawn)."""
    return _environment().get_template("report.html.j2")


def _render_html(results: dict, figures: list[dict[str, str]], template=None) -> str:
    planar = results["case"]["model"] == "planar"
    return (template or _template()).render(r=results, figures=figures, fields_file=FIELDS_FILE,
                                            L="_per_m" if planar else "", PER="/m" if planar else "")


def _data_uri(path: Path) -> str:
    return "data:image/png;base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _json_default(value):
    if hasattr(value, "tolist"):
        return value.tolist()
    raise TypeError(f"cannot store {type(value).__name__} in results.json")


@one_blas_thread()
def write_report(
    result: SectionResult,
    reports_dir: str | Path = "reports",
    *,
    with_figures: bool = True,
    on_step: Callable[[str], None] | None = None,
) -> Path:
    """Write ``reports_dir/<case name>/`` atomically and return its path."""
    from .vtk_export import write_vtk

    reports_dir = Path(reports_dir)
    try:
        reports_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"cannot create the reports folder {str(reports_dir)!r}: {exc.strerror}") from None
    target = reports_dir / result.case.name
    with built_whole(reports_dir, result.case.name, "the report") as staging:
        # the figures are drawn meanwhile, by a child process (``figures_worker``): matplotlib's import and the
        # maps take about as long as the superposition check, the VTK file and the page's template
        drawing = (start_drawing(_model_figure_jobs(result, staging), partial(_draw_check_figures, result, staging))
                   if with_figures else None)
        try:
            if on_step:
                on_step("results")
            superposition = check_superposition(result.solution, helper=drawing is None)
            probes = [sample_probe(result.solution, result.fields, line) for line in result.case.probes]
            if drawing is not None:
                drawing.give(superposition, probes)  # their figures are drawn while the rest is written
            results = build_results(result, superposition)
            results["probe_lines"] = [{**probe_results(p), "figure_file": figure_name(p.line) if with_figures else None}
                                      for p in probes]
            for samples in probes:
                write_csv(samples, staging / csv_name(samples.line))
            if on_step:
                on_step(FIELDS_FILE)
            write_vtk(result.problem, result.solution, result.fields, result.hotspots, staging / FIELDS_FILE)
            if result.conduction is not None:  # the DC or AC fields beside the electrostatic ones
                from .analysis_report import ANALYSIS_FIELDS_FILE, write_analysis_vtk

                write_analysis_vtk(result, staging / ANALYSIS_FIELDS_FILE)
            template = _template()
            if drawing is not None and on_step:
                on_step("figures")  # (what is left of drawing them: the rest went on beside the steps above)
            drawn = drawing.finish() if drawing is not None else []
        finally:
            if drawing is not None:
                drawing.stop()  # (after an error: the staging folder is removed next)
                _forget_binnings()
        figure_list: list[dict[str, str]] = []
        for name, caption in drawn:
            # embedded, so that report.html alone shows every figure; the PNG files stay beside it
            figure_list.append({"file": name, "caption": caption, "data": _data_uri(staging / name)})
        (staging / "results.json").write_text(json.dumps(results, indent=2, default=_json_default, allow_nan=False),
                                             encoding="utf-8")
        (staging / "report.html").write_text(_render_html(results, figure_list, template), encoding="utf-8")
    return target


def _model_figure_jobs(result: SectionResult, staging: Path) -> list[Callable[[], list[tuple[str, str]]]]:
    """The figures of the analysis itself, in report order: one job each, drawing into ``staging`` and returning its
    (file, caption)."""
    def job(name: str, caption: str, draw: Callable[[Path], object]) -> Callable[[], list[tuple[str, str]]]:
        def run() -> list[tuple[str, str]]:
            draw(staging / name)
            return [(name, caption)]
        return run

    def figures():
        from . import figures as fig  # matplotlib is slow to import: only when drawing (and in the drawing process)
        return fig

    magnitude = result.peak_search_field  # as the hotspots were found on it
    plots = [
        ("regions.png", "Regions, materials, electrodes and mesh", lambda p: figures().plot_regions(result.problem, p)),
        ("potential.png", "Potential", lambda p: figures().plot_potential(result.solution, p)),
        ("field.png", "|E| per element with hotspot regions outlined",
         lambda p: figures().plot_field(result.problem, result.fields, result.hotspots, p, magnitude=magnitude)),
        ("field_detail.png", "|E| close to the highest-ranked hotspot (or the highest field)",
         lambda p: figures().plot_field(result.problem, result.fields, result.hotspots, p, detail=True,
                                        magnitude=magnitude)),
        ("bound_charge.png", "Bound surface charge density on material faces",
         lambda p: figures().plot_bound_charge(result.problem, result.charges, p)),
    ]
    if result.conduction is not None:  # the DC or AC analysis's |E| and loss density
        from .analysis_report import analysis_figures

        plots += analysis_figures(result)
    return [job(*plot) for plot in plots]


def _forget_binnings() -> None:
    """The figures of this model are drawn: its pixel binnings (kept by the figure module, if it was loaded here)
    can go."""
    figures = sys.modules.get("fieldsection.figures")
    if figures is not None:
        figures.forget_binnings()


def _draw_check_figures(result: SectionResult, staging: Path, superposition, probes) -> list[tuple[str, str]]:
    """Draw the superposition check's figure and one per probe line; return their (file, caption)."""
    plots = []
    if superposition.checked:
        from .figures_superposition import plot_superposition

        plots.append(("superposition.png", "Charge superposition check: free and bound charge along the faces; "
                      "V rebuilt from them against the FE potential along a line",
                      lambda p: plot_superposition(result.problem, result.charges, superposition, p)))
    if probes:
        from .figures_probes import plot_probe

        plots += [(figure_name(p.line), f"Probe line {p.line.name}: V, |E| and share of strength along it",
                   lambda path, p=p: plot_probe(p, path, result.case.hotspot_fraction)) for p in probes]
    for name, _, draw in plots:
        draw(staging / name)
    return [(name, caption) for name, caption, _ in plots]


_PARTIAL, _OLD = ".partial-", ".old-"  # hidden working folders: .<case>.partial-<pid>-<random>


def new_staging_folder(parent: Path, name: str) -> Path:
    """A hidden working folder ``parent/.<name>.partial-<pid>-*`` for a folder built whole before it is
    published; the stale ones of killed runs are removed first."""
    remove_stale_folders(parent)
    staging = Path(tempfile.mkdtemp(prefix=f".{name}{_PARTIAL}{os.getpid()}-", dir=parent))
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(staging, 0o777 & ~umask)  # mkdtemp makes it private; a report folder is an ordinary one
    return staging


#: the file that tells each kind of report folder apart: a case, a study and the verification suite write into
#: the same reports folder, each into a folder of its own name, and one must not replace another's
REPORT_SIGNATURES = {"results.json": "a case's report", "table.json": "a study's report",
                     "verification.json": "the verification report"}


def _refuse_other_kind(staging: Path, target: Path, what: str) -> None:
    if not target.is_dir():
        return
    mine = {f for f in REPORT_SIGNATURES if (staging / f).is_file()}
    theirs = {f for f in REPORT_SIGNATURES if (target / f).is_file()}
    if theirs and theirs != mine:
        raise ReportFolderTaken(f"{str(target)!r} holds {REPORT_SIGNATURES[sorted(theirs)[0]]}, which {what} would replace; "
                          "write into another folder (--reports) or give the case or study another name")


@contextmanager
def built_whole(parent: Path, name: str, what: str) -> Iterator[Path]:
    """A staging folder for ``parent/name``, published whole when the block ends without error; on any error
    it is removed and nothing is published (``what`` names the folder in the message of a disk error). A folder
    of that name holding another kind of report (``REPORT_SIGNATURES``) is not replaced: an error says so."""
    target = parent / name
    staging = new_staging_folder(parent, name)
    try:
        yield staging
        _refuse_other_kind(staging, target, what)
        publish_folder(staging, target)
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise ReportError(f"cannot write {what} into {str(target)!r}: {exc}; no report was written") from exc
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise


def publish_folder(staging: Path, target: Path) -> None:
    """Rename the finished ``staging`` folder to ``target``, replacing an older one whole. Two runs
    publishing the same target take turns (a lock on the parent folder): the later one wins."""
    with _locked(target.parent):
        _replace_folder(staging, target)


def remove_stale_folders(reports_dir: Path) -> list[Path]:
    """Delete the working folders of runs that were killed (their process is gone); return what was removed.

    A run killed with SIGKILL cannot clean up after itself: its staging folder carries its process id,
    so the next run into the same reports folder recognises and removes it.
    """
    removed = []
    for folder in reports_dir.glob(".*"):
        marker = _PARTIAL if _PARTIAL in folder.name else _OLD if _OLD in folder.name else None
        if marker is None or not folder.is_dir():
            continue
        owner = folder.name.split(marker, 1)[1].split("-", 1)[0]
        if owner.isdigit() and _alive(int(owner)):
            continue
        shutil.rmtree(folder, ignore_errors=True)
        removed.append(folder)
    return removed


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


@contextmanager
def _locked(folder: Path):
    """An exclusive lock on ``folder`` (flock on its descriptor), released when the block ends or the process dies."""
    try:
        import fcntl
    except ImportError:  # no flock on this platform: renames are still atomic one by one
        yield
        return
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        fcntl.flock(descriptor, fcntl.LOCK_EX)
        yield
    finally:
        os.close(descriptor)  # closing releases the lock


def _replace_folder(staging: Path, target: Path) -> None:
    old = None
    if target.exists():
        old = Path(tempfile.mkdtemp(prefix=f".{target.name}{_OLD}{os.getpid()}-", dir=target.parent))
        old.rmdir()
        target.rename(old)
    try:
        staging.rename(target)
    except OSError as exc:
        if old is not None:
            old.rename(target)
        raise ReportError(f"cannot move the finished report into {str(target)!r}: {exc.strerror}") from None
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
