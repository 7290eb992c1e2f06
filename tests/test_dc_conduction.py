"""DC steady conduction: -div(sigma grad V) = 0, checked against closed forms.

Sources (each beside its check):
- Leakage conductance of a coaxial insulation, G = 2 pi sigma / ln(b/a) per metre: the electrostatic
  C = 2 pi eps / ln(b/a) with eps -> sigma (the same Laplace problem; D. M. Pozar, Microwave Engineering,
  4th ed., Table 2.1, coaxial line G = 2 pi omega eps'' / ln(b/a); from memory).
- Layers in series under DC: the current is continuous, so E_i = J / sigma_i, and in a coax
  E_i(r) = V / (sigma_i r sum_k ln(r_k+1/r_k)/sigma_k) (elementary; HVDC cable texts, e.g. Kuffel,
  Zaengl & Kuffel, High Voltage Engineering, 2nd ed. 2000, ch. on DC stress; from memory).
- Maxwell-Wagner interface charge rho_s = (eps2/sigma2 - eps1/sigma1) J_n and the relaxation time
  of two layers in series, tau = (eps1 d2 + eps2 d1)/(sigma1 d2 + sigma2 d1) (standard result, e.g.
  A. von Hippel, Dielectrics and Waves, Wiley 1954, Maxwell-Wagner two-layer condenser; from memory).
- sigma = sigma0 exp(beta E) in a coax: the radial current I per metre is the same at every radius,
  I = 2 pi r sigma0 exp(beta E) E, so beta E(r) = W(beta I / (2 pi r sigma0)) with Lambert's W
  (scipy.special.lambertw), and V = integral of E dr (scipy.integrate.quad); I from V by brentq.
  A semi-analytic reference computed with general-purpose scipy routines, independent of the FE code.
"""

import math
import re

import numpy as np
import pytest
from scipy.constants import epsilon_0
from scipy.integrate import quad
from scipy.optimize import brentq
from scipy.special import lambertw

from conftest import GEOMETRIES
from fieldsection import BuilderGeometry, Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.analysis import AnalysisSettings
from fieldsection.case import SINGLE_MESH
from fieldsection.conduction_dc import analyse_dc
from test_plates_and_hotspots import plates_builder

DC = AnalysisSettings(kind="dc")


def coax_case(script, regions, parameters, analysis=DC, voltage=1000.0, order=2):
    return Case(name="coax", geometry=ScriptGeometry(GEOMETRIES / script, parameters, 1e-3), regions=regions,
                electrodes={"inner": voltage, "outer": 0.0}, mesh=MeshSettings(element_order=order),
                refinement=SINGLE_MESH, analysis=analysis)


A, B = 1e-3, 3e-3  # coaxial.geo


def test_leakage_conductance_of_a_coax():
    sigma = 2e-13
    result = analyse(coax_case("coaxial.geo", {"insulation": Material("x", 2.3, None, conductivity=sigma)},
                               {"lc": 0.2}))
    dc = result.conduction
    g = 2 * math.pi * sigma / math.log(B / A)  # Pozar, Table 2.1 (from memory)
    assert dc.conductance[0, 0] == pytest.approx(g, rel=1e-4)
    assert dc.currents[0] == pytest.approx(g * 1000.0, rel=1e-4)
    assert dc.loss == pytest.approx(g * 1000.0**2, rel=1e-4)  # Joule loss V I
    assert dc.regions["insulation"].joule_loss == pytest.approx(g * 1000.0**2, rel=1e-4)
    # one material: the DC distribution is the electrostatic one, and no relaxation happens
    region = dc.regions["insulation"]
    assert region.ratio_to_electrostatic == pytest.approx(1.0, rel=1e-9)
    assert dc.relaxation_time is None
    assert not any("differs strongly" in w for w in dc.warnings)
    assert region.time_constant[0] == pytest.approx(epsilon_0 * 2.3 / sigma, rel=1e-12)  # eps / sigma
    assert dc.iterations == 1 and not dc.nonlinear


R1, R2, R3 = 1e-3, 2e-3, 4e-3  # coaxial_two_layer.geo
ER1, ER2, S1, S2 = 4.0, 2.0, 1e-12, 4e-12


@pytest.fixture(scope="module")
def two_layer():
    regions = {"inner_layer": Material("inner", ER1, 20e6, conductivity=S1, dc_strength=40e6),
               "outer_layer": Material("outer", ER2, 20e6, conductivity=S2)}
    return analyse(coax_case("coaxial_two_layer.geo", regions, {"lc": 0.1}))


def test_two_layer_coax_field_follows_the_conductivities(two_layer):
    dc = two_layer.conduction
    V = 1000.0
    resistance = math.log(R2 / R1) / S1 + math.log(R3 / R2) / S2  # 2 pi x resistance per metre
    # E_i(r) = V / (sigma_i r sum_k ln(r_k+1/r_k)/sigma_k), largest at each layer's inner radius (closed form)
    e_inner = V / (S1 * R1 * resistance)
    e_outer = V / (S2 * R2 * resistance)
    assert dc.regions["inner_layer"].peak_E == pytest.approx(e_inner, rel=1e-2)
    assert dc.regions["outer_layer"].peak_E == pytest.approx(e_outer, rel=1e-2)
    assert dc.currents[0] == pytest.approx(2 * math.pi * V / resistance, rel=1e-4)
    # the electrostatic peaks are those of the permittivities (480.9 kV/m in both layers at 1 kV, our
    # reference notes' worked example): the DC stress moved into the inner layer, so the warning is given
    assert dc.regions["inner_layer"].electrostatic_peak_E == pytest.approx(480.89835e3, rel=1e-2)
    assert any("differs strongly" in w for w in dc.warnings)
    assert dc.regions["inner_layer"].utilisation == pytest.approx(e_inner / 40e6, rel=1e-2)
    assert dc.regions["outer_layer"].utilisation is None  # no DC strength given
    assert any("no DC strength known for outer_layer" in w for w in dc.warnings)


def test_two_layer_coax_interface_charge_and_relaxation_time(two_layer):
    dc = two_layer.conduction
    V = 1000.0
    resistance = math.log(R2 / R1) / S1 + math.log(R3 / R2) / S2
    current = 2 * math.pi * V / resistance  # A/m, outwards
    (face,) = dc.interfaces
    assert {face.region_a, face.region_b} == {"inner_layer", "outer_layer"}
    # rho_s = (eps_b/sigma_b - eps_a/sigma_a) J_n with n from a to b (Maxwell-Wagner, von Hippel; from memory);
    # with a = inner layer J_n is the outward current density; naming the sides the other way round flips
    # both factors, so the total is the same either way
    ratio = epsilon_0 * (ER2 / S2 - ER1 / S1)
    expected_total = ratio * current
    assert face.free_charge == pytest.approx(expected_total, rel=2e-3)
    assert face.peak_abs_density == pytest.approx(abs(ratio) * current / (2 * math.pi * R2), rel=2e-2)
    # series layers: tau = (C1 + C2) / (G1 + G2), the coaxial form of (eps1 d2 + eps2 d1)/(sigma1 d2 + sigma2 d1)
    c1, c2 = ER1 / math.log(R2 / R1), ER2 / math.log(R3 / R2)
    g1, g2 = S1 / math.log(R2 / R1), S2 / math.log(R3 / R2)
    assert dc.relaxation_time == pytest.approx(epsilon_0 * (c1 + c2) / (g1 + g2), rel=2e-3)


W = 10e-3


def plates(layers, materials, analysis=DC, order=1):
    case = Case("plates", BuilderGeometry(plates_builder(layers), 1e-3), materials, {"top": 1000.0, "bottom": 0.0},
                outer_boundary="insulated", mesh=MeshSettings(element_order=order), refinement=SINGLE_MESH,
                analysis=analysis)
    return analyse(case)


@pytest.mark.parametrize("order", [1, 2])
def test_maxwell_wagner_plates(order):
    d1, d2, e1, e2, s1, s2 = 1e-3, 2e-3, 2.0, 5.0, 3e-14, 1e-15
    result = plates([("lower", 1.0), ("upper", 2.0)],
                    {"lower": Material("a", e1, None, conductivity=s1), "upper": Material("b", e2, None, conductivity=s2)},
                    order=order)
    dc = result.conduction
    j = 1000.0 / (d1 / s1 + d2 / s2)  # downwards, from the top plate at 1 kV
    (face,) = dc.interfaces
    # rho_s = (eps_upper/sigma_upper - eps_lower/sigma_lower) J_n, n upwards (lower -> upper): J_n = -j
    rho = epsilon_0 * (e2 / s2 - e1 / s1) * (-j)
    sign = 1 if (face.region_a, face.region_b) == ("lower", "upper") else -1
    assert sign * face.free_charge == pytest.approx(rho * W, rel=1e-9)  # uniform fields: exact on any mesh
    assert np.allclose(sign * face.density, rho, rtol=1e-8)
    tau = epsilon_0 * (e1 * d2 + e2 * d1) / (s1 * d2 + s2 * d1)  # Maxwell-Wagner relaxation time (von Hippel)
    assert dc.relaxation_time == pytest.approx(tau, rel=1e-9)
    assert dc.regions["lower"].peak_E == pytest.approx(j / s1, rel=1e-9)
    assert dc.regions["upper"].peak_E == pytest.approx(j / s2, rel=1e-9)


def test_conductivities_in_the_ratio_of_the_permittivities_leave_the_field_unchanged():
    # sigma proportional to eps: the same Laplace problem, so no interface charge and no relaxation (elementary)
    result = plates([("lower", 1.0), ("upper", 2.0)],
                    {"lower": Material("a", 2.0, None, conductivity=2e-14),
                     "upper": Material("b", 5.0, None, conductivity=5e-14)})
    dc = result.conduction
    (face,) = dc.interfaces
    assert abs(face.free_charge) < 1e-12 * epsilon_0 * 1000.0 / 1e-3 * W
    assert dc.relaxation_time is None
    assert not any("differs strongly" in w for w in dc.warnings)


SIGMA0, BETA, V_NL = 1e-12, 2e-7, 10e3  # beta = 0.2 mm/kV; beta E(a) ~ 1.7


def field_dependent_reference():
    """(I per metre, E(a)) for sigma = sigma0 exp(beta E) in the coax a = 1, b = 3 mm at V_NL (Lambert W)."""
    def field(r, current):
        return float(lambertw(BETA * current / (2 * math.pi * r * SIGMA0)).real) / BETA

    def voltage(current):
        return quad(field, A, B, args=(current,), epsabs=0, epsrel=1e-12)[0]

    linear = 2 * math.pi * SIGMA0 / math.log(B / A) * V_NL
    current = brentq(lambda i: voltage(i) - V_NL, linear, 100 * linear, xtol=1e-30, rtol=1e-13)
    return current, field(A, current)


def test_field_dependent_conductivity_against_lambert_w():
    material = Material("graded", 2.3, None, conductivity=SIGMA0, conductivity_beta=BETA)
    result = analyse(coax_case("coaxial.geo", {"insulation": material}, {"lc": 0.1}, voltage=V_NL,
                               analysis=AnalysisSettings(kind="dc", tolerance=1e-10)))
    dc = result.conduction
    current, e_a = field_dependent_reference()
    assert dc.nonlinear and 3 <= dc.iterations <= 60 and dc.last_change <= 1e-10
    assert dc.currents[0] == pytest.approx(current, rel=1e-5)
    assert dc.regions["insulation"].peak_E == pytest.approx(e_a, rel=5e-3)
    assert dc.conductance is None  # no conductance matrix for a nonlinear material
    # the field-dependent material flattens the stress: the inner field is below the electrostatic one
    assert dc.regions["insulation"].ratio_to_electrostatic < 0.95


def test_a_field_factor_that_would_overflow_is_a_clear_error():
    """beta |E| past exp()'s range (the largest allowed beta, 10 mm/kV, at the 91 kV/mm of the 1/3 mm coax at
    100 kV, from E(a) = V / (a ln(b/a)): Pozar, Table 2.1, from memory) is refused, naming the material."""
    from fieldsection.errors import MaterialError

    material = Material("steep", 2.3, None, conductivity=1e-16, conductivity_beta=1e-5)
    with pytest.raises(MaterialError, match=r"material 'steep': the field factor exp\(beta \|E\|\) of its "
                                            r"conductivity overflows at \|E\| = (8\d|9[01])(\.\d+)? kV/mm \(beta = 10 mm/kV\)"):
        analyse(coax_case("coaxial.geo", {"insulation": material}, {"lc": 0.5}, voltage=1e5))


def test_picard_with_beta_zero_reproduces_the_linear_closed_form():
    sigma = 2e-13
    result = analyse(coax_case("coaxial.geo", {"insulation": Material("x", 2.3, None, conductivity=sigma)},
                               {"lc": 0.2}))
    linear = result.conduction
    forced = analyse_dc(result.case, result.problem, result.fields.E_magnitude, result.solution.potential,
                        iterate=True)
    assert forced.nonlinear and forced.iterations == 2 and forced.last_change < 1e-12
    g = 2 * math.pi * sigma / math.log(B / A)  # Pozar, Table 2.1 (from memory)
    assert forced.currents[0] == pytest.approx(g * 1000.0, rel=1e-4)
    assert forced.currents[0] == pytest.approx(linear.currents[0], rel=1e-12)
    assert np.allclose(forced.potential, linear.potential, rtol=0, atol=1e-9 * 1000.0)


def test_temperature_raises_the_conductivity_by_exp_alpha_dt():
    # sigma0 exp(alpha (T - T_ref)) (Jeroense & Morshuis 1998, the form; from memory): a uniform 30 K rise
    # multiplies the leakage current by exp(30 alpha) exactly
    from fieldsection.analysis import TemperatureProfile
    material = Material("x", 2.3, None, conductivity=1e-15, conductivity_alpha=0.05)
    base = analyse(coax_case("coaxial.geo", {"insulation": material}, {"lc": 0.3}))
    hot = analyse(coax_case("coaxial.geo", {"insulation": material}, {"lc": 0.3},
                            analysis=AnalysisSettings(kind="dc", temperatures={"insulation": TemperatureProfile(50.0)})))
    assert hot.conduction.currents[0] / base.conduction.currents[0] == pytest.approx(math.exp(0.05 * 30), rel=1e-10)


def test_radial_temperature_profile_in_a_cable():
    # a hot conductor: T falls from 70 degC at r = a to 40 degC at r = b, linear in r. sigma rises inward by
    # exp(alpha dT): the DC stress moves outwards ("stress inversion", the HVDC cable effect). Reference:
    # the same current through every radius, E(r) = I / (2 pi r sigma(r)), V = integral of E dr (quad).
    from fieldsection.analysis import TemperatureProfile
    alpha = 0.08
    material = Material("x", 2.3, None, conductivity=1e-15, conductivity_alpha=alpha)
    profile = TemperatureProfile(70.0, 40.0, (0.0, 0.0), (B, 0.0), "radius", A)
    result = analyse(coax_case("coaxial.geo", {"insulation": material}, {"lc": 0.1},
                               analysis=AnalysisSettings(kind="dc", temperatures={"insulation": profile})))

    def sigma(r):
        return 1e-15 * math.exp(alpha * (70.0 + (r - A) / (B - A) * (40.0 - 70.0) - 20.0))

    resistance = quad(lambda r: 1 / (2 * math.pi * r * sigma(r)), A, B, epsrel=1e-12)[0]
    current = 1000.0 / resistance
    assert result.conduction.currents[0] == pytest.approx(current, rel=1e-3)
    e_outer = current / (2 * math.pi * B * sigma(B))
    assert result.conduction.regions["insulation"].peak_E == pytest.approx(e_outer, rel=2e-2)
    assert e_outer > current / (2 * math.pi * A * sigma(A))  # the peak sits at the cold outer surface


# ---------------------------------------------------------------- bad input: exit 2, one line, no report folder
from test_bad_input import PLATES_CASE, run_expecting_error, write_case  # noqa: E402

DC_PLATES = PLATES_CASE.replace('gap = "PTFE"', 'gap = "mine"\n[materials.mine]\nrelative_permittivity = 2.1\n'
                                'dielectric_strength_kV_per_mm = 20\nconductivity = "1e-15 S/m"') \
    + '\n[analysis]\nkind = "dc"\n'


def test_the_dc_base_case_runs(tmp_path, capsys):
    # guards the error tests below, each of which changes one thing in this case
    from fieldsection.cli import main
    reports = tmp_path / "reports"
    assert main(["run", str(write_case(tmp_path, DC_PLATES)), "--reports", str(reports)]) == 0
    out = capsys.readouterr().out
    assert "analysis: DC steady conduction (linear)" in out and "leakage current out of top" in out
    import json
    (folder,) = reports.iterdir()
    results = json.loads((folder / "results.json").read_text())
    assert results["analysis"]["kind"] == "dc"
    assert (folder / "dc_field.png").is_file() and (folder / "dc_loss.png").is_file()
    import meshio
    grid = meshio.read(folder / "analysis_fields.vtk")
    assert np.allclose(grid.cell_data["E_dc_magnitude_peak"][0], 1e6, rtol=1e-9)  # 1 kV over 1 mm, uniform
    assert "Analysis: DC steady conduction" in (folder / "report.html").read_text()
    # 1 kV over 1 mm of 1e-15 S/m: J = 1e-9 A/m^2, times the 10 mm width: 1e-11 A/m (Ohm's law)
    assert results["analysis"]["leakage_current_A_per_m"]["top"] == pytest.approx(1e-11, rel=1e-9)


@pytest.mark.parametrize(
    "old, new, expected",
    [
        ('kind = "dc"', 'kind = "transient"', r"analysis\.kind = 'transient': use one of 'electrostatic', 'dc', 'ac'"),
        ('kind = "dc"', 'kind = 3', r"analysis\.kind = 3: use one of"),
        ('kind = "dc"', 'kind = "dc"\nspeed = 1', r"\[analysis\]: unknown key 'speed'; allowed keys:"),
        ('kind = "dc"', 'kind = "dc"\nfrequency = "50 Hz"', r"analysis\.frequency / analysis\.phases_deg apply to kind = \"ac\" only"),
        ('kind = "dc"', 'kind = "dc"\ntolerance = "tight"', r"analysis\.tolerance = 'tight': a relative change"),
        ('kind = "dc"', 'kind = "dc"\nmax_iterations = 2.5', r"analysis\.max_iterations = 2\.5: a whole number"),
        ('kind = "dc"', 'kind = "dc"\n[analysis.temperature_degC]\nslab = 60',
         r"analysis\.temperature_degC\.slab: no region 'slab'; regions: gap"),
        ('kind = "dc"', 'kind = "dc"\n[analysis.temperature_degC]\ngap = "hot"',
         r"analysis\.temperature_degC\.gap = 'hot': must be a finite number"),
        ('kind = "dc"', 'kind = "dc"\n[analysis.temperature_degC]\ngap = { start = ["0 mm", "0 mm"], at_start = 60 }',
         r"analysis\.temperature_degC\.gap: a linear temperature profile needs end, at_end"),
        ('kind = "dc"', 'kind = "dc"\n[analysis.temperature_degC]\ngap = { start = ["0 mm", "0 mm"], '
         'end = "1 mm", at_start = 60, at_end = 50 }', r"analysis\.temperature_degC\.gap\.end = '1 mm': give a point"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 V/m"',
         r"materials\.mine\.conductivity: '1e-15 V/m' is not a conductivity"),
        ('conductivity = "1e-15 S/m"', 'conductivity = [1e-15]', r"materials\.mine\.conductivity: expected a number"),
        ('conductivity = "1e-15 S/m"', 'conductivity = -1e-15', r"material 'mine': conductivity -1e-15 S/m must be positive"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\nconductivity_alpha_per_K = "0.1"',
         r"materials\.mine\.conductivity_alpha_per_K = '0\.1': must be a plain number"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\nconductivity_beta = "0.1 kV"',
         r"materials\.mine\.conductivity_beta: '0\.1 kV' is not a inverse field"),
        ('conductivity = "1e-15 S/m"', 'conductivity_beta = "0.1 mm/kV"',
         r"materials\.mine: conductivity_alpha_per_K / conductivity_beta need the conductivity itself"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\ndc_strength_kV_per_mm = "high"',
         r"materials\.mine\.dc_strength_kV_per_mm = 'high': must be a plain number"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\ndc_strength = "-5 kV/mm"',
         r"material 'mine': DC strength -5000000\.0 V/m must be positive"),
        ('gap = "mine"', 'gap = "PTFE"', r"regions\.gap: material 'PTFE' has no conductivity, which the DC analysis needs"),
        # a bare number is in m/V: 1 m/V is 1e6 mm/kV, where insulation has 0.01-0.1 (common practice, no source)
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\nconductivity_beta = 1',
         r"material 'mine': conductivity_beta 1 m/V is beyond 1e-05 m/V \(10 mm/kV; .*write it with its unit, "
         r"e\.g\. '0\.03 mm/kV'"),
        ('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\nconductivity_alpha_per_K = 5',
         r"material 'mine': conductivity_alpha_per_K 5 is beyond 1 per K"),
    ],
)
def test_dc_case_file_errors(tmp_path, capsys, old, new, expected):
    assert old in DC_PLATES
    case = write_case(tmp_path, DC_PLATES.replace(old, new))
    message = run_expecting_error(tmp_path, capsys, case)
    assert re.search(expected, message), message


def test_iterations_that_do_not_converge_are_an_error(tmp_path, capsys):
    case = DC_PLATES.replace('conductivity = "1e-15 S/m"', 'conductivity = "1e-15 S/m"\nconductivity_beta = "0.1 mm/kV"')
    message = run_expecting_error(tmp_path, capsys, write_case(tmp_path, case + "max_iterations = 1\n"))
    assert re.search(r"the DC conduction iterations \(sigma depends on the field\) did not converge: relative change "
                     r"inf after 1 solves, wanted 1e-08; raise analysis\.max_iterations", message), message


# ---------------------------------------------------------------- the shipped DC examples, on their first mesh
def shipped(name):
    from dataclasses import replace

    from fieldsection.case import load_case
    return analyse(replace(load_case(GEOMETRIES / name), refinement=SINGLE_MESH))


def test_shipped_hvdc_cable_against_the_radial_reference():
    # sigma = sigma0 exp(alpha (T(r) - 20) + beta E) with T linear in r from 70 degC (r = 25 mm) to 50 degC
    # (r = 50 mm): the current per metre is the same through every radius, so
    # beta E(r) = W(beta I / (2 pi r sigma0 exp(alpha (T(r) - 20)))) and V = integral of E dr (scipy's lambertw,
    # quad, brentq: a reference independent of the FE code); the form and values as in the case file
    result = shipped("hvdc_cable_dc.toml")
    dc = result.conduction
    a, b, v, s0, alpha, beta = 25e-3, 50e-3, 320e3, 1e-16, 0.084, 0.0645e-6

    def base(r):
        return s0 * math.exp(alpha * (70.0 + (r - a) / (b - a) * (50.0 - 70.0) - 20.0))

    def field(r, current):
        return float(lambertw(beta * current / (2 * math.pi * r * base(r))).real) / beta

    current = brentq(lambda i: quad(field, a, b, args=(i,), epsrel=1e-12)[0] - v, 1e-12, 1e-4, xtol=1e-30, rtol=1e-13)
    assert dc.currents[0] == pytest.approx(current, rel=1e-4)
    assert dc.nonlinear and dc.last_change <= 1e-8
    # stress inversion: the peak sits at the cool outer surface and is below the electrostatic one
    assert field(b, current) > field(a, current)
    assert dc.regions["insulation"].peak_E == pytest.approx(field(b, current), rel=1e-2)
    assert dc.regions["insulation"].peak_E < dc.regions["insulation"].electrostatic_peak_E


def test_shipped_busbar_under_dc():
    # between the bars the film (1e-16 S/m) is in series with nothing but itself: 3 kV across 0.3 mm,
    # 10 kV/mm (elementary), as in the electrostatic solution; where the film meets the housing
    # (1e-14 S/m) the two see different eps/sigma and a free interface charge builds up
    result = shipped("busbar_laminated_dc.toml")
    dc = result.conduction
    section = result.problem.section
    film = section.elements_of("film")
    middle = np.median(dc.E_magnitude[film].max(axis=1))
    assert middle == pytest.approx(10e6, rel=1e-2)
    faces = {frozenset((f.region_a, f.region_b)): f for f in dc.interfaces}
    assert abs(faces[frozenset(("film", "housing"))].free_charge) > 0
    assert dc.currents[0] == pytest.approx(-dc.currents[1], rel=1e-3)  # what leaves one bar enters the other
    assert any(w.startswith("gas regions air, air_pocket are taken as ohmic") for w in dc.warnings)


# ---------------------------------------------------------------- bodies of revolution and open space
def sphere(electrodes, outer="grounded", parameters=None, analysis=DC):
    return analyse(Case("sphere", ScriptGeometry(GEOMETRIES / "sphere.geo", parameters or {}, 1e-3),
                        {"gas": Material("m", 2.0, 10e6, conductivity=1e-12)}, electrodes, outer_boundary=outer,
                        model="axisymmetric", mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH,
                        analysis=analysis))


def test_concentric_spheres_leakage(tmp_path):
    # G = 4 pi sigma a b / (b - a), the spherical capacitor with eps -> sigma (elementary)
    import json

    from fieldsection.report import write_report
    a, b = 1e-3, 3e-3
    result = sphere({"sphere": 1000.0, "shell": 0.0}, parameters={"shell": 1})
    dc = result.conduction
    g = 4 * math.pi * 1e-12 * a * b / (b - a)
    assert dc.currents[0] == pytest.approx(g * 1000.0, rel=1e-3)
    # a body of revolution: whole-body keys (no "_per_m"), except the material's conductivity in S/m
    folder = write_report(result, tmp_path, with_figures=False)
    block = json.loads((folder / "results.json").read_text())["analysis"]
    assert block["leakage_current_A"]["sphere"] == pytest.approx(g * 1000.0, rel=1e-3)
    assert block["conductance_matrix_S"][0][0] == pytest.approx(g, rel=1e-3)
    assert block["materials"][0]["conductivity_S_per_m"] == 1e-12
    assert "leakage current (A)" in (folder / "report.html").read_text()


def test_sphere_in_open_conducting_space():
    # a sphere in an unbounded medium: G = 4 pi sigma a to infinity (elementary); solved through the Kelvin
    # image of the exterior, which takes the medium's conductivity
    a = 1e-3
    dc = sphere({"sphere": 1000.0}, outer="open", parameters={"space_radius": 3.0}).conduction
    assert dc.fixed_names == ("sphere", "infinity")
    assert dc.currents[0] == pytest.approx(4 * math.pi * 1e-12 * a * 1000.0, rel=1e-3)


def test_polarity_reversal_in_two_layers():
    # right after +V -> -V (faster than eps/sigma) the DC field is joined by the capacitive field of the -2V
    # step: E_i = V/(sigma_i sum d_k/sigma_k) - 2 V/(eps_i sum d_k/eps_k) in each layer (superposition of the
    # resistive and capacitive distributions; the usual HVDC polarity-reversal estimate, e.g. Jeroense &
    # Morshuis 1998, from memory). Uniform fields: exact on any mesh.
    d1, d2, e1, e2, s1, s2 = 1e-3, 2e-3, 2.0, 5.0, 3e-14, 1e-15
    dc = plates([("lower", 1.0), ("upper", 2.0)],
                {"lower": Material("a", e1, None, conductivity=s1, dc_strength=50e6),
                 "upper": Material("b", e2, None, conductivity=s2)}).conduction
    V = 1000.0
    for name, e, s in (("lower", e1, s1), ("upper", e2, s2)):
        expected = abs(V / (s * (d1 / s1 + d2 / s2)) - 2 * V / (e * (d1 / e1 + d2 / e2)))
        assert dc.regions[name].reversal_peak_E == pytest.approx(expected, rel=1e-9)
    assert dc.regions["lower"].reversal_utilisation == pytest.approx(dc.regions["lower"].reversal_peak_E / 50e6)


def test_floating_shell_takes_the_conductance_divider_potential():
    # a floating metal shell between coaxial conductors carries no net current in the DC steady state: its
    # potential is V G1 / (G1 + G2) with G_i = 2 pi sigma_i / ln(r_out_i / r_in_i) (elementary), whatever
    # charge the electrostatic case gave it
    r0, r1, r2, r3, s1, s2 = 1e-3, 1.8e-3, 1.9e-3, 3e-3, 1e-13, 5e-13
    case = Case("shell", ScriptGeometry(GEOMETRIES / "coaxial_floating_shell.geo", {}, 1e-3),
                {"inner_gap": Material("a", 2.0, None, conductivity=s1),
                 "outer_gap": Material("b", 4.0, None, conductivity=s2)}, {"inner": 1000.0, "outer": 0.0},
                floating={"shell": 2e-9}, mesh=MeshSettings(element_order=2), refinement=SINGLE_MESH, analysis=DC)
    result = analyse(case)
    g1, g2 = s1 / math.log(r1 / r0), s2 / math.log(r3 / r2)
    shell = result.problem.floating[0]
    assert result.conduction.potential[shell.dofs[0]] == pytest.approx(1000.0 * g1 / (g1 + g2), rel=1e-4)
    assert result.conduction.currents[[c.name for c in result.problem.conductors].index("shell")] == \
        pytest.approx(0.0, abs=1e-9 * result.conduction.currents[0])


def test_linear_temperature_profile_across_a_slab():
    # T rises linearly from 20 degC at the bottom plate to 50 degC at the top one (1 mm): sigma(y) =
    # sigma0 exp(alpha (T(y) - 20)); the current density is the same at every height, J = V / integral dy/sigma,
    # integral = (1 - exp(-alpha k d)) / (sigma0 alpha k) with k = 30 K/mm (elementary calculus)
    from fieldsection.analysis import TemperatureProfile
    alpha, s0, d, k = 0.05, 1e-15, 1e-3, 30.0 / 1e-3
    profile = TemperatureProfile(20.0, 50.0, (0.0, 0.0), (0.0, 1e-3), "line")
    dc = plates([("gap", 1.0)], {"gap": Material("x", 2.0, None, conductivity=s0, conductivity_alpha=alpha)},
                analysis=AnalysisSettings(kind="dc", temperatures={"gap": profile}), order=2).conduction
    j = 1000.0 / ((1 - math.exp(-alpha * k * d)) / (s0 * alpha * k))
    assert dc.currents[[n for n in dc.conductor_names].index("top")] == pytest.approx(j * W, rel=1e-4)
    # at the cool bottom plate; P2 on 0.25 mm elements follows the exp(-alpha k y) field to a few 1e-3
    assert dc.regions["gap"].peak_E == pytest.approx(j / s0, rel=1e-2)
    assert "linear along the line" in dc.temperatures["gap"]


def test_material_listing_shows_conductivities(capsys):
    from fieldsection.cli import main
    assert main(["materials"]) == 0
    out = capsys.readouterr().out
    assert "sigma (S/m)" in out.splitlines()[0]
    assert re.search(r"^XLPE .* 1e-16$", out, re.MULTILINE)


def test_temperature_profile_checks_its_values_in_python():
    from fieldsection.analysis import TemperatureProfile
    from fieldsection.errors import CaseFileError
    with pytest.raises(CaseFileError, match=r"along = 'diagonal', use one of 'line', 'radius'"):
        TemperatureProfile(20.0, 30.0, (0.0, 0.0), (1.0, 0.0), "diagonal")
    with pytest.raises(CaseFileError, match=r"its end must lie away from its start"):
        TemperatureProfile(20.0, 30.0, (0.0, 0.0), (0.0, 0.0))
    with pytest.raises(CaseFileError, match=r"must be finite numbers"):
        TemperatureProfile(float("nan"))


def test_dc_hotspots_against_the_dc_strength():
    # two-layer coax under DC (closed form above): the inner layer's peak E = V/(sigma1 r1 R) at r = 1 mm;
    # with a DC strength just below twice it, the inner layer is flagged at >= 50 %, the outer one is not
    V = 1000.0
    resistance = math.log(R2 / R1) / S1 + math.log(R3 / R2) / S2
    e_inner = V / (S1 * R1 * resistance)
    regions = {"inner_layer": Material("inner", ER1, None, conductivity=S1, dc_strength=1.9 * e_inner),
               "outer_layer": Material("outer", ER2, None, conductivity=S2, dc_strength=1.9 * e_inner)}
    dc = analyse(coax_case("coaxial_two_layer.geo", regions, {"lc": 0.2})).conduction
    assert {h.region for h in dc.screening.hotspots} == {"inner_layer"}
    assert math.hypot(*dc.regions["inner_layer"].location) == pytest.approx(R1, rel=1e-6)
