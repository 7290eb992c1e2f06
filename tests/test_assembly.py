"""The hand-built P1 matrix of the million-node path against scikit-fem's general assembly.

Reference: scikit-fem (PyPI), assembling the same bilinear form (eps grad u, grad v) with its own
element loop; the two must agree to round-off on an irregular mesh with a different eps per element.
"""

from __future__ import annotations

import numpy as np
import pytest
from skfem import Basis, ElementTriP1, MeshTri

from fieldsection.forms import linear_stiffness, permittivity_laplace


def test_hand_built_p1_matrix_equals_scikit_fem_assembly():
    rng = np.random.default_rng(7)
    mesh = MeshTri.init_circle(4)  # curved outline, graded interior: no two elements alike
    mesh = MeshTri(mesh.p + 0.01 * rng.standard_normal(mesh.p.shape) * (np.hypot(*mesh.p) < 0.9), mesh.t)
    eps = 8.854e-12 * rng.uniform(1.0, 10.0, mesh.nelements)
    reference = permittivity_laplace.assemble(Basis(mesh, ElementTriP1()), eps=eps[:, None]).tocsr()
    built = linear_stiffness(mesh, eps)
    scale = abs(reference).max()
    assert abs(built - reference).max() <= 1e-12 * scale
    assert built.nnz == mesh.nvertices + 2 * mesh.nfacets  # one entry per vertex and two per edge
    assert abs(built - built.T).max() == pytest.approx(0.0, abs=1e-15 * scale)


def test_linear_shortcuts_equal_the_general_quadrature_paths(monkeypatch):
    """Straight P1 takes closed forms for E at the vertices and for the edge fluxes (E is constant in an
    element); the general paths (scikit-fem bases and Gauss quadrature on each edge) must give the same
    numbers, on a two-layer coaxial line with both a conductor face and a material interface."""
    from conftest import solve_script
    from fieldsection import Material, fields
    from fieldsection.charges import compute_charges

    result = solve_script("coaxial_two_layer.geo", {"inner_layer": Material("a", 2.0, 20e6),
                                                    "outer_layer": Material("b", 5.0, 20e6)},
                          {"inner": 1000.0, "outer": 0.0}, order=1, curved=False)
    fast = compute_charges(result.solution, result.fields)
    monkeypatch.setattr(fields, "_is_linear", lambda problem: False)
    general_fields = fields.element_fields(result.solution)
    general = compute_charges(result.solution, general_fields)
    np.testing.assert_allclose(result.fields.E, general_fields.E, rtol=1e-10, atol=1e-10 * abs(general_fields.E).max())
    for mine, theirs in zip(fast.conductors, general.conductors):
        assert mine.charge_from_flux == pytest.approx(theirs.charge_from_flux, rel=1e-10)
    assert len(fast.interfaces) >= 3  # inner conductor | layer, layer | layer, layer | outer conductor
    for mine, theirs in zip(fast.interfaces, general.interfaces):
        assert mine.bound_charge == pytest.approx(theirs.bound_charge, rel=1e-9, abs=1e-12 * abs(theirs.bound_charge))


def test_recovery_from_the_element_fields_equals_recovery_from_the_potential():
    """The single-mesh recovery takes E from the element fields instead of the potential's gradients; the
    recovered field and the error indicator must not change (round-off only)."""
    from conftest import solve_script
    from fieldsection import Material
    from fieldsection.recovery import recover_field

    result = solve_script("coaxial_two_layer.geo", {"inner_layer": Material("a", 2.0, 20e6),
                                                    "outer_layer": Material("b", 5.0, 20e6)},
                          {"inner": 1000.0, "outer": 0.0}, order=1, curved=False)
    given = recover_field(result.solution, result.fields)
    own = recover_field(result.solution)
    np.testing.assert_allclose(given.E, own.E, rtol=1e-12, atol=1e-12 * abs(own.E).max())
    np.testing.assert_allclose(given.indicator, own.indicator, rtol=1e-9, atol=1e-12 * own.indicator.max())
    assert own.indicator.max() > 0


def test_curved_linear_elements_keep_the_general_path():
    """P1 on curved (6-node) geometry is not straight: E must come from the curved map, not the corner
    triangle. Coaxial line, E(a) = V / (a ln(b/a)) by Gauss's law (e.g. D. M. Pozar, Microwave
    Engineering, 4th ed., Wiley 2012, section 2.2; from memory). The corner-triangle shortcut read
    about 23 % low here; the curved P1 field at the inner conductor is within 3 % (tolerance: P1's
    constant field sampled half an element from the surface, common practice, no source)."""
    from conftest import solve_script
    from fieldsection import Material

    a, b, volts = 1e-3, 3e-3, 1000.0
    result = solve_script("coaxial.geo", {"insulation": Material("test dielectric", 2.25, 20e6)},
                          {"inner": volts, "outer": 0.0}, parameters={"lc": 0.2}, order=1, curved=True)
    assert result.section.curved and result.fields.E.flags.writeable  # the general path's own arrays
    exact = volts / (a * np.log(b / a))
    assert result.fields.E_magnitude.max() == pytest.approx(exact, rel=0.03)


def test_linear_basis_places_its_dofs_on_the_vertices():
    from conftest import solve_script
    from fieldsection import Material
    from fieldsection.problem import dof_location

    result = solve_script("coaxial.geo", {"insulation": Material("test dielectric", 2.25, 20e6)},
                          {"inner": 1.0, "outer": 0.0}, parameters={"lc": 0.8}, order=1, curved=False)
    basis, mesh = result.problem.basis, result.section.mesh
    np.testing.assert_array_equal(basis.doflocs, mesh.p)
    np.testing.assert_array_equal(dof_location(basis, mesh.nvertices - 1), mesh.p[:, -1])


def test_curved_meshes_compute_each_inverse_jacobian_once_with_the_same_numbers(monkeypatch):
    """The section's curved mesh maps through ``isoparametric.InverseOnce``: a P2 basis asks for the inverse
    Jacobian once per shape function, computed once here, and the basis (values, gradients, weights) and the
    global points are those of scikit-fem's own isoparametric mapping, to round-off (the Jacobian is summed as a
    matrix product here, in another order)."""
    from skfem import Basis
    from skfem.mapping import MappingIsoparametric

    from conftest import solve_script
    from fieldsection import Material
    from fieldsection.isoparametric import InverseOnce

    result = solve_script("coaxial.geo", {"insulation": Material("pe", 2.3, None)}, {"inner": 1.0, "outer": 0.0},
                          parameters={"lc": 0.5})
    mesh = result.section.mesh
    assert result.section.curved and isinstance(mesh.mapping(), InverseOnce)
    computed = []
    original = MappingIsoparametric.invDF
    monkeypatch.setattr(MappingIsoparametric, "invDF", lambda self, *a, **k: computed.append(1) or original(self, *a, **k))
    ours = Basis(mesh, result.problem.basis.elem, intorder=4)
    assert len(computed) == 1  # six shape functions, one inverse
    theirs = Basis(mesh, result.problem.basis.elem, intorder=4,
                   mapping=MappingIsoparametric(mesh, mesh.elem(), mesh.bndelem))
    assert len(computed) == 1 + 6
    scale = np.abs(np.asarray(theirs.basis[0][0].grad)).max()
    for a, b in zip(ours.basis, theirs.basis):
        np.testing.assert_allclose(np.asarray(a[0].grad), np.asarray(b[0].grad), rtol=1e-12, atol=1e-13 * scale)
        np.testing.assert_array_equal(np.asarray(a[0]), np.asarray(b[0]))
    np.testing.assert_allclose(ours.dx, theirs.dx, rtol=1e-12)
    points = np.array([[0.2, 0.1, 0.6], [0.3, 0.5, 0.1]])
    for elements in (None, np.arange(3, 40)):
        np.testing.assert_allclose(ours.mapping.F(points, elements), theirs.mapping.F(points, elements), rtol=1e-14,
                                   atol=1e-14 * np.abs(mesh.p).max())
    # the Jacobian of the last points and elements only is kept (scikit-fem's own mapping keeps every one)
    Basis(mesh, result.problem.basis.elem, intorder=2)
    assert len(mesh.mapping()._j_values) == 4 and not hasattr(mesh.mapping(), "_cache")
