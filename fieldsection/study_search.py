"""Design search: the smallest or largest value of one parameter that meets one criterion.

The ``[search]`` table of a study file::

    set = "geometry.parameters.film_thickness"   # the scalar case key searched
    from = 0.05
    to = 0.6
    unit = "mm"                 # optional: values are written "x mm" into the case
    tolerance = 0.01            # on the parameter, in the same unit
    output = "share_of_strength[film]"   # a table column, or share_of_strength[every solid] /
                                         # paschen_margin[every gas] (the worst region)
    at_most = 0.5               # or at_least = ..., with find = "smallest" | "largest";
                                # or equal = ... (a root); or goal = "minimum" | "maximum"
    find = "smallest"
    scan = 5                    # values evaluated at once across the range to bracket the answer
    singular = "refuse"         # a singular peak cannot be judged; "this mesh" judges its value on the last mesh

Every value is one variant of the base case run through the study's cache and workers, so a
repeated search costs nothing. Threshold searches bracket the change from the scan, then narrow it
by bisection (k-section with k workers) until the bracket is within the tolerance; ``equal`` uses
``scipy.optimize.brentq`` and ``goal`` ``scipy.optimize.minimize_scalar`` (bounded) inside the
scan's bracket.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any, Mapping

import numpy as np

from .study import Study, StudyError, set_key, unit_suffix

_KEYS = {"set", "from", "to", "unit", "spacing", "tolerance", "output", "at_most", "at_least", "equal", "goal",
         "find", "scan", "singular"}
GOALS = ("minimum", "maximum")
FINDS = ("smallest", "largest")
SINGULAR_RULES = {"refuse": "a singular peak cannot be judged: the value does not meet the criterion",
                  "this mesh": "a singular peak is judged by its value on the last mesh (mesh-dependent)"}
AGGREGATES = {"every solid": "solid", "every liquid": "liquid", "every gas": "gas", "every region": None}


@dataclass(frozen=True)
class Search:
    """A checked [search] table."""

    key: str
    start: float
    stop: float
    unit: str
    tolerance: float
    output: str
    kind: str  # "at_most" | "at_least" | "equal" | "minimum" | "maximum"
    threshold: float | None
    find: str
    scan: int
    singular: str
    spacing: str = "linear"

    @property
    def criterion(self) -> str:
        if self.kind in GOALS:
            return f"{self.kind} of {self.output}"
        sign = {"at_most": "<=", "at_least": ">=", "equal": "="}[self.kind]
        return f"{self.output} {sign} {self.threshold:g}"

    @property
    def column(self) -> str:
        name = self.key.rsplit(".", 1)[-1]
        return f"{name}_{unit_suffix(self.unit)}" if self.unit else name


@dataclass
class Step:
    """One evaluated value of a search."""

    name: str
    x: float
    value: float | None
    meets: bool | None
    note: str
    key: str


@dataclass
class SearchResult:
    """The answer (``value``, None if the criterion cannot be met in the range), every step, and the message."""

    search: Search
    value: float | None
    met: bool
    message: str
    steps: list[Step] = field(default_factory=list)
    iterations: int = 0
    certificates: dict[str, Any] = field(default_factory=dict)
    outputs_at_result: dict[str, Any] = field(default_factory=dict)

    output = property(lambda self: self.search.output)
    threshold = property(lambda self: self.search.threshold)
    criterion = property(lambda self: self.search.criterion)
    column = property(lambda self: self.search.column)

    @property
    def description(self) -> str:
        s = self.search
        what = {"at_most": f"the {s.find} value meeting", "at_least": f"the {s.find} value meeting",
                "equal": "the value where", "minimum": "the value giving the", "maximum": "the value giving the"}[s.kind]
        return (f"Search over {s.key} from {s.start:g} to {s.stop:g} {s.unit}".rstrip() +
                f" for {what} {s.criterion}, to {s.tolerance:g} {s.unit}".rstrip() +
                f"; singular peaks: {SINGULAR_RULES[s.singular]}.")

    def as_dict(self) -> dict[str, Any]:
        return {
            "search": asdict(self.search),
            "criterion": self.criterion,
            "description": self.description,
            "met": self.met,
            f"value_{unit_suffix(self.search.unit)}" if self.search.unit else "value": self.value,
            "message": self.message,
            "iterations": self.iterations,
            "evaluations": len(self.steps),
            "certificates_at_result": self.certificates,
            "outputs_at_result": self.outputs_at_result,
            "steps": [asdict(s) for s in self.steps],
        }


def _finite(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise StudyError(f"{where} = {value!r}: give a plain finite number")
    return float(value)


def search_from_mapping(table: Mapping[str, Any], study: Study) -> Search:
    """Check a [search] table."""
    unknown = sorted(set(table) - _KEYS)
    if unknown:
        raise StudyError(f"[search]: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_KEYS))}")
    key = table.get("set")
    if not isinstance(key, str):
        raise StudyError("[search]: give set = \"a.dotted.case.key\", the one parameter searched")
    set_key({}, key, 0)
    start, stop = _finite(table.get("from"), "search.from"), _finite(table.get("to"), "search.to")
    if not start < stop:
        raise StudyError(f"search.from = {start:g} must be below search.to = {stop:g}")
    tolerance = _finite(table.get("tolerance"), "search.tolerance")
    if not 0 < tolerance < stop - start:
        raise StudyError(f"search.tolerance = {tolerance:g}: positive and smaller than the range ({stop - start:g})")
    unit = table.get("unit", "")
    if not isinstance(unit, str):
        raise StudyError(f"search.unit = {unit!r}: a unit name in quotes, e.g. 'mm'")
    output = table.get("output")
    if not isinstance(output, str) or not output:
        raise StudyError("[search]: give output = \"a table column\", e.g. 'share_of_strength[every solid]'")
    kinds = [k for k in ("at_most", "at_least", "equal", "goal") if k in table]
    if len(kinds) != 1:
        raise StudyError("[search]: give exactly one of at_most, at_least, equal or goal "
                         f"(got {', '.join(kinds) or 'none'})")
    kind = kinds[0]
    threshold = None
    if kind == "goal":
        kind = table["goal"]
        if kind not in GOALS:
            raise StudyError(f"search.goal = {kind!r}: use one of {', '.join(map(repr, GOALS))}")
    else:
        threshold = _finite(table[kind], f"search.{kind}")
    find = table.get("find", "smallest")
    if find not in FINDS:
        raise StudyError(f"search.find = {find!r}: use one of {', '.join(map(repr, FINDS))}")
    scan = table.get("scan", 5)
    if isinstance(scan, bool) or not isinstance(scan, int) or scan < 3:
        raise StudyError(f"search.scan = {scan!r}: a whole number of at least 3, the values tried first")
    singular = table.get("singular", "refuse")
    if singular not in SINGULAR_RULES:
        raise StudyError(f"search.singular = {singular!r}: use one of {', '.join(map(repr, SINGULAR_RULES))}")
    spacing = table.get("spacing", "linear")
    if spacing not in ("linear", "log") or (spacing == "log" and start <= 0):
        raise StudyError(f"search.spacing = {spacing!r}: 'linear', or 'log' with a positive range")
    return Search(key, start, stop, unit, tolerance, output, kind, threshold, find, scan, singular, spacing)


def output_value(record: Mapping[str, Any], search: Search) -> tuple[float | None, str]:
    """The searched output of one variant's record, and a note (singular, failed, missing)."""
    if record.get("status") != "ok":
        return None, f"failed: {record.get('error', '')}"
    outputs = record.get("outputs", {})
    name = search.output
    inside = name[name.find("[") + 1:name.find("]")] if "[" in name and "]" in name else None
    if inside in AGGREGATES:
        kind = AGGREGATES[inside]
        regions = [r for r, k in (record.get("kinds") or {}).items() if kind is None or k == kind]
        prefix, suffix = name[:name.find("[")], name[name.find("]") + 1:]
        values, notes = [], []
        for region in regions:
            value, note = _one(outputs, f"{prefix}[{region}]{suffix}", region, search)
            if note:
                notes.append(note)
            if value is None and f"{prefix}[{region}]{suffix}" in outputs:
                return None, "; ".join(notes)
            if value is not None:
                values.append(value)
        if not values:
            return None, "; ".join(notes) or f"no {inside.split()[-1]} region has {prefix}"
        worst = min(values) if search.kind == "at_least" or prefix.startswith("paschen_margin") else max(values)
        return worst, "; ".join(notes)
    return _one(outputs, name, inside, search)


def _one(outputs: Mapping[str, Any], column: str, region: str | None, search: Search) -> tuple[float | None, str]:
    value = outputs.get(column)
    status = outputs.get(f"peak_status[{region}]") if region else None
    if value is None and status == "singular":
        if search.singular == "this mesh":
            fallback = column.replace("share_of_strength[", "share_on_this_mesh[").replace(
                "peak_E[", "peak_E_on_this_mesh[")
            if outputs.get(fallback) is not None:
                return float(outputs[fallback]), f"{region}: singular, judged on the last mesh"
        return None, f"{region}: singular peak (sharp edge), cannot be judged; round the edge"
    if value is None:
        if column not in outputs:
            return None, f"no output {column!r} in the table"
        return None, f"{column} has no value"
    note = f"{region}: {status}" if status and status != "converged" else ""
    return float(value), note


def _meets(search: Search, value: float | None) -> bool | None:
    if value is None:
        return None
    if search.kind == "at_most":
        return value <= search.threshold
    if search.kind == "at_least":
        return value >= search.threshold
    return None


def run_search(search: Search, runner: Any) -> SearchResult:
    """Bracket and narrow the answer; every value is a cached variant of the base case."""
    study: Study = runner.study
    steps: list[Step] = []
    seen: dict[float, Step] = {}

    def text(x: float) -> Any:
        return f"{x:.12g} {search.unit}" if search.unit else float(f"{x:.12g}")

    def evaluate(xs: list[float]) -> list[Step]:
        fresh = [x for x in dict.fromkeys(xs) if x not in seen]
        if fresh:
            variants = [study.variant({search.key: text(x)}, len(steps) + k, name=f"s{len(steps) + k + 1:02d}")
                        for k, x in enumerate(fresh)]
            records = runner.evaluate(variants, what="search values")
            for x, variant, record in zip(fresh, variants, records):
                value, note = output_value(record, search)
                step = Step(variant.name, x, value, _meets(search, value), note, record["key"])
                steps.append(step)
                seen[x] = step
        return [seen[x] for x in xs]

    if search.spacing == "log":
        xs = list(np.geomspace(search.start, search.stop, search.scan))
    else:
        xs = list(np.linspace(search.start, search.stop, search.scan))
    xs = [float(f"{x:.12g}") for x in xs]
    scanned = evaluate(xs)
    if search.kind in ("at_most", "at_least"):
        result = _threshold(search, scanned, evaluate, runner.workers)
    elif search.kind == "equal":
        result = _root(search, scanned, evaluate)
    else:
        result = _extremum(search, scanned, evaluate)
    result.steps = sorted(steps, key=lambda s: s.name)
    if any("judged on the last mesh" in s.note for s in steps):
        result.message += ("; judged by a singular peak's value on the last mesh (a sharp edge): mesh-dependent, "
                           "not a peak field; round the edge in the geometry for a design value")
    if result.value is not None:
        at = seen.get(result.value)
        if at is None:
            at = evaluate([result.value])[0]
        record = runner.cache.get(at.key) or {}
        outputs = record.get("outputs", {})
        result.outputs_at_result = outputs
        result.certificates = {k[len("peak_status["):-1]: v for k, v in outputs.items() if k.startswith("peak_status[")}
    return result


def _threshold(search: Search, scanned: list[Step], evaluate, workers: int) -> SearchResult:
    met = [bool(s.meets) for s in scanned]
    smallest = search.find == "smallest"
    unjudged = [s for s in scanned if s.meets is None]
    note = f" ({len(unjudged)} scanned value(s) could not be judged: {unjudged[0].note})" if unjudged else ""
    if not any(met):
        return SearchResult(search, None, False,
                            f"the criterion {search.criterion} is not met anywhere in the range "
                            f"[{search.start:g}, {search.stop:g}] {search.unit} at the {len(scanned)} values "
                            f"scanned{note}".replace("  ", " "))
    order = scanned if smallest else scanned[::-1]  # walk from the end that should fail towards the one that meets
    flags = [bool(s.meets) for s in order]
    if flags[0]:
        edge = order[0]
        return SearchResult(search, edge.x, True,
                            f"met already at the range's {'start' if smallest else 'end'}, {edge.x:g} {search.unit}: "
                            f"the {search.find} value may lie outside the range; widen it to find the limit")
    # the last change from "fails" to "meets" walking towards the meeting end
    j = max(k for k in range(1, len(flags)) if flags[k] and not flags[k - 1])
    fails, meets = order[j - 1], order[j]
    monotone = all(flags[j:]) and not any(flags[:j])
    iterations = 0
    k = max(1, min(workers, 4))
    while abs(meets.x - fails.x) > search.tolerance:
        iterations += 1
        inner = [fails.x + (meets.x - fails.x) * (i + 1) / (k + 1) for i in range(k)]
        inner = [float(f"{x:.12g}") for x in inner]
        points = evaluate(inner)
        for step in points:  # ordered from the failing side to the meeting side
            if step.meets:
                meets = step
                break
            fails = step
    warning = "" if monotone else "; the criterion changed more than once across the scan: the answer is the " \
                                  "change nearest the meeting end, check the plot"
    return SearchResult(search, meets.x, True,
                        f"{search.find} value meeting {search.criterion}: {meets.x:.6g} {search.unit} "
                        f"(bracket [{min(fails.x, meets.x):.6g}, {max(fails.x, meets.x):.6g}] within "
                        f"{search.tolerance:g} {search.unit}, {iterations} narrowing step(s)){warning}"
                        .replace("  ", " "), iterations=iterations)


def _root(search: Search, scanned: list[Step], evaluate) -> SearchResult:
    from scipy.optimize import brentq

    usable = [s for s in scanned if s.value is not None]
    if len(usable) < len(scanned):
        bad = next(s for s in scanned if s.value is None)
        return SearchResult(search, None, False, f"cannot search: {search.output} has no value at "
                                                 f"{bad.x:g} {search.unit} ({bad.note})".replace("  ", " "))
    g = [s.value - search.threshold for s in usable]
    pair = next(((a, b) for a, b in zip(usable, usable[1:]) if (a.value - search.threshold) * (b.value - search.threshold) <= 0), None)
    if pair is None:
        return SearchResult(search, None, False,
                            f"{search.output} does not reach {search.threshold:g} in the range [{search.start:g}, "
                            f"{search.stop:g}] {search.unit} (from {min(g) + search.threshold:.6g} to "
                            f"{max(g) + search.threshold:.6g} at the values scanned)".replace("  ", " "))
    a, b = pair
    if a.value == search.threshold or b.value == search.threshold:
        hit = a if a.value == search.threshold else b
        return SearchResult(search, hit.x, True, f"{search.criterion} at {hit.x:.6g} {search.unit}")

    def f(x: float) -> float:
        step = evaluate([float(f"{x:.12g}")])[0]
        if step.value is None:
            raise StudyError(f"search: {search.output} has no value at {x:g} {search.unit} ({step.note})")
        return step.value - search.threshold

    x, info = brentq(f, a.x, b.x, xtol=search.tolerance, full_output=True)
    x = float(f"{x:.12g}")
    return SearchResult(search, x, True, f"{search.criterion} at {x:.6g} {search.unit} (Brent's method within "
                                         f"{search.tolerance:g} {search.unit}, {info.iterations} iteration(s))"
                        .replace("  ", " "), iterations=info.iterations)


def _extremum(search: Search, scanned: list[Step], evaluate) -> SearchResult:
    from scipy.optimize import minimize_scalar

    if any(s.value is None for s in scanned):
        bad = next(s for s in scanned if s.value is None)
        return SearchResult(search, None, False, f"cannot search: {search.output} has no value at "
                                                 f"{bad.x:g} {search.unit} ({bad.note})".replace("  ", " "))
    sign = 1.0 if search.kind == "minimum" else -1.0
    i = int(np.argmin([sign * s.value for s in scanned]))
    lo, hi = scanned[max(i - 1, 0)].x, scanned[min(i + 1, len(scanned) - 1)].x

    def f(x: float) -> float:
        step = evaluate([float(f"{x:.12g}")])[0]
        if step.value is None:
            raise StudyError(f"search: {search.output} has no value at {x:g} {search.unit} ({step.note})")
        return sign * step.value

    found = minimize_scalar(f, bounds=(lo, hi), method="bounded", options={"xatol": search.tolerance})
    x = float(f"{found.x:.12g}")
    at_edge = i in (0, len(scanned) - 1)
    warning = f"; the {search.kind} lies at the range's edge: widen the range" if at_edge else ""
    return SearchResult(search, x, not at_edge,
                        f"{search.kind} of {search.output} at {x:.6g} {search.unit} (bounded Brent within "
                        f"{search.tolerance:g} {search.unit}, {found.nfev} evaluation(s)){warning}".replace("  ", " "),
                        iterations=int(found.nfev))
