"""Mesh stage: gmsh's arrays -> a validated scikit-fem mesh with named regions and boundaries."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Mapping

import numpy as np
from skfem import MeshTri1, MeshTri2

from .errors import MeshError
from .gmsh_adapter import RawMesh

# local corner pairs of gmsh's 6-node triangle mid-edge nodes (columns 3, 4, 5)
_GMSH_EDGES = ((0, 1), (1, 2), (2, 0))


@dataclass(frozen=True)
class SectionMesh:
    """A 2D mesh with every element in exactly one named region.

    ``region_of_element[k]`` indexes ``region_names``; ``curve_facets`` maps each named physical
    curve to scikit-fem facet indices. ``mesh`` is a ``MeshTri1``, or a ``MeshTri2`` whose mid-edge
    nodes lie on curved boundaries.
    """

    mesh: MeshTri1 | MeshTri2
    region_names: tuple[str, ...]
    region_of_element: np.ndarray
    curve_facets: Mapping[str, np.ndarray]
    gmsh_warnings: tuple[str, ...] = field(default=())

    @property
    def curved(self) -> bool:
        return isinstance(self.mesh, MeshTri2)

    def elements_of(self, region: str) -> np.ndarray:
        return np.flatnonzero(self.region_of_element == self.region_names.index(region))

    def facet_neighbours(self) -> np.ndarray:
        """``f2t`` of the mesh: the (up to) two elements beside each facet, -1 on the boundary."""
        return self.mesh.f2t


def _facet_keys(pairs: np.ndarray, n_vertices: int) -> np.ndarray:
    pairs = np.sort(pairs, axis=1).astype(np.int64)
    return pairs[:, 0] * n_vertices + pairs[:, 1]


def _match_facets(mesh: MeshTri1, pairs: np.ndarray, what: str) -> np.ndarray:
    """Facet index of each vertex pair; raise if any pair is not an edge of the mesh."""
    n = mesh.p.shape[1]
    mesh_keys = _facet_keys(mesh.facets.T, n)
    order = np.argsort(mesh_keys)
    sorted_keys = mesh_keys[order]
    keys = _facet_keys(pairs, n)
    pos = np.clip(np.searchsorted(sorted_keys, keys), 0, len(sorted_keys) - 1)
    missing = sorted_keys[pos] != keys
    if missing.any():
        raise MeshError(f"{what}: {int(missing.sum())} segment(s) are not edges of the triangle mesh; "
                        "every physical curve must lie on the boundary of a meshed surface")
    return order[pos]


def build_section_mesh(raw: RawMesh) -> SectionMesh:
    """Convert gmsh's arrays into a :class:`SectionMesh`; checks the region partition and tags."""
    corners = raw.triangles[:, :3]
    # corner nodes only: mid-edge nodes of curved meshes become facet dofs below
    corner_ids = np.unique(corners)
    remap = np.full(len(raw.points), -1, dtype=np.int64)
    remap[corner_ids] = np.arange(corner_ids.size)
    p = np.ascontiguousarray(raw.points[corner_ids].T)
    t = np.ascontiguousarray(remap[corners].T)
    base = MeshTri1(p, t)
    if base.t.shape[1] != len(raw.triangles):
        raise MeshError("the mesh library changed the number of triangles; report this as a bug")

    names = tuple(raw.surface_groups)
    region_of_element = np.full(base.nelements, -1, dtype=np.int64)
    for index, name in enumerate(names):
        rows = raw.surface_groups[name]
        clash = rows[region_of_element[rows] >= 0]
        if clash.size:
            other = names[region_of_element[clash[0]]]
            raise MeshError(f"physical surfaces {other!r} and {name!r} share triangles; a surface may be in one group only")
        region_of_element[rows] = index
    if (region_of_element < 0).any():
        raise MeshError(f"{int((region_of_element < 0).sum())} triangles belong to no physical surface; group every surface")

    curve_facets = {}
    for name, segments in raw.curve_groups.items():
        if (remap[segments] < 0).any():
            raise MeshError(f"physical curve {name!r} has nodes that are not triangle corners")
        curve_facets[name] = np.unique(_match_facets(base, remap[segments], f"physical curve {name!r}"))

    mesh: MeshTri1 | MeshTri2 = base
    if raw.triangles.shape[1] == 6:
        curved = MeshTri2.from_mesh(base)
        edge_pairs = np.concatenate([remap[raw.triangles[:, list(e)]] for e in _GMSH_EDGES])
        mid_nodes = np.concatenate([raw.triangles[:, 3 + k] for k in range(3)])
        facets = _match_facets(base, edge_pairs, "mid-edge nodes")
        doflocs = curved.doflocs.copy()
        doflocs[:, base.nvertices + facets] = raw.points[mid_nodes].T
        mesh = replace(curved, doflocs=doflocs)

    _check_quality(mesh)
    _check_conforming(base, names, region_of_element)
    return SectionMesh(mesh, names, region_of_element, curve_facets, raw.warnings)


def _check_quality(mesh: MeshTri1 | MeshTri2) -> None:
    """Reject degenerate or inverted elements (scikit-fem validates only at DEBUG level)."""
    p, t = mesh.p, mesh.t
    d1 = p[:, t[1]] - p[:, t[0]]
    d2 = p[:, t[2]] - p[:, t[0]]
    area = 0.5 * np.abs(d1[0] * d2[1] - d1[1] * d2[0])
    scale = np.maximum(np.hypot(*d1), np.hypot(*d2)) ** 2
    bad = np.flatnonzero(area <= 1e-12 * scale)
    if bad.size:
        x, y = p[:, t[:, bad[0]]].mean(axis=1)
        raise MeshError(f"{bad.size} degenerate triangle(s), first near ({x:.4g}, {y:.4g}) m; check for "
                        "duplicate points or touching curves in the geometry")
    if isinstance(mesh, MeshTri2):
        from skfem import Basis, ElementTriP0

        det = Basis(mesh, ElementTriP0(), intorder=4).dx  # |J| * weights; must be positive
        if not np.all(np.isfinite(det)) or (det <= 0).any():
            raise MeshError("a curved element is inverted (mid-edge node too far off the chord); refine near arcs")


def _check_conforming(mesh: MeshTri1, names: tuple[str, ...], region_of_element: np.ndarray) -> None:
    """Refuse coincident but distinct vertices: surfaces that touch without sharing mesh nodes.

    Such a seam silently cuts the field problem in two, so an interface would act as a perfect
    insulator. It comes from surfaces drawn side by side without fragmenting them.
    """
    from scipy.spatial import cKDTree

    extent = float(np.ptp(mesh.p, axis=1).max())
    pairs = cKDTree(mesh.p.T).query_pairs(r=1e-9 * extent, output_type="ndarray")
    if len(pairs):
        i, j = pairs[0]
        touching = [names[region_of_element[np.flatnonzero((mesh.t == v).any(axis=0))[0]]] for v in (i, j)]
        x, y = mesh.p[:, i]
        raise MeshError(
            f"surfaces {touching[0]!r} and {touching[1]!r} touch near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm without "
            "sharing mesh nodes, so no field crosses the seam; share the curves between the surfaces "
            "(OpenCASCADE: BooleanFragments; built-in kernel: Coherence or common Line entities)"
        )
