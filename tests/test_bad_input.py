"""Bad input: a one-line error naming the culprit and the fix, exit code 2, and no report folder."""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import pytest

from fieldsection.cli import EXIT_BAD_INPUT, main

PLATES_GEO = """\
// two plates (top, bottom) with a dielectric gap; side walls are left to the outer boundary kind
DefineConstant[ width = 10, gap = 1 ];
Point(1) = {0, 0, 0, 0.5};
Point(2) = {width, 0, 0, 0.5};
Point(3) = {width, gap, 0, 0.5};
Point(4) = {0, gap, 0, 0.5};
Line(1) = {1, 2};
Line(2) = {2, 3};
Line(3) = {3, 4};
Line(4) = {4, 1};
Curve Loop(1) = {1, 2, 3, 4};
Plane Surface(1) = {1};
Physical Surface("gap") = {1};
Physical Curve("top") = {3};
Physical Curve("bottom") = {1};
Physical Curve("right") = {2};
"""

PLATES_CASE = """\
[geometry]
script = "plates.geo"
length_unit = "mm"

[regions]
gap = "PTFE"

[electrodes]
top = "1 kV"
bottom = "0 V"

[boundary]
outer = "insulated"
"""


def write_case(folder: Path, case: str = PLATES_CASE, geo: str = PLATES_GEO) -> Path:
    (folder / "plates.geo").write_text(geo)
    path = folder / "plates.toml"
    path.write_text(textwrap.dedent(case))
    return path


def run_expecting_error(tmp_path: Path, capsys, case_path: Path, *extra: str) -> str:
    reports = tmp_path / "reports"
    code = main(["run", str(case_path), "--reports", str(reports), "--quiet", "--no-figures", *extra])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("fieldsection: error: ")
    assert not reports.exists() or not any(reports.iterdir()), "a report folder was left behind"
    return lines[0]


def test_the_base_case_is_valid(tmp_path, capsys):
    # guards the error tests below: each changes one thing in a case that runs
    reports = tmp_path / "reports"
    assert main(["run", str(write_case(tmp_path)), "--reports", str(reports), "--quiet", "--no-figures"]) == 0
    assert (reports / "plates" / "results.json").is_file()


def test_missing_case_file(tmp_path, capsys):
    message = run_expecting_error(tmp_path, capsys, tmp_path / "nowhere.toml")
    assert "nowhere.toml" in message and "not found" in message


def test_missing_script(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace("plates.geo", "absent.geo"))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "absent.geo" in message and "not found" in message


def test_gmsh_syntax_error_names_the_line(tmp_path, capsys):
    case = write_case(tmp_path, geo=PLATES_GEO.replace("Line(2) = {2, 3};", "Line(2) = {2, 3}"))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "plates.geo" in message and "line 9" in message and "syntax error" in message


@pytest.mark.parametrize(
    "old, new, expected",
    [
        ('gap = "PTFE"', 'gap = "PTFE"\nslab = "PTFE"', r"regions\.slab: no physical surface 'slab'"),
        ('top = "1 kV"', 'top = "1 kV"\nlid = "2 kV"', r"electrodes\.lid: no physical curve or surface 'lid'"),
        ('gap = "PTFE"', 'gap = "PFTE"', r"unknown material 'PFTE'.*did you mean 'PTFE'"),
        # a name TOML cannot take bare is shown quoted, as the table header must be written (one line)
        ('gap = "PTFE"', 'gap = "my\\nfoil"', r"unknown material 'my\\nfoil': define it under "
                                                  r"\[materials\.\"my\\nfoil\"\] in the case file"),
        ('gap = "PTFE"', 'gap = "bad"\n[materials.bad]\nrelative_permittivity = -2.0',
         r"material 'bad': relative permittivity -2\.0 must be a positive number"),
        ('gap = "PTFE"', 'gap = "bad"\n[materials.bad]\nrelative_permittivity = 0.5', r"below 1"),
        ('top = "1 kV"', 'top = "1 kV"\ntop = "2 kV"', r"line 10.*\[top = \"2 kV\"\].*exactly one potential"),
        ('top = "1 kV"', 'top = "1 mm"', r"electrodes\.top: '1 mm' is not a voltage"),
        ('outer = "insulated"', 'outer = "earthed"', r"boundary\.outer = 'earthed'"),
        ('outer = "insulated"', 'outer = "insulated"\n[refinement]\ncapacitance_tolerance = 2.0',
         r"refinement\.capacitance_tolerance = 2\.0: a relative change between passes, in \(0, 1\)"),
        ('outer = "insulated"', 'outer = "insulated"\n[refinement]\nmax_dofs = "lots"',
         r"refinement\.max_dofs = 'lots': must be a whole number"),
        ('outer = "insulated"', 'outer = "insulated"\n[refinement]\nadaptive = "yes"',
         r"refinement\.adaptive = 'yes': must be true or false"),
        ('outer = "insulated"', 'outer = "insulated"\n[refinement]\nmax_passes = 0',
         r"refinement\.max_passes = 0: a whole number of at least 1"),
        ('outer = "insulated"', 'outer = "insulated"\n[refinement]\ntolerance = 0.01',
         r"unknown key 'tolerance'; allowed keys: adaptive, capacitance_tolerance"),
        ('outer = "insulated"', 'outer = "insulated"\n[mesh]\nelement_order = 4',
         r"mesh\.element_order = 4: use one of \(1, 2, 3\)"),
    ],
)
def test_case_file_errors(tmp_path, capsys, old, new, expected):
    case = write_case(tmp_path, PLATES_CASE.replace(old, new))
    message = run_expecting_error(tmp_path, capsys, case)
    assert re.search(expected, message), message


@pytest.mark.parametrize("fraction", ["0.0", "1.5", "-0.2"])
def test_hotspot_fraction_outside_0_1(tmp_path, capsys, fraction):
    case = write_case(tmp_path, PLATES_CASE + f"\n[hotspots]\nfraction = {fraction}\n")
    message = run_expecting_error(tmp_path, capsys, case)
    assert "hotspots.fraction" in message and "(0, 1]" in message


def test_region_without_material(tmp_path, capsys):
    geo = PLATES_GEO.replace('Physical Surface("gap") = {1};', 'Physical Surface("gap") = {1};\n')
    geo = geo.replace("Plane Surface(1) = {1};", "Plane Surface(1) = {1};\n"
                      "Point(5) = {0, 3, 0, 0.5}; Point(6) = {1, 3, 0, 0.5}; Point(7) = {1, 4, 0, 0.5};\n"
                      "Line(5) = {5, 6}; Line(6) = {6, 7}; Line(7) = {7, 5};\n"
                      "Curve Loop(2) = {5, 6, 7}; Plane Surface(2) = {2};\n"
                      'Physical Surface("spacer") = {2};')
    message = run_expecting_error(tmp_path, capsys, write_case(tmp_path, geo=geo))
    assert "region 'spacer' has no material" in message and "[regions]" in message


def test_unnamed_physical_group(tmp_path, capsys):
    geo = PLATES_GEO.replace('Physical Curve("right") = {2};', "Physical Curve(7) = {2};")
    message = run_expecting_error(tmp_path, capsys, write_case(tmp_path, geo=geo))
    assert "has no name" in message


def test_touching_electrodes(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('bottom = "0 V"', 'bottom = "0 V"\nright = "500 V"'))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "touch" in message and "'right'" in message


def test_undeclared_script_parameter(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('length_unit = "mm"', 'length_unit = "mm"\nparameters = { depth = 2 }'))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "'depth'" in message and "DefineConstant" in message


def test_shell_command_in_script_is_refused_without_trust(tmp_path, capsys):
    marker = tmp_path / "ran.txt"
    geo = PLATES_GEO + f'System "touch {marker}";\n'
    case = write_case(tmp_path, geo=geo)
    message = run_expecting_error(tmp_path, capsys, case)
    assert "'System' runs a shell command" in message and "--trust-script" in message and "line 17" in message
    assert not marker.exists()
    # a trusted script runs, command included
    assert main(["run", str(case), "--reports", str(tmp_path / "reports"), "--quiet", "--no-figures",
                 "--trust-script"]) == 0
    assert marker.exists()


def test_keyword_inside_a_comment_or_string_is_not_refused(tmp_path, capsys):
    geo = PLATES_GEO + '// System "rm -rf /" is only a comment here\nPrintf("System check");\n'
    reports = tmp_path / "reports"
    assert main(["run", str(write_case(tmp_path, geo=geo)), "--reports", str(reports), "--quiet", "--no-figures"]) == 0


def test_exit_in_script_is_always_refused(tmp_path, capsys):
    case = write_case(tmp_path, geo=PLATES_GEO + "Exit;\n")
    message = run_expecting_error(tmp_path, capsys, case, "--trust-script")
    assert "'Exit' would end the program" in message


def test_open_space_needs_a_circle(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('outer = "insulated"', 'outer = "open"'))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "boundary.outer = 'open' needs the free outer boundary to be a circle" in message


SPLIT_DISC_GEO = """\
SetFactory("OpenCASCADE");
Disk(1) = {0, 0, 0, 10};
Rectangle(2) = {0, -10, 0, 10, 20};
BooleanIntersection(5) = { Surface{2}; Delete; }{ Surface{1}; };
Disk(3) = {-3, 0, 0, 1};
Disk(4) = {3, 0, 0, 1};
BooleanFragments{ Surface{1}; Delete; }{ Surface{5}; Delete; }
BooleanDifference{ Surface{:}; Delete; }{ Surface{3, 4}; Delete; }
e = 1e-6;
Physical Surface("left") = Surface In BoundingBox{-10 - e, -10 - e, -e, e, 10 + e, e};
Physical Surface("right") = Surface In BoundingBox{-e, -10 - e, -e, 10 + e, 10 + e, e};
Physical Curve("wire_a") = Curve In BoundingBox{-4 - e, -1 - e, -e, -2 + e, 1 + e, e};
Physical Curve("wire_b") = Curve In BoundingBox{2 - e, -1 - e, -e, 4 + e, 1 + e, e};
"""


def test_open_space_circle_through_two_materials(tmp_path, capsys):
    case = write_case(tmp_path, """\
        [geometry]
        script = "plates.geo"
        length_unit = "mm"
        [regions]
        left = "air"
        right = "PTFE"
        [electrodes]
        wire_a = "1 kV"
        wire_b = "0 V"
        [boundary]
        outer = "open"
        """, geo=SPLIT_DISC_GEO)
    message = run_expecting_error(tmp_path, capsys, case)
    assert "open-space circle cuts through regions 'left', 'right'" in message


def test_forgotten_conductor_is_refused(tmp_path, capsys):
    # a hole whose rim is in no group: it would be silently grounded or act as a void
    geo = PLATES_GEO.replace("Curve Loop(1) = {1, 2, 3, 4};\nPlane Surface(1) = {1};",
                             "Curve Loop(1) = {1, 2, 3, 4};\n"
                             "Point(5) = {5, 0.5, 0, 0.1}; Point(6) = {5.2, 0.5, 0, 0.1}; Point(7) = {4.8, 0.5, 0, 0.1};\n"
                             "Circle(5) = {6, 5, 7}; Circle(6) = {7, 5, 6};\n"
                             "Curve Loop(2) = {5, 6};\nPlane Surface(1) = {1, 2};")
    message = run_expecting_error(tmp_path, capsys, write_case(tmp_path, geo=geo))
    assert re.search(r"the rim of a hole near \(5\.[12]\d*, 0\.[45]\d*\) mm is neither an electrode nor insulated", message)


def test_same_potential_everywhere_is_refused(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('top = "1 kV"', 'top = "0 V"'))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "every electrode is at 0 V" in message and "no field" in message


def test_insulation_touching_no_electrode_is_refused(tmp_path, capsys):
    # a second slab beside the plates, joined to nothing: its potential would be undefined
    geo = PLATES_GEO + ("Point(5) = {12, 0, 0, 0.5}; Point(6) = {14, 0, 0, 0.5}; Point(7) = {14, 1, 0, 0.5};\n"
                        "Line(5) = {5, 6}; Line(6) = {6, 7}; Line(7) = {7, 5};\n"
                        "Curve Loop(2) = {5, 6, 7}; Plane Surface(2) = {2};\n"
                        'Physical Surface("island") = {2};\n')
    case = write_case(tmp_path, PLATES_CASE.replace('gap = "PTFE"', 'gap = "PTFE"\nisland = "PTFE"'), geo=geo)
    message = run_expecting_error(tmp_path, capsys, case)
    assert "touches no electrode with a fixed potential" in message


@pytest.mark.parametrize("table, expected", [
    ('[mesh]\ncurved = "false"', r"mesh\.curved = 'false': must be true or false"),
    ("[mesh]\nelement_order = true", r"mesh\.element_order = True: must be a whole number"),
    ("[mesh]\nelement_order = 2.0", r"mesh\.element_order = 2\.0: must be a whole number"),
    ("[mesh]\nrefinements = -1", r"mesh\.refinements = -1: \"auto\" or a whole number from 0 to 6"),
    ("[mesh]\nrefinements = 9", r"mesh\.refinements = 9: \"auto\" or a whole number from 0 to 6"),
    ('[mesh]\nrefinements = "2"', r"mesh\.refinements = '2': must be \"auto\" or a whole number"),
    ('[solver]\nmethod = "cholesky"', r"solver\.method = 'cholesky': use one of 'auto', 'direct', 'iterative'"),
    ('[solver]\nmthod = "direct"', r"\[solver\]: unknown key 'mthod'; allowed keys: method"),
])
def test_loose_table_values(tmp_path, capsys, table, expected):
    case = write_case(tmp_path, PLATES_CASE + f"\n{table}\n")
    assert re.search(expected, run_expecting_error(tmp_path, capsys, case))


def test_length_unit_must_be_positive(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('length_unit = "mm"', 'length_unit = "0 mm"'))
    assert "geometry.length_unit = '0 mm'" in run_expecting_error(tmp_path, capsys, case)


@pytest.mark.parametrize("command, expected", [
    ('Include StrCat("pl", "ates2.geo");', "'Include' must name its file literally"),
    ('Merge "extra.geo";', "'System' runs a shell command"),
    ('Printf("x %g", 1) > "out.txt";', "'Printf(...) >' writes a file"),
    ('Save "copy.msh";', "'Save' writes files"),
    ('CreateDir "somewhere";', "'CreateDir' writes files"),
])
def test_script_commands_that_reach_outside_are_refused(tmp_path, capsys, command, expected):
    (tmp_path / "extra.geo").write_text('System "touch hacked";\n')
    case = write_case(tmp_path, geo=PLATES_GEO + command + "\n")
    assert expected in run_expecting_error(tmp_path, capsys, case)
    assert not (tmp_path / "hacked").exists() and not (tmp_path / "out.txt").exists()


def test_electrode_touching_the_grounded_boundary(tmp_path, capsys):
    case = write_case(tmp_path, PLATES_CASE.replace('outer = "insulated"', 'outer = "grounded"'))
    message = run_expecting_error(tmp_path, capsys, case)
    assert "electrode 'top' touches the grounded outer boundary" in message or \
           "electrode 'bottom' touches the grounded outer boundary" in message


def test_a_case_named_like_another_kind_of_report_does_not_replace_it(tmp_path, capsys):
    # `fieldsection verify` writes reports/verification/; a case named "verification" must not overwrite it
    reports = tmp_path / "reports"
    suite = reports / "verification"
    suite.mkdir(parents=True)
    (suite / "verification.json").write_text("{}")
    case = write_case(tmp_path).rename(tmp_path / "verification.toml")
    code = main(["run", str(case), "--reports", str(reports), "--quiet", "--no-figures"])
    err = capsys.readouterr().err
    assert code == EXIT_BAD_INPUT, err
    assert re.search(r"holds the verification report, which the report would replace; write into another folder",
                     err), err
    assert sorted(p.name for p in reports.iterdir()) == ["verification"]  # no working folder left behind
    assert sorted(p.name for p in suite.iterdir()) == ["verification.json"]
    # into a folder of its own, the same case runs
    assert main(["run", str(case), "--reports", str(tmp_path / "elsewhere"), "--quiet", "--no-figures"]) == 0
