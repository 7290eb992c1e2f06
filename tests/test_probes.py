"""Probe lines: V, |E| and the share of dielectric strength along a line named in the case file.

Physical check: between two parallel plates with an insulated side wall the field is uniform,
E = V / d, and the potential rises linearly across the gap (the ideal parallel-plate capacitor;
any electrostatics text, e.g. Jackson, Classical Electrodynamics, 3rd ed., section 1.11; from memory).
Here 1 kV across 1 mm: 1 kV/mm, and V(y) = 1 kV * y / 1 mm.
"""

from __future__ import annotations

import csv
import re

import numpy as np
import pytest

from fieldsection.cli import main
from fieldsection.materials import shipped_materials
from test_bad_input import PLATES_CASE, run_expecting_error, write_case

PROBE = """
[refinement]
adaptive = false

[probes.across_gap]
from = ["5 mm", "-0.5 mm"]
to = ["5 mm", "1.5 mm"]
points = 81

[probes.along_gap]
from = ["0.5 mm", "0.25 mm"]
to = ["9.5 mm", "0.25 mm"]

[probes.side_wall]
curve = "right"
side = "gap"
points = 11

[probes.top_plate]
curve = "top"
"""


@pytest.fixture(scope="module")
def plates_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("plates")
    reports = folder / "reports"
    assert main(["run", str(write_case(folder, PLATES_CASE + PROBE)), "--reports", str(reports), "--quiet",
                 "--no-figures"]) == 0
    return reports / "plates"


def _rows(path):
    with path.open(newline="") as handle:
        return list(csv.DictReader(handle))


def test_uniform_field_along_a_line_across_the_plates(plates_report):
    rows = _rows(plates_report / "probe_across_gap.csv")
    assert len(rows) == 81
    assert list(rows[0]) == ["distance_mm", "x_mm", "y_mm", "region", "potential_V", "E_kV_per_mm",
                             "share_of_strength_percent"]
    inside = [r for r in rows if r["region"] == "gap"]
    outside = [r for r in rows if r["region"] == ""]
    # the line starts and ends 0.5 mm outside the 1 mm gap: about a quarter of it on each side
    assert 36 <= len(inside) <= 42 and len(inside) + len(outside) == 81
    assert all(r["potential_V"] == "" and r["E_kV_per_mm"] == "" for r in outside)
    y = np.array([float(r["y_mm"]) for r in inside])
    V = np.array([float(r["potential_V"]) for r in inside])
    E = np.array([float(r["E_kV_per_mm"]) for r in inside])
    # closed form (module docstring): V = 1000 V * y / 1 mm, |E| = 1 kV/mm; P2 is exact for a linear potential
    assert np.allclose(V, 1000.0 * y, rtol=0, atol=1e-6)
    assert np.allclose(E, 1.0, rtol=1e-6)
    strength = shipped_materials()["PTFE"].dielectric_strength * 1e-6  # kV/mm
    share = np.array([float(r["share_of_strength_percent"]) for r in inside])
    assert np.allclose(share, 100.0 / strength, rtol=1e-6)


def test_probe_lines_in_results_and_report(plates_report):
    import json

    results = json.loads((plates_report / "results.json").read_text())
    lines = {p["name"]: p for p in results["probe_lines"]}
    assert list(lines) == ["across_gap", "along_gap", "side_wall", "top_plate"]
    along = lines["along_gap"]
    assert along["length_mm"] == pytest.approx(9.0) and along["points"] == 201
    assert along["points_inside_section"] == 201 and along["regions_crossed"] == ["gap"]
    assert along["largest_E_kV_per_mm"] == pytest.approx(1.0, rel=1e-6)
    assert along["figure_file"] is None  # --no-figures
    rows = _rows(plates_report / "probe_along_gap.csv")
    assert np.allclose([float(r["potential_V"]) for r in rows], 250.0, atol=1e-6)
    html = (plates_report / "report.html").read_text()
    assert 'href="probe_across_gap.csv"' in html and "Probe lines" in html


def test_probes_along_named_curves(plates_report):
    # the insulated side wall x = 10 mm runs from the bottom plate (0 V) to the top one: V rises linearly along it
    rows = _rows(plates_report / "probe_side_wall.csv")
    assert [r["region"] for r in rows] == ["gap"] * 11
    distance = np.array([float(r["distance_mm"]) for r in rows])
    assert distance[-1] == pytest.approx(1.0) and np.allclose([float(r["x_mm"]) for r in rows], 10.0)
    assert np.allclose([float(r["potential_V"]) for r in rows], 1000.0 * distance, atol=1e-6)
    assert np.allclose([float(r["E_kV_per_mm"]) for r in rows], 1.0, rtol=1e-6)
    # the top plate itself: at its potential, the field of the gap beside it
    rows = _rows(plates_report / "probe_top_plate.csv")
    assert float(rows[-1]["distance_mm"]) == pytest.approx(10.0)
    assert np.allclose([float(r["potential_V"]) for r in rows], 1000.0, atol=1e-6)
    assert np.allclose([float(r["E_kV_per_mm"]) for r in rows], 1.0, rtol=1e-6)


@pytest.mark.parametrize("table, expected", [
    ('[probes]\nacross = 3', r"probes\.across must be a table with 'from' and 'to'"),
    ('[probes.a]\nfrom = ["0 mm", "0 mm"]', r"probes\.a: missing 'to'"),
    ('[probes.a]\nfrom = ["0 mm"]\nto = ["1 mm", "1 mm"]', r"probes\.a\.from: expected two lengths"),
    ('[probes.a]\nfrom = ["0 mm", "1 kV"]\nto = ["1 mm", "1 mm"]', r"probes\.a\.from\[1\]"),
    ('[probes.a]\nfrom = ["1 mm", "1 mm"]\nto = ["1 mm", "1 mm"]', r"probes\.a: 'from' and 'to' are the same point"),
    ('[probes.a]\nfrom = ["0 mm", "0 mm"]\nto = ["1 mm", "1 mm"]\npoints = 1', r"probes\.a\.points: expected a whole"),
    ('[probes.a]\nfrom = ["0 mm", "0 mm"]\nto = ["1 mm", "1 mm"]\npoints = 2.5', r"probes\.a\.points"),
    ('[probes.a]\nfrom = ["0 mm", "0 mm"]\nto = ["1 mm", "1 mm"]\nstep = 2', r"probes\.a: unknown key 'step'"),
    ('probes = "across"', r"\[probes\] must be a table"),
    ('[probes.a]\ncurve = "top"\nfrom = ["0 mm", "0 mm"]', r"probes\.a: give either 'curve' or 'from' and 'to'"),
    ('[probes.a]\ncurve = 3', r"probes\.a\.curve: expected the name of a physical curve"),
    ('[probes.a]\ncurve = "middle"\n[refinement]\nadaptive = false',
     r"probes\.a\.curve: no physical curve 'middle' in the script; curves: bottom, right, top"),
    ('[probes.a]\ncurve = "top"\nside = "air"\n[refinement]\nadaptive = false',
     r"probes\.a\.side: no region 'air'; regions: gap"),
])
def test_bad_probe_input(tmp_path, capsys, table, expected):
    head, tail = (table, "") if table.startswith("probes =") else ("", table)
    case = write_case(tmp_path, head + "\n" + PLATES_CASE + "\n" + tail)
    message = run_expecting_error(tmp_path, capsys, case)
    assert re.search(expected, message), message


def test_probe_line_outside_the_section(tmp_path, capsys):
    far = '[probes.far]\nfrom = ["50 mm", "50 mm"]\nto = ["60 mm", "50 mm"]'
    case = write_case(tmp_path, PLATES_CASE + "\n[refinement]\nadaptive = false\n" + far)
    message = run_expecting_error(tmp_path, capsys, case)
    assert re.search(r"probes\.far: the line from \(50, 50\) mm to \(60, 50\) mm misses the drawn section", message)



