"""Bodies of revolution (r-z models), against closed forms.

Sources: Gauss's law for spheres (e.g. Griffiths, Introduction to Electrodynamics, 4th ed.,
section 2.5 and problem 2.43; Kuffel, Zaengl & Kuffel, High Voltage Engineering, 2000, ch. 4 on
concentric spheres; from memory):
- isolated sphere of radius R: C = 4 pi eps0 R, surface field V / R;
- concentric spheres a < b: C = 4 pi eps a b / (b - a), field on the inner sphere V b / (a (b - a)).
The isolated sphere uses the open-space boundary (Kelvin image of the exterior, potential 0 at
infinity); the result must not depend on where the open circle is drawn.
"""

import json
import textwrap

import numpy as np
import pytest
from scipy.constants import epsilon_0

from conftest import GEOMETRIES
from fieldsection import Case, FieldSectionError, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.cli import main
from fieldsection.case import SINGLE_MESH

GAS = {"gas": Material("vacuum", 1.0, None)}


def sphere_case(**kwargs):
    parameters = kwargs.pop("parameters", {})
    return Case("sphere", ScriptGeometry(GEOMETRIES / "sphere.geo", parameters, 1e-3), GAS, model="axisymmetric",
                mesh=MeshSettings(element_order=2), **kwargs, refinement=SINGLE_MESH)


@pytest.mark.parametrize("space_radius", [2.0, 5.0])
def test_isolated_sphere_in_open_space(space_radius):
    result = analyse(sphere_case(parameters={"space_radius": space_radius}, electrodes={"sphere": 1000.0},
                                 outer_boundary="open"))
    cap = result.capacitance
    assert cap.names == ("sphere", "infinity")
    c_exact = 4 * np.pi * epsilon_0 * 1e-3
    assert cap.two_level.from_energy == pytest.approx(c_exact, rel=1e-3)
    assert cap.charges_from_reaction[0] == pytest.approx(c_exact * 1000.0, rel=1e-3)
    assert result.hotspots.region_peaks[0].peak_E == pytest.approx(1000.0 / 1e-3, rel=1e-2)


def test_concentric_spheres():
    a, b = 1e-3, 3e-3
    result = analyse(sphere_case(parameters={"shell": 1}, electrodes={"sphere": 1000.0, "shell": 0.0}))
    c_exact = 4 * np.pi * epsilon_0 * a * b / (b - a)
    assert result.capacitance.two_level.from_energy == pytest.approx(c_exact, rel=1e-3)
    assert result.capacitance.two_level.from_flux == pytest.approx(c_exact, rel=5e-3)
    peak = result.hotspots.region_peaks[0]
    assert peak.peak_E == pytest.approx(1000.0 * b / (a * (b - a)), rel=1e-2)
    assert np.hypot(*peak.location) == pytest.approx(a, rel=1e-3)


def test_point_at_negative_radius_is_refused(tmp_path):
    shifted = tmp_path / "shifted.geo"
    shifted.write_text((GEOMETRIES / "coaxial.geo").read_text())  # centred on x = 0: half of it at r < 0
    case = Case("bad", ScriptGeometry(shifted, {}, 1e-3), {"insulation": Material("m", 2.0, None)},
                {"inner": 1.0, "outer": 0.0}, model="axisymmetric", refinement=SINGLE_MESH)
    with pytest.raises(FieldSectionError, match="lies at r < 0"):
        analyse(case)


def test_case_file_and_report_for_a_body_of_revolution(tmp_path):
    case = tmp_path / "sphere.toml"
    case.write_text(textwrap.dedent(f"""
        [geometry]
        script = "{GEOMETRIES / 'sphere.geo'}"
        length_unit = "mm"
        model = "axisymmetric"
        [regions]
        gas = "SF6"
        [electrodes]
        sphere = "10 kV"
        [boundary]
        outer = "open"
    """))
    assert main(["run", str(case), "--reports", str(tmp_path / "reports"), "--quiet", "--no-figures"]) == 0
    results = json.loads((tmp_path / "reports" / "sphere" / "results.json").read_text())
    assert results["case"]["model"] == "axisymmetric"
    c_pf = results["capacitance"]["two_level"]["from_energy_pF"]  # whole body: pF, not pF/m
    assert c_pf == pytest.approx(4 * np.pi * epsilon_0 * 1.002 * 1e-3 * 1e12, rel=1e-3)
    assert "stored_energy_J" in results and "peak_free_surface_charge_uC_per_m2" in results["electrodes"][0]
    infinity = results["electrodes"][1]
    assert infinity["name"] == "infinity" and infinity["charge_from_surface_flux_C"] is None  # no surface
    html = (tmp_path / "reports" / "sphere" / "report.html").read_text()
    assert "of the body of revolution" in html and "pF/m" not in html


def test_charged_floating_sphere_in_open_space():
    # a sphere carrying q alone in space sits at q / (4 pi eps0 R) (Gauss's law; same sources)
    q = 1e-12
    result = analyse(sphere_case(electrodes={}, floating={"sphere": q}, outer_boundary="open"))
    (potential,) = result.solution.floating_potentials
    assert potential == pytest.approx(q / (4 * np.pi * epsilon_0 * 1e-3), rel=1e-3)


def test_open_space_off_the_axis_is_refused(tmp_path):
    ring = tmp_path / "ring.geo"
    ring.write_text(textwrap.dedent("""
        SetFactory("OpenCASCADE");
        Disk(1) = {5, 0, 0, 2};
        Disk(2) = {5, 0, 0, 0.5};
        BooleanDifference(3) = { Surface{1}; Delete; }{ Surface{2}; Delete; };
        Physical Surface("gas") = {3};
        Physical Curve("ring") = {2};
    """))
    case = Case("ring", ScriptGeometry(ring, {}, 1e-3), GAS, {"ring": 1.0}, outer_boundary="open", model="axisymmetric", refinement=SINGLE_MESH)
    with pytest.raises(FieldSectionError, match="must be an arc centred on the axis x = 0"):
        analyse(case)


def test_electrode_on_the_axis_is_refused(tmp_path):
    needle = tmp_path / "needle.geo"
    needle.write_text(textwrap.dedent("""
        SetFactory("OpenCASCADE");
        Rectangle(1) = {0, -5, 0, 5, 10};
        Point(10) = {0, -1, 0}; Point(11) = {0, 1, 0};
        Line(10) = {10, 11};
        BooleanFragments{ Surface{1}; Delete; }{ Curve{10}; Delete; }
        Physical Surface("gas") = {1};
        e = 1e-6;
        Physical Curve("needle") = Curve In BoundingBox{-e, -1 - e, -e, e, 1 + e, e};
    """))
    case = Case("needle", ScriptGeometry(needle, {}, 1e-3), GAS, {"needle": 1.0}, model="axisymmetric", refinement=SINGLE_MESH)
    with pytest.raises(FieldSectionError, match="electrode 'needle' lies on the axis of revolution"):
        analyse(case)
