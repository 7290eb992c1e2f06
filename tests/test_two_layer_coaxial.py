"""Coaxial line with two insulation layers in series.

Source: series capacitance of two coaxial shells, C = 2 pi eps0 / (ln(r1/a)/er1 + ln(b/r1)/er2),
and continuity of normal D at the interface (E jumps by er1/er2); cable-grading treatment in
E. Kuffel, W. S. Zaengl, J. Kuffel, High Voltage Engineering: Fundamentals, 2nd ed., Newnes 2000,
ch. 4 (from memory). Worked values for a = 1, r1 = 2, b = 4 mm, er1 = 4, er2 = 2 at 1 kV:
C = 1.0701431e-10 F/m, E(r1-) = 240.44917 kV/m, E(r1+) = 480.89835 kV/m.
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Material
from fieldsection.charges import facet_sides

A, R1, B, ER1, ER2, V = 1e-3, 2e-3, 4e-3, 4.0, 2.0, 1000.0
C_SERIES = 2 * np.pi * epsilon_0 / (np.log(R1 / A) / ER1 + np.log(B / R1) / ER2)


@pytest.fixture(scope="module")
def layered():
    return solve_script(
        "coaxial_two_layer.geo",
        {"inner_layer": Material("inner layer", ER1, None), "outer_layer": Material("outer layer", ER2, None)},
        {"inner": V, "outer": 0.0},
        parameters={"lc": 0.1},
    )


def test_series_capacitance(layered):
    assert C_SERIES == pytest.approx(1.0701431e-10, rel=1e-7)  # the worked value above
    assert layered.capacitance.two_level.from_energy == pytest.approx(C_SERIES, rel=1e-3)


def test_field_jumps_by_permittivity_ratio_at_interface(layered):
    problem, fields = layered.problem, layered.fields
    face = next(i for i in layered.charges.interfaces if {i.region_a, i.region_b} == {"inner_layer", "outer_layer"})
    f2t = problem.section.mesh.f2t[:, face.facets]
    region = problem.section.region_of_element
    inner_id = problem.section.region_names.index("inner_layer")
    inner_el = np.where(region[f2t[0]] == inner_id, f2t[0], f2t[1])
    outer_el = np.where(region[f2t[0]] == inner_id, f2t[1], f2t[0])
    E_in = np.abs(fields.E_magnitude[inner_el]).max(axis=1)
    E_out = np.abs(fields.E_magnitude[outer_el]).max(axis=1)
    # values on the interface circle itself, from the vertices that lie on it
    inner_sides = facet_sides(problem, face.facets, inner_el)
    outer_sides = facet_sides(problem, face.facets, outer_el)
    e_minus = fields.E_magnitude[inner_el[:, None], inner_sides.local_vertices]
    e_plus = fields.E_magnitude[outer_el[:, None], outer_sides.local_vertices]
    assert e_minus.mean() == pytest.approx(240.44917e3, rel=1e-2)
    assert e_plus.mean() == pytest.approx(480.89835e3, rel=1e-2)
    assert np.median(e_plus / e_minus) == pytest.approx(ER1 / ER2, rel=1e-2)
    assert E_in.size == E_out.size


def test_bound_charge_on_the_interface(layered):
    # sigma_b = (P_a - P_b).n with D_r = q/(2 pi r) continuous: total = q (1/er2 - 1/er1), q = C V
    face = next(i for i in layered.charges.interfaces if {i.region_a, i.region_b} == {"inner_layer", "outer_layer"})
    q = C_SERIES * V
    assert face.bound_charge == pytest.approx(q * (1 / ER2 - 1 / ER1), rel=1e-2)
    for body in layered.charges.bodies:
        assert abs(body.bound_charge) < 1e-2 * body.absolute_bound_charge
