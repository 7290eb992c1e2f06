"""Several conductors, open space and symmetry, against closed forms.

Sources (exact solutions of the 2D problems, by images / bipolar coordinates):
- two parallel round wires, radius a, centre spacing D, in free space: C = pi eps / acosh(D / 2a);
  wire at height h over a ground plane: C = 2 pi eps / acosh(h / a) (D. M. Pozar, Microwave
  Engineering, 4th ed., 2012, Table 2.1; W. R. Smythe, Static and Dynamic Electricity, 3rd ed.,
  1968; both from memory). Worked values for a = 1 mm: D = 10 mm gives C/eps0 = 1.3704193;
  h = 5 mm gives C/eps0 = 2.7408386.
- eccentric coaxial line, radii a < b, centres offset by d: C = 2 pi eps / acosh((a^2 + b^2 - d^2)/(2ab))
  (Smythe 1968; B. C. Wadell, Transmission Line Design Handbook, Artech House 1991; from memory);
  a = 1, b = 4, d = 1 mm in air: C/eps0 = 4.7709842, and at 1 kV the inner conductor's surface
  field on the narrow-gap side is V (cosh t1 + 1) / (s (t1 - t2)) = 876.79381 kV/m (bipolar coordinates).
- reciprocity: the Maxwell matrix is symmetric (Green's reciprocity theorem; Jackson, Classical
  Electrodynamics, 3rd ed., section 1.13 problems; from memory).
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Material
from fieldsection.case import SINGLE_MESH

VACUUM = {"air": Material("vacuum", 1.0, None)}
C_TWO_WIRES = np.pi * epsilon_0 / np.arccosh(10 / 2)
C_WIRE_GROUND = 2 * np.pi * epsilon_0 / np.arccosh(5 / 1)


def test_closed_forms_match_worked_values():
    assert C_TWO_WIRES / epsilon_0 == pytest.approx(1.3704193, rel=1e-7)
    assert C_WIRE_GROUND / epsilon_0 == pytest.approx(2.7408386, rel=1e-7)


@pytest.mark.parametrize("radius_mm", [8, 30])
def test_two_wires_in_open_space(radius_mm):
    # the open-space circle at 0.8 D or 3 D: the answer must not depend on where it is drawn
    result = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": 0.0},
                          parameters={"space_radius": radius_mm}, outer="open")
    cap = result.capacitance
    assert cap.two_level.from_energy == pytest.approx(C_TWO_WIRES, rel=1e-3)
    # the off-diagonal Maxwell term is -C; in 2D no charge goes to infinity, so the rows sum to zero
    assert cap.maxwell_from_charge[0, 1] == pytest.approx(-C_TWO_WIRES, rel=1e-3)
    assert np.abs(cap.to_reference).max() < 1e-9 * C_TWO_WIRES
    assert cap.asymmetry < 1e-9 and cap.diagonally_dominant


def test_open_space_result_does_not_depend_on_the_circle_but_a_grounded_one_does():
    small = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": 0.0},
                         parameters={"space_radius": 8}, outer="open")
    large = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": 0.0},
                         parameters={"space_radius": 30}, outer="open")
    shielded = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": 0.0},
                            parameters={"space_radius": 8}, outer="grounded")
    c_small, c_large = small.capacitance.two_level.from_energy, large.capacitance.two_level.from_energy
    assert c_small == pytest.approx(c_large, rel=2e-4)
    # a grounded shield at 0.8 D changes the pair's capacitance by far more than that
    shield_c = shielded.capacitance
    assert shield_c.names == ("wire_a", "wire_b", "outer boundary")
    assert abs(-shield_c.maxwell_from_charge[0, 1] / C_TWO_WIRES - 1) > 0.05


def test_wire_over_ground_plane_and_the_halved_two_wire_model():
    # the ground plane is the straight edge of a half-disc whose arc is open space
    ground = solve_script("wire_over_ground.geo", VACUUM, {"wire": 1.0, "ground": 0.0}, outer="open")
    assert ground.capacitance.two_level.from_energy == pytest.approx(C_WIRE_GROUND, rel=1e-3)
    # the full two-wire model at +1 V / -1 V has the ground plane as its zero-potential midline
    full = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": -1.0}, outer="open")
    q = full.capacitance.charges_from_reaction
    assert q[0] == pytest.approx(C_WIRE_GROUND, rel=1e-3)
    assert q[0] == pytest.approx(ground.capacitance.charges_from_reaction[0], rel=2e-4)


def test_half_model_with_insulated_symmetry_line_reports_the_full_section():
    from fieldsection import Case, MeshSettings, ScriptGeometry, analyse
    from conftest import GEOMETRIES

    case = Case("half", ScriptGeometry(GEOMETRIES / "two_wires_half.geo", {}, 1e-3), VACUUM,
                {"wire_a": 1.0, "wire_b": 0.0}, outer_boundary="open", insulated_curves=frozenset({"symmetry"}),
                symmetry_copies=2, mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH)
    cap = analyse(case).capacitance
    assert cap.copies == 2
    assert cap.two_level.from_energy == pytest.approx(C_TWO_WIRES, rel=1e-3)
    assert cap.maxwell_from_charge[0, 1] == pytest.approx(-C_TWO_WIRES, rel=1e-3)


def test_eccentric_coaxial_line():
    result = solve_script("eccentric_coaxial.geo", {"insulation": Material("vacuum", 1.0, None)},
                          {"inner": 1000.0, "outer": 0.0})
    c_exact = 2 * np.pi * epsilon_0 / np.arccosh((1 + 16 - 1) / (2 * 1 * 4))
    assert c_exact / epsilon_0 == pytest.approx(4.7709842, rel=1e-7)
    assert result.capacitance.two_level.from_energy == pytest.approx(c_exact, rel=1e-4)
    peak = result.hotspots.region_peaks[0]
    assert peak.peak_E == pytest.approx(876.79381e3, rel=5e-3)
    assert peak.location == pytest.approx((2e-3, 0.0), abs=1e-5)  # on the narrow-gap side


def test_three_conductors_reciprocal_and_dominant():
    # two wires inside a grounded circular shield: three conductors
    result = solve_script("two_wires.geo", VACUUM, {"wire_a": 1.0, "wire_b": 0.0},
                          parameters={"space_radius": 12}, outer="grounded")
    cap = result.capacitance
    C = cap.maxwell_from_charge
    assert C.shape == (3, 3)
    assert cap.asymmetry < 1e-9
    assert cap.diagonally_dominant
    assert np.abs(C.sum(axis=1)).max() < 1e-9 * np.abs(C).max()  # enclosed: rows sum to zero
    # by mirror symmetry both wires see the shield alike
    assert C[0, 2] == pytest.approx(C[1, 2], rel=1e-3)
    # the case's charges are C V
    assert cap.charges_from_reaction[:3] == pytest.approx(C @ np.array([1.0, 0.0, 0.0]), rel=1e-9)
