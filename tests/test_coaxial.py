"""Coaxial line against the closed forms (exact solutions of the 2D problem).

Source: C = 2 pi eps / ln(b/a) and E(r) = V / (r ln(b/a)) by Gauss's law; e.g. D. M. Pozar,
Microwave Engineering, 4th ed., Wiley 2012, Table 2.1 (from memory). Worked values: a = 1 mm,
b = 3 mm, eps_r = 2.25 gives C = 1.1393749e-10 F/m and, at 1 kV, E(a) = 910.23923 kV/m.
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Material

A, B, EPS_R, V = 1e-3, 3e-3, 2.25, 1000.0
C_EXACT = 2 * np.pi * epsilon_0 * EPS_R / np.log(B / A)
E_INNER = V / (A * np.log(B / A))
PTFE_LIKE = Material("test dielectric", EPS_R, 20e6)


def coax(lc_mm: float, order: int = 2):
    return solve_script("coaxial.geo", {"insulation": PTFE_LIKE}, {"inner": V, "outer": 0.0},
                        parameters={"lc": lc_mm}, order=order)


@pytest.fixture(scope="module")
def fine():
    return coax(0.1)


def test_closed_form_matches_worked_value():
    # the worked example's number (Pozar's formula evaluated) guards against a unit slip in this file
    assert C_EXACT == pytest.approx(1.1393749e-10, rel=1e-7)
    assert E_INNER == pytest.approx(910.23923e3, rel=1e-7)


def test_capacitance_within_0_1_percent_p2(fine):
    cap = fine.capacitance.two_level
    assert cap.high == ("inner",) and cap.low == ("outer",)
    assert cap.from_energy == pytest.approx(C_EXACT, rel=1e-3)
    assert cap.from_charge == pytest.approx(C_EXACT, rel=1e-3)


def test_peak_field_on_inner_conductor_within_1_percent(fine):
    peak = fine.hotspots.region_peaks[0]
    assert peak.peak_E == pytest.approx(E_INNER, rel=1e-2)
    assert np.hypot(*peak.location) == pytest.approx(A, rel=1e-3)  # on the inner conductor


def test_field_follows_one_over_r(fine):
    # E(r) = V / (r ln(b/a)) at element centroids across the gap, 1 % (same source)
    mesh = fine.section.mesh
    centroid = mesh.p[:, mesh.t].mean(axis=1)
    r = np.hypot(*centroid)
    E = np.hypot(*fine.fields.element_mean_E.T)
    assert np.allclose(E * r * np.log(B / A) / V, 1.0, atol=1e-2)


def test_gauss_free_charge_equals_C_times_V(fine):
    # Gauss's law: Q = C V on the inner conductor and -C V on the outer one
    q_reaction = fine.capacitance.charges_from_reaction
    q_flux = fine.capacitance.charges_from_flux
    assert q_reaction == pytest.approx([C_EXACT * V, -C_EXACT * V], rel=1e-3)
    assert q_flux == pytest.approx([C_EXACT * V, -C_EXACT * V], rel=5e-3)


def test_bound_charge_of_the_body_sums_to_zero(fine):
    # Gauss's law for P: the bound charge of a body with no free charge inside totals zero, and the
    # bound charge on the inner face is -(eps_r - 1)/eps_r times the free charge (D = eps E, P = D - eps0 E)
    (body,) = fine.charges.bodies
    assert abs(body.bound_charge) < 1e-2 * body.absolute_bound_charge
    inner_face = next(i for i in fine.charges.interfaces if "inner" in i.region_b)
    expected = -(EPS_R - 1) / EPS_R * C_EXACT * V
    assert inner_face.bound_charge == pytest.approx(expected, rel=5e-3)


def test_sign_of_free_and_bound_surface_charge(fine):
    # on the positive inner conductor sigma_f > 0 and the touching dielectric face carries sigma_b < 0
    inner = fine.charges.conductors[0]
    assert inner.name == "inner" and (inner.sigma_f > 0).all()
    face = next(i for i in fine.charges.interfaces if "inner" in i.region_b)
    assert (face.sigma_b < 0).all()


def test_p2_converges_faster_than_p1():
    # standard a-priori FE theory (e.g. Strang & Fix, An Analysis of the Finite Element Method, 1973;
    # from memory): the energy (capacitance) error of Pk on a smooth problem with exact geometry
    # decays like h^(2k), i.e. DOFs^-k in 2D. Measured slopes must separate P1 (~ -1) and P2 (< -1.5).
    def slope(order, sizes):
        dofs, errors = [], []
        for lc in sizes:
            result = coax(lc, order)
            dofs.append(result.problem.ndofs)
            errors.append(abs(result.capacitance.two_level.from_energy / C_EXACT - 1))
        return np.polyfit(np.log(dofs), np.log(errors), 1)[0], errors[-1], dofs[-1]

    p1_slope, p1_error, p1_dofs = slope(1, (0.2, 0.1, 0.05))
    p2_slope, p2_error, p2_dofs = slope(2, (0.4, 0.2, 0.1))
    assert -1.3 < p1_slope < -0.7
    assert p2_slope < -1.5
    assert p2_dofs == pytest.approx(p1_dofs, rel=0.2)  # compared at about the same cost
    assert p2_error < p1_error / 100


def test_meshed_conductor_region_gives_the_same_line():
    # the inner conductor as a meshed surface held at V instead of a hole: same closed form
    result = solve_script("coaxial.geo", {"insulation": PTFE_LIKE}, {"core": V, "outer": 0.0},
                          parameters={"lc": 0.1, "meshed_core": 1})
    cap = result.capacitance.two_level
    assert cap.high == ("core",)
    assert cap.from_energy == pytest.approx(C_EXACT, rel=1e-3)
    assert cap.from_flux == pytest.approx(C_EXACT, rel=5e-3)
    assert result.hotspots.region_peaks[0].peak_E == pytest.approx(E_INNER, rel=1e-2)
    core = result.section.elements_of("core")
    assert not result.problem.dielectric[core].any()
    assert np.abs(result.fields.E[core]).max() == 0.0  # no field inside a conductor
    assert [b.region for b in result.charges.bodies] == ["insulation"]
