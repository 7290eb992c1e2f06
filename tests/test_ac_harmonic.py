"""AC time-harmonic, quasi-static analysis: -div((sigma + j omega eps) grad V) = 0, against closed forms.

Sources (each beside its check):
- Lossy coaxial line per metre: C = 2 pi eps / ln(b/a), G = 2 pi sigma / ln(b/a) + omega C tan(delta)
  (D. M. Pozar, Microwave Engineering, 4th ed., Table 2.1: G = 2 pi omega eps'' / ln(b/a) with
  eps'' = eps' tan(delta) + sigma/omega; from memory).
- Dielectric loss per metre P = omega C V^2 tan(delta) / 2 for a peak voltage V, = omega C V_rms^2 tan(delta)
  (the usual cable dielectric-loss formula, e.g. IEC 60287-1-1's W_d = omega C U0^2 tan(delta) with U0 in
  RMS; from memory). fieldsection takes electrode potentials as peak values.
- Two layers in series: at high frequency (omega eps >> sigma) the displacement current dominates and
  the field divides by the permittivities (series capacitance, as in tests/test_two_layer_coaxial.py:
  C = 1.0701431e-10 F/m, E(r1-) = 240.44917 kV/m, E(r1+) = 480.89835 kV/m at 1 kV); at low frequency
  (omega eps << sigma) by the conductivities, G = 2 pi / sum ln(r_k+1/r_k)/sigma_k (elementary).
- The peak over a period of |Re((a + j b) e^{j w t})| is checked against sampling the period (numpy).
"""

import math

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.analysis import AnalysisSettings
from fieldsection.case import SINGLE_MESH
from fieldsection.harmonic_ac import peak_over_period

A, B = 1e-3, 3e-3  # coaxial.geo


def coax(script, regions, parameters, analysis, voltage=1000.0, order=2):
    return analyse(Case(name="coax", geometry=ScriptGeometry(GEOMETRIES / script, parameters, 1e-3), regions=regions,
                        electrodes={"inner": voltage, "outer": 0.0}, mesh=MeshSettings(element_order=order),
                        refinement=SINGLE_MESH, analysis=analysis))


def test_lossy_coax_admittance_and_loss():
    er, tan_d, sigma, f, V = 2.3, 0.01, 1e-9, 50.0, 1000.0
    result = coax("coaxial.geo", {"insulation": Material("x", er, 20e6, loss_tangent=tan_d, conductivity=sigma)},
                  {"lc": 0.2}, AnalysisSettings(kind="ac", frequency=f))
    ac = result.conduction
    omega = 2 * math.pi * f
    c = 2 * math.pi * epsilon_0 * er / math.log(B / A)
    g = 2 * math.pi * sigma / math.log(B / A) + omega * c * tan_d  # Pozar, Table 2.1 (from memory)
    assert ac.capacitance[0, 0] == pytest.approx(c, rel=1e-4)
    assert ac.conductance[0, 0] == pytest.approx(g, rel=1e-4)
    assert ac.capacitance[0, 1] == pytest.approx(-c, rel=1e-4)
    assert ac.loss == pytest.approx(0.5 * g * V**2, rel=1e-4)  # time average at peak V: V_rms^2 G
    assert ac.loss_from_regions == pytest.approx(ac.loss, rel=1e-9)
    # the peak field of a single phase is the electrostatic one at the same (peak) potentials
    region = ac.regions["insulation"]
    assert region.peak_E == pytest.approx(region.electrostatic_peak_E, rel=1e-9)
    assert region.peak_E == pytest.approx(V / (A * math.log(B / A)), rel=1e-2)


def test_loss_tangent_alone_gives_omega_c_v2_tan_delta_over_2():
    er, tan_d, f, V = 2.5, 0.001, 50.0, 10e3  # XLPE-like values (IEC 60287-1-1; from memory)
    result = coax("coaxial.geo", {"insulation": Material("x", er, None, loss_tangent=tan_d)}, {"lc": 0.2},
                  AnalysisSettings(kind="ac", frequency=f), voltage=V)
    c = 2 * math.pi * epsilon_0 * er / math.log(B / A)
    expected = 2 * math.pi * f * c * V**2 * tan_d / 2  # peak-voltage form of omega C U^2 tan(delta)
    assert result.conduction.loss == pytest.approx(expected, rel=1e-4)
    # the current leads the voltage by 90 degrees minus the loss angle delta
    current = result.conduction.currents[0]
    assert math.degrees(np.angle(current)) == pytest.approx(90.0 - math.degrees(math.atan(tan_d)), abs=1e-6)


R1, R2, R3 = 1e-3, 2e-3, 4e-3  # coaxial_two_layer.geo
ER1, ER2, S1, S2 = 4.0, 2.0, 1e-10, 4e-10


def two_layer(frequency):
    regions = {"inner_layer": Material("inner", ER1, None, conductivity=S1),
               "outer_layer": Material("outer", ER2, None, conductivity=S2)}
    return coax("coaxial_two_layer.geo", regions, {"lc": 0.1}, AnalysisSettings(kind="ac", frequency=frequency))


def test_two_layer_coax_at_high_frequency_follows_the_permittivities():
    ac = two_layer(1e6).conduction  # omega eps ~ 2e-4 S/m >> sigma ~ 1e-10 S/m
    c_series = 2 * math.pi * epsilon_0 / (math.log(R2 / R1) / ER1 + math.log(R3 / R2) / ER2)
    assert c_series == pytest.approx(1.0701431e-10, rel=1e-7)  # the worked value of the module docstring
    assert ac.capacitance[0, 0] == pytest.approx(c_series, rel=1e-3)
    # er1 a = er2 r1 here: both layers peak at 480.9 kV/m (worked example)
    assert ac.regions["inner_layer"].peak_E == pytest.approx(480.89835e3, rel=1e-2)
    assert ac.regions["outer_layer"].peak_E == pytest.approx(480.89835e3, rel=1e-2)


def test_two_layer_coax_at_low_frequency_follows_the_conductivities():
    ac = two_layer(1e-6).conduction  # omega eps ~ 2e-16 S/m << sigma
    resistance = math.log(R2 / R1) / S1 + math.log(R3 / R2) / S2
    assert ac.conductance[0, 0] == pytest.approx(2 * math.pi / resistance, rel=1e-4)
    assert ac.regions["inner_layer"].peak_E == pytest.approx(1000.0 / (S1 * R1 * resistance), rel=1e-2)
    assert ac.regions["outer_layer"].peak_E == pytest.approx(1000.0 / (S2 * R2 * resistance), rel=1e-2)


def test_phase_of_the_electrode_shifts_the_current():
    result = coax("coaxial.geo", {"insulation": Material("x", 2.3, None)}, {"lc": 0.3},
                  AnalysisSettings(kind="ac", frequency=50.0, phases_deg={"inner": -120.0}))
    ac = result.conduction
    assert math.degrees(np.angle(ac.phasors[0])) == pytest.approx(-120.0, abs=1e-9)
    # lossless: a purely capacitive current, 90 degrees ahead of its voltage, and no loss
    assert math.degrees(np.angle(ac.currents[0])) == pytest.approx(-30.0, abs=1e-6)
    assert abs(ac.loss) < 1e-12 * abs(ac.currents[0]) * 1000.0
    assert any("lossless" in n for n in ac.notes)


def test_peak_over_a_period_against_sampling():
    rng = np.random.default_rng(3)
    a, b = rng.normal(size=(50, 2)), rng.normal(size=(50, 2))
    t = np.linspace(0, 2 * np.pi, 20001)
    sampled = np.hypot(*(a[:, :, None] * np.cos(t) - b[:, :, None] * np.sin(t)).transpose(1, 0, 2)).max(axis=1)
    assert np.allclose(peak_over_period(a, b), sampled, rtol=1e-7)
    # a circularly rotating field keeps its magnitude; a linear one peaks at its amplitude
    assert peak_over_period(np.array([1.0, 0.0]), np.array([0.0, 1.0])) == pytest.approx(1.0, rel=1e-12)
    assert peak_over_period(np.array([3.0, 4.0]), np.array([0.0, 0.0])) == pytest.approx(5.0, rel=1e-12)


# ---------------------------------------------------------------- the CLI, the report, and bad input
import re  # noqa: E402

from test_bad_input import PLATES_CASE, run_expecting_error, write_case  # noqa: E402

AC_PLATES = PLATES_CASE + '\n[analysis]\nkind = "ac"\nfrequency = "50 Hz"\n'


def test_the_ac_case_runs_and_reports(tmp_path, capsys):
    import json

    from fieldsection.cli import main
    reports = tmp_path / "reports"
    assert main(["run", str(write_case(tmp_path, AC_PLATES)), "--reports", str(reports), "--quiet"]) == 0
    folder = reports / "plates"
    results = json.loads((folder / "results.json").read_text())
    ac = results["analysis"]
    assert ac["kind"] == "ac" and ac["frequency_Hz"] == 50.0
    # PTFE, 1 mm gap, 10 mm wide, insulated sides: C = eps0 er w / d (parallel plates, exact here), and the
    # loss omega C V^2 tan(delta) / 2 at 1 kV peak (tan delta 0.0002 from the shipped table)
    c = epsilon_0 * 2.1 * 10.0
    assert ac["capacitance_matrix_pF_per_m"][0][0] == pytest.approx(c * 1e12, rel=1e-9)
    assert ac["dielectric_loss_W_per_m"] == pytest.approx(2 * math.pi * 50 * c * 1e6 * 0.0002 / 2, rel=1e-9)
    html = (folder / "report.html").read_text()
    assert "Analysis: AC time-harmonic at 50 Hz" in html and "AC time-harmonic analysis at 50 Hz" in html
    assert (folder / "ac_field.png").is_file() and (folder / "ac_loss.png").is_file()
    import meshio  # the AC fields read back: the time-averaged loss density integrates to the loss per metre
    grid = meshio.read(folder / "analysis_fields.vtk")
    xy = grid.points[:, :2][grid.cells_dict["triangle"]]
    u, v = xy[:, 1] - xy[:, 0], xy[:, 2] - xy[:, 0]
    area = 0.5 * np.abs(u[:, 0] * v[:, 1] - u[:, 1] * v[:, 0])
    density = grid.cell_data["loss_density"][0]
    assert float(density @ area) == pytest.approx(ac["dielectric_loss_W_per_m"], rel=1e-9)


@pytest.mark.parametrize(
    "old, new, expected",
    [
        ('frequency = "50 Hz"', '', r"analysis\.frequency: an AC analysis needs a frequency"),
        ('frequency = "50 Hz"', 'frequency = "50 kV"', r"analysis\.frequency: '50 kV' is not a frequency"),
        ('frequency = "50 Hz"', 'frequency = -50', r"analysis\.frequency = -50\.0 Hz: must be a positive frequency"),
        ('frequency = "50 Hz"', 'frequency = "50 Hz"\n[analysis.phases_deg]\nlid = 120',
         r"analysis\.phases_deg\.lid: no electrode 'lid' with a potential; electrodes: bottom, top"),
        ('frequency = "50 Hz"', 'frequency = "50 Hz"\n[analysis.phases_deg]\ntop = "120 deg"',
         r"analysis\.phases_deg\.top = '120 deg': must be a finite number"),
        ('frequency = "50 Hz"', 'frequency = "50 Hz"\nphases_deg = 120',
         r"analysis\.phases_deg must be a table of electrode = degrees"),
        ('frequency = "50 Hz"', 'frequency = "50 Hz"\n[analysis.temperature_degC]\ngap = 60',
         r"analysis\.temperature_degC applies to kind = \"dc\" only"),
    ],
)
def test_ac_case_file_errors(tmp_path, capsys, old, new, expected):
    assert old in AC_PLATES
    message = run_expecting_error(tmp_path, capsys, write_case(tmp_path, AC_PLATES.replace(old, new)))
    assert re.search(expected, message), message


def test_shipped_cable_with_grading_layer():
    # two coaxial layers with complex admittivities y_i = sigma_i + omega eps_i tan(d_i) + j omega eps_i in
    # series: Y = 1 / sum_i ln(r_i+1/r_i) / (2 pi y_i) per metre (elementary), loss = Re(Y) V^2 / 2 at peak V
    from dataclasses import replace

    from fieldsection.case import load_case
    from fieldsection.materials import lookup_material
    result = analyse(replace(load_case(GEOMETRIES / "cable_grading_ac.toml"), refinement=SINGLE_MESH))
    ac = result.conduction
    omega = 2 * math.pi * 50.0
    layers = [(lookup_material("demo-grading-compound"), 5e-3, 6e-3), (lookup_material("XLPE"), 6e-3, 11e-3)]
    impedance = sum(math.log(r2 / r1) / (2 * math.pi * ((m.conductivity or 0) + omega * epsilon_0 * m.relative_permittivity
                                                          * (m.loss_tangent + 1j))) for m, r1, r2 in layers)
    y = 1 / impedance
    assert ac.admittance[0, 0].real == pytest.approx(y.real, rel=1e-4)
    assert ac.admittance[0, 0].imag == pytest.approx(y.imag, rel=1e-4)
    assert ac.loss == pytest.approx(0.5 * y.real * 12e3**2, rel=1e-4)


def test_two_wires_in_open_lossy_space():
    # two parallel wires (radius 1 mm, centres 10 mm apart) in an unbounded medium: the mutual admittance is
    # (sigma + j omega eps) pi / arccosh(d / 2a) per metre, the two-wire capacitance with eps -> sigma + j omega eps
    # (pi / arccosh(5) = 1.3704193, as in tests/test_several_conductors.py; elementary). The open space beyond
    # the circle is the Kelvin image of the same medium.
    sigma, er, f = 2e-10, 3.0, 50.0
    result = analyse(Case(name="wires", geometry=ScriptGeometry(GEOMETRIES / "two_wires.geo", {"space_radius": 8}, 1e-3),
                          regions={"air": Material("lossy", er, None, conductivity=sigma)},
                          electrodes={"wire_a": 1000.0, "wire_b": 1000.0}, outer_boundary="open",
                          mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH,
                          analysis=AnalysisSettings(kind="ac", frequency=f, phases_deg={"wire_b": 180.0})))
    ac = result.conduction
    factor = math.pi / math.acosh(5.0)
    assert factor == pytest.approx(1.3704193, rel=1e-7)
    y = (sigma + 2j * math.pi * f * epsilon_0 * er) * factor
    assert ac.admittance[0, 1].real == pytest.approx(-y.real, rel=1e-3)
    assert ac.admittance[0, 1].imag == pytest.approx(-y.imag, rel=1e-3)
    # +/-1 kV peak (the second at 180 degrees): 2 kV across the pair, loss = Re(y) (2 kV)^2 / 2
    assert ac.loss == pytest.approx(0.5 * y.real * 2000.0**2, rel=1e-3)


def test_concentric_spheres_at_ac_and_their_report(tmp_path):
    # Y = 4 pi (sigma + j omega eps) a b / (b - a) for the whole body (the spherical capacitor with eps -> the
    # complex admittivity; elementary); an axisymmetric model reports whole-body keys
    import json

    from fieldsection.report import write_report
    a, b, sigma, er, f = 1e-3, 3e-3, 1e-9, 2.0, 50.0
    result = analyse(Case("sphere", ScriptGeometry(GEOMETRIES / "sphere.geo", {"shell": 1}, 1e-3),
                          {"gas": Material("m", er, 10e6, conductivity=sigma)}, {"sphere": 1000.0, "shell": 0.0},
                          model="axisymmetric", mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH,
                          analysis=AnalysisSettings(kind="ac", frequency=f)))
    y = 4 * math.pi * (sigma + 2j * math.pi * f * epsilon_0 * er) * a * b / (b - a)
    ac = result.conduction
    assert ac.admittance[0, 0].real == pytest.approx(y.real, rel=1e-3)
    assert ac.admittance[0, 0].imag == pytest.approx(y.imag, rel=1e-3)
    folder = write_report(result, tmp_path, with_figures=False)
    block = json.loads((folder / "results.json").read_text())["analysis"]
    assert block["dielectric_loss_W"] == pytest.approx(0.5 * y.real * 1000.0**2, rel=1e-3)
    assert block["capacitance_matrix_pF"][0][0] == pytest.approx(y.imag / (2 * math.pi * f) * 1e12, rel=1e-3)


def test_hotspot_screening_of_the_peak_over_a_period():
    # the coax at 5 kV peak: E(a) = V / (a ln(b/a)) = 4.55 kV/mm (closed form) against a strength of 8 kV/mm:
    # 57 % at the inner conductor, above the 50 % threshold, so one hotspot there; at 3 kV peak (34 %) none
    from fieldsection.analysis_report import analysis_results
    material = Material("x", 2.3, 8e6, loss_tangent=0.001)
    for volts, found in ((5e3, 1), (3e3, 0)):
        result = coax("coaxial.geo", {"insulation": material}, {"lc": 0.2}, AnalysisSettings(kind="ac", frequency=50.0),
                      voltage=volts)
        spots = analysis_results(result)["hotspots"]
        assert len(spots) == found
    (spot,) = coax("coaxial.geo", {"insulation": material}, {"lc": 0.2}, AnalysisSettings(kind="ac", frequency=50.0),
                   voltage=5e3).conduction.screening.hotspots
    assert spot.utilisation == pytest.approx(5e3 / (A * math.log(B / A)) / 8e6, rel=1e-2)
    assert math.hypot(*spot.location) == pytest.approx(A, rel=1e-6)
