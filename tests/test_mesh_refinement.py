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
