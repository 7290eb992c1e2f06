"""Dielectric rod in a uniform transverse field.

Source: J. D. Jackson, Classical Electrodynamics, 3rd ed., Wiley 1999 (cylinder counterpart of
section 4.4; from memory); D. J. Griffiths, Introduction to Electrodynamics, 4th ed., Problem 4.22:
inside the rod E = 2 E0 / (er + 1), uniform; bound surface charge
sigma_b = 2 eps0 (er - 1)/(er + 1) E0 cos(theta). The uniform field comes from two plates 40 rod radii
apart with insulated side walls; the images of the rod's dipole then perturb it by ~(a/2L)^2 ~ 1e-3.
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import solve_script
from fieldsection import Material

ER, V, HALF = 4.0, 1000.0, 20e-3
E0 = V / (2 * HALF)  # the applied field points from the top plate to the bottom one, along -y


@pytest.fixture(scope="module")
def rod():
    return solve_script(
        "cylinder_in_field.geo",
        {"rod": Material("rod", ER, None), "host": Material("vacuum", 1.0, None)},
        {"top": V, "bottom": 0.0},
        outer="insulated",
    )


def test_field_inside_is_uniform_and_reduced(rod):
    inside = rod.fields.E[rod.section.elements_of("rod")].reshape(-1, 2)
    expected = np.array([0.0, -2 * E0 / (ER + 1)])
    assert np.abs(inside - expected).max() < 1e-2 * np.abs(expected).max()


def test_bound_surface_charge_follows_cos_theta(rod):
    face = next(i for i in rod.charges.interfaces if {i.region_a, i.region_b} == {"rod", "host"})
    mesh = rod.section.mesh
    # sigma_b is evaluated with each facet's chord normal, so compare at chord midpoints
    middle = mesh.p[:, mesh.facets[:, face.facets]].mean(axis=1)
    cos_theta = -middle[1] / np.hypot(*middle)  # angle from the applied field's direction (-y)
    peak = 2 * epsilon_0 * (ER - 1) / (ER + 1) * E0
    expected = peak * cos_theta
    assert np.abs(face.sigma_b.mean(axis=1) - expected).max() < 1e-2 * peak
    assert abs(face.bound_charge) < 1e-3 * peak * 2 * np.pi * 1e-3  # net bound charge of the rod's face ~ 0
