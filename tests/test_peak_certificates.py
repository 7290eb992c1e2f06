"""Peak fields with evidence: adaptive refinement, certificates, corner theory, voids, corona onset.

Sources:
- coaxial line: C = 2 pi eps0 eps_r / ln(b/a) and E(a) = V / (a ln(b/a)) (Gauss's law; D. M. Pozar,
  Microwave Engineering, 4th ed., 2012, Table 2.1; from memory).
- conductor corner: |E| ~ r^(pi/beta - 1) with beta the opening of the dielectric side, so a 90-degree
  conductor corner (beta = 3 pi / 2) gives r^(-1/3) and a foil edge (beta = 2 pi) r^(-1/2)
  (E. J. Rothwell, M. J. Cloud, Electromagnetics, CRC Press 2001, section 3.2.9; J. D. Jackson,
  Classical Electrodynamics, 3rd ed., section 2.11).
- circular (2D) void in a uniform field: E_void = 2 eps_r / (eps_r + 1) E_far (the dielectric cylinder of
  Griffiths, Introduction to Electrodynamics, 4th ed., problem 4.22, with host and inclusion exchanged).
- Peek's law, two parallel wires: E_v = 30 m delta (1 + 0.301 / sqrt(delta r)) kV/cm peak, r in cm
  (F. W. Peek, Dielectric Phenomena in High Voltage Engineering, McGraw-Hill 1929; as given in Kuffel,
  Zaengl & Kuffel, High Voltage Engineering, 2000): r = 1 cm gives 39.030 kV/cm, r = 0.1 cm 58.555 kV/cm.
- wire of radius a, centre height h over a ground plane at potential difference V: largest surface field
  V s / (a (h - a) arccosh(h / a)), s = sqrt(h^2 - a^2), at the point facing the plane (image line charges
  at +-s; W. R. Smythe, Static and Dynamic Electricity, 3rd ed., 1968; from memory; derived in the
  comment below).
"""

import math

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse, lookup_material
from fieldsection.case import SINGLE_MESH, Refinement
from fieldsection.certificate import CONVERGED, SINGLE_MESH as ONE_MESH_STATUS, SINGULAR, certify
from fieldsection.discharge import peek_onset_field
from fieldsection.singularity import FIXED, INSULATED, wedge_eigenvalue

from conftest import GEOMETRIES

A, B, V = 1e-3, 3e-3, 1000.0


@pytest.mark.parametrize("order", [2, 3])
def test_adaptive_coaxial_line_to_one_part_per_million_within_20000_dofs(order):
    er = 2.25
    result = solve_script("coaxial.geo", {"insulation": Material("test", er, None)}, {"inner": V, "outer": 0.0},
                          order=order,
                          refinement=Refinement(capacitance_tolerance=1e-7, field_tolerance=1e-3, max_dofs=20_000))
    exact_c = 2 * math.pi * epsilon_0 * er / math.log(B / A)
    assert all(p.ndofs <= 20_000 for p in result.passes) and len(result.passes) >= 2
    assert result.capacitance.two_level.from_energy == pytest.approx(exact_c, rel=1e-6)
    # the peak sits on the inner conductor, a smooth surface: it converges, and to within 0.1 %
    peak = result.certificates.regions["insulation"]
    assert peak.status == CONVERGED and peak.is_peak_field and peak.relative_error <= 1e-3
    assert peak.value == pytest.approx(V / (A * math.log(B / A)), rel=1e-3)
    assert math.hypot(*result.hotspots.region_peaks[0].location) == pytest.approx(A, rel=1e-6)
    assert peak.theory_exponent is None  # no corner of the geometry there
    # the indicator's estimate falls pass by pass
    errors = [p.estimated_error for p in result.passes]
    assert errors[-1] < 0.5 * errors[0]


def test_converged_peak_is_certified_with_its_error():
    result = solve_script("coaxial.geo", {"insulation": Material("test", 2.25, None)}, {"inner": V, "outer": 0.0},
                          refinement=Refinement(field_tolerance=5e-3))
    peak = result.certificates.regions["insulation"]
    assert peak.status == CONVERGED and result.stop_reason.startswith("converged")
    assert peak.relative_error <= 5e-3
    assert abs(peak.value / (V / (A * math.log(B / A))) - 1) <= 5e-3


def test_square_conductor_corner_is_certified_singular_with_exponent_minus_one_third():
    case = Case("square", ScriptGeometry(GEOMETRIES / "square_in_tube.geo", {}, 1e-3),
                {"insulation": Material("test solid", 3.0, 20e6)}, {"bar": V, "tube": 0.0},
                mesh=MeshSettings(element_order=2), refinement=Refinement(max_dofs=40_000, max_passes=10))
    result = analyse(case)
    peak = result.certificates.regions["insulation"]
    assert peak.status == SINGULAR and not peak.is_peak_field
    assert peak.measured_exponent == pytest.approx(-1 / 3, abs=0.05)
    assert peak.theory_exponent == pytest.approx(-1 / 3, abs=1e-9)
    assert peak.field_angle_deg == pytest.approx(270.0, abs=1e-6)
    x, y = result.hotspots.region_peaks[0].location
    assert abs(abs(x) - 1e-3) < 0.1e-3 and abs(abs(y) - 1e-3) < 0.1e-3  # at (or next to) a corner
    assert all(np.diff(peak.history) > 0)  # grows with every refinement
    # the capacitance still converges (the energy stays finite at a corner)
    c = [p.capacitance[0, 0] for p in result.passes]
    assert abs(c[-1] - c[-2]) < 0.2 * abs(c[1] - c[0])


def test_wedge_eigenvalues_match_the_corner_formula():
    # lambda = pi / beta between two conductor faces (Rothwell & Cloud 2001, section 3.2.9)
    assert wedge_eigenvalue([(1.5 * math.pi, 1.0)], FIXED, FIXED) == pytest.approx(2 / 3, abs=1e-9)
    assert wedge_eigenvalue([(2 * math.pi, 3.0)], FIXED, FIXED) == pytest.approx(1 / 2, abs=1e-9)
    assert wedge_eigenvalue([(math.pi / 2, 1.0)], FIXED, FIXED) == pytest.approx(2.0, abs=1e-9)
    # between a conductor and a symmetry (zero normal D) face the wedge is half of its mirrored whole
    assert wedge_eigenvalue([(0.75 * math.pi, 1.0)], FIXED, INSULATED) == pytest.approx(2 / 3, abs=1e-9)
    # a flat conductor under two dielectrics side by side, interface normal to it: the field stays uniform
    assert wedge_eigenvalue([(math.pi / 2, 4.0), (math.pi / 2, 1.0)], FIXED, FIXED) == pytest.approx(1.0, abs=1e-9)
    # the same wedge split into equal materials changes nothing
    assert wedge_eigenvalue([(0.75 * math.pi, 2.0), (0.75 * math.pi, 2.0)], FIXED, FIXED) == pytest.approx(2 / 3)


def test_certificate_rules():
    # a value that doubles when h falls by 8 grows as h^(-1/3): singular, with a radius for 10 kV/mm
    sizes = [1e-3, 1.25e-4, 1.5625e-5]
    values = [1e6, 2e6, 4e6]
    singular = certify(values, sizes, None, 1e-3, 10e6)
    assert singular.status == SINGULAR and singular.measured_exponent == pytest.approx(-1 / 3)
    # |E| = c h^(-1/3) = 10 MV/m at h = (1e6 * 1e-3^(1/3) / 1e7)^3 = 1e-6 m
    assert singular.advised_radius == pytest.approx(1e-6, rel=1e-9)
    # an allowed field below what the power law reaches over the measured sizes: no radius helps
    assert certify(values, sizes, None, 1e-3, 0.5e6).advised_radius is None
    settled = certify([1.0e6, 1.0004e6, 1.0005e6], sizes, None, 1e-3, None)
    assert settled.status == CONVERGED and settled.relative_error == pytest.approx(1e-4, rel=1e-3)
    assert certify([1.0e6], sizes[:1], None, 1e-3, None, 0.02).status == ONE_MESH_STATUS


def test_circular_void_in_a_uniform_field():
    er = 4.0
    thickness = 20e-3
    case = Case("void", ScriptGeometry(GEOMETRIES / "void_in_slab.geo", {}, 1e-3),
                {"host": Material("test solid", er, None), "void": lookup_material("air")},
                {"top": V, "bottom": 0.0}, outer_boundary="insulated", mesh=MeshSettings(element_order=2),
                refinement=SINGLE_MESH)
    result = analyse(case)
    void = result.section.elements_of("void")
    e_void = result.fields.element_mean_E[void]
    applied = V / thickness
    air = lookup_material("air").relative_permittivity
    expected = 2 * er / (er + air) * applied  # host eps_r over the void's: 2 eps_h / (eps_h + eps_v)
    assert expected == pytest.approx(1.6 * applied, rel=1e-3)
    # uniform inside, along -y; the plates 10 radii away perturb it by well under 1 % (images ~ (a/d)^2)
    assert np.abs(e_void[:, 1]).mean() == pytest.approx(expected, rel=5e-3)
    assert np.abs(e_void[:, 0]).max() < 1e-2 * expected
    assert np.ptp(e_void[:, 1]) < 1e-2 * expected
    # a gas void is a gas region: it is screened for partial discharge
    assert any(g.region == "void" for g in result.gas_gaps)


def test_peek_onset_field():
    assert peek_onset_field(1e-2) == pytest.approx(39.030e5, rel=1e-4)  # 39.030 kV/cm at r = 1 cm
    assert peek_onset_field(1e-3) == pytest.approx(58.555e5, rel=1e-4)  # 58.555 kV/cm at r = 1 mm
    with pytest.raises(ValueError, match="radius must be positive"):
        peek_onset_field(0.0)


def test_round_wire_over_ground_is_screened_for_corona():
    # image line charges +-q at +-s from the plane: V = q/(2 pi eps0) arccosh(h/a); at the point of the
    # surface facing the plane, distance h - a from it, E = q/(2 pi eps0) 2 s / (s^2 - (h - a)^2)
    # = V s / (a (h - a) arccosh(h/a)), as s^2 - (h - a)^2 = 2 a (h - a)
    a, h, volts = 1e-3, 5e-3, 12e3
    result = solve_script("wire_over_ground.geo", {"air": lookup_material("air")}, {"wire": volts, "ground": 0.0},
                          outer="open", refinement=Refinement(field_tolerance=2e-3, max_dofs=60_000))
    s = math.sqrt(h * h - a * a)
    surface = volts * s / (a * (h - a) * math.acosh(h / a))
    (check,) = result.corona
    assert check.electrode == "wire" and check.radius == pytest.approx(a, rel=1e-6)
    assert check.surface_field == pytest.approx(surface, rel=5e-3)
    assert check.location[1] == pytest.approx(h - a, abs=0.02 * a)
    assert check.onset_field == pytest.approx(peek_onset_field(a), rel=1e-9)
    assert check.margin == pytest.approx(peek_onset_field(a) / surface, rel=5e-3)
    assert check.margin < 1  # 12 kV on a 1 mm wire 4 mm above ground is in corona (6.4 vs 5.86 kV/mm)


def test_two_dielectric_wedge_at_a_conductor():
    # a 90-degree wedge of eps_r 4 beside a 180-degree wedge of eps_r 1 between conductor faces (a triple
    # point on a conductor corner). Separating variables in each wedge, f = A sin(lambda theta) and
    # B sin(lambda (alpha - theta)), continuity of f and eps f' gives eps_2 tan(lambda alpha_1) +
    # eps_1 tan(lambda alpha_2) = 0 (elementary); its smallest root is lambda = 0.79517
    from scipy.optimize import brentq

    def closed_form(lam):
        return 1.0 * math.tan(lam * math.pi / 2) + 4.0 * math.tan(lam * math.pi)

    root = brentq(closed_form, 0.51, 0.99)
    lam = wedge_eigenvalue([(math.pi / 2, 4.0), (math.pi, 1.0)], FIXED, FIXED)
    assert lam == pytest.approx(root, abs=1e-9)
    assert lam == pytest.approx(0.79517, abs=1e-5)
    # between 2/3 (all eps 1: a plain 270-degree corner) and 1: the solid softens the corner
    assert 2 / 3 < lam < 1


def test_a_smooth_peak_rising_to_its_limit_is_not_singular():
    # E = 1 - 0.3 (h / h0)^2: a converging peak approached from below, steps shrinking by 4 each pass
    sizes = [1e-3, 5e-4, 2.5e-4]
    values = [1 - 0.3 * (h / 1e-3) ** 2 for h in sizes]
    rising = certify(values, sizes, None, 1e-3, 1.0)
    assert rising.status == "not converged" and rising.measured_exponent < -0.05
    # at a corner the theory calls regular it is never singular, however it grows
    from fieldsection.singularity import CornerTheory

    flat = CornerTheory(exponent=0.0, field_angle=math.pi, n_materials=1)
    assert certify([1.0, 1.5], sizes[:2], flat, 1e-3, 1.0).status == "not converged"
    # a field of round-off size is a converged zero, not a singularity
    assert certify([1e-7, 2e-7, 4e-7], sizes, None, 1e-3, None, negligible=1e-3).status == CONVERGED


def test_adaptive_open_space_floating_and_axisymmetric_models():
    # isolated sphere in open space (axisymmetric, Kelvin image): C = 4 pi eps0 a (Gauss's law)
    sphere = analyse(Case("sphere", ScriptGeometry(GEOMETRIES / "sphere.geo", {"space_radius": 3.0}, 1e-3),
                          {"gas": Material("vacuum", 1.0, None)}, {"sphere": 1000.0}, outer_boundary="open",
                          model="axisymmetric", refinement=Refinement(max_dofs=30_000)))
    assert sphere.capacitance.two_level.from_energy == pytest.approx(4 * math.pi * epsilon_0 * 1e-3, rel=2e-4)
    assert sphere.stop_reason.startswith("converged")
    # uncharged floating shell between coaxial conductors: two coaxial capacitors in series
    er, r1, r2 = 2.25, 1.8e-3, 1.9e-3
    c1 = 2 * math.pi * epsilon_0 * er / math.log(r1 / A)
    c2 = 2 * math.pi * epsilon_0 * er / math.log(B / r2)
    dielectric = Material("test dielectric", er, None)
    shell = analyse(Case("shell", ScriptGeometry(GEOMETRIES / "coaxial_floating_shell.geo", {}, 1e-3),
                         {"inner_gap": dielectric, "outer_gap": dielectric}, {"inner": V, "outer": 0.0},
                         floating={"shell": 0.0}, refinement=Refinement(max_dofs=40_000)))
    assert shell.capacitance.two_level.from_energy == pytest.approx(c1 * c2 / (c1 + c2), rel=1e-5)
    assert len(shell.passes) >= 2
    # two wires in open space (planar inversion): C = pi eps0 / arccosh(D / 2a), D = 10 mm, a = 1 mm
    wires = solve_script("two_wires.geo", {"air": Material("vacuum", 1.0, None)}, {"wire_a": 1.0, "wire_b": -1.0},
                         outer="open", refinement=Refinement(max_dofs=40_000))
    exact = math.pi * epsilon_0 / math.acosh(10.0 / 2.0)
    assert wires.capacitance.two_level.from_energy == pytest.approx(exact, rel=1e-4)
