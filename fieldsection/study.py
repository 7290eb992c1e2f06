"""Design studies: a base case, axes of values to vary, and the variants they make.

A study file (TOML, fieldsection's own schema, documented in the README)::

    title = "..."
    case = "busbar_laminated.toml"       # the base case, relative to the study file

    [[vary]]                             # one axis: a case key and its values
    set = "geometry.parameters.film_thickness"
    values = ["0.2 mm", "0.3 mm"]        # a list ...
    # from = 0.1, to = 0.5, count = 5, spacing = "linear" | "log", unit = "mm"   # ... or a range

    [[vary]]                             # a zipped group: several keys that change together
    label = "voltage"
    together = { "electrodes.bar_plus" = ["1 kV", "2 kV"], "electrodes.bar_minus" = ["-1 kV", "-2 kV"] }

    [run]     workers, scheduler, max_dofs, figures
    [plot]    outputs = [table columns to draw against the axes]
    [search]  one scalar parameter and one criterion (``study_search``)

The variants are the product of the axes (the first axis varies slowest). Each variant is the
base case's mapping with the axis keys replaced, validated by ``case.case_from_mapping``.
"""

from __future__ import annotations

import copy
import itertools
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from .errors import CaseFileError

#: sections of a case a study may set (every key of a case file)
SETTABLE_ROOTS = ("geometry", "regions", "materials", "electrodes", "boundary", "hotspots", "mesh", "symmetry",
                  "refinement", "solver")
SPACINGS = ("linear", "log")
_TOP_KEYS = {"title", "case", "vary", "run", "plot", "search"}
_RUN_KEYS = {"workers", "scheduler", "max_dofs", "figures"}
_QUANTITY = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\d\s].*?)\s*$")


class StudyError(CaseFileError):
    """The study file is missing, unreadable or inconsistent."""


@dataclass(frozen=True)
class Axis:
    """One axis of a study: ``keys`` (dotted case keys) set together to ``values[k]`` for its k-th step."""

    label: str
    keys: tuple[str, ...]
    values: tuple[tuple[Any, ...], ...]  # one tuple per step, one entry per key

    def __len__(self) -> int:
        return len(self.values)


@dataclass(frozen=True)
class Variant:
    """One point of the study: its index, the settings it replaces, and the case mapping they make."""

    index: int
    settings: Mapping[str, Any]  # dotted key -> value as written in the study
    mapping: Mapping[str, Any]  # the whole case mapping (TOML tables), ready for ``case_from_mapping``
    name: str = ""  # "v001" for the product of the axes, "s01" for a search's evaluations


@dataclass(frozen=True)
class RunSettings:
    """How a study runs: local processes (``workers``; None: one per core) or a Dask ``scheduler``."""

    workers: int | None = None
    scheduler: str | None = None
    #: a per-variant DOF budget (overrides ``refinement.max_dofs`` of every variant): bounds each worker's memory
    max_dofs: int | None = None
    figures: bool = False  # draw each variant report's PNG figures (slower)


@dataclass(frozen=True)
class Study:
    """A design study: the base case's mapping, its axes, and how to run and report it."""

    name: str
    title: str
    base: Mapping[str, Any]  # the base case file parsed (tomllib)
    base_dir: Path  # where the base case lives (its geometry script is looked up from there)
    base_file: Path | None
    axes: tuple[Axis, ...]
    run: RunSettings = field(default_factory=RunSettings)
    plot_outputs: tuple[str, ...] = ()
    search: Mapping[str, Any] | None = None  # the [search] table, read by ``study_search``
    source_file: Path | None = None

    def variants(self) -> list[Variant]:
        """Every combination of the axes' steps, first axis slowest."""
        out = []
        for index, steps in enumerate(itertools.product(*(range(len(a)) for a in self.axes))):
            settings: dict[str, Any] = {}
            for axis, k in zip(self.axes, steps):
                settings.update(zip(axis.keys, axis.values[k]))
            out.append(self.variant(settings, index))
        return out

    def variant(self, settings: Mapping[str, Any], index: int = 0, name: str | None = None) -> Variant:
        """The base case with ``settings`` (dotted key -> value) replaced, and the study's DOF budget."""
        mapping = copy.deepcopy(dict(self.base))
        for key, value in settings.items():
            set_key(mapping, key, value)
        if self.run.max_dofs is not None:
            set_key(mapping, "refinement.max_dofs", self.run.max_dofs)
        title = str(mapping.get("title", "") or self.title)
        described = ", ".join(f"{k.rsplit('.', 1)[-1]} = {v}" for k, v in settings.items())
        mapping["title"] = f"{title} | {described}" if described else title
        return Variant(index, dict(settings), mapping, name or f"v{index + 1:03d}")

    def run_study(self, reports_dir: str | Path = "reports", **options):
        """Run every variant and write ``reports_dir/<study>/``; see ``study_run.run_study``."""
        from .study_run import run_study

        return run_study(self, reports_dir, **options)


def set_key(mapping: dict, key: str, value: Any) -> None:
    """Replace a dotted key (``geometry.parameters.film_thickness``) in a case mapping, making tables on the way."""
    parts = key.split(".")
    if parts[0] not in SETTABLE_ROOTS or len(parts) < 2 or not all(parts):
        raise StudyError(f"study key {key!r}: give a dotted case key starting with one of "
                         f"{', '.join(SETTABLE_ROOTS)}, e.g. 'geometry.parameters.film_thickness'")
    table = mapping
    for depth, part in enumerate(parts[:-1]):
        inner = table.setdefault(part, {})
        if not isinstance(inner, dict):
            where = ".".join(parts[: depth + 1])
            raise StudyError(f"study key {key!r}: {where!r} is a value in the base case, not a table; "
                             f"set {where!r} itself")
        table = inner
    table[parts[-1]] = value


def _read_toml(path: Path, what: str) -> dict[str, Any]:
    if not path.is_file():
        raise StudyError(f"{what} {str(path)!r} not found; give the path of a .toml file")
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise StudyError(f"{what} {path.name}: not UTF-8 text; save it as UTF-8 TOML") from None
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{what} {path.name}: {exc}; each key may appear once and strings need quotes") from None


def _number(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise StudyError(f"{where} = {value!r}: give a plain finite number (the unit goes in 'unit')")
    return float(value)


def range_values(table: Mapping[str, Any], where: str) -> list[Any]:
    """``from``/``to``/``count``/``spacing``/``unit`` as a list of values (strings "x unit" when a unit is given)."""
    start, stop = _number(table.get("from"), f"{where}.from"), _number(table.get("to"), f"{where}.to")
    count = table.get("count")
    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        raise StudyError(f"{where}.count = {count!r}: a whole number of at least 1, how many values")
    spacing = table.get("spacing", "linear")
    if spacing not in SPACINGS:
        raise StudyError(f"{where}.spacing = {spacing!r}: use one of {', '.join(map(repr, SPACINGS))}")
    if spacing == "log":
        if start <= 0 or stop <= 0:
            raise StudyError(f"{where}: a log range needs positive from and to, got {start!r} and {stop!r}")
        numbers = np.geomspace(start, stop, count)
    else:
        numbers = np.linspace(start, stop, count)
    unit = table.get("unit")
    if unit is not None and not isinstance(unit, str):
        raise StudyError(f"{where}.unit = {unit!r}: a unit name in quotes, e.g. 'mm' or 'kV'")
    numbers = [float(f"{x:.12g}") for x in numbers]  # 0.30000000000000004 -> 0.3: stable keys and labels
    return [f"{x:.12g} {unit}" for x in numbers] if unit else numbers


def _axis(entry: Any, k: int) -> Axis:
    where = f"vary[{k}]"
    if not isinstance(entry, Mapping):
        raise StudyError(f"{where}: each [[vary]] must be a table with 'set' and 'values' (or a range)")
    allowed = {"set", "values", "from", "to", "count", "spacing", "unit", "label", "together"}
    unknown = sorted(set(entry) - allowed)
    if unknown:
        raise StudyError(f"{where}: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(allowed))}")
    if "together" in entry:
        if "set" in entry or "values" in entry or "from" in entry:
            raise StudyError(f"{where}: a zipped group gives its keys and lists in 'together' only; "
                             "remove 'set', 'values' and range keys")
        group = entry["together"]
        if not isinstance(group, Mapping) or not group:
            raise StudyError(f"{where}.together: a table of case key -> list of values")
        lists = {}
        for key, values in group.items():
            if not isinstance(values, list) or not values:
                raise StudyError(f"{where}.together.{key}: give a non-empty list of values")
            lists[str(key)] = values
        lengths = {len(v) for v in lists.values()}
        if len(lengths) != 1:
            counts = ", ".join(f"{key}: {len(v)}" for key, v in lists.items())
            raise StudyError(f"{where}.together: the lists must have the same length to be zipped ({counts})")
        label = entry.get("label")
        if not isinstance(label, str) or not label:
            raise StudyError(f"{where}: a zipped group needs a label = \"...\" naming it in the table and plots")
        for key in lists:
            set_key({}, key, 0)  # checks the key's form
        keys = tuple(lists)
        return Axis(label, keys, tuple(zip(*(lists[key] for key in keys))))
    key = entry.get("set")
    if not isinstance(key, str):
        raise StudyError(f"{where}: give set = \"a.dotted.case.key\", e.g. 'geometry.parameters.film_thickness'")
    set_key({}, key, 0)
    has_range = any(k in entry for k in ("from", "to", "count"))
    if ("values" in entry) == has_range:
        raise StudyError(f"{where} ({key}): give either values = [...] or from/to/count, not {'both' if has_range else 'neither'}")
    if has_range:
        values = range_values(entry, where)
    else:
        values = entry["values"]
        if not isinstance(values, list) or not values:
            raise StudyError(f"{where}.values: give a non-empty list, e.g. values = ['0.2 mm', '0.3 mm']")
        if "spacing" in entry or "unit" in entry:
            raise StudyError(f"{where}: 'spacing' and 'unit' belong to a range (from/to/count); write the unit in "
                             "each value instead, e.g. '0.2 mm'")
    label = entry.get("label", key.rsplit(".", 1)[-1])
    return Axis(str(label), (key,), tuple((v,) for v in values))


def study_from_mapping(data: Mapping[str, Any], *, name: str, base_dir: str | Path,
                       where: str | None = None, source_file: Path | None = None) -> Study:
    """Validate a study given as the mapping a study file parses into; the base case is read from disk."""
    where = where or name
    base_dir = Path(base_dir)
    unknown = sorted(set(data) - _TOP_KEYS)
    if unknown:
        raise StudyError(f"{where}: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_TOP_KEYS))}")
    case_name = data.get("case")
    if not isinstance(case_name, str):
        raise StudyError(f"{where}: give the base case as case = \"name.toml\" (relative to the study file)")
    case_file = (base_dir / case_name).resolve()
    base = _read_toml(case_file, "base case")
    raw_axes = data.get("vary", [])
    if not isinstance(raw_axes, list):
        raise StudyError(f"{where}: 'vary' must be an array of tables, written [[vary]]")
    axes = tuple(_axis(entry, k) for k, entry in enumerate(raw_axes))
    labels = [a.label for a in axes]
    if len(set(labels)) != len(labels):
        raise StudyError(f"{where}: two axes share the label {next(l for l in labels if labels.count(l) > 1)!r}; "
                         "give one a label = \"...\"")
    keys = [k for a in axes for k in a.keys]
    if len(set(keys)) != len(keys):
        raise StudyError(f"{where}: the case key {next(k for k in keys if keys.count(k) > 1)!r} is varied by two "
                         "axes; vary it once (or zip the keys with 'together')")
    run_table = data.get("run", {})
    if not isinstance(run_table, Mapping):
        raise StudyError(f"{where}: [run] must be a table")
    unknown = sorted(set(run_table) - _RUN_KEYS)
    if unknown:
        raise StudyError(f"{where} [run]: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_RUN_KEYS))}")
    run = run_settings(run_table.get("workers"), run_table.get("scheduler"), run_table.get("max_dofs"),
                       run_table.get("figures", False), "run.")
    plot = data.get("plot", {})
    if not isinstance(plot, Mapping) or set(plot) - {"outputs"}:
        raise StudyError(f"{where}: [plot] takes outputs = [\"table column\", ...] only")
    outputs = plot.get("outputs", [])
    if not isinstance(outputs, list) or not all(isinstance(o, str) for o in outputs):
        raise StudyError(f"{where}: plot.outputs must be a list of table column names")
    search = data.get("search")
    if search is not None and not isinstance(search, Mapping):
        raise StudyError(f"{where}: [search] must be a table")
    study = Study(name=name, title=str(data.get("title", "")), base=base, base_dir=case_file.parent,
                  base_file=case_file, axes=axes, run=run, plot_outputs=tuple(outputs), search=search,
                  source_file=source_file)
    if search is not None:
        from .study_search import search_from_mapping

        search_from_mapping(search, study)  # validated now, before any variant runs
    # every variant must make a valid case (names are checked against the geometry when it runs)
    from .case import case_from_mapping

    for variant in study.variants() or [study.variant({})]:
        try:
            case_from_mapping(variant.mapping, name=name, base_dir=study.base_dir, where=f"{where} {variant.name}")
        except StudyError:
            raise
        except CaseFileError as exc:
            described = ", ".join(f"{k} = {v!r}" for k, v in variant.settings.items()) or "the base case"
            raise StudyError(f"{where}: variant {variant.name} ({described}): {exc}") from None
    return study


def run_settings(workers: Any = None, scheduler: Any = None, max_dofs: Any = None, figures: Any = False,
                 prefix: str = "") -> RunSettings:
    """Checked run settings (``prefix`` names the keys in messages: 'run.' in a study file, '--' on the CLI)."""
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise StudyError(f"{prefix}workers = {workers!r}: a whole number of at least 1 (default: one per core)")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler):
        raise StudyError(f"{prefix}scheduler = {scheduler!r}: a Dask scheduler address, e.g. 'tcp://10.0.0.5:8786'")
    if max_dofs is not None and (isinstance(max_dofs, bool) or not isinstance(max_dofs, int) or max_dofs < 100):
        raise StudyError(f"{prefix}max_dofs = {max_dofs!r}: a whole number of at least 100, the DOF budget of "
                         "each variant (bounds a worker's memory)")
    if not isinstance(figures, bool):
        raise StudyError(f"{prefix}figures = {figures!r}: true or false, without quotes")
    return RunSettings(workers, scheduler, max_dofs, figures)


def load_study(path: str | Path) -> Study:
    """Read and validate a study file and its base case."""
    path = Path(path)
    data = _read_toml(path, "study file")
    return study_from_mapping(data, name=path.stem, base_dir=path.parent, where=path.name,
                              source_file=path.resolve())


def split_quantity(value: Any) -> tuple[float, str] | None:
    """``"0.3 mm"`` -> (0.3, "mm"); a plain number -> (x, ""); anything else None."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return float(value), ""
    if isinstance(value, str):
        found = _QUANTITY.match(value)
        if found:
            return float(found.group(1)), found.group(2)
        try:
            return float(value), ""
        except ValueError:
            return None
    return None


def unit_suffix(unit: str) -> str:
    """A unit as a column-name suffix: 'kV/mm' -> 'kV_per_mm', 'mm' -> 'mm'."""
    text = unit.replace(" ", "").replace("/", "_per_").replace("^", "").replace("*", "_")
    return re.sub(r"[^A-Za-z0-9_]", "", text)


def input_columns(keys: Sequence[str], values: Sequence[Sequence[Any]]) -> dict[str, tuple[str, str]]:
    """Column name and unit for each varied key: numeric with its unit when every value has the same one."""
    out = {}
    for j, key in enumerate(keys):
        parsed = [split_quantity(v[j]) for v in values]
        units = {p[1] for p in parsed if p is not None}
        label = key
        if all(p is not None for p in parsed) and len(units) == 1:
            unit = units.pop()
            out[key] = (f"{label}_{unit_suffix(unit)}" if unit else label, unit)
        else:
            out[key] = (label, "text")
    return out
