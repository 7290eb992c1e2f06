"""Partial-discharge screening: Paschen's law for air, and the field line across a gas gap.

Sources:
- Paschen's law V = B p d / (ln(A p d) - ln(ln(1 + 1/gamma))) with the air constants
  A = 15 /(cm Torr), B = 365 V/(cm Torr) (Yu. P. Raizer, Gas Discharge Physics, Springer 1991,
  Table 4.1; from memory) and gamma = 0.01. Its minimum, at p d = e ln(1 + 1/gamma) / A, is
  e (B/A) ln(1 + 1/gamma) = 305.27 V at 0.8363 Torr cm (elementary calculus). The measured minimum
  of air is about 327 V at 0.567 Torr cm (Kuffel, Zaengl & Kuffel, High Voltage Engineering, 2000,
  table of minimum sparking constants; from memory): the fitted curve must lie within 10 % of it.
- Uniform-field breakdown of air at 1 atm and 20 degC: V = 6.72 sqrt(pd) + 24.36 pd kV, pd in bar cm
  (Dakin et al., Electra 32, 1974, as reproduced in Kuffel et al. 2000; from memory): 31.447 kV at 1 cm,
  the textbook "about 3 kV/mm".
"""

import math

import pytest

from fieldsection import BuilderGeometry, Case, Material, analyse, lookup_material
from fieldsection.discharge import ATMOSPHERE, dakin_air_voltage, paschen_voltage
from fieldsection.case import SINGLE_MESH

TORR_CM = 133.322368 * 1e-2  # Pa m


def test_paschen_minimum_of_air():
    constants = lookup_material("air").paschen
    a, b, gamma = constants
    pd_min = math.e * math.log1p(1 / gamma) / a
    v_min = paschen_voltage(pd_min, constants)
    assert v_min == pytest.approx(math.e * b / a * math.log1p(1 / gamma), rel=1e-9)
    assert v_min == pytest.approx(305.27, rel=1e-4)
    assert pd_min / TORR_CM == pytest.approx(0.8363, rel=1e-3)
    # a minimum: higher on both sides
    assert paschen_voltage(0.7 * pd_min, constants) > v_min < paschen_voltage(1.4 * pd_min, constants)
    assert v_min == pytest.approx(327.0, rel=0.1)  # the measured minimum
    assert math.isinf(paschen_voltage(0.1 * pd_min, constants))  # left of the asymptote: no Townsend breakdown


def test_uniform_field_breakdown_of_air_at_one_atmosphere():
    assert dakin_air_voltage(ATMOSPHERE * 1e-2) == pytest.approx(31.447e3, rel=1e-4)
    assert dakin_air_voltage(ATMOSPHERE * 1e-2) / 10 == pytest.approx(3.1e3, rel=0.02)  # ~3 kV/mm


def test_field_line_across_an_air_gap_in_series_with_a_solid():
    from test_plates_and_hotspots import plates_builder

    air = lookup_material("air")
    case = Case("stack", BuilderGeometry(plates_builder([("solid", 2.0), ("air_gap", 1.0)]), 1e-3),
                {"solid": Material("test solid", 4.0, 20e6), "air_gap": air}, {"top": 1000.0, "bottom": 0.0},
                outer_boundary="insulated", refinement=SINGLE_MESH)
    (gap,) = analyse(case).gas_gaps
    e_air = 1000.0 / (1e-3 + 2e-3 * air.relative_permittivity / 4.0)  # D continuous across the layers
    assert gap.region == "air_gap"
    assert gap.length == pytest.approx(1e-3, rel=1e-3)  # the field line crosses the whole gap
    assert gap.voltage == pytest.approx(e_air * 1e-3, rel=1e-3)
    expected = min(paschen_voltage(ATMOSPHERE * 1e-3, air.paschen), dakin_air_voltage(ATMOSPHERE * 1e-3))
    assert gap.breakdown_voltage == pytest.approx(expected, rel=1e-9)
    assert gap.margin == pytest.approx(expected / (e_air * 1e-3), rel=1e-3)
    assert gap.margin > 1  # 0.67 kV across 1 mm of air: no discharge
