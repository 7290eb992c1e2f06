"""Runs that must end cleanly whatever happens: every certificate status renders, no NaN or infinity
reaches results.json, the same case gives the same results, Ctrl-C and kill -9 leave no report or
working folder behind, and two runs of one case never mix their files.

Physical checks here are coarse guards (the closed forms are tested elsewhere): the coaxial line's
C = 2 pi eps0 eps_r / ln(b/a) (Gauss's law; D. M. Pozar, Microwave Engineering, 4th ed., Table 2.1;
from memory) and a parallel-plate field V/d between plates of full width with insulated sides
(uniform field, Gauss's law).
"""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from scipy.constants import epsilon_0

from conftest import GEOMETRIES
from fieldsection import Case, Material, MeshSettings, ScriptGeometry, analyse
from fieldsection.case import SINGLE_MESH, Refinement
from fieldsection.certificate import CONVERGED, NOT_CONVERGED, SINGLE_MESH as ONE_MESH, SINGULAR
from fieldsection.report import remove_stale_folders, write_report
from test_bad_input import PLATES_CASE, PLATES_GEO, write_case

CLI = [sys.executable, "-c", "import sys; from fieldsection.cli import main; sys.exit(main(sys.argv[1:]))"]
ROOT = Path(__file__).resolve().parent.parent


def strict_json(path: Path) -> dict:
    """results.json parsed so that NaN or Infinity (which json.dumps writes by default) fails the test."""
    def refuse(constant):
        raise AssertionError(f"{path.name} holds {constant}")
    return json.loads(path.read_text(encoding="utf-8"), parse_constant=refuse)


def _case(script: str, regions, electrodes, refinement, name: str, **mesh) -> Case:
    return Case(name, ScriptGeometry(GEOMETRIES / script, {}, 1e-3), regions=regions, electrodes=electrodes,
                mesh=MeshSettings(**mesh), refinement=refinement)


COAX = dict(script="coaxial.geo", electrodes={"inner": 1000.0, "outer": 0.0})
STATUS_CASES = {
    # status wanted: (case, with hotspots?)
    ONE_MESH: _case(regions={"insulation": Material("no-strength", 2.25, None)}, refinement=SINGLE_MESH,
                    name="one_mesh", **COAX),
    CONVERGED: _case(regions={"insulation": Material("film", 2.25, 1e6)}, name="converged",
                     refinement=Refinement(capacitance_tolerance=1e-5, field_tolerance=1e-2, max_dofs=20_000), **COAX),
    NOT_CONVERGED: _case(regions={"insulation": Material("film", 2.25, 1e6)}, name="not_converged",
                         refinement=Refinement(capacitance_tolerance=1e-9, field_tolerance=1e-9, max_passes=2), **COAX),
    SINGULAR: _case("square_in_tube.geo", {"insulation": Material("film", 2.25, 1e6)}, {"bar": 1000.0, "tube": 0.0},
                    Refinement(max_passes=4, max_dofs=40_000), "singular"),
}


@pytest.mark.parametrize("status", list(STATUS_CASES))
def test_report_renders_every_certificate_status(tmp_path, status):
    case = STATUS_CASES[status]
    result = analyse(case)
    assert result.certificates.regions["insulation"].status == status
    folder = write_report(result, tmp_path, with_figures=False)
    results = strict_json(folder / "results.json")
    peak = results["peak_fields"][0]
    assert peak["status"] == status
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert status in html and "not a certification" in html
    if case.regions["insulation"].dielectric_strength is None:
        assert results["hotspots"] == [] and peak["fraction_of_strength"] is None
    if status != SINGULAR:  # the coaxial line: a smooth field and its closed-form capacitance
        exact = 2 * math.pi * epsilon_0 * 2.25 / math.log(3.0)
        assert result.capacitance.two_level.from_energy == pytest.approx(exact, rel=2e-3)


def test_extreme_permittivity_contrast_gives_finite_results(tmp_path):
    # a 1e6 : 1 contrast (a near-conductor layer beside gas) is legal: finite numbers, a report that renders.
    # Two-layer coaxial line, series layers: C = 2 pi eps0 / (ln(r1/a)/eps1 + ln(b/r1)/eps2) (Gauss's law)
    (tmp_path / "contrast.toml").write_text(f"""\
[geometry]
script = "{(GEOMETRIES / 'coaxial_two_layer.geo').as_posix()}"
length_unit = "mm"
[regions]
inner_layer = "near-conductor"
outer_layer = "gas"
[materials.near-conductor]
relative_permittivity = 1e6
[materials.gas]
relative_permittivity = 1.0
kind = "gas"
[electrodes]
inner = "1 kV"
outer = "0 V"
[refinement]
adaptive = false
""")
    done = subprocess.run([*CLI, "run", str(tmp_path / "contrast.toml"), "--reports", str(tmp_path / "reports"),
                           "--quiet", "--no-figures"], capture_output=True, text=True, cwd=ROOT, timeout=600)
    assert done.returncode == 0, done.stderr
    results = strict_json(tmp_path / "reports" / "contrast" / "results.json")
    expected = 2 * math.pi * epsilon_0 / (math.log(2 / 1) / 1e6 + math.log(4 / 2) / 1.0)
    computed = results["capacitance"]["two_level"]["from_energy_pF_per_m"] * 1e-12
    assert computed == pytest.approx(expected, rel=1e-3)
    assert "<html" in (tmp_path / "reports" / "contrast" / "report.html").read_text(encoding="utf-8")


def _without_timings(path: Path) -> dict:
    data = strict_json(path)
    data.pop("timings")
    return data


def test_same_case_twice_gives_identical_results_apart_from_timings(tmp_path):
    case = write_case(tmp_path, PLATES_CASE.replace('outer = "insulated"', 'outer = "insulated"\n[mesh]\nsize = "0.3 mm"'))
    texts = []
    for run in ("first", "second"):
        done = subprocess.run([*CLI, "run", str(case), "--reports", str(tmp_path / run), "--quiet", "--no-figures"],
                              capture_output=True, text=True, cwd=ROOT, timeout=600)
        assert done.returncode == 0, done.stderr
        texts.append(_without_timings(tmp_path / run / "plates" / "results.json"))
    assert json.dumps(texts[0], sort_keys=True) == json.dumps(texts[1], sort_keys=True)
    assert texts[0]["capacitance"]["two_level"]["from_energy_pF_per_m"] > 0


LONG_SCRIPT = PLATES_GEO + "For i In {1:2000000000}\nEndFor\n"  # keeps gmsh busy until stopped


def _start(case: Path, reports: Path) -> subprocess.Popen:
    # Ctrl-C as a terminal delivers it: SIGINT in its default state (a shell's background job ignores it,
    # and the run would inherit that)
    return subprocess.Popen([*CLI, "run", str(case), "--reports", str(reports), "--quiet", "--no-figures"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))


def _children(pid: int) -> list[int]:
    try:
        return [int(p) for p in Path(f"/proc/{pid}/task/{pid}/children").read_text().split()]
    except OSError:
        return []


def _running(pid: int) -> bool:
    """The process exists and is not a zombie (a killed child waits for its reaper as a zombie)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state not in ("Z", "X")


def _wait_for_child(process: subprocess.Popen, seconds: float = 120) -> list[int]:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and process.poll() is None:
        children = _children(process.pid)
        if children:
            return children
        time.sleep(0.1)
    raise AssertionError("the run never started its meshing child")


@pytest.mark.skipif(sys.platform != "linux", reason="meshing runs in a forked child on Linux only")
def test_ctrl_c_prints_one_line_and_exits_130(tmp_path):
    case, reports = write_case(tmp_path, geo=LONG_SCRIPT), tmp_path / "reports"
    process = _start(case, reports)
    try:
        children = _wait_for_child(process)
        process.send_signal(signal.SIGINT)
        _, err = process.communicate(timeout=60)
    finally:
        process.kill()  # never leave a run behind when the test fails
    assert process.returncode == 130
    lines = [line for line in err.splitlines() if line.strip()]
    assert lines == ["fieldsection: interrupted; no report was written"]
    assert not reports.exists() or not any(reports.iterdir())
    time.sleep(0.5)
    assert not any(_running(c) for c in children), "the meshing child outlived the run"


@pytest.mark.skipif(sys.platform != "linux", reason="meshing runs in a forked child on Linux only")
def test_kill_9_leaves_nothing_and_stale_folders_are_cleaned(tmp_path):
    case, reports = write_case(tmp_path, geo=LONG_SCRIPT), tmp_path / "reports"
    process = _start(case, reports)
    children = _wait_for_child(process)
    process.kill()
    process.communicate(timeout=60)
    time.sleep(0.5)
    assert not any(_running(c) for c in children), "the meshing child outlived the killed run"
    assert not reports.exists() or not any(reports.iterdir())
    # a run killed while writing leaves its working folder: the next run into the folder removes it
    reports.mkdir(exist_ok=True)
    dead = subprocess.Popen(["true"])
    dead.wait()
    stale = reports / f".plates.partial-{dead.pid}-abc123"
    (stale / "inner").mkdir(parents=True)
    mine = reports / f".plates.partial-{os.getpid()}-live"  # a running process's folder is left alone
    mine.mkdir()
    assert remove_stale_folders(reports) == [stale]
    assert not stale.exists() and mine.exists()


def test_two_runs_of_one_case_never_mix_files(tmp_path):
    case, reports = write_case(tmp_path), tmp_path / "reports"
    runs = [_start(case, reports) for _ in range(2)]
    for run in runs:
        _, err = run.communicate(timeout=600)
        assert run.returncode == 0, err
    folder = reports / "plates"
    assert sorted(p.name for p in reports.iterdir()) == ["plates"]  # no working folder left
    results = strict_json(folder / "results.json")
    assert sorted(p.name for p in folder.iterdir()) == sorted(["fields.vtk", "report.html", "results.json"])
    assert results["case"]["name"] == "plates"
