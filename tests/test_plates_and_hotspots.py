"""Parallel plates built with the Python (pygmsh) builder: exact uniform fields, and hotspots.

Sources:
- ideal parallel-plate capacitor C = eps w / d per metre, E = V / d (any electrostatics text, e.g.
  Griffiths, Introduction to Electrodynamics, 4th ed., section 2.5.4; from memory). With insulated
  side walls (zero normal D) the field is exactly uniform, so P1 and P2 reproduce it to round-off.
- layers in series (D continuous, E_air eps_air = E_solid eps_solid): 1 mm air + 2 mm of eps_r 4 at
  1 kV gives E_air = 666.67 kV/m and E_solid = 166.67 kV/m (elementary; worked example in our
  reference notes), so the gas gap carries eps_r times the solid's field.
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0

from fieldsection import BuilderGeometry, Case, Material, MeshSettings, analyse, lookup_material
from fieldsection.case import SINGLE_MESH

W, D, V = 10e-3, 1e-3, 1000.0


def plates_builder(layers, share_interfaces=True):
    """Stacked slabs between a bottom and a top plate; ``layers`` = [(name, thickness_mm), ...]."""
    def build(geom):
        levels = np.concatenate([[0.0], np.cumsum([t for _, t in layers])])
        left = [geom.add_point([0.0, y], 0.25) for y in levels]
        right = [geom.add_point([10.0, y], 0.25) for y in levels]
        across = [geom.add_line(a, b) for a, b in zip(left, right)]
        for k, (name, _) in enumerate(layers):
            below = across[k]
            if not share_interfaces and k > 0:  # a seam: a second, coincident line
                below = geom.add_line(geom.add_point([0.0, levels[k]], 0.25), geom.add_point([10.0, levels[k]], 0.25))
                loop = [below, geom.add_line(below.points[1], right[k + 1]), -across[k + 1],
                        geom.add_line(left[k + 1], below.points[0])]
            else:
                loop = [below, geom.add_line(right[k], right[k + 1]), -across[k + 1], geom.add_line(left[k + 1], left[k])]
            geom.add_physical(geom.add_plane_surface(geom.add_curve_loop(loop)), name)
        geom.add_physical(across[0], "bottom")
        geom.add_physical(across[-1], "top")
    return build


def test_single_slab_is_exact(tmp_path):
    ptfe = lookup_material("PTFE")
    for order in (1, 2):
        case = Case("plates", BuilderGeometry(plates_builder([("gap", 1.0)]), 1e-3), {"gap": ptfe},
                    {"top": V, "bottom": 0.0}, outer_boundary="insulated", hotspot_fraction=0.05,
                    mesh=MeshSettings(element_order=order), refinement=SINGLE_MESH)
        result = analyse(case)
        c_ideal = epsilon_0 * ptfe.relative_permittivity * W / D
        assert result.capacitance.two_level.from_energy == pytest.approx(c_ideal, rel=1e-9)
        assert result.capacitance.two_level.from_flux == pytest.approx(c_ideal, rel=1e-9)
        assert np.allclose(result.fields.E[..., 1], -V / D, rtol=1e-9)
        # the whole gap is at 1 kV/mm, above 5 % of PTFE's strength: one hotspot covering it all
        (spot,) = result.hotspots.hotspots
        assert spot.area == pytest.approx(W * D, rel=1e-9)
        assert spot.utilisation == pytest.approx((V / D) / ptfe.dielectric_strength, rel=1e-9)
        assert spot.nearest_electrode in ("top", "bottom") and spot.distance_to_electrode <= D / 2 + 1e-12


def test_air_gap_in_series_with_solid_is_flagged():
    air = lookup_material("air")
    solid = Material("test solid", 4.0, 20e6)
    case = Case("stack", BuilderGeometry(plates_builder([("solid", 2.0), ("air_gap", 1.0)]), 1e-3),
                {"solid": solid, "air_gap": air}, {"top": V, "bottom": 0.0}, outer_boundary="insulated",
                hotspot_fraction=0.2, refinement=SINGLE_MESH)
    result = analyse(case)
    # D continuous: E_air = V / (d_air + d_solid eps_air / eps_solid)
    e_air = V / (1e-3 + 2e-3 * air.relative_permittivity / 4.0)
    e_solid = e_air * air.relative_permittivity / 4.0
    assert e_air == pytest.approx(666.67e3, rel=1e-3)  # the worked value (vacuum-like air)
    peaks = {p.region: p.peak_E for p in result.hotspots.region_peaks}
    assert peaks["air_gap"] == pytest.approx(e_air, rel=1e-9)
    assert peaks["solid"] == pytest.approx(e_solid, rel=1e-9)
    assert peaks["air_gap"] / peaks["solid"] == pytest.approx(4.0 / air.relative_permittivity, rel=1e-9)
    # air at ~0.67 kV/mm is 22 % of its 3 kV/mm; the solid at 0.17 kV/mm is under 1 %: only the gap is flagged
    (spot,) = result.hotspots.hotspots
    assert spot.region == "air_gap" and spot.area == pytest.approx(W * 1e-3, rel=1e-9)
    assert spot.nearest_electrode == "top"
    # bound charge |sigma_b| = |P| = eps0 (er - 1) E on the solid's faces; P points down (along E), so the
    # face on the 0 V bottom plate is positive (screening that plate's negative free charge)
    sigma = epsilon_0 * (4.0 - 1) * e_solid
    faces = {frozenset((f.region_a, f.region_b)): f for f in result.charges.interfaces}
    assert faces[frozenset(("solid", "electrode bottom"))].bound_charge == pytest.approx(sigma * W, rel=1e-6)
    bottom = result.charges.conductors[result.capacitance.names.index("bottom")]
    assert bottom.charge_from_flux == pytest.approx(-4.0 * epsilon_0 * e_solid * W, rel=1e-6)


def test_builder_without_labels_is_refused():
    from fieldsection import FieldSectionError

    def build(geom):
        poly = geom.add_polygon([[0, 0], [1, 0], [1, 1]], mesh_size=0.5)
        geom.add_physical(poly.surface, "gap")
        raise ValueError("typo in my builder")

    case = Case("broken", BuilderGeometry(build, 1e-3), {"gap": lookup_material("air")}, {"gap_edge": 1.0}, refinement=SINGLE_MESH)
    with pytest.raises(FieldSectionError, match="builder failed: ValueError: typo in my builder"):
        analyse(case)


def test_surfaces_that_touch_without_sharing_nodes_are_refused():
    from fieldsection import FieldSectionError

    air = lookup_material("air")
    case = Case("seam", BuilderGeometry(plates_builder([("solid", 2.0), ("air_gap", 1.0)], share_interfaces=False), 1e-3),
                {"solid": air, "air_gap": air}, {"top": V, "bottom": 0.0}, outer_boundary="insulated", refinement=SINGLE_MESH)
    with pytest.raises(FieldSectionError, match="'solid' and 'air_gap' touch near .* without sharing mesh nodes"):
        analyse(case)


def test_quoted_plain_number_parameter_is_not_metres(tmp_path):
    from conftest import GEOMETRIES
    from fieldsection import load_case

    case = tmp_path / "coax.toml"
    case.write_text(f'[geometry]\nscript = "{GEOMETRIES / "coaxial.geo"}"\nlength_unit = "mm"\n'
                    '[geometry.parameters]\nr_outer = "3"\nr_inner = "1 mm"\n'
                    '[regions]\ninsulation = "PTFE"\n[electrodes]\ninner = "1 kV"\nouter = "0 V"\n')
    assert load_case(case).geometry.parameters == {"r_outer": 3.0, "r_inner": pytest.approx(1.0)}


def side_by_side_builder(geom):
    """A solid (left) and an air slab (right) side by side between two plates 1 mm apart."""
    pts = {(x, y): geom.add_point([x, y], 0.1) for x in (0.0, 5.0, 10.0) for y in (0.0, 1.0)}
    bottom_l, bottom_r = geom.add_line(pts[0, 0], pts[5, 0]), geom.add_line(pts[5, 0], pts[10, 0])
    top_l, top_r = geom.add_line(pts[5, 1], pts[0, 1]), geom.add_line(pts[10, 1], pts[5, 1])
    middle = geom.add_line(pts[5, 0], pts[5, 1])
    left = geom.add_line(pts[0, 1], pts[0, 0])
    right = geom.add_line(pts[10, 0], pts[10, 1])
    geom.add_physical(geom.add_plane_surface(geom.add_curve_loop([bottom_l, middle, top_l, left])), "solid")
    geom.add_physical(geom.add_plane_surface(geom.add_curve_loop([bottom_r, right, top_r, -middle])), "air_gap")
    geom.add_physical([bottom_l, bottom_r], "bottom")
    geom.add_physical([top_l, top_r], "top")


def test_triple_points_of_layers_parallel_to_the_field():
    # interface parallel to E: the field is V/d in both layers, right up to the two triple points
    # where the interface meets the plates (elementary; layers in parallel)
    case = Case("parallel", BuilderGeometry(side_by_side_builder, 1e-3),
                {"solid": Material("test solid", 4.0, 20e6), "air_gap": lookup_material("air")},
                {"top": V, "bottom": 0.0}, outer_boundary="insulated", refinement=SINGLE_MESH)
    points = analyse(case).hotspots.triple_points
    assert sorted((p.electrode, round(p.location[0] * 1e3, 6), round(p.location[1] * 1e3, 6)) for p in points) == [
        ("bottom", 5.0, 0.0), ("top", 5.0, 1.0)]
    for p in points:
        assert (p.gas_region, p.solid_region) == ("air_gap", "solid")
        assert p.E_gas == pytest.approx(V / D, rel=1e-9) and p.E_solid == pytest.approx(V / D, rel=1e-9)
        assert p.gas_utilisation == pytest.approx((V / D) / 3e6, rel=1e-9)
