"""Local refinement of the previous pass's mesh: the adaptive loop's next mesh without re-meshing.

Marked triangles are split into four (red); their neighbours are closed with one or two bisections
(green, blue), always through their longest edge, the red-green-blue scheme of adaptive finite
elements (e.g. Verfuerth, "A Review of A Posteriori Error Estimation and Adaptive Mesh-Refinement
Techniques", Wiley-Teubner 1996, section 4.1). Bisecting the longest edge keeps every angle above
half the smallest angle of the first mesh (Rosenberg & Stenger, Math. Comp. 29, 1975), so the
meshes of later passes stay as well shaped as gmsh's first one.

A new node on a geometry curve is moved onto the curve, as gmsh places its own nodes: each curved
entity's shape is kept from the meshing stage as points evenly spaced in gmsh's parameter
(``CurveShape``), interpolated by a cubic spline and projected onto by Newton's method. Re-meshing
the whole geometry with a size field cost about as much as solving on the final mesh; a refinement
costs a small fraction of it.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property
from typing import TYPE_CHECKING, Mapping

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.spatial import cKDTree

from .splitting import Snap, edge_keys, find_edges, unique_edges, with_mid_edge_nodes

if TYPE_CHECKING:  # (gmsh_adapter imports this module for CurveShape)
    from .gmsh_adapter import RawMesh

#: an element is split while it is larger than this times the size wanted for it (the geometric middle
#: of keeping it, 1, and halving it, 2)
SPLIT_ABOVE = np.sqrt(2.0)
#: at most this many halvings per pass (the indicator asks for at most x4 finer: two)
MAX_ROUNDS = 3


@dataclass(frozen=True)
class CurveShape:
    """A geometry curve as points at evenly spaced values of its own parameter, (k, 2) in metres."""

    samples: np.ndarray

    @cached_property
    def _spline(self) -> CubicSpline:
        return CubicSpline(np.arange(len(self.samples), dtype=float), self.samples, axis=0)

    @cached_property
    def _tree(self) -> cKDTree:
        return cKDTree(self.samples)

    def project(self, points: np.ndarray) -> np.ndarray:
        """The nearest points (k, 2) of the curve to ``points`` (k, 2): Newton's method on the spline's
        parameter from the nearest sample, kept within one sample spacing of it."""
        spline = self._spline
        last = len(self.samples) - 1
        _, nearest = self._tree.query(points)
        low, high = np.maximum(nearest - 1, 0), np.minimum(nearest + 1, last)
        s = nearest.astype(float)
        for _ in range(5):  # quadratic convergence from within a spacing: 3 steps reach round-off
            gap = spline(s) - points
            tangent = spline(s, 1)
            slope = (tangent * tangent).sum(axis=1) + (gap * spline(s, 2)).sum(axis=1)
            step = (gap * tangent).sum(axis=1) / np.where(slope > 0, slope, 1.0)
            s = np.clip(s - step, low, high)
        return spline(s)


def shape_snap(shapes: Mapping[int, CurveShape]) -> Snap:
    """Moves edge midpoints onto the kept curve shapes (the ``Snap`` of ``splitting``)."""

    def snap(entity: int, midpoints: np.ndarray, chords: np.ndarray) -> np.ndarray:
        shape = shapes.get(entity)
        if shape is None:  # a straight curve: the chord's midpoint is exact
            return midpoints
        projected = midpoints.copy()
        projected[:, :2] = shape.project(midpoints[:, :2])
        # on a tight bend the nearest point can lie on another stretch of the curve: keep the chord's midpoint
        jumped = np.hypot(*(projected - midpoints)[:, :2].T) > 0.5 * chords
        return np.where(jumped[:, None], midpoints, projected)

    return snap


@dataclass(frozen=True)
class _Split:
    points: np.ndarray  # (n', 2): the old points first, unchanged, then the new mid-edge points
    triangles: np.ndarray  # (m', 3)
    parent: np.ndarray  # (m',): the old triangle each new one lies in
    segments: dict[object, np.ndarray]  # the given segment lists, split where their edges were


def _longest_side_first(points: np.ndarray, triangles: np.ndarray) -> np.ndarray:
    """The triangles' corners turned (cyclically, keeping the orientation) so that side (0, 1) is the longest."""
    p = points[triangles]  # (m, 3, 2)
    lengths = np.hypot(*(np.roll(p, -1, axis=1) - p).transpose(2, 0, 1))  # sides (0,1), (1,2), (2,0)
    first = np.argmax(lengths, axis=1)
    return np.take_along_axis(triangles, (first[:, None] + np.arange(3)) % 3, axis=1)


def split_marked(points: np.ndarray, triangles: np.ndarray, marked: np.ndarray,
                 segments: Mapping[object, np.ndarray], shaped: Mapping[object, np.ndarray] | None = None,
                 snap: Snap | None = None) -> _Split:
    """Red-green-blue refinement of the triangles (m, 3) where ``marked``, closed to a conforming mesh.

    ``segments``: lists of boundary or interface edges (s, 2) to keep up to date (physical curves, the
    curved entities); ``shaped``: those among them (by the same key) whose new midpoints ``snap`` moves
    onto their curve."""
    n, m = len(points), len(triangles)
    tri = _longest_side_first(points, triangles)
    sides = tri[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2)
    (first, second), edge_of_side = unique_edges(sides[:, 0], sides[:, 1], n)
    edge_of_side = edge_of_side.reshape(m, 3)
    split = np.zeros(first.size, dtype=bool)
    split[edge_of_side[marked].ravel()] = True
    while True:  # closure: a triangle with any side split has its longest side split too
        cut = split[edge_of_side]
        lacking = cut.any(axis=1) & ~cut[:, 0]
        if not lacking.any():
            break
        split[edge_of_side[lacking, 0]] = True
    new_of_edge = np.full(first.size, -1, dtype=np.int64)
    new_of_edge[split] = n + np.arange(int(split.sum()))
    midpoints = 0.5 * (points[first[split]] + points[second[split]])
    keys = edge_keys(np.column_stack([first, second]), n)
    new_segments: dict[object, np.ndarray] = {}
    for key, pairs in segments.items():
        if len(pairs) == 0:
            new_segments[key] = pairs
            continue
        where, found = find_edges(keys, pairs, n)
        if not found.all():  # a curve that bounds no triangle (a stray construction line): left as it is,
            new_segments[key] = pairs  # as gmsh's splitting leaves it (physical curves are triangle sides)
            continue
        cut = split[where]
        middle = new_of_edge[where[cut]]
        if shaped is not None and snap is not None and key in shaped:
            chords = np.hypot(*(points[pairs[cut, 1]] - points[pairs[cut, 0]]).T)
            midpoints[middle - n] = snap(key, midpoints[middle - n], chords)
        halves = np.stack([pairs[cut, 0], middle, middle, pairs[cut, 1]], axis=1).reshape(-1, 2)
        new_segments[key] = np.concatenate([pairs[~cut], halves])

    mid = new_of_edge[edge_of_side]  # (m, 3): the new node on each side, or -1
    v0, v1, v2 = tri.T
    m0, m1, m2 = mid.T
    s0, s1, s2 = mid.T >= 0
    keep = ~s0
    green = s0 & ~s1 & ~s2
    blue_right = s0 & s1 & ~s2  # the side after the longest is split too
    blue_left = s0 & ~s1 & s2  # the side before it
    red = s0 & s1 & s2
    pieces = [
        (keep, [(v0, v1, v2)]),
        (green, [(v0, m0, v2), (m0, v1, v2)]),
        (blue_right, [(v0, m0, v2), (m0, v1, m1), (m0, m1, v2)]),
        (blue_left, [(m0, v1, v2), (m0, v2, m2), (m0, m2, v0)]),
        (red, [(v0, m0, m2), (m0, v1, m1), (m2, m1, v2), (m0, m1, m2)]),
    ]
    children, parents = [], []
    for where, shapes in pieces:
        index = np.flatnonzero(where)
        for a, b, c in shapes:
            children.append(np.column_stack([a[index], b[index], c[index]]))
            parents.append(index)
    return _Split(np.vstack([points, midpoints]), np.concatenate(children), np.concatenate(parents), new_segments)


def triangle_sizes(points: np.ndarray, triangles: np.ndarray) -> np.ndarray:
    """Edge length of the equilateral triangle of each triangle's area (the measure of ``adapt``)."""
    p = points[triangles]
    d1, d2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
    area = 0.5 * np.abs(d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0])
    return np.sqrt(4.0 / np.sqrt(3.0) * area)


def refined_raw(raw: RawMesh, wanted: np.ndarray, curved: bool) -> RawMesh:
    """The mesh ``raw`` (a ``gmsh_adapter.RawMesh``, without open space) with every triangle split until it
    is no larger than ``SPLIT_ABOVE`` times its ``wanted`` size (m, one per triangle; ``inf``: keep), in at
    most ``MAX_ROUNDS`` halvings. Curved meshes get their mid-edge nodes on the curves again."""
    if len(wanted) != len(raw.triangles):
        raise ValueError("one wanted size per triangle of the mesh to refine")
    corner_ids = np.unique(raw.triangles[:, :3])
    remap = np.full(len(raw.points), -1, dtype=np.int64)
    remap[corner_ids] = np.arange(corner_ids.size)
    points = raw.points[corner_ids]
    triangles = remap[raw.triangles[:, :3]]
    names = list(raw.curve_groups)
    segments: dict[object, np.ndarray] = {("group", k): remap[v] for k, v in raw.curve_groups.items()}
    segments.update({("shape", e): remap[v] for e, v in raw.shaped_segments.items()})
    shapes = {("shape", e): s for e, s in raw.curve_shapes.items()}
    snap = shape_snap(shapes)
    owner = np.arange(len(triangles))
    for _ in range(MAX_ROUNDS):
        marked = triangle_sizes(points, triangles) > SPLIT_ABOVE * wanted[owner]
        if not marked.any():
            break
        step = split_marked(points, triangles, marked, segments, shapes, snap)
        points, triangles, segments = step.points, step.triangles, step.segments
        owner = owner[step.parent]
    shaped_segments = {key[1]: v for key, v in segments.items() if key[0] == "shape"}
    if curved:
        points, triangles = with_mid_edge_nodes(points, triangles, shaped_segments,
                                                shape_snap({key[1]: s for key, s in shapes.items()}))
    member = np.zeros(len(raw.triangles), dtype=bool)
    groups = {}
    for name, rows in raw.surface_groups.items():
        member[:] = False
        member[rows] = True
        groups[name] = np.flatnonzero(member[owner])
    corner_nodes = remap[raw.corner_nodes]
    return replace(raw, points=points, triangles=triangles, surface_groups=groups,
                   curve_groups={name: segments[("group", name)] for name in names},
                   corner_nodes=corner_nodes[corner_nodes >= 0], shaped_segments=shaped_segments)
