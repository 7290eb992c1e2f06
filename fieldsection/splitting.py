"""Uniform splitting of a triangle mesh, and mid-edge nodes for curved elements, in numpy.

Every triangle is split into four at its edge midpoints. A midpoint of an edge that lies on a
geometry curve is moved onto that curve by ``snap`` (the meshing stage passes gmsh's projection),
so arcs stay arcs however often the mesh is split. gmsh's own ``refine`` does the same, but its cost
grows faster than the mesh (about 5 s for the last of three splits to a million nodes, against a
fraction of a second here).
"""

from __future__ import annotations

from typing import Callable, Mapping

import numpy as np
import scipy.sparse as sp

#: moves the midpoints (k, 3) of k edges of chord lengths (k,) onto the geometry curve with the given
#: entity tag; returns (k, 3)
Snap = Callable[[int, np.ndarray, np.ndarray], np.ndarray]

def edge_keys(pairs: np.ndarray, n: int) -> np.ndarray:
    """One integer key per undirected edge (k, 2) of a mesh of ``n`` vertices: min * n + max (int64), so
    edges in lexicographic order of their sorted vertex pairs have ascending keys."""
    first, second = pairs[:, 0].astype(np.int64), pairs[:, 1].astype(np.int64)
    return np.minimum(first, second) * n + np.maximum(first, second)


def unique_edges(first: np.ndarray, second: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Each undirected edge (first[k], second[k]) once, as sorted vertex pairs in lexicographic order
    (2, e) int32, and the edge of each input pair (int64).

    A CSR pattern of (low, high) holds each edge once with rows and columns sorted: linear time (a sort of
    the edge keys took twice as long at a million nodes)."""
    low, high = np.minimum(first, second).astype(np.int32), np.maximum(first, second).astype(np.int32)
    pattern = sp.coo_matrix((np.ones(low.size, dtype=np.int8), (low, high)), shape=(n, n)).tocsr()
    pattern.sum_duplicates()
    pattern.data = np.arange(pattern.nnz, dtype=np.int64)  # each stored entry's edge index
    inverse = np.asarray(pattern[low, high]).ravel()
    rows = np.repeat(np.arange(n, dtype=np.int32), np.diff(pattern.indptr))
    return np.vstack([rows, pattern.indices.astype(np.int32)]), inverse


def find_edges(sorted_keys: np.ndarray, pairs: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Position of each vertex pair (k, 2) among edges with ascending ``sorted_keys`` (``edge_keys``), and
    whether it is there at all."""
    keys = edge_keys(pairs, n)
    where = np.clip(np.searchsorted(sorted_keys, keys), 0, max(len(sorted_keys) - 1, 0))
    return where, sorted_keys[where] == keys


def _edges(points: np.ndarray, triangles: np.ndarray, curve_segments: Mapping[int, np.ndarray], snap: Snap
           ) -> tuple[np.ndarray, np.ndarray, dict[int, np.ndarray]]:
    """Unique edges of ``triangles``: (the edge of each triangle side (m, 3), midpoints (e, 3) on their curves,
    per curve entity the edge of each of its segments)."""
    n = len(points)
    sides = triangles[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2)
    (first, second), edge_of_side = unique_edges(sides[:, 0], sides[:, 1], n)
    keys = edge_keys(np.column_stack([first, second]), n)
    midpoints = 0.5 * (points[first] + points[second])
    edge_of_segment: dict[int, np.ndarray] = {}
    for entity, segments in curve_segments.items():
        where, found = find_edges(keys, segments, n)
        if len(segments) == 0 or not found.all():
            continue  # a curve that bounds no triangle (a stray construction line): left as it is
        chords = np.hypot(*(points[second[where]] - points[first[where]])[:, :2].T)
        midpoints[where] = snap(entity, midpoints[where], chords)
        edge_of_segment[entity] = where
    return edge_of_side.reshape(-1, 3), midpoints, edge_of_segment


def split_into_four(points: np.ndarray, triangles: np.ndarray, curve_segments: Mapping[int, np.ndarray],
                    snap: Snap) -> tuple[np.ndarray, np.ndarray, dict[int, np.ndarray]]:
    """Split every triangle (m, 3) into four; ``points`` (n, 3), ``curve_segments`` {entity: (s, 2) node pairs}.

    Returns the new points (the old ones first, unchanged), triangles and curve segments. Triangle i
    becomes rows 4i..4i+3, so a block of rows [a, b) becomes [4a, 4b); orientation is kept. A curve
    entity whose segments are not triangle sides is returned unchanged.
    """
    n = len(points)
    edge_of_side, midpoints, edge_of_segment = _edges(points, triangles, curve_segments, snap)
    a, b, c = triangles.T
    ab, bc, ca = (n + edge_of_side[:, k] for k in range(3))
    children = np.stack([np.stack([a, ab, ca], axis=1), np.stack([ab, b, bc], axis=1),
                         np.stack([ca, bc, c], axis=1), np.stack([ab, bc, ca], axis=1)], axis=1).reshape(-1, 3)
    new_segments = dict(curve_segments)
    for entity, edges in edge_of_segment.items():
        segments = curve_segments[entity]
        middle = n + edges
        new_segments[entity] = np.stack([segments[:, 0], middle, middle, segments[:, 1]], axis=1).reshape(-1, 2)
    return np.vstack([points, midpoints]), children, new_segments


def with_mid_edge_nodes(points: np.ndarray, triangles: np.ndarray, curve_segments: Mapping[int, np.ndarray],
                        snap: Snap) -> tuple[np.ndarray, np.ndarray]:
    """6-node triangles (m, 6): the corners, then one node per edge (0,1), (1,2), (2,0), on the geometry's
    curve where the edge lies on one and at the chord's midpoint elsewhere. Returns (points, triangles)."""
    n = len(points)
    edge_of_side, midpoints, _ = _edges(points, triangles, curve_segments, snap)
    return np.vstack([points, midpoints]), np.hstack([triangles, n + edge_of_side])
