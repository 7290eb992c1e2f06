"""Local refinement of the previous pass's mesh (red-green-blue, new nodes on the true curves).

Sources:
- C = 2 pi eps0 eps_r / ln(b/a) for the coaxial line, by Gauss's law; e.g. D. M. Pozar, Microwave
  Engineering, 4th ed., Wiley 2012, Table 2.1 (from memory).
- Red-green-blue refinement through the longest edge gives a conforming mesh whose angles stay bounded
  away from zero (R. Verfuerth, A Review of A Posteriori Error Estimation and Adaptive Mesh-Refinement
  Techniques, Wiley-Teubner 1996, section 4.1; from memory). The bound asserted below, half the smallest
  angle of the first mesh, is the Rosenberg-Stenger bound of longest-edge bisection (Math. Comp. 29,
  1975; from memory), taken as the yardstick for the red-green-blue mix: common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.constants import epsilon_0
from skfem import MeshTri1

import fieldsection.pipeline as pipeline
from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.case import Refinement
from fieldsection.local_refinement import CurveShape, split_marked, triangle_sizes

A, B, EPS_R, V = 1e-3, 3e-3, 2.25, 1000.0
C_EXACT = 2 * np.pi * epsilon_0 * EPS_R / np.log(B / A)  # Pozar, Table 2.1


def _signed_areas(points, triangles):
    p = points[triangles]
    d1, d2 = p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]
    return 0.5 * (d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0])


def _smallest_angle(points, triangles):
    p = points[triangles]
    angles = []
    for k in range(3):
        u, w = p[:, (k + 1) % 3] - p[:, k], p[:, (k + 2) % 3] - p[:, k]
        cos = (u * w).sum(axis=1) / (np.hypot(*u.T) * np.hypot(*w.T))
        angles.append(np.arccos(np.clip(cos, -1, 1)))
    return float(np.min(angles))


def _edge_counts(triangles):
    sides = np.sort(triangles[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2), axis=1)
    _, counts = np.unique(sides, axis=0, return_counts=True)
    return counts


def test_repeated_refinement_is_conforming_area_preserving_and_well_shaped():
    square = MeshTri1.init_tensor(np.linspace(0, 1, 9), np.linspace(0, 1, 7))
    points, triangles = square.p.T.copy(), square.t.T.copy()
    # counter-clockwise, as gmsh gives them
    flip = _signed_areas(points, triangles) < 0
    triangles[flip] = triangles[flip][:, [0, 2, 1]]
    first_angle = _smallest_angle(points, triangles)
    bottom_nodes = np.flatnonzero(points[:, 1] == 0)
    bottom_nodes = bottom_nodes[np.argsort(points[bottom_nodes, 0])]
    boundary = np.column_stack([bottom_nodes[:-1], bottom_nodes[1:]])  # the bottom side's segments
    segments = {"bottom": boundary}
    rng = np.random.default_rng(7)
    for _ in range(5):
        marked = rng.random(len(triangles)) < 0.2
        marked[np.argmin(np.hypot(*(points[triangles].mean(axis=1) - [0.3, 0.0]).T))] = True  # one spot, deeper each round
        step = split_marked(points, triangles, marked, segments)
        assert len(step.triangles) > len(triangles)
        points, triangles, segments = step.points, step.triangles, step.segments
        areas = _signed_areas(points, triangles)
        assert (areas > 0).all()  # orientation kept
        assert areas.sum() == pytest.approx(1.0, rel=1e-12)  # the children tile the square
        # conforming: no hanging node, so every side is shared by two triangles or lies on the square's boundary
        counts = _edge_counts(triangles)
        assert counts.max() == 2
        mesh = MeshTri1(points.T, triangles.T)
        on_boundary = mesh.p[:, mesh.facets[:, mesh.boundary_facets()]]
        assert np.all(np.isclose(on_boundary, 0) | np.isclose(on_boundary, 1)
                      | np.isclose(on_boundary[::-1], 0) | np.isclose(on_boundary[::-1], 1))
    assert _smallest_angle(points, triangles) >= 0.5 * first_angle - 1e-12
    # the kept segment list still covers the bottom side exactly, in pieces that are triangle sides
    bottom = segments["bottom"]
    assert np.allclose(points[bottom][:, :, 1], 0)
    assert np.abs(np.diff(points[bottom][:, :, 0], axis=1)).sum() == pytest.approx(1.0, rel=1e-12)
    assert triangle_sizes(points, triangles).min() < 0.5 * triangle_sizes(square.p.T, square.t.T).min()


def test_curve_shape_projects_onto_a_circular_arc_to_round_off():
    # a quarter circle sampled evenly in its angle, as gmsh's parameter of a circle arc
    angle = np.linspace(0.2, 0.2 + np.pi / 2, 1025)
    shape = CurveShape(A * np.column_stack([np.cos(angle), np.sin(angle)]))
    rng = np.random.default_rng(1)
    theta = rng.uniform(0.3, 0.2 + np.pi / 2 - 0.1, 500)
    radius = A * (1 + rng.uniform(-0.05, 0.05, 500))
    projected = shape.project(np.column_stack([radius * np.cos(theta), radius * np.sin(theta)]))
    assert np.abs(np.hypot(*projected.T) / A - 1).max() < 1e-12  # on the circle
    assert np.abs(np.arctan2(projected[:, 1], projected[:, 0]) - theta).max() < 1e-11  # along the radius


def _coax(max_dofs: int) -> Case:
    return Case("coaxial", ScriptGeometry(GEOMETRIES / "coaxial.geo", {"lc": 0.8}, 1e-3),
                {"insulation": Material("test dielectric", EPS_R, 20e6)}, {"inner": V, "outer": 0.0},
                mesh=MeshSettings(element_order=2, curved=True),
                refinement=Refinement(capacitance_tolerance=1e-7, max_dofs=max_dofs))


def test_adaptive_passes_refine_the_first_mesh_with_nodes_on_the_circles(monkeypatch):
    calls = []
    meshing = pipeline.mesh_geometry

    def counting(*args, **kwargs):
        calls.append(args)
        return meshing(*args, **kwargs)

    monkeypatch.setattr(pipeline, "mesh_geometry", counting)
    result = analyse(_coax(40_000))
    assert len(result.passes) >= 3
    assert len(calls) == 1  # gmsh meshed once; every later pass refined its predecessor
    assert result.passes[-1].ndofs > 4 * result.passes[0].ndofs
    mesh = result.section.mesh
    boundary = mesh.boundary_facets()
    for points in (mesh.p[:, np.unique(mesh.facets[:, boundary])], mesh.doflocs[:, mesh.nvertices + boundary]):
        r = np.hypot(*points)
        assert np.minimum(abs(r - A), abs(r - B)).max() < 1e-11 * B
    # curved P2 on nested meshes: the capacitance converges as on gmsh's own meshes (closed form, Pozar)
    assert result.capacitance.two_level.from_energy == pytest.approx(C_EXACT, rel=1e-6)
