"""The shipped verification suite (fieldsection/data/verification.toml), run by `fieldsection verify`.

Every reference, its published source and its tolerances live in that one data file; this test runs the
same cases in fast mode, so the suite the user runs and the suite CI runs are one list. The sources are
named beside each check in the data file.
"""

import json
from dataclasses import replace
from pathlib import Path

import pytest

from fieldsection import verification
from fieldsection.cli import main
from fieldsection.errors import CaseFileError
from fieldsection.verification import load_cases, run_case

GEOMETRIES = Path(__file__).resolve().parent.parent / "geometries"
FAST_CASES = [c for c in load_cases() if c.runs_in(full=False)]


@pytest.mark.parametrize("reference", FAST_CASES, ids=[c.name for c in FAST_CASES])
def test_shipped_reference_case_passes_fast(reference):
    rows = run_case(reference, full=False)
    assert rows, f"{reference.name} has no checks"
    failed = [f"{r.quantity}: computed {r.computed}, reference {r.reference}, error {r.error} > {r.tolerance} {r.note}"
              for r in rows if not r.passed]
    assert not failed, "; ".join(failed)
    if reference.has_model:
        assert all(r.dofs and r.dofs > 100 for r in rows)


def test_every_check_names_a_source_and_a_tighter_or_equal_full_tolerance():
    for case in load_cases():
        for check in case.checks:
            assert len(check["source"]) > 20
            assert 0 < check["full_tolerance"] <= check["tolerance"]


def test_packaged_geometries_are_the_repository_ones():
    packaged = Path(verification._geometry_path("coaxial.geo")).parent
    names = {c.entry["geometry"] for c in load_cases() if c.has_model}
    for name in names:
        assert (packaged / name).read_text() == (GEOMETRIES / name).read_text(), name


def test_a_formula_that_misses_its_worked_value_is_refused(tmp_path):
    data = tmp_path / "bad.toml"
    data.write_text('[peek]\ntitle = "x"\n[[peek.check]]\nquantity = "peek_onset_field_1cm"\nreference = "2 * pi"\n'
                    'worked_value = 6.0\nsource = "a deliberately wrong worked value"\ntolerance = 1e-4\n'
                    'full_tolerance = 1e-4\n')
    (case,) = load_cases(data)
    with pytest.raises(CaseFileError, match="not its worked value 6"):
        run_case(case, full=False)


def test_cli_verify_writes_the_report_and_exits_0(tmp_path, capsys):
    assert main(["verify", "--case", "coax", "--case", "peek", "--case", "square_corner",
                 "--reports", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "5 of 5 checks passed" in out
    data = json.loads((tmp_path / "verification" / "verification.json").read_text())
    assert data["all_passed"] and data["mode"] == "fast"
    assert data["environment"]["packages"]["scikit-fem"] and data["environment"]["linear_solvers_used"]
    row = data["checks"][0]
    assert row["case"] == "coax" and row["degrees_of_freedom"] > 1000 and row["error"] < row["tolerance"]
    assert "Pozar" in row["source"]
    markdown = (tmp_path / "verification" / "verification.md").read_text()
    assert "| coax | capacitance |" in markdown
    # every table row has the ten cells of the header (a | inside a source is escaped)
    rows = [line for line in markdown.splitlines() if line.startswith("| ")]
    assert all(len(line.replace("\\|", "").split("|")) == 12 for line in rows)


def test_cli_verify_exits_1_when_a_check_fails(tmp_path, monkeypatch, capsys):
    (peek,) = [c for c in load_cases() if c.name == "peek"]
    wrong = replace(peek, checks=({**peek.checks[0], "reference": 40e5},))  # 39.03 kV/cm is right
    monkeypatch.setattr(verification, "load_cases", lambda path=None: (wrong,))
    assert main(["verify", "--reports", str(tmp_path)]) == 1
    assert "FAIL" in capsys.readouterr().out
    assert not json.loads((tmp_path / "verification" / "verification.json").read_text())["all_passed"]


def test_cli_verify_unknown_case_exits_2_without_a_report(tmp_path, capsys):
    assert main(["verify", "--case", "nonesuch", "--reports", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no such reference case" in err and "coax" in err
    assert not (tmp_path / "out").exists()


def test_cli_verify_bad_option_exits_2(capsys):
    with pytest.raises(SystemExit) as exit_info:
        main(["verify", "--fastest"])
    assert exit_info.value.code == 2
    assert "unrecognized arguments: --fastest" in capsys.readouterr().err


def test_a_reference_formula_with_an_unknown_name_is_refused():
    with pytest.raises(CaseFileError, match=r"cannot be evaluated \(NameError"):
        verification.reference_value("open(0)")
