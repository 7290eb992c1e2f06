"""Hotspots: where |E| approaches a material's dielectric strength.

Every dielectric element whose peak |E| is at least ``fraction`` x its material's strength is
flagged; flagged elements of the same region that share a vertex form one hotspot region
(sharing an edge would split a corner's fan of elements into many one-element regions).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from .mesh import largest_at_vertices
from .problem import AssembledProblem


@dataclass(frozen=True)
class RegionPeak:
    """Peak |E| of one dielectric region, whether or not it is flagged."""

    region: str
    material: str
    peak_E: float  # V/m
    location: tuple[float, float]  # m
    strength: float | None  # V/m
    utilisation: float | None  # peak_E / strength


@dataclass(frozen=True)
class Hotspot:
    region: str
    material: str
    peak_E: float  # V/m
    location: tuple[float, float]  # m
    area: float  # m^2
    n_elements: int
    utilisation: float  # peak_E / strength
    nearest_electrode: str
    distance_to_electrode: float  # m
    elements: np.ndarray


@dataclass(frozen=True)
class HotspotResult:
    fraction: float
    region_peaks: tuple[RegionPeak, ...]
    hotspots: tuple[Hotspot, ...]  # sorted by utilisation, highest first
    utilisation: np.ndarray  # per element, NaN where no strength is known or not a dielectric
    triple_points: tuple["TriplePoint", ...] = ()


@dataclass(frozen=True)
class TriplePoint:
    """A point where a conductor, a solid (or liquid) insulator and a gas meet.

    The field there is usually singular (its exponent depends on the permittivities and angles), so
    the values are those of the elements touching the point on this mesh: an indication, not a limit.
    """

    location: tuple[float, float]  # m
    electrode: str
    gas_region: str
    solid_region: str
    E_gas: float  # V/m, largest |E| at the point in the gas elements touching it
    E_solid: float  # V/m, likewise in the solid
    gas_utilisation: float | None  # E_gas / the gas's dielectric strength


def find_hotspots(problem: AssembledProblem, magnitude: np.ndarray, fraction: float) -> HotspotResult:
    """Hotspots from ``magnitude`` (nelements, 3): |E| at each element's vertices, V/m (the recovered field)."""
    section = problem.section
    mesh = section.mesh
    region = section.region_of_element
    names = section.region_names
    peak = magnitude.max(axis=1)
    peak_vertex = mesh.t[np.argmax(magnitude, axis=1), np.arange(mesh.nelements)]

    strength = np.full(mesh.nelements, np.nan)
    for name, material in problem.material_of_region.items():
        if material.dielectric_strength is not None:
            strength[section.elements_of(name)] = material.dielectric_strength
    strength[~problem.dielectric] = np.nan
    utilisation = peak / strength

    peaks = []
    for name, material in problem.material_of_region.items():
        elements = section.elements_of(name)
        k = elements[np.argmax(peak[elements])]
        s = material.dielectric_strength
        x, y = mesh.p[:, peak_vertex[k]]
        peaks.append(RegionPeak(name, material.name, float(peak[k]), (float(x), float(y)), s,
                                None if s is None else float(peak[k] / s)))

    flagged = np.nan_to_num(utilisation, nan=0.0) >= fraction
    hotspots: list[Hotspot] = []
    if flagged.any():
        flagged_idx = np.flatnonzero(flagged)
        # element-vertex incidence of the flagged elements, one vertex set per region
        rows = np.repeat(np.arange(flagged_idx.size), 3)
        cols = (mesh.t[:, flagged_idx].T.astype(np.int64) * len(names) + region[flagged_idx, None]).ravel()
        incidence = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(flagged_idx.size, mesh.nvertices * len(names)))
        _, groups = connected_components(incidence @ incidence.T, directed=False)
        order = np.argsort(groups, kind="stable")
        split = np.flatnonzero(np.diff(groups[order])) + 1
        surfaces = [(c.name, mesh.p[:, mesh.facets[:, c.facets]]) for c in problem.conductors if c.facets.size]
        areas = section.element_areas
        for members in np.split(flagged_idx[order], split):
            k = members[np.argmax(utilisation[members])]
            where = mesh.p[:, peak_vertex[k]]
            nearest, distance = min(((name, _distance_to_segments(where, ends)) for name, ends in surfaces),
                                    key=lambda item: item[1], default=("none", float("nan")))
            material = problem.material_of_region[names[region[k]]]
            hotspots.append(Hotspot(names[region[k]], material.name, float(peak[k]), (float(where[0]), float(where[1])),
                                    float(areas[members].sum()), int(members.size), float(utilisation[k]),
                                    nearest, distance, members))
        hotspots.sort(key=lambda h: -h.utilisation)
    return HotspotResult(fraction, tuple(peaks), tuple(hotspots), utilisation, find_triple_points(problem, magnitude))


def find_triple_points(problem: AssembledProblem, magnitude: np.ndarray) -> tuple[TriplePoint, ...]:
    """Every conductor vertex touched by both a gas element and a solid or liquid element."""
    section = problem.section
    mesh = section.mesh
    names = section.region_names
    kind = np.array([problem.material_of_region[n].kind if n in problem.material_of_region else "" for n in names])
    element_kind = kind[section.region_of_element]
    n = mesh.nvertices
    corners = mesh.t.T  # (nelements, 3)

    def largest_at(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per vertex: largest |E| over the masked elements touching it (-1: none), and the element giving it."""
        elements = np.flatnonzero(mask)
        ids, values, giving = largest_at_vertices(mesh, elements, magnitude[elements])
        value, element = np.full(n, -1.0), np.full(n, -1)
        value[ids], element[ids] = values, giving
        return value, element

    # only conductor vertices are asked for: only the elements touching one take part
    on_conductor = np.zeros(n, dtype=bool)
    for conductor in problem.conductors:
        on_conductor[mesh.facets[:, conductor.facets].ravel()] = True
    touching = on_conductor[corners].any(axis=1)
    gas_E, gas_element = largest_at(touching & (element_kind == "gas"))
    solid_E, solid_element = largest_at(touching & ((element_kind == "solid") | (element_kind == "liquid")))
    points = []
    for conductor in problem.conductors:
        if conductor.facets.size == 0:
            continue
        vertices = np.unique(mesh.facets[:, conductor.facets])
        meet = vertices[(gas_E[vertices] >= 0) & (solid_E[vertices] >= 0)]
        for v in meet:  # triple points are few: a loop over them is fine
            gas_region = names[section.region_of_element[gas_element[v]]]
            strength = problem.material_of_region[gas_region].dielectric_strength
            points.append(TriplePoint(
                (float(mesh.p[0, v]), float(mesh.p[1, v])), conductor.name, gas_region,
                names[section.region_of_element[solid_element[v]]], float(gas_E[v]), float(solid_E[v]),
                None if strength is None else float(gas_E[v] / strength)))
    return tuple(sorted(points, key=lambda p: -p.E_gas))


def _distance_to_segments(point: np.ndarray, ends: np.ndarray) -> float:
    """Shortest distance from ``point`` (2,) to segments ``ends`` (2 coordinates, 2 ends, n)."""
    start, step = ends[:, 0], ends[:, 1] - ends[:, 0]
    along = np.clip(((point[:, None] - start) * step).sum(axis=0) / np.maximum((step**2).sum(axis=0), 1e-300), 0, 1)
    closest = start + step * along
    return float(np.hypot(*(closest - point[:, None])).min())
