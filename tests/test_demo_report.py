"""The demo case end to end through the command line, and the report's atomic writing.

Physical checks on the demo (a laminated busbar of our own scenario):
- reciprocity: the Maxwell capacitance matrix is symmetric (Green's reciprocity theorem, e.g.
  Jackson, Classical Electrodynamics, 3rd ed., problem 1.12; from memory);
- an enclosed system: each row of the Maxwell matrix sums to zero, all field lines end on the
  conductors (Gauss's law);
- the mutual capacitance of the two bars exceeds the ideal parallel-plate value eps0 eps_r w / d
  (fringing only adds capacitance) and stays within 10 % of it for w/d = 133 (Palmer 1937 puts the
  fringe term at (eps/pi)(1 + ln(2 pi w/d)) per plate pair, a few per cent here; from memory).
"""

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy.constants import epsilon_0

import fieldsection.report as report_module
from fieldsection import analyse, load_case
from fieldsection.case import SINGLE_MESH
from fieldsection.cli import main

DEMO = Path(__file__).resolve().parent.parent / "geometries" / "busbar_laminated.toml"


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    reports = tmp_path_factory.mktemp("reports")
    assert main(["run", str(DEMO), "--reports", str(reports), "--quiet"]) == 0
    return reports / "busbar_laminated"


def test_report_folder_holds_every_file(demo_report):
    expected = {"results.json", "report.html", "fields.vtk", "regions.png", "potential.png", "field.png",
                "field_detail.png", "bound_charge.png"}
    assert expected <= {p.name for p in demo_report.iterdir()}
    assert not [p for p in demo_report.parent.iterdir() if p.name.startswith(".")], "staging folder left behind"
    html = (demo_report / "report.html").read_text()
    assert "not a certification" in html and "partial-discharge tests" in html


def test_capacitance_matrix_is_reciprocal_and_balanced(demo_report):
    results = json.loads((demo_report / "results.json").read_text())
    cap = results["capacitance"]
    C = np.array(cap["maxwell_matrix_pF_per_m"])
    assert cap["conductors"] == ["bar_plus", "bar_minus", "outer boundary"]
    assert np.allclose(C, C.T, rtol=0, atol=1e-9 * np.abs(C).max())
    assert np.allclose(C.sum(axis=1), 0.0, atol=1e-9 * np.abs(C).max())
    assert cap["relative_difference_charge_vs_energy"] < 1e-9
    ideal = epsilon_0 * 3.4 * 40e-3 / 0.3e-3 * 1e12  # pF/m; polyimide eps_r 3.4, 40 mm bars, 0.3 mm film
    mutual = -C[0, 1]
    assert ideal < mutual < 1.1 * ideal


def test_demo_flags_the_air_pocket(demo_report):
    results = json.loads((demo_report / "results.json").read_text())
    top = results["hotspots"][0]
    assert top["region"] == "air_pocket" and top["nearest_electrode"] == "bar_plus"
    share = top["fraction_of_strength"] if top["status"] != "singular" else top["mesh_dependent_fraction_of_strength"]
    assert share > 1.0  # above the strength of air: a partial-discharge site
    for body in results["bound_charge"]["bodies"]:
        assert body["check_passed"], body


def test_vtk_file_reads_back(demo_report):
    import meshio

    grid = meshio.read(demo_report / "fields.vtk")
    n_cells = len(grid.cells[0].data)
    assert grid.point_data["V"].shape == (len(grid.points),)
    assert grid.cell_data["E"][0].shape == (n_cells, 3)
    assert grid.point_data["V"].max() == pytest.approx(1500.0) and grid.point_data["V"].min() == pytest.approx(-1500.0)


def test_failed_report_leaves_the_previous_one_untouched(tmp_path, monkeypatch):
    result = analyse(replace(load_case(DEMO), refinement=SINGLE_MESH))  # the writing is under test: one mesh
    folder = report_module.write_report(result, tmp_path, with_figures=False)
    before = (folder / "results.json").read_text()

    def broken(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr("fieldsection.vtk_export.write_vtk", broken)
    from fieldsection.errors import ReportError

    with pytest.raises(ReportError, match="disk full.*no report was written"):
        report_module.write_report(result, tmp_path, with_figures=False)
    assert (folder / "results.json").read_text() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["busbar_laminated"]


def test_every_peak_field_carries_a_status(demo_report):
    results = json.loads((demo_report / "results.json").read_text())
    peaks = results["peak_fields"] + results["hotspots"] + [t["gas"] for t in results["triple_points"]]
    assert peaks
    for peak in peaks:
        assert peak["status"] in ("converged", "singular", "not converged", "single mesh"), peak
        if peak["status"] == "singular":  # never presented as a peak field
            assert peak["peak_E_kV_per_mm"] is None and peak["mesh_dependent_E_kV_per_mm"] > 0
            assert peak["measured_growth_exponent"] < 0
        else:
            assert peak["peak_E_kV_per_mm"] > 0
    # the bars' square edges in the film are sharp conductor corners: singular by the corner theory
    # (|E| ~ r^(pi/beta - 1); Rothwell & Cloud, Electromagnetics, 2001, section 3.2.9)
    film = next(p for p in results["peak_fields"] if p["region"] == "film")
    assert film["status"] == "singular" and film["corner_theory_exponent"] < -0.05
    passes = results["refinement"]["passes"]
    assert len(passes) >= 2 and passes[-1]["degrees_of_freedom"] > passes[0]["degrees_of_freedom"]
    html = (demo_report / "report.html").read_text()
    assert "Mesh refinement" in html and "singular" in html
