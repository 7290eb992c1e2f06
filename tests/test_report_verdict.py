"""The verdict at the top of report.html: each region's share of strength against the case's fraction, singular
peaks with their advised radius, Paschen margins, the capacitance matrix, the caution above the details; and any
result renders (missing values as dashes). Rendering only: the numbers come from one small solved case and are
then varied in the results dictionary."""

from __future__ import annotations

import copy
import json
import re

import pytest

from fieldsection.cli import main
from fieldsection.report import _render_html
from test_bad_input import PLATES_CASE, write_case


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    folder = tmp_path_factory.mktemp("verdict")
    case = write_case(folder, PLATES_CASE + "\n[refinement]\nadaptive = false\n")
    assert main(["run", str(case), "--reports", str(folder / "reports"), "--quiet", "--no-figures"]) == 0
    return json.loads((folder / "reports" / "plates" / "results.json").read_text())


def _verdict(results) -> str:
    html = _render_html(results, [])
    block = html[html.index('id="verdict"'):html.index('<div class="caution">')]
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", block))


def test_a_pass_states_the_share_and_the_matrix(results):
    text = _verdict(results)
    share = 100 * results["peak_fields"][0]["fraction_of_strength"]
    assert "PASS" in text and f"{share:.1f} %" in text and " pass " in text
    C = results["capacitance"]["maxwell_matrix_pF_per_m"]
    assert f"{C[0][0]:.5g}" in text and f"{C[0][1]:.5g}" in text and "pF/m" in text
    html = _render_html(results, [])
    assert html.index("not a certification") < html.index('id="verdict"') < html.index("<h2>Inputs")
    assert "partial-discharge tests are the designer's duty" in html


def test_a_share_at_the_fraction_fails(results):
    bad = copy.deepcopy(results)
    bad["peak_fields"][0]["fraction_of_strength"] = bad["case"]["hotspot_fraction"]
    text = _verdict(bad)
    assert "ATTENTION" in text and "1 region at or above 50 % of strength" in text and "FAIL" in text


def test_a_singular_peak_asks_for_a_radius(results):
    singular = copy.deepcopy(results)
    singular["peak_fields"][0].update(status="singular", peak_E_kV_per_mm=None, fraction_of_strength=None,
                                      mesh_dependent_fraction_of_strength=0.8, advised_edge_radius_mm=0.25)
    text = _verdict(singular)
    assert "singular: round this edge (radius ≥ 0.25 mm)" in text and "80.0 % (on this mesh)" in text
    assert "1 singular peak at a sharp edge" in text


def test_a_gas_region_shows_its_paschen_margin(results):
    gas = copy.deepcopy(results)
    gas["materials"][0]["kind"] = "gas"
    gas["gas_gap_screening"]["regions"] = [{"region": "gap", "material": "air", "start_mm": [0, 0],
                                            "ends_mm": [[0, 0], [0, 1]], "field_line_length_mm": 1.0,
                                            "voltage_across_V": 1000.0, "breakdown_voltage_V": 800.0,
                                            "inception_margin": 0.8}]
    text = _verdict(gas)
    assert "0.8" in text and "Paschen margin below 1" in text and "ATTENTION" in text


def test_any_result_renders(results):
    empty = copy.deepcopy(results)
    for peak in empty["peak_fields"]:
        for key in peak:
            if key not in ("region", "material", "status", "history_kV_per_mm", "local_element_size_mm"):
                peak[key] = None
    empty["capacitance"]["maxwell_matrix_pF_per_m"] = [[None, float("nan")], [float("inf"), None]]
    text = _verdict(empty)
    assert "NOT JUDGED" in text and "–" in text
