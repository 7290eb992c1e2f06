"""Mesh stage: gmsh's arrays -> a validated scikit-fem mesh with named regions and boundaries."""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Mapping

import numpy as np
from skfem import MeshTri1, MeshTri2

from .errors import MeshError
from .gmsh_adapter import RawMesh, mesh_disc
from .isoparametric import install as install_mapping
from .splitting import edge_keys, find_edges, unique_edges

#: region name of the mapped exterior of an open-space circle
EXTERIOR = "open space"

# local corner pairs of gmsh's 6-node triangle mid-edge nodes (columns 3, 4, 5)
_GMSH_EDGES = ((0, 1), (1, 2), (2, 0))


@dataclass(frozen=True)
class SectionMesh:
    """A 2D mesh with every element in exactly one named region.

    ``region_of_element[k]`` indexes ``region_names``; ``curve_facets`` maps each named physical
    curve to scikit-fem facet indices. ``mesh`` is a ``MeshTri1``, or a ``MeshTri2`` whose mid-edge
    nodes lie on curved boundaries. Elements of the region ``EXTERIOR`` (if any) are the inverted
    image of the space outside an open-space circle: they overlap the drawn section in the plane,
    take part in the solve, and are left out of every plot and field report.
    """

    mesh: MeshTri1 | MeshTri2
    region_names: tuple[str, ...]
    region_of_element: np.ndarray
    curve_facets: Mapping[str, np.ndarray]
    gmsh_warnings: tuple[str, ...] = field(default=())
    open_circle: "OpenCircle | None" = None
    corner_vertices: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))  # geometry corners
    uniform_splits: int = 0  # times gmsh's triangles were split into four (``[mesh] refinements``, or chosen)

    @property
    def exterior(self) -> np.ndarray:
        """True for the elements of the mapped exterior."""
        if EXTERIOR not in self.region_names:
            return np.zeros(self.mesh.nelements, dtype=bool)
        return self.region_of_element == self.region_names.index(EXTERIOR)

    @property
    def curved(self) -> bool:
        return isinstance(self.mesh, MeshTri2)

    def elements_of(self, region: str) -> np.ndarray:
        return np.flatnonzero(self.region_of_element == self.region_names.index(region))

    @cached_property
    def element_areas(self) -> np.ndarray:
        """Area of each element's straight-sided triangle, m^2 (computed once; read-only)."""
        areas = triangle_areas(self.mesh)
        areas.flags.writeable = False
        return areas


def _with_facets(mesh: MeshTri1 | MeshTri2, like: MeshTri1 | None = None) -> MeshTri1 | MeshTri2:
    """Give ``mesh`` its facet tables (``facets``, ``t2f``, ``f2t``) from a sparse pattern of its edges.

    They are exactly scikit-fem's own (facets as sorted vertex pairs in lexicographic order, ``t2f``
    by the reference facets), built about 10x faster than its row-wise ``np.unique``; scikit-fem
    caches them in these attributes. ``like``: a mesh with the same triangles whose tables are reused.
    """
    if like is not None:
        mesh._facets, mesh._t2f, mesh._f2t = like.facets, like.t2f, like.f2t
        return mesh
    local = mesh.elem.refdom.facets
    t = mesh.t
    ends = [np.concatenate([t[ix[k]] for ix in local]) for k in (0, 1)]
    mesh._facets, inverse = unique_edges(*ends, mesh.nvertices)
    mesh._t2f = inverse.reshape(len(local), -1).astype(np.int32)
    # f2t: first and last element listing each facet (in t2f's row-major order), -1 if only one
    element = np.tile(np.arange(mesh.nelements, dtype=np.int32), len(local))
    first = np.full(mesh._facets.shape[1], -1, dtype=np.int32)
    last = np.full(mesh._facets.shape[1], -1, dtype=np.int32)
    first[inverse[::-1]] = element[::-1]  # repeated indices: the last assignment wins
    last[inverse] = element
    last[last == first] = -1
    mesh._f2t = np.vstack([first, last])
    return mesh


def _sorted_facet_keys(mesh: MeshTri1) -> np.ndarray:
    """One integer key per facet, in facet order and ascending (scikit-fem's facets are sorted vertex
    pairs in lexicographic order)."""
    return edge_keys(mesh.facets.T, mesh.nvertices)


def _match_facets(mesh: MeshTri1, pairs: np.ndarray, what: str, sorted_keys: np.ndarray | None = None) -> np.ndarray:
    """Facet index of each vertex pair; raise if any pair is not an edge of the mesh."""
    if sorted_keys is None:
        sorted_keys = _sorted_facet_keys(mesh)
    pos, found = find_edges(sorted_keys, pairs, mesh.nvertices)
    if not found.all():
        raise MeshError(f"{what}: {int((~found).sum())} segment(s) are not edges of the triangle mesh; "
                        "every physical curve must lie on the boundary of a meshed surface")
    return pos


@dataclass(frozen=True)
class OpenCircle:
    """The arc beyond which space is open: centre and radius (m), its vertices in angular order.

    A full circle, or an arc whose two ends rest on straight boundary lines through the centre
    (symmetry lines or a ground plane), named ``end_curves`` (first end, last end).
    """

    centre: np.ndarray
    radius: float
    loop: np.ndarray
    end_curves: tuple[str | None, str | None] | None = None  # None: the arc ends on the axis of revolution

    @property
    def closed(self) -> bool:
        return self.end_curves is None


def _boundary_edges(corners: np.ndarray) -> np.ndarray:
    edges = np.sort(np.concatenate([corners[:, [0, 1]], corners[:, [1, 2]], corners[:, [2, 0]]]), axis=1)
    unique, counts = np.unique(edges, axis=0, return_counts=True)
    return unique[counts == 1]


_NOT_A_CIRCLE = (
    "boundary.outer = 'open' needs the free outer boundary to be a circle (a gmsh Circle or Disk), or an arc "
    "centred on the straight symmetry or ground lines it ends on; it is not. Draw such a circle around the "
    "section, or use 'grounded' or 'insulated'"
)


def fit_circle(xy: np.ndarray) -> tuple[np.ndarray, float, float]:
    """Centre, radius and largest distance off the circle of points ``xy`` (n, 2), by the algebraic
    (Kasa) least-squares fit x^2 + y^2 = 2 a x + 2 b y + c."""
    design = np.column_stack([2 * xy, np.ones(len(xy))])
    (a, b, c), *_ = np.linalg.lstsq(design, (xy**2).sum(axis=1), rcond=None)
    centre = np.array([a, b])
    radius = float(np.sqrt(c + a * a + b * b))
    return centre, radius, float(np.abs(np.hypot(*(xy - centre).T) - radius).max())


def find_open_circle(raw: RawMesh, closed_curves: frozenset[str], axisymmetric: bool = False) -> OpenCircle:
    """The part of the boundary not in ``closed_curves`` (electrodes, insulated curves): a circle or an arc.

    In an axisymmetric model the axis x = 0 is no boundary, and the arc is centred on it.
    """
    corners = raw.triangles[:, :3]
    edges = _boundary_edges(corners)
    n = len(raw.points)
    on_axis = np.abs(raw.points[:, 0]) <= 1e-9 * np.ptp(raw.points[:, 0])
    if axisymmetric:
        edges = edges[~on_axis[edges].all(axis=1)]
    key = np.array([n, 1])
    named = {c: np.sort(raw.curve_groups[c], axis=1) @ key for c in closed_curves if c in raw.curve_groups}
    if named:
        edges = edges[~np.isin(edges @ key, np.concatenate(list(named.values())))]
    if len(edges) == 0:
        raise MeshError("boundary.outer = 'open', but every boundary curve is an electrode or insulated; draw the "
                        "outer boundary as a circle around the section")
    vertices = np.unique(edges)
    xy = raw.points[vertices]
    centre, radius, deviation = fit_circle(xy)
    degree = np.bincount(edges.ravel(), minlength=n)[vertices]
    ends = vertices[degree == 1]
    on_circle = deviation <= 1e-6 * radius
    if not on_circle or len(xy) < 8 or (degree > 2).any() or len(ends) not in (0, 2):
        raise MeshError(_NOT_A_CIRCLE)
    if np.hypot(*(raw.points - centre).T).max() > radius * (1 + 1e-6):
        raise MeshError("the open-space circle must enclose the whole section; some of it lies outside the circle")
    if axisymmetric and (len(ends) == 0 or abs(centre[0]) > 1e-6 * radius):
        raise MeshError(
            f"in an axisymmetric model the open-space boundary must be an arc centred on the axis x = 0 and ending "
            f"on it; its centre is at ({centre[0] * 1e3:.4g}, {centre[1] * 1e3:.4g}) mm"
            + ("" if len(ends) else " and it is a full circle")
        )
    angle = np.arctan2(*(xy - centre).T[::-1])
    order = np.argsort(angle)
    if len(ends) == 0:
        return OpenCircle(centre, radius, vertices[order])
    # an arc: start after the widest angular gap (where the drawn section is cut by its straight lines)
    gaps = np.diff(angle[order], append=angle[order][0] + 2 * np.pi)
    loop = vertices[np.roll(order, -(int(np.argmax(gaps)) + 1))]
    if not set(loop[[0, -1]]) == set(ends):
        raise MeshError(_NOT_A_CIRCLE)
    end_curves: list[str | None] = []
    for end in loop[[0, -1]]:
        if axisymmetric and on_axis[end] and abs(centre[0]) <= 1e-6 * radius:
            end_curves.append(None)
            continue
        touching = [name for name in named if (raw.curve_groups[name] == end).any()]
        straight = [name for name in touching if _runs_to_centre(raw, name, end, centre, radius)]
        if not straight:
            raise MeshError(_NOT_A_CIRCLE)
        end_curves.append(straight[0])
    return OpenCircle(centre, radius, loop, (end_curves[0], end_curves[1]))


def _runs_to_centre(raw: RawMesh, curve: str, end: int, centre: np.ndarray, radius: float) -> bool:
    """Whether ``curve``'s segment at vertex ``end`` lies on the ray from the circle's centre to ``end``."""
    segments = raw.curve_groups[curve]
    at_end = segments[(segments == end).any(axis=1)]
    other = np.where(at_end[:, 0] == end, at_end[:, 1], at_end[:, 0])
    ray = raw.points[end] - centre
    step = raw.points[other] - raw.points[end]
    cross = ray[0] * step[:, 1] - ray[1] * step[:, 0]
    return bool((np.abs(cross) <= 1e-6 * radius * np.hypot(*step.T)).any())


def add_open_space(raw: RawMesh, circle: OpenCircle) -> RawMesh:
    """Append the space beyond ``circle``, inverted onto a disc (or sector), as the region ``EXTERIOR``.

    The inversion x -> c + R^2 (x - c)/|x - c|^2 fixes the circle pointwise and, in 2D, is conformal:
    the Laplace equation and the energy keep their form, so the exterior becomes an ordinary disc of
    the same permittivity whose rim nodes are the circle's own nodes and whose centre is infinity.
    Straight lines through the centre map onto themselves: a sector's two spokes continue the
    curves its arc ends on (a ground plane stays an electrode, a symmetry line stays insulated).
    """
    loop_points = raw.points[circle.loop]
    disc_points, disc_triangles = mesh_disc(loop_points, circle.centre, circle.closed)
    n_loop, n_old = len(circle.loop), len(raw.points)
    new_index = np.concatenate([circle.loop, n_old + np.arange(len(disc_points) - n_loop)])
    triangles = new_index[disc_triangles]
    if raw.triangles.shape[1] == 6:  # straight exterior edges, except those on the circle (set from the section)
        triangles = np.column_stack([triangles, np.full((len(triangles), 3), -1)])
    points = np.concatenate([raw.points, disc_points[n_loop:]])
    curve_groups = dict(raw.curve_groups)
    if not circle.closed:
        spokes = _spokes(points, triangles[:, :3], circle, n_old)
        for name, spoke in zip(circle.end_curves, spokes):
            if name is not None:  # a spoke on the axis of revolution needs no condition
                curve_groups[name] = np.concatenate([curve_groups[name], spoke])
    rows = np.arange(len(raw.triangles), len(raw.triangles) + len(triangles))
    return RawMesh(points, np.concatenate([raw.triangles, triangles]), {**raw.surface_groups, EXTERIOR: rows},
                   curve_groups, raw.warnings, raw.corner_nodes, raw.splits)


def _spokes(points: np.ndarray, exterior: np.ndarray, circle: OpenCircle, n_old: int) -> list[np.ndarray]:
    """Boundary edges of the exterior sector on each straight spoke (first arc end, last arc end)."""
    edges = _boundary_edges(exterior)
    centre_node = n_old  # row n of the disc points, placed first among the new points
    result = []
    for end in circle.loop[[0, -1]]:
        ray = points[end] - circle.centre
        rel = points[edges] - circle.centre  # (k, 2 ends, 2)
        cross = ray[0] * rel[..., 1] - ray[1] * rel[..., 0]
        along = (rel @ ray) >= -1e-9 * circle.radius**2
        on_ray = (np.abs(cross) <= 1e-6 * circle.radius**2).all(axis=1) & along.all(axis=1)
        on_ray &= ~np.isin(edges, circle.loop[1:-1]).any(axis=1)
        spoke = edges[on_ray]
        if not np.isin(centre_node, spoke):
            raise MeshError("the open-space sector could not be closed along its straight edges; report this as a bug")
        result.append(spoke)
    return result


def build_section_mesh(raw: RawMesh, open_circle: OpenCircle | None = None) -> SectionMesh:
    """Convert gmsh's arrays into a :class:`SectionMesh`; checks the region partition and tags."""
    corners = raw.triangles[:, :3]
    # corner nodes only: mid-edge nodes of curved meshes become facet dofs below
    n_points = len(raw.points)
    if raw.triangles.shape[1] == 3 and np.bincount(corners.ravel(), minlength=n_points).all():
        corner_ids = np.arange(n_points)  # every point is a corner (the usual straight mesh): no sort needed
    else:
        corner_ids = np.unique(corners)
    remap = np.full(len(raw.points), -1, dtype=np.int64)
    remap[corner_ids] = np.arange(corner_ids.size)
    p = np.ascontiguousarray(raw.points[corner_ids].T)
    t = np.ascontiguousarray(remap[corners].T)
    base = _with_facets(MeshTri1(p, t))
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
    facet_keys = _sorted_facet_keys(base)
    for name, segments in raw.curve_groups.items():
        if (remap[segments] < 0).any():
            raise MeshError(f"physical curve {name!r} has nodes that are not triangle corners")
        curve_facets[name] = np.unique(_match_facets(base, remap[segments], f"physical curve {name!r}", facet_keys))

    mesh: MeshTri1 | MeshTri2 = base
    if raw.triangles.shape[1] == 6:
        # P2 geometry nodes: the vertices, then one per facet (scikit-fem's DOF order), on the chord
        # unless gmsh gave a mid-edge node
        doflocs = np.hstack([base.p, base.p[:, base.facets].mean(axis=1)])
        edge_pairs = np.concatenate([remap[raw.triangles[:, list(e)]] for e in _GMSH_EDGES])
        mid_nodes = np.concatenate([raw.triangles[:, 3 + k] for k in range(3)])
        given = mid_nodes >= 0  # -1 marks a straight edge (the mapped exterior)
        edge_pairs, mid_nodes = edge_pairs[given], mid_nodes[given]
        facets = _match_facets(base, edge_pairs, "mid-edge nodes", facet_keys)
        doflocs[:, base.nvertices + facets] = raw.points[mid_nodes].T
        mesh = install_mapping(_with_facets(MeshTri2(np.ascontiguousarray(doflocs), base.t), like=base))

    areas = _check_quality(mesh)
    drawn = region_of_element != (names.index(EXTERIOR) if EXTERIOR in names else -1)
    _check_conforming(base, names, region_of_element, drawn)
    geometry_corners = remap[raw.corner_nodes]
    section = SectionMesh(mesh, names, region_of_element, curve_facets, raw.warnings, open_circle,
                          np.unique(geometry_corners[geometry_corners >= 0]), raw.splits)
    section.__dict__["element_areas"] = areas  # (what the cached property would compute again)
    return section


def largest_at_vertices(mesh: MeshTri1 | MeshTri2, elements: np.ndarray, values: np.ndarray
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Over ``elements`` (k,) with ``values`` (k, 3) at their vertices: every vertex they touch (ascending),
    the largest value there, and an element that gives it."""
    vertices = mesh.t[:, elements].T.ravel()
    flat = np.ravel(values)
    largest = np.full(mesh.nvertices, -np.inf)
    np.maximum.at(largest, vertices, flat)  # scattered maximum: ~20x faster than sorting by vertex and value
    source = np.full(mesh.nvertices, -1, dtype=np.int64)
    gives = (flat >= largest[vertices]) | np.isnan(flat)  # a NaN wins the maximum: name its element
    source[vertices[gives]] = np.repeat(elements, 3)[gives]
    touched = np.zeros(mesh.nvertices, dtype=bool)
    touched[vertices] = True
    ids = np.flatnonzero(touched)
    return ids, largest[ids], source[ids]


def _corner_sides(mesh: MeshTri1 | MeshTri2, elements: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Per element (all, or ``elements``), the corner triangle's sides p1 - p0 and p2 - p0, each (2, n)."""
    t = mesh.t if elements is None else mesh.t[:, elements]
    x, y = mesh.p[0], mesh.p[1]  # one coordinate row at a time: 2D fancy indexing is ~5x slower
    x0, y0 = x[t[0]], y[t[0]]
    return np.array([x[t[1]] - x0, y[t[1]] - y0]), np.array([x[t[2]] - x0, y[t[2]] - y0])


def _area_of_sides(d1: np.ndarray, d2: np.ndarray) -> np.ndarray:
    return 0.5 * np.abs(d1[0] * d2[1] - d1[1] * d2[0])


def triangle_areas(mesh: MeshTri1 | MeshTri2) -> np.ndarray:
    """Area of each element's straight-sided (corner) triangle, m^2."""
    return _area_of_sides(*_corner_sides(mesh))


def linear_gradients_and_areas(mesh: MeshTri1 | MeshTri2, elements: np.ndarray | None = None
                               ) -> tuple[np.ndarray, np.ndarray]:
    """Gradients of the three barycentric coordinates of each corner triangle, (3 vertices, 2, n), 1/m, and the
    triangles' areas (``triangle_areas``), from one pass over the corner triangles (all, or ``elements``)."""
    d1, d2 = _corner_sides(mesh, elements)
    det = d1[0] * d2[1]
    det -= d1[1] * d2[0]
    inverse = 1.0 / det
    # written into one array in place: stacking the parts took about twice as long at a million elements
    gradients = np.empty((3, 2, det.size))
    np.multiply(d2[1], inverse, out=gradients[1, 0])
    np.multiply(d2[0], -inverse, out=gradients[1, 1])
    np.multiply(d1[1], -inverse, out=gradients[2, 0])
    np.multiply(d1[0], inverse, out=gradients[2, 1])
    np.add(gradients[1], gradients[2], out=gradients[0])
    np.negative(gradients[0], out=gradients[0])
    np.abs(det, out=det)
    det *= 0.5
    return gradients, det


def _check_quality(mesh: MeshTri1 | MeshTri2) -> np.ndarray:
    """Reject degenerate or inverted elements (scikit-fem validates only at DEBUG level); return the
    corner triangles' areas (``triangle_areas``, read-only)."""
    p, t = mesh.p, mesh.t
    d1, d2 = _corner_sides(mesh)
    longest = np.max([np.hypot(*d1), np.hypot(*d2), np.hypot(*(d2 - d1))], axis=0)
    areas = _area_of_sides(d1, d2)
    areas.flags.writeable = False
    bad = np.flatnonzero(areas <= 1e-12 * longest**2)
    if bad.size:
        x, y = p[:, t[:, bad[0]]].mean(axis=1)
        raise MeshError(f"{bad.size} degenerate triangle(s), first near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm; check "
                        "for duplicate points or touching curves in the geometry")
    if isinstance(mesh, MeshTri2):
        # the Jacobian of a valid curved element keeps one sign (either, as vertex order is sorted)
        points = np.array([[0.0, 1.0, 0.0, 0.5, 0.0, 0.5, 1 / 3], [0.0, 0.0, 1.0, 0.0, 0.5, 0.5, 1 / 3]])
        det = mesh.mapping().detDF(points)
        folded = np.flatnonzero(~np.isfinite(det).all(axis=1) | (det.min(axis=1) * det.max(axis=1) <= 0))
        if folded.size:
            x, y = p[:, t[:, folded[0]]].mean(axis=1)
            raise MeshError(f"{folded.size} curved element(s) fold over, first near ({x * 1e3:.4g}, {y * 1e3:.4g}) "
                            "mm (a mid-edge node too far off its chord); refine the mesh near that arc")
    return areas


def _check_conforming(mesh: MeshTri1, names: tuple[str, ...], region_of_element: np.ndarray,
                      drawn: np.ndarray) -> None:
    """Refuse coincident but distinct vertices: surfaces that touch without sharing mesh nodes.

    Such a seam silently cuts the field problem in two, so an interface would act as a perfect
    insulator. It comes from surfaces drawn side by side without fragmenting them.
    """
    from scipy.spatial import cKDTree

    # a seam's vertices lie on the rim of the drawn section (the mapped exterior overlaps it by design),
    # so only the rim is searched: a few thousand vertices rather than all of them
    a, b = mesh.f2t
    inside = b >= 0
    on_rim = drawn[a] != np.where(inside, drawn[np.maximum(b, 0)], False)
    vertices = np.unique(mesh.facets[:, on_rim])
    extent = float(np.ptp(mesh.p, axis=1).max())
    pairs = cKDTree(mesh.p[:, vertices].T).query_pairs(r=1e-9 * extent, output_type="ndarray")
    if len(pairs):
        i, j = vertices[pairs[0]]
        touching = [names[region_of_element[np.flatnonzero((mesh.t == v).any(axis=0))[0]]] for v in (i, j)]
        x, y = mesh.p[:, i]
        raise MeshError(
            f"surfaces {touching[0]!r} and {touching[1]!r} touch near ({x * 1e3:.4g}, {y * 1e3:.4g}) mm without "
            "sharing mesh nodes, so no field crosses the seam; share the curves between the surfaces "
            "(OpenCASCADE: BooleanFragments; built-in kernel: Coherence or common Line entities)"
        )
