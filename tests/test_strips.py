"""Zero-thickness strip conductors (drawn as curves inside the insulation), against closed forms.

- Symmetric stripline, strip width w centred between ground planes b apart: C = 4 eps K(k') / K(k),
  k = sech(pi w / 2b) (conformal mapping; S. B. Cohn, "Characteristic impedance of the shielded-strip
  transmission line", IRE Trans. MTT 2(2), 1954, 52-57; from memory). scipy.special's ellipk takes the
  parameter m = k^2; ellipkm1(m) = K(1 - m). Worked value: w = 1 mm, b = 2 mm, eps_r = 2.2 gives
  C = 7.3068117e-11 F/m. Side walls 6 mm beyond the edges change C by ~exp(-3 pi) ~ 1e-4.
"""

import numpy as np
import pytest
from scipy.constants import epsilon_0
from scipy.special import ellipk, ellipkm1

from conftest import solve_script
from fieldsection import Material


def test_stripline_matches_cohn():
    k = 1 / np.cosh(np.pi * 1.0 / (2 * 2.0))
    c_cohn = 4 * epsilon_0 * 2.2 * ellipkm1(k * k) / ellipk(k * k)
    assert c_cohn == pytest.approx(7.3068117e-11, rel=1e-7)
    result = solve_script("stripline.geo", {"dielectric": Material("substrate", 2.2, None)},
                          {"strip": 1.0, "ground": 0.0}, outer="insulated")
    assert result.capacitance.two_level.from_energy == pytest.approx(c_cohn, rel=1e-3)
    # both faces of the strip carry charge, and by symmetry equal shares
    strip = result.charges.conductors[0]
    assert strip.charge_from_flux == pytest.approx(c_cohn, rel=1e-2)
    upper = strip.sides.outward_normals[:, 1] < 0  # the element above has its outward normal pointing down
    mesh = result.section.mesh
    flux_up = -(strip.sigma_f[upper].mean(axis=1) * strip.sides.lengths[upper]).sum()
    flux_down = -(strip.sigma_f[~upper].mean(axis=1) * strip.sides.lengths[~upper]).sum()
    assert flux_up == pytest.approx(flux_down, rel=1e-2)
    assert mesh.nelements > 0
    # Gauss for the polarised dielectric: both faces of the strip count, and the body balances
    (body,) = result.charges.bodies
    assert abs(body.bound_charge) < 1e-2 * body.absolute_bound_charge
    strip_faces = next(f for f in result.charges.interfaces if f.region_b == "electrode strip")
    assert strip_faces.bound_charge == pytest.approx(-(2.2 - 1) / 2.2 * c_cohn, rel=1e-2)


def hammerstad_jensen(u: float, er: float) -> tuple[float, float]:
    """Quasi-static microstrip (zero thickness): (C, C_air) per metre for width/height u.

    E. Hammerstad, O. Jensen, "Accurate models for microstrip computer-aided design", IEEE MTT-S
    International Microwave Symposium Digest, 1980, pp. 407-409 (formulas as reproduced in the
    scikit-rf documentation of its MLine model). C = eps_eff / (c0 Z01), C_air = 1 / (c0 Z01); stated
    accuracy better than 0.2 % for eps_eff over 0.01 <= u <= 100, er < 128.
    """
    from scipy.constants import c as c0, epsilon_0 as e0, mu_0

    eta0 = np.sqrt(mu_0 / e0)
    f = 6 + (2 * np.pi - 6) * np.exp(-(30.666 / u) ** 0.7528)
    z01 = eta0 / (2 * np.pi) * np.log(f / u + np.sqrt(1 + (2 / u) ** 2))
    a = 1 + np.log((u**4 + (u / 52) ** 2) / (u**4 + 0.432)) / 49 + np.log(1 + (u / 18.1) ** 3) / 18.7
    b = 0.564 * ((er - 0.9) / (er + 3)) ** 0.053
    eps_eff = (er + 1) / 2 + (er - 1) / 2 * (1 + 10 / u) ** (-a * b)
    return eps_eff / (c0 * z01), 1 / (c0 * z01)


def test_microstrip_matches_hammerstad_jensen():
    # the FR-4 "50 ohm" line: w = 3 mm, h = 1.6 mm, er = 4.4; the worked H&J value is 1.2017280e-10 F/m
    c_hj, c_air_hj = hammerstad_jensen(3.0 / 1.6, 4.4)
    assert c_hj == pytest.approx(1.2017280e-10, rel=1e-6)
    results = {}
    for er in (4.4, 1.0):
        result = solve_script("microstrip.geo", {"substrate": Material("substrate", er, None),
                                                 "air": Material("air", 1.0, None)},
                              {"strip": 1.0, "ground": 0.0}, outer="insulated")
        results[er] = result.capacitance.two_level.from_energy
    # tolerance: H&J's 0.2 % plus ~0.1 % discretisation and box error
    assert results[4.4] == pytest.approx(c_hj, rel=3e-3)
    assert results[1.0] == pytest.approx(c_air_hj, rel=3e-3)
    eps_eff_hj = c_hj / c_air_hj
    assert results[4.4] / results[1.0] == pytest.approx(eps_eff_hj, rel=3e-3)
