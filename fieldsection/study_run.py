"""The study engine: a cache keyed on each variant's full input, and local or Dask workers.

Each variant runs in a worker process (gmsh keeps process-wide state: threads would share it) as
``compute_variant(task)``, a module-level function of plain data so that a Dask worker can import
and unpickle it. The worker returns the variant's record (its headline numbers, or its error) and
the files of its own report; the client stores both in the cache as one folder renamed into place,
so an interrupted study (even by kill -9) keeps every variant that finished and recomputes only
the missing ones when run again.
"""

from __future__ import annotations

import concurrent.futures as cf
from contextlib import contextmanager
import hashlib
import json
import logging
import multiprocessing
import os
import re
import shutil
import sys
import tempfile
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, Sequence

from . import __version__
from .allocator import roomy_malloc
from .errors import FieldSectionError, ReportError
from .report import built_whole, remove_stale_folders
from .study import RunSettings, Study, StudyError, Variant

log = logging.getLogger("fieldsection.study")

RECORD_FILE = "record.json"
REPORT_FOLDER = "report"
LOG_FILE = "run.log"
_INCLUDE = re.compile(r'^\s*(?:Include|Merge)\s*"([^"]+)"', re.MULTILINE)


@dataclass(frozen=True)
class VariantTask:
    """What a worker needs to compute one variant: plain, picklable data."""

    key: str
    name: str  # the variant's case name (and its report folder's)
    mapping: Mapping[str, Any]
    base_dir: str
    figures: bool
    #: the geometry script and the files it includes, as (path relative to the script's folder, text):
    #: a worker on another machine, without the study's folder, computes from these
    scripts: tuple[tuple[str, str], ...] = ()


@dataclass
class RunLog:
    """Which variants ran and which came from the cache, in this run."""

    ran: list[str] = field(default_factory=list)
    cached: list[str] = field(default_factory=list)
    failed: list[str] = field(default_factory=list)
    seconds: float = 0.0


def script_texts(script: Path, seen: set[Path] | None = None) -> list[tuple[str, str]]:
    """The script's text and that of every file it includes or merges (recursively), as (path, text)."""
    seen = set() if seen is None else seen
    script = script.resolve()
    if script in seen or not script.is_file():
        return []
    seen.add(script)
    text = script.read_text(encoding="utf-8", errors="replace")
    out = [(str(script), text)]
    for included in _INCLUDE.findall(text):
        out += script_texts(script.parent / included, seen)
    return out


def variant_scripts(mapping: Mapping[str, Any], base_dir: Path) -> tuple[tuple[str, str], ...]:
    """The variant's geometry script and every file it includes, relative to the script's folder."""
    from .case import case_from_mapping

    script = case_from_mapping(mapping, name="variant", base_dir=base_dir).geometry.path
    out = []
    for path, text in script_texts(script):
        out.append((os.path.relpath(path, script.parent), text))
    return tuple(out)


def input_key(mapping: Mapping[str, Any], scripts: Sequence[tuple[str, str]], figures: bool) -> str:
    """A hash of the full resolved input: the case mapping, the script and its included files, the version."""
    digest = hashlib.sha256()
    digest.update(json.dumps({"case": mapping, "version": __version__, "figures": figures, "scripts": scripts},
                             sort_keys=True, default=str).encode())
    return digest.hexdigest()[:32]


def _materialised(task: VariantTask, folder: Path) -> tuple[Mapping[str, Any], str]:
    """The task's mapping and base folder, with the scripts written into ``folder`` when the study's folder is absent."""
    if Path(task.base_dir).is_dir() or not task.scripts:
        return task.mapping, task.base_dir
    for relative, text in task.scripts:
        path = (folder / "geometry" / relative).resolve()
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
    mapping = json.loads(json.dumps(task.mapping))
    mapping["geometry"]["script"] = task.scripts[0][0]
    return mapping, str(folder / "geometry")


def headline(results: Mapping[str, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    """The table's outputs of one variant from its results.json dict, and facts about its regions.

    Column names carry their unit like results.json's keys (``_pF_per_m``, ``_kV_per_mm``; a body of
    revolution's capacitance is per body, ``_pF``). Per-region columns name the region in brackets.
    """
    out: dict[str, Any] = {}
    cap = results["capacitance"]
    per = "pF_per_m" if "maxwell_matrix_pF_per_m" in cap else "pF"
    names = cap["conductors"]
    matrix = cap[f"maxwell_matrix_{per}"]
    mutual = cap[f"mutual_{per}"]
    for i, a in enumerate(names):
        for j in range(i, len(names)):
            out[f"C[{a},{names[j]}]_{per}"] = matrix[i][j]
    for i, a in enumerate(names):
        for j in range(i + 1, len(names)):
            out[f"C_mutual[{a}|{names[j]}]_{per}"] = mutual[i][j]
    if cap.get("two_level"):
        out[f"C_between_levels_{per}"] = cap["two_level"][f"from_energy_{per}"]
    kinds = {m["region"]: m["kind"] for m in results["materials"]}
    strengths = {m["region"]: m["dielectric_strength_kV_per_mm"] for m in results["materials"]}
    for peak in results["peak_fields"]:
        region = peak["region"]
        out[f"peak_E[{region}]_kV_per_mm"] = peak.get("peak_E_kV_per_mm")
        out[f"share_of_strength[{region}]"] = peak.get("fraction_of_strength")
        out[f"peak_status[{region}]"] = peak.get("status")
        if peak.get("status") == "singular":
            out[f"peak_E_on_this_mesh[{region}]_kV_per_mm"] = peak.get("mesh_dependent_E_kV_per_mm")
            out[f"share_on_this_mesh[{region}]"] = peak.get("mesh_dependent_fraction_of_strength")
    hotspots = results["hotspots"]
    out["hotspots"] = len(hotspots)
    if hotspots:
        worst = hotspots[0]  # ranked
        out["worst_hotspot_region"] = worst["region"]
        share = worst.get("fraction_of_strength")
        out["worst_hotspot_share"] = share if share is not None else worst.get("mesh_dependent_fraction_of_strength")
        out["worst_hotspot_status"] = worst.get("status")
    for gas in results["gas_gap_screening"]["regions"]:
        out[f"paschen_margin[{gas['region']}]"] = gas.get("inception_margin")
    out["dofs"] = results["mesh"]["degrees_of_freedom"]
    return out, {"kinds": kinds, "strengths_kV_per_mm": strengths,
                 "hotspot_fraction": results["case"]["hotspot_fraction"]}


def compute_variant(task: VariantTask) -> tuple[dict[str, Any], dict[str, bytes]]:
    """Solve one variant in this process: (record, files of its report). Never raises for the variant's own faults.

    A ``FieldSectionError`` (bad geometry at this parameter value, mesh refused, ...) is recorded
    with its message; any other exception with its type, and it is not cached (it may be the
    machine's fault, so a rerun tries again).
    """
    from .case import case_from_mapping
    from .pipeline import analyse
    from .report import write_report
    from .results import build_results

    start = time.perf_counter()
    record: dict[str, Any] = {"key": task.key, "name": task.name, "version": __version__}
    files: dict[str, bytes] = {}
    scratch = Path(tempfile.mkdtemp(prefix="fieldsection-variant-"))
    try:
        # a Dask worker's malloc thresholds, fixed there for trimming, cost a variant 1.7x its time
        with roomy_malloc():
            mapping, base_dir = _materialised(task, scratch)
            case = case_from_mapping(mapping, name=task.name, base_dir=base_dir)
            result = analyse(case)
            seconds = time.perf_counter() - start
            outputs, facts = headline(build_results(result))
            folder = write_report(result, scratch / "report", with_figures=task.figures)
            for path in folder.iterdir():
                files[path.name] = path.read_bytes()
            del result  # freed before the block gives free memory back
        record.update(status="ok", outputs={**outputs, "seconds": seconds}, **facts)
    except FieldSectionError as exc:
        record.update(status="failed", error=str(exc), error_type=type(exc).__name__, cache=True,
                      outputs={"seconds": time.perf_counter() - start})
    except Exception as exc:  # noqa: BLE001 - recorded, the study goes on
        last = traceback.extract_tb(exc.__traceback__)[-1:]
        where = f" at {Path(last[0].filename).name}:{last[0].lineno}" if last else ""
        record.update(status="failed", error=f"{type(exc).__name__}: {exc}{where}", error_type=type(exc).__name__,
                      cache=False, outputs={"seconds": time.perf_counter() - start})
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    return record, files


class VariantCache:
    """One folder per input key: ``record.json`` and the variant's ``report/``, renamed into place whole."""

    def __init__(self, folder: Path):
        self.folder = folder
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ReportError(f"cannot create the study cache {str(folder)!r}: {exc.strerror}") from None
        remove_stale_folders(folder)  # left by a run killed while storing

    def get(self, key: str) -> dict[str, Any] | None:
        path = self.folder / key / RECORD_FILE
        try:
            return json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None

    def report(self, key: str) -> Path | None:
        path = self.folder / key / REPORT_FOLDER
        return path if path.is_dir() else None

    def put(self, record: Mapping[str, Any], files: Mapping[str, bytes]) -> None:
        # a record for the same input: the newer one wins
        with built_whole(self.folder, record["key"], "a variant's record in the study cache") as staging:
            if files:
                (staging / REPORT_FOLDER).mkdir()
                for name, data in files.items():
                    (staging / REPORT_FOLDER / name).write_bytes(data)
            (staging / RECORD_FILE).write_text(json.dumps(record, indent=1), encoding="utf-8")

    def note(self, line: str) -> None:
        """Append a line to the cache's run log (kept across runs) and to the logger."""
        log.info(line)
        with open(self.folder / LOG_FILE, "a", encoding="utf-8") as out:
            out.write(f"{time.strftime('%Y-%m-%dT%H:%M:%S')} {line}\n")


def default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


class Runner:
    """Evaluates variants through the cache on a local process pool or a Dask cluster; reusable (a search)."""

    def __init__(self, study: Study, cache_dir: Path, settings: RunSettings | None = None, *,
                 progress: bool = False, on_record: Callable[[dict], None] | None = None):
        self.study = study
        self.settings = settings or study.run
        self.cache = VariantCache(cache_dir)
        self.progress = progress
        self.log = RunLog()
        self._pool: cf.ProcessPoolExecutor | None = None
        self._client = None
        self._on_record = on_record

    def __enter__(self) -> "Runner":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None
        if self._client is not None:
            self._client.close()
            self._client = None

    @property
    def where(self) -> str:
        if self.settings.scheduler:
            return f"Dask scheduler {self.settings.scheduler}"
        return f"{self.workers} local worker process(es)"

    @property
    def workers(self) -> int:
        return self.settings.workers or default_workers()

    def task(self, variant: Variant) -> VariantTask:
        scripts = variant_scripts(variant.mapping, self.study.base_dir)
        key = input_key(variant.mapping, scripts, self.settings.figures)
        return VariantTask(key, f"{self.study.name}-{key[:10]}", variant.mapping, str(self.study.base_dir),
                           self.settings.figures, scripts)

    def evaluate(self, variants: Sequence[Variant], what: str = "variants") -> list[dict[str, Any]]:
        """The record of each variant, in order: from the cache, or computed and stored."""
        start = time.perf_counter()
        tasks = [self.task(v) for v in variants]
        records: list[dict[str, Any] | None] = [self.cache.get(t.key) for t in tasks]
        missing: dict[str, list[int]] = {}
        for k, (task, record) in enumerate(zip(tasks, records)):
            if record is None:
                missing.setdefault(task.key, []).append(k)  # the same input twice runs once
            else:
                self.log.cached.append(variants[k].name)
        firsts = [tasks[ks[0]] for ks in missing.values()]
        if firsts:
            self.cache.note(f"{self.study.name}: {len(firsts)} of {len(tasks)} {what} to compute on {self.where}, "
                            f"{len(tasks) - sum(len(ks) for ks in missing.values())} from the cache")
        elif tasks:
            self.cache.note(f"{self.study.name}: all {len(tasks)} {what} from the cache")
        for record, files in self._compute(firsts):
            if record.get("cache", True):
                self.cache.put(record, files)
            for k in missing[record["key"]]:
                records[k] = record
                self.log.ran.append(variants[k].name)
                if record["status"] != "ok":
                    self.log.failed.append(variants[k].name)
                self.cache.note(f"ran {variants[k].name} ({record['key']}): {record['status']}"
                                + (f": {record['error']}" if record["status"] != "ok" else ""))
            if self._on_record is not None:
                self._on_record(record)
        self.log.seconds += time.perf_counter() - start
        return [r for r in records if r is not None]

    def _compute(self, tasks: list[VariantTask]) -> Iterable[tuple[dict, dict]]:
        if not tasks:
            return
        from tqdm import tqdm

        with tqdm(total=len(tasks), unit="variant", desc=self.study.name, disable=not self.progress,
                  file=sys.stderr) as bar:
            if self.settings.scheduler:
                results = self._dask(tasks)
            elif self.workers == 1:
                results = (compute_variant(t) for t in tasks)
            else:
                results = self._local(tasks)
            for record, files in results:
                bar.update(1)
                yield record, files

    def _local(self, tasks: list[VariantTask]) -> Iterable[tuple[dict, dict]]:
        if self._pool is None:
            # spawned, not forked: the parent may hold threads (progress bar, Dask) and gmsh state
            self._pool = cf.ProcessPoolExecutor(max_workers=self.workers,
                                                mp_context=multiprocessing.get_context("spawn"))
        with _one_thread_each():  # the workers are spawned at the first submission and take this environment
            futures = {self._pool.submit(compute_variant, t): t for t in tasks}
        for future in cf.as_completed(futures):
            try:
                yield future.result()
            except Exception as exc:  # noqa: BLE001 - a worker died (killed, out of memory): recorded, not cached
                yield _lost(futures[future], exc), {}

    def _dask(self, tasks: list[VariantTask]) -> Iterable[tuple[dict, dict]]:
        try:
            from distributed import Client, as_completed
        except ImportError:
            raise StudyError("--scheduler needs dask.distributed: pip install 'dask[distributed]'") from None
        if self._client is None:
            try:
                self._client = Client(self.settings.scheduler, timeout="20s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise StudyError(f"cannot reach the Dask scheduler {self.settings.scheduler!r} ({exc}); start one "
                                 "with 'dask scheduler' and workers with 'dask worker ADDRESS', or drop --scheduler "
                                 "to run on local processes") from None
        futures = self._client.map(compute_variant, tasks, key=[f"variant-{t.key}" for t in tasks], pure=False)
        by_key = {f.key: t for f, t in zip(futures, tasks)}
        for future in as_completed(futures):
            try:
                yield future.result()
            except Exception as exc:  # noqa: BLE001 - a worker died or the task was lost
                yield _lost(by_key[future.key], exc), {}


#: thread counts of the numerical libraries in each local worker: the workers share the cores, as the
#: processes of a Dask nanny do (which sets the same variables); several threads per worker would contend
THREAD_VARIABLES = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS")


@contextmanager
def _one_thread_each():
    saved = {name: os.environ.get(name) for name in THREAD_VARIABLES}
    os.environ.update({name: "1" for name in THREAD_VARIABLES})
    try:
        yield
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)
            else:
                os.environ[name] = value


def _lost(task: VariantTask, exc: BaseException) -> dict[str, Any]:
    return {"key": task.key, "name": task.name, "version": __version__, "status": "failed", "cache": False,
            "error": f"the worker was lost ({type(exc).__name__}: {exc})", "error_type": type(exc).__name__,
            "outputs": {}}


@dataclass(frozen=True)
class StudyOutcome:
    """What a study run produced: its folder, table rows, the search (if any) and this run's log."""

    folder: Path | None
    table: "Any"  # study_report.StudyTable
    search: "Any" = None  # study_search.SearchResult
    log: RunLog = field(default_factory=RunLog)


def cache_folder(study: Study, reports_dir: Path) -> Path:
    """Where a study's variants are cached: beside its report folder, so rewriting the report keeps them."""
    return reports_dir / f".{study.name}.cache"


def run_study(study: Study, reports_dir: str | Path = "reports", *, settings: RunSettings | None = None,
              progress: bool = False, write: bool = True) -> StudyOutcome:
    """Run (or read from the cache) every variant and the search; write ``reports_dir/<study>/`` atomically."""
    from .study_report import build_table, write_study_report

    reports_dir = Path(reports_dir)
    settings = settings or study.run
    variants = study.variants()
    runner = Runner(study, cache_folder(study, reports_dir), settings, progress=progress)
    with runner:
        records = runner.evaluate(variants)
        found = None
        if study.search is not None:
            from .study_search import run_search, search_from_mapping

            found = run_search(search_from_mapping(study.search, study), runner)
    table = build_table(study, variants, records)
    folder = None
    if write:
        folder = write_study_report(study, table, found, reports_dir, runner)
    return StudyOutcome(folder, table, found, runner.log)
