"""Coarse meshing with uniform refinement: the same answers as meshing at the final size.

Source: C = 2 pi eps0 eps_r / ln(b/a) for the coaxial line, by Gauss's law; e.g. D. M. Pozar,
Microwave Engineering, 4th ed., Wiley 2012, Table 2.1 (from memory).
"""

from __future__ import annotations


import numpy as np
import pytest
from scipy.constants import epsilon_0
from skfem import MeshTri1

from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.mesh import _with_facets
from fieldsection.case import SINGLE_MESH


A, B, EPS_R, V = 1e-3, 3e-3, 2.25, 1000.0
C_EXACT = 2 * np.pi * epsilon_0 * EPS_R / np.log(B / A)  # Pozar, Table 2.1


def coax(lc_mm: float, refinements: int, order: int = 2, curved: bool = True):
    case = Case("coaxial", ScriptGeometry(GEOMETRIES / "coaxial.geo", {"lc": lc_mm}, 1e-3),
                {"insulation": Material("test dielectric", EPS_R, 20e6)}, {"inner": V, "outer": 0.0},
                mesh=MeshSettings(element_order=order, curved=curved, refinements=refinements),
                refinement=SINGLE_MESH)
    return analyse(case)


def relative_error(result) -> float:
    return abs(result.capacitance.two_level.from_energy / C_EXACT - 1)


def test_refined_curved_p2_matches_meshing_at_the_final_size():
    refined, direct = coax(0.2, 1), coax(0.2, 0)  # final element size 0.2 mm both
    # the same final element size gives about the same mesh, and the same accuracy
    assert refined.section.mesh.nvertices == pytest.approx(direct.section.mesh.nvertices, rel=0.2)
    assert relative_error(refined) < 1e-5
    assert relative_error(refined) < 2 * relative_error(direct)


def test_refinement_keeps_vertices_and_mid_edge_nodes_on_the_circles():
    mesh = coax(0.8, 2).section.mesh
    boundary = mesh.boundary_facets()
    for points in (mesh.p[:, np.unique(mesh.facets[:, boundary])], mesh.doflocs[:, mesh.nvertices + boundary]):
        r = np.hypot(*points)
        assert np.minimum(abs(r - A), abs(r - B)).max() < 1e-12 * B


def test_refined_p1_is_as_accurate_as_meshing_at_the_final_size():
    # P1 on a polygon: energy error ~ h^2 (Strang & Fix, An Analysis of the Finite Element Method,
    # 1973; from memory); at a final size of 0.1 mm gmsh alone reaches 1.4e-5
    direct = relative_error(coax(0.1, 0, order=1, curved=False))
    for k in (1, 2):
        assert relative_error(coax(0.1, k, order=1, curved=False)) < max(3 * direct, 1e-4)


def test_facet_tables_are_those_of_the_mesh_library():
    mesh = coax(0.4, 0, order=1, curved=False).section.mesh
    reference = MeshTri1(mesh.p, mesh.t)  # computes its own tables
    ours = _with_facets(MeshTri1(mesh.p, mesh.t))
    for name in ("facets", "t2f", "f2t"):
        assert np.array_equal(getattr(ours, name), getattr(reference, name)), name


def test_splitting_quarters_every_triangle_and_keeps_its_orientation():
    from fieldsection.splitting import split_into_four, with_mid_edge_nodes

    # midpoint subdivision: the four children of a triangle are similar to it at half scale, so each
    # has a quarter of its area (elementary geometry); a square in two triangles, one side on a "curve"
    points = np.array([[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [1.0, 1.0, 0.0], [0.0, 1.0, 0.0]])
    triangles = np.array([[0, 1, 2], [0, 2, 3]])
    lifted = []

    def snap(entity, xyz, chords):
        lifted.append(entity)
        assert np.allclose(chords, 1.0)  # the unit square's sides
        return xyz + [0.0, -0.1, 0.0]  # a bulge below the bottom side

    def signed_areas(p, t):
        d1, d2 = p[t[:, 1], :2] - p[t[:, 0], :2], p[t[:, 2], :2] - p[t[:, 0], :2]
        return 0.5 * (d1[:, 0] * d2[:, 1] - d1[:, 1] * d2[:, 0])

    p, t, segments = split_into_four(points, triangles, {7: np.array([[0, 1]]), 8: np.array([[0, 5]])}, snap)
    assert lifted == [7]  # entity 8 is no triangle side: left as it was
    assert len(p) == 4 + 5 and len(t) == 8  # 5 edges, one new node each (Euler: V - E + F = 1)
    assert segments[7].tolist()[0][0] == 0 and segments[7].tolist()[-1][-1] == 1 and len(segments[7]) == 2
    np.testing.assert_array_equal(segments[8], [[0, 5]])
    middle = segments[7][0, 1]
    np.testing.assert_allclose(p[middle], [0.5, -0.1, 0.0])
    straight = split_into_four(points, triangles, {}, snap)
    areas = signed_areas(straight[0], straight[1]).reshape(2, 4)
    np.testing.assert_allclose(areas, np.repeat(signed_areas(points, triangles)[:, None] / 4, 4, axis=1), rtol=1e-14)
    p6, t6 = with_mid_edge_nodes(points, triangles, {7: np.array([[1, 0]])}, snap)
    assert t6.shape == (2, 6) and len(p6) == 9
    np.testing.assert_allclose(p6[t6[0, 3]], [0.5, -0.1, 0.0])  # edge (0, 1) of triangle 0, on the curve
    np.testing.assert_allclose(p6[t6[0, 4]], [1.0, 0.5, 0.0])  # edge (1, 2): a chord's midpoint


def test_a_script_asking_for_second_order_elements_is_meshed_as_the_case_says(tmp_path):
    # a script may carry its own Mesh.ElementOrder; the case's [mesh] settings decide (C: Pozar, Table 2.1)
    script = tmp_path / "coaxial_second_order.geo"
    script.write_text((GEOMETRIES / "coaxial.geo").read_text() + "\nMesh.ElementOrder = 2;\n")
    case = Case("coaxial", ScriptGeometry(script, {"lc": 0.4}, 1e-3),
                {"insulation": Material("test dielectric", EPS_R, 20e6)}, {"inner": V, "outer": 0.0},
                mesh=MeshSettings(element_order=2, curved=True, refinements=1), refinement=SINGLE_MESH)
    assert relative_error(analyse(case)) < 1e-4  # curved P2 at 0.2 mm: about 2e-5



def test_big_meshes_are_split_automatically(monkeypatch):
    from fieldsection import gmsh_adapter

    # a small model is meshed at its final size when refinements is left to the tool
    assert coax(0.2, None).section.uniform_splits == 0
    # lower the threshold so this small model counts as big: gmsh meshes it coarser, then it is split
    monkeypatch.setattr(gmsh_adapter, "AUTO_SPLIT_ABOVE", 2_000)
    monkeypatch.setattr(gmsh_adapter, "AUTO_COARSE_NODES", 300)
    result = coax(0.05, None, order=1, curved=False)
    assert result.section.uniform_splits >= 2
    # P1 on a polygon at 0.05 mm: well below 1e-4 (about 1.4e-5 at 0.1 mm, see above), also when split
    assert relative_error(result) < 1e-4
    # k = 3 keeps the probe mesh (8x coarser) as the coarse mesh
    monkeypatch.setattr(gmsh_adapter, "AUTO_COARSE_NODES", 12_000 / 64)
    assert coax(0.05, None, order=1, curved=False).section.uniform_splits == 3


def test_transfinite_meshes_are_not_split_automatically(tmp_path, monkeypatch):
    # a transfinite mesh keeps its node counts whatever the size factor: splitting it would make it 4^k
    # times finer than the script asks (counts: (n + 1)^2 nodes for n x n divisions, elementary)
    from fieldsection import gmsh_adapter

    monkeypatch.setattr(gmsh_adapter, "AUTO_SPLIT_ABOVE", 1_000)
    script = tmp_path / "slab.geo"
    script.write_text(
        "Point(1) = {0, 0, 0, 1}; Point(2) = {10, 0, 0, 1}; Point(3) = {10, 1, 0, 1}; Point(4) = {0, 1, 0, 1};\n"
        "Line(1) = {1, 2}; Line(2) = {2, 3}; Line(3) = {3, 4}; Line(4) = {4, 1};\n"
        "Curve Loop(1) = {1, 2, 3, 4}; Plane Surface(1) = {1};\n"
        "Transfinite Curve{1, 2, 3, 4} = 41; Transfinite Surface{1};\n"
        "Physical Surface(\"gap\") = {1}; Physical Curve(\"bottom\") = {1}; Physical Curve(\"top\") = {3};\n")
    case = Case("slab", ScriptGeometry(script, {}, 1e-3), {"gap": Material("test dielectric", EPS_R, 20e6)},
                {"top": V, "bottom": 0.0}, outer_boundary="insulated",
                mesh=MeshSettings(element_order=1, curved=False), refinement=SINGLE_MESH)
    result = analyse(case)
    assert result.section.uniform_splits == 0 and result.section.mesh.nvertices == 41 * 41
    # and the field of a uniform slab is V / d everywhere (Gauss's law)
    np.testing.assert_allclose(result.fields.E_magnitude, V / 1e-3, rtol=1e-9)


def test_a_scripts_own_size_factor_still_applies(tmp_path):
    # Mesh.MeshSizeFactor in a script scales its sizes; the automatic choice (and k) must keep it:
    # half the sizes, about four times the nodes (nodes ~ 1/h^2 in 2D; common practice, no source)
    script = tmp_path / "coaxial_finer.geo"
    script.write_text((GEOMETRIES / "coaxial.geo").read_text() + "\nMesh.MeshSizeFactor = 0.5;\n")
    plain = coax(0.4, None, order=1, curved=False).section.mesh.nvertices
    case = Case("coaxial", ScriptGeometry(script, {"lc": 0.4}, 1e-3),
                {"insulation": Material("test dielectric", EPS_R, 20e6)}, {"inner": V, "outer": 0.0},
                mesh=MeshSettings(element_order=1, curved=False), refinement=SINGLE_MESH)
    assert analyse(case).section.mesh.nvertices == pytest.approx(4 * plain, rel=0.25)
