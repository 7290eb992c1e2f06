"""Probe lines: V, |E| and the share of dielectric strength sampled along straight lines named in the case.

A case file may name lines to sample::

    [probes.across_film]
    from = ["0 mm", "-1 mm"]      # x, y of the start (lengths with units; plain numbers are metres)
    to = ["0 mm", "1 mm"]
    points = 400                  # optional, samples along the line, ends included (default 201)

    [probes.along_bar]
    curve = "bar_plus"            # or along a named physical curve of the script (one piece, open or closed)
    side = "film"                 # optional: the region whose side of the curve is sampled

``parse_probes`` checks the table (one-line ``CaseFileError`` naming the key and the fix);
``sample_probe`` samples a solved model along one line, vectorised: each point is located in its
element's corner triangle (``superposition._containing_elements``), V is the FE potential there and
|E| the element's vertex field interpolated linearly (exact for P2 on straight elements, whose
gradient is linear). Points in a conductor carry its potential and no field; points outside the drawn
section (or in the mapped exterior of open space) are NaN. On curved elements the corner triangle
stands in for the curved one (a difference of the order of the element's bulge, at its curved side).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from .errors import CaseFileError
from .units import to_si

#: samples along a line unless ``points`` is given, and the allowed range
DEFAULT_POINTS = 201
MAX_POINTS = 20_000
_KEYS = {"from", "to", "points", "curve", "side"}


@dataclass(frozen=True)
class ProbeLine:
    """A straight line from ``start`` to ``end`` (x, y in metres), or the named physical ``curve`` (``start`` and
    ``end`` then NaN), sampled at ``points`` points, ends included; ``side``: sample only that region's elements."""

    name: str
    start: tuple[float, float]
    end: tuple[float, float]
    points: int = DEFAULT_POINTS
    curve: str | None = None
    side: str | None = None

    @property
    def length(self) -> float:
        return math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])


@dataclass(frozen=True)
class ProbeSamples:
    """The line sampled: distance from the start (m), x, y (m), region name ('' outside), V (V), |E| (V/m),
    |E| / dielectric strength (NaN where none is known or no field applies)."""

    line: ProbeLine
    distance: np.ndarray
    xy: np.ndarray  # (n, 2)
    region: tuple[str, ...]
    potential: np.ndarray
    field: np.ndarray
    share: np.ndarray


def _point(value: Any, where: str) -> tuple[float, float]:
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise CaseFileError(f"{where}: expected two lengths [x, y], e.g. [\"0 mm\", \"1.5 mm\"], got {value!r}")
    return (to_si(value[0], "length", f"{where}[0]"), to_si(value[1], "length", f"{where}[1]"))


def parse_probes(table: Any, where: str) -> tuple[ProbeLine, ...]:
    """The ``[probes]`` table of a case file (``None`` when absent) as probe lines, in the file's order."""
    if table is None:
        return ()
    if not isinstance(table, Mapping):
        raise CaseFileError(f"{where}: [probes] must be a table of named lines, e.g. [probes.across_film], "
                            f"got {type(table).__name__}")
    lines = []
    for name, spec in table.items():
        at = f"{where}: probes.{name}"
        if not isinstance(spec, Mapping):
            raise CaseFileError(f"{at} must be a table with 'from' and 'to' points, got {type(spec).__name__}")
        unknown = sorted(set(spec) - _KEYS)
        if unknown:
            raise CaseFileError(f"{at}: unknown key {unknown[0]!r}; allowed keys: {', '.join(sorted(_KEYS))}")
        points = spec.get("points", DEFAULT_POINTS)
        if isinstance(points, bool) or not isinstance(points, int) or not 2 <= points <= MAX_POINTS:
            raise CaseFileError(f"{at}.points: expected a whole number from 2 to {MAX_POINTS}, got {points!r}")
        side = spec.get("side")
        if side is not None and (not isinstance(side, str) or not side):
            raise CaseFileError(f"{at}.side: expected a region name, got {side!r}")
        if "curve" in spec:
            curve = spec["curve"]
            if "from" in spec or "to" in spec:
                raise CaseFileError(f"{at}: give either 'curve' or 'from' and 'to', not both")
            if not isinstance(curve, str) or not curve:
                raise CaseFileError(f"{at}.curve: expected the name of a physical curve of the script, got {curve!r}")
            lines.append(ProbeLine(str(name), (math.nan, math.nan), (math.nan, math.nan), points, curve, side))
            continue
        for key in ("from", "to"):
            if key not in spec:
                raise CaseFileError(f"{at}: missing {key!r}; give the line's ends as from = [x, y] and to = [x, y], "
                                    "or curve = \"<physical curve>\"")
        start, end = _point(spec["from"], f"{at}.from"), _point(spec["to"], f"{at}.to")
        line = ProbeLine(str(name), start, end, points, None, side)
        if not line.length > 0:
            raise CaseFileError(f"{at}: 'from' and 'to' are the same point; give two different ends")
        lines.append(line)
    return tuple(lines)


def sample_probe(solution, fields, line: ProbeLine) -> ProbeSamples:
    """V, |E| and the share of strength along ``line`` on the solved model (``fields``: its ``ElementFields``)."""
    from .mesh import EXTERIOR  # (not at the top: case.py imports this module, and mesh.py imports case.py)
    from .superposition import _containing_elements, _potential_at

    problem = solution.problem
    section = problem.section
    mesh = section.mesh
    allowed = ~section.exterior
    if line.side is not None:
        if line.side not in section.region_names or line.side == EXTERIOR:
            names = ", ".join(n for n in section.region_names if n != EXTERIOR)
            raise CaseFileError(f"probes.{line.name}.side: no region {line.side!r}; regions: {names}")
        allowed = allowed & (section.region_of_element == section.region_names.index(line.side))
    if line.curve is None:
        s = np.linspace(0.0, 1.0, line.points)
        a, b = np.asarray(line.start), np.asarray(line.end)
        xy = a + s[:, None] * (b - a)
        distance = s * line.length
    else:
        path = _curve_path(section, line)
        along = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(path, axis=0).T))])
        distance = np.linspace(0.0, along[-1], line.points)
        xy = np.stack([np.interp(distance, along, path[:, 0]), np.interp(distance, along, path[:, 1])], axis=1)
        a, b = xy[0], xy[-1]
    cells, ref = _containing_elements(mesh, xy, allowed=allowed)
    inside = cells >= 0
    if not inside.any():
        x, y = mesh.p[:, np.unique(mesh.t[:, ~section.exterior])] * 1e3
        raise CaseFileError(
            f"probes.{line.name}: the line from ({a[0] * 1e3:g}, {a[1] * 1e3:g}) mm to ({b[0] * 1e3:g}, {b[1] * 1e3:g}) mm "
            f"misses the drawn section (x {x.min():g} to {x.max():g} mm, y {y.min():g} to {y.max():g} mm); "
            "give ends inside it")
    c, r = cells[inside], ref[:, inside]
    potential = np.full(len(xy), np.nan)
    potential[inside] = _potential_at(solution, r, c)
    weights = np.stack([1.0 - r[0] - r[1], r[0], r[1]], axis=1)  # (n, 3) barycentric
    E = np.einsum("nk,nkc->nc", weights, fields.E[c])
    field = np.full(len(xy), np.nan)
    field[inside] = np.hypot(E[:, 0], E[:, 1])
    names = section.region_names
    strength = np.array([_strength(problem, name) for name in names])
    share = np.full(len(xy), np.nan)
    region_index = section.region_of_element[c]
    dielectric = problem.dielectric[c]
    share[inside] = np.where(dielectric, field[inside] / strength[region_index], np.nan)
    field[np.flatnonzero(inside)[~dielectric]] = 0.0  # no field inside a conductor
    region = np.full(len(xy), "", dtype=object)
    region[inside] = np.array(names, dtype=object)[region_index]
    return ProbeSamples(line, distance, xy, tuple(region), potential, field, share)


def _curve_path(section, line: ProbeLine) -> np.ndarray:
    """The vertices of the named physical curve in order along it (m, (n, 2)); a closed curve ends where it starts."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components, depth_first_order

    if line.curve not in section.curve_facets:
        names = ", ".join(sorted(section.curve_facets))
        raise CaseFileError(f"probes.{line.name}.curve: no physical curve {line.curve!r} in the script; curves: {names}")
    mesh = section.mesh
    pairs = mesh.facets[:, section.curve_facets[line.curve]]
    used, local = np.unique(pairs, return_inverse=True)
    local = local.reshape(pairs.shape)
    graph = coo_matrix((np.ones(local.shape[1]), (local[0], local[1])), shape=(used.size, used.size)).tocsr()
    pieces, _ = connected_components(graph, directed=False)
    degree = np.bincount(local.ravel(), minlength=used.size)
    if pieces != 1 or degree.max() > 2:
        raise CaseFileError(f"probes.{line.name}.curve: the curve {line.curve!r} is not one simple piece "
                            f"({pieces} pieces); name a curve that runs in one stretch, or use from and to")
    ends = np.flatnonzero(degree == 1)
    xy = mesh.p[:, used].T
    start = int(ends[np.lexsort(xy[ends].T[::-1])[0]]) if ends.size else int(np.lexsort(xy.T[::-1])[0])
    order = depth_first_order(graph, start, directed=False, return_predecessors=False)
    if not ends.size:  # closed: back to the start
        order = np.append(order, start)
    return xy[order]


def _strength(problem, region: str) -> float:
    material = problem.material_of_region.get(region)
    strength = getattr(material, "dielectric_strength", None)
    return float(strength) if strength else math.nan


#: CSV columns, units in the names
CSV_COLUMNS = ("distance_mm", "x_mm", "y_mm", "region", "potential_V", "E_kV_per_mm", "share_of_strength_percent")


def write_csv(samples: ProbeSamples, path: str | Path) -> Path:
    """One row per sample; empty cells where a value does not apply (outside the section, no strength known)."""
    def column(values: np.ndarray, scale: float) -> np.ndarray:
        text = np.char.mod("%.8g", np.where(np.isfinite(values), values * scale, 0.0))
        return np.where(np.isfinite(values), text, "")

    columns = [column(samples.distance, 1e3), column(samples.xy[:, 0], 1e3), column(samples.xy[:, 1], 1e3),
               np.asarray(samples.region, dtype=str), column(samples.potential, 1.0), column(samples.field, 1e-6),
               column(samples.share, 100.0)]
    path = Path(path)
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(CSV_COLUMNS)
        writer.writerows(zip(*(c.tolist() for c in columns)))
    return path


def csv_name(line: ProbeLine) -> str:
    return f"probe_{_safe(line.name)}.csv"


def figure_name(line: ProbeLine) -> str:
    return f"probe_{_safe(line.name)}.png"


def _safe(name: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in name)


def probe_results(samples: ProbeSamples) -> dict[str, Any]:
    """The line's summary for results.json (the samples themselves go to its CSV file)."""
    line = samples.line

    def largest(values: np.ndarray, scale: float) -> float | None:
        finite = values[np.isfinite(values)]
        return float(finite.max()) * scale if finite.size else None

    inside = np.isfinite(samples.potential)
    return {
        "name": line.name,
        "curve": line.curve,
        "side": line.side,
        "from_mm": [float(samples.xy[0, 0]) * 1e3, float(samples.xy[0, 1]) * 1e3],
        "to_mm": [float(samples.xy[-1, 0]) * 1e3, float(samples.xy[-1, 1]) * 1e3],
        "length_mm": float(samples.distance[-1]) * 1e3,
        "points": line.points,
        "points_inside_section": int(inside.sum()),
        "regions_crossed": list(dict.fromkeys(r for r in samples.region if r)),
        "largest_E_kV_per_mm": largest(samples.field, 1e-6),
        "largest_fraction_of_strength": largest(samples.share, 1.0),
        "csv_file": csv_name(line),
        "figure_file": figure_name(line),
    }
