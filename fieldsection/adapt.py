"""Adaptive refinement: where to make the next mesh finer, and what each pass leaves for the record.

The next mesh is the last one refined where the error indicator asks (``local_refinement``; new
nodes on curves go onto the true curves), to the sizes computed here. For a smooth solution of
order p the indicator behaves as eta_K^2 ~ h_K^(2p + 2); asking every element for the same eta
(equidistribution, the usual optimality criterion of adaptive finite elements) and the mesh to grow
by a chosen factor gives each element's new size in closed form. Sizes change by at most x4 finer
per pass; refinement does not coarsen, so an element asked to grow keeps its size.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy.spatial import cKDTree

from .mesh import SectionMesh, largest_at_vertices

FINEST_STEP, COARSEST_STEP = 0.25, 2.0


def element_sizes(section: SectionMesh) -> np.ndarray:
    """Edge length of the equilateral triangle of each element's area, m."""
    return np.sqrt(4.0 / np.sqrt(3.0) * section.element_areas)


def vertex_sizes(section: SectionMesh) -> np.ndarray:
    """Mean size of the elements around each vertex, m."""
    mesh = section.mesh
    h = element_sizes(section)
    total = np.bincount(mesh.t.ravel(), weights=np.repeat(h[None, :], 3, axis=0).ravel(), minlength=mesh.nvertices)
    count = np.bincount(mesh.t.ravel(), minlength=mesh.nvertices)
    return total / np.maximum(count, 1)


def wanted_element_sizes(section: SectionMesh, indicator: np.ndarray, order: int, growth: float) -> np.ndarray:
    """The size (m) each element wants so that the mesh has about ``growth`` times as many elements with
    the error equidistributed; ``inf`` in the mapped open space (it is not refined)."""
    h = element_sizes(section)
    drawn = ~section.exterior
    eta2 = np.where(drawn, indicator, 0.0)
    power = 1.0 / (order + 1)
    weight = eta2 ** power  # = (h_K / h_new_K)^2 up to the common target
    active = weight > 0
    if not active.any():  # an exact solution: refine uniformly
        weight, active = np.where(drawn, 1.0, 0.0), drawn

    def steps(target: float) -> np.ndarray:
        step = np.full(h.size, COARSEST_STEP)
        step[active] = np.sqrt(target / weight[active])
        return np.clip(step, FINEST_STEP, COARSEST_STEP)

    # the target that gives the wanted growth once the steps are clipped (the count falls as it rises)
    wanted = growth * drawn.sum()
    low, high = np.log(weight[active].min()) - 10.0, np.log(weight[active].max()) + 10.0
    for _ in range(60):
        middle = 0.5 * (low + high)
        count = (steps(np.exp(middle))[drawn] ** -2.0).sum()
        low, high = (middle, high) if count > wanted else (low, middle)
    return np.where(drawn, h * steps(np.exp(high)), np.inf)


@dataclass(frozen=True)
class RegionVertexField:
    """Per region, the largest |E| at each of its vertices in one pass, with the local element size."""

    points: np.ndarray  # (n, 2) m
    values: np.ndarray  # (n,) V/m
    sizes: np.ndarray  # (n,) m

    @cached_property
    def tree(self) -> cKDTree:
        return cKDTree(self.points)

    def with_values(self, values: np.ndarray) -> RegionVertexField:
        """Another field on the same vertices (sharing their points, sizes and search tree)."""
        other = RegionVertexField(self.points, values, self.sizes)
        other.__dict__["tree"] = self.tree  # where cached_property keeps it: built once for both
        return other

    def peak_near(self, point: np.ndarray, radius: float) -> tuple[float, float] | None:
        """(largest |E|, local size there) within ``radius`` of ``point``; None if no vertex is that close."""
        near = self.tree.query_ball_point(point, radius)
        if not near:
            return None
        best = near[int(np.argmax(self.values[near]))]
        return float(self.values[best]), float(self.sizes[best])


def region_vertex_fields(section: SectionMesh, magnitude: np.ndarray, regions: list[str],
                         like: dict[str, RegionVertexField] | None = None) -> dict[str, RegionVertexField]:
    """For each named region: every vertex it touches, with the largest |E| there from its elements.

    ``like``: fields of the same regions on the same mesh, whose points, sizes and search trees are shared
    (at a million nodes, building them again cost about as much as the values)."""
    mesh = section.mesh
    sizes = vertex_sizes(section) if like is None else None
    out = {}
    for name in regions:  # a handful of regions; each step below is vectorised
        elements = section.elements_of(name)
        ids, values, _ = largest_at_vertices(mesh, elements, magnitude[elements])
        if like is not None:
            if len(like[name].values) != len(ids):
                raise ValueError(f"region {name!r}: the fields to share are of another mesh")
            out[name] = like[name].with_values(values)
        else:
            out[name] = RegionVertexField(mesh.p[:, ids].T.copy(), values, sizes[ids])
    return out


@dataclass(frozen=True)
class PassRecord:
    """What one pass of the adaptive loop found (kept for the convergence table)."""

    ndofs: int
    nelements: int
    capacitance: np.ndarray  # F/m (F for a body of revolution), the Maxwell matrix
    energy: float  # J/m
    estimated_error: float  # relative energy-norm error estimate
    region_peaks: dict[str, float]  # V/m, the largest |E| of each dielectric region
    vertex_fields: dict[str, RegionVertexField]
    seconds: float
